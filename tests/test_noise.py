"""Trustworthy answers on noisy small-area counts: credible jumps, stable clusters, exact ties.

The planted-truth checks run on our own synthetic generator (``tests/synthetic_counts.py``,
documented there); the statistics are checked against outside references named beside each
check: hand-computed binomial tails, scipy.stats.binomtest, esda's rate-based Moran
(``Moran_Rate``, ``Moran_Local_Rate``, ``assuncao_rate``) on libpysal's bundled data, esda's
simulated permutation moments, and exact enumeration of every conditional permutation.
"""

from __future__ import annotations

import itertools
import sys
import warnings
from math import comb
from pathlib import Path

import numpy as np
import pytest
import scipy.sparse as sp
from scipy import stats

sys.path.insert(0, str(Path(__file__).parent))

from mapdrift.breaks import classify  # noqa: E402
from mapdrift.changes import ChangeOptions, analyse_changes  # noqa: E402
from mapdrift.changes.noise import moe_change_p, poisson_change_p  # noqa: E402
from mapdrift.clusters import ClusterOptions, analyse_clusters  # noqa: E402
from mapdrift.clusters.local import conditional_moments, local_moran_panel  # noqa: E402
from mapdrift.clusters.moran import moran_global  # noqa: E402
from mapdrift.rates import eb_standardise  # noqa: E402
from mapdrift.weights import SpatialWeights, build_weights, row_standardise  # noqa: E402
from synthetic_counts import make_panel  # noqa: E402


# -- the conditional test for two Poisson rates ------------------------------------------------
def test_poisson_change_by_hand():
    # Przyborowski & Wilenski (1940) conditional test, computed by hand:
    # 2 vs 8 events on equal bases: n = 10, q = 1/2, P(X >= 8) = (45 + 10 + 1) / 1024.
    assert poisson_change_p(2, 1000, 8, 1000) == pytest.approx(2 * 56 / 1024, abs=1e-15)
    # 0 vs 6 on equal bases: P(X >= 6 | n = 6, q = 1/2) = 1/64, two-sided 1/32.
    assert poisson_change_p(0, 500, 6, 500) == pytest.approx(1 / 32, abs=1e-15)
    # 3 vs 3 on bases 100 and 300: q = 3/4, P(X <= 3) = 1 - C(6,4)q^4(1-q)^2 - 6 q^5 (1-q) - q^6
    q = 0.75
    lower = 1 - comb(6, 4) * q**4 * (1 - q) ** 2 - 6 * q**5 * (1 - q) - q**6
    assert poisson_change_p(3, 100, 3, 300) == pytest.approx(2 * lower, abs=1e-12)
    # no event in either period: nothing to test against, p = 1; bad bases give NaN
    assert poisson_change_p(0, 10, 0, 10) == 1.0
    assert np.isnan(poisson_change_p(1, 0, 1, 10)) and np.isnan(poisson_change_p(np.nan, 5, 1, 5))


def test_poisson_change_matches_scipy_binomtest():
    # scipy.stats.binomtest (reference library): our p = 2 * min of its one-sided p-values.
    rng = np.random.default_rng(4)
    n1, n2 = rng.integers(0, 40, 30), rng.integers(0, 40, 30)
    b1, b2 = rng.integers(10, 5000, 30), rng.integers(10, 5000, 30)
    ours = poisson_change_p(n1, b1, n2, b2)
    for i in range(30):
        n, q = int(n1[i] + n2[i]), b2[i] / (b1[i] + b2[i])
        if n == 0:
            continue
        lo = stats.binomtest(int(n2[i]), n, q, alternative="less").pvalue
        hi = stats.binomtest(int(n2[i]), n, q, alternative="greater").pvalue
        assert ours[i] == pytest.approx(min(1.0, 2 * min(lo, hi)), rel=1e-9)


def test_moe_change():
    # z = 3 / sqrt(2) -> two-sided normal p from scipy.stats.norm (reference library).
    p = moe_change_p(10.0, 1.0, 13.0, 1.0)
    assert p == pytest.approx(2 * stats.norm.sf(3 / np.sqrt(2)), rel=1e-12)
    assert np.isnan(moe_change_p(np.nan, 1.0, 2.0, 1.0))


