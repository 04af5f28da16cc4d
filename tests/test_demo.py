"""Tests for the invented demo county generator (mapdrift.demo).

These checks are against our own generator spec (demo data only): they pin down
the planted stories so the other modules have reliable fixtures, not any real data.
Rank persistence is measured with scipy.stats (kendalltau, spearmanr) as the
reference implementation; pooled quintile classes (breaks at the 20/40/60/80th
percentiles of all unit-years, numpy.quantile) are common practice, no source.
"""

from __future__ import annotations

import inspect
from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd
import pytest
import shapely
from scipy import stats

from mapdrift import demo
from mapdrift.config import load_config
from mapdrift.demo import DemoFiles, generate
from mapdrift.panel import InputSpec, load_panel

pytestmark = pytest.mark.filterwarnings("ignore::UserWarning")


@pytest.fixture(scope="module")
def runs(tmp_path_factory: pytest.TempPathFactory) -> tuple[DemoFiles, DemoFiles]:
    return (generate(tmp_path_factory.mktemp("a")), generate(tmp_path_factory.mktemp("b")))


@pytest.fixture(scope="module")
def files(runs: tuple[DemoFiles, DemoFiles]) -> DemoFiles:
    return runs[0]


@pytest.fixture(scope="module")
def units(files: DemoFiles) -> gpd.GeoDataFrame:
    return gpd.read_file(files.geometry, layer="units")


def _read(path: Path) -> pd.DataFrame:
    return pd.read_csv(path, dtype=str, keep_default_na=False)


def _rates(path: Path) -> pd.DataFrame:
    """unit x year rate per 1,000 with IDs re-padded; markers become NaN."""
    t = _read(path)
    t["unit_id"] = t["unit_id"].str.zfill(5)
    t["rate"] = (
        pd.to_numeric(t["filings"], errors="coerce") / t["mortgaged_parcels"].astype(float) * 1000
    )
    t["year"] = t["year"].astype(int)
    return t.pivot(index="unit_id", columns="year", values="rate")


def _neighbours(units: gpd.GeoDataFrame) -> dict[str, set[str]]:
    geoms = units.geometry.values
    left, right = shapely.STRtree(geoms).query(geoms, predicate="intersects")
    ids = units["unit_id"].to_numpy()
    nb: dict[str, set[str]] = {i: set() for i in ids}
    for i, j in zip(left, right, strict=True):
        if i != j:
            nb[ids[i]].add(ids[j])
    return nb


def _connected(members: tuple[str, ...], nb: dict[str, set[str]]) -> bool:
    seen, todo = {members[0]}, [members[0]]
    while todo:
        for j in nb[todo.pop()] & set(members) - seen:
            seen.add(j)
            todo.append(j)
    return seen == set(members)


def test_deterministic(runs: tuple[DemoFiles, DemoFiles]) -> None:
    a, b = runs
    for name in ("table", "table_next", "config", "readme"):
        assert getattr(a, name).read_bytes() == getattr(b, name).read_bytes(), name
    ga = gpd.read_file(a.geometry, layer="units")
    gb = gpd.read_file(b.geometry, layer="units")
    pd.testing.assert_frame_equal(ga.drop(columns="geometry"), gb.drop(columns="geometry"))
    assert shapely.equals_exact(ga.geometry.values, gb.geometry.values, tolerance=0).all()
    assert a.stories == b.stories


def test_other_seed_differs(tmp_path: Path, files: DemoFiles) -> None:
    other = generate(tmp_path, seed=7)
    assert other.table.read_bytes() != files.table.read_bytes()
    assert len(gpd.read_file(other.geometry, layer="units")) == 150


def test_units_layer(units: gpd.GeoDataFrame) -> None:
    assert 140 <= len(units) <= 160
    assert units.crs.to_epsg() == 4326
    assert list(units.columns) == ["unit_id", "name", "geometry"]
    assert units.is_valid.all() and (units.geom_type == "Polygon").all()
    assert units["unit_id"].is_unique and units["name"].is_unique
    assert units["unit_id"].str.fullmatch(r"0\d{4}").all()
    minx, miny, maxx, maxy = units.total_bounds
    assert minx >= 0.2 and maxx <= 0.9 and miny >= 0.1 and maxy <= 0.6


