"""Cluster labels per unit and period, and what they say across periods.

Labels (codes in brackets, as used for maps; ``-1`` = no data):
high-high (0), low-low (1), high-low (2), low-high (3), not significant (4), isolated (5).
A significant local Moran cell is labelled by its quadrant: the sign of the unit's deviation
from the period mean, then the sign of its neighbours' mean deviation (the spatial lag) —
high-high and low-low are clusters, high-low and low-high spatial outliers. With Gi*, a
significant positive z-score is a hot spot (high-high) and a negative one a cold spot
(low-low). ``isolated``: the unit has a value but no neighbour with one; ``no data``: no value.

Across periods, per unit: the label sequence (``ns>HH>HH>ns``), transition counts between
labels over consecutive periods (pairs where either period has no data are not counted),
and flags: ``joined_high_cluster`` / ``left_high_cluster`` (and the low-low pair) list the
periods in which the unit entered or left the cluster, ``steady_high_cluster`` says whether it
stayed high-high for at least ``persist`` consecutive periods, ``became_outlier`` /
``stopped_outlier`` list the periods in which it turned into, or stopped being, high-low or
low-high. An entry or exit is only counted between two periods that both have a value.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

__all__ = [
    "CODES",
    "LABELS",
    "SHORT",
    "assign_labels",
    "flags",
    "label_sequences",
    "label_transitions",
    "longest_run",
]

LABELS: tuple[str, ...] = (
    "high-high",
    "low-low",
    "high-low",
    "low-high",
    "not significant",
    "isolated",
)
#: Label of code -1.
NO_DATA = "no data"
CODES: dict[str, int] = {label: i for i, label in enumerate(LABELS)} | {NO_DATA: -1}
#: Short forms for sequences.
SHORT: dict[int, str] = {0: "HH", 1: "LL", 2: "HL", 3: "LH", 4: "ns", 5: "iso", -1: "nd"}
HH, LL, HL, LH, NS, ISO, ND = 0, 1, 2, 3, 4, 5, -1


def assign_labels(
    z: np.ndarray,
    lag: np.ndarray,
    significant: np.ndarray,
    isolated: np.ndarray,
    present: np.ndarray,
    *,
    statistic: str = "local-moran",
    stat: np.ndarray | None = None,
) -> np.ndarray:
    """int16 codes ``[units, periods]`` from standardised values, lags and significance.

    ``present`` marks cells with a value (others get -1). For ``gi-star`` the sign of ``stat``
    (the z-score) decides high-high (hot) or low-low (cold).
    """
    codes = np.full(z.shape, NS, dtype=np.int16)
    sig = np.asarray(significant, dtype=bool)
    if statistic == "gi-star":
        s = np.nan_to_num(stat if stat is not None else z)
        codes[sig & (s > 0)] = HH
        codes[sig & (s < 0)] = LL
    else:
        zz, ll = np.nan_to_num(z), np.nan_to_num(lag)
        codes[sig & (zz > 0) & (ll > 0)] = HH
        codes[sig & (zz < 0) & (ll < 0)] = LL
        codes[sig & (zz > 0) & (ll <= 0)] = HL
        codes[sig & (zz < 0) & (ll >= 0)] = LH
        codes[sig & (zz == 0)] = NS
    codes[np.asarray(isolated, dtype=bool)] = ISO
    codes[~np.asarray(present, dtype=bool)] = ND
    return codes


def label_sequences(codes: np.ndarray) -> list[str]:
    """Per unit, e.g. ``'ns>HH>HH>ns'`` (one entry per period; ``nd`` = no data)."""
    return [">".join(SHORT[int(c)] for c in row) for row in codes]


def label_transitions(codes: np.ndarray) -> np.ndarray:
    """``[6, 6]`` counts of label ``a`` in one period followed by ``b`` in the next, pooled over
    consecutive pairs where both periods have a value."""
    a, b = codes[:, :-1].ravel(), codes[:, 1:].ravel()
    ok = (a >= 0) & (b >= 0)
    out = np.zeros((len(LABELS), len(LABELS)), dtype=np.int64)
    np.add.at(out, (a[ok], b[ok]), 1)
    return out


def longest_run(mask: np.ndarray) -> np.ndarray:
    """Longest run of consecutive True per row of a ``[units, periods]`` boolean array."""
    best = np.zeros(mask.shape[0], dtype=np.int64)
    cur = np.zeros(mask.shape[0], dtype=np.int64)
    for t in range(mask.shape[1]):
        cur = np.where(mask[:, t], cur + 1, 0)
        best = np.maximum(best, cur)
    return best


def _events(
    prev_in: np.ndarray, now_in: np.ndarray, ok: np.ndarray, labels: Sequence[str]
) -> list[str]:
    hits = prev_in & now_in & ok
    return [";".join(labels[t + 1] for t in np.flatnonzero(row)) for row in hits]


def flags(codes: np.ndarray, period_labels: Sequence[str], persist: int = 3) -> dict[str, list]:
    """Per-unit flags (see module docstring) as columns: lists of period labels joined by ';'
    (empty string: never), counts and booleans."""
    labels = list(period_labels)
    a, b = codes[:, :-1], codes[:, 1:]
    ok = (a >= 0) & (b >= 0)
    out: dict[str, list] = {}
    for name, code in (("high", HH), ("low", LL)):
        out[f"joined_{name}_cluster"] = _events(a != code, b == code, ok, labels)
        out[f"left_{name}_cluster"] = _events(a == code, b != code, ok, labels)
    outlier_a = (a == HL) | (a == LH)
    outlier_b = (b == HL) | (b == LH)
    out["became_outlier"] = _events(~outlier_a, outlier_b, ok, labels)
    out["stopped_outlier"] = _events(outlier_a, ~outlier_b, ok, labels)
    run = longest_run(codes == HH)
    out["periods_high_cluster"] = list((codes == HH).sum(axis=1))
    out["periods_low_cluster"] = list((codes == LL).sum(axis=1))
    out["longest_high_run"] = list(run)
    out["steady_high_cluster"] = list(run >= persist)
    return out
