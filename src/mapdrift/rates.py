"""Empirical Bayes smoothing of rates from counts, for small bases.

A rate ``r_i = y_i / n_i`` from few cases is noisy; empirical Bayes shrinks it towards a prior
mean ``b`` by ``C_i = a / (a + b / n_i)``: ``EB_i = b + C_i (r_i - b)`` (Marshall 1991, method
of moments):

- ``eb`` (global): ``b = sum y / sum n``, ``s^2 = sum n_i (r_i - b)^2 / sum n``,
  ``a = s^2 - b / nbar`` with ``nbar = sum n / N``.
- ``spatial-eb``: the same moments computed over each unit's neighbourhood (the unit and its
  neighbours under the spatial weights), so rates shrink towards their local mean.

Where the estimated between-area variance ``a`` is negative, Marshall's rule sets it to zero,
so every rate in that neighbourhood (or the whole period, for ``eb``) equals the prior mean.
esda's global ``Empirical_Bayes`` leaves ``a`` negative (its weights then fall outside 0-1);
its ``Spatial_Empirical_Bayes`` sets a negative ``a`` to zero as we do. We apply the rule in
both and report where it happened.

For spatial statistics on rates, :func:`eb_standardise` gives the Assuncao & Reis (1999)
empirical Bayes standardised rates ``z_i = (r_i - b) / sqrt(a + b / n_i)`` with the same
moments (where ``a + b / n_i`` is negative, ``b / n_i`` is used, as in esda's
``assuncao_rate``): a small base gets a large variance, so one event on ten parcels no longer
dominates the period's statistics.

Rates are smoothed period by period. Cells with a missing count, a missing base or a base of
zero stay NaN and are left out of the moments. Results are in rate units (multiply by ``per``
for "per 1,000"), see :func:`smooth_panel`.
"""

from __future__ import annotations

import logging
from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np

from mapdrift._lazy import lazy_module
from mapdrift.errors import ConfigError, check_choice
from mapdrift.findings import Finding

if TYPE_CHECKING:  # imported on first use (see mapdrift._lazy)
    import scipy.sparse as sp
else:
    sp = lazy_module("scipy.sparse")

if TYPE_CHECKING:
    from mapdrift.panel import Panel
    from mapdrift.weights import SpatialWeights

__all__ = [
    "SMOOTHERS",
    "Smoothed",
    "eb_global",
    "eb_spatial",
    "eb_standardise",
    "smooth",
    "smooth_panel",
]

log = logging.getLogger(__name__)

SMOOTHERS: tuple[str, ...] = ("eb", "spatial-eb")


@dataclass(frozen=True, eq=False)
class Smoothed:
    """Smoothed rates ``[units, periods]`` (rate units), the prior mean and the shrinkage
    factor ``C`` per cell, and the cells where Marshall's rule set the variance to zero."""

    rates: np.ndarray
    prior: np.ndarray
    shrinkage: np.ndarray
    zeroed: np.ndarray
    method: str


def _valid(events: np.ndarray, bases: np.ndarray) -> np.ndarray:
    with np.errstate(invalid="ignore"):
        return np.isfinite(events) & np.isfinite(bases) & (bases > 0)


def eb_global(events: np.ndarray, bases: np.ndarray) -> tuple[np.ndarray, float, np.ndarray, bool]:
    """Global EB for one period: ``(smoothed, prior mean b, shrinkage C, variance zeroed?)``."""
    y = np.asarray(events, dtype=np.float64)
    n = np.asarray(bases, dtype=np.float64)
    ok = _valid(y, n)
    out = np.full(y.shape, np.nan)
    shrink = np.full(y.shape, np.nan)
    if not ok.any():
        return out, float("nan"), shrink, False
    yv, nv = y[ok], n[ok]
    r = yv / nv
    b = yv.sum() / nv.sum()
    s2 = (nv * (r - b) ** 2).sum() / nv.sum()
    a = s2 - b / nv.mean()
    zeroed = bool(a < 0)
    a = max(a, 0.0)
    with np.errstate(invalid="ignore", divide="ignore"):
        C = np.where(a + b / nv > 0, a / (a + b / nv), 0.0)
    out[ok] = b + C * (r - b)
    shrink[ok] = C
    return out, float(b), shrink, zeroed


def eb_standardise(events: np.ndarray, bases: np.ndarray) -> np.ndarray:
    """Assuncao & Reis (1999) EB standardised rates, period by period (columns).

    ``events``/``bases`` are ``[units]`` or ``[units, periods]``; cells with a missing count or
    base, or a base <= 0, are NaN and left out of the period's moments.
    """
    y = np.asarray(events, dtype=np.float64)
    n = np.asarray(bases, dtype=np.float64)
    one = y.ndim == 1
    y, n = np.atleast_2d(y.T).T, np.atleast_2d(n.T).T
    if y.shape != n.shape:
        raise ValueError(f"events {y.shape} and bases {n.shape} differ in shape")
    ok = _valid(y, n)
    yv, nv = np.where(ok, y, 0.0), np.where(ok, n, 0.0)
    with np.errstate(invalid="ignore", divide="ignore"):
        r = np.where(ok, yv / np.where(ok, nv, 1.0), 0.0)
        b = yv.sum(axis=0) / nv.sum(axis=0)
        s2 = (nv * (r - b) ** 2).sum(axis=0) / nv.sum(axis=0)
        a = s2 - b / (nv.sum(axis=0) / ok.sum(axis=0))
        v = a + b / np.where(ok, nv, np.nan)
        v = np.where(v < 0, b / np.where(ok, nv, np.nan), v)
        z = (r - b) / np.sqrt(v)
    z[~ok] = np.nan
    return z[:, 0] if one else z


