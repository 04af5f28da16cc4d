"""Local statistics per period: local Moran (Anselin 1995) and Getis-Ord Gi*.

Local Moran convention (Anselin 1995, eq. 7): ``I_i = z_i * sum_j w_ij z_j / m2`` with ``z``
the deviations from the period mean and ``m2 = sum_i z_i^2 / n``, W row-standardised. With this
convention the mean of the ``I_i`` over units with neighbours equals the global Moran's I.
(esda's ``Moran_Local.Is`` divides by ``sum z^2 / (n-1)``, i.e. is ``(n-1)/n`` times ours; the
p-values do not depend on the scaling.)

Inference under conditional randomisation: unit ``i`` keeps its value and its ``k_i``
neighbours get ``k_i`` values drawn without replacement from the other ``n-1`` units. Two ways
to get a p-value (``p_value``):

- ``normal`` (the cluster step's default): the normal approximation from the mean and variance
  of that conditional permutation distribution -- the quantity esda reports as ``p_z_sim``,
  except that the two moments are computed exactly instead of estimated from draws. With
  ``mu_i = -z_i / (n-1)`` and ``s_i^2 = (n - z_i^2) / (n-1) - mu_i^2`` the mean and variance
  of the other units' values, a sample of ``k_i`` of the ``N = n-1`` values weighted by
  ``w_ij`` (row sum 1) has mean ``mu_i`` and variance ``s_i^2 (N S2_i - 1) / (N - 1)``,
  ``S2_i = sum_j w_ij^2`` (sampling without replacement; Cochran 1977, th. 2.2, with weights
  as in Sokal, Oden & Thomson 1998 -- from memory). ``z = (lag_i - mu_i) / sd`` and the
  two-sided ``p = 2 * (1 - Phi(|z|))``, which can go below the permutation floor
  ``2 / (permutations + 1)``; no random draws are needed, so it is also fast.
- ``permutation``: ``permutations`` random draws. As in esda, one table of draws
  ``[permutations, max k]`` is drawn from the seed and shared by all units (unit ``i`` skips
  itself); we share it across all periods too, also when periods miss different cells (a
  draw that lands on a unit without a value in that period is skipped and the next one is
  used, so every period still gets a uniform draw from its own units). The two-sided
  p-value is ``2 * (min(#{sim >= obs}, #{sim <= obs}) + 1) / (permutations + 1)`` capped at 1
  (esda's default "directed" p-value is about half of this). Permuted lags are summed in
  float64 and compared with a tolerance of ``1e-9``, so exact ties (a unit with one or two
  neighbours, tied data values) count as ties, on both sides.

Missing values: per period, units without a value are dropped and the weights re-standardised
over the rest; they get NaN statistics. A unit whose neighbours all lack a value (or that has
no neighbour at all, e.g. an excluded island) is *isolated* in that period: NaN statistic.

Gi* (Getis & Ord 1992; z-score of Ord & Getis 1995) uses binary weights from the neighbour
pattern plus the unit itself, with the analytical z and two-sided normal p-value.
"""

from __future__ import annotations

import logging
from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np

from mapdrift._lazy import lazy_module
from mapdrift.clusters._groups import period_groups
from mapdrift.weights import SpatialWeights

if TYPE_CHECKING:  # imported on first use (see mapdrift._lazy)
    import scipy.sparse as sp
    from scipy import special
else:
    sp = lazy_module("scipy.sparse")
    special = lazy_module("scipy.special")

__all__ = [
    "P_VALUES",
    "LocalResult",
    "conditional_moments",
    "draw_neighbour_sets",
    "gi_star_panel",
    "local_moran_panel",
]

log = logging.getLogger(__name__)

#: Ways to get local Moran p-values (see the module docstring).
P_VALUES: tuple[str, ...] = ("normal", "permutation")
#: Elements per block (units x permutations x max(periods, neighbours)); ~32 MB of float64.
_BLOCK = 4_000_000
#: Absolute tolerance under which a permuted statistic ties the observed one (z-units squared).
_TIE = 1e-9


@dataclass(frozen=True, eq=False)
class LocalResult:
    """Per unit and period ``[n_units, n_periods]``: statistic, p-value, standardised value and
    lag (both deviations from the period mean, divided by its standard deviation), and which
    cells were isolated (value present, no neighbour with a value). NaN where no statistic.
    ``p_value`` says how p was obtained (``normal``, ``permutation``, or ``analytical`` for
    Gi*)."""

    stat: np.ndarray
    p: np.ndarray
    z: np.ndarray
    lag: np.ndarray
    isolated: np.ndarray
    statistic: str
    permutations: int
    p_value: str = "permutation"


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


