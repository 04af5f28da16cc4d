"""Names that would break things: control characters in unit names, Markdown in every text.

The layer is the shipped demo county with its names rewritten by this test (our own hostile
strings); the checks read back what the run wrote.
"""

from __future__ import annotations

import shutil

import pytest

from conftest import DEMO
from mapdrift.config import load_config
from mapdrift.pipeline import run
from mapdrift.safetext import clean

HOSTILE = "\n# Injected heading\n\t*bold* [link](x) |pipe| \x1b[31m\u202eevil"


def test_clean():
    assert clean("Oak\nHill\t(west)") == "Oak Hill (west)"
    assert clean("a\r\n\r\nb\x00c\x85d\u2028e\u202ef") == "a b c d e f"
    assert clean("plain") == "plain"


@pytest.fixture(scope="module")
def hostile_run(tmp_path_factory):
    import geopandas as gpd

    tmp = tmp_path_factory.mktemp("hostile")
    data = tmp / "data"
    shutil.copytree(DEMO, data)
    g = gpd.read_file(data / "county_units.gpkg", layer="units")
    g["name"] = g["name"] + HOSTILE
    (data / "county_units.gpkg").unlink()
    g.to_file(data / "county_units.gpkg", layer="units", driver="GPKG")
    cfg = load_config(data / "demo.toml").with_values(
        "brief",
        {"formats": ["png", "pptx", "html", "gpkg"], "title": "Filings\n# Not a heading\t!"},
    )
    cfg = cfg.with_values("clusters", {"permutations": 99})
    return run(cfg, out=tmp / "out")


def test_briefing_survives_and_says_so(hostile_run):
    out = hostile_run.out
    assert (out / "brief.pptx").is_file() and list((out / "slides").glob("*.png"))
    codes = {f.code for f in hostile_run.findings}
    assert "names-control-characters" in codes


def test_no_control_characters_in_any_text_written(hostile_run):
    out = hostile_run.out
    for p in [*out.glob("*.csv"), *out.glob("*.md"), *out.glob("*.json"), out / "report.html"]:
        text = p.read_text(encoding="utf-8")
        assert "\t" not in text and "\x1b" not in text and "\u202e" not in text, p.name
    import geopandas as gpd

    names = gpd.read_file(out / "units.gpkg")["name"]
    assert not names.str.contains("[\n\t\x1b\u202e]").any()


def test_markdown_has_no_injected_structure(hostile_run):
    md = (hostile_run.out / "report.md").read_text(encoding="utf-8")
    lines = md.splitlines()
    assert not [ln for ln in lines if "Injected" in ln and ln.lstrip().startswith("#")]
    assert [ln for ln in lines if ln.startswith("# ")] == [lines[0]]  # one title only
    assert "\\# Not a heading" in lines[0] and "Injected heading" in md
    assert "[link](x)" not in md and "\\[link\\](x)" in md


def test_ids_with_line_breaks_do_not_break_the_briefing(tmp_path):
    import geopandas as gpd
    import pandas as pd

    data = tmp_path / "data"
    shutil.copytree(DEMO, data)

    def hostile(ids):
        return [v[:3] + "\n# " + v[3:] for v in ids]

    g = gpd.read_file(data / "county_units.gpkg", layer="units")
    g["unit_id"] = hostile(g["unit_id"])
    (data / "county_units.gpkg").unlink()
    g.to_file(data / "county_units.gpkg", layer="units", driver="GPKG")
    t = pd.read_csv(data / "filings.csv", dtype={"unit_id": str})
    t["unit_id"] = hostile(t["unit_id"])
    t.to_csv(data / "filings.csv", index=False)
    cfg = load_config(data / "demo.toml").with_values("brief", {"formats": ["png", "html"]})
    res = run(cfg.with_values("clusters", {"permutations": 99}), out=tmp_path / "out")
    assert "ids-control-characters" in {f.code for f in res.findings}
    md = (res.out / "report.md").read_text(encoding="utf-8")
    assert not [ln for ln in md.splitlines() if ln.startswith("# ") and "070" in ln]
    assert "070 \\# 01" in md or "070 \\# " in md
