"""Where everything sits on a frame, and the matplotlib drawing of the map furniture.

One :class:`Layout` per animation fixes the map box, the side panel (period, legend with counts,
no-data swatch, notices, callouts, scale bar, north arrow), the header (title, subtitle) and the
footer (timeline strip, caption line), all in pixels with the origin at the top left. Every
frame of an animation uses the same layout, extent, legend and colours.

Drawing happens on a full-figure axes in pixel coordinates (figure dpi 72, so one point is one
pixel). :func:`draw_static` draws what never changes; :class:`DynamicArtists` holds the few
artists that change per period (period text, counts, timeline marker, per-period labels,
outlines, callouts) and updates them in place.
"""

from __future__ import annotations

import math
import textwrap
from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from mapdrift.palettes import NODATA, NODATA_HATCH
from mapdrift.render.raster import MapTransform, fit_transform

__all__ = ["Chrome", "DynamicArtists", "Layout", "ScaleBar", "draw_static", "new_figure", "plan"]

PAPER = "#ffffff"
TEXT = "#1f1f1f"
MUTED = "#5c5c5c"
FAINT = "#a0a0a0"
RULE = "#cfcfcf"
BOUNDARY = "#ffffff"
OUTLINE = "#141414"
NOTICE_FG = "#7a4100"
NOTICE_BG = "#fdf1dc"
FONT = "DejaVu Sans"

_MILE = 1609.344


@dataclass(frozen=True)
class Chrome:
    """What the furniture says. ``labels`` has one tuple of class labels, or one per period.

    ``notice`` (e.g. the per-period-breaks warning) is shown boxed on every frame.
    ``outline_label`` names the per-frame outlines in the legend (e.g. "jumped 2+ classes").
    """

    colours: tuple[str, ...]
    labels: tuple[tuple[str, ...], ...]
    period_labels: tuple[str, ...]
    title: str = ""
    subtitle: str = ""
    caption: str = ""
    notice: str | None = None
    legend_title: str = ""
    nodata_label: str = "no data"
    counts: bool = True
    timeline: bool = True
    north_arrow: bool = False
    scale_units: str = "km"
    outline_label: str = ""
    callouts: bool = True
    show_period: bool = True

    def labels_for(self, j: int) -> tuple[str, ...]:
        return self.labels[j] if len(self.labels) > 1 else self.labels[0]


@dataclass(frozen=True)
class ScaleBar:
    """A scale bar of ``length`` map metres drawn from pixel ``x0`` to ``x1`` at row ``y``."""

    x0: int
    x1: int
    y: int
    height: int
    metres: float
    label: str


@dataclass(frozen=True)
class Layout:
    """Pixel positions of every element (origin top left) and the map transform."""

    width: int
    height: int
    s: float
    margin: int
    transform: MapTransform
    panel_x: int
    panel_w: int
    title_size: float
    subtitle_size: float
    legend_top: int
    row_h: int
    timeline_y: int | None
    timeline_x: tuple[float, ...]
    caption_y: int
    scale_bar: ScaleBar | None
    notice_top: int
    callout_top: int
    panel_bottom: int
    extras: dict[str, Any] = field(default_factory=dict)


def _text_width(text: str, size: float, weight: str = "normal") -> float:
    from matplotlib.font_manager import FontProperties
    from matplotlib.textpath import TextToPath

    prop = FontProperties(family=FONT, size=size, weight=weight)
    w, _h, _d = TextToPath().get_text_width_height_descent(text, prop, ismath=False)
    return float(w)


def fit_font(
    text: str, size: float, width: float, *, weight: str = "normal", floor: float = 0.6
) -> float:
    """Largest font size <= ``size`` (down to ``floor * size``) at which ``text`` fits ``width``."""
    if not text:
        return size
    w = _text_width(text, size, weight)
    if w <= width:
        return size
    return max(size * floor, size * width / w * 0.98)


def _nice_length(max_m: float, units: str) -> tuple[float, str]:
    unit_m = _MILE if units == "mi" else 1000.0
    target = max_m / unit_m
    exp = math.floor(math.log10(target)) if target > 0 else 0
    best = 10.0**exp
    for step in (1, 2, 2.5, 5, 10):
        v = step * 10.0**exp
        if v <= target:
            best = v
    if best >= 1:
        text = f"{best:g} {units}"
    else:  # short bars read better in m / ft
        sub = "m" if units == "km" else "ft"
        factor = 1000.0 if units == "km" else 5280.0
        text = f"{best * factor:g} {sub}"
    return best * unit_m, text


