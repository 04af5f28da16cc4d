"""Panel loading: IDs, values, periods, CRS and geometry findings on the files analysts have."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from conftest import grid_layer, long_rows
from mapdrift.errors import ConfigError, InputError
from mapdrift.panel import InputSpec, load_panel

YEARS = [2018, 2019, 2020]


def codes(panel):
    return {f.code for f in panel.findings}


def find(panel, code):
    return next(f for f in panel.findings if f.code == code)


def spec(layer, table=None, **kw):
    kw.setdefault("id", "unit_id")
    if table is not None:
        kw.setdefault("period", "year")
        kw.setdefault("value", "rate")
    return InputSpec(geometry=layer, table=table, **kw)


def test_long_table_aligned_to_layer_order(layer_file, table_file):
    layer = layer_file(n_side=3)
    ids = [f"{i + 1:05d}" for i in range(9)]
    rows = long_rows(ids[::-1], YEARS)  # table order differs from the layer's
    p = load_panel(spec(layer, table_file(rows)))
    assert p.units == tuple(ids) and p.periods == tuple(YEARS)
    # value(i, y) = i + (y - 2000) with i the position in the reversed list
    assert p.values[0, 0] == 8 + 18 and p.values[8, 2] == 0 + 20
    assert p.names[0] == "cell 0-0"
    assert not p.values.flags.writeable


def test_ids_zero_padded(layer_file, table_file):
    # A table ID 6019 matches the layer's 06019 (leading zero lost in a spreadsheet; common practice).
    layer = layer_file(gdf=grid_layer(2, ids=["06019", "06021", "06023", "06025"]))
    rows = long_rows(["6019", "6021", "06023", "6025.0"], YEARS)
    p = load_panel(spec(layer, table_file(rows)))
    assert "ids-zero-padded" in codes(p)
    assert np.isfinite(p.values).all()
    assert "06019" in find(p, "ids-zero-padded").units


def test_unmatched_ids_listed_and_kept(layer_file, table_file):
    layer = layer_file(n_side=3)
    ids = [f"{i + 1:05d}" for i in range(9)]
    rows = long_rows(ids[:8] + ["00099"], YEARS)
    p = load_panel(spec(layer, table_file(rows)))
    assert p.n_units == 9  # nothing dropped
    assert np.isnan(p.values[8]).all()
    assert find(p, "units-no-values").units == ("00009",)
    assert find(p, "ids-table-only").units == ("00099",)


def test_too_few_matches_is_an_error(layer_file, table_file):
    layer = layer_file(n_side=3)
    rows = long_rows(["A1", "A2", "A3", "00001"], YEARS)
    with pytest.raises(InputError, match=r"only 1 of 9 layer units match"):
        load_panel(spec(layer, table_file(rows)))


def test_duplicates(layer_file, table_file):
    layer = layer_file(gdf=grid_layer(2, ids=["1", "2", "2", "3"]))
    with pytest.raises(InputError, match="occur more than once"):
        load_panel(spec(layer, table_file(long_rows(["1", "2", "3"], YEARS))))
    layer = layer_file("ok.gpkg", n_side=2)
    ids = [f"{i + 1:05d}" for i in range(4)]
    rows = long_rows(ids, YEARS) + [{"unit_id": "00001", "year": 2018, "rate": 100.0}]
    t = table_file(rows)
    with pytest.raises(InputError, match="--duplicates first\\|mean\\|sum"):
        load_panel(spec(layer, t))
    p = load_panel(spec(layer, t, duplicates="mean"))
    assert p.values[0, 0] == pytest.approx((18.0 + 100.0) / 2)
    assert "values-duplicates-combined" in codes(p)


def test_suppression_markers_and_sentinels(layer_file, table_file):
    layer = layer_file(n_side=2)
    csv = 'unit_id,year,rate\n00001,2018,(D)\n00001,2019,*\n00002,2018,n/a\n00002,2019,-\n00003,2018,-999\n00003,2019,1\n00004,2018,\n00004,2019,"1,234.5"\n'
    p = load_panel(spec(layer, table_file(csv), missing=(-999,)))
    msg = find(p, "values-not-numeric").message
    for marker in ("'(D)' x1", "'*' x1", "'n/a' x1", "'-' x1", "'(blank)' x1"):
        assert marker in msg
    assert "values-missing-code" in codes(p)
    assert np.isnan(p.values[2, 0]) and p.values[3, 1] == 1234.5


def test_infinite_values_error_and_negative_warning(layer_file, table_file):
    layer = layer_file(n_side=2)
    ids = [f"{i + 1:05d}" for i in range(4)]
    rows = long_rows(ids, YEARS)
    rows[0]["rate"] = float("inf")
    with pytest.raises(InputError, match="infinite"):
        load_panel(spec(layer, table_file(rows)))
    rows[0]["rate"] = -3.0
    assert "values-negative" in codes(load_panel(spec(layer, table_file(rows, "v2.csv"))))


def test_zero_block_flagged(layer_file, table_file):
    layer = layer_file(n_side=5)
    ids = [f"{i + 1:05d}" for i in range(25)]
    years = list(range(2010, 2020))
    rng = np.random.default_rng(0)
    rows = [
        {"unit_id": u, "year": y, "rate": round(float(rng.uniform(8, 14)), 2)}
        for u in ids
        for y in years
    ]
    for r in rows:
        if r["year"] == 2015 and r["unit_id"] in ids[:6]:
            r["rate"] = 0
    p = load_panel(spec(layer, table_file(rows)))
    f = find(p, "values-zero-block")
    assert "2015" in f.message and set(f.units) == set(ids[:6])


def test_gaps_months_quarters_and_dates(layer_file, table_file):
    layer = layer_file(n_side=2)
    ids = [f"{i + 1:05d}" for i in range(4)]
    p = load_panel(spec(layer, table_file(long_rows(ids, [2015, 2016, 2019]))))
    assert "2017" in find(p, "periods-gap").message
    rows = [
        {"unit_id": u, "year": q, "rate": 1.0} for u in ids for q in ["2020Q2", "2020Q1", "2019Q4"]
    ]
    p = load_panel(spec(layer, table_file(rows, "q.csv")))
    assert p.period_labels == ("2019Q4", "2020Q1", "2020Q2")
    rows = [{"unit_id": u, "year": m, "rate": 1.0} for u in ids for m in ["2020-03", "2020-01"]]
    p = load_panel(spec(layer, table_file(rows, "m.csv")))
    assert p.period_labels == ("2020-01", "2020-03") and "periods-gap" in codes(p)
    rows = [
        {"unit_id": u, "year": d, "rate": 1.0} for u in ids for d in ["2021-01-01", "2020-01-01"]
    ]
    assert load_panel(spec(layer, table_file(rows, "d.csv"))).periods == (2020, 2021)
    rows = [{"unit_id": u, "year": d, "rate": 1.0} for u in ids for d in ["2021", "spring"]]
    with pytest.raises(InputError, match="periods must be years"):
        load_panel(spec(layer, table_file(rows, "bad.csv")))


def test_wide_table_and_auto_detect(layer_file, table_file):
    layer = layer_file(n_side=2)
    ids = [f"{i + 1:05d}" for i in range(4)]
    wide = pd.DataFrame(
        {"unit_id": ids, "rate_2019": [1, 2, 3, 4], "rate_2020": [5, 6, 7, 8], "note": list("abcd")}
    )
    t = table_file(wide.to_dict("records"))
    p = load_panel(InputSpec(geometry=layer, table=t, id="unit_id", columns="rate_*"))
    assert p.periods == (2019, 2020) and p.values[3, 1] == 8
    p2 = load_panel(InputSpec(geometry=layer, table=t, id="unit_id"))
    np.testing.assert_array_equal(p.values, p2.values)


def test_values_in_layer_columns(layer_file):
    gdf = grid_layer(2)
    gdf["v2019"], gdf["v2020"] = [1.0, 2, 3, 4], [4.0, 3, 2, np.nan]
    p = load_panel(InputSpec(geometry=layer_file(gdf=gdf), id="unit_id"))
    assert p.periods == (2019, 2020) and np.isnan(p.values[3, 1])


def test_rates_from_counts(layer_file, table_file):
    layer = layer_file(n_side=2)
    ids = [f"{i + 1:05d}" for i in range(4)]
    rows = [
        {"unit_id": u, "year": 2020, "n": n, "base": b}
        for u, n, b in zip(ids, [5, 1, 0, 2], [1000, 10, 0, 400])
    ]
    p = load_panel(
        InputSpec(
            geometry=layer,
            table=table_file(rows),
            id="unit_id",
            period="year",
            numerator="n",
            denominator="base",
            per=1000,
        )
    )
    assert p.values[0, 0] == pytest.approx(5.0) and p.values[3, 0] == pytest.approx(5.0)
    assert np.isnan(p.values[2, 0])
    assert "rates-zero-base" in codes(p) and find(p, "rates-small-base").units == ("00002",)
    # the hint names only what exists: --smooth on `clusters`, the config key / --set for `run`
    hint = find(p, "rates-small-base").message
    assert "mapdrift clusters --smooth eb" in hint and "--set clusters.smooth=eb" in hint
    assert "(--smooth" not in hint
    assert p.numerator is not None and p.denominator[0, 0] == 1000


@pytest.mark.filterwarnings("ignore:.crs. was not provided")
def test_crs_assumed_missing_and_swapped(layer_file, table_file):
    ids = [f"{i + 1:05d}" for i in range(4)]
    t = table_file(long_rows(ids, YEARS))
    lonlat = grid_layer(2, size=0.01, crs=None, x0=10.0, y0=50.0)
    p = load_panel(spec(layer_file("ll.shp", gdf=lonlat), t))
    assert "crs-assumed" in codes(p) and "crs-reprojected" in codes(p)
    assert p.geometry.crs.is_projected
    metres = grid_layer(2, crs=None, x0=500000.0, y0=4000000.0)
    with pytest.raises(InputError, match="no CRS.*pass --crs"):
        load_panel(spec(layer_file("m.shp", gdf=metres), t))
    assert (
        load_panel(
            spec(layer_file("m2.shp", gdf=metres), t, crs="EPSG:26915")
        ).geometry.crs.to_epsg()
        == 26915
    )
    swapped = grid_layer(2, size=0.5, crs="EPSG:4326", x0=50.0, y0=120.0)
    with pytest.raises(InputError, match="swapped"):
        load_panel(spec(layer_file("s.gpkg", gdf=swapped), t))
    wrong = grid_layer(2, crs="EPSG:4326", x0=500000.0, y0=4000000.0)
    with pytest.raises(InputError, match="look like metres"):
        load_panel(spec(layer_file("w.gpkg", gdf=wrong), t))


def test_invalid_geometry_repaired_and_empty_reported(layer_file, table_file):
    from shapely.geometry import Polygon

    gdf = grid_layer(2)
    bowtie = Polygon([(0, 0), (1000, 1000), (1000, 0), (0, 1000)])
    gdf.loc[0, "geometry"] = bowtie
    gdf.loc[3, "geometry"] = Polygon()
    ids = list(gdf["unit_id"])
    p = load_panel(spec(layer_file(gdf=gdf), table_file(long_rows(ids, YEARS))))
    assert find(p, "geometry-repaired").units == ("00001",)
    assert p.geometry.iloc[0].is_valid
    assert find(p, "geometry-empty").units == ("00004",)
    assert p.n_units == 4


def test_equal_area_reprojection_matches_geodesic_area(layer_file, table_file):
    # A 1 x 1 degree cell at the equator is 12,308.46 km^2 on WGS84 (closed form for the
    # ellipsoidal quadrangle; pyproj.Geod on densified edges agrees); EPSG:3857 would inflate it.
    import geopandas as gpd
    from pyproj import Geod
    from shapely.geometry import box

    gdf = gpd.GeoDataFrame(
        {"unit_id": ["a", "b"]}, geometry=[box(0, 0, 1, 1), box(1, 0, 2, 1)], crs="EPSG:4326"
    )
    p = load_panel(
        InputSpec(
            geometry=layer_file("eq.gpkg", gdf=gdf),
            table=table_file(
                [
                    {"unit_id": "a", "year": 2020, "rate": 1},
                    {"unit_id": "b", "year": 2020, "rate": 2},
                ]
            ),
            id="unit_id",
            period="year",
            value="rate",
        )
    )
    area_km2 = p.geometry.area.iloc[0] / 1e6
    assert area_km2 == pytest.approx(12308.46, rel=0.005)
    geod_area = (
        abs(Geod(ellps="WGS84").geometry_area_perimeter(gdf.geometry.iloc[0].segmentize(0.01))[0])
        / 1e6
    )
    assert geod_area == pytest.approx(12308.46, rel=1e-4)


def test_natural_earth_areas_match_geodesic():
    # Open dataset shipped in pyogrio's test fixtures (Natural Earth low-res countries).
    import pathlib

    import pyogrio

    path = (
        pathlib.Path(pyogrio.__file__).parent
        / "tests"
        / "fixtures"
        / "naturalearth_lowres"
        / "naturalearth_lowres.shp"
    )
    if not path.exists():
        pytest.skip("pyogrio test fixtures not installed")
    import geopandas as gpd
    from pyproj import Geod

    from mapdrift.geo import equal_area_crs

    world = gpd.read_file(path)
    # a continent-sized region: the equal-area projection centred on it must keep areas
    region = world[world["continent"] == "Africa"].reset_index(drop=True)
    projected = region.to_crs(equal_area_crs(region))
    geod = Geod(ellps="WGS84")
    for geom, proj_area in zip(region.geometry, projected.area):
        g_area = abs(geod.geometry_area_perimeter(geom.segmentize(0.1))[0])
        if g_area > 5e10:  # large countries: vertex rounding is negligible
            assert proj_area == pytest.approx(g_area, rel=0.005)


def test_column_errors_name_file_and_fix(layer_file, table_file):
    layer = layer_file(n_side=2)
    t = table_file(long_rows([f"{i + 1:05d}" for i in range(4)], YEARS))
    with pytest.raises(InputError, match=r"no column 'rte' \(--value\); did you mean 'rate'"):
        load_panel(spec(layer, t, value="rte"))
    with pytest.raises(ConfigError, match="needs --value"):
        load_panel(InputSpec(geometry=layer, table=t, id="unit_id", period="year"))
    with pytest.raises(InputError, match="not found"):
        load_panel(spec(layer.with_name("nope.gpkg"), t))


@pytest.mark.parametrize("suffix", [".geojson", ".fgb", ".parquet", ".shp"])
def test_layer_formats(tmp_path, table_file, suffix):
    # Open formats (GeoJSON, FlatGeobuf, GeoParquet, Shapefile) give the same panel.
    gdf = grid_layer(2, crs="EPSG:3857")
    path = tmp_path / f"units{suffix}"
    if suffix == ".parquet":
        gdf.to_parquet(path)
    else:
        gdf.to_file(path)
    ids = [f"{i + 1:05d}" for i in range(4)]
    p = load_panel(spec(path, table_file(long_rows(ids, YEARS))))
    # FlatGeobuf's spatial index may reorder features: the panel follows the layer's order
    assert sorted(p.units) == ids and p.values[p.units.index("00004"), 2] == 3 + 20


@pytest.mark.parametrize("suffix", [".tsv", ".parquet", ".xlsx"])
def test_table_formats(layer_file, tmp_path, suffix):
    layer = layer_file(n_side=2)
    ids = [f"{i + 1:05d}" for i in range(4)]
    df = pd.DataFrame(long_rows(ids, YEARS))
    path = tmp_path / f"values{suffix}"
    if suffix == ".tsv":
        df.to_csv(path, sep="\t", index=False)
    elif suffix == ".parquet":
        df.to_parquet(path)
    else:
        df.to_excel(path, index=False)
    p = load_panel(spec(layer, path))
    assert p.periods == tuple(YEARS) and p.values[0, 0] == 18.0


def test_all_text_value_column_stops(layer_file, table_file):
    layer = layer_file(n_side=2)
    rows = [
        {"unit_id": f"{i + 1:05d}", "year": y, "rate": v}
        for i in range(4)
        for y, v in zip(YEARS, ["high", "n/a", "low"])
    ]
    with pytest.raises(InputError, match=r"no usable number in column 'rate'.*--decimal"):
        load_panel(spec(layer, table_file(rows)))


def test_rows_without_id_or_period_are_counted(layer_file, table_file):
    layer = layer_file(n_side=2)
    csv = "unit_id,year,rate\n00001,2019,1\n,2019,2\n00002,,3\n00002,2019,4\n00003,2019,5\n00004,2019,6\n"
    p = load_panel(spec(layer, table_file(csv)))
    assert find(p, "ids-blank-rows").message.endswith("1 row with no unit ID left out")
    assert "1 row with no period" in find(p, "periods-blank-rows").message


def test_regex_pattern_never_becomes_the_title(layer_file, table_file):
    # --columns '(\d{4})' matches 2018, 2019, ...: the pattern itself is no name for a title
    # or legend; a plain word and a note naming --variable instead
    layer = layer_file(n_side=2)
    ids = [f"{i + 1:05d}" for i in range(4)]
    rows = [{"unit_id": u, "2018": 1.0 + i, "2019": 2.0 + i} for i, u in enumerate(ids)]
    table = table_file(rows)
    p = load_panel(InputSpec(geometry=layer, table=table, id="unit_id", columns=r"(\d{4})"))
    assert p.meta.variable == "value"
    assert "--variable" in find(p, "variable-unnamed").message
    # a name the user gave, or a plain pattern's words, stay as written
    p = load_panel(
        InputSpec(geometry=layer, table=table, id="unit_id", columns=r"(\d{4})", variable="Rate")
    )
    assert p.meta.variable == "Rate" and "variable-unnamed" not in codes(p)
    rows = [{"unit_id": u, "rate_2018": 1.0, "rate_2019": 2.0} for u in ids]
    p = load_panel(
        InputSpec(geometry=layer, table=table_file(rows, "w.csv"), id="unit_id", columns="rate_*")
    )
    assert p.meta.variable == "rate" and "variable-unnamed" not in codes(p)
    # a long table's value column keeps its name even with regex-like characters in it
    rows = [{"unit_id": u, "year": y, "cases+deaths": 1.0} for u in ids for y in (2018, 2019)]
    p = load_panel(
        InputSpec(
            geometry=layer,
            table=table_file(rows, "l.csv"),
            id="unit_id",
            period="year",
            value="cases+deaths",
        )
    )
    assert p.meta.variable == "cases+deaths" and "variable-unnamed" not in codes(p)
