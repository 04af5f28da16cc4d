"""The cluster step end to end: reproducibility, islands, flags, files and the command."""

from __future__ import annotations

import numpy as np
import pytest
from shapely.geometry import box

from mapdrift.clusters import ClusterOptions, analyse_clusters, write_clusters
from mapdrift.clusters.labels import flags, label_sequences, label_transitions
from mapdrift.errors import ConfigError, OutputExistsError
from mapdrift.panel import Panel


def _grid_panel(n=10, T=6, island=False, seed=0):
    # Synthetic scaffolding (not reference data): a grid with a block of raised values.
    geoms = [
        box(c * 100, r * 100, c * 100 + 100, r * 100 + 100) for r in range(n) for c in range(n)
    ]
    rng = np.random.default_rng(seed)
    v = rng.normal(size=(n * n, T))
    rows, cols = np.divmod(np.arange(n * n), n)
    v[(rows < 4) & (cols < 4), T // 2 :] += 4
    if island:
        geoms.append(box(5000, 5000, 5100, 5100))
        v = np.vstack([v, rng.normal(size=(1, T))])
    return Panel.from_arrays(v, geoms, crs="EPSG:3857", periods=list(range(2015, 2015 + T)))


def test_same_seed_identical_files(tmp_path):
    # Common practice, no source: a seeded permutation test is reproducible byte for byte.
    p = _grid_panel()
    opt = ClusterOptions(permutations=199, seed=5)
    write_clusters(analyse_clusters(p, None, opt), tmp_path / "a")
    write_clusters(analyse_clusters(p, None, opt), tmp_path / "b")
    for name in ("clusters.csv", "global_moran.csv", "cluster_changes.csv", "trends.csv"):
        assert (tmp_path / "a" / name).read_bytes() == (tmp_path / "b" / name).read_bytes()


def test_other_seed_changes_p_within_monte_carlo_error():
    p = _grid_panel()
    perm = {"p_value": "permutation", "permutations": 999}
    a = analyse_clusters(p, None, ClusterOptions(seed=1, **perm))
    b = analyse_clusters(p, None, ClusterOptions(seed=2, **perm))
    np.testing.assert_array_equal(a.local.stat, b.local.stat)
    pa, pb = a.local.p, b.local.p
    assert not np.array_equal(pa, pb)
    # two-sided p from 999 draws: sd <= 2*sqrt(0.25/999) ~ 0.032; allow 5 sd
    assert np.nanmax(np.abs(pa - pb)) < 0.16


def test_planted_block_is_high_high_after_the_rise():
    r = analyse_clusters(_grid_panel(), None, ClusterOptions(permutations=999))
    inner = [11, 12, 21, 22]  # interior cells of the raised 4x4 block
    assert (r.codes[inner, 3:] == 0).all()
    assert (r.codes[inner, :3] != 0).all()
    assert r.global_moran["moran_i"].iloc[-1] > 0.3


@pytest.mark.parametrize("rule, label", [("exclude", "isolated"), ("nearest", None)])
def test_island_runs_to_completion(rule, label):
    r = analyse_clusters(
        _grid_panel(island=True), None, ClusterOptions(islands=rule, permutations=99)
    )
    last = len(r.units) - 1
    labels = r.clusters[r.clusters.unit == r.units[last]].label.unique().tolist()
    if label:
        assert labels == [label]
    else:
        assert "isolated" not in labels
    assert any(f.code == "weights-islands" for f in r.findings)


def test_missing_value_is_no_data_not_zero():
    p = _grid_panel()
    v = np.array(p.values)
    v[0, 2] = np.nan
    r = analyse_clusters(p.with_values(v), None, ClusterOptions(permutations=99))
    row = r.clusters[(r.clusters.unit == "0") & (r.clusters.period == "2017")].iloc[0]
    assert row.label == "no data" and np.isnan(row.p)
    assert r.global_moran.n_units.iloc[2] == 99


def test_flags_by_hand():
    # Codes: 0 HH, 1 LL, 2 HL, 3 LH, 4 ns, -1 no data.
    codes = np.array([[4, 0, 0, 0, 4], [4, -1, 0, 4, 2], [1, 1, 4, 3, 4]], dtype=np.int16)
    f = flags(codes, ["a", "b", "c", "d", "e"], persist=3)
    assert f["joined_high_cluster"] == ["b", "", ""]  # unit 1: entry after no data not counted
    assert f["left_high_cluster"] == ["e", "d", ""]
    assert f["left_low_cluster"] == ["", "", "c"]
    assert f["became_outlier"] == ["", "e", "d"]
    assert f["stopped_outlier"] == ["", "", "e"]
    assert f["steady_high_cluster"] == [True, False, False]
    assert label_sequences(codes)[1] == "ns>nd>HH>ns>HL"
    t = label_transitions(codes)
    assert t.sum() == 10 and t[0, 0] == 2  # 12 pairs minus 2 touching no data


def test_outputs_refuse_overwrite(tmp_path):
    r = analyse_clusters(_grid_panel(), None, ClusterOptions(permutations=99))
    write_clusters(r, tmp_path)
    with pytest.raises(OutputExistsError, match="--force"):
        write_clusters(r, tmp_path)
    write_clusters(r, tmp_path, force=True)


def test_gi_star_option():
    r = analyse_clusters(_grid_panel(), None, ClusterOptions(statistic="gi-star"))
    assert "gi_star_z" in r.clusters.columns
    assert (r.codes[[11, 12], -1] == 0).all()


@pytest.mark.parametrize(
    "kw, match",
    [({"alpha": 2}, "--alpha"), ({"correction": "holm"}, "--correction"),
     ({"weights": "hex"}, "--weights"), ({"permutations": 10}, "--permutations")],
)  # fmt: skip
def test_bad_options(kw, match):
    with pytest.raises(ConfigError, match=match):
        ClusterOptions(**kw)


def test_command_on_a_grid(runner, layer_file, table_file, tmp_path):
    from conftest import long_rows
    from mapdrift.cli import app

    layer = layer_file(n_side=5)
    ids = [f"{i + 1:05d}" for i in range(25)]
    table = table_file(
        long_rows(ids, range(2018, 2024), value=lambda i, y: float((i * 7) % 11 + y % 3))
    )
    out = tmp_path / "out"
    args = ["clusters", str(layer), str(table), "--id", "unit_id", "--period", "year", "--value",
            "rate", "--out", str(out), "--permutations", "99", "--no-maps"]  # fmt: skip
    res = runner.invoke(app, args)
    assert res.exit_code == 0, res.output
    assert (out / "clusters.csv").exists() and (out / "trends.csv").exists()
    again = runner.invoke(app, args)
    assert again.exit_code == 3 and "--force" in again.output
    bad = runner.invoke(app, [*args, "--force", "--weights", "hexagon"])
    assert bad.exit_code == 2


def test_permutation_floor_is_reported():
    # With 99 permutations the smallest two-sided p is 0.02 > 0.05/100: Bonferroni can't reject.
    r = analyse_clusters(
        _grid_panel(),
        None,
        ClusterOptions(permutations=99, correction="bonferroni", p_value="permutation"),
    )
    assert any(f.code == "clusters-permutation-floor" for f in r.findings)
    assert (r.codes[:, :] != 0).all()
