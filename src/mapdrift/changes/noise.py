"""Is a class move more than count noise? Tests of a unit's rate change between two periods.

With counts (``numerator`` events on a ``denominator`` base), a rate change from period 1 to
period 2 is tested with the exact conditional test for two Poisson rates (Przyborowski &
Wilenski 1940; e.g. Lehmann & Romano, *Testing Statistical Hypotheses*, sec. 4.6): given
``n = n1 + n2`` events, under equal rates ``n2 ~ Binomial(n, b2 / (b1 + b2))``. The two-sided
p-value is twice the smaller tail, ``2 * min(P(X <= n2), P(X >= n2))``, capped at 1 (the
"central" two-sided p; it is never smaller than the "minimum likelihood" one, so it errs on the
side of calling a move noise). ``n = 0`` (no event in either period) gives ``p = 1``.

Without counts but with a standard error per value (e.g. from an ACS-style 90 % margin of
error, ``se = moe / 1.645``), the change is tested with the normal approximation
``z = (v2 - v1) / sqrt(se1^2 + se2^2)``.

Everything is vectorised over arrays: the binomial tails are the regularised incomplete beta
function ``scipy.special.betainc`` (what ``scipy.stats.binom`` evaluates, without the ~0.8 s
import of ``scipy.stats``, and for counts of any size); NaN counts or bases give NaN p.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

import numpy as np

from mapdrift._lazy import lazy_module

if TYPE_CHECKING:  # imported on first use (see mapdrift._lazy)
    from scipy import special
else:
    special = lazy_module("scipy.special")

__all__ = ["MOE_Z", "moe_change_p", "poisson_change_p"]

#: ACS margins of error are published at 90 % as 1.645 standard errors (the rounded z).
MOE_Z = 1.645


def poisson_change_p(n1: np.ndarray, b1: np.ndarray, n2: np.ndarray, b2: np.ndarray) -> np.ndarray:
    """Two-sided p-value of the conditional test of equal Poisson rates ``n1/b1`` and ``n2/b2``.

    Arrays broadcast; NaN in any input, a non-positive base or a negative count gives NaN.

    >>> float(poisson_change_p(2, 1000, 8, 1000))  # 2 * P(Bin(10, 1/2) >= 8) = 2 * 56/1024
    0.109375
    """
    n1, b1, n2, b2 = np.broadcast_arrays(
        *(np.asarray(a, dtype=np.float64) for a in (n1, b1, n2, b2))
    )
    with np.errstate(invalid="ignore"):
        ok = (
            np.isfinite(n1) & np.isfinite(n2) & np.isfinite(b1) & np.isfinite(b2)
            & (b1 > 0) & (b2 > 0) & (n1 >= 0) & (n2 >= 0)
        )  # fmt: skip
    out = np.full(n1.shape, np.nan)
    if not ok.any():
        return out
    k = np.round(n2[ok])
    n = np.round(n1[ok]) + k
    q = b2[ok] / (b1[ok] + b2[ok])
    # binomial tails as regularised incomplete beta functions (exact identities; floats, so no
    # limit on the counts): P(X <= k) = I_{1-q}(n - k, k + 1) for k < n, else 1, and
    # P(X >= k) = I_q(k, n - k + 1) for k >= 1, else 1
    below = k < n
    lower = np.where(below, special.betainc(np.where(below, n - k, 1.0), k + 1, 1 - q), 1.0)
    above = k >= 1
    upper = np.where(above, special.betainc(np.where(above, k, 1.0), n - k + 1, q), 1.0)
    out[ok] = np.minimum(1.0, 2.0 * np.minimum(lower, upper))
    return out


def moe_change_p(v1: np.ndarray, se1: np.ndarray, v2: np.ndarray, se2: np.ndarray) -> np.ndarray:
    """Two-sided normal p-value of ``v2 - v1`` with independent standard errors ``se1``, ``se2``.

    A zero combined standard error gives p = 0 for a change and 1 for none; NaN gives NaN.

    >>> round(float(moe_change_p(10.0, 1.0, 13.0, 1.0)), 4)  # z = 3 / sqrt(2)
    0.0339
    """
    v1, se1, v2, se2 = np.broadcast_arrays(
        *(np.asarray(a, dtype=np.float64) for a in (v1, se1, v2, se2))
    )
    d = v2 - v1
    s = np.sqrt(se1 * se1 + se2 * se2)
    with np.errstate(invalid="ignore", divide="ignore"):
        z = np.where(s > 0, np.abs(d) / s, np.where(d == 0, 0.0, np.inf))
    p = np.asarray(2.0 * special.ndtr(-z), dtype=np.float64)
    return np.where(np.isnan(d) | np.isnan(s), np.nan, p)