def test_tiling_and_single_island(units: gpd.GeoDataFrame) -> None:
    nb = _neighbours(units)
    isolated = [i for i, s in nb.items() if not s]
    assert isolated == ["07150"]
    mainland = units[units["unit_id"] != "07150"].geometry.values
    whole = shapely.union_all(mainland)
    assert whole.geom_type == "Polygon" and len(whole.interiors) == 0  # no gaps
    assert abs(whole.area - shapely.area(mainland).sum()) < 1e-9  # no overlaps
    assert _connected(tuple(units["unit_id"][units["unit_id"] != "07150"]), nb)
    hull = shapely.convex_hull(whole)
    assert whole.area < 0.99 * hull.area  # irregular outline, not a rectangle


def test_csv_markers_and_defects(files: DemoFiles, units: gpd.GeoDataFrame) -> None:
    raw = _read(files.table)
    assert list(raw.columns) == ["unit_id", "year", "filings", "mortgaged_parcels"]
    assert sorted(raw["year"].astype(int).unique()) == list(range(2012, 2025))
    assert (raw["filings"] == "(S)").sum() == 15
    assert (raw["filings"] == "").sum() == 5
    other = raw[~raw["filings"].isin(["(S)", ""])]
    assert other["filings"].str.fullmatch(r"\d+").all()
    unpadded = ~raw["unit_id"].str.startswith("0")
    assert 0.3 < unpadded.mean() < 0.5
    padded = raw["unit_id"].str.zfill(5)
    assert (raw.loc[unpadded, "unit_id"].str.len() == 4).all()
    layer, table = set(units["unit_id"]), set(padded)
    assert layer - table == set(files.stories["no_rows"]) and len(layer - table) == 1
    assert table - layer == {"07999"}
    counts = padded.value_counts()
    short = counts[counts < 13]
    assert set(short.index) == set(files.stories["missing_years"]) and len(short) == 4
    assert short.between(10, 12).all()
    assert not raw.assign(u=padded).duplicated(["u", "year"]).any()
    nxt = _read(files.table_next)
    assert set(nxt["year"]) == {"2025"} and set(nxt["unit_id"].str.zfill(5)) == table
    assert (~nxt["unit_id"].str.startswith("0")).any()


def test_small_base(files: DemoFiles) -> None:
    raw = _read(files.table)
    parcels = raw.groupby(raw["unit_id"].str.zfill(5))["mortgaged_parcels"].first().astype(int)
    assert set(parcels[parcels < 20].index) == set(files.stories["small_base"])
    big = parcels.drop(list(files.stories["small_base"]))
    assert big.between(1500, 6000).mean() >= 0.9 and big.between(1300, 6700).all()


def test_sentinel_zero_block(files: DemoFiles, units: gpd.GeoDataFrame) -> None:
    t = _read(files.table)
    t["unit_id"] = t["unit_id"].str.zfill(5)
    y16 = t[t["year"] == "2016"].set_index("unit_id")["filings"]
    block = files.stories["sentinel_zeros_2016"]
    assert 10 <= len(block) <= 14 and (y16[list(block)] == "0").all()
    nb = _neighbours(units)
    assert _connected(block, nb)
    ring = {j for i in block for j in nb[i]} - set(block)
    ring_values = y16.reindex(sorted(ring)).dropna()
    assert (ring_values != "0").all()


def test_sentinel_zero_block_is_detected(files: DemoFiles) -> None:
    # our own loader's check must see most of the block as a not-reported code
    spec = InputSpec(**load_config(files.config).section("inputs"))
    (f,) = [f for f in load_panel(spec).findings if f.code == "values-zero-block"]
    block = set(files.stories["sentinel_zeros_2016"])
    assert len(block & set(f.units)) >= 10 and "2016" in f.message


