"""Kendall's tau-b and its p-value (mapdrift.changes.kendall) against scipy.stats.kendalltau.

scipy is the reference library (its default ``method="auto"``: exact p without ties for
n <= 33, else the tie-corrected normal approximation); the hand example is Kendall's own
definition (one discordant pair of six).
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.stats import kendalltau

from mapdrift.changes.kendall import _inversions, kendall_tau_b


def _same(x, y):
    ref = kendalltau(x, y)
    tau, p = kendall_tau_b(np.asarray(x, float), np.asarray(y, float))
    if np.isnan(ref.statistic):
        assert np.isnan(tau) and np.isnan(p)
        return
    assert tau == pytest.approx(float(ref.statistic), abs=1e-12)
    assert p == pytest.approx(float(ref.pvalue), rel=1e-9, abs=1e-15)


def test_hand_example():
    # 4 items, pairs (2, 3) discordant: tau = (5 - 1) / 6; P(D <= 1) = 4 / 24 over the 24 orders
    tau, p = kendall_tau_b(np.array([1.0, 2, 3, 4]), np.array([1.0, 3, 2, 4]))
    assert tau == pytest.approx(4 / 6)
    assert p == pytest.approx(8 / 24)


@pytest.mark.parametrize("n", [3, 4, 5, 8, 13, 21, 33])
def test_exact_p_without_ties_matches_scipy(n):
    rng = np.random.default_rng(n)
    for _ in range(30):
        x = rng.permutation(n).astype(float)
        y = x + rng.normal(scale=rng.uniform(0.1, 3) * n / 4, size=n)
        _same(x, y)
    _same(np.arange(n), np.arange(n))  # every pair concordant
    _same(np.arange(n), np.arange(n)[::-1])  # every pair discordant


@pytest.mark.parametrize("n", [34, 60, 500, 5000])
def test_normal_p_with_and_without_ties_matches_scipy(n):
    rng = np.random.default_rng(n)
    for trial in range(10):
        x = rng.normal(size=n)
        y = x + rng.normal(scale=1 + trial, size=n)
        if trial % 2:
            x, y = np.round(x * 2), np.round(y)  # many ties, and ties in both
        _same(x, y)
    # one discordant pair beyond n = 33 still takes the exact p, as scipy does
    y = np.arange(n, dtype=float)
    y[[3, 4]] = y[[4, 3]]
    _same(np.arange(n), y)


def test_small_and_tied_samples():
    _same([1.0, 2.0, 3.0], [1.0, 1.0, 1.0])  # constant: NaN
    _same([1.0, 1.0, 2.0], [3.0, 2.0, 2.0])
    _same([0.0, 1.0], [1.0, 0.0])
    rng = np.random.default_rng(5)
    for n in (3, 5, 10, 33):
        x, y = rng.integers(0, 3, n), rng.integers(0, 4, n)
        _same(x, y)


def test_inversions_count_every_discordant_pair():
    # brute force over all pairs (common practice, no source)
    rng = np.random.default_rng(1)
    for n in (1, 2, 7, 64, 300):
        y = rng.integers(0, max(n // 3, 1), n)
        brute = sum(int(y[i] > y[j]) for i in range(n) for j in range(i + 1, n))
        assert _inversions(y.astype(np.int64)) == brute
