"""Markov chain summaries of a transition matrix and tests of homogeneity.

Following Kemeny & Snell (*Finite Markov Chains*, 1960) and Grinstead & Snell (*Introduction to
Probability*, ch. 11):

- stationary distribution ``pi`` (``pi P = pi``);
- mean first passage times ``m_ij`` (expected steps to first reach ``j`` from ``i``), found for
  each target ``j`` by solving ``m_i = 1 + sum_{l != j} p_il m_l``; the diagonal holds the mean
  *recurrence* time (expected steps to return), which is ``1 / pi_j`` for an ergodic chain;
- mobility ``1 - p_ii`` per class and Shorrocks' (1978) index ``(k - trace P) / (k - 1)``.

Real data are messy, so the chain may be reducible or have empty classes:

- a class no unit ever started a step in (an *empty row*) but that units moved into is treated
  as absorbing (``p_ii = 1``) with a note; a class never seen at all is left out of the chain;
- with one closed communicating class the stationary distribution is unique and zero on the
  transient classes; with several it is not unique: ``stationary`` is None and one distribution
  per closed class is given;
- a first passage time that is infinite (the target may never be reached) is ``inf`` here and
  ``null`` in JSON.

Homogeneity (Anderson & Goodman 1957): are the transition probabilities the same in every
*regime* (each step in time, or each neighbourhood class for spatially conditioned transitions)?
For each from-class ``i`` the regimes x to-classes table is tested for homogeneity; the Pearson
chi-square ``Q`` and the likelihood ratio ``LR`` add up over rows, with degrees of freedom
``sum_i (b_i - 1)(a_i - 1)`` where ``b_i`` counts regimes with a non-empty row ``i`` and ``a_i``
the to-classes with a non-zero pooled probability: empty rows and columns add no degrees of
freedom.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

__all__ = [
    "HomogeneityTest",
    "MarkovSummary",
    "first_passage_times",
    "homogeneity_test",
    "markov_summary",
    "stationary_distribution",
]


def _communicating(P: np.ndarray) -> tuple[np.ndarray, list[np.ndarray], list[bool]]:
    """Strongly connected classes of the chain: labels, members, and whether each is closed."""
    from scipy.sparse import csr_matrix
    from scipy.sparse.csgraph import connected_components

    adj = csr_matrix(P > 0)
    n_comp, lab = connected_components(adj, directed=True, connection="strong")
    members = [np.flatnonzero(lab == c) for c in range(n_comp)]
    closed = []
    for m in members:
        outside = np.setdiff1d(np.arange(P.shape[0]), m)
        closed.append(not (P[np.ix_(m, outside)] > 0).any())
    return lab, members, closed


def _stationary_closed(P: np.ndarray, members: np.ndarray) -> np.ndarray:
    """Stationary distribution of the irreducible sub-chain on ``members`` (full length)."""
    sub = P[np.ix_(members, members)]
    n = len(members)
    # solve pi (I - P) = 0 with sum(pi) = 1: replace one equation by the normalisation
    a = (np.eye(n) - sub).T
    a[-1, :] = 1.0
    rhs = np.zeros(n)
    rhs[-1] = 1.0
    pi_sub = np.linalg.solve(a, rhs)
    pi_sub = np.clip(pi_sub, 0.0, None)
    pi_sub /= pi_sub.sum()
    out = np.zeros(P.shape[0])
    out[members] = pi_sub
    return out


def stationary_distribution(P: np.ndarray) -> tuple[np.ndarray | None, list[np.ndarray]]:
    """Stationary distribution of a stochastic matrix.

    Returns ``(pi, per_closed)``: ``pi`` is the unique stationary distribution (None when the
    chain has more than one closed class) and ``per_closed`` one distribution per closed class.

    >>> P = np.array([[0.5, 0.25, 0.25], [0.5, 0, 0.5], [0.25, 0.25, 0.5]])
    >>> stationary_distribution(P)[0].round(3).tolist()
    [0.4, 0.2, 0.4]
    """
    P = np.asarray(P, dtype=np.float64)
    _, members, closed = _communicating(P)
    per_closed = [_stationary_closed(P, m) for m, c in zip(members, closed, strict=True) if c]
    return (per_closed[0] if len(per_closed) == 1 else None), per_closed


def first_passage_times(P: np.ndarray) -> np.ndarray:
    """Mean first passage times ``M[i, j]``; the diagonal holds mean recurrence times.

    ``inf`` where ``j`` may never be reached from ``i`` (reducible chains). For an ergodic chain
    the diagonal equals ``1 / pi_j`` (Kac's formula; Grinstead & Snell Thm 11.15).
    """
    P = np.asarray(P, dtype=np.float64)
    k = P.shape[0]
    reach = (P > 0).astype(np.int64)
    # transitive closure: reach[i, j] = 1 when j is reachable from i in >= 1 steps
    closure = reach.copy()
    for _ in range(k):
        new = ((closure + closure @ reach) > 0).astype(np.int64)
        if (new == closure).all():
            break
        closure = new
    can = closure.astype(bool) | np.eye(k, dtype=bool)
    M = np.full((k, k), np.inf)
    for j in range(k):
        others = np.array([i for i in range(k) if i != j], dtype=np.int64)
        # states that cannot reach j at all, and states that may wander into them first
        lost = [i for i in others if not can[i, j]]
        bad = set(lost)
        changed = True
        while changed:
            changed = False
            for i in others:
                if i in bad:
                    continue
                nxt = np.flatnonzero(P[i] > 0)
                if any(int(x) in bad for x in nxt if x != j):
                    bad.add(int(i))
                    changed = True
        good = np.array([i for i in others if i not in bad], dtype=np.int64)
        h = np.full(k, np.inf)
        h[j] = 0.0
        if len(good):
            sub = P[np.ix_(good, good)]
            h[good] = np.linalg.solve(np.eye(len(good)) - sub, np.ones(len(good)))
        M[others, j] = h[others]
        # recurrence: one step out of j, then the passage back
        nxt = np.flatnonzero(P[j] > 0)
        if all(np.isfinite(h[x]) for x in nxt):
            M[j, j] = 1.0 + float(P[j, nxt] @ h[nxt])
    return M


def _fmt(x: float) -> float | None:
    return None if (x is None or not math.isfinite(x)) else float(x)


@dataclass(frozen=True)
class MarkovSummary:
    """Summaries of a pooled transition matrix (see the module docstring for conventions).

    Arrays are over all ``k`` classes: ``stationary`` is NaN for classes left out of the chain
    (never seen) and None as a whole when not unique; ``first_passage`` is ``inf`` where a class
    may never be reached and NaN for left-out classes; ``mobility`` is NaN for empty rows.
    """

    labels: tuple[str, ...]
    P: np.ndarray
    stationary: np.ndarray | None
    stationary_by_closed_class: tuple[np.ndarray, ...]
    first_passage: np.ndarray
    mobility: np.ndarray
    shorrocks: float | None
    ergodic: bool
    communicating_classes: tuple[tuple[int, ...], ...]
    closed_classes: tuple[tuple[int, ...], ...]
    absorbing_assumed: tuple[int, ...]
    left_out: tuple[int, ...]
    notes: tuple[str, ...]

    def to_dict(self) -> dict[str, Any]:
        lab = list(self.labels)

        def vec(v: np.ndarray | None) -> list[float | None] | None:
            return None if v is None else [_fmt(x) for x in v]

        return {
            "classes": lab,
            "convention": (
                "mean first passage times m[i][j] = expected steps to first reach class j from "
                "class i; the diagonal holds mean recurrence times (1/pi_j for an ergodic chain); "
                "null = never reached or left out"
            ),
            "ergodic": self.ergodic,
            "stationary": vec(self.stationary),
            "stationary_by_closed_class": [vec(v) for v in self.stationary_by_closed_class],
            "first_passage_times": [vec(row) for row in self.first_passage],
            "mobility": vec(self.mobility),
            "shorrocks_index": _fmt(self.shorrocks) if self.shorrocks is not None else None,
            "communicating_classes": [[lab[i] for i in c] for c in self.communicating_classes],
            "closed_classes": [[lab[i] for i in c] for c in self.closed_classes],
            "treated_as_absorbing": [lab[i] for i in self.absorbing_assumed],
            "left_out": [lab[i] for i in self.left_out],
            "notes": list(self.notes),
        }


def markov_summary(counts: np.ndarray, labels: Sequence[str] | None = None) -> MarkovSummary:
    """Stationary distribution, first passage times and mobility of a k x k count matrix.

    Empty rows: a class units moved into but never out of is made absorbing (noted); a class
    with no transitions at all is left out (NaN in the arrays).
    """
    counts = np.asarray(counts, dtype=np.float64)
    k = counts.shape[0]
    labels = tuple(labels) if labels is not None else tuple(f"class {i + 1}" for i in range(k))
    rows = counts.sum(axis=1)
    cols = counts.sum(axis=0)
    notes: list[str] = []
    seen = (rows > 0) | (cols > 0)
    left_out = tuple(int(i) for i in np.flatnonzero(~seen))
    absorbing = tuple(int(i) for i in np.flatnonzero((rows == 0) & (cols > 0)))
    if left_out:
        notes.append(
            "no transition from or to "
            + ", ".join(labels[i] for i in left_out)
            + "; left out of the chain"
        )
    if absorbing:
        notes.append(
            "no unit was seen leaving "
            + ", ".join(labels[i] for i in absorbing)
            + " (it only occurs at the end of steps); treated as absorbing (p_ii = 1)"
        )
    keep = np.flatnonzero(seen)
    P_full = np.full((k, k), np.nan)
    stationary: np.ndarray | None = None
    per_closed: list[np.ndarray] = []
    fpt = np.full((k, k), np.nan)
    comm: list[tuple[int, ...]] = []
    closed_cls: list[tuple[int, ...]] = []
    ergodic = False
    if len(keep):
        sub = counts[np.ix_(keep, keep)]
        rs = sub.sum(axis=1, keepdims=True)
        P = np.divide(sub, rs, out=np.zeros_like(sub), where=rs > 0)
        for r in np.flatnonzero(rs.ravel() == 0):
            P[r, r] = 1.0
        P_full[np.ix_(keep, keep)] = P
        _, members, closed = _communicating(P)
        comm = [tuple(int(keep[i]) for i in m) for m in members]
        closed_cls = [c for c, cl in zip(comm, closed, strict=True) if cl]
        pi_sub, per_sub = stationary_distribution(P)
        if pi_sub is not None:
            stationary = np.full(k, np.nan)
            stationary[keep] = pi_sub
        for v in per_sub:
            full = np.full(k, np.nan)
            full[keep] = v
            per_closed.append(full)
        fpt[np.ix_(keep, keep)] = first_passage_times(P)
        ergodic = len(members) == 1
        if len(members) > 1:
            transient = [c for c, cl in zip(comm, closed, strict=True) if not cl]
            notes.append(
                f"the chain is reducible ({len(members)} communicating groups of classes); "
                "some first passage times are infinite (null)"
                + (
                    "; transient: " + "; ".join(", ".join(labels[i] for i in c) for c in transient)
                    if transient
                    else ""
                )
            )
        if len(closed_cls) > 1:
            notes.append(
                f"{len(closed_cls)} closed groups of classes: the stationary distribution is not "
                "unique; one per closed group is given"
            )
    with np.errstate(invalid="ignore"):
        diag = np.diag(P_full).copy()
    mobility = 1.0 - diag
    mobility[rows == 0] = np.nan
    shorrocks = None
    kk = len(keep)
    if kk >= 2:
        shorrocks = float((kk - np.nansum(np.diag(P_full)[keep])) / (kk - 1))
    return MarkovSummary(
        labels=labels,
        P=P_full,
        stationary=stationary,
        stationary_by_closed_class=tuple(per_closed),
        first_passage=fpt,
        mobility=mobility,
        shorrocks=shorrocks,
        ergodic=ergodic,
        communicating_classes=tuple(comm),
        closed_classes=tuple(closed_cls),
        absorbing_assumed=absorbing,
        left_out=left_out,
        notes=tuple(notes),
    )


@dataclass(frozen=True)
class HomogeneityTest:
    """Anderson-Goodman test that transition probabilities are equal across regimes.

    ``Q`` Pearson chi-square, ``LR`` likelihood ratio (G) statistic, ``df`` degrees of freedom
    over non-empty rows; p-values from the chi-square distribution. ``None`` statistics when
    ``df`` is 0 (nothing to compare). ``per_row`` holds each from-class's share.
    """

    what: str
    n_regimes: int
    Q: float | None
    LR: float | None
    df: int
    p_Q: float | None
    p_LR: float | None
    per_row: tuple[dict[str, Any], ...]
    note: str = ""

    def to_dict(self) -> dict[str, Any]:
        return {
            "test": "Anderson-Goodman (1957) homogeneity of transition probabilities",
            "regimes": self.what,
            "n_regimes": self.n_regimes,
            "chi2": _fmt(self.Q) if self.Q is not None else None,
            "chi2_p_value": _fmt(self.p_Q) if self.p_Q is not None else None,
            "likelihood_ratio": _fmt(self.LR) if self.LR is not None else None,
            "likelihood_ratio_p_value": _fmt(self.p_LR) if self.p_LR is not None else None,
            "df": self.df,
            "per_row": list(self.per_row),
            "note": self.note,
        }


def homogeneity_test(
    by_regime: np.ndarray, *, what: str = "steps", labels: Sequence[str] | None = None
) -> HomogeneityTest:
    """Test ``H0: p_ij(r) = p_ij`` for all regimes ``r`` from counts ``[n_regimes, k, k]``.

    See the module docstring for the statistics and the degrees of freedom. A regime whose row
    ``i`` is empty adds nothing to row ``i``; a to-class never reached from ``i`` adds nothing.
    """
    from scipy.special import chdtrc  # chi2.sf(x, df), without importing scipy.stats

    F = np.asarray(by_regime, dtype=np.float64)
    n_r, k, _ = F.shape
    labels = tuple(labels) if labels is not None else tuple(f"class {i + 1}" for i in range(k))
    Q = LR = 0.0
    df = 0
    per_row = []
    for i in range(k):
        table = F[:, i, :]  # regimes x to-classes
        n_ir = table.sum(axis=1)
        rows = n_ir > 0
        colsum = table[rows].sum(axis=0)
        cols = colsum > 0
        b, a = int(rows.sum()), int(cols.sum())
        d = max(b - 1, 0) * max(a - 1, 0)
        q = lr = 0.0
        if d > 0:
            t = table[np.ix_(rows, cols)]
            p_pool = t.sum(axis=0) / t.sum()
            expected = t.sum(axis=1, keepdims=True) * p_pool
            q = float(((t - expected) ** 2 / expected).sum())
            nz = t > 0
            lr = float(2.0 * (t[nz] * np.log(t[nz] / expected[nz])).sum())
        Q += q
        LR += lr
        df += d
        per_row.append(
            {"from_label": labels[i], "regimes": b, "to_classes": a, "df": d, "chi2": q, "lr": lr}
        )
    if df == 0:
        return HomogeneityTest(
            what,
            n_r,
            None,
            None,
            0,
            None,
            None,
            tuple(per_row),
            note="nothing to compare: every from-class has a single regime or a single outcome",
        )
    return HomogeneityTest(
        what,
        n_r,
        Q,
        LR,
        df,
        # rounding can leave a statistic at -1e-14 where the tables match exactly; chdtrc would
        # give NaN there (scipy.stats' chi2.sf gives 1)
        float(chdtrc(df, max(Q, 0.0))),
        float(chdtrc(df, max(LR, 0.0))),
        tuple(per_row),
    )
