"""Where everything sits on a frame, and the matplotlib drawing of the map furniture.

One :class:`Layout` per animation fixes the map box, the side panel (period, legend with counts,
no-data swatch, notices, callouts, scale bar, north arrow), the header (title, subtitle) and the
footer (timeline strip, caption line), all in pixels with the origin at the top left. Every
frame of an animation uses the same layout, extent, legend and colours.

Drawing happens on a full-figure axes in pixel coordinates (figure dpi 72, so one point is one
pixel); see :mod:`mapdrift.render.furniture`.
"""

from __future__ import annotations

import functools
import math
import textwrap
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from mapdrift.render.raster import MapTransform, fit_transform

__all__ = ["Chrome", "Layout", "ScaleBar", "fit_font", "new_figure", "plan", "swatch_box"]

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


@functools.lru_cache(maxsize=4096)
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
