"""Spatial weights against libpysal (reference library) and hand-counted lattices."""

from __future__ import annotations

import warnings
from dataclasses import replace

import numpy as np
import pytest
from shapely.geometry import box

from mapdrift.errors import ConfigError
from mapdrift.weights import build_weights, parse_kind


@pytest.fixture(scope="module")
def columbus():
    # Columbus neighbourhoods, bundled with libpysal (no download needed).
    import geopandas as gpd
    from libpysal import examples

    return gpd.read_file(examples.get_path("columbus.shp"))


def _lattice(n=3, extra=()):
    import geopandas as gpd

    geoms = [box(c, r, c + 1, r + 1) for r in range(n) for c in range(n)] + list(extra)
    return gpd.GeoSeries(geoms, crs="EPSG:3857")


@pytest.mark.parametrize("kind", ["queen", "rook"])
def test_contiguity_matches_libpysal_on_columbus(columbus, kind):
    # Reference: libpysal.weights.Queen / Rook, row-standardised ("r").
    from libpysal import weights as lw

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        ref = (lw.Queen if kind == "queen" else lw.Rook).from_dataframe(columbus, use_index=False)
    ref.transform = "r"
    w = build_weights(columbus.geometry, kind)
    np.testing.assert_allclose(w.W.toarray(), ref.sparse.toarray(), atol=1e-12)
    assert w.islands == () and w.components == 1


def test_knn_and_distance_match_libpysal(columbus):
    # Reference: libpysal KNN (k=4) and DistanceBand (binary) on polygon centroids.
    from libpysal import weights as lw

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        knn = lw.KNN.from_dataframe(columbus, k=4, use_index=False)
        pts = np.column_stack([columbus.centroid.x, columbus.centroid.y])
        band = lw.DistanceBand(pts, threshold=1.0, binary=True, silence_warnings=True)
    for ref, kind in ((knn, "knn:4"), (band, "distance:1")):
        ref.transform = "r"
        w = build_weights(columbus.geometry, kind, islands="exclude")
        np.testing.assert_allclose(w.W.toarray(), ref.sparse.toarray(), atol=1e-12)


def test_rook_and_queen_lattice_cardinalities():
    # 3x3 lattice, counted by hand: rook corners 2, edges 3, centre 4; queen 3, 5, 8.
    g = _lattice()
    assert build_weights(g, "rook").cardinalities.tolist() == [2, 3, 2, 3, 4, 3, 2, 3, 2]
    assert build_weights(g, "queen").cardinalities.tolist() == [3, 5, 3, 5, 8, 5, 3, 5, 3]


def test_fuzzy_bridges_a_gap():
    # Two squares 0.5 m apart: not contiguous, fuzzy with 1 m tolerance links them.
    import geopandas as gpd

    g = gpd.GeoSeries([box(0, 0, 100, 100), box(100.5, 0, 200, 100)], crs="EPSG:3857")
    assert build_weights(g, "queen", islands="exclude").cardinalities.tolist() == [0, 0]
    assert build_weights(g, "fuzzy:1").cardinalities.tolist() == [1, 1]


@pytest.mark.parametrize("rule", ["nearest", "exclude"])
def test_island_rules(rule):
    g = _lattice(extra=[box(10, 10, 11, 11)])
    w = build_weights(g, "queen", islands=rule, units=[f"u{i}" for i in range(10)])
    assert w.islands == (9,)
    codes = [f.code for f in w.findings]
    assert "weights-islands" in codes
    island = next(f for f in w.findings if f.code == "weights-islands")
    assert "u9" in island.units
    if rule == "nearest":  # the flag exists on `clusters` only; `run` takes the config key
        assert "mapdrift clusters --islands exclude" in island.message
        assert "--set clusters.islands=exclude" in island.message
    if rule == "nearest":
        # nearest polygon to (10..11, 10..11) is the top-right lattice cell (index 8)
        assert w.neighbours(9).tolist() == [8] and 9 in w.neighbours(8)
        assert w.isolated == () and w.components == 1
    else:
        assert w.isolated == (9,) and w.cardinalities[9] == 0
        assert np.isnan(w.lag(np.arange(10.0))[9])


def test_components_reported():
    g = _lattice(extra=[box(10, 10, 11, 11), box(11, 10, 12, 11)])
    w = build_weights(g, "rook")
    assert any(f.code == "weights-components" for f in w.findings)
    assert w.components == 2


def test_lag_leaves_out_missing_neighbours():
    # Hand computation on the 3x3 rook lattice, values 1..9 with cell 1 missing:
    # cell 0 neighbours {1, 3} -> only 3 valid -> lag 4; cell 4 neighbours {1,3,5,7} -> (4+6+8)/3.
    w = build_weights(_lattice(), "rook")
    y = np.arange(1.0, 10.0)
    y[1] = np.nan
    lag = w.lag(y)
    assert lag[0] == 4.0
    assert lag[4] == pytest.approx(6.0)
    assert lag[1] == pytest.approx((1 + 3 + 5) / 3)  # own value missing, lag still defined
    two_d = w.lag(np.column_stack([y, y]))
    np.testing.assert_allclose(two_d[:, 0], lag)


def test_subset_restandardises():
    w = build_weights(_lattice(), "rook")
    keep = np.ones(9, dtype=bool)
    keep[1] = False
    sub = w.subset(keep)
    assert sub.shape == (8, 8)
    np.testing.assert_allclose(np.asarray(sub.sum(axis=1)).ravel(), 1.0)


