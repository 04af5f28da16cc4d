"""The command line: exit codes and one-line messages on bad input, JSON output, import cost."""

from __future__ import annotations

import json
import subprocess
import sys

import pytest

from conftest import DEMO, long_rows
from mapdrift.cli import app

YEARS = [2018, 2019, 2020]


def test_help_lists_commands(runner):
    r = runner.invoke(app, ["--help"])
    assert r.exit_code == 0
    for cmd in ("check", "breaks", "demo"):
        assert cmd in r.output


def test_cli_import_is_light():
    # `mapdrift --help` must not import the heavy libraries (typer's own import-cost test does
    # the same for rich).
    code = "import sys, mapdrift.cli; print([m for m in ('matplotlib', 'geopandas', 'esda', 'libpysal', 'pandas') if m in sys.modules])"
    out = subprocess.run(
        [sys.executable, "-c", code], capture_output=True, text=True, check=True
    ).stdout
    assert out.strip() == "[]"


def test_config_and_drawing_do_not_import_scipy_statistics():
    # Reading a config validates every section (clusters, changes included) and animating draws
    # frames; neither needs scipy's sparse, special or stats modules, which cost about 0.3, 0.3
    # and 0.8 s to import (measured with `python -X importtime`; issue 11's start-up budget).
    code = (
        "import sys\n"
        "from mapdrift.config import load_config\n"
        f"load_config(__import__('pathlib').Path({str(DEMO / 'demo.toml')!r}))\n"
        "import mapdrift.render.frames, mapdrift.render.animation, mapdrift.changes\n"
        "print([m for m in ('scipy.sparse', 'scipy.special', 'scipy.stats') if m in sys.modules])"
    )
    out = subprocess.run(
        [sys.executable, "-c", code], capture_output=True, text=True, check=True
    ).stdout
    assert out.strip().splitlines()[-1] == "[]"


def test_scheme_choices_mirror_library():
    from mapdrift.breaks import Scheme
    from mapdrift.cli._options import SchemeChoice

    assert [s.value for s in SchemeChoice] == [s.value for s in Scheme]


def test_check_demo_ok_and_json(runner):
    r = runner.invoke(app, ["check", "--config", str(DEMO / "demo.toml")])
    assert r.exit_code == 0, r.output
    assert "ids-zero-padded" in r.output and "values-zero-block" in r.output
    r = runner.invoke(app, ["check", "--config", str(DEMO / "demo.toml"), "--json"])
    data = json.loads(r.output)
    assert data["units"] == 150 and len(data["periods"]) == 13
    assert {f["code"] for f in data["findings"]} >= {"ids-zero-padded", "units-no-values"}


def _saved_breaks(runner, tmp_path, name, *args):
    out = tmp_path / f"{name}.json"
    r = runner.invoke(app, ["breaks", *args, "--save", str(out)])
    assert r.exit_code == 0, r.output
    return json.loads(out.read_text())


def test_flags_override_config(runner, tmp_path):
    # demo.toml says per = 1000, quantile, k = 5; each flag given beside it must win.
    cfg = str(DEMO / "demo.toml")
    base = _saved_breaks(runner, tmp_path, "base", "--config", cfg)
    assert base["k"] == 5 and base["scheme"] == "quantile"
    per100 = _saved_breaks(runner, tmp_path, "per100", "--config", cfg, "--per", "100")
    # rates per 100 are the per-1,000 rates divided by 10, so are their quantiles
    assert per100["edges"] == pytest.approx([e / 10 for e in base["edges"]], rel=1e-12)
    k3 = _saved_breaks(runner, tmp_path, "k3", "--config", cfg, "-k", "3", "-s", "equal-interval")
    assert k3["k"] == 3 and k3["scheme"] == "equal-interval"
    # a flag equal to the built-in default still beats a config that says otherwise
    other = tmp_path / "per100.toml"
    other.write_text(
        (DEMO / "demo.toml").read_text().replace("per = 1000", "per = 100")
        .replace('"county_units.gpkg"', f'"{(DEMO / "county_units.gpkg").as_posix()}"')
        .replace('"filings.csv"', f'"{(DEMO / "filings.csv").as_posix()}"')
    )  # fmt: skip
    assert (
        _saved_breaks(runner, tmp_path, "cfg100", "--config", str(other))["edges"]
        == (per100["edges"])
    )
    back = _saved_breaks(runner, tmp_path, "flag1000", "--config", str(other), "--per", "1000")
    assert back["edges"] == base["edges"]


def test_bad_inputs_exit_1_with_one_line(runner, layer_file, table_file):
    layer = layer_file(n_side=2)
    t = table_file(long_rows(["A", "B", "C", "D"], YEARS))
    r = runner.invoke(
        app, ["check", str(layer), str(t), "--id", "unit_id", "--period", "year", "--value", "rate"]
    )
    assert r.exit_code == 1
    assert "only 0 of 4 layer units match" in r.output
    assert "Traceback" not in r.output
    r = runner.invoke(app, ["check", str(layer.with_name("missing.gpkg"))])
    assert r.exit_code == 1 and "geometry file not found" in r.output
    t2 = table_file(long_rows([f"{i + 1:05d}" for i in range(4)], YEARS), "ok.csv")
    r = runner.invoke(
        app, ["check", str(layer), str(t2), "--id", "unit_id", "--period", "yr", "--value", "rate"]
    )
    assert r.exit_code == 1 and "no column 'yr' (--period)" in r.output