def test_stories_visible(files: DemoFiles, units: gpd.GeoDataFrame) -> None:
    r = _rates(files.table)
    st, nb = files.stories, _neighbours(units)
    med = r.median()
    hot, cool = st["emerging_hot"], st["cooling"]
    assert 10 <= len(hot) <= 14 and _connected(hot, nb)
    assert 8 <= len(cool) <= 12 and _connected(cool, nb)
    assert not set(hot) & set(cool)
    assert (r.loc[list(hot), 2021:2024].mean() > 2.5 * med.loc[2021:2024]).all()
    assert (r.loc[list(hot), 2012:2017].mean() < 1.5 * med.loc[2012:2017]).all()
    assert (r.loc[list(cool), 2012:2016].mean() > 2 * med.loc[2012:2016]).all()
    assert (r.loc[list(cool), 2020:2024].mean() < 1.5 * med.loc[2020:2024]).all()
    for key, year in (("jump_2019", 2019), ("jump_2021", 2021)):
        (u,) = st[key]
        assert u not in hot + cool
        assert r.loc[u, year] - r.loc[u, year - 1] > 10
        assert r.loc[u, year:2024].min() > 20 and r.loc[u, : year - 1].max() < 12
    (s,) = st["spike_2017"]
    assert r.loc[s, 2017] > 3 * max(r.loc[s, 2016], r.loc[s, 2018])


def _pooled_classes(r: pd.DataFrame) -> tuple[np.ndarray, np.ndarray]:
    """Pooled quintile breaks of all unit-years and the 0-based class matrix (NaN = no data)."""
    breaks = np.quantile(r.stack().dropna(), [0.2, 0.4, 0.6, 0.8])
    return breaks, np.where(r.isna(), np.nan, np.searchsorted(breaks, r, side="right"))


def test_rates_persist(files: DemoFiles) -> None:
    # Real neighbourhood rates keep their ranks from year to year; scipy gives the reference
    # Kendall tau-b and Spearman rho between consecutive years (pairs with data in both).
    r = _rates(files.table)
    pairs = list(zip(r.columns[:-1], r.columns[1:]))
    tau = [stats.kendalltau(r[a], r[b], nan_policy="omit").statistic for a, b in pairs]
    rho = [stats.spearmanr(r[a], r[b], nan_policy="omit").statistic for a, b in pairs]
    assert np.mean(tau) >= 0.7 and min(tau) >= 0.6, np.round(tau, 2)
    assert np.mean(rho) >= 0.85, np.round(rho, 2)
    _, c = _pooled_classes(r)
    step = np.diff(c, axis=1)
    step = step[np.isfinite(step)]
    assert (step == 0).mean() >= 0.65


def test_jumps_are_the_planted_ones(files: DemoFiles) -> None:
    # units moving >= 2 pooled quintiles in one step: the planted jumps and spike, plus at most
    # a few incidental ones (the small-base units, where one filing is a top-class rate, count)
    r = _rates(files.table)
    _, c = _pooled_classes(r)
    moved = np.nan_to_num(np.abs(np.diff(c, axis=1))) >= 2
    jumpers = set(r.index[moved.any(axis=1)])
    st = files.stories
    planted = set(st["jump_2019"] + st["jump_2021"] + st["spike_2017"])
    assert planted <= jumpers
    assert len(jumpers - planted) <= 6, sorted(jumpers - planted)
    assert not jumpers & set(st["sentinel_zeros_2016"] + st["emerging_hot"] + st["cooling"])


def test_new_jumper_2025(files: DemoFiles) -> None:
    # 2025 classed with the 2012-2024 pooled breaks, as a yearly rerun keeps them
    r = _rates(files.table)
    breaks, _ = _pooled_classes(r)
    nxt = _rates(files.table_next)[2025]
    last = r[2024].reindex(nxt.index)
    move = pd.Series(
        np.searchsorted(breaks, nxt, side="right") - np.searchsorted(breaks, last, side="right"),
        nxt.index,
    ).where(last.notna() & nxt.notna())
    (u,) = files.stories["new_jumper_2025"]
    assert move[u] >= 2
    planted = {i for k, v in files.stories.items() if k != "new_jumper_2025" for i in v}
    assert u not in planted
    # the clearest move of the release: no other unit moves as far, bar the small-base units
    # (one filing on < 20 parcels is a top-class rate); at most 2 others move 2+ classes
    others = move.drop(u).abs().dropna()
    assert others.max() <= move[u]
    assert (others.drop(list(files.stories["small_base"]), errors="ignore") < move[u]).all()
    assert (others >= 2).sum() <= 2


def test_config_and_docs(files: DemoFiles) -> None:
    assert files.config.read_text(encoding="utf-8") == demo.CONFIG
    doc, readme = inspect.getdoc(demo) or "", files.readme.read_text(encoding="utf-8")
    for ids in files.stories.values():
        for uid in ids:
            assert uid in doc and uid in readme, uid