def test_cache_roundtrip(tmp_path):
    g = _lattice(extra=[box(10, 10, 11, 11)])
    w1 = build_weights(g, "queen", cache_dir=tmp_path)
    files = list(tmp_path.glob("weights-*.npz"))
    assert len(files) == 1
    stamp = (files[0].stat().st_ino, files[0].stat().st_mtime_ns)
    w2 = build_weights(g, "queen", cache_dir=tmp_path)
    # a hit reads the file and leaves it alone; a miss would rebuild and atomically rewrite it
    # (a new inode), so an always-missing cache fails here
    assert (files[0].stat().st_ino, files[0].stat().st_mtime_ns) == stamp
    assert w2.key == w1.key != "" and files[0].name == f"weights-{w1.key}.npz"
    assert (w1.W != w2.W).nnz == 0
    assert w2.islands == w1.islands and w2.findings == w1.findings
    # what is read back is the file's content: a different matrix stored under the key is
    # returned as is (proves the hit path, not a rebuild that happens to agree)
    other = build_weights(g, "rook")
    from mapdrift.weights import _save_cache

    _save_cache(files[0], replace(other, key=w1.key))
    assert (build_weights(g, "queen", cache_dir=tmp_path).W != other.W).nnz == 0
    # another kind, or other geometry, is another cache entry (an always-hitting cache fails)
    build_weights(g, "rook", cache_dir=tmp_path)
    assert len(list(tmp_path.glob("weights-*.npz"))) == 2
    moved = _lattice(extra=[box(20, 20, 21, 21)])
    w3 = build_weights(moved, "queen", cache_dir=tmp_path)
    assert len(list(tmp_path.glob("weights-*.npz"))) == 3 and w3.key != w1.key


@pytest.mark.parametrize("bad", ["hexagon", "knn", "knn:2.5", "distance:-3", "queen:2"])
def test_bad_kind_is_a_clear_error(bad):
    with pytest.raises(ConfigError, match="--weights"):
        parse_kind(bad)


def test_bad_island_rule():
    with pytest.raises(ConfigError, match="--islands"):
        build_weights(_lattice(), "queen", islands="drop")


# --- weights files and libpysal objects (--weights county.gal) ------------------------------
def _libpysal_dense(w, order):
    """A libpysal W as a dense row-standardised matrix in ``order`` (IDs as text)."""
    ids = [str(i) for i in w.id_order]
    pos = [ids.index(u) for u in order]
    w.transform = "r"
    return w.sparse.toarray()[np.ix_(pos, pos)]


def test_gal_file_matches_libpysal(columbus):
    # Reference: libpysal.io reading the same bundled columbus.gal (IDs are POLYID).
    import libpysal
    from libpysal import examples

    path = examples.get_path("columbus.gal")
    units = [str(v) for v in columbus["POLYID"]]
    w = build_weights(columbus.geometry, path, units=units)
    ref = _libpysal_dense(libpysal.io.open(path).read(), units)
    np.testing.assert_allclose(w.W.toarray(), ref, atol=1e-12)
    assert w.kind == "file columbus.gal" and w.islands == () and w.findings == ()


def test_gwt_file_by_id_in_any_order_and_zero_padded():
    # Reference: libpysal.io reading baltim_k4.gwt (4 nearest neighbours; IDs = STATION).
    import geopandas as gpd
    import libpysal
    from libpysal import examples

    layer = gpd.read_file(examples.get_path("baltim.shp")).iloc[::-1]  # another order
    units = [f"{int(v):04d}" for v in layer["STATION"]]  # and zero-padded IDs
    path = examples.get_path("baltim_k4.gwt")
    w = build_weights(layer.geometry, path, units=units)
    ref = _libpysal_dense(libpysal.io.open(path).read(), [u.lstrip("0") for u in units])
    np.testing.assert_allclose(w.W.toarray(), ref, atol=1e-12)
    assert set(w.cardinalities.tolist()) == {4}


def test_libpysal_graph_and_w_objects(columbus):
    # A libpysal Graph / W given from Python equals the same contiguity built by us.
    from libpysal import graph
    from libpysal import weights as lw

    units = [str(v) for v in columbus["POLYID"]]
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        g = graph.Graph.build_contiguity(columbus.set_index("POLYID"), rook=False)
        qw = lw.Queen.from_dataframe(columbus, ids=units, use_index=False)
    ours = build_weights(columbus.geometry, "queen").W.toarray()
    for obj in (g, qw):
        w = build_weights(columbus.geometry, obj, units=units)
        np.testing.assert_allclose(w.W.toarray(), ours, atol=1e-12)


def test_weights_file_id_problems_are_findings_or_clear_errors(tmp_path):
    g = _lattice(2)  # units a..d, rook: a-b, a-c, b-d, c-d
    units = ["a", "b", "c", "d"]
    gal = tmp_path / "w.gal"
    gal.write_text("4\na 2\nb c\nb 1\na\nc 1\na\nzz 1\na\n")  # d missing, zz unknown
    w = build_weights(g, str(gal), units=units)
    codes = {f.code for f in w.findings}
    assert codes == {"weights-ids-unknown", "weights-islands"}
    assert w.isolated == (3,) and np.isnan(w.lag(np.arange(4.0))[3])
    assert w.neighbours(0).tolist() == [1, 2]
    bad = tmp_path / "none.gal"
    bad.write_text("2\nx 1\ny\ny 1\nx\n")
    with pytest.raises(ConfigError, match="none of its 2 IDs match the units"):
        build_weights(g, str(bad), units=units)
    with pytest.raises(ConfigError, match="weights file not found"):
        parse_kind(str(tmp_path / "absent.gwt"))
