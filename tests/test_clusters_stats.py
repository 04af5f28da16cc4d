"""Cluster statistics against published worked examples and esda/scipy on bundled data."""

from __future__ import annotations

import warnings

import numpy as np
import pytest
import scipy.sparse as sp
from scipy import stats

from mapdrift.clusters.local import gi_star_panel, local_moran_panel
from mapdrift.clusters.moran import moran_global, moran_global_panel
from mapdrift.clusters.multiple import adjust, significant
from mapdrift.clusters.trends import mann_kendall, theil_sen, trends
from mapdrift.weights import build_weights


@pytest.fixture(scope="module")
def columbus():
    # Columbus neighbourhood crime, bundled with libpysal (offline).
    import geopandas as gpd
    from libpysal import examples

    return gpd.read_file(examples.get_path("columbus.shp"))


@pytest.fixture(scope="module")
def columbus_ref(columbus):
    from libpysal import weights as lw

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        w = lw.Queen.from_dataframe(columbus, use_index=False)
    w.transform = "r"
    return w


# -- multiple testing ---------------------------------------------------------------------------
BH_P = [0.0001, 0.0004, 0.0019, 0.0095, 0.0201, 0.0278, 0.0298, 0.0344, 0.0459, 0.3240, 0.4262,
        0.5719, 0.6528, 0.7590, 1.000]  # fmt: skip


def test_benjamini_hochberg_worked_example():
    # Benjamini & Hochberg (1995), section 4 example: at q = 0.05 BH rejects 4, Bonferroni 3.
    p = np.array(BH_P)
    assert significant(p, 0.05, "fdr").sum() == 4
    assert significant(p, 0.05, "bonferroni").sum() == 3
    assert significant(p, 0.05, "none").sum() == 9


def test_bh_adjusted_values_and_nan():
    # Adjusted p-values agree with scipy.stats.false_discovery_control (reference library).
    p = np.array(BH_P)
    np.testing.assert_allclose(adjust(p, "fdr"), stats.false_discovery_control(p))
    with_nan = np.concatenate([p, [np.nan]])
    out = adjust(with_nan, "fdr")
    assert np.isnan(out[-1])
    np.testing.assert_allclose(out[:-1], adjust(p, "fdr"))


# -- global Moran -------------------------------------------------------------------------------
def _rook_lattice_binary(n=3):
    B = np.zeros((n * n, n * n))
    for r in range(n):
        for c in range(n):
            for dr, dc in ((0, 1), (1, 0), (0, -1), (-1, 0)):
                if 0 <= r + dr < n and 0 <= c + dc < n:
                    B[r * n + c, (r + dr) * n + c + dc] = 1
    return sp.csr_matrix(B)


def test_moran_3x3_rook_lattice_exact():
    # By hand with the Cliff & Ord (1981) moment formulas: binary rook weights, y = 1..9:
    # I = 1/2, E[I] = -1/8, Var_N = 17/320, Var_R = 191/3200.
    m = moran_global(np.arange(1.0, 10.0), _rook_lattice_binary())
    assert pytest.approx(0.5) == m.I
    assert m.expected == pytest.approx(-1 / 8)
    assert m.var_normal == pytest.approx(17 / 320)
    assert m.var_random == pytest.approx(191 / 3200)


def test_moran_columbus(columbus, columbus_ref):
    # Columbus CRIME, queen, row-standardised: I = 0.500189, E[I] = -1/48 (R spdep moran.test,
    # from memory via the issue); moments and z agree with esda.Moran (reference library).
    import esda

    w = build_weights(columbus.geometry, "queen")
    y = columbus["CRIME"].to_numpy()
    m = moran_global(y, w.W, permutations=999, seed=1)
    assert pytest.approx(0.500189, abs=1e-6) == m.I
    assert m.expected == pytest.approx(-1 / 48)
    ref = esda.Moran(y, columbus_ref, permutations=0)
    assert pytest.approx(ref.I, rel=1e-12) == m.I  # second check of the recalled I
    assert m.var_normal == pytest.approx(ref.VI_norm)
    assert m.var_random == pytest.approx(ref.VI_rand)
    assert m.z_random == pytest.approx(ref.z_rand)
    assert m.p_permutation == pytest.approx(2 / 1000)  # none of 999 permutations as extreme
    panel = moran_global_panel(np.column_stack([y, y[::-1]]), w, permutations=199, seed=1)
    assert pytest.approx(m.I) == panel[0].I


