"""Markov summaries and homogeneity tests, checked against published worked examples."""

from __future__ import annotations

import numpy as np
import pytest
from scipy.stats import chi2_contingency

from mapdrift.changes import (
    first_passage_times,
    homogeneity_test,
    markov_summary,
    stationary_distribution,
)

# Land of Oz weather chain (rain, nice, snow): Kemeny, Snell & Thompson; Grinstead & Snell,
# Introduction to Probability, Example 11.1 (P); its fixed vector and mean first passage /
# recurrence times are worked in sections 11.3 and 11.5 (section numbers from memory).
# (giddy's Markov summaries are not a second check here: giddy needs esda < 2.9 and numba.)
OZ = np.array([[1 / 2, 1 / 4, 1 / 4], [1 / 2, 0, 1 / 2], [1 / 4, 1 / 4, 1 / 2]])


def test_land_of_oz_stationary():
    # Grinstead & Snell, Land of Oz fixed vector: w = (2/5, 1/5, 2/5)
    pi, per_closed = stationary_distribution(OZ)
    np.testing.assert_allclose(pi, [2 / 5, 1 / 5, 2 / 5], atol=1e-12)
    assert len(per_closed) == 1


def test_land_of_oz_first_passage_and_recurrence():
    # Grinstead & Snell, Land of Oz: M off-diagonal [[-,4,10/3],[8/3,-,8/3],[10/3,4,-]];
    # mean recurrence times r = (5/2, 5, 5/2) = 1/w
    M = first_passage_times(OZ)
    expected = np.array([[5 / 2, 4, 10 / 3], [8 / 3, 5, 8 / 3], [10 / 3, 4, 5 / 2]])
    np.testing.assert_allclose(M, expected, atol=1e-12)


def test_land_of_oz_from_counts():
    # same chain reached through counts: 4 x P is a matrix of whole transition counts
    s = markov_summary(OZ * 4, ("rain", "nice", "snow"))
    assert s.ergodic
    np.testing.assert_allclose(s.stationary, [0.4, 0.2, 0.4], atol=1e-12)
    np.testing.assert_allclose(np.diag(s.first_passage), [2.5, 5, 2.5], atol=1e-12)
    # mobility 1 - p_ii per class; Shorrocks (1978) index (k - trace P) / (k - 1)
    np.testing.assert_allclose(s.mobility, [0.5, 1.0, 0.5])
    assert s.shorrocks == pytest.approx((3 - 1.0) / 2)
    d = s.to_dict()
    assert d["first_passage_times"][0][1] == pytest.approx(4)


def test_first_passage_matches_fundamental_matrix():
    # Grinstead & Snell, section 11.5: m_ij = (z_jj - z_ij) / w_j with the fundamental matrix
    # Z = (I - P + W)^-1 (theorem number from memory)
    rng = np.random.default_rng(7)
    P = rng.random((5, 5)) + 0.05
    P /= P.sum(axis=1, keepdims=True)
    pi, _ = stationary_distribution(P)
    Z = np.linalg.inv(np.eye(5) - P + np.outer(np.ones(5), pi))
    M_ref = (np.diag(Z)[None, :] - Z) / pi[None, :]
    M = first_passage_times(P)
    off = ~np.eye(5, dtype=bool)
    np.testing.assert_allclose(M[off], M_ref[off], rtol=1e-10)
    np.testing.assert_allclose(np.diag(M), 1 / pi, rtol=1e-10)


def test_reducible_chain():
    # class 0 absorbing, class 1 leaves with probability 1/2 each step: passage time 1 -> 0 is
    # geometric with mean 2; 0 -> 1 never happens (common practice, no source)
    counts = np.array([[10, 0], [5, 5]])
    s = markov_summary(counts)
    assert not s.ergodic
    np.testing.assert_allclose(s.stationary, [1.0, 0.0])
    assert s.first_passage[1, 0] == pytest.approx(2.0)
    assert np.isinf(s.first_passage[0, 1])
    assert s.first_passage[0, 0] == pytest.approx(1.0)
    assert np.isinf(s.first_passage[1, 1])  # a transient class may never come back
    assert any("reducible" in n for n in s.notes)
    assert s.to_dict()["first_passage_times"][0][1] is None


def test_two_closed_classes_and_empty_rows():
    # classes 0 and 1 never mix: two closed classes, no unique stationary distribution
    s = markov_summary(np.array([[4, 0, 0], [0, 3, 0], [0, 0, 0]]))
    assert s.stationary is None
    assert len(s.stationary_by_closed_class) == 2
    assert s.left_out == (2,)
    assert np.isnan(s.mobility[2])
    # class 2 is entered but never left: treated as absorbing, with a note
    s = markov_summary(np.array([[4, 1, 1], [1, 3, 1], [0, 0, 0]]))
    assert s.absorbing_assumed == (2,)
    np.testing.assert_allclose(s.stationary, [0, 0, 1], atol=1e-12)
    assert any("absorbing" in n for n in s.notes)


