"""Local statistics per period: local Moran (Anselin 1995) and Getis-Ord Gi*.

Local Moran convention (Anselin 1995, eq. 7): ``I_i = z_i * sum_j w_ij z_j / m2`` with ``z``
the deviations from the period mean and ``m2 = sum_i z_i^2 / n``, W row-standardised. With this
convention the mean of the ``I_i`` over units with neighbours equals the global Moran's I.
(esda's ``Moran_Local.Is`` divides by ``sum z^2 / (n-1)``, i.e. is ``(n-1)/n`` times ours; the
p-values do not depend on the scaling.)

Inference by conditional permutation: unit ``i`` keeps its value and its ``k_i`` neighbours are
replaced by ``k_i`` values drawn without replacement from the other ``n-1`` units. As in esda,
one table of random draws ``[permutations, max k]`` is drawn from the seed and shared by all
units (unit ``i`` skips itself); we additionally share it across all periods that have the same
units with values, so a long panel draws once and evaluates every period in the same pass.
The p-value is two-sided: ``2 * (min(#{sim >= obs}, #{sim <= obs}) + 1) / (permutations + 1)``
capped at 1 (esda's default "directed" p-value is about half of this).

Missing values: per period, units without a value are dropped and the weights re-standardised
over the rest; they get NaN statistics. A unit whose neighbours all lack a value (or that has
no neighbour at all, e.g. an excluded island) is *isolated* in that period: NaN statistic.

Gi* (Getis & Ord 1992; z-score of Ord & Getis 1995) uses binary weights from the neighbour
pattern plus the unit itself, with the analytical z and two-sided normal p-value.
"""

from __future__ import annotations

import logging
from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp
from scipy import special  # not scipy.stats: its import costs 1-2 s at start-up

from mapdrift.clusters._groups import period_groups
from mapdrift.weights import SpatialWeights

__all__ = ["LocalResult", "draw_neighbour_sets", "gi_star_panel", "local_moran_panel"]

log = logging.getLogger(__name__)

#: Elements per block (units x permutations x max(periods, neighbours)); ~16 MB of float32.
_BLOCK = 4_000_000


@dataclass(frozen=True, eq=False)
class LocalResult:
    """Per unit and period ``[n_units, n_periods]``: statistic, p-value, standardised value and
    lag (both deviations from the period mean, divided by its standard deviation), and which
    cells were isolated (value present, no neighbour with a value). NaN where no statistic."""

    stat: np.ndarray
    p: np.ndarray
    z: np.ndarray
    lag: np.ndarray
    isolated: np.ndarray
    statistic: str
    permutations: int


def draw_neighbour_sets(n: int, k_max: int, permutations: int, seed: object) -> np.ndarray:
    """``[permutations, k_max]`` int indices in ``0..n-2``, distinct within each row.

    Row ``r`` is one random draw of up to ``k_max`` neighbours from the ``n-1`` other units;
    unit ``i`` maps an index ``j >= i`` to ``j + 1`` to skip itself.
    """
    rng = np.random.default_rng(seed)
    k_max = min(k_max, n - 1)
    out = np.empty((permutations, k_max), dtype=np.int64)
    for r in range(permutations):
        out[r] = rng.choice(n - 1, size=k_max, replace=False)
    return out


def _standardise(Y: np.ndarray) -> np.ndarray:
    Z = Y - Y.mean(axis=0)
    sd = Z.std(axis=0)
    with np.errstate(invalid="ignore", divide="ignore"):
        return Z / np.where(sd > 0, sd, np.nan)


