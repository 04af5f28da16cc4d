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

__all__ = [
    "Chrome",
    "Layout",
    "MapText",
    "ScaleBar",
    "Strip",
    "fit_font",
    "new_figure",
    "plan",
    "swatch_box",
    "text_scale",
]

PAPER = "#ffffff"
TEXT = "#1f1f1f"
MUTED = "#5c5c5c"
FAINT = "#a0a0a0"
RULE = "#cfcfcf"
BOUNDARY = "#ffffff"
OUTLINE = "#141414"
#: Light halo drawn under the dark outline, so outlines show on the darkest classes too.
HALO = "#ffffff"
#: Edge of the mapped area against the paper, so pale classes at the edge stay visible.
COAST = "#8f8f8f"
#: Boundaries between units on maps whose fills are mostly blank (cluster maps).
GREY_BOUNDARY = "#b5b5b0"
NOTICE_FG = "#7a4100"
NOTICE_BG = "#fdf1dc"
FONT = "DejaVu Sans"

_MILE = 1609.344


@dataclass(frozen=True)
class MapText:
    """Every word a map or frame shows besides its legend labels, in one object.

    ``caption`` is the source line; ``notice`` (e.g. the per-period-breaks warning) is shown
    boxed on every frame; ``outline_label`` names the per-frame outlines in the legend (e.g.
    "jumped 2+ classes"); ``unit_noun`` is what the units are called in the legend and the
    sentences ("tracts", "neighbourhoods"); ``min_text_px`` is the smallest text size in pixels
    (18 for a picture shown on a 1920 x 1080 slide).

    >>> MapText("Foreclosure filing rate", unit_noun="tracts").unit_noun
    'tracts'
    """

    title: str = ""
    subtitle: str = ""
    caption: str = ""
    notice: str | None = None
    legend_title: str = ""
    nodata_label: str = "no data"
    outline_label: str = ""
    unit_noun: str = "units"
    min_text_px: float = 0.0


@dataclass(frozen=True)
class Chrome:
    """What the furniture shows. ``labels`` has one tuple of class labels, or one per period.

    A label may have a second line after ``"\\n"`` (drawn smaller and muted, e.g. the trade
    term under the words). ``marks`` gives, per class, a mark drawn on each unit of that class
    (``"up"``, ``"down"``, ``"ring"``) or None for a plain fill; ``mark_colours`` their colours.
    ``shares`` holds, per period, the share of units in each class and in no data: the period
    strip draws one small stacked bar per period from it.
    """

    colours: tuple[str, ...]
    labels: tuple[tuple[str, ...], ...]
    period_labels: tuple[str, ...]
    text: MapText = MapText()
    counts: bool = True
    timeline: bool = True
    north_arrow: bool = False
    scale_units: str = "km"
    callouts: bool = True
    show_period: bool = True
    marks: tuple[str | None, ...] = ()
    mark_colours: tuple[str, ...] = ()
    shares: tuple[tuple[float, ...], ...] = ()
    strip_skip: tuple[int, ...] = ()
    strip_full: float = 1.0
    boundary: str = "#ffffff"

    def labels_for(self, j: int) -> tuple[str, ...]:
        return self.labels[j] if len(self.labels) > 1 else self.labels[0]

    @property
    def title(self) -> str:
        return self.text.title

    @property
    def subtitle(self) -> str:
        return self.text.subtitle

    @property
    def caption(self) -> str:
        return self.text.caption

    @property
    def notice(self) -> str | None:
        return self.text.notice

    @property
    def legend_title(self) -> str:
        return self.text.legend_title

    @property
    def nodata_label(self) -> str:
        return self.text.nodata_label

    @property
    def outline_label(self) -> str:
        return self.text.outline_label

    def mark_of(self, i: int) -> str | None:
        return self.marks[i] if i < len(self.marks) else None

    @property
    def strip_note(self) -> str:
        """The legend's line about the strip when its bars leave classes out."""
        if not self.strip_skip or not self.shares or not self.timeline:
            return ""
        return (
            f"strip below the map: share of {self.text.unit_noun}\n"
            f"in each kind of pattern; a full bar is {self.strip_full:.0%}"
        )

    @property
    def two_line(self) -> bool:
        return any("\n" in lab for row in self.labels for lab in row)


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
class Strip:
    """The period strip: one stacked bar per period at ``xs`` (centres), ``bar_w`` wide, from
    row ``top`` to ``top + height``; period labels start at ``label_y``."""

    xs: tuple[float, ...]
    bar_w: float
    top: int
    height: int
    label_y: int