def test_giddy_small_categorical_example():
    # giddy.markov.Markov docstring (PySAL): sequences b-a-c, c-c-a, c-b-c, a-a-b, a-b-c
    # give p = [[.25,.5,.25],[1/3,0,2/3],[1/3,1/3,1/3]], steady state (.30769,.28846,.40385)
    seq = np.array([[1, 0, 2], [2, 2, 0], [2, 1, 2], [0, 0, 1], [0, 1, 2]])
    from mapdrift.changes import count_transitions

    t = count_transitions(seq, 3, periods=[1, 2, 3])
    np.testing.assert_allclose(
        t.probabilities, [[0.25, 0.5, 0.25], [1 / 3, 0, 2 / 3], [1 / 3, 1 / 3, 1 / 3]]
    )
    s = markov_summary(t.counts)
    np.testing.assert_allclose(s.stationary, [0.30769231, 0.28846154, 0.40384615], atol=1e-8)


def test_kullback_table_9_2():
    # Kullback, Kupperman & Ku (1962) Table 9.2 as reproduced in giddy.markov.kullback's
    # docstring: conditional homogeneity statistic 160.961 (the likelihood-ratio G). Their df
    # is r(s-1)(r-1) = 30; we count over non-empty columns: row 4 never goes to class 1 in
    # either stratum, so our df is 29.
    s1 = [[22, 11, 24, 2, 2, 7], [5, 23, 15, 3, 42, 6], [4, 21, 190, 25, 20, 34],
          [0, 2, 14, 56, 14, 28], [32, 15, 20, 10, 56, 14], [5, 22, 31, 18, 13, 134]]  # fmt: skip
    s2 = [[3, 6, 9, 3, 0, 8], [1, 9, 3, 12, 27, 5], [2, 9, 208, 32, 5, 18],
          [0, 14, 32, 108, 40, 40], [22, 14, 9, 26, 224, 14], [1, 5, 13, 53, 13, 116]]  # fmt: skip
    t = homogeneity_test(np.array([s1, s2]))
    assert f"{t.LR:8.3f}" == " 160.961"
    assert t.df == 29
    assert t.p_LR < 1e-10


def test_homogeneity_rows_match_scipy_contingency():
    # each from-class row is a regimes x to-classes homogeneity table: scipy's Pearson and
    # log-likelihood (G) contingency statistics are the reference
    rng = np.random.default_rng(3)
    F = rng.integers(0, 30, size=(4, 3, 3))
    F[2, 1, :] = 0  # an empty row in one regime
    F[:, 0, 2] = 0  # a to-class never reached from class 0
    t = homogeneity_test(F)
    q = lr = 0.0
    df = 0
    for i in range(3):
        table = F[:, i, :]
        table = table[table.sum(axis=1) > 0][:, table.sum(axis=0) > 0]
        r = chi2_contingency(table, correction=False)
        g = chi2_contingency(table, correction=False, lambda_="log-likelihood")
        q, lr, df = q + r.statistic, lr + g.statistic, df + r.dof
    np.testing.assert_allclose([t.Q, t.LR], [q, lr])
    assert t.df == df


def _simulate(P_list, n_units, rng):
    """Class sequences for n_units following chain P_list[s] in step s."""
    k = P_list[0].shape[0]
    codes = np.zeros((n_units, len(P_list) + 1), dtype=np.int64)
    codes[:, 0] = rng.integers(0, k, n_units)
    for s, P in enumerate(P_list):
        cum = P.cumsum(axis=1)
        u = rng.random(n_units)
        codes[:, s + 1] = (u[:, None] > cum[codes[:, s]]).sum(axis=1)
    return codes


def test_homogeneity_rejects_two_chains_accepts_one():
    from mapdrift.changes import count_transitions

    rng = np.random.default_rng(20240601)
    A = np.array([[0.8, 0.15, 0.05], [0.1, 0.8, 0.1], [0.05, 0.15, 0.8]])
    B = np.array([[0.5, 0.3, 0.2], [0.3, 0.4, 0.3], [0.2, 0.3, 0.5]])
    periods = list(range(2000, 2009))
    same = _simulate([A] * 8, 400, rng)
    t = homogeneity_test(count_transitions(same, 3, periods=periods).by_step)
    assert t.df == 7 * 3 * 2  # (steps - 1)(k - 1) per row, all rows full
    assert t.p_LR > 0.05 and t.p_Q > 0.05
    halves = _simulate([A] * 4 + [B] * 4, 400, rng)
    t = homogeneity_test(count_transitions(halves, 3, periods=periods).by_step)
    assert t.p_LR < 1e-6 and t.p_Q < 1e-6


def test_homogeneity_of_exactly_proportional_regimes_is_p_one():
    # the same row shares in every regime: both statistics are 0 (up to rounding, which can
    # leave -1e-14) and chi2.sf(0, df) = 1 (scipy.stats, the reference)
    from scipy.stats import chi2

    base = np.array([[7.0, 3.0, 1.0], [2.0, 9.0, 4.0], [1.0, 2.0, 11.0]])
    for scale in (1.0, 3.0, 7.0 / 3.0, 1e-3 + 1.0, 13.0):
        res = homogeneity_test(np.stack([base, base * scale, base * 0.1 * scale]))
        assert res.p_Q == pytest.approx(float(chi2.sf(max(res.Q, 0.0), res.df)))
        assert res.p_LR == pytest.approx(1.0) and res.p_Q == pytest.approx(1.0)
