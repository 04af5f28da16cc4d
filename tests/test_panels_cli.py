"""Real panels through the commands with flags or a TOML config only: the README's rerun
verbatim, appending a new year to a wide table, views on every command, the findings summary,
too few periods for trends, and the full lists of whats_new.json.

Reference data: libpysal's bundled us_income example (48 US states, per capita income
1929-2009, US Bureau of Economic Analysis) and the README's own worked example on the invented
demo county.
"""

from __future__ import annotations

import json
import re
import shlex
import shutil

import numpy as np
import pandas as pd
import pytest

from conftest import DEMO, ROOT
from mapdrift.cli import app
from mapdrift.panel import InputSpec, load_panel
from pysal_examples import us_income

YEARS = [str(y) for y in range(1929, 2010)]


def readme_commands(section: str = "## Worked example") -> list[str]:
    """The ``mapdrift ...`` command lines of a README section's code block, continuations
    joined, exactly as written."""
    text = (ROOT / "README.md").read_text(encoding="utf-8")
    body = text.split(section, 1)[1].split("\n## ", 1)[0]
    block = re.search(r"```bash\n(.*?)```", body, re.S).group(1)
    joined = re.sub(r"\\\n\s*", " ", block)
    return [line.strip() for line in joined.splitlines() if line.strip().startswith("mapdrift ")]


def test_readme_worked_example_runs_verbatim(runner, tmp_path, monkeypatch):
    """The three commands of the README's worked example, parsed out of README.md, run as
    written (paths relative to a copy of the repo's demo_data), including the annual rerun
    with --append and --previous."""
    commands = readme_commands()
    assert len(commands) == 3 and "--append demo_data/filings_2025.csv" in commands[2]
    shutil.copytree(DEMO, tmp_path / "demo_data")
    monkeypatch.chdir(tmp_path)
    for cmd in commands:
        res = runner.invoke(app, shlex.split(cmd)[1:])
        assert res.exit_code == 0, f"{cmd}\n{res.output}"
    prev, new = tmp_path / "outputs/2024", tmp_path / "outputs/2025"
    man = json.loads((new / "manifest.json").read_text())
    assert man["parameters"]["periods"][-2:] == ["2024", "2025"]
    assert (
        man["parameters"]["breaks"][0]["edges"]
        == json.loads((prev / "breaks.json").read_text())["edges"]
    )  # the 2024 breaks, reused
    # whats_new.json: the sentences and, for scripts, every item in full
    wn = json.loads((new / "whats_new.json").read_text())
    assert wn["previous"] == "outputs/2024"
    items = wn["items"]
    assert {k: sum(i["kind"] == k for i in items) for k in wn["counts"]} == wn["counts"]
    assert all({"kind", "unit", "name", "what", "from", "to"} <= set(i) for i in items)
    jumps = [i for i in items if i["kind"] == "jump"]
    n_said = int(re.match(r"(\d+) new jumps?", wn["news"][0]).group(1))
    assert len(jumps) == n_said and n_said > 0
    for j in jumps:  # from/to agree with this run's jumps.csv
        assert j["from"]["period"] == "2024" and j["to"]["period"] == "2025"
        assert abs(j["to"]["class"] - j["from"]["class"]) == abs(j["size"])
    events = [i for i in items if i["kind"] == "cluster"]
    cut = [s for s in wn["news"] if "in all)" in s]  # a sentence cut short ...
    if cut:  # ... while the items hold every unit
        n = int(re.search(r"\((\d+) in all\)", cut[0]).group(1))
        assert len(events) >= n


def test_set_inputs_append_takes_a_single_path(tmp_path):
    from mapdrift.config import load_config, parse_setting

    cfg = load_config(DEMO / "demo.toml")
    section, key, value = parse_setting("inputs.append=demo_data/filings_2025.csv")
    cfg = cfg.with_values(section, {key: value})
    spec = InputSpec(**cfg.section("inputs"))
    assert [p.name for p in spec.append] == ["filings_2025.csv"]


def test_wide_append_of_a_new_years_column(tmp_path):
    """A new release holding only the ID and the new year's column appends to a wide table."""
    d = us_income()
    full = pd.read_csv(d / "usjoin.csv")
    full.drop(columns=["2009"]).to_csv(tmp_path / "to_2008.csv", index=False)
    full[["STATE_FIPS", "2009"]].to_csv(tmp_path / "release_2009.csv", index=False)
    common = dict(geometry=d / "us48.shp", id="STATE_FIPS", crs="EPSG:4326")
    whole = load_panel(InputSpec(table=d / "usjoin.csv", **common))
    parts = load_panel(
        InputSpec(table=tmp_path / "to_2008.csv", append=(tmp_path / "release_2009.csv",), **common)
    )
    assert parts.period_labels == whole.period_labels == tuple(YEARS)
    np.testing.assert_array_equal(parts.values, whole.values)
    assert not [f for f in parts.findings if f.code.startswith(("duplicate", "values-missing"))]


