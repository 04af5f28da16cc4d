"""The loading chain: each stage alone on a small frame, the whole chain's cost at two sizes,
and ``Panel.from_frames`` entering the same chain from in-memory frames.

The tables here are test scaffolding written by the tests themselves (grid layers, generated
rows); the expected values are worked by hand beside each check.
"""

from __future__ import annotations

import doctest
import sys

import numpy as np
import pandas as pd
import pytest

from conftest import grid_layer, long_rows
from mapdrift import _loader, cells, ids, panel, periods
from mapdrift.errors import InputError
from mapdrift.panel import InputSpec, Panel, load_panel


@pytest.mark.parametrize("module", [_loader, cells, ids, panel, periods])
def test_docstring_examples_run(module):
    result = doctest.testmod(module, optionflags=doctest.NORMALIZE_WHITESPACE)
    assert result.failed == 0


# -- stages alone --------------------------------------------------------------------------------
def _long(rows: dict, roles=("value",)) -> _loader.Long:
    return _loader.Long(pd.DataFrame(rows), tuple(roles), {})


def test_ids_stage_normalises_pads_and_codes_rows():
    layer = _loader.Layer(None, np.array(["06019", "06021"], dtype=object), ("a", "b"), "id", "l")
    long = _long(
        {"id": [" 6019 ", "6019.0", "06021", ""], "period_text": ["2019"] * 4, "value": ["1"] * 4}
    )
    findings: list = []
    out = _loader.ids_stage(long, layer, InputSpec(geometry="x.gpkg"), "t.csv", True, findings)
    # " 6019 " and "6019.0" are one ID after normalising; padded to the layer's 5 digits
    assert out.row_ids().tolist() == ["06019", "06019", "06021"]
    assert {f.code for f in findings} == {"ids-zero-padded", "ids-blank-rows"}


def test_periods_stage_parses_each_label_once(monkeypatch):
    seen = []
    real = _loader.read_periods

    def spy(texts, **kw):
        seen.append(list(texts))
        return real(texts, **kw)

    monkeypatch.setattr(_loader, "read_periods", spy)
    long = _long(
        {"uid": [0, 1, 0, 1], "period_text": ["2020", "2019", "2020", "2019.0"], "value": 1}
    )
    out = _loader.periods_stage(long, InputSpec(geometry="x.gpkg"), "t.csv", [])
    assert seen == [["2020", "2019", "2019.0"]]  # distinct labels, not rows
    assert out.periods == (2019, 2020) and out.frame["period"].tolist() == [1, 0, 1, 0]


def test_duplicates_stage_counts_exact_repeats_apart_from_conflicts():
    long = _loader.Long(
        pd.DataFrame(
            {
                "uid": [0, 0, 1, 1],
                "period": [0, 0, 0, 0],
                "period_text": "2020",
                "value": [1.0, 1.0, 2.0, 3.0],
            }
        ),
        ("value",),
        {},
        periods=(2020,),
        labels=("2020",),
        ids=np.array(["a", "b"], dtype=object),
    )
    table = _loader.Table(pd.DataFrame(), "t.csv", None, "id")
    with pytest.raises(
        InputError, match=r"1 \(unit, period\) pair with more than one row \(e\.g\. b/2020\)"
    ):
        _loader.duplicates_stage(long, InputSpec(geometry="x.gpkg"), table, [])
    findings: list = []
    out = _loader.duplicates_stage(
        long, InputSpec(geometry="x.gpkg", duplicates="mean"), table, findings
    )
    assert sorted(out.frame["value"].tolist()) == [1.0, 2.5]
    assert [f.code for f in findings] == ["values-duplicate-rows", "values-duplicates-combined"]
    assert "1 row repeated exactly" in findings[0].message


def test_exact_duplicate_rows_do_not_stop_the_load(layer_file, table_file):
    layer = layer_file(n_side=2)
    ids_ = [f"{i + 1:05d}" for i in range(4)]
    rows = long_rows(ids_, [2019, 2020])
    p = load_panel(
        InputSpec(
            geometry=layer,
            table=table_file(rows + rows[:3]),
            id="unit_id",
            period="year",
            value="rate",
        )
    )
    f = next(f for f in p.findings if f.code == "values-duplicate-rows")
    assert "3 rows repeated exactly" in f.message


