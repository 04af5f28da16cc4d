"""Charts of class transitions: a heatmap of the transition matrix and a flow of class shares.

Plain arrays in, a file out (PNG, PDF or SVG by the path's suffix), written atomically. Nothing
here knows about panels or the change analysis; the caller passes counts, labels and colours.

- :func:`transition_heatmap`: rows = class at the start of a step, columns = class at the end.
  Each cell shows its count and its share of the row; the fill shows the row share so rows with
  few units are not washed out by busy ones. Empty rows (no unit started in that class) are
  drawn hatched and say so, rather than as zeros.
- :func:`class_flow`: an alluvial-style diagram. Left: class shares in the first period;
  right: in the last; ribbons carry the units from each first-period class to each last-period
  class, their width proportional to the count. Only units with data in both periods take part.
"""

from __future__ import annotations

from collections.abc import Sequence
from pathlib import Path
from typing import Any

import numpy as np

__all__ = ["class_flow", "spread_labels", "transition_heatmap"]

_INK = "#222222"
_MUTED = "#666666"
_EMPTY = "#f2f2f2"


def _figure(size: tuple[int, int], dpi: int) -> tuple[Any, Any]:
    import matplotlib

    matplotlib.use("Agg", force=False)
    from matplotlib.figure import Figure

    fig = Figure(figsize=(size[0] / dpi, size[1] / dpi), dpi=dpi)
    fig.patch.set_facecolor("white")
    return fig, fig.add_axes((0.0, 0.0, 1.0, 1.0))


def _headings(
    fig: Any, title: str, subtitle: str, caption: str, notice: str | None, h_px: float = 720
) -> None:
    """Title, subtitle, caption and notice at fixed distances (design pixels) from the edges
    of a figure ``h_px`` design pixels high, so larger text (a higher dpi) never collides."""
    fig.text(0.03, 1 - 32 / h_px, title, fontsize=17, fontweight="bold", color=_INK, va="top")
    if subtitle:
        fig.text(0.03, 1 - 68 / h_px, subtitle, fontsize=11.5, color=_MUTED, va="top")
    y = 14 / h_px
    if caption:
        fig.text(0.03, y, caption, fontsize=9, color=_MUTED, va="bottom")
        y += 25 / h_px
    if notice:
        fig.text(0.03, y, notice, fontsize=10, color="#8a1c1c", fontweight="bold", va="bottom")


def _pct(x: float) -> str:
    """Share as text; a non-zero share that rounds to 0 % reads ``<1%``."""
    return "<1%" if 0 < x < 0.005 else f"{x:.0%}"


def _save(fig: Any, path: Path, dpi: int) -> Path:
    from mapdrift.pngwrite import write_figure

    return write_figure(fig, path, dpi=dpi)


