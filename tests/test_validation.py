"""One validation path: a value is checked the same whether it comes from a flag, the config
file or --set, and before any work (the output folder is never created)."""

from __future__ import annotations

import codecs

import pytest

from conftest import DEMO
from mapdrift.cli import app
from mapdrift.config import load_config

BAD = [
    ('animate.size="60000x60000"', "out of range; use 200x150 up to 7680x4320"),
    ("animate.size=[16000,16000]", "out of range"),
    ("clusters.seed=-1", "--seed must be a whole number from 0"),
    ('brief.formats=["gif","pdf"]', "'pdf' is not an output format"),
    ('brief.formats=["htm"]', "did you mean 'html'"),
    ("animate.fps=1000", "--fps 1000 is out of range"),
    ("animate.loop=-1", "loop -1"),
    ('animate.scale_units="furlong"', "km or mi"),
    ("clusters.min_periods=1", "min_periods must be 3 or more"),
]


@pytest.mark.parametrize("setting, message", BAD)
def test_set_is_checked_before_any_work(runner, tmp_path, setting, message):
    out = tmp_path / "run"
    res = runner.invoke(app, ["run", str(DEMO / "demo.toml"), "--out", str(out), "--set", setting])
    assert res.exit_code == 2, res.output
    assert message in res.output
    assert not out.exists() and list(tmp_path.iterdir()) == []


@pytest.mark.parametrize("setting, message", BAD)
def test_config_file_gets_the_same_check(runner, tmp_path, setting, message):
    key, value = setting.split("=", 1)
    section, name = key.split(".")
    text = (DEMO / "demo.toml").read_text()
    text = text.replace('geometry = "', f'geometry = "{DEMO}/').replace(
        'table = "', f'table = "{DEMO}/'
    )
    cfg = tmp_path / "bad.toml"
    if f"[{section}]" in text:
        text = text.replace(f"[{section}]", f"[{section}]\n{name} = {value}", 1)
    else:
        text += f"\n[{section}]\n{name} = {value}\n"
    cfg.write_text(text)
    res = runner.invoke(app, ["run", str(cfg), "--out", str(tmp_path / "run")])
    assert res.exit_code == 2, res.output
    assert message in res.output and str(cfg) in res.output
    assert not (tmp_path / "run").exists()


def test_size_flag_same_rule(runner, tmp_path, layer_file):
    res = runner.invoke(
        app,
        ["animate", str(layer_file()), "--id", "unit_id", "--size", "60000x60000",
         "--out", str(tmp_path / "a.gif")],
    )  # fmt: skip
    assert res.exit_code == 2 and "out of range" in res.output


def test_utf16_config_reads_like_utf8(tmp_path):
    text = (DEMO / "demo.toml").read_text(encoding="utf-8")
    want = load_config(DEMO / "demo.toml").sections
    for enc, bom in (("utf-16-le", codecs.BOM_UTF16_LE), ("utf-16-be", codecs.BOM_UTF16_BE)):
        folder = tmp_path / enc
        folder.mkdir()
        p = folder / "demo.toml"
        p.write_bytes(bom + text.encode(enc))
        got = load_config(p).sections
        assert {k: v for k, v in got.items() if k != "inputs"} == {
            k: v for k, v in want.items() if k != "inputs"
        }
        # paths are relative to the config file, so only their names compare
        assert {k: getattr(v, "name", v) for k, v in got["inputs"].items()} == {
            k: getattr(v, "name", v) for k, v in want["inputs"].items()
        }


def test_config_errors_are_one_line(runner, tmp_path):
    latin = tmp_path / "latin.toml"
    latin.write_bytes('[brief]\ntitle = "Dépôts"\n'.encode("latin-1"))
    for path, message in ((tmp_path, "is a folder"), (latin, "not UTF-8")):
        res = runner.invoke(app, ["run", str(path)])
        assert res.exit_code == 2 and message in res.output and "internal error" not in res.output


def test_out_dot_in_config_is_refused(runner, tmp_path):
    cfg = tmp_path / "dot.toml"
    cfg.write_text(f'out = "."\n[inputs]\ngeometry = "{DEMO}/county_units.gpkg"\nid = "unit_id"\n')
    (tmp_path / "notes.txt").write_text("mine")
    res = runner.invoke(app, ["run", str(cfg), "--force"])
    assert res.exit_code == 3 and "not replacing it" in res.output
    assert (tmp_path / "notes.txt").read_text() == "mine"
