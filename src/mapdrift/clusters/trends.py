"""Trend per unit over the periods: Mann-Kendall test and Theil-Sen slope.

Mann-Kendall (Mann 1945, Kendall 1975; as in Gilbert 1987, ch. 16): ``S = sum_{i<j}
sign(x_j - x_i)`` over the unit's periods with a value, variance with the tie correction
``[n(n-1)(2n+5) - sum_g t_g(t_g-1)(2t_g+5)] / 18``, ``Z = (S - sign(S)) / sqrt(Var S)``
(continuity correction) and a two-sided normal p-value. Theil-Sen slope (Sen 1968): the median
of the pairwise slopes ``(x_j - x_i) / (t_j - t_i)``, in value units per time unit of the
periods (per year for yearly periods; per position otherwise), equal to
``scipy.stats.theilslopes`` (checked in the tests).

Missing values (NaN) are skipped per unit; a unit with fewer than ``min_periods`` values gets
NaN for every statistic (direction ``too few periods``). Both are vectorised over units.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
from scipy import special  # not scipy.stats: its import costs 1-2 s at start-up

from mapdrift.clusters.multiple import adjust

__all__ = ["TrendResult", "mann_kendall", "period_times", "theil_sen", "trends"]

TREND_LABELS: tuple[str, ...] = ("falling", "no significant trend", "rising", "too few periods")


def period_times(periods: Sequence[Any]) -> np.ndarray:
    """Numeric time of each period: int years as they are, pandas Periods by ordinal, dates by
    year fraction, anything else by position (0, 1, 2, ...)."""
    out = []
    for i, p in enumerate(periods):
        if isinstance(p, int | np.integer | float | np.floating) and not isinstance(p, bool):
            out.append(float(p))
        elif hasattr(p, "ordinal"):
            out.append(float(p.ordinal))
        elif hasattr(p, "year") and hasattr(p, "dayofyear"):
            out.append(p.year + (p.dayofyear - 1) / 365.25)
        else:
            out.append(float(i))
    return np.asarray(out, dtype=np.float64)


def mann_kendall(values: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """``(S, Var S, Z, p)`` per row of ``values`` [units, periods] in period order; NaN skipped.

    Rows with fewer than 3 values get NaN.
    """
    x = np.atleast_2d(np.asarray(values, dtype=np.float64))
    valid = ~np.isnan(x)
    n = valid.sum(axis=1).astype(np.float64)
    i, j = np.triu_indices(x.shape[1], k=1)
    both = valid[:, i] & valid[:, j]
    d = np.where(both, np.sign(np.nan_to_num(x[:, j]) - np.nan_to_num(x[:, i])), 0.0)
    S = d.sum(axis=1)
    # tie groups: with c_a = number of other values equal to value a,
    # sum_g t(t-1) = sum_a c_a and sum_g t(t-1)(t-2) = sum_a c_a(c_a-1).
    eq = (x[:, :, None] == x[:, None, :]) & valid[:, :, None] & valid[:, None, :]
    c = eq.sum(axis=2) - valid  # minus self
    ties = 2.0 * (c * (c - 1)).sum(axis=1) + 9.0 * c.sum(axis=1)
    var = (n * (n - 1) * (2 * n + 5) - ties) / 18.0
    with np.errstate(invalid="ignore", divide="ignore"):
        Z = np.where(var > 0, (S - np.sign(S)) / np.sqrt(var), np.nan)
    p = 2 * special.ndtr(-np.abs(Z))
    short = n < 3
    for a in (S, var, Z, p):
        a[short] = np.nan
    return S, var, Z, p


def theil_sen(values: np.ndarray, times: np.ndarray) -> np.ndarray:
    """Median pairwise slope per row of ``values`` [units, periods] against ``times``; NaN
    skipped; NaN for rows with fewer than 2 values."""
    x = np.atleast_2d(np.asarray(values, dtype=np.float64))
    t = np.asarray(times, dtype=np.float64)
    i, j = np.triu_indices(x.shape[1], k=1)
    dt = t[j] - t[i]
    keep = dt != 0
    i, j, dt = i[keep], j[keep], dt[keep]
    slopes = (x[:, j] - x[:, i]) / dt
    out = np.full(x.shape[0], np.nan)
    has = (~np.isnan(slopes)).any(axis=1)
    if has.any():
        out[has] = np.nanmedian(slopes[has], axis=1)
    return out


@dataclass(frozen=True, eq=False)
class TrendResult:
    """Per unit: Mann-Kendall S, Var S, Z, p, adjusted p, Theil-Sen slope, significance and a
    direction label (one of ``TREND_LABELS``)."""

    n_values: np.ndarray
    S: np.ndarray
    var_s: np.ndarray
    z: np.ndarray
    p: np.ndarray
    p_adjusted: np.ndarray
    slope: np.ndarray
    significant: np.ndarray
    direction: tuple[str, ...]
    correction: str
    alpha: float


def trends(
    values: np.ndarray,
    times: np.ndarray,
    *,
    alpha: float = 0.05,
    correction: str = "fdr",
    min_periods: int = 4,
) -> TrendResult:
    """Mann-Kendall + Theil-Sen per unit; p-values corrected across units with ``correction``."""
    x = np.asarray(values, dtype=np.float64)
    n_valid = (~np.isnan(x)).sum(axis=1)
    S, var, Z, p = mann_kendall(x)
    slope = theil_sen(x, times)
    short = n_valid < max(min_periods, 3)
    for a in (S, var, Z, p, slope):
        a[short] = np.nan
    p_adj = adjust(p, correction)
    with np.errstate(invalid="ignore"):
        sig = (p_adj <= alpha) & ~np.isnan(p_adj)
    direction = tuple(
        "too few periods"
        if short[u]
        else ("rising" if S[u] > 0 else "falling")
        if sig[u]
        else "no significant trend"
        for u in range(len(x))
    )
    return TrendResult(n_valid, S, var, Z, p, p_adj, slope, sig, direction, correction, alpha)
