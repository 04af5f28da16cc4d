"""Trends over long series: memory stays bounded (blocked pairs, sorted ties, exact median by
selection) and the results equal the reference libraries.

References: ``scipy.stats.theilslopes`` (Sen 1968) for the slope; ``scipy.stats.kendalltau``
(tau-b) for S, since with distinct times S = tau_b * sqrt(n0 * (n0 - n2)), n0 = n(n-1)/2 and
n2 the tied pairs in the values (Kendall 1975; common practice).
"""

from __future__ import annotations

import tracemalloc

import numpy as np
import pytest
from scipy import stats

from mapdrift.clusters import trends as tr


def _series(n_units: int, n_periods: int, seed: int = 3) -> np.ndarray:
    rng = np.random.default_rng(seed)  # our own synthetic series with ties and gaps
    x = np.round(rng.normal(size=(n_units, n_periods)).cumsum(axis=1), 1)
    x[rng.random(x.shape) < 0.05] = np.nan
    x[0] = 2.0  # a constant row: every slope 0, every value tied
    return x


def _reference(x: np.ndarray, t: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    slope, S = [], []
    for row in x:
        ok = ~np.isnan(row)
        slope.append(stats.theilslopes(row[ok], t[ok])[0])
        n0 = ok.sum() * (ok.sum() - 1) / 2
        _, counts = np.unique(row[ok], return_counts=True)
        n2 = (counts * (counts - 1) / 2).sum()
        tau = stats.kendalltau(t[ok], row[ok]).statistic
        S.append(0.0 if n0 == n2 else tau * np.sqrt(n0 * (n0 - n2)))
    return np.asarray(slope), np.asarray(S)


@pytest.mark.parametrize("budget", [tr.BUDGET, 64])  # 64: every row takes the long-series path
def test_blocked_results_equal_scipy(monkeypatch, budget):
    monkeypatch.setattr(tr, "BUDGET", budget)
    x = _series(6, 90)
    t = np.arange(2000.0, 2090.0)
    slope, S = _reference(x, t)
    assert np.allclose(tr.theil_sen(x, t), slope)
    assert np.allclose(tr.mann_kendall(x)[0], S)


def test_long_rows_count_s_like_the_pairs():
    # from _LONG periods on, S comes from Kendall's tau per row; both ways are exact
    x = _series(3, tr._LONG + 200)
    assert np.array_equal(tr.mann_kendall(x)[0], tr._pair_sign_sum(x))


def test_ten_thousand_periods_in_bounded_memory():
    # the audit's case was 16 units x 10,000 periods (23 GB); 3 units keep the test short
    x = _series(3, 10_000)
    t = np.arange(10_000.0)
    tracemalloc.start()
    res = tr.trends(x, t)
    peak = tracemalloc.get_traced_memory()[1]
    tracemalloc.stop()
    assert peak < 400e6  # all pairwise differences would need 3 x 10,000^2 x 8 B = 2.4 GB
    assert res.slope[0] == 0 and res.direction[0] == "no significant trend"
    assert np.isfinite(res.slope[1:]).all() and np.isfinite(res.p[1:]).all()
    # exactness of the long-series path is checked against scipy above (budget 64)