def _conditional_counts(
    W: sp.csr_matrix, Z: np.ndarray, lag: np.ndarray, draws: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """Per unit and column: how many permuted ``z_i * lag`` are >= and <= the observed one.

    The permuted lags are accumulated in float32 one neighbour slot at a time (a row gather of
    ``[units, permutations, periods]`` per slot), which is several times faster than gathering
    the full ``[units, permutations, k, periods]`` block; float32 only matters for near-ties,
    which are Monte-Carlo noise anyway.
    """
    n, T = Z.shape
    perms = draws.shape[0]
    card = np.diff(W.indptr)
    ge = np.zeros((n, T), dtype=np.int64)
    le = np.zeros((n, T), dtype=np.int64)
    Z32 = np.ascontiguousarray(Z, dtype=np.float32)
    obs = (Z * lag).astype(np.float32)
    for k in np.unique(card):
        if k == 0:
            continue
        units = np.flatnonzero(card == k)
        # weights of these units' rows, [u, k] (the order within a row does not matter: the
        # neighbours are replaced by random draws)
        wk = W.data[W.indptr[units][:, None] + np.arange(k)].astype(np.float32)
        equal = bool(np.all(wk == wk[:, :1]))
        dk = draws[:, :k]
        b = max(1, _BLOCK // (perms * max(T, k)))
        for s in range(0, len(units), b):
            u = units[s : s + b]
            w = wk[s : s + b]
            idx = dk[None, :, :] + (dk[None, :, :] >= u[:, None, None])  # [b, P, k]
            acc = Z32[idx[:, :, 0]]  # [b, P, T]
            if not equal:
                acc *= w[:, 0, None, None]
            for j in range(1, k):
                g = Z32[idx[:, :, j]]
                if not equal:
                    g *= w[:, j, None, None]
                acc += g
            if equal:
                acc *= w[:, 0, None, None]
            acc *= Z32[u][:, None, :]  # z_i * permuted lag, [b, P, T]
            o = obs[u][:, None, :]
            ge[u] = (acc >= o).sum(axis=1)
            le[u] = (acc <= o).sum(axis=1)
    return ge, le


def local_moran_panel(
    values: np.ndarray,
    weights: SpatialWeights,
    *,
    permutations: int = 999,
    seed: int = 0,
) -> LocalResult:
    """Local Moran's I (Anselin 1995 scaling) with conditional-permutation p-values per period.

    ``values`` is ``[units, periods]`` with NaN = missing. Returns NaN statistic and p where a
    unit has no value, no neighbour with a value (``isolated`` True), or the period has fewer
    than 3 units with values or no variation. ``permutations=0`` gives NaN p-values.
    """
    values = np.asarray(values, dtype=np.float64)
    n_u, n_t = values.shape
    stat = np.full((n_u, n_t), np.nan)
    pval = np.full((n_u, n_t), np.nan)
    zout = np.full((n_u, n_t), np.nan)
    lout = np.full((n_u, n_t), np.nan)
    isolated = np.zeros((n_u, n_t), dtype=bool)
    for gi, (mask, cols) in enumerate(period_groups(values)):
        idx = np.flatnonzero(mask)
        n = len(idx)
        if n == 0:
            continue
        W = weights.subset(mask)
        card = np.diff(W.indptr)
        iso = card == 0
        isolated[np.ix_(idx[iso], cols)] = True
        if n < 3:
            continue
        Z = _standardise(values[np.ix_(idx, cols)])
        lag = W @ Z
        lag[iso] = np.nan
        # Anselin: I_i = z_i * lag_i / m2, and m2 = 1 for standardised z.
        I = Z * lag  # noqa: E741
        zout[np.ix_(idx, cols)] = Z
        lout[np.ix_(idx, cols)] = lag
        stat[np.ix_(idx, cols)] = I
        if permutations > 0 and card.max() > 0:
            draws = draw_neighbour_sets(n, int(card.max()), permutations, [seed, gi])
            ok_cols = ~np.isnan(Z).all(axis=0)
            Zc = np.nan_to_num(Z[:, ok_cols])
            ge, le = _conditional_counts(W, Zc, np.nan_to_num(lag[:, ok_cols]), draws)
            p = np.minimum(1.0, 2.0 * (np.minimum(ge, le) + 1.0) / (permutations + 1.0))
            p[iso] = np.nan
            full = np.full((n, len(cols)), np.nan)
            full[:, ok_cols] = p
            pval[np.ix_(idx, cols)] = full
    return LocalResult(stat, pval, zout, lout, isolated, "local-moran", permutations)


def gi_star_panel(values: np.ndarray, weights: SpatialWeights) -> LocalResult:
    """Getis-Ord Gi* z-scores per period (binary weights of the neighbour pattern plus self).

    ``z_i = (sum_j w_ij x_j - xbar W_i) / (s sqrt((n S1_i - W_i^2) / (n - 1)))`` over the ``n``
    units with a value, ``W_i = sum_j w_ij``, ``S1_i = sum_j w_ij^2``, ``s`` the standard
    deviation with divisor ``n`` (Ord & Getis 1995). ``stat`` holds the z-score, ``p`` its
    two-sided normal p-value; NaN where the unit has no value or (isolated) no neighbour.
    """
    values = np.asarray(values, dtype=np.float64)
    n_u, n_t = values.shape
    stat = np.full((n_u, n_t), np.nan)
    pval = np.full((n_u, n_t), np.nan)
    zout = np.full((n_u, n_t), np.nan)
    lout = np.full((n_u, n_t), np.nan)
    isolated = np.zeros((n_u, n_t), dtype=bool)
    for mask, cols in period_groups(values):
        idx = np.flatnonzero(mask)
        n = len(idx)
        if n == 0:
            continue
        B = weights.subset(mask)
        B.data[:] = 1.0
        iso = np.diff(B.indptr) == 0
        isolated[np.ix_(idx[iso], cols)] = True
        if n < 3:
            continue
        Bs = (B + sp.identity(n, format="csr")).tocsr()
        X = values[np.ix_(idx, cols)]
        xbar = X.mean(axis=0)
        s = X.std(axis=0)
        Wi = np.asarray(Bs.sum(axis=1)).ravel()[:, None]
        S1 = Wi  # binary weights: sum of squares = sum
        with np.errstate(invalid="ignore", divide="ignore"):
            z = (Bs @ X - xbar * Wi) / (s * np.sqrt((n * S1 - Wi**2) / (n - 1)))
        z[iso] = np.nan
        Z = _standardise(X)
        lag = B @ Z / np.maximum(np.diff(B.indptr), 1)[:, None]
        lag[iso] = np.nan
        stat[np.ix_(idx, cols)] = z
        pval[np.ix_(idx, cols)] = 2 * special.ndtr(-np.abs(z))
        zout[np.ix_(idx, cols)] = Z
        lout[np.ix_(idx, cols)] = lag
    return LocalResult(stat, pval, zout, lout, isolated, "gi-star", 0)
