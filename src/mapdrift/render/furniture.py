"""Drawing the map furniture with matplotlib, in the pixel coordinates of a :class:`Layout`.

:func:`draw_static` draws what never changes during an animation; :class:`DynamicArtists` holds
the few artists that change per period (period text, counts, timeline marker, per-period
labels, outlines, callouts) and updates them in place.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from typing import Any

import numpy as np

from mapdrift.palettes import NODATA, NODATA_HATCH
from mapdrift.render.layout import (
    BOUNDARY,
    FAINT,
    FONT,
    MUTED,
    NOTICE_BG,
    NOTICE_FG,
    OUTLINE,
    PAPER,
    RULE,
    TEXT,
    Chrome,
    Layout,
    _wrap,
    fit_font,
    nodata_row,
    swatch_box,
)

__all__ = ["DynamicArtists", "draw_static"]


def draw_static(
    ax: Any,
    layout: Layout,
    chrome: Chrome,
    *,
    boundaries: Sequence[np.ndarray] | None = None,
    boundary_width: float = 0.6,
    nodata_hatch: bool = True,
    dots: np.ndarray | None = None,
    dot_px: float = 0.0,
) -> None:
    """Draw the unchanging furniture (and unit boundaries, pixel coordinates) on ``ax``.

    With ``nodata_hatch`` False the no-data swatch is left flat (the raster path paints the
    hatching itself so that swatch and map match pixel for pixel).
    """
    from matplotlib.collections import LineCollection
    from matplotlib.patches import Circle, Polygon, Rectangle

    s, m = layout.s, layout.margin
    kw = {"family": FONT}
    ax.text(
        m, m, chrome.title, fontsize=layout.title_size, weight="bold", color=TEXT, va="top", **kw
    )
    if chrome.subtitle:
        ax.text(
            m,
            m + round(layout.title_size * 1.3),
            chrome.subtitle,
            fontsize=layout.subtitle_size,
            color=MUTED,
            va="top",
            **kw,
        )
    if boundaries:
        ax.add_collection(
            LineCollection(
                list(boundaries),
                colors=BOUNDARY,
                linewidths=boundary_width,
                capstyle="round",
                joinstyle="round",
                antialiaseds=True,
            )
        )
    if dots is not None and len(dots) and dot_px > 0:
        for cx, cy in dots:
            ax.add_patch(
                Circle(
                    (cx + layout.transform.left, cy + layout.transform.top),
                    dot_px / 2 + 0.4,
                    fill=False,
                    edgecolor=OUTLINE,
                    linewidth=0.6,
                )
            )
    # legend header
    px, pw = layout.panel_x, layout.panel_w
    head_y = layout.legend_top
    if chrome.legend_title:
        size = fit_font(chrome.legend_title, 12 * s, pw - 60 * s, weight="bold")
        ax.text(
            px,
            head_y,
            chrome.legend_title,
            fontsize=size,
            weight="bold",
            color=TEXT,
            va="top",
            **kw,
        )
    if chrome.counts:
        ax.text(
            px + pw,
            head_y + 1 * s,
            "units",
            fontsize=10.5 * s,
            color=MUTED,
            va="top",
            ha="right",
            **kw,
        )
    ax.plot([px, px + pw], [head_y + 18 * s, head_y + 18 * s], color=RULE, linewidth=0.8 * s)
    for i, colour in enumerate(chrome.colours):
        x, y, bw, bh = swatch_box(layout, i)
        ax.add_patch(Rectangle((x, y), bw, bh, facecolor=colour, edgecolor="none"))
    x, y, bw, bh = swatch_box(layout, nodata_row(chrome))
    if nodata_hatch:  # the raster path paints this swatch itself, pixel for pixel as the map
        ax.add_patch(
            Rectangle(
                (x, y), bw, bh, facecolor=NODATA, edgecolor=NODATA_HATCH, hatch="////", linewidth=0
            )
        )
    ax.text(
        x + bw + 10 * s,
        y + bh / 2,
        chrome.nodata_label,
        fontsize=11.5 * s,
        color=MUTED,
        va="center",
        **kw,
    )
    if len(chrome.labels) == 1:
        for i, label in enumerate(chrome.labels[0]):
            x, y, bw, bh = swatch_box(layout, i)
            ax.text(
                x + bw + 10 * s, y + bh / 2, label, fontsize=11.5 * s, color=TEXT, va="center", **kw
            )
    if chrome.outline_label:
        x, y, bw, bh = swatch_box(layout, nodata_row(chrome) + 1)
        ax.add_patch(
            Rectangle(
                (x + 1, y + 1),
                bw - 2,
                bh - 2,
                facecolor="none",
                edgecolor=OUTLINE,
                linewidth=1.6 * s,
            )
        )
        ax.text(
            x + bw + 10 * s,
            y + bh / 2,
            chrome.outline_label,
            fontsize=11.5 * s,
            color=TEXT,
            va="center",
            **kw,
        )
    if chrome.notice:
        lines = _wrap(chrome.notice, 11 * s, pw - 20 * s)
        box_h = len(lines) * 11 * s * 1.35 + 12 * s
        ax.add_patch(
            Rectangle(
                (px, layout.notice_top),
                pw,
                box_h,
                facecolor=NOTICE_BG,
                edgecolor=NOTICE_FG,
                linewidth=0.8 * s,
            )
        )
        ax.text(
            px + 10 * s,
            layout.notice_top + 6 * s,
            "\n".join(lines),
            fontsize=11 * s,
            color=NOTICE_FG,
            va="top",
            linespacing=1.25,
            weight="bold",
            **kw,
        )
    # scale bar: a solid bar with its true length, label above
    sb = layout.scale_bar
    if sb is not None:
        ax.add_patch(
            Rectangle(
                (sb.x0, sb.y - sb.height),
                sb.x1 - sb.x0,
                sb.height,
                facecolor=TEXT,
                edgecolor="none",
                antialiased=False,
            )
        )
        for xe in (sb.x0, sb.x1 - 1):
            ax.add_patch(
                Rectangle(
                    (xe, sb.y - sb.height - round(4 * s)),
                    1,
                    round(4 * s),
                    facecolor=TEXT,
                    edgecolor="none",
                    antialiased=False,
                )
            )
        ax.text(
            sb.x0,
            sb.y - sb.height - round(7 * s),
            sb.label,
            fontsize=10.5 * s,
            color=TEXT,
            va="bottom",
            **kw,
        )
    if chrome.north_arrow and sb is not None:
        ax_x = px + pw - 12 * s
        base = sb.y
        tip = base - 30 * s
        ax.add_patch(
            Polygon(
                [(ax_x, tip), (ax_x - 7 * s, base), (ax_x, base - 8 * s)],
                closed=True,
                facecolor=TEXT,
                edgecolor=TEXT,
                linewidth=0.6,
            )
        )
        ax.add_patch(
            Polygon(
                [(ax_x, tip), (ax_x + 7 * s, base), (ax_x, base - 8 * s)],
                closed=True,
                facecolor=PAPER,
                edgecolor=TEXT,
                linewidth=0.6,
            )
        )
        ax.text(
            ax_x,
            tip - 3 * s,
            "N",
            fontsize=11 * s,
            weight="bold",
            color=TEXT,
            ha="center",
            va="bottom",
            **kw,
        )
    # timeline: rule, ticks, thinned labels
    if layout.timeline_y is not None and layout.timeline_x:
        ty, xs = layout.timeline_y, layout.timeline_x
        ax.plot([xs[0], xs[-1]], [ty, ty], color=RULE, linewidth=2.0 * s, solid_capstyle="round")
        ax.scatter(xs, [ty] * len(xs), s=(4.0 * s) ** 2, color=FAINT, zorder=3, linewidths=0)
        step = _label_step(chrome.period_labels, xs, 10 * s)
        for i, (x, lab) in enumerate(zip(xs, chrome.period_labels)):
            if i % step == 0 or i == len(xs) - 1:
                ax.text(
                    x, ty + 8 * s, lab, fontsize=10 * s, color=MUTED, ha="center", va="top", **kw
                )
    if chrome.caption:
        size = fit_font(chrome.caption, 10 * s, layout.width - 2 * m)
        ax.text(m, layout.caption_y, chrome.caption, fontsize=size, color=MUTED, va="bottom", **kw)


def _label_step(labels: Sequence[str], xs: Sequence[float], size: float) -> int:
    if len(xs) < 2:
        return 1
    widest = max(len(lab) for lab in labels) * size * 0.62 + size
    spacing = (xs[-1] - xs[0]) / (len(xs) - 1)
    return max(1, math.ceil(widest / max(spacing, 1e-9)))


class DynamicArtists:
    """The artists that change per period, created once and updated in place."""

    def __init__(self, ax: Any, layout: Layout, chrome: Chrome) -> None:
        from matplotlib.collections import LineCollection

        self.ax, self.layout, self.chrome = ax, layout, chrome
        s, kw = layout.s, {"family": FONT}
        px, pw = layout.panel_x, layout.panel_w
        self.period = (
            ax.text(
                px,
                layout.margin - 6 * s,
                "",
                fontsize=44 * s,
                weight="bold",
                color=TEXT,
                va="top",
                **kw,
            )
            if chrome.show_period
            else None
        )
        self.counts = []
        self.labels = []
        for i in range(len(chrome.colours) + 1):
            x, y, bw, bh = swatch_box(layout, i)
            if chrome.counts:
                self.counts.append(
                    ax.text(
                        px + pw,
                        y + bh / 2,
                        "",
                        fontsize=11.5 * s,
                        color=TEXT if i < len(chrome.colours) else MUTED,
                        va="center",
                        ha="right",
                        **kw,
                    )
                )
            if len(chrome.labels) > 1 and i < len(chrome.colours):
                self.labels.append(
                    ax.text(
                        x + bw + 10 * s,
                        y + bh / 2,
                        "",
                        fontsize=11.5 * s,
                        color=TEXT,
                        va="center",
                        **kw,
                    )
                )
        self.marker = None
        if layout.timeline_y is not None and layout.timeline_x:
            ty = layout.timeline_y
            (self.progress,) = ax.plot(
                [], [], color=TEXT, linewidth=2.0 * s, solid_capstyle="round"
            )
            self.marker = ax.scatter(
                [layout.timeline_x[0]],
                [ty],
                s=(11 * s) ** 2,
                color=TEXT,
                zorder=4,
                linewidths=2 * s,
                edgecolors=PAPER,
            )
            self.current = ax.text(
                0,
                ty - 10 * s,
                "",
                fontsize=11 * s,
                weight="bold",
                color=TEXT,
                ha="center",
                va="bottom",
                **kw,
            )
        self.outlines = LineCollection(
            [], colors=OUTLINE, linewidths=1.7 * s, joinstyle="round", capstyle="round"
        )
        ax.add_collection(self.outlines)
        self.callouts = ax.text(
            px,
            layout.callout_top,
            "",
            fontsize=10.5 * s,
            color=TEXT,
            va="top",
            linespacing=1.3,
            **kw,
        )

    def update(
        self,
        j: int,
        counts: Sequence[int] | None,
        nodata: int,
        *,
        outlines: Sequence[np.ndarray] = (),
        callouts: Sequence[str] = (),
        n_outlined: int = 0,
    ) -> None:
        """Show period ``j``: its label, class counts, timeline position, outlines and callouts."""
        chrome, layout = self.chrome, self.layout
        if self.period is not None:
            size = fit_font(chrome.period_labels[j], 44 * layout.s, layout.panel_w, weight="bold")
            self.period.set_text(chrome.period_labels[j])
            self.period.set_fontsize(size)
        if chrome.counts and counts is not None:
            for t, c in zip(self.counts, [*counts, nodata]):
                t.set_text(f"{int(c):,}")
        for t, lab in zip(self.labels, chrome.labels_for(j)):
            t.set_text(lab)
        if self.marker is not None:
            xs, ty = layout.timeline_x, layout.timeline_y
            self.marker.set_offsets([[xs[j], ty]])
            self.progress.set_data([xs[0], xs[j]], [ty, ty])
            self.current.set_position((xs[j], ty - 10 * layout.s))
            self.current.set_text(chrome.period_labels[j])
        self.outlines.set_segments(list(outlines))
        if chrome.callouts and callouts:
            line_h = 10.5 * layout.s * 1.3 * 1.2
            room = int((layout.panel_bottom - layout.callout_top) / line_h) - 2
            shown = list(callouts[: max(min(room, 8), 0)])
            more = max(n_outlined, len(callouts)) - len(shown)
            head = chrome.outline_label or "outlined"
            text = (
                f"{head}:\n"
                + "\n".join(f"  {c}" for c in shown)
                + (f"\n  and {more} more" if more > 0 else "")
            )
            self.callouts.set_text(text)
        else:
            self.callouts.set_text("")