# -- local statistics ---------------------------------------------------------------------------
def test_local_moran_matches_esda(columbus, columbus_ref):
    # esda.Moran_Local on Columbus: our I_i (Anselin 1995, m2 = sum z^2 / n) = esda's Is * n/(n-1);
    # our two-sided p = min(1, 2 * esda's directed p_sim) within Monte-Carlo error.
    import esda

    y = columbus["CRIME"].to_numpy()
    n = len(y)
    w = build_weights(columbus.geometry, "queen")
    perms = 9999
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        ref = esda.Moran_Local(y, columbus_ref, permutations=perms, seed=7, n_jobs=1)
    res = local_moran_panel(y[:, None], w, permutations=perms, seed=3)
    np.testing.assert_allclose(res.stat[:, 0], ref.Is * n / (n - 1), rtol=1e-10)
    # the mean local I equals the global I under this convention
    assert res.stat[:, 0].mean() == pytest.approx(esda.Moran(y, columbus_ref, permutations=0).I)
    p_ref = np.minimum(1.0, 2 * ref.p_sim)
    se = 2 * np.sqrt(np.clip(p_ref / 2 * (1 - p_ref / 2), 1e-4, None) / perms) * np.sqrt(2)
    assert np.all(np.abs(res.p[:, 0] - p_ref) < 5 * se + 2 / perms)


def test_local_moran_missing_equals_subset(columbus):
    # A unit without a value is dropped and the weights re-standardised: the result equals esda
    # on the layer without that unit (queen weights rebuilt from the smaller layer).
    import esda
    from libpysal import weights as lw

    y = columbus["CRIME"].to_numpy().copy()
    y[10] = np.nan
    w = build_weights(columbus.geometry, "queen")
    res = local_moran_panel(y[:, None], w, permutations=0)
    sub = columbus.drop(index=10).reset_index(drop=True)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        wsub = lw.Queen.from_dataframe(sub, use_index=False)
        wsub.transform = "r"
        ref = esda.Moran_Local(sub["CRIME"].to_numpy(), wsub, permutations=0)
    m = len(sub)
    np.testing.assert_allclose(np.delete(res.stat[:, 0], 10), ref.Is * m / (m - 1), rtol=1e-10)
    assert np.isnan(res.stat[10, 0]) and np.isnan(res.p[10, 0])


def test_gi_star_matches_esda(columbus):
    # esda.G_Local(transform="B", star=True).Zs: Ord & Getis (1995) z with binary weights + self.
    import esda
    from libpysal import weights as lw

    y = columbus["CRIME"].to_numpy()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        wb = lw.Queen.from_dataframe(columbus, use_index=False)
        ref = esda.G_Local(y, wb, transform="B", star=True, permutations=0)
    res = gi_star_panel(y[:, None], build_weights(columbus.geometry, "queen"))
    np.testing.assert_allclose(res.stat[:, 0], ref.Zs, rtol=1e-10)


def test_same_seed_same_p_values(columbus):
    y = columbus[["CRIME", "INC", "HOVAL"]].to_numpy()
    w = build_weights(columbus.geometry, "queen")
    a = local_moran_panel(y, w, permutations=499, seed=11)
    b = local_moran_panel(y, w, permutations=499, seed=11)
    np.testing.assert_array_equal(a.p, b.p)
    # the seed is used: another seed draws other permutations (a fixed internal seed fails here)
    c = local_moran_panel(y, w, permutations=499, seed=12)
    assert not np.array_equal(a.p, c.p)
    # one draw table shared by the periods: each column equals a one-period run
    one = local_moran_panel(y[:, 1:2], w, permutations=499, seed=11)
    np.testing.assert_array_equal(one.p[:, 0], a.p[:, 1])