# -- EB standardised rates against esda ------------------------------------------------------
@pytest.fixture(scope="module")
def sids():
    # SIDS births and deaths of North Carolina counties, 1974, bundled with libpysal (offline).
    import geopandas as gpd
    from libpysal import examples

    return gpd.read_file(examples.get_path("sids2.shp"))


def test_eb_standardise_and_rate_moran_match_esda(sids):
    import esda
    from esda.smoothing import assuncao_rate
    from libpysal import weights as lw

    e, b = sids["SID74"].to_numpy(float), sids["BIR74"].to_numpy(float)
    np.testing.assert_allclose(eb_standardise(e, b), assuncao_rate(e, b), rtol=1e-12)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        ref_w = lw.Queen.from_dataframe(sids, use_index=False)
        ref_w.transform = "r"
        glob = esda.Moran_Rate(e, b, ref_w, adjusted=True, permutations=0)
        loc = esda.Moran_Local_Rate(e, b, ref_w, adjusted=True, permutations=0)
    w = build_weights(sids.geometry, "queen")
    np.testing.assert_allclose(w.W.toarray(), ref_w.sparse.toarray(), atol=1e-12)
    z = eb_standardise(e, b)
    assert pytest.approx(glob.I, rel=1e-10) == moran_global(z, w.W).I
    n = len(e)
    res = local_moran_panel(z[:, None], w, permutations=0)
    # our scaling is n/(n-1) times esda's Is (see mapdrift.clusters.local)
    np.testing.assert_allclose(res.stat[:, 0], loc.Is * n / (n - 1), rtol=1e-10)


def test_exact_moments_match_esda_simulated_moments(sids):
    # esda.Moran_Local's EI_sim / seI_sim (9,999 permutations) estimate the mean and sd of the
    # conditional permutation distribution; our exact moments must agree within Monte-Carlo error.
    import esda
    from libpysal import weights as lw

    e, b = sids["SID74"].to_numpy(float), sids["BIR74"].to_numpy(float)
    z = eb_standardise(e, b)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        ref_w = lw.Queen.from_dataframe(sids, use_index=False)
        ref_w.transform = "r"
        ref = esda.Moran_Local(z, ref_w, permutations=9999, seed=3, n_jobs=1)
    w = build_weights(sids.geometry, "queen")
    res = local_moran_panel(z[:, None], w, p_value="normal")
    Z = res.z  # standardised as ours
    mu, sd = conditional_moments(w.W, Z)
    n = len(z)
    scale = (n - 1) / n  # esda's Is = (n-1)/n * ours
    np.testing.assert_allclose(
        ref.EI_sim, scale * Z[:, 0] * mu[:, 0], atol=4 * ref.seI_sim.max() / 100
    )
    np.testing.assert_allclose(
        ref.seI_sim, scale * np.abs(Z[:, 0]) * sd[:, 0], rtol=0.05, atol=1e-3
    )
    # and so the normal p-values match 2 x esda's one-sided p_z_sim
    ok = ref.seI_sim > 1e-6
    assert np.all(np.abs(res.p[ok, 0] - 2 * ref.p_z_sim[ok]) < 0.02 + 0.1 * 2 * ref.p_z_sim[ok])


# -- exact ties against full enumeration -----------------------------------------------------
def _tiny_weights() -> SpatialWeights:
    # 8 units on a path with a branch: unit 0 has 1 neighbour, unit 7 has 2.
    edges = [(0, 1), (1, 2), (2, 3), (3, 4), (4, 5), (5, 6), (6, 7), (3, 7)]
    i, j = zip(*(edges + [(b, a) for a, b in edges]), strict=True)
    m = sp.csr_matrix((np.ones(len(i)), (i, j)), shape=(8, 8))
    return SpatialWeights(W=row_standardise(m), kind="custom")


def _exact_p(y: np.ndarray, W: np.ndarray, i: int) -> float:
    """Two-sided p by enumerating every neighbour set of unit i (ties on both sides)."""
    z = (y - y.mean()) / y.std()
    k = int((W[i] > 0).sum())
    w = W[i][W[i] > 0]
    obs = z[i] * (W[i] @ z)
    others = [j for j in range(len(y)) if j != i]
    sims = np.array(
        [z[i] * (w @ z[list(c)]) for c in itertools.permutations(others, k)]
    )  # ordered draws: every weight pattern equally likely
    ge = np.mean(sims >= obs - 1e-12)
    le = np.mean(sims <= obs + 1e-12)
    return min(1.0, 2 * min(ge, le))