def transition_heatmap(
    counts: np.ndarray,
    labels: Sequence[str],
    path: Path | str,
    *,
    title: str = "Class transitions",
    subtitle: str = "",
    caption: str = "",
    notice: str | None = None,
    cmap: str = "Blues",
    size: tuple[int, int] = (1280, 720),
    dpi: int = 100,
    unit_noun: str = "units",
) -> Path:
    """Draw the k x k transition matrix with the count and the row share in every cell.

    ``counts[i, j]``: units that went from class ``i`` to class ``j``. Empty rows are hatched
    and labelled "no unit started here". ``notice`` (e.g. the per-period-breaks warning) is
    printed in bold above the caption.
    """
    from matplotlib import colormaps
    from matplotlib.patches import Rectangle

    counts = np.asarray(counts, dtype=np.float64)
    k = counts.shape[0]
    labels = list(labels)
    fig, ax = _figure(size, dpi)
    _headings(fig, title, subtitle, caption, notice, size[1] * 100 / dpi)
    rows = counts.sum(axis=1)
    share = np.divide(counts, rows[:, None], out=np.zeros_like(counts), where=rows[:, None] > 0)
    cm = colormaps[cmap]
    # matrix area: leave room for row labels on the left and headings above (figure pixels at
    # the 100-dpi design size, so a larger dpi only makes the text larger)
    w_px, h_px = size[0] * 100 / dpi, size[1] * 100 / dpi
    top, bottom = 1 - 150 / h_px, 122 / h_px  # room for headings and the rotated labels
    cell = min((top - bottom) * h_px / k, 0.62 * w_px / k)
    x0 = 0.30 * w_px
    y_top = top * h_px
    ax.set_xlim(0, w_px)
    ax.set_ylim(0, h_px)
    ax.axis("off")
    fs = max(7.0, min(13.0, cell / 5.2))
    for i in range(k):
        y = y_top - (i + 1) * cell
        for j in range(k):
            x = x0 + j * cell
            if rows[i] == 0:
                empty = Rectangle(
                    (x, y), cell, cell, facecolor=_EMPTY, edgecolor="#bbbbbb", hatch="///", lw=0.6
                )
                ax.add_patch(empty)
                continue
            fill = cm(0.08 + 0.85 * share[i, j])
            ax.add_patch(Rectangle((x, y), cell, cell, facecolor=fill, edgecolor="white", lw=1.2))
            lum = 0.2126 * fill[0] + 0.7152 * fill[1] + 0.0722 * fill[2]
            ink = "white" if lum < 0.5 else _INK
            ax.text(
                x + cell / 2,
                y + cell * 0.58,
                f"{int(counts[i, j]):,}",
                ha="center",
                va="center",
                fontsize=fs,
                color=ink,
                fontweight="bold",
            )
            ax.text(
                x + cell / 2,
                y + cell * 0.30,
                _pct(share[i, j]),
                ha="center",
                va="center",
                fontsize=fs * 0.78,
                color=ink,
            )
        if rows[i] == 0:
            ax.text(
                x0 + k * cell / 2,
                y + cell / 2,
                f"none of the {unit_noun} started in this class",
                ha="center",
                va="center",
                fontsize=fs * 0.85,
                color=_MUTED,
                bbox={"facecolor": "white", "edgecolor": "none", "pad": 2},
            )
        ax.text(
            x0 - 10,
            y + cell / 2,
            f"{labels[i]}  ({int(rows[i]):,})",
            ha="right",
            va="center",
            fontsize=fs * 0.9,
            color=_INK,
        )
    # outline the diagonal: units that stayed in their class
    for i in range(k):
        if rows[i] > 0:
            frame = Rectangle(
                (x0 + i * cell, y_top - (i + 1) * cell), cell, cell, fill=False, edgecolor=_INK
            )
            frame.set_linewidth(1.6)
            ax.add_patch(frame)
    for j in range(k):
        ax.text(
            x0 + (j + 0.5) * cell,
            y_top + 8,
            labels[j],
            ha="left",
            va="bottom",
            rotation=30,
            fontsize=fs * 0.85,
            color=_INK,
            rotation_mode="anchor",
        )
    ax.text(
        x0 - 10,
        y_top + 8,
        "from \u2193  to \u2192",
        ha="right",
        va="bottom",
        fontsize=fs * 0.85,
        color=_MUTED,
    )
    ax.text(
        x0 + k * cell + 14,
        y_top - cell / 2,
        "count\nshare of row\n\nframed: stayed",
        ha="left",
        va="top",
        fontsize=fs * 0.8,
        color=_MUTED,
    )
    return _save(fig, Path(path), dpi)


def spread_labels(want: Sequence[float], pitch: float, lo: float, hi: float) -> list[float]:
    """Label positions as close as possible to ``want`` (ascending) but at least ``pitch``
    apart, kept inside ``[lo, hi]`` where there is room: a forward then a backward pass."""
    ys = list(want)
    for i in range(1, len(ys)):
        ys[i] = max(ys[i], ys[i - 1] + pitch)
    if ys and ys[-1] > hi:
        ys[-1] = hi
        for i in range(len(ys) - 2, -1, -1):
            ys[i] = min(ys[i], ys[i + 1] - pitch)
    if ys and ys[0] < lo:
        ys[0] = lo
        for i in range(1, len(ys)):
            ys[i] = max(ys[i], ys[i - 1] + pitch)
    return ys


def _ribbon(
    ax: Any,
    x0: float,
    x1: float,
    y0: tuple[float, float],
    y1: tuple[float, float],
    colour: str,
    alpha: float,
) -> None:
    """A band from [y0] at x0 to [y1] at x1 with smooth (cubic) edges."""
    from matplotlib.patches import PathPatch
    from matplotlib.path import Path as MPath

    xm = (x0 + x1) / 2
    verts = [
        (x0, y0[0]),
        (xm, y0[0]),
        (xm, y1[0]),
        (x1, y1[0]),
        (x1, y1[1]),
        (xm, y1[1]),
        (xm, y0[1]),
        (x0, y0[1]),
        (x0, y0[0]),
    ]
    codes = [
        MPath.MOVETO,
        MPath.CURVE4,
        MPath.CURVE4,
        MPath.CURVE4,
        MPath.LINETO,
        MPath.CURVE4,
        MPath.CURVE4,
        MPath.CURVE4,
        MPath.CLOSEPOLY,
    ]
    from matplotlib.colors import to_rgba

    patch = PathPatch(
        MPath(verts, codes),
        facecolor=to_rgba(colour, alpha),
        edgecolor=to_rgba(_INK, 0.25),
        linewidth=0.4,
    )
    ax.add_patch(patch)


