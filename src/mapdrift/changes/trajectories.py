"""Per-unit class histories: trajectory, moves, jumps, spikes and persistence flags.

Definitions (ours; they use the same steps as the transition counts, so a step across an
unbridged gap or with a no-data cell is never a move):

- *trajectory*: the 1-based class per period joined by ``-`` (``2-2-3-5-5``); ``_`` = no data.
- *class changes*: steps whose class differs; *largest move*: the signed move with the largest
  size (the earliest when tied), with its periods; *net change*: class in the last period minus
  class in the first period (NaN when either is no data).
- ``jump``: a step of ``jump`` or more classes (up or down).
- ``spike``: a jump followed, within ``spike_window`` period columns after it landed, by a move
  back of at least ``jump`` classes from the landing class (``2-5-2``, ``2-5-5-3`` with a window
  of 2): often a data error worth checking.
- ``stayed-top`` / ``stayed-bottom``: in the highest / lowest class in each of the last
  ``persist`` periods (no data in any of them, or fewer periods than ``persist`` -> not
  flagged).

Noise: with a ``tester`` (see :mod:`mapdrift.changes.noise`) every step of every unit with data
in both periods is tested for a change of rate (the whole family, not only the jumps, so that
picking the large moves does not bias the count), plus the move back of every spike; p-values
are adjusted over that family with ``correction``. A jump is *credible* when its adjusted
p-value is at most ``alpha``; the others are *moves within count noise* (still listed). A spike
needs both the jump and the move back credible. Moves that could not be tested (no tester, or a
count missing) keep counting as before, with ``credible`` blank.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np

if TYPE_CHECKING:
    import pandas as pd

__all__ = [
    "FLAG_LABELS",
    "UnitChanges",
    "change_categories",
    "flag_codes",
    "rank_mobility",
    "trajectories",
    "unit_changes",
]

#: Categories of the flagged-units map, in drawing order; a unit shows its first matching flag.
FLAG_LABELS: tuple[str, ...] = (
    "spike (check data)",
    "jumps up and down",
    "jump up",
    "jump down",
    "stayed in top class",
    "stayed in bottom class",
    "moves within count noise",
    "no flag",
)

#: ``tester(rows, col_a, col_b) -> p``: two-sided p-values of the change of unit ``rows`` from
#: period column ``col_a`` to ``col_b`` (NaN = not testable).
Tester = Callable[[np.ndarray, np.ndarray, np.ndarray], np.ndarray]


def trajectories(codes: np.ndarray) -> np.ndarray:
    """Trajectory text per unit (object array), e.g. ``'2-2-_-5'``; classes are shown 1-based."""
    codes = np.asarray(codes)
    n_u, n_p = codes.shape
    if n_p == 0:
        return np.full(n_u, "", dtype=object)
    if codes.max(initial=-1) < 9:  # one character per class: build the bytes directly
        chars = np.where(codes >= 0, codes + ord("1"), ord("_")).astype(np.uint8)
        buf = np.full((n_u, 2 * n_p - 1), ord("-"), dtype=np.uint8)
        buf[:, ::2] = chars
        raw = np.ascontiguousarray(buf).view(f"S{2 * n_p - 1}").ravel()
        return raw.astype(str).astype(object)
    tokens = np.where(codes >= 0, (codes + 1).astype(str), "_")
    return np.array(["-".join(row) for row in tokens], dtype=object)


@dataclass(frozen=True, eq=False)
class UnitChanges:
    """Per-unit change columns and the table of flagged moves.

    ``table`` has one row per unit (the ``units.csv`` change columns); ``jumps`` one row per
    move of ``jump`` classes or more. ``net_change`` (float, NaN = no data) and ``flag`` (index
    into :data:`FLAG_LABELS`, -1 = no data at all) feed the change map and the flagged map.
    """

    table: pd.DataFrame
    jumps: pd.DataFrame
    net_change: np.ndarray
    flag: np.ndarray


def unit_changes(
    codes: np.ndarray,
    values: np.ndarray,
    steps: Sequence[tuple[int, int]],
    *,
    units: Sequence[str],
    names: Sequence[str],
    period_labels: Sequence[str],
    top: Sequence[int],
    class_labels: Sequence[str],
    jump: int = 2,
    spike_window: int = 2,
    persist: int = 3,
    tester: Tester | None = None,
    alpha: float = 0.05,
    correction: str = "fdr",
) -> UnitChanges:
    """Trajectories, moves and flags for every unit (vectorised over units and steps).

    ``top[j]`` is the highest class code in period column ``j`` (``k - 1``, or per period when
    breaks differ by period). ``-1`` codes are no data: never part of a move. ``tester``
    (optional) tests moves against noise (module docstring); ``alpha`` and ``correction`` (see
    :mod:`mapdrift.clusters.multiple`) decide which are credible.
    """
    import pandas as pd

    from mapdrift.clusters.multiple import adjust

    codes = np.asarray(codes).astype(np.int64)
    values = np.asarray(values, dtype=np.float64)
    n_u, n_p = codes.shape
    per = np.array(period_labels, dtype=object)
    j0 = np.array([s[0] for s in steps], dtype=np.int64)
    j1 = np.array([s[1] for s in steps], dtype=np.int64)
    a, b = codes[:, j0], codes[:, j1]
    valid = (a >= 0) & (b >= 0)
    move = np.where(valid, b - a, 0)
    size = np.abs(move)
    n_valid = valid.sum(axis=1)
    n_changes = (move != 0).sum(axis=1)

    # largest move: argmax of size picks the earliest step among ties
    if len(steps):
        best = np.argmax(np.where(valid, size, -1), axis=1)
        rows = np.arange(n_u)
        largest = move[rows, best].astype(np.float64)
        has = n_valid > 0
        largest[~has] = np.nan
        lfrom = np.where(has & (size[rows, best] > 0), per[j0[best]], "")
        lto = np.where(has & (size[rows, best] > 0), per[j1[best]], "")
    else:
        largest = np.full(n_u, np.nan)
        lfrom = lto = np.full(n_u, "", dtype=object)

    first, last = codes[:, 0], codes[:, -1]
    net = np.where((first >= 0) & (last >= 0), last - first, np.nan).astype(np.float64)

    # jumps
    ju, js = np.nonzero(valid & (size >= jump))
    jmove = move[ju, js]
    sign = np.sign(jmove)
    land = b[ju, js]
    back_col = np.full(len(ju), -1, dtype=np.int64)
    for w in range(1, spike_window + 1):
        col = j1[js] + w
        inside = (col < n_p) & (back_col < 0)
        if not inside.any():
            continue
        c = np.full(len(ju), -1, dtype=np.int64)
        c[inside] = codes[ju[inside], col[inside]]
        back = inside & (c >= 0) & (sign * (land - c) >= jump)
        back_col[back] = col[back]
    pattern = back_col >= 0

    # noise: every valid unit-step plus every spike's move back, one family
    p_jump = np.full(len(ju), np.nan)
    adj_jump = np.full(len(ju), np.nan)
    adj_back = np.full(len(ju), np.nan)
    if tester is not None and len(steps):
        su, ss = np.nonzero(valid)
        p_steps = np.asarray(tester(su, j0[ss], j1[ss]), dtype=np.float64)
        bi = np.flatnonzero(pattern)
        p_back = np.asarray(tester(ju[bi], j1[js[bi]], back_col[bi]), dtype=np.float64)
        adj = adjust(np.concatenate([p_steps, p_back]), correction)
        step_p = np.full(valid.shape, np.nan)
        step_adj = np.full(valid.shape, np.nan)
        step_p[su, ss] = p_steps
        step_adj[su, ss] = adj[: len(p_steps)]
        p_jump = step_p[ju, js]
        adj_jump = step_adj[ju, js]
        adj_back[bi] = adj[len(p_steps) :]
    tested = ~np.isnan(adj_jump)
    with np.errstate(invalid="ignore"):
        credible = tested & (adj_jump <= alpha)
        back_ok = np.isnan(adj_back) | (adj_back <= alpha)
    counted = credible | ~tested  # untested moves count as before
    spike = pattern & counted & back_ok
    lab = np.array(class_labels, dtype=object)
    credible_text = np.where(tested, np.where(credible, "true", "false"), "")
    jumps = pd.DataFrame(
        {
            "unit": np.array(units, dtype=object)[ju],
            "name": np.array(names, dtype=object)[ju],
            "from_period": per[j0[js]],
            "to_period": per[j1[js]],
            "from_class": a[ju, js] + 1,
            "to_class": land + 1,
            "from_label": lab[a[ju, js]] if len(ju) else np.array([], dtype=object),
            "to_label": lab[land] if len(ju) else np.array([], dtype=object),
            "size": jmove,
            "direction": np.where(jmove > 0, "up", "down"),
            "value_before": values[ju, j0[js]],
            "value_after": values[ju, j1[js]],
            "p": p_jump,
            "p_adjusted": adj_jump,
            "credible": credible_text.astype(object),
            "spike": spike,
            "back_by": np.where(spike, per[np.maximum(back_col, 0)], ""),
        }
    )
    n_jumps = np.bincount(ju[counted], minlength=n_u)
    n_noise = np.bincount(ju[~counted], minlength=n_u)
    up = np.bincount(ju[counted & (jmove > 0)], minlength=n_u) > 0
    down = np.bincount(ju[counted & (jmove < 0)], minlength=n_u) > 0
    unit_spike = np.bincount(ju[spike], minlength=n_u) > 0
    noise_only = (n_noise > 0) & (n_jumps == 0)

    if persist <= n_p:
        tail = codes[:, n_p - persist :]
        top_tail = np.asarray(top, dtype=np.int64)[n_p - persist :]
        p_top = (tail == top_tail).all(axis=1)
        p_bottom = (tail == 0).all(axis=1)
    else:  # fewer periods than the window: nobody can have persisted that long
        p_top = p_bottom = np.zeros(n_u, dtype=bool)

    flag = flag_codes(
        unit_spike, up, down, p_top, p_bottom, (codes >= 0).any(axis=1), noise=noise_only
    )
    texts = _flag_texts(
        [
            (up | down, "jump"),
            (unit_spike, "spike"),
            (p_top, "stayed-top"),
            (p_bottom, "stayed-bottom"),
        ]
    )
    table = pd.DataFrame(
        {
            "unit": np.array(units, dtype=object),
            "name": np.array(names, dtype=object),
            "trajectory": trajectories(codes),
            "class_changes": n_changes,
            "largest_move": largest,
            "largest_move_from": lfrom,
            "largest_move_to": lto,
            "net_change": net,
            "n_jumps": n_jumps,
            "n_noise_moves": n_noise,
            "jump": up | down,
            "spike": unit_spike,
            "stayed_top": p_top,
            "stayed_bottom": p_bottom,
            "change_flags": texts,
        }
    )
    return UnitChanges(table=table, jumps=jumps, net_change=net, flag=flag)


def _flag_texts(flags: list[tuple[np.ndarray, str]]) -> np.ndarray:
    """``'jump;spike'`` per unit from boolean masks (empty text for no flag)."""
    out = np.full(len(flags[0][0]), "", dtype=object)
    for mask, name in flags:
        sep = np.where(out[mask] == "", "", ";")
        out[mask] = out[mask] + sep + name
    return out


def flag_codes(
    spike: np.ndarray,
    up: np.ndarray,
    down: np.ndarray,
    top: np.ndarray,
    bottom: np.ndarray,
    has_data: np.ndarray,
    noise: np.ndarray | None = None,
) -> np.ndarray:
    """One category per unit for the flagged map (index into :data:`FLAG_LABELS`, -1 = no data).

    ``noise`` marks units whose only jumps are moves within count noise.
    """
    out = np.full(len(spike), FLAG_LABELS.index("no flag"), dtype=np.int16)
    # assign from the lowest priority up so the highest-priority flag wins
    if noise is not None:
        out[np.asarray(noise, dtype=bool)] = FLAG_LABELS.index("moves within count noise")
    out[bottom] = FLAG_LABELS.index("stayed in bottom class")
    out[top] = FLAG_LABELS.index("stayed in top class")
    out[down] = FLAG_LABELS.index("jump down")
    out[up] = FLAG_LABELS.index("jump up")
    out[up & down] = FLAG_LABELS.index("jumps up and down")
    out[spike] = FLAG_LABELS.index("spike (check data)")
    out[~np.asarray(has_data, dtype=bool)] = -1
    return out


def change_categories(net_change: np.ndarray, k: int, cap: int = 3) -> tuple[np.ndarray, list[str]]:
    """Categories of the change map: net class change from ``-cap`` (or ``1 - k``) to ``+cap``.

    Returns ``(codes, labels)``: codes index the labels from the largest fall to the largest
    rise, centred on "no change" (so a diverging palette centres on zero); moves beyond
    ``cap`` classes share the end categories (``"down 3+"``); NaN (no data in the first or the
    last period) gives ``-1``.

    >>> change_categories(np.array([-4.0, 0.0, 1.0, np.nan]), 5)[0].tolist()
    [0, 3, 4, -1]
    """
    net = np.asarray(net_change, dtype=np.float64)
    side = max(1, min(cap, k - 1))
    ok = ~np.isnan(net)
    codes = np.full(net.shape, -1, dtype=np.int16)
    codes[ok] = np.clip(net[ok], -side, side).astype(np.int16) + side
    labels = []
    for m in range(-side, side + 1):
        more = "+" if abs(m) == side and side < k - 1 else ""
        if m == 0:
            labels.append("no change")
        else:
            word = "down" if m < 0 else "up"
            unit = "class" if abs(m) == 1 and not more else "classes"
            labels.append(f"{word} {abs(m)}{more} {unit}")
    return codes, labels


def rank_mobility(
    values: np.ndarray, steps: Sequence[tuple[int, int]], period_labels: Sequence[str]
) -> pd.DataFrame:
    """Kendall's tau-b of the values between each step's periods and first-to-last.

    Units missing (NaN) in either period are left out; fewer than 3 units give NaN. A tau near 1
    means units kept their rank order; lower values mean more reshuffling.
    """
    import pandas as pd

    from mapdrift.changes.kendall import kendall_tau_b

    values = np.asarray(values, dtype=np.float64)
    n_p = values.shape[1]
    pairs = [(a, b, "step") for a, b in steps]
    if n_p >= 2:
        pairs.append((0, n_p - 1, "first-last"))
    rows = []
    for a, b, kind in pairs:
        x, y = values[:, a], values[:, b]
        ok = ~(np.isnan(x) | np.isnan(y))
        n = int(ok.sum())
        if n >= 3:
            tau, p = kendall_tau_b(x[ok], y[ok])
        else:
            tau = p = float("nan")
        rows.append(
            {
                "from_period": period_labels[a],
                "to_period": period_labels[b],
                "kind": kind,
                "n_units": n,
                "kendall_tau": tau,
                "p_value": p,
            }
        )
    return pd.DataFrame(
        rows, columns=["from_period", "to_period", "kind", "n_units", "kendall_tau", "p_value"]
    )