def plan(
    size: tuple[int, int],
    chrome: Chrome,
    bounds: tuple[float, float, float, float],
    metres_per_unit: float = 1.0,
    *,
    n_legend_rows: int | None = None,
) -> Layout:
    """Place the header, map box, side panel and footer for a frame of ``size`` (width, height)."""
    if chrome.scale_units not in ("km", "mi"):
        from mapdrift.errors import ConfigError

        raise ConfigError(f"scale units {chrome.scale_units!r} must be km or mi")
    w, h = int(size[0]), int(size[1])
    s = max(min(w / 1280.0, h / 720.0), 0.35)
    m = round(26 * s)
    panel_w = round(min(300 * s, 0.38 * w))
    gap = round(24 * s)
    panel_x = w - m - panel_w
    left_w = panel_x - gap - m
    title_size = fit_font(chrome.title, 23 * s, left_w, weight="bold")
    subtitle_size = fit_font(chrome.subtitle, 13.5 * s, left_w)
    top = m + round(title_size * 1.25)
    if chrome.subtitle:
        top += round(subtitle_size * 1.6)
    top += round(14 * s)
    caption_y = h - round(m * 0.75)
    bottom = caption_y - round(16 * s) if chrome.caption else h - m
    timeline_y = None
    tl_x: tuple[float, ...] = ()
    n_p = len(chrome.period_labels)
    if chrome.timeline and n_p > 1:
        timeline_y = bottom - round(22 * s)
        bottom = timeline_y - round(30 * s)
        x_a, x_b = m + 8 * s, m + left_w - 8 * s
        tl_x = tuple(float(x) for x in np.linspace(x_a, x_b, n_p))
    else:
        bottom -= round(6 * s)
    map_w, map_h = max(left_w, 16), max(bottom - top, 16)
    transform = fit_transform(bounds, map_w, map_h, left=m, top=top)
    # side panel
    row_h = round(25 * s)
    legend_top = m + round(64 * s) if chrome.show_period else m + round(4 * s)
    rows = n_legend_rows if n_legend_rows is not None else len(chrome.colours) + 1
    y = legend_top + round(22 * s) + rows * row_h + round(8 * s)
    if chrome.outline_label:
        y += row_h
    notice_top = y + round(6 * s)
    if chrome.notice:
        lines = _wrap(chrome.notice, 11 * s, panel_w - 20 * s)
        y = notice_top + round(len(lines) * 11 * s * 1.35 + 18 * s)
    callout_top = y + round(10 * s)
    # scale bar at the bottom of the panel, aligned with the map bottom
    res_m = transform.res * metres_per_unit
    metres, text = _nice_length(min(panel_w * 0.62, 220 * s) * res_m, chrome.scale_units)
    bar_px = metres / res_m
    sb_y = transform.top + transform.height - round(8 * s)
    x0 = panel_x
    scale = ScaleBar(
        x0=int(x0),
        x1=int(round(x0 + bar_px)),
        y=int(sb_y),
        height=max(int(round(4 * s)), 2),
        metres=metres,
        label=text,
    )
    panel_bottom = sb_y - round(34 * s)
    return Layout(
        width=w,
        height=h,
        s=s,
        margin=m,
        transform=transform,
        panel_x=panel_x,
        panel_w=panel_w,
        title_size=title_size,
        subtitle_size=subtitle_size,
        legend_top=legend_top,
        row_h=row_h,
        timeline_y=timeline_y,
        timeline_x=tl_x,
        caption_y=caption_y,
        scale_bar=scale,
        notice_top=notice_top,
        callout_top=callout_top,
        panel_bottom=panel_bottom,
        extras={"bar_px": bar_px},
    )


def _wrap(text: str, size: float, width: float) -> list[str]:
    chars = max(int(width / (size * 0.58)), 8)
    return textwrap.wrap(text, chars) or [""]


def new_figure(layout: Layout, *, transparent: bool) -> tuple[Any, Any]:
    """A figure of exactly the frame size (dpi 72) with one pixel-coordinate axes, y down."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    fig = Figure(figsize=(layout.width / 72.0, layout.height / 72.0), dpi=72)
    FigureCanvasAgg(fig)
    if transparent:
        fig.patch.set_alpha(0.0)
    else:
        fig.patch.set_facecolor(PAPER)
    ax = fig.add_axes((0, 0, 1, 1))
    ax.set_xlim(0, layout.width)
    ax.set_ylim(layout.height, 0)
    ax.set_axis_off()
    ax.patch.set_alpha(0.0)
    return fig, ax


def swatch_box(layout: Layout, row: int) -> tuple[float, float, float, float]:
    """(x, y, w, h) in pixels of the legend swatch of ``row`` (classes, then no data)."""
    s = layout.s
    y = layout.legend_top + round(22 * s) + row * layout.row_h
    if row >= 0:
        pass
    return (layout.panel_x, y + round(3 * s), round(34 * s), layout.row_h - round(8 * s))


def nodata_row(chrome: Chrome) -> int:
    """Legend row of the no-data swatch (after the classes, with a small gap)."""
    return len(chrome.colours)


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
