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

from collections.abc import Iterator, Sequence
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

import numpy as np

from mapdrift._lazy import lazy_module
from mapdrift.clusters.multiple import adjust

if TYPE_CHECKING:  # imported on first use (see mapdrift._lazy)
    from scipy import special
else:
    special = lazy_module("scipy.special")

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


#: Elements in any temporary array of the pairwise computations (about 32 MB of float64):
#: memory stays bounded whatever the number of periods (pairs grow as periods squared).
BUDGET = 1 << 22


#: Slopes per chunk in the long-series walk: small enough to stay in the CPU cache.
_CHUNK = 1 << 18


def _row_blocks(n_rows: int, per_row: int) -> list[slice]:
    step = max(1, BUDGET // max(per_row, 1))
    return [slice(a, min(a + step, n_rows)) for a in range(0, n_rows, step)]


def _pair_sign_sum(x: np.ndarray) -> np.ndarray:
    """``S = sum_{i<j} sign(x_j - x_i)`` per row, NaN pairs skipped: walked by lag
    (``x[:, lag:] - x[:, :-lag]``) over blocks of rows, so memory stays within BUDGET."""
    n_u, T = x.shape
    S = np.zeros(n_u)
    for rows in _row_blocks(n_u, T):
        xb = x[rows]
        acc = np.zeros(xb.shape[0])
        for lag in range(1, T):
            d = np.sign(xb[:, lag:] - xb[:, :-lag])
            acc += np.nan_to_num(d, copy=False, nan=0.0).sum(axis=1)
        S[rows] = acc
    return S


#: From this many periods S is counted per row in O(T log T) (Kendall's tau) instead of by pairs.
_LONG = 1000


def _kendall_s(row: np.ndarray) -> float:
    """S of one row from Kendall's tau-b against time (scipy, O(T log T)): with distinct times
    ``S = tau_b * sqrt(n0 * (n0 - n2))``, n0 the pairs and n2 the pairs tied in value."""
    from scipy import stats  # imported only for long series (slow to import)

    v = row[~np.isnan(row)]
    n = len(v)
    _, counts = np.unique(v, return_counts=True)
    n0 = n * (n - 1) / 2
    n2 = float((counts * (counts - 1) / 2).sum())
    if n < 2 or n0 == n2:
        return 0.0
    tau = stats.kendalltau(np.arange(n), v).statistic
    return float(np.round(tau * np.sqrt(n0 * (n0 - n2))))


def _tie_sums(x: np.ndarray) -> np.ndarray:
    """``sum_g t_g(t_g-1)(2t_g+5)`` over the groups of equal values of each row (NaN skipped),
    by sorting: O(T log T) time and O(T) memory per row."""
    n_u, T = x.shape
    out = np.zeros(n_u)
    if T < 2 or n_u == 0:
        return out
    xs = np.sort(x, axis=1)  # NaN last; NaN never equals anything
    new_group = np.ones((n_u, T), dtype=bool)
    new_group[:, 1:] = xs[:, 1:] != xs[:, :-1]
    gid = np.cumsum(new_group.ravel()) - 1  # groups numbered across the flattened rows
    t = np.bincount(gid).astype(np.float64)
    row_of_group = np.repeat(np.arange(n_u), new_group.sum(axis=1))
    np.add.at(out, row_of_group, t * (t - 1) * (2 * t + 5))
    return out


def mann_kendall(values: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """``(S, Var S, Z, p)`` per row of ``values`` [units, periods] in period order; NaN skipped.

    Rows with fewer than 3 values get NaN. A row whose values are all equal has ``Var S = 0``:
    its ``Z`` and ``p`` are NaN (there is no trend to test), so it is never significant.
    Memory is bounded (:data:`BUDGET`): pairs are summed in blocks, tie groups found by sorting.
    """
    x = np.atleast_2d(np.asarray(values, dtype=np.float64))
    n = (~np.isnan(x)).sum(axis=1).astype(np.float64)
    if x.shape[1] >= _LONG:  # long series: per row, each in O(T log T)
        S = np.array([_kendall_s(r) for r in x], dtype=np.float64)
    else:
        S = _pair_sign_sum(x)
    ties = _tie_sums(x)
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
    skipped; NaN for rows with fewer than 2 values.

    Memory is bounded (:data:`BUDGET`): rows are taken in blocks, and a row whose pairs alone
    exceed the budget (thousands of periods) gets the exact median by :func:`_median_slope`.
    """
    x = np.atleast_2d(np.asarray(values, dtype=np.float64))
    t = np.asarray(times, dtype=np.float64)
    i, j = np.triu_indices(x.shape[1], k=1) if x.shape[1] * x.shape[1] <= 2 * BUDGET else ((), ())
    out = np.full(x.shape[0], np.nan)
    if len(i) == 0 and x.shape[1] > 1:  # very long series: one row at a time, exact
        for u in range(x.shape[0]):
            out[u] = _median_slope(x[u], t)
        return out
    i, j = np.asarray(i, dtype=np.intp), np.asarray(j, dtype=np.intp)
    dt = t[j] - t[i]
    keep = dt != 0
    i, j, dt = i[keep], j[keep], dt[keep]
    for rows in _row_blocks(x.shape[0], max(len(i), 1)):
        slopes = (x[rows][:, j] - x[rows][:, i]) / dt
        has = (~np.isnan(slopes)).any(axis=1)
        if has.any():
            block = out[rows]
            block[has] = np.nanmedian(slopes[has], axis=1)
            out[rows] = block
    return out


def _slope_chunks(x: np.ndarray, t: np.ndarray) -> Iterator[np.ndarray]:
    """Every pairwise slope (i < j, t_i != t_j) of one row, in chunks of at most BUDGET.

    With increasing times (periods are sorted) the pairs are walked by lag, ``x[lag:] -
    x[:-lag]``, into one reused buffer: contiguous numpy work, no masks. A chunk is only valid
    until the next one is produced.
    """
    T = len(x)
    if T < 2:
        return
    if not np.all(np.diff(t) > 0):
        step = max(1, BUDGET // T)
        for a in range(0, T - 1, step):
            b = min(a + step, T - 1)
            d = x[None, a + 1 :] - x[a:b, None]
            dt = t[None, a + 1 :] - t[a:b, None]
            keep = (np.arange(a + 1, T)[None, :] > np.arange(a, b)[:, None]) & (dt != 0)
            yield d[keep] / dt[keep]
        return
    size = min(max(min(_CHUNK, BUDGET), T), T * (T - 1) // 2)
    num, den = np.empty(size), np.empty(size)
    pos = 0
    for lag in range(1, T):
        n = T - lag
        if pos + n > size:
            yield np.divide(num[:pos], den[:pos], out=num[:pos])
            pos = 0
        np.subtract(x[lag:], x[:-lag], out=num[pos : pos + n])
        np.subtract(t[lag:], t[:-lag], out=den[pos : pos + n])
        pos += n
    if pos:
        yield np.divide(num[:pos], den[:pos], out=num[:pos])


def _median_slope(row: np.ndarray, times: np.ndarray) -> float:
    """Exact median of the pairwise slopes of one long row without holding them all.

    A seeded sample of pairs brackets the median between two of its quantiles; one pass over
    the slopes (in chunks) counts those below and above the bracket and those equal to the
    bracket's ends or to the sample median (ties are common in real data), and keeps only the
    few strictly inside. The median is then found by rank; if it fell outside, the bracket is
    widened and the pass repeated.
    """
    ok = ~np.isnan(row)
    x, t = row[ok], times[ok]
    k = len(x)
    if k < 2:
        return float("nan")
    rng = np.random.default_rng(0)
    n_s = min(1_000_000, k * k)
    a, b = rng.integers(0, k, n_s), rng.integers(0, k, n_s)
    a, b = np.minimum(a, b), np.maximum(a, b)
    keep = (a != b) & (t[b] != t[a])
    sample = np.sort((x[b[keep]] - x[a[keep]]) / (t[b[keep]] - t[a[keep]]))
    if len(sample) == 0:
        return float("nan")
    margin = max(int(4 * np.sqrt(len(sample))), 10)
    mid = len(sample) // 2
    for widen in (1, 8, 64, None):
        if widen is None:
            lo, hi = -np.inf, np.inf
        else:
            lo = sample[max(mid - margin * widen, 0)]
            hi = sample[min(mid + margin * widen, len(sample) - 1)]
        specials = sorted({float(lo), float(sample[mid]), float(hi)})
        below = above = m = 0
        ties = np.zeros(len(specials), dtype=np.int64)
        kept: list[np.ndarray] = []
        for s in _slope_chunks(x, t):
            m += len(s)
            lt, gt = s < lo, s > hi
            below += int(np.count_nonzero(lt))
            above += int(np.count_nonzero(gt))
            inner = s[~(lt | gt)]
            plain = np.ones(len(inner), dtype=bool)
            for n, v in enumerate(specials):
                eq = inner == v
                ties[n] += int(np.count_nonzero(eq))
                plain &= ~eq
            kept.append(inner[plain])
        if m == 0:
            return float("nan")
        ranks = [(m - 1) // 2, m // 2]
        if not (below <= ranks[0] and ranks[1] < m - above):
            continue
        values = np.sort(np.concatenate(kept)) if kept else np.empty(0)
        # the sorted slopes: [below] then, per special value v in order, the kept values
        # under v and v repeated ties[v] times, then the kept values over the last one, [above]
        segments: list[tuple[np.ndarray | float, int]] = []
        start = 0
        for n, v in enumerate(specials):
            stop = int(np.searchsorted(values, v))
            segments += [(values[start:stop], stop - start), (v, int(ties[n]))]
            start = stop
        segments.append((values[start:], len(values) - start))
        found = []
        for r in ranks:
            r -= below
            for seg, count in segments:
                if r < count:
                    found.append(float(seg) if np.isscalar(seg) else float(seg[r]))
                    break
                r -= count
        return float(np.mean(found))
    raise RuntimeError("median slope did not converge")  # pragma: no cover


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
