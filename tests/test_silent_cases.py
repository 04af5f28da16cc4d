"""Smaller cases that used to pass silently: a single period, values near 1e300, identical and
zero-area polygons, a Shapefile without its .dbf, polygons across the 180th meridian.

Layers and tables are our own tiny generated files (conftest's grid); the Moran's I reference
is esda (a general-purpose library), the projection check uses pyproj's geodesic distances.
"""

from __future__ import annotations

import numpy as np
import pytest
from shapely.geometry import Polygon, box

from conftest import DEMO, grid_layer, long_rows
from mapdrift.errors import InputError
from mapdrift.panel import InputSpec, load_panel


def _with_values(g):
    g = g.copy()
    g["rate_2019"] = np.arange(len(g), dtype=float)
    g["rate_2020"] = np.arange(len(g), dtype=float)[::-1]
    return g


def _spec(geometry, table=None, **kw):
    base = {"id": "unit_id"}
    if table is not None:
        base.update(period="year", value="rate")
    return InputSpec(geometry=geometry, table=table, **(base | kw))


def test_single_period_stops_the_run_with_the_reason(tmp_path):
    import pandas as pd

    from mapdrift.config import load_config
    from mapdrift.pipeline import STEPS, run

    t = pd.read_csv(DEMO / "filings.csv", dtype={"unit_id": str})
    t[t["year"] == 2024].to_csv(tmp_path / "one.csv", index=False)
    cfg = load_config(DEMO / "demo.toml").with_values(
        "inputs", {"table": str(tmp_path / "one.csv")}
    )
    with pytest.raises(InputError, match=r"only one period \(2024\).*two or more"):
        run(cfg, out=tmp_path / "out", steps=STEPS[:3])
    assert not (tmp_path / "out").exists()


def test_huge_values_give_the_same_moran_as_esda(layer_file, table_file):
    import esda
    import libpysal

    from mapdrift.clusters import ClusterOptions, analyse_clusters

    g = grid_layer(5)
    ids = list(g["unit_id"])
    rng = np.random.default_rng(7)
    base = {(u, y): float(v) for u in ids for y, v in zip(range(2019, 2023), rng.random(4))}
    rows = long_rows(ids, range(2019, 2023), value=lambda i, y: base[(ids[i], y)] * 1e300)
    panel = load_panel(_spec(layer_file(gdf=g), table_file(rows)))
    res = analyse_clusters(panel, options=ClusterOptions(permutations=0))
    assert "values-rescaled" in {f.code for f in res.findings}
    w = libpysal.weights.Queen.from_dataframe(g, use_index=False)
    for j, y in enumerate(range(2019, 2023)):
        x = np.array([base[(u, y)] for u in ids])
        expected = esda.Moran(x, w, transformation="r", permutations=0).I  # esda reference
        assert np.isclose(res.global_moran["moran_i"].iloc[j], expected)


def test_zero_area_and_identical_polygons_are_reported(layer_file):
    g = grid_layer(3)
    g.loc[4, "geometry"] = g.loc[3, "geometry"]  # unit 00005 copies 00004
    # 00007 is 00006 drawn the other way round from another vertex: the same polygon
    ring = list(g.loc[5, "geometry"].exterior.coords)[:-1]
    g.loc[6, "geometry"] = Polygon((ring[2:] + ring[:2])[::-1])
    g.loc[8, "geometry"] = Polygon([(0, 0), (1000, 0), (1000, 0), (0, 0)])  # a flat sliver
    panel = load_panel(_spec(layer_file(gdf=_with_values(g))))
    found = {f.code: f for f in panel.findings}
    assert set(found["geometry-duplicate"].units) == {"00004", "00005", "00006", "00007"}
    assert "00004 = 00005" in found["geometry-duplicate"].message
    assert "00006 = 00007" in found["geometry-duplicate"].message
    flat = found.get("geometry-zero-area") or found.get("geometry-empty")
    assert flat is not None and "00009" in flat.units


def test_shapefile_without_dbf_names_the_missing_part(tmp_path):
    shp = tmp_path / "units.shp"
    _with_values(grid_layer(2)).to_file(shp)
    (tmp_path / "units.dbf").unlink()
    with pytest.raises(InputError, match=r"units.dbf is missing"):
        load_panel(_spec(shp))


def test_polygons_across_the_180th_meridian_are_not_stretched(layer_file):
    import geopandas as gpd
    from pyproj import Geod

    # squares of 0.5 degrees from 179 E to 179 W at 17 S, one of them crossing the meridian
    # written the usual way (coordinates jumping from 179.75 to -179.75)
    lons = [179.0, 179.5, -180.0, -179.5]
    geoms = [box(x, -17.5, x + 0.5, -17.0) for x in lons]
    geoms.append(Polygon([(179.75, -18), (-179.75, -18), (-179.75, -17.5), (179.75, -17.5)]))
    ids = [f"{i:02d}" for i in range(len(geoms))]
    g = gpd.GeoDataFrame({"unit_id": ids}, geometry=geoms, crs="EPSG:4326")
    panel = load_panel(_spec(layer_file(gdf=_with_values(g))))
    minx, miny, maxx, maxy = panel.geometry.total_bounds
    west_east = Geod(ellps="WGS84").inv(179.0, -17.25, -179.0, -17.25)[2]  # metres, ~212 km
    assert maxx - minx == pytest.approx(west_east, rel=0.02)
    crossing = panel.geometry.iloc[-1]
    assert crossing.bounds[2] - crossing.bounds[0] < 60_000  # 0.5 degrees is ~53 km here