@dataclass(frozen=True)
class Layout:
    """Pixel positions of every element (origin top left) and the map transform.

    ``s`` scales the geometry of the frame; ``t`` scales its text (``t >= s``; larger when the
    map text asks for a minimum text size, e.g. on slides).
    """

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
    strip: Strip | None
    caption_y: int
    caption_lines: tuple[str, ...]
    scale_bar: ScaleBar | None
    notice_top: int
    callout_top: int
    panel_bottom: int
    t: float = 1.0
    subtitle_lines: tuple[str, ...] = ()
    extras: dict[str, Any] = field(default_factory=dict)

    @property
    def small(self) -> float:
        """Size of the smallest texts (caption, strip labels, counts header)."""
        return 10.5 * self.t

    @property
    def body(self) -> float:
        """Size of legend labels and counts."""
        return 12.0 * self.t


@functools.lru_cache(maxsize=1)
def _renderer() -> Any:
    from matplotlib.backends.backend_agg import RendererAgg

    return RendererAgg(8, 8, 72)


@functools.lru_cache(maxsize=4096)
def _text_width(text: str, size: float, weight: str = "normal") -> float:
    """Width in frame pixels of ``text`` as the Agg renderer draws it (dpi 72)."""
    from matplotlib.font_manager import FontProperties

    prop = FontProperties(family=FONT, size=size, weight=weight)
    w, _h, _d = _renderer().get_text_width_height_descent(text, prop, ismath=False)
    return float(w)


def fit_font(
    text: str,
    size: float,
    width: float,
    *,
    weight: str = "normal",
    floor: float = 0.6,
    min_size: float = 0.0,
) -> float:
    """Largest font size <= ``size`` (down to ``floor * size`` and never below ``min_size``) at
    which ``text`` fits ``width``."""
    if not text:
        return size
    w = _text_width(text, size, weight)
    if w <= width:
        return size
    return max(size * floor, size * width / w * 0.98, min(min_size, size))


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


def text_scale(size: tuple[int, int], min_text_px: float = 0.0) -> tuple[float, float]:
    """``(s, t)``: geometry and text scale of a frame of ``size``; the smallest text (10.5 * t)
    is at least ``min_text_px``."""
    w, h = int(size[0]), int(size[1])
    s = max(min(w / 1280.0, h / 720.0), 0.35)
    return s, max(s, float(min_text_px) / 10.5)