def conditional_moments(W: sp.csr_matrix, Z: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Exact mean and standard deviation of each unit's lag under conditional randomisation.

    ``W`` row-standardised over the ``n`` units of ``Z`` (``[n, T]``, standardised: mean 0,
    ``sum z^2 = n``). Returns ``(mean, sd)`` of ``sum_j w_ij z_pi(j)`` when the neighbours'
    values are drawn without replacement from the other ``n - 1`` units (module docstring).
    """
    n = Z.shape[0]
    N = n - 1
    S2 = np.asarray(W.multiply(W).sum(axis=1)).ravel()[:, None]
    mu = -Z / N
    var_pop = (n - Z * Z) / N - mu * mu
    with np.errstate(invalid="ignore", divide="ignore"):
        factor = (N * S2 - 1.0) / (N - 1) if N > 1 else np.zeros_like(S2)
    var = np.maximum(var_pop * factor, 0.0)
    return mu, np.sqrt(var)


def _block_counts(
    Zf: np.ndarray,
    obs: np.ndarray,
    u: np.ndarray,
    pos: np.ndarray,
    dk: np.ndarray,
    w: np.ndarray,
    equal: bool,
) -> tuple[np.ndarray, np.ndarray]:
    """ge/le counts ``[b, T]`` for units ``u`` (rows of ``Zf``) whose own positions in the draw
    space are ``pos``: draws ``dk`` ``[P, k]`` with weights ``w`` ``[b, k]``."""
    k = dk.shape[1]
    idx = dk[None, :, :] + (dk[None, :, :] >= pos[:, None, None])  # [b, P, k]
    acc = Zf[idx[:, :, 0]]  # [b, P, T], float64
    if not equal:
        acc *= w[:, 0, None, None]
    for j in range(1, k):
        g = Zf[idx[:, :, j]]
        if not equal:
            g *= w[:, j, None, None]
        acc += g
    if equal:
        acc *= w[:, 0, None, None]
    acc *= Zf[u][:, None, :]
    o = obs[u][:, None, :]
    return (acc >= o - _TIE).sum(axis=1), (acc <= o + _TIE).sum(axis=1)


def _conditional_counts(
    W: sp.csr_matrix, Z: np.ndarray, lag: np.ndarray, draws: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """Per unit and column: how many permuted ``z_i * lag`` are >= and <= the observed one
    (ties within ``_TIE`` count on both sides). All units have a value in every column.

    The permuted lags are accumulated one neighbour slot at a time (a row gather of
    ``[units, permutations, periods]`` per slot), several times faster than gathering the full
    ``[units, permutations, k, periods]`` block.
    """
    n, T = Z.shape
    perms = draws.shape[0]
    card = np.diff(W.indptr)
    ge = np.zeros((n, T), dtype=np.int64)
    le = np.zeros((n, T), dtype=np.int64)
    Zf = np.ascontiguousarray(Z, dtype=np.float64)
    obs = Z * lag
    for k in np.unique(card):
        if k == 0:
            continue
        units = np.flatnonzero(card == k)
        # weights of these units' rows, [u, k] (the order within a row does not matter: the
        # neighbours are replaced by random draws)
        wk = W.data[W.indptr[units][:, None] + np.arange(k)]
        equal = bool(np.all(wk == wk[:, :1]))
        b = max(1, _BLOCK // (perms * max(T, k)))
        for s in range(0, len(units), b):
            u = units[s : s + b]
            ge[u], le[u] = _block_counts(Zf, obs, u, u, draws[:, :k], wk[s : s + b], equal)
    return ge, le


def _shared_counts(
    B: sp.csr_matrix,
    Z: np.ndarray,
    present: np.ndarray,
    kt: np.ndarray,
    lag: np.ndarray,
    draws: np.ndarray,
    rng: np.random.Generator,
) -> tuple[np.ndarray, np.ndarray]:
    """ge/le counts when periods miss different cells, with one table of draws for all.

    ``B`` binary neighbours over the ``n`` units with a value in some period; ``present``
    ``[n, T]``; ``kt`` ``[n, T]`` neighbours with a value; ``Z`` standardised per period over
    the present units (0 elsewhere). Unit ``i`` in period ``t`` takes the first ``kt`` draws of
    its row that have a value in ``t`` (``draws`` has a few spare columns). Cells whose first
    ``kt`` draws all have a value (nearly all of them) are summed as in
    :func:`_conditional_counts`, a running sum serving every ``kt``; the few others are summed
    again cell by cell, vectorised, and the very rare cell without enough valid spare draws
    gets a fresh draw from ``rng``.
    """
    n, T = Z.shape
    perms = draws.shape[0]
    card = np.diff(B.indptr)
    ge = np.zeros((n, T), dtype=np.int64)
    le = np.zeros((n, T), dtype=np.int64)
    missing_any = ~present.all(axis=1)
    obs = Z * lag
    Zf = np.ascontiguousarray(Z, dtype=np.float64)
    for k in np.unique(card):
        if k == 0:
            continue
        units = np.flatnonzero(card == k)
        slots = min(k + draws.shape[1] - int(card.max()), draws.shape[1])
        dk = draws[:, :slots]
        b = max(1, _BLOCK // (perms * max(T, slots)))
        for s in range(0, len(units), b):
            u = units[s : s + b]
            ku = kt[u]  # [b, T]
            idx = dk[None, :, :] + (dk[None, :, :] >= u[:, None, None])  # [b, P, slots]
            sb, st = np.nonzero((ku < k) & (ku > 0))  # a neighbour without a value
            partial = np.zeros((len(sb), perms))
            acc = Zf[idx[:, :, 0]]
            for j in range(1, k):
                take = ku[sb, st] == j
                if take.any():
                    partial[take] = acc[sb[take], :, st[take]]
                acc += Zf[idx[:, :, j]]
            if len(sb):
                acc[sb, :, st] = partial
            # cells to redo: one of the first k draws has no value in that period
            br, rr = np.nonzero(missing_any[idx[:, :, :k]].any(axis=2))
            hit = np.zeros((len(br), T), dtype=bool)
            for j in range(k):
                hit |= ~present[idx[br, rr, j]]
            hc, ti = np.nonzero(hit)
            bi, ri = br[hc], rr[hc]
            if len(bi):
                total = np.zeros(len(bi))
                seen = np.zeros(len(bi), dtype=np.int64)
                need = ku[bi, ti]
                for j in range(slots):
                    d = idx[bi, ri, j]
                    ok = present[d, ti] & (seen < need)
                    total += np.where(ok, Zf[d, ti], 0.0)
                    seen += ok
                for c in np.flatnonzero(seen < need):  # rare: too few spare draws
                    pool = np.flatnonzero(present[:, ti[c]])
                    pool = pool[pool != u[bi[c]]]
                    total[c] = Zf[rng.choice(pool, size=need[c], replace=False), ti[c]].sum()
                acc[bi, ri, ti] = total
            with np.errstate(invalid="ignore", divide="ignore"):
                acc /= ku[:, None, :]
            acc *= Zf[u][:, None, :]
            o = obs[u][:, None, :]
            ge[u] = (acc >= o - _TIE).sum(axis=1)
            le[u] = (acc <= o + _TIE).sum(axis=1)
    return ge, le


def _two_sided(ge: np.ndarray, le: np.ndarray, permutations: int) -> np.ndarray:
    return np.minimum(1.0, 2.0 * (np.minimum(ge, le) + 1.0) / (permutations + 1.0))


def _equal_rows(W: sp.csr_matrix) -> bool:
    """Whether every row's non-zero weights are equal (binary weights, row-standardised)."""
    if W.nnz == 0:
        return True
    counts = np.diff(W.indptr)
    starts = W.indptr[:-1][counts > 0]
    first = np.repeat(W.data[starts], counts[counts > 0])
    return bool(np.allclose(W.data, first, rtol=1e-12, atol=0))


def local_moran_panel(
    values: np.ndarray,
    weights: SpatialWeights,
    *,
    permutations: int = 999,
    seed: int = 0,
    p_value: str = "permutation",
) -> LocalResult:
    """Local Moran's I (Anselin 1995 scaling) with conditional-randomisation p-values per period.

    ``values`` is ``[units, periods]`` with NaN = missing. Returns NaN statistic and p where a
    unit has no value, no neighbour with a value (``isolated`` True), or the period has fewer
    than 3 units with values or no variation. ``p_value`` is ``permutation`` (``permutations``
    seeded draws; ``permutations=0`` gives NaN p-values) or ``normal`` (exact moments, no
    draws); see the module docstring. Each column can also be run on its own (e.g. one period
    per worker): its statistics do not depend on the other columns.
    """
    if p_value not in P_VALUES:
        raise ValueError(f"p_value {p_value!r} is not one of {', '.join(P_VALUES)}")
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
        zout[np.ix_(idx, cols)] = Z
        lout[np.ix_(idx, cols)] = lag
        stat[np.ix_(idx, cols)] = Z * lag
        if p_value == "normal":
            mu, sd = conditional_moments(W, Z)
            with np.errstate(invalid="ignore", divide="ignore"):
                zs = np.where(sd > 0, (lag - mu) / sd, 0.0)
            p = 2.0 * special.ndtr(-np.abs(zs))
            p[(Z == 0) & ~np.isnan(p)] = 1.0  # I_i = 0 whatever the neighbours
            p[np.isnan(Z) | np.isnan(lag)] = np.nan
            pval[np.ix_(idx, cols)] = p
    if p_value == "permutation" and permutations > 0:
        pval = _permutation_p(values, weights, permutations, seed, zout, lout, isolated)
    return LocalResult(stat, pval, zout, lout, isolated, "local-moran", permutations, p_value)


def _permutation_p(
    values: np.ndarray,
    weights: SpatialWeights,
    permutations: int,
    seed: int,
    Zall: np.ndarray,
    lagall: np.ndarray,
    isolated: np.ndarray,
) -> np.ndarray:
    """Permutation p-values for every cell with a statistic (see the module docstring)."""
    n_u, n_t = values.shape
    pval = np.full((n_u, n_t), np.nan)
    present_all = ~np.isnan(values)
    usable = present_all.sum(axis=0) >= 3
    usable &= ~np.isnan(Zall).all(axis=0)  # periods without variation have no statistic
    if not usable.any():
        return pval
    cols = np.flatnonzero(usable)
    union = present_all[:, cols].any(axis=1)
    idx = np.flatnonzero(union)
    n = len(idx)
    present = present_all[np.ix_(idx, cols)]
    missing = (~present).sum(axis=0)
    extra = min(int(missing.max()), 4)  # spare draws per row for draws without a value
    Wu = weights.W[idx][:, idx].tocsr()
    B = Wu.copy()
    B.data[:] = 1.0
    card = np.diff(B.indptr)
    k_max = int(card.max()) if n else 0
    n_missing_any = int((~present.all(axis=1)).sum())
    shared = (
        _equal_rows(Wu)
        and k_max > 0
        and k_max + extra <= n - 1
        and n_missing_any * max(k_max, 1) <= 0.2 * n
    )
    if shared:
        Z = np.nan_to_num(Zall[np.ix_(idx, cols)])
        lag = np.nan_to_num(lagall[np.ix_(idx, cols)])
        kt = (B @ present.astype(np.int64)).astype(np.int64)
        kt = np.asarray(kt)
        draws = draw_neighbour_sets(n, k_max + extra, permutations, seed)
        rng = np.random.default_rng([seed, 1])
        ge, le = _shared_counts(B, Z, present, kt, lag, draws, rng)
        p = _two_sided(ge, le, permutations)
        bad = ~present | (kt == 0) | np.isnan(Zall[np.ix_(idx, cols)])
        p[bad] = np.nan
        pval[np.ix_(idx, cols)] = p
        return pval
    # periods with very different units (or unequal weights): one table of draws per group
    for gi, (mask, gcols) in enumerate(period_groups(values[:, cols])):
        gcols = [int(cols[c]) for c in gcols]
        gidx = np.flatnonzero(mask)
        W = weights.subset(mask)
        gcard = np.diff(W.indptr)
        if len(gidx) < 3 or gcard.max(initial=0) == 0:
            continue
        Z = Zall[np.ix_(gidx, gcols)]
        ok_cols = ~np.isnan(Z).all(axis=0)
        draws = draw_neighbour_sets(len(gidx), int(gcard.max()), permutations, [seed, gi])
        ge, le = _conditional_counts(
            W,
            np.nan_to_num(Z[:, ok_cols]),
            np.nan_to_num(lagall[np.ix_(gidx, gcols)][:, ok_cols]),
            draws,
        )
        p = _two_sided(ge, le, permutations)
        p[gcard == 0] = np.nan
        full = np.full((len(gidx), len(gcols)), np.nan)
        full[:, ok_cols] = p
        pval[np.ix_(gidx, gcols)] = full
    return pval


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
    return LocalResult(stat, pval, zout, lout, isolated, "gi-star", 0, "analytical")