def class_flow(
    counts: np.ndarray,
    labels: Sequence[str],
    colours: Sequence[str],
    path: Path | str,
    *,
    first_label: str,
    last_label: str,
    title: str = "Where units moved",
    subtitle: str = "",
    caption: str = "",
    notice: str | None = None,
    size: tuple[int, int] = (1280, 720),
    dpi: int = 100,
    unit_noun: str = "units",
) -> Path:
    """Alluvial-style flow from the class shares of the first period to those of the last.

    ``counts[i, j]``: units in class ``i`` in the first period and ``j`` in the last (only
    units with data in both). Bars are stacked with the highest class on top; ribbons take the
    colour of the class they leave. Classes with no unit get no bar. Labels of thin bars are
    spread apart so they never overlap, with a leader line to their bar when moved.
    """
    from matplotlib.patches import Rectangle

    counts = np.asarray(counts, dtype=np.float64)
    k = counts.shape[0]
    labels = list(labels)
    fig, ax = _figure(size, dpi)
    _headings(fig, title, subtitle, caption, notice, size[1] * 100 / dpi)
    total = counts.sum()
    w_px, h_px = size[0] * 100 / dpi, size[1] * 100 / dpi  # design pixels (100 dpi)
    ax.set_xlim(0, w_px)
    ax.set_ylim(0, h_px)
    ax.axis("off")
    if total == 0:
        ax.text(
            w_px / 2,
            h_px / 2,
            f"none of the {unit_noun} has data in both periods",
            ha="center",
            va="center",
            fontsize=14,
            color=_MUTED,
        )
        return _save(fig, Path(path), dpi)
    top, bottom = h_px - 130, 115.0
    gap = 6.0 if k > 1 else 0.0
    scale = (top - bottom - gap * (k - 1)) / total
    bar_w = 0.035 * w_px
    xl, xr = 0.26 * w_px, 0.74 * w_px - bar_w

    def stack(sums: np.ndarray) -> list[tuple[float, float]]:
        spans = []
        y = bottom
        for i in range(k):  # class 1 at the bottom, highest class on top
            h = sums[i] * scale
            spans.append((y, y + h))
            y += h + (gap if sums[i] > 0 else 0.0)
        return spans

    left, right = stack(counts.sum(axis=1)), stack(counts.sum(axis=0))
    # ribbons: inside each left bar, destinations from top class down; inside each right bar,
    # origins likewise, so ribbons do not cross within a bar
    l_cursor = [s[1] for s in left]
    r_cursor = [s[1] for s in right]
    for i in range(k - 1, -1, -1):
        for j in range(k - 1, -1, -1):
            c = counts[i, j]
            if c <= 0:
                continue
            h = c * scale
            ly = (l_cursor[i] - h, l_cursor[i])
            l_cursor[i] -= h
            ry = (r_cursor[j] - h, r_cursor[j])
            r_cursor[j] -= h
            alpha = 0.85 if i == j else 0.6
            _ribbon(ax, xl + bar_w, xr, ly, ry, colours[i], alpha)
    fs = 10.5
    line = fs * 100 / 72 * 1.35  # label pitch in design pixels
    for side, spans, x, ha, sums in (
        ("l", left, xl, "right", counts.sum(axis=1)),
        ("r", right, xr, "left", counts.sum(axis=0)),
    ):
        shown = [i for i in range(k) if sums[i] > 0]
        want = [(spans[i][0] + spans[i][1]) / 2 for i in shown]
        ys = spread_labels(want, line, bottom, top)
        for i, y in zip(shown, ys):
            y0, y1 = spans[i]
            ax.add_patch(
                Rectangle((x, y0), bar_w, y1 - y0, facecolor=colours[i], edgecolor=_INK, lw=0.6)
            )
            tx = x - 22 if side == "l" else x + bar_w + 22
            anchor = x - 3 if side == "l" else x + bar_w + 3
            mid = (y0 + y1) / 2
            ax.plot([anchor, tx + (4 if side == "l" else -4)], [mid, y], color=_MUTED, lw=0.7)
            ax.text(
                tx,
                y,
                f"{labels[i]}  {_pct(sums[i] / total)}",
                ha=ha,
                va="center",
                fontsize=fs,
                color=_INK,
            )
    ax.text(
        xl + bar_w / 2,
        top + 12,
        first_label,
        ha="center",
        va="bottom",
        fontsize=13,
        fontweight="bold",
        color=_INK,
    )
    ax.text(
        xr + bar_w / 2,
        top + 12,
        last_label,
        ha="center",
        va="bottom",
        fontsize=13,
        fontweight="bold",
        color=_INK,
    )
    stayed = np.trace(counts) / total
    ax.text(
        w_px / 2,
        bottom - 22,
        f"{int(total):,} {unit_noun} with data in both periods; "
        f"{stayed:.0%} ended in the class they started in",
        ha="center",
        va="top",
        fontsize=10,
        color=_MUTED,
    )
    return _save(fig, Path(path), dpi)
