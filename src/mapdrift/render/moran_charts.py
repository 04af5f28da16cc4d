"""Line chart of global Moran's I over the periods.

Plain arrays in, a file out (PNG, PDF or SVG by the path's suffix), written atomically. Filled
markers are periods whose p-value is at most ``alpha``; hollow markers are not significant;
the dashed line is the expected value under no autocorrelation, ``E[I] = -1/(n-1)``. Periods
without a statistic (NaN) leave a gap in the line. Nothing here knows about panels or clusters.
"""

from __future__ import annotations

from collections.abc import Sequence
from pathlib import Path

import numpy as np

__all__ = ["moran_line_chart"]

_INK = "#222222"
_MUTED = "#666666"
_LINE = "#7a3b69"


def moran_line_chart(
    period_labels: Sequence[str],
    moran_i: Sequence[float],
    expected: Sequence[float],
    p_values: Sequence[float],
    path: Path | str,
    *,
    alpha: float = 0.05,
    title: str = "Global Moran's I by period",
    subtitle: str = "",
    caption: str = "",
    size: tuple[int, int] = (1280, 720),
    dpi: int = 100,
) -> Path:
    """Draw Moran's I per period with significance markers and the expected value; return path."""
    import matplotlib

    matplotlib.use("Agg", force=False)
    from matplotlib.figure import Figure
    from matplotlib.lines import Line2D

    path = Path(path)
    x = np.arange(len(period_labels))
    y = np.asarray(moran_i, dtype=float)
    e = np.asarray(expected, dtype=float)
    p = np.asarray(p_values, dtype=float)
    with np.errstate(invalid="ignore"):
        sig = p <= alpha
    fig = Figure(figsize=(size[0] / dpi, size[1] / dpi), dpi=dpi)
    fig.patch.set_facecolor("white")
    ax = fig.add_axes((0.08, 0.16, 0.88, 0.66))
    ax.plot(x, y, color=_LINE, linewidth=2.2, zorder=2)
    ax.plot(x, e, color=_MUTED, linewidth=1.2, linestyle=(0, (5, 4)), zorder=1)
    ax.scatter(x[sig], y[sig], s=60, color=_LINE, zorder=3)
    ax.scatter(x[~sig], y[~sig], s=60, facecolor="white", edgecolor=_LINE, linewidth=1.6, zorder=3)
    ax.axhline(0, color="#bbbbbb", linewidth=0.8, zorder=0)
    step = max(1, int(np.ceil(len(x) / 16)))
    ax.set_xticks(x[::step], [period_labels[i] for i in range(0, len(x), step)])
    ax.set_ylabel("Moran's I", color=_INK)
    finite = np.concatenate([y[np.isfinite(y)], e[np.isfinite(e)], [0.0]])
    lo, hi = float(finite.min()), float(finite.max())
    pad = 0.1 * max(hi - lo, 0.1)
    ax.set_ylim(lo - pad, hi + pad)
    for side in ("top", "right"):
        ax.spines[side].set_visible(False)
    ax.tick_params(colors=_INK)
    handles = [
        Line2D([], [], color=_LINE, marker="o", linestyle="", markersize=8,
               label=f"significant (p <= {alpha:g})"),
        Line2D([], [], color=_LINE, marker="o", markerfacecolor="white", linestyle="",
               markersize=8, label="not significant"),
        Line2D([], [], color=_MUTED, linestyle=(0, (5, 4)), label="expected under no pattern"),
    ]  # fmt: skip
    # above the plot area, so it never covers a period's marker
    ax.legend(handles=handles, loc="lower left", bbox_to_anchor=(0, 1.0), ncol=3, frameon=False,
              fontsize=11, borderaxespad=0.2)  # fmt: skip
    fig.text(0.08, 0.93, title, fontsize=20, fontweight="bold", color=_INK, va="baseline")
    if subtitle:
        fig.text(0.08, 0.885, subtitle, fontsize=13, color=_MUTED, va="baseline")
    if caption:
        fig.text(0.08, 0.04, caption, fontsize=10, color=_MUTED, va="baseline", wrap=True)
    from mapdrift.pngwrite import write_figure

    return write_figure(fig, path, dpi=dpi)