def test_permutation_p_counts_ties_as_ties():
    # Exact enumeration of the conditional permutation distribution (our own check, no library):
    # units with one or two neighbours and tied values tie the observed statistic often.
    w = _tiny_weights()
    y = np.array([1.0, 1.0, 2.0, 2.0, 1.0, 3.0, 1.0, 2.0])
    perms = 19_999
    res = local_moran_panel(y[:, None], w, permutations=perms, seed=5)
    Wd = w.W.toarray()
    for i in (0, 6, 7):
        exact = _exact_p(y, Wd, i)
        # pseudo p = 2 (min(ge, le) + 1) / (P + 1): within 4 standard errors of the exact value
        se = 2 * np.sqrt(max(exact / 2 * (1 - exact / 2), 1e-4) / perms)
        assert abs(res.p[i, 0] - exact) < 4 * se + 2 / perms, (i, res.p[i, 0], exact)


def test_shared_draws_with_missing_cells_agree_with_one_period_at_a_time():
    # Periods missing different cells share one table of draws (a draw without a value is skipped);
    # each period's p-values must agree, within Monte-Carlo error, with that period run alone.
    from shapely.geometry import box

    geoms = [box(c, r, c + 1, r + 1) for r in range(12) for c in range(12)]
    import geopandas as gpd

    w = build_weights(gpd.GeoSeries(geoms, crs="EPSG:3857"), "queen")
    rng = np.random.default_rng(8)
    v = rng.normal(size=(144, 4))
    v[:30, :] += 2.0
    v[5, 0] = v[77, 1] = v[140, 2] = np.nan
    perms = 4999
    both = local_moran_panel(v, w, permutations=perms, seed=2)
    for t in range(4):
        alone = local_moran_panel(v[:, [t]], w, permutations=perms, seed=9)
        ok = ~np.isnan(alone.p[:, 0])
        np.testing.assert_array_equal(ok, ~np.isnan(both.p[:, t]))
        se = 2 * np.sqrt(np.clip(alone.p[ok, 0] / 2 * (1 - alone.p[ok, 0] / 2), 1e-4, None) / perms)
        assert np.all(np.abs(both.p[ok, t] - alone.p[ok, 0]) < 5 * np.sqrt(2) * se + 4 / perms)


# -- the synthetic tract panel ---------------------------------------------------------------
@pytest.fixture(scope="module")
def synthetic():
    s = make_panel()
    classes = classify(s.panel, scheme="quantile", k=5)
    ch = analyse_changes(s.panel, classes, ChangeOptions(spatial=False))
    cl = analyse_clusters(s.panel, None, ClusterOptions())
    return s, classes, ch, cl


def test_planted_jumps_credible_and_noise_is_not(synthetic):
    s, classes, ch, _ = synthetic
    j = ch.jumps
    landing = str(s.years[s.jump_year])
    jumped_into_top = 0
    for u in s.jumpers:
        rows = j[(j["unit"] == str(u)) & (j["to_period"] == landing)]
        if len(rows):
            jumped_into_top += 1
            assert (rows["credible"] == "true").all(), rows
        else:  # already in a high class the year before (noise lifted it): no class jump to test
            assert classes.codes[u, s.jump_year - 1] >= classes.codes[u, s.jump_year] - 1
    assert jumped_into_top >= 4
    others = np.ones(s.panel.n_units, dtype=bool)
    others[list(s.jumpers)] = False
    others[s.tiny] = False
    credible = ch.units["jump"].to_numpy()
    assert credible[others].mean() < 0.03
    # the class moves themselves are everywhere: that is the noise we must not report as change
    assert (ch.units["n_noise_moves"].to_numpy()[others] > 0).mean() > 0.5
    tiny = j[j["unit"] == str(s.tiny)]
    assert len(tiny) and (tiny["credible"] == "false").all() and not tiny["spike"].any()
    assert not ch.units["spike"].to_numpy()[s.tiny]