def plan(
    size: tuple[int, int],
    chrome: Chrome,
    bounds: tuple[float, float, float, float],
    metres_per_unit: float = 1.0,
    *,
    n_legend_rows: int | None = None,
) -> Layout:
    """Place the header, map box, side panel and footer for a frame of ``size`` (width, height).

    The footer holds the period strip (one small stacked bar of class shares per period, the
    current one marked per frame) and the source line, wrapped rather than shrunk below the
    text floor.
    """
    if chrome.scale_units not in ("km", "mi"):
        from mapdrift.errors import ConfigError

        raise ConfigError(f"scale units {chrome.scale_units!r} must be km or mi")
    w, h = int(size[0]), int(size[1])
    s, t = text_scale((w, h), chrome.text.min_text_px)
    floor = max(chrome.text.min_text_px, 1.0)
    m = round(26 * s)
    panel_w = round(min(max(300 * t, 0.2 * w), 0.40 * w))
    gap = round(24 * s)
    panel_x = w - m - panel_w
    left_w = panel_x - gap - m
    title_size = fit_font(chrome.title, 24 * t, left_w, weight="bold", min_size=floor)
    # a long subtitle shrinks a little, then wraps (never below the text floor)
    subtitle_size = fit_font(chrome.subtitle, 14 * t, left_w, floor=0.85, min_size=floor)
    subtitle_lines = (
        tuple(_wrap_px(chrome.subtitle, subtitle_size, left_w)) if chrome.subtitle else ()
    )
    top = m + round(title_size * 1.25)
    if subtitle_lines:
        top += round(subtitle_size * (1.6 + 1.2 * (len(subtitle_lines) - 1)))
    top += round(14 * s)
    small = 10.5 * t
    caption_lines: tuple[str, ...] = ()
    if chrome.caption:
        caption_lines = tuple(_wrap_px(chrome.caption, small, w - 2 * m))
    caption_y = h - round(m * 0.75)
    bottom = caption_y - round(len(caption_lines) * small * 1.3 + 6 * s) if caption_lines else h - m
    strip = None
    n_p = len(chrome.period_labels)
    if chrome.timeline and n_p > 1:
        bar_h = round(30 * t)
        label_y = bottom - round(small * 1.25)
        bar_top = label_y - round(4 * t) - bar_h
        x_a, x_b = m + 8 * s, m + left_w - 8 * s
        spacing = (x_b - x_a) / max(n_p - 1, 1)
        bar_w = max(min(spacing * 0.62, 46 * t), 2.0)
        xs = tuple(float(x) for x in np.linspace(x_a + bar_w / 2, x_b - bar_w / 2, n_p))
        strip = Strip(xs=xs, bar_w=float(bar_w), top=bar_top, height=bar_h, label_y=label_y)
        # room above the bars for the current period's label
        bottom = bar_top - round(16 * t * 1.2 + 10 * s)
    else:
        bottom -= round(6 * s)
    map_w, map_h = max(left_w, 16), max(bottom - top, 16)
    transform = fit_transform(bounds, map_w, map_h, left=m, top=top)
    # side panel: legend header, rows, notice, callouts, scale bar
    row_h = round((40 if chrome.two_line else 26) * t)
    legend_top = m + round(4 * s)
    rows = n_legend_rows if n_legend_rows is not None else len(chrome.colours) + 1
    y = legend_top + round(24 * t) + rows * row_h + round(8 * s)
    if chrome.outline_label:
        y += row_h
    if chrome.strip_note:
        y += row_h
    notice_top = y + round(6 * s)
    if chrome.notice:
        lines = _wrap_px(chrome.notice, 11.5 * t, panel_w - 20 * t, bold=True)
        y = notice_top + round(len(lines) * 11.5 * t * 1.35 + 18 * t)
    callout_top = y + round(10 * s)
    res_m = transform.res * metres_per_unit
    metres, text = _nice_length(min(panel_w * 0.62, 220 * t) * res_m, chrome.scale_units)
    bar_px = metres / res_m
    sb_y = transform.top + transform.height - round(8 * s)
    x0 = panel_x
    scale = ScaleBar(
        x0=int(x0),
        x1=int(round(x0 + bar_px)),
        y=int(sb_y),
        height=max(int(round(4 * t)), 2),
        metres=metres,
        label=text,
    )
    panel_bottom = sb_y - round(34 * t)
    return Layout(
        width=w,
        height=h,
        s=s,
        t=t,
        margin=m,
        transform=transform,
        panel_x=panel_x,
        panel_w=panel_w,
        title_size=title_size,
        subtitle_size=subtitle_size,
        subtitle_lines=subtitle_lines,
        legend_top=legend_top,
        row_h=row_h,
        strip=strip,
        caption_y=caption_y,
        caption_lines=caption_lines,
        scale_bar=scale,
        notice_top=notice_top,
        callout_top=callout_top,
        panel_bottom=panel_bottom,
        extras={"bar_px": bar_px},
    )


def _wrap_px(text: str, size: float, width: float, *, bold: bool = False) -> list[str]:
    """Greedy word wrap measured with the frame font (no line wider than ``width`` pixels).

    Each line takes as many words as fit, the first word always. Measuring every growing
    prefix cost a text layout per word (about 0.5 ms each); instead each line's break is
    guessed from the words' own widths (measured once, shared by every text) plus spaces,
    then checked and moved with real measurements of the line, so the lines are the same.
    """
    weight = "bold" if bold else "normal"
    words = text.split()
    if not words:
        return [""]
    space = _text_width("n n", size, weight) - 2 * _text_width("n", size, weight)
    widths = [_text_width(w, size, weight) for w in words]

    def real(i: int, j: int) -> float:
        return _text_width(" ".join(words[i:j]), size, weight)

    lines: list[str] = []
    i, n = 0, len(words)
    while i < n:
        j, est = i + 1, widths[i]
        while j < n and est + space + widths[j] <= width:
            est += space + widths[j]
            j += 1
        while j > i + 1 and real(i, j) > width:
            j -= 1
        while j < n and real(i, j + 1) <= width:
            j += 1
        lines.append(" ".join(words[i:j]))
        i = j
    return lines


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
    t = layout.t
    y = layout.legend_top + round(24 * t) + row * layout.row_h
    return (layout.panel_x, y + round(3 * t), round(34 * t), layout.row_h - round(8 * t))


def nodata_row(chrome: Chrome) -> int:
    """Legend row of the no-data swatch (after the classes, with a small gap)."""
    return len(chrome.colours)