def eb_spatial(
    events: np.ndarray, bases: np.ndarray, W: sp.spmatrix
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Spatial EB for one period: ``(smoothed, prior b_i, shrinkage C_i, zeroed_i)`` per unit.

    The neighbourhood of ``i`` is ``i`` plus every ``j`` with ``W[i, j] != 0``; units without a
    valid count/base are left out of every neighbourhood.
    """
    y = np.asarray(events, dtype=np.float64)
    n = np.asarray(bases, dtype=np.float64)
    ok = _valid(y, n)
    A = sp.csr_matrix(W, dtype=np.float64, copy=True)
    A.data[:] = 1.0
    A = (A + sp.identity(A.shape[0], format="csr")).tocsr()
    A.data[:] = 1.0
    okf = ok.astype(np.float64)
    yv, nv = np.where(ok, y, 0.0), np.where(ok, n, 0.0)
    with np.errstate(invalid="ignore", divide="ignore"):
        r = np.where(ok, yv / np.where(ok, nv, 1.0), 0.0)
        sum_y, sum_n, count = A @ yv, A @ nv, A @ okf
        b = sum_y / sum_n
        # sum_j n_j (r_j - b_i)^2 = sum n r^2 - 2 b sum y + b^2 sum n
        s2 = (A @ (nv * r * r) - 2 * b * sum_y + b * b * sum_n) / sum_n
        a = s2 - b / (sum_n / count)
        zeroed = ok & (a < 0)
        a = np.maximum(a, 0.0)
        denom = a + b / np.where(ok, nv, np.nan)
        C = np.where(denom > 0, a / denom, 0.0)
        out = b + C * (r - b)
    out[~ok] = np.nan
    C[~ok] = np.nan
    b = np.where(ok, b, np.nan)
    return out, b, C, zeroed


def smooth(
    events: np.ndarray,
    bases: np.ndarray,
    method: str = "eb",
    *,
    weights: SpatialWeights | None = None,
) -> Smoothed:
    """Smooth ``events / bases`` ([units, periods]) period by period with ``method``."""
    check_choice("--smooth", method, SMOOTHERS)
    if method == "spatial-eb" and weights is None:
        raise ConfigError(
            "--smooth spatial-eb needs spatial weights; pass weights=build_weights(...)"
        )
    y = np.atleast_2d(np.asarray(events, dtype=np.float64))
    n = np.atleast_2d(np.asarray(bases, dtype=np.float64))
    if y.shape != n.shape:
        raise ValueError(f"events {y.shape} and bases {n.shape} differ in shape")
    rates = np.full(y.shape, np.nan)
    prior = np.full(y.shape, np.nan)
    shrink = np.full(y.shape, np.nan)
    zeroed = np.zeros(y.shape, dtype=bool)
    for t in range(y.shape[1]):
        if method == "eb":
            r, b, C, z = eb_global(y[:, t], n[:, t])
            rates[:, t], shrink[:, t] = r, C
            prior[:, t] = np.where(np.isnan(r), np.nan, b)
            zeroed[:, t] = z & ~np.isnan(r)
        else:
            assert weights is not None
            rates[:, t], prior[:, t], shrink[:, t], zeroed[:, t] = eb_spatial(
                y[:, t], n[:, t], weights.W
            )
    return Smoothed(rates, prior, shrink, zeroed, method)


def smooth_panel(
    panel: Panel,
    method: str = "eb",
    *,
    weights: SpatialWeights | None = None,
    per: float | None = None,
) -> Panel:
    """A Panel whose values are the smoothed rates (times ``per``) and a note saying so.

    Needs the counts (``panel.numerator`` / ``panel.denominator``, set when the inputs gave
    ``--numerator/--denominator``). ``per`` defaults to the ratio of the panel's values to the
    raw rates (e.g. 1000), so smoothed values are in the same unit as the raw ones.
    """
    if panel.numerator is None or panel.denominator is None:
        raise ConfigError(
            "--smooth needs counts: give --numerator and --denominator (e.g. --numerator "
            "filings --denominator mortgaged_parcels) so rates can be smoothed"
        )
    if per is None:
        with np.errstate(invalid="ignore", divide="ignore"):
            raw = panel.numerator / panel.denominator
            ratio = panel.values / raw
        ratio = ratio[np.isfinite(ratio) & (ratio > 0)]
        per = float(np.median(ratio)) if len(ratio) else 1.0
    res = smooth(panel.numerator, panel.denominator, method, weights=weights)
    values = res.rates * per
    values[np.isnan(panel.values)] = np.nan  # keep the loader's missing cells missing
    n_zero = int(res.zeroed.sum())
    label = "global empirical Bayes" if method == "eb" else "spatial empirical Bayes"
    msg = (
        f"rates smoothed with {label} ({method}, Marshall 1991); "
        f"{int(np.isfinite(values).sum())} cells smoothed"
    )
    if n_zero:
        msg += (
            f"; in {n_zero} cells the between-area variance estimate was negative and set to "
            "zero, so those rates equal their prior mean"
        )
    log.info("%s", msg)
    finding = Finding("note", f"rates-smoothed-{method}", msg)
    return panel.with_values(values, finding=finding)