def test_us_income_through_every_command_with_flags_only(runner, tmp_path):
    d = us_income()
    base = [
        str(d / "us48.shp"),
        str(d / "usjoin.csv"),
        "--id",
        "STATE_FIPS",
        "--name",
        "STATE_NAME",
    ]
    res = runner.invoke(app, ["check", *base])
    assert res.exit_code == 0, res.output
    # raw values: the summary names the common trend and says what to do
    res = runner.invoke(app, ["breaks", *base])
    assert res.exit_code == 0, res.output
    assert res.output.startswith("data: 48 units x 81 periods (1929 to 2009); 3 warnings, 1 note")
    assert "values-common-trend: the values share a strong common trend" in res.output
    assert "--view relative-median" in res.output
    res = runner.invoke(app, ["-q", "breaks", *base])
    assert res.exit_code == 0 and res.output == ""  # -q silences the summary
    res = runner.invoke(
        app,
        ["animate", *base, "--view", "relative-median", "--size", "320x180",
         "--out", str(tmp_path / "a.gif")],
    )  # fmt: skip
    assert res.exit_code == 0, res.output
    assert "view: values divided by each period's median" in res.output
    assert "values-common-trend" not in res.output
    res = runner.invoke(
        app, ["changes", *base, "--view", "index:1929", "--out", str(tmp_path / "ch")]
    )
    assert res.exit_code == 0, res.output
    assert res.output.startswith("data: 48 units x 81 periods")  # every data command
    first = (tmp_path / "ch/transitions.csv").read_text().splitlines()[0]
    assert first == "# view: values divided by each unit's 1929 value (1 = its 1929 level)"
    factor = tmp_path / "factor.csv"
    raw = pd.read_csv(d / "usjoin.csv")[YEARS].to_numpy(float)
    pd.DataFrame({"year": YEARS, "cpi": raw.mean(axis=0)}).to_csv(factor, index=False)
    res = runner.invoke(
        app,
        ["clusters", *base, "--view", f"deflate:{factor}", "--permutations", "99",
         "--out", str(tmp_path / "cl")],
    )  # fmt: skip
    assert res.exit_code == 0, res.output
    assert res.output.startswith("data: 48 units x 81 periods")
    assert "view: values deflated by cpi from factor.csv to 2009 terms" in res.output
    assert (tmp_path / "cl/trends.csv").read_text().startswith("# view: values deflated")


def test_us_income_run_from_a_toml_config_with_a_view(runner, tmp_path):
    d = us_income()
    raw = pd.read_csv(d / "usjoin.csv")[YEARS].to_numpy(float)
    pd.DataFrame({"year": YEARS, "cpi": raw.mean(axis=0)}).to_csv(tmp_path / "cpi.csv", index=False)
    (tmp_path / "income.toml").write_text(
        f"""
[inputs]
geometry = "{(d / "us48.shp").as_posix()}"
table = "{(d / "usjoin.csv").as_posix()}"
id = "STATE_FIPS"
name = "STATE_NAME"
crs = "EPSG:4326"
variable = "Per capita income"
unit_label = "dollars"
view = "deflate:cpi.csv"     # relative to this file

[clusters]
permutations = 99

[brief]
formats = ["png", "html"]
""",
        encoding="utf-8",
    )
    out = tmp_path / "run"
    res = runner.invoke(app, ["run", str(tmp_path / "income.toml"), "--out", str(out)])
    assert res.exit_code == 0, res.output
    label = "view: values deflated by cpi from cpi.csv to 2009 terms"
    assert (out / "units.csv").read_text().startswith(f"# {label}")
    assert (out / "jumps.csv").read_text().startswith(f"# {label}")
    man = json.loads((out / "manifest.json").read_text())
    assert man["parameters"]["view"].startswith(label)
    report = (out / "report.md").read_text()
    assert "**View**: values deflated by cpi" in report
    assert "Per capita income, in 2009 terms" in report  # the title names the view
    # deflating by the mean leaves the common trend out: no trend finding
    codes = {f["code"] for f in json.loads((out / "findings.json").read_text())}
    assert "view-deflated" in codes and "values-common-trend" not in codes
    # a --view flag overrides the config's
    out2 = tmp_path / "run2"
    res = runner.invoke(
        app, ["run", str(tmp_path / "income.toml"), "--out", str(out2), "--view", "raw",
              "--set", 'brief.formats=["html"]'],
    )  # fmt: skip
    assert res.exit_code == 0, res.output
    codes = {f["code"] for f in json.loads((out2 / "findings.json").read_text())}
    assert "values-common-trend" in codes and "view-deflated" not in codes


@pytest.mark.parametrize("n_periods", [3])
def test_too_few_periods_skip_trend_outputs(runner, tmp_path, n_periods):
    d = us_income()
    years = YEARS[-n_periods:]
    pd.read_csv(d / "usjoin.csv")[["STATE_FIPS", *years]].to_csv(tmp_path / "t.csv", index=False)
    (tmp_path / "few.toml").write_text(
        f"""
[inputs]
geometry = "{(d / "us48.shp").as_posix()}"
table = "t.csv"
id = "STATE_FIPS"
crs = "EPSG:4326"
[clusters]
permutations = 99
[brief]
formats = ["png", "html"]
""",
        encoding="utf-8",
    )
    out = tmp_path / "few"
    res = runner.invoke(app, ["run", str(tmp_path / "few.toml"), "--out", str(out)])
    assert res.exit_code == 0, res.output
    assert not (out / "trend_map.png").exists()
    assert not [p for p in (out / "slides").iterdir() if "trend" in p.name]
    report = (out / "report.md").read_text()
    assert "significant rising trend" not in report and "Trends per unit" not in report
    findings = json.loads((out / "findings.json").read_text())
    skipped = [f for f in findings if f["code"] == "trends-skipped"]
    assert len(skipped) == 1 and skipped[0]["message"].startswith(f"{n_periods} periods")
    # the persistence flags use the periods there are
    res = runner.invoke(
        app,
        ["clusters", str(d / "us48.shp"), str(tmp_path / "t.csv"), "--id", "STATE_FIPS",
         "--crs", "EPSG:4326", "--permutations", "99", "--out", str(tmp_path / "cl")],
    )  # fmt: skip
    assert res.exit_code == 0, res.output
    assert "too few for a trend per unit" in res.output
    assert not (tmp_path / "cl/trend_map.png").exists()
