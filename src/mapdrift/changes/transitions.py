"""Class transitions between periods: which steps count, and the k x k count matrices.

A *step* is a pair of consecutive period columns ``(j, j + 1)``. When the periods are not
adjacent (a gap in the series, e.g. 2016 -> 2018 in yearly data) the step is left out unless
``bridge_gaps`` is set. The regular spacing is the smallest difference between consecutive
periods, so biennial data (2010, 2012, 2014) have no gaps. Within a step, a unit whose class is
``-1`` (no data) in either period is left out of the counts and counted in ``n_missing``.

Class codes are exactly those of the :class:`~mapdrift.breaks.Classes` handed in (0 = lowest
class); tables show them 1-based (``class 1`` = lowest) beside the legend labels.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

import numpy as np

if TYPE_CHECKING:
    import pandas as pd

    from mapdrift.breaks import Classes

__all__ = [
    "Transitions",
    "adjacent_steps",
    "class_labels",
    "count_transitions",
    "period_positions",
    "row_probabilities",
]


def period_positions(periods: Sequence[Any]) -> np.ndarray | None:
    """Periods as integer positions on their own calendar (years, month or quarter ordinals).

    Returns None when the periods are of a kind without a natural step; every pair then counts
    as adjacent.
    """
    out = []
    for p in periods:
        if isinstance(p, bool):
            return None
        if isinstance(p, int | np.integer):
            out.append(int(p))
        elif hasattr(p, "ordinal") and hasattr(p, "freq"):  # pandas Period
            out.append(int(p.ordinal))
        else:
            return None
    return np.asarray(out, dtype=np.int64)


def adjacent_steps(periods: Sequence[Any]) -> np.ndarray:
    """For each consecutive pair of periods, whether they are adjacent (no period between).

    The regular step is inferred once by :func:`mapdrift.periods.spacing` (the smallest
    difference when every difference is a multiple of it; unevenly spaced periods such as
    1984, 1988, 1993 are all adjacent).

    >>> adjacent_steps([2015, 2016, 2018, 2019]).tolist()
    [True, False, True]
    >>> adjacent_steps([2010, 2012, 2014]).tolist()
    [True, True]
    """
    if len(periods) < 2:
        return np.zeros(0, dtype=bool)
    from mapdrift.periods import spacing  # the one spacing rule, shared with check and trends

    return np.asarray(spacing(periods).adjacent, dtype=bool)


def class_labels(classes: Classes) -> tuple[str, ...]:
    """Legend labels of the classes; generic ``class 1..k`` when breaks differ by period."""
    if classes.per_period:
        return tuple(f"class {i + 1}" for i in range(classes.k))
    labels = tuple(classes.breaks[0].labels)
    if len(labels) < classes.k:  # defensive: labels always match k in Breaks
        labels = labels + tuple(f"class {i + 1}" for i in range(len(labels), classes.k))
    return labels


def row_probabilities(counts: np.ndarray) -> np.ndarray:
    """Row-normalised probabilities of a ``[..., k, k]`` count array; empty rows are NaN.

    Callers show NaN rows as *empty* (no unit started in that class), not as numbers.
    """
    counts = np.asarray(counts, dtype=np.float64)
    totals = counts.sum(axis=-1, keepdims=True)
    with np.errstate(invalid="ignore", divide="ignore"):
        p = counts / totals
    return np.where(totals > 0, p, np.nan)


@dataclass(frozen=True, eq=False)
class Transitions:
    """Transition counts between classes.

    ``counts`` ``[k, k]``: pooled over every included step (rows = class at the start, columns =
    class at the end). ``by_step`` ``[n_steps, k, k]``: one matrix per step in ``steps`` (column
    pairs ``(j0, j1)`` of the panel, only included steps). ``first_last``: first period to last
    period directly. ``n_missing`` ``[n_steps]``: unit pairs left out because a class was -1.
    ``skipped_steps``: column pairs left out as gaps (empty when ``bridge_gaps``).
    """

    counts: np.ndarray
    by_step: np.ndarray
    first_last: np.ndarray
    steps: tuple[tuple[int, int], ...]
    gap_steps: tuple[bool, ...]
    skipped_steps: tuple[tuple[int, int], ...]
    n_missing: np.ndarray
    n_missing_first_last: int
    labels: tuple[str, ...]
    period_labels: tuple[str, ...]

    @property
    def k(self) -> int:
        return int(self.counts.shape[0])

    @property
    def probabilities(self) -> np.ndarray:
        """Pooled row probabilities; NaN rows are empty (no unit started in that class)."""
        return row_probabilities(self.counts)

    @property
    def empty_rows(self) -> np.ndarray:
        return self.counts.sum(axis=1) == 0

    @property
    def n_pairs(self) -> int:
        """Unit pairs counted (valid consecutive pairs over the included steps)."""
        return int(self.counts.sum())

    def step_label(self, s: int) -> str:
        j0, j1 = self.steps[s]
        return f"{self.period_labels[j0]}-{self.period_labels[j1]}"

    # -- tables ----------------------------------------------------------------------------
    def _matrix_frame(self, m: np.ndarray, *, probabilities: bool) -> pd.DataFrame:
        import pandas as pd

        k = self.k
        totals = self.counts.sum(axis=1) if m is self.counts else m.sum(axis=1)
        df = pd.DataFrame(
            {"from_class": np.arange(1, k + 1), "from_label": list(self.labels)},
        )
        if probabilities:
            p = row_probabilities(m)
            for j, lab in enumerate(self.labels):
                df[lab] = p[:, j]
            df["n_from"] = totals.astype(np.int64)
            df["note"] = ["" if t > 0 else "empty: no unit started in this class" for t in totals]
        else:
            for j, lab in enumerate(self.labels):
                df[lab] = m[:, j].astype(np.int64)
            df["total"] = totals.astype(np.int64)
        return df

    def counts_table(self) -> pd.DataFrame:
        """``transitions.csv``: rows = from class, columns = to class (legend labels), counts."""
        return self._matrix_frame(self.counts, probabilities=False)

    def probabilities_table(self) -> pd.DataFrame:
        """``transition_probabilities.csv``; an empty row has blank cells and a note."""
        return self._matrix_frame(self.counts, probabilities=True)

    def first_last_table(self) -> pd.DataFrame:
        """First period to last period counts, same layout as :meth:`counts_table`."""
        return self._matrix_frame(self.first_last, probabilities=False)

    def by_step_table(self) -> pd.DataFrame:
        """``transitions_by_pair.csv``: long form, one row per step x from class x to class."""
        import pandas as pd

        k, n_s = self.k, len(self.steps)
        p = row_probabilities(self.by_step)
        s_idx = np.repeat(np.arange(n_s), k * k)
        fr = np.tile(np.repeat(np.arange(k), k), n_s)
        to = np.tile(np.arange(k), n_s * k)
        labels = np.array(self.labels, dtype=object)
        per = np.array(self.period_labels, dtype=object)
        j0 = np.array([s[0] for s in self.steps], dtype=np.int64)
        j1 = np.array([s[1] for s in self.steps], dtype=np.int64)
        return pd.DataFrame(
            {
                "from_period": per[j0[s_idx]] if n_s else [],
                "to_period": per[j1[s_idx]] if n_s else [],
                "bridged_gap": np.array(self.gap_steps, dtype=bool)[s_idx] if n_s else [],
                "from_class": fr + 1,
                "from_label": labels[fr],
                "to_class": to + 1,
                "to_label": labels[to],
                "count": self.by_step.reshape(-1).astype(np.int64),
                "probability": p.reshape(-1),
            }
        )


def _pair_counts(a: np.ndarray, b: np.ndarray, k: int) -> tuple[np.ndarray, int]:
    """k x k counts of (a, b) class pairs where both are >= 0; and how many were left out."""
    ok = (a >= 0) & (b >= 0)
    idx = a[ok].astype(np.int64) * k + b[ok]
    return np.bincount(idx, minlength=k * k).reshape(k, k), int((~ok).sum())


def count_transitions(
    codes: np.ndarray,
    k: int,
    *,
    periods: Sequence[Any],
    labels: Sequence[str] | None = None,
    bridge_gaps: bool = False,
) -> Transitions:
    """Count class transitions over consecutive periods, per step and first-to-last.

    ``codes`` is ``[n_units, n_periods]`` int (``-1`` = no data, left out and counted). Steps
    across a gap in ``periods`` count only with ``bridge_gaps``. First-to-last compares the first
    and the last period columns directly (units with no data in either are left out).
    """
    codes = np.asarray(codes)
    n_u, n_p = codes.shape
    if labels is None:
        labels = tuple(f"class {i + 1}" for i in range(k))
    adjacent = adjacent_steps(periods)
    steps, gaps, skipped = [], [], []
    for j in range(n_p - 1):
        if adjacent[j] or bridge_gaps:
            steps.append((j, j + 1))
            gaps.append(not bool(adjacent[j]))
        else:
            skipped.append((j, j + 1))
    by_step = np.zeros((len(steps), k, k), dtype=np.int64)
    n_missing = np.zeros(len(steps), dtype=np.int64)
    if steps and n_u:
        # one bincount over all steps: index = (step * k + from) * k + to
        j0 = np.array([s[0] for s in steps])
        j1 = np.array([s[1] for s in steps])
        a = codes[:, j0].astype(np.int64)
        b = codes[:, j1].astype(np.int64)
        ok = (a >= 0) & (b >= 0)
        s_idx = np.broadcast_to(np.arange(len(steps)), a.shape)
        flat = (s_idx[ok] * k + a[ok]) * k + b[ok]
        by_step = np.bincount(flat, minlength=len(steps) * k * k).reshape(len(steps), k, k)
        n_missing = (~ok).sum(axis=0).astype(np.int64)
    if n_p >= 2:
        first_last, miss_fl = _pair_counts(codes[:, 0], codes[:, -1], k)
    else:
        first_last, miss_fl = np.zeros((k, k), dtype=np.int64), 0
    per_labels = tuple(str(p) for p in periods)
    return Transitions(
        counts=by_step.sum(axis=0) if len(steps) else np.zeros((k, k), dtype=np.int64),
        by_step=by_step,
        first_last=first_last,
        steps=tuple(steps),
        gap_steps=tuple(gaps),
        skipped_steps=tuple(skipped),
        n_missing=n_missing,
        n_missing_first_last=miss_fl,
        labels=tuple(labels),
        period_labels=per_labels,
    )