# -- the whole chain: cost does not grow with the number of units ---------------------------------
def _files(tmp_path, n_units: int, n_periods: int = 5):
    """A layer of n_units squares (11-digit IDs) and a long CSV of counts with suppressed cells,
    blanks and IDs that lost their leading zero (our own generator, test scaffolding)."""
    import geopandas as gpd
    import shapely

    side = int(np.ceil(np.sqrt(n_units)))
    r, c = np.divmod(np.arange(n_units), side)
    uid = np.array([f"{7031000000 + i:011d}" for i in range(n_units)], dtype=object)
    gdf = gpd.GeoDataFrame(
        {"unit_id": uid},
        geometry=shapely.box(c * 100.0, r * 100.0, c * 100.0 + 100, r * 100.0 + 100),
        crs="EPSG:26916",
    )
    layer = tmp_path / f"l{n_units}.gpkg"
    gdf.to_file(layer)
    rng = np.random.default_rng(n_units)
    filings = rng.poisson(20, size=(n_units, n_periods)).astype(object)
    filings[rng.random(filings.shape) < 0.02] = "(D)"
    filings[rng.random(filings.shape) < 0.01] = ""
    table_ids = np.repeat(uid, n_periods)
    table_ids[::7] = [s.lstrip("0") for s in table_ids[::7]]
    table = tmp_path / f"t{n_units}.csv"
    pd.DataFrame(
        {
            "unit_id": table_ids,
            "year": np.tile(np.arange(2015, 2015 + n_periods), n_units),
            "filings": filings.ravel(),
            "parcels": rng.integers(500, 900, size=n_units * n_periods),
        }
    ).to_csv(table, index=False)
    return InputSpec(
        geometry=layer,
        table=table,
        id="unit_id",
        period="year",
        numerator="filings",
        denominator="parcels",
    )


def _python_steps(spec: InputSpec) -> int:
    """Python lines executed and calls made (``sys.settrace`` events) by one load."""
    load_panel(spec)  # imports and caches out of the count
    n = 0

    def trace(frame, event, arg):
        nonlocal n
        n += 1
        return trace

    def profile(frame, event, arg):
        nonlocal n
        if event == "c_call":
            n += 1

    sys.settrace(trace)
    sys.setprofile(profile)
    try:
        load_panel(spec)
    finally:
        sys.settrace(None)
        sys.setprofile(None)
    return n


def test_loading_20000_units_runs_no_more_python_than_2000(tmp_path):
    # A per-row or per-unit Python loop executes at least one traced line per row (20,000 x 5
    # rows here): the count at 20,000 units must stay within a small constant of the count at
    # 2,000, i.e. a bounded number of passes, each done by pandas/numpy/pyarrow in C.
    small = _python_steps(_files(tmp_path, 2_000))
    large_spec = _files(tmp_path, 20_000)
    large = _python_steps(large_spec)
    assert large <= small * 1.02 + 200, (small, large)
    p = load_panel(large_spec)
    assert p.n_units == 20_000 and p.n_periods == 5
    assert {"ids-zero-padded", "values-not-numeric"} <= {f.code for f in p.findings}


# -- Panel.from_frames ---------------------------------------------------------------------------
def test_from_frames_matches_the_file_loader(layer_file, table_file):
    gdf = grid_layer(2)
    ids_ = list(gdf["unit_id"])
    rows = long_rows(["1", *ids_[1:]], [2018, 2019, 2020])
    rows[4]["rate"] = "(D)"
    df = pd.DataFrame(rows)
    from_files = load_panel(
        InputSpec(
            geometry=layer_file(gdf=gdf),
            table=table_file(df),
            id="unit_id",
            period="year",
            value="rate",
        )
    )
    from_frames = Panel.from_frames(gdf, df, id="unit_id", period="year", value="rate")
    np.testing.assert_array_equal(from_files.values, from_frames.values)
    assert from_files.units == from_frames.units and from_files.names == from_frames.names
    assert [f.code for f in from_files.findings] == [f.code for f in from_frames.findings]
    assert "ids-zero-padded" in {f.code for f in from_frames.findings}
    assert from_frames.inputs == ()


def test_from_frames_validates_like_files():
    gdf = grid_layer(2)
    df = pd.DataFrame({"unit_id": ["00001"], "year": [2020], "rate": [1.0]})
    with pytest.raises(InputError, match=r"only 1 of 4 layer units match"):
        Panel.from_frames(gdf, df, id="unit_id", period="year", value="rate")
    with pytest.raises(InputError, match="no column 'rte'"):
        Panel.from_frames(gdf, df, id="unit_id", period="year", value="rte")
    wide = gdf.assign(v2019=[1.0, 2, 3, 4], v2020=[4.0, 3, 2, np.nan])
    p = Panel.from_frames(wide, id="unit_id")  # values in the layer's own columns
    assert p.periods == (2019, 2020) and np.isnan(p.values[3, 1])