def test_first_to_last_moves_within_noise_are_not_shown_as_change(synthetic):
    # planted truth (our generator): the jumpers' rate is six-fold from jump_year to the last
    # year on 3,000-6,000 parcels; everyone else has the same true rate first and last (but for
    # a 3 % county-wide year factor), so their class moves first to last are count noise
    s, _, ch, _ = synthetic
    net, shown = ch.net_change, ch.credible_net_change
    jumpers = np.array(s.jumpers)
    moved_j = jumpers[np.nan_to_num(net[jumpers]) > 0]
    assert len(moved_j) >= 4 and (shown[moved_j] == net[moved_j]).all()
    assert ch.net_credible[moved_j].all()
    others = np.ones(s.panel.n_units, dtype=bool)
    others[jumpers] = False
    moved = others & (np.nan_to_num(net) != 0)
    assert moved.sum() > 200  # the noise a plain class-change map would show
    assert ch.net_credible[moved].mean() < 0.05
    assert ch.n_net_noise == int((moved & ~ch.net_credible).sum()) + int(
        ((np.nan_to_num(net) != 0) & ~others & ~ch.net_credible).sum()
    )
    assert shown[s.tiny] == 0 or np.isnan(shown[s.tiny])
    col = ch.units["net_change_credible"].to_numpy()
    assert set(col[moved]) <= {"true", "false"} and set(col[~(np.nan_to_num(net) != 0)]) == {""}


def test_hot_spot_found_every_year_and_tiny_tract_erases_nothing(synthetic):
    s, _, _, cl = synthetic
    hot = set(s.hot)
    interior = [i for i in s.hot if set(cl.weights.neighbours(i)) <= hot]
    assert len(interior) >= 10
    share = (cl.codes[interior] == 0).mean(axis=0)
    assert (share > 0.5).all(), share
    n_hh = (cl.codes == 0).sum(axis=0)
    assert n_hh[s.spike_year] >= 0.7 * np.median(n_hh), n_hh
    outside = (cl.codes == 0) & ~np.isin(np.arange(s.panel.n_units), s.hot)[:, None]
    assert (outside.sum(axis=0) <= 0.5 * len(s.hot)).all()
    assert cl.codes[s.tiny, s.spike_year] != 0
    assert not any(f.code == "clusters-none-despite-global" for f in cl.findings)


def test_old_behaviour_reachable_and_explained(synthetic):
    # The rates as mapped with permutation p-values (the old defaults) cannot reach the hot spot
    # under FDR over 1,600 tests; the run now says why instead of showing an empty map.
    s, _, _, _ = synthetic
    old = analyse_clusters(
        s.panel, None, ClusterOptions(standardise="none", p_value="permutation", permutations=99)
    )
    assert old.inputs == "values as mapped" and old.local.p_value == "permutation"
    empty = [f for f in old.findings if f.code == "clusters-none-despite-global"]
    n_hh = (old.codes == 0).sum(axis=0)
    assert len(empty) == sum(
        1
        for t, g in enumerate(old.global_stats)
        if g.p_permutation <= 0.05
        and g.I > 0
        and not ((old.codes[:, t] == 0) | (old.codes[:, t] == 1)).any()
    )
    assert all("permutations" in f.message for f in empty)
    # the case: one filing on ten parcels (rate 100 against a median near 5) is named
    spike = [f for f in empty if f.message.startswith(f"{s.years[s.spike_year]}:")]
    assert spike and str(s.tiny) in spike[0].units and "base 10" in spike[0].message
    assert n_hh.sum() <= ((s.panel.values > 0).sum())  # it ran; the count is whatever it is


def test_trends_use_smoothed_rates_and_say_so(synthetic):
    s, _, _, cl = synthetic
    assert cl.trend_input.startswith("EB smoothed")
    assert (cl.trends["series"] == cl.trend_input).all()
    assert "EB standardised" in cl.method_text


def test_without_counts_jumps_are_said_untested(synthetic, tmp_path):
    s, classes, _, _ = synthetic
    from dataclasses import replace

    from mapdrift.changes import write_changes

    rates_only = replace(s.panel, numerator=None, denominator=None)
    ch = analyse_changes(rates_only, classes, ChangeOptions(spatial=False))
    assert not ch.tested and "not tested against noise" in ch.noise_text
    assert (ch.jumps["credible"] == "").all()
    assert any(f.code == "changes-noise-test" and f.level == "warning" for f in ch.findings)
    write_changes(ch, tmp_path, units_table=False)
    first = (tmp_path / "jumps.csv").read_text(encoding="utf-8").splitlines()[0]
    assert first.startswith("# ") and "not tested against noise" in first
    # with ACS-style margins of error (90 %: se = moe / 1.645, US Census Bureau ACS handbook,
    # from memory) the jumps are tested after all
    moe = np.full(rates_only.values.shape, 1.645)
    ch = analyse_changes(rates_only, classes, ChangeOptions(spatial=False), moe=moe)
    assert ch.tested and "margins of error" in ch.noise_text
    d = (ch.jumps["value_after"] - ch.jumps["value_before"]).to_numpy()
    np.testing.assert_allclose(ch.jumps["p"], 2 * stats.norm.sf(np.abs(d) / np.sqrt(2)))


