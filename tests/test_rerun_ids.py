"""IDs that look like formulas (``= + - @``) are written defused (``'=...``) and read back as
they were, so a rerun with ``--previous`` matches every unit.

The data are the shipped demo county with its IDs rewritten by this test (our own strings).
"""

from __future__ import annotations

import shutil

import pandas as pd
import pytest

from conftest import DEMO
from mapdrift.config import load_config
from mapdrift.outputs import defuse, read_csv, undefuse, write_csv
from mapdrift.pipeline import run

# OWASP "CSV injection" lists = + - @ tab and CR as the dangerous first characters
TRICKY = ["=1+1", "+X1", "-07001", "@SUM(A1)", "\tx", "\rx", "'=x", "''-y", "'plain", "07001"]


def test_defuse_round_trip(tmp_path):
    for v in TRICKY:
        assert undefuse(defuse(v)) == v
    df = pd.DataFrame({"unit": TRICKY, "=head": TRICKY, "n": range(len(TRICKY))})
    write_csv(df, tmp_path / "t.csv")
    raw = (tmp_path / "t.csv").read_text()
    assert "'=1+1" in raw and "\n=1+1" not in raw and '"=1+1' not in raw  # defused on disk
    back = read_csv(tmp_path / "t.csv")
    assert list(back.columns) == ["unit", "=head", "n"]
    assert back["unit"].tolist() == TRICKY and back["=head"].tolist() == TRICKY


@pytest.mark.parametrize("prefixes", ["=+-@"])
def test_rerun_with_formula_ids_finds_nothing_new(tmp_path, prefixes):
    import geopandas as gpd

    data = tmp_path / "data"
    shutil.copytree(DEMO, data)

    def tricky(ids):
        return [prefixes[i % len(prefixes)] + "X" + v for i, v in enumerate(ids)]

    g = gpd.read_file(data / "county_units.gpkg", layer="units")
    order = {u: t for u, t in zip(g["unit_id"], tricky(g["unit_id"]))}
    g["unit_id"] = g["unit_id"].map(order)
    (data / "county_units.gpkg").unlink()
    g.to_file(data / "county_units.gpkg", layer="units", driver="GPKG")
    t = pd.read_csv(data / "filings.csv", dtype={"unit_id": str})
    t["unit_id"] = t["unit_id"].map(order)
    t.to_csv(data / "filings.csv", index=False)
    cfg = load_config(data / "demo.toml").with_values("brief", {"formats": []})
    cfg = cfg.with_values("clusters", {"permutations": 99})
    first = run(cfg, out=tmp_path / "a")
    jumps = pd.read_csv(first.out / "jumps.csv", dtype=str)
    assert jumps["unit"].str.startswith("'").all()  # written defused
    again = run(cfg.with_values("run", {"previous": str(first.out)}), out=tmp_path / "b")
    # the same data again: nothing is new
    assert again.summaries["whats-new"] == "0 new jumps, 0 new cluster events, 0 new trends"