# -- trends -------------------------------------------------------------------------------------
def test_mann_kendall_gilbert_example():
    # Gilbert (1987) Statistical Methods for Environmental Pollution Monitoring, p. 212 example
    # (via a secondary copy): S = 111, Var(S) = 1226.33 with ties, Z = 3.14.
    x = np.array([20, 20, 20, 20, 15, 20, 20, 30, 27, 26, 23, 35, 25, 28, 70, 26, 24, 34, 32,
                  23, 50, 30], dtype=float)  # fmt: skip
    S, var, Z, p = mann_kendall(x[None, :])
    assert S[0] == 111
    assert var[0] == pytest.approx(1226.33, abs=0.005)
    assert Z[0] == pytest.approx(3.14, abs=0.005)
    assert p[0] == pytest.approx(2 * stats.norm.sf(Z[0]))
    # second check of the recalled numbers: pymannkendall (reference library) on the same data
    import pymannkendall

    ref = pymannkendall.original_test(x)
    assert (S[0], var[0], Z[0], p[0]) == pytest.approx((ref.s, ref.var_s, ref.z, ref.p), rel=1e-12)


def test_mann_kendall_all_equal_is_nan_and_never_significant():
    # Var S = 0 when every value is tied (Gilbert 1987's variance formula): no test is possible.
    S, var, Z, p = mann_kendall(np.array([[3.0, 3, 3, 3, 3], [1, 2, 3, 4, 5]]))
    assert S[0] == 0 and var[0] == 0 and np.isnan(Z[0]) and np.isnan(p[0])
    tr = trends(np.array([[3.0, 3, 3, 3, 3], [1, 2, 3, 4, 5]]), np.arange(5.0))
    assert not tr.significant[0] and tr.direction[0] == "no significant trend"


def test_theil_sen_sen_1968():
    # Sen (1968) example: t = 1,2,3,4,10,12,18; y = 9,15,19,20,45,55,78 -> slope 4.
    t = np.array([1, 2, 3, 4, 10, 12, 18.0])
    y = np.array([[9, 15, 19, 20, 45, 55, 78.0]])
    assert theil_sen(y, t)[0] == pytest.approx(4.0)


def test_theil_sen_matches_scipy_with_missing():
    # Reference: scipy.stats.theilslopes on each row's non-missing values.
    rng = np.random.default_rng(5)
    x = rng.normal(size=(30, 9)).cumsum(axis=1)
    x[rng.random(x.shape) < 0.15] = np.nan
    t = np.arange(2010, 2019, dtype=float)
    got = theil_sen(x, t)
    for i in range(len(x)):
        ok = ~np.isnan(x[i])
        if ok.sum() >= 2:
            assert got[i] == pytest.approx(stats.theilslopes(x[i, ok], t[ok])[0])


def test_mann_kendall_matches_kendall_tau_without_ties():
    # Without ties, S = tau * n(n-1)/2 (scipy.stats.kendalltau against time).
    rng = np.random.default_rng(2)
    x = rng.normal(size=(5, 12))
    S = mann_kendall(x)[0]
    for i in range(5):
        tau = stats.kendalltau(np.arange(12), x[i]).statistic
        assert S[i] == pytest.approx(tau * 12 * 11 / 2)


def test_trends_short_series_and_direction():
    x = np.array(
        [[1, 2, 3, 4, 5, 6, 7, 8.0], [np.nan] * 6 + [1.0, 2.0], [8, 7, 6, 5, 4, 3, 2, 1.0]]
    )
    tr = trends(x, np.arange(8.0), alpha=0.05, correction="none")
    assert tr.direction == ("rising", "too few periods", "falling")
    assert np.isnan(tr.slope[1]) and tr.slope[0] == pytest.approx(1.0)
