"""Multiple-testing corrections for the many p-values of one period (or of all unit trends).

``adjust(p, method)`` returns adjusted p-values; a test is significant when its adjusted p-value
is at most ``alpha``. NaN p-values (no test: no data, isolated units) stay NaN and do not count
towards the number of tests ``m``.

- ``fdr``: Benjamini & Hochberg (1995) step-up; adjusted ``p_(i) = min_{j>=i} m p_(j) / j``,
  which rejects exactly the hypotheses of the BH procedure at level ``alpha``.
- ``bonferroni``: ``min(1, m p)``.
- ``none``: the p-values unchanged.
"""

from __future__ import annotations

import numpy as np

from mapdrift.errors import check_choice

__all__ = ["CORRECTIONS", "adjust", "describe", "significant"]

CORRECTIONS: tuple[str, ...] = ("fdr", "bonferroni", "none")


def _check(method: str) -> str:
    check_choice("--correction", method, CORRECTIONS)
    return method


def adjust(p: np.ndarray, method: str = "fdr") -> np.ndarray:
    """Adjusted p-values for one family of tests (1-D); NaN stays NaN."""
    _check(method)
    p = np.asarray(p, dtype=np.float64)
    out = np.full(p.shape, np.nan)
    ok = ~np.isnan(p)
    m = int(ok.sum())
    if m == 0:
        return out
    q = p[ok]
    if method == "none":
        out[ok] = q
    elif method == "bonferroni":
        out[ok] = np.minimum(1.0, q * m)
    else:
        order = np.argsort(q, kind="stable")
        ranked = q[order] * m / np.arange(1, m + 1)
        ranked = np.minimum.accumulate(ranked[::-1])[::-1]
        adj = np.empty(m)
        adj[order] = np.minimum(ranked, 1.0)
        out[ok] = adj
    return out


def significant(p: np.ndarray, alpha: float = 0.05, method: str = "fdr") -> np.ndarray:
    """Boolean: adjusted p-value <= ``alpha`` (False where p is NaN)."""
    adj = adjust(p, method)
    with np.errstate(invalid="ignore"):
        return np.asarray(adj <= alpha) & ~np.isnan(adj)


def describe(alpha: float, method: str) -> str:
    """The sentence every output carries, e.g. 'significant at 0.05 after Benjamini-Hochberg FDR
    correction per period'."""
    what = {
        "fdr": "after Benjamini-Hochberg false discovery rate correction",
        "bonferroni": "after Bonferroni correction",
        "none": "without correction for multiple tests",
    }[_check(method)]
    return f"significant at {alpha:g} {what}"
