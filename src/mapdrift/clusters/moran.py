"""Global Moran's I per period with analytical and permutation inference.

``I = (n / S0) * z'Wz / z'z`` with ``z`` the deviations from the period mean (Moran 1950;
moments from Cliff & Ord 1981): ``E[I] = -1/(n-1)``, variance under normality and under
randomisation (the latter uses the sample kurtosis ``b2``). The permutation p-value is
two-sided: ``2 * (min(#{I_perm >= I}, #{I_perm <= I}) + 1) / (permutations + 1)``, capped at 1.

Missing values: units without a value in a period are left out of that period (the weights are
subset to the units with values and re-standardised); they are never treated as zeros. Periods
with the same set of units share one set of random permutations (drawn once from the seed).
"""

from __future__ import annotations

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

__all__ = ["MoranGlobal", "moran_global", "moran_global_panel", "permutation_p"]


@dataclass(frozen=True)
class MoranGlobal:
    """Global Moran's I of one variable: statistic, moments, z-scores and p-values."""

    n: int
    I: float  # noqa: E741 - the statistic's published name
    expected: float
    var_normal: float
    var_random: float
    z_normal: float
    z_random: float
    p_random: float  # two-sided, normal approximation under randomisation
    p_permutation: float  # two-sided; NaN without permutations
    permutations: int


def permutation_p(observed: np.ndarray, sims: np.ndarray) -> np.ndarray:
    """Two-sided pseudo p-value per row: ``sims`` has the permutations on its last axis."""
    observed = np.asarray(observed)[..., None]
    ge = (sims >= observed).sum(axis=-1)
    le = (sims <= observed).sum(axis=-1)
    perms = sims.shape[-1]
    return np.minimum(1.0, 2.0 * (np.minimum(ge, le) + 1.0) / (perms + 1.0))


def _moments(W: sp.csr_matrix, z: np.ndarray) -> tuple[float, float, float, float]:
    n = len(z)
    S0 = float(W.sum())
    Wt = W.T.tocsr()
    S1 = 0.5 * float((W + Wt).power(2).sum())
    S2 = float(((np.asarray(W.sum(axis=1)).ravel() + np.asarray(W.sum(axis=0)).ravel()) ** 2).sum())
    EI = -1.0 / (n - 1)
    var_n = (n * n * S1 - n * S2 + 3 * S0 * S0) / ((n * n - 1) * S0 * S0) - EI * EI
    b2 = n * float((z**4).sum()) / float((z**2).sum()) ** 2
    num = n * ((n * n - 3 * n + 3) * S1 - n * S2 + 3 * S0 * S0) - b2 * (
        (n * n - n) * S1 - 2 * n * S2 + 6 * S0 * S0
    )
    var_r = num / ((n - 1) * (n - 2) * (n - 3) * S0 * S0) - EI * EI
    return S0, EI, var_n, var_r


def moran_global(
    y: np.ndarray,
    W: sp.spmatrix,
    *,
    permutations: int = 0,
    seed: int | np.random.Generator | None = 0,
) -> MoranGlobal:
    """Global Moran's I of ``y`` (no NaN) under weights ``W`` as given (binary or standardised).

    Needs at least 4 units and some variation; otherwise every field is NaN.
    """
    y = np.asarray(y, dtype=np.float64)
    n = len(y)
    W = sp.csr_matrix(W, dtype=np.float64)
    z = y - y.mean()
    zz = float(z @ z)
    if n < 4 or zz <= 0 or W.nnz == 0:
        nan = float("nan")
        return MoranGlobal(n, nan, nan, nan, nan, nan, nan, nan, nan, permutations)
    S0, EI, var_n, var_r = _moments(W, z)
    I = n / S0 * float(z @ (W @ z)) / zz  # noqa: E741
    z_n = (I - EI) / np.sqrt(var_n) if var_n > 0 else np.nan
    z_r = (I - EI) / np.sqrt(var_r) if var_r > 0 else np.nan
    p_r = float(2 * special.ndtr(-abs(z_r))) if np.isfinite(z_r) else np.nan
    p_perm = np.nan
    if permutations > 0:
        rng = np.random.default_rng(seed)
        sims = _permuted(W, z[:, None], permutations, rng)[0] * (n / S0) / zz
        p_perm = float(permutation_p(np.array(I), sims))
    return MoranGlobal(n, I, EI, var_n, var_r, float(z_n), float(z_r), p_r, p_perm, permutations)


def _permuted(
    W: sp.csr_matrix, Z: np.ndarray, permutations: int, rng: np.random.Generator
) -> np.ndarray:
    """``z_p' W z_p`` for each column of ``Z`` [n, T] and each permutation -> [T, permutations].

    The same permutations are applied to every column (drawn once, in chunks).
    """
    n, T = Z.shape
    out = np.empty((T, permutations))
    chunk = max(1, min(permutations, 4_000_000 // max(n * T, 1)))
    base = np.arange(n)
    for start in range(0, permutations, chunk):
        c = min(chunk, permutations - start)
        P = rng.permuted(np.broadcast_to(base, (c, n)), axis=1)  # [c, n]
        Zp = Z[P.T]  # [n, c, T]
        flat = Zp.reshape(n, c * T)
        lag = (W @ flat).reshape(n, c, T)
        out[:, start : start + c] = np.einsum("nct,nct->tc", Zp, lag)
    return out


def moran_global_panel(
    values: np.ndarray,
    weights: SpatialWeights,
    *,
    permutations: int = 999,
    seed: int = 0,
) -> list[MoranGlobal]:
    """Global Moran's I for each period (column) of ``values`` [units, periods].

    Per period the units with a value (and their weights, re-standardised) are used; a period
    with fewer than 4 such units gets NaN statistics.
    """
    values = np.asarray(values, dtype=np.float64)
    results: list[MoranGlobal | None] = [None] * values.shape[1]
    for gi, (mask, cols) in enumerate(period_groups(values)):
        W = weights.subset(mask)
        Y = values[mask][:, cols]
        stats_ = [moran_global(Y[:, j], W) for j in range(len(cols))]
        if permutations > 0 and len(Y) >= 4:
            Z = Y - Y.mean(axis=0)
            zz = (Z * Z).sum(axis=0)
            S0 = float(W.sum())
            rng = np.random.default_rng([seed, gi])
            sims = _permuted(W, Z, permutations, rng)
            for j, s in enumerate(stats_):
                p = np.nan
                if np.isfinite(s.I) and S0 > 0:
                    p = float(permutation_p(np.array(s.I), sims[j] * (len(Y) / S0) / zz[j]))
                stats_[j] = MoranGlobal(
                    **{**s.__dict__, "p_permutation": p, "permutations": permutations}
                )
        for j, c in enumerate(cols):
            results[c] = stats_[j]
    return [r for r in results if r is not None]