def test_moe_column_through_the_command(tmp_path, runner):
    # rates with a 90 % margin-of-error column (ACS style), read by the loader (--moe) and used
    # to test the jumps; the demo generator (our own invented county) gives the files
    import pandas as pd

    from mapdrift.cli import app
    from mapdrift.demo import generate
    from mapdrift.outputs import read_csv

    files = generate(tmp_path / "demo")
    t = pd.read_csv(files.table, dtype=str, keep_default_na=False)
    base = t["mortgaged_parcels"].astype(float)
    rate = pd.to_numeric(t["filings"], errors="coerce") / base * 1000
    moe = 1.645 * np.sqrt(rate.fillna(0) / base * 1000)  # a Poisson standard error, times 1.645
    table = tmp_path / "rates.csv"
    pd.DataFrame(
        {
            "unit_id": t["unit_id"],
            "year": t["year"],
            "rate": rate.round(4),
            "rate_moe": moe.round(4),
        }
    ).to_csv(table, index=False)
    out = tmp_path / "out"
    args = ["changes", str(files.geometry), str(table), "--layer", "units", "--id", "unit_id",
            "--period", "year", "--value", "rate", "--moe", "rate_moe", "--out", str(out),
            "--no-pictures", "--no-spatial"]  # fmt: skip
    res = runner.invoke(app, args)
    assert res.exit_code == 0, res.output
    assert "margins of error" in res.output
    jumps = read_csv(out / "jumps.csv", dtype={"unit": str})
    assert set(jumps["credible"].astype(str).str.lower()) <= {"true", "false"}
    assert (jumps["credible"].astype(str).str.lower() == "true").any()


def test_views_and_smoothing_combine_with_eb():
    # a per-period rescaling (relative-median) leaves the EB standardisation valid; a per-unit
    # one (index to a base year) would be undone by it, so the values are used as mapped
    from mapdrift.views import apply_view

    p = make_panel(n=300, hot=15, jumpers=2).panel
    rel = analyse_clusters(apply_view(p, "relative-median"), None, ClusterOptions())
    base = analyse_clusters(p, None, ClusterOptions())
    assert rel.inputs == base.inputs and rel.inputs.startswith("EB standardised")
    np.testing.assert_array_equal(rel.codes, base.codes)
    idx = analyse_clusters(apply_view(p, "index:2012"), None, ClusterOptions())
    assert idx.inputs == "values as mapped"
    assert any(f.code == "clusters-eb-not-combined" for f in idx.findings)
    sm = analyse_clusters(p, None, ClusterOptions(smooth="eb"))
    assert sm.trend_input == "the smoothed rates" and sm.inputs.startswith("EB standardised")


def test_poisson_change_p_for_counts_beyond_32_bits_matches_scipy_binom():
    # scipy.stats.binom (the reference) takes any count; the tails must not turn to NaN past
    # 2**31 events (an int limit of scipy.special.bdtr) nor drift (scipy 1.11's betainc was off
    # by up to 0.9 in p at 1e10 events, hence scipy >= 1.12 in pyproject.toml)
    n1 = np.array([1.07e9, 3.1e9, 2.2e9, 5e9])
    n2 = np.array([1.08e9, 3.0e9, 2.2e9 + 4e4, 5e9 + 1])
    b1 = np.array([1.0, 2.0, 1.0, 1.0])
    b2 = np.array([1.0, 2.0, 1.0, 1.0])
    p = poisson_change_p(n1, b1, n2, b2)
    q = b2 / (b1 + b2)
    n = n1 + n2
    ref = np.minimum(1, 2 * np.minimum(stats.binom.cdf(n2, n, q), stats.binom.sf(n2 - 1, n, q)))
    assert not np.isnan(p).any()
    assert np.allclose(p, ref, rtol=1e-9, atol=1e-300)