def test_usage_errors_exit_2(runner, layer_file):
    r = runner.invoke(app, ["check"])
    assert r.exit_code == 2 and "no polygon layer given" in r.output
    r = runner.invoke(app, ["breaks", "--config", str(DEMO / "demo.toml"), "-k", "12"])
    assert r.exit_code == 2 and "choose k from 2 to 9" in r.output
    r = runner.invoke(app, ["breaks", "--config", str(DEMO / "demo.toml"), "--scheme", "jenks"])
    assert r.exit_code == 2


def test_debug_shows_traceback(runner, layer_file):
    r = runner.invoke(app, ["--debug", "check", str(layer_file(n_side=2).with_name("nope.gpkg"))])
    assert r.exit_code != 0 and r.exception is not None


def test_breaks_save_and_force(runner, tmp_path):
    out = tmp_path / "breaks.json"
    args = ["breaks", "--config", str(DEMO / "demo.toml"), "--save", str(out)]
    r = runner.invoke(app, args)
    assert r.exit_code == 0, r.output
    assert json.loads(out.read_text())["format"] == "mapdrift-breaks/1"
    r = runner.invoke(app, args)
    assert r.exit_code == 3 and "--force" in r.output
    assert runner.invoke(app, [*args, "--force"]).exit_code == 0
    r = runner.invoke(app, ["breaks", "--config", str(DEMO / "demo.toml"), "--basis", "per-period"])
    assert r.exit_code == 0 and "frames are not comparable" in r.output


def test_main_returns_exit_codes(capsys):
    from mapdrift.cli import main

    assert main(["check", "/nonexistent.gpkg"]) == 1
    assert "geometry file not found" in capsys.readouterr().err
    assert main(["--version"]) == 0


def test_run_usage_and_output_exists(runner, tmp_path):
    r = runner.invoke(app, ["run", str(tmp_path / "nope.toml")])
    assert r.exit_code == 2 and "config file not found" in r.output
    bad = tmp_path / "bad.toml"
    bad.write_text('[inputs]\ngeometry = "x.gpkg"\n[clusters]\npermutatons = 99\n')
    r = runner.invoke(app, ["run", str(bad)])
    assert (
        r.exit_code == 2
        and "bad.toml:4: key 'permutatons' in [clusters] is not a known key" in r.output
    )
    out = tmp_path / "out"
    out.mkdir()
    (out / "report.html").write_text("last year's")
    r = runner.invoke(app, ["run", str(DEMO / "demo.toml"), "--out", str(out)])
    assert r.exit_code == 3 and "--force" in r.output
    assert (out / "report.html").read_text() == "last year's"


def test_closed_stdout_pipe_ends_quietly():
    # `mapdrift check ... | head -1`: a reader that goes away ends the command without a
    # traceback or "internal error", exit 141 as for SIGPIPE (common practice, no source).
    args = ["check", "--config", str(DEMO / "demo.toml"), "--min-base", "4000"]
    code = "import sys; from mapdrift.cli import console; console()"
    proc = subprocess.Popen(
        [sys.executable, "-c", code, *args],
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
    )
    proc.stdout.close()  # the reader is gone before the first line is written
    err = proc.stderr.read().decode()
    proc.wait(timeout=120)
    assert proc.returncode in (0, 141), err
    assert "internal error" not in err and "Traceback" not in err and "Broken" not in err


def test_global_flags_after_the_command(runner, layer_file):
    # the error hints say "run with --debug": it must work after the command name too
    missing = str(layer_file(n_side=2).with_name("nope.gpkg"))
    r = runner.invoke(app, ["check", missing, "--debug"])
    assert r.exit_code != 0 and r.exception is not None and "No such option" not in r.output
    r = runner.invoke(app, ["check", missing, "-q"])
    assert r.exit_code == 1 and "No such option" not in r.output
    for cmd in ("check", "breaks", "animate", "changes", "clusters", "run", "demo", "explore"):
        out = runner.invoke(app, [cmd, "--help"]).output
        assert "--debug" in out and "--quiet" in out and "--verbose" in out, cmd


def test_values_without_manual_scheme_is_a_usage_error(runner):
    # --values are manual bounds: fitting quantiles instead would ignore them silently
    args = ["breaks", "--config", str(DEMO / "demo.toml"), "--values", "1,2,3"]
    r = runner.invoke(app, args)
    assert r.exit_code == 2 and "--scheme manual" in r.output and "1,2,3" in r.output
    assert len(r.output.strip().splitlines()) == 1
    r = runner.invoke(app, [*args, "--scheme", "manual"])
    assert r.exit_code == 0, r.output
    assert "manual" in r.output


def test_help_texts_are_consistent(runner):
    # every default written as [default: ...], placeholders readable, the seed's real value;
    # exit codes of Ctrl-C (130) and a closed pipe (141) listed
    from mapdrift.clusters.core import DEFAULT_SEED

    top = runner.invoke(app, ["--help"]).output
    assert "130" in top and "141" in top
    for cmd in ("check", "breaks", "animate", "changes", "clusters", "run", "demo", "explore"):
        out = runner.invoke(app, [cmd, "--help"]).output
        assert "(default:" not in out and "<list" not in out and "default: fixed" not in out, cmd
    assert f"[default: {DEFAULT_SEED}]" in runner.invoke(app, ["clusters", "--help"]).output
    assert "--append <path>" in runner.invoke(app, ["check", "--help"]).output
