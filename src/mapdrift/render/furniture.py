"""Drawing the map furniture with matplotlib, in the pixel coordinates of a :class:`Layout`.

:func:`draw_static` draws what never changes during an animation (title, legend, the period
strip's bars, scale bar, source line); :class:`DynamicArtists` holds the few artists that change
per period (counts, the strip's marker of the current period, per-period labels, outlines, the
marks of mark-drawn classes, callouts) and updates them in place. :meth:`DynamicArtists.groups`
says which artists form one cacheable sprite and under which key, so the frame renderer draws
each per-period overlay once per period.

The period strip is ours: one small stacked bar per period showing that period's class shares
(no data on top, grey), the current period framed and named above its bar. It replaces a
bare timeline: while the map plays, the strip shows where the whole series is heading.
"""

from __future__ import annotations

import math
from collections.abc import Hashable, Sequence
from typing import Any

import numpy as np

from mapdrift.palettes import NODATA, NODATA_HATCH
from mapdrift.render.layout import (
    FONT,
    HALO,
    MUTED,
    NOTICE_BG,
    NOTICE_FG,
    OUTLINE,
    PAPER,
    RULE,
    TEXT,
    Chrome,
    Layout,
    _text_width,
    _wrap_px,
    fit_font,
    nodata_row,
    swatch_box,
)

__all__ = ["MARKERS", "DynamicArtists", "draw_mark", "draw_static", "outline_widths"]

#: matplotlib marker per mark kind (see :data:`mapdrift.palettes.CLUSTER_LOOK`).
MARKERS = {"up": "^", "down": "v", "ring": "o"}


def outline_widths(layout: Layout) -> tuple[float, float]:
    """Line widths (pixels) of the outline's light halo and of the dark line drawn on it."""
    line = max(1.7 * layout.s, 1.4)
    return line + max(2.6 * layout.s, 2.0), line


def mark_size(layout: Layout) -> float:
    """Diameter in pixels of a unit's mark: fixed, so the smallest units keep theirs."""
    return max(13.0 * layout.t, 9.0)


def draw_mark(
    ax: Any, kind: str, xy: np.ndarray, size_px: float, colour: str, *, zorder: float = 5
) -> list[Any]:
    """Marks of ``kind`` at pixel points ``xy`` ``[n, 2]``: a light halo, then the mark with a
    dark edge (a ring is drawn open). Returns the artists."""
    marker = MARKERS[kind]
    xy = np.asarray(xy, dtype=float).reshape(-1, 2)
    area = size_px**2
    if kind == "ring":
        halo = ax.scatter(
            xy[:, 0], xy[:, 1], s=area, marker="o", facecolors="none", edgecolors=HALO,
            linewidths=size_px * 0.32, zorder=zorder,
        )  # fmt: skip
        mark = ax.scatter(
            xy[:, 0], xy[:, 1], s=area, marker="o", facecolors="none", edgecolors=colour,
            linewidths=size_px * 0.14, zorder=zorder + 0.1,
        )  # fmt: skip
        return [halo, mark]
    halo = ax.scatter(
        xy[:, 0], xy[:, 1], s=area * 1.9, marker=marker, color=HALO, linewidths=0, zorder=zorder
    )
    mark = ax.scatter(
        xy[:, 0], xy[:, 1], s=area, marker=marker, facecolors=colour, edgecolors=TEXT,
        linewidths=max(size_px * 0.08, 0.8), zorder=zorder + 0.1,
    )  # fmt: skip
    return [halo, mark]


def _label(
    ax: Any, layout: Layout, x: float, y: float, label: str, *, width: float, colour: str = TEXT
) -> list[Any]:
    """A legend label: one line (wrapped in two when it does not fit at the text floor), or
    words on the first line and a muted second line."""
    kw = {"family": FONT, "va": "center"}
    first, _, second = label.partition("\n")
    size = fit_font(first, layout.body, width, min_size=layout.small)
    if not second:
        lines = [first]
        if _text_width(first, size) > width:  # too long even at the floor: two lines
            lines = _wrap_px(first, layout.small, width)
            size = layout.small
            if len(lines) > 2:
                lines = [lines[0], " ".join(lines[1:])]
        spacing = {"linespacing": 1.05} if len(lines) > 1 else {}
        return [ax.text(x, y, "\n".join(lines), fontsize=size, color=colour, **spacing, **kw)]
    dy = layout.row_h * 0.2
    small = fit_font(second, layout.small, width, min_size=layout.small)
    return [
        ax.text(x, y - dy, first, fontsize=size, color=TEXT, **kw),
        ax.text(x, y + dy + 1, second, fontsize=small, color=MUTED, **kw),
    ]


def header_width(layout: Layout, chrome: Chrome) -> float:
    """Room the counts column's header takes ("tracts in 2024" with the longest period)."""
    noun = chrome.text.unit_noun
    longest = max(chrome.period_labels, key=len, default="")
    head = f"{noun} in {longest}" if layout.strip is not None else noun
    return max(_text_width(head, layout.small) + 10 * layout.t, 60 * layout.t)


def _strip_bars(ax: Any, layout: Layout, chrome: Chrome) -> None:
    from matplotlib.patches import Rectangle

    st = layout.strip
    if st is None or not chrome.shares:
        return
    colours = [*chrome.colours, NODATA]
    mark_cols = list(chrome.mark_colours) or list(chrome.colours)
    for x, shares in zip(st.xs, chrome.shares):
        y = st.top + st.height
        for i, share in enumerate(shares):
            if share <= 0 or i in chrome.strip_skip or (chrome.strip_skip and i == len(shares) - 1):
                continue
            h = min(share / chrome.strip_full, 1.0) * st.height
            # a class drawn as marks shows in its mark colour (its fill is blank)
            colour = mark_cols[i] if i < len(chrome.colours) and chrome.mark_of(i) else colours[i]
            ax.add_patch(
                Rectangle(
                    (x - st.bar_w / 2, y - h), st.bar_w, h, facecolor=colour, edgecolor="none",
                    antialiased=False,
                )
            )  # fmt: skip
            y -= h
        ax.add_patch(
            Rectangle(
                (x - st.bar_w / 2, st.top), st.bar_w, st.height, facecolor="none",
                edgecolor=RULE, linewidth=0.8,
            )
        )  # fmt: skip
    step = _label_step(chrome.period_labels, st.xs, layout.small)
    shown = list(range(0, len(st.xs), step))
    if shown[-1] != len(st.xs) - 1:  # always name the last period, never on top of another
        if len(st.xs) - 1 - shown[-1] < step and len(shown) > 1:
            shown.pop()
        shown.append(len(st.xs) - 1)
    for i, (x, lab) in enumerate(zip(st.xs, chrome.period_labels)):
        if i in shown:
            ax.text(
                x, st.label_y, lab, fontsize=layout.small, color=MUTED, ha="center", va="top",
                family=FONT,
            )  # fmt: skip


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
    from matplotlib.collections import EllipseCollection, LineCollection
    from matplotlib.patches import Polygon, Rectangle

    s, t, m = layout.s, layout.t, layout.margin
    kw = {"family": FONT}
    ax.text(
        m, m, chrome.title, fontsize=layout.title_size, weight="bold", color=TEXT, va="top", **kw
    )
    if layout.subtitle_lines:
        ax.text(
            m,
            m + round(layout.title_size * 1.3),
            "\n".join(layout.subtitle_lines),
            fontsize=layout.subtitle_size,
            color=MUTED,
            va="top",
            linespacing=1.2,
            **kw,
        )
    if boundaries:
        ax.add_collection(
            LineCollection(
                list(boundaries),
                colors=chrome.boundary,
                linewidths=boundary_width,
                capstyle="round",
                joinstyle="round",
                antialiaseds=True,
            )
        )
    if dots is not None and len(dots) and dot_px > 0:
        # one collection for every ring: the cost stays flat when most units are tiny (a patch
        # per unit took 70 s at 85,000 tracts)
        d = np.full(len(dots), dot_px + 0.8)
        ax.add_collection(
            EllipseCollection(
                d,
                d,
                np.zeros(len(dots)),
                units="xy",
                offsets=np.asarray(dots, float) + (layout.transform.left, layout.transform.top),
                offset_transform=ax.transData,
                facecolors="none",
                edgecolors=OUTLINE,
                linewidths=0.6,
            ),
            autolim=False,
        )
    # legend header
    px, pw = layout.panel_x, layout.panel_w
    head_y = layout.legend_top
    count_w = 0.0
    if chrome.counts:
        count_w = header_width(layout, chrome)
        if layout.strip is None:  # with a strip the header names the period (drawn per frame)
            ax.text(
                px + pw, head_y + 1 * s, chrome.text.unit_noun, fontsize=layout.small,
                color=MUTED, va="top", ha="right", **kw,
            )  # fmt: skip
    if chrome.legend_title:
        size = fit_font(
            chrome.legend_title, 13 * t, pw - count_w - 8 * t, weight="bold", min_size=layout.small
        )
        ax.text(
            px, head_y, chrome.legend_title, fontsize=size, weight="bold", color=TEXT, va="top",
            **kw,
        )  # fmt: skip
    rule_y = head_y + 20 * t
    ax.plot([px, px + pw], [rule_y, rule_y], color=RULE, linewidth=0.8 * t)
    label_w = pw - 44 * t - (56 * t if chrome.counts else 0)
    for i, colour in enumerate(chrome.colours):
        x, y, bw, bh = swatch_box(layout, i)
        ax.add_patch(Rectangle((x, y), bw, bh, facecolor=colour, edgecolor=RULE, linewidth=0.6))
        kind = chrome.mark_of(i)
        if kind:
            col = chrome.mark_colours[i] if i < len(chrome.mark_colours) else TEXT
            draw_mark(ax, kind, np.array([[x + bw / 2, y + bh / 2]]), mark_size(layout), col)
    x, y, bw, bh = swatch_box(layout, nodata_row(chrome))
    if nodata_hatch:  # the raster path paints this swatch itself, pixel for pixel as the map
        ax.add_patch(
            Rectangle(
                (x, y), bw, bh, facecolor=NODATA, edgecolor=NODATA_HATCH, hatch="////", linewidth=0
            )
        )
    _label(ax, layout, x + bw + 10 * t, y + bh / 2, chrome.nodata_label, width=label_w,
           colour=MUTED)  # fmt: skip
    if len(chrome.labels) == 1:
        for i, label in enumerate(chrome.labels[0]):
            x, y, bw, bh = swatch_box(layout, i)
            _label(ax, layout, x + bw + 10 * t, y + bh / 2, label, width=label_w)
    if chrome.outline_label:
        x, y, bw, bh = swatch_box(layout, nodata_row(chrome) + 1)
        halo_w, line_w = outline_widths(layout)
        for colour, lw in ((HALO, halo_w), (OUTLINE, line_w)):
            ax.add_patch(
                Rectangle(
                    (x + 3, y + 3), bw - 6, bh - 6, facecolor="none", edgecolor=colour,
                    linewidth=lw,
                )
            )  # fmt: skip
        ax.add_patch(Rectangle((x, y), bw, bh, facecolor="none", edgecolor=RULE, linewidth=0.6))
        _label(ax, layout, x + bw + 10 * t, y + bh / 2, chrome.outline_label, width=pw - 44 * t)
    if chrome.strip_note:
        row = nodata_row(chrome) + 1 + (1 if chrome.outline_label else 0)
        x, y, bw, bh = swatch_box(layout, row)
        # a tiny bar as the swatch: the strip's look in the legend
        ax.add_patch(
            Rectangle((x + bw * 0.35, y), bw * 0.3, bh, facecolor="none", edgecolor=RULE, lw=0.8)
        )
        kept = [i for i in range(len(chrome.colours)) if i not in chrome.strip_skip]
        yb = y + bh
        for n, i in enumerate(kept[:2]):
            h = bh * (0.45 if n == 0 else 0.3)
            colour = (
                (chrome.mark_colours or chrome.colours)[i]
                if chrome.mark_of(i)
                else chrome.colours[i]
            )
            ax.add_patch(Rectangle((x + bw * 0.35, yb - h), bw * 0.3, h, facecolor=colour, lw=0))
            yb -= h
        _label(ax, layout, x + bw + 10 * t, y + bh / 2, chrome.strip_note, width=pw - 44 * t)
    if chrome.notice:
        size = 11.5 * t
        lines = _wrap_px(chrome.notice, size, pw - 20 * t, bold=True)
        box_h = len(lines) * size * 1.35 + 12 * t
        ax.add_patch(
            Rectangle(
                (px, layout.notice_top),
                pw,
                box_h,
                facecolor=NOTICE_BG,
                edgecolor=NOTICE_FG,
                linewidth=0.8 * t,
            )
        )
        ax.text(
            px + 10 * t,
            layout.notice_top + 6 * t,
            "\n".join(lines),
            fontsize=size,
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
                    (xe, sb.y - sb.height - round(4 * t)),
                    1,
                    round(4 * t),
                    facecolor=TEXT,
                    edgecolor="none",
                    antialiased=False,
                )
            )
        ax.text(
            sb.x0,
            sb.y - sb.height - round(7 * t),
            sb.label,
            fontsize=layout.small,
            color=TEXT,
            va="bottom",
            **kw,
        )
    if chrome.north_arrow and sb is not None:
        ax_x = px + pw - 12 * t
        base = sb.y
        tip = base - 30 * t
        ax.add_patch(
            Polygon(
                [(ax_x, tip), (ax_x - 7 * t, base), (ax_x, base - 8 * t)],
                closed=True,
                facecolor=TEXT,
                edgecolor=TEXT,
                linewidth=0.6,
            )
        )
        ax.add_patch(
            Polygon(
                [(ax_x, tip), (ax_x + 7 * t, base), (ax_x, base - 8 * t)],
                closed=True,
                facecolor=PAPER,
                edgecolor=TEXT,
                linewidth=0.6,
            )
        )
        ax.text(
            ax_x,
            tip - 3 * t,
            "N",
            fontsize=layout.small * 1.05,
            weight="bold",
            color=TEXT,
            ha="center",
            va="bottom",
            **kw,
        )
    _strip_bars(ax, layout, chrome)
    if layout.caption_lines:
        ax.text(
            m,
            layout.caption_y,
            "\n".join(layout.caption_lines),
            fontsize=layout.small,
            color=MUTED,
            va="bottom",
            linespacing=1.15,
            **kw,
        )


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
        s, t, kw = layout.s, layout.t, {"family": FONT}
        px, pw = layout.panel_x, layout.panel_w
        self.j = 0
        self.period = None  # the period is named by the strip's marker and the counts header
        self.counts = []
        self.labels = []
        self.header = None
        if chrome.counts and layout.strip is not None:
            self.header = ax.text(
                px + pw, layout.legend_top + 1 * s, "", fontsize=layout.small, color=MUTED,
                va="top", ha="right", **kw,
            )  # fmt: skip
        count_w = max(60 * t, pw * 0.22)
        if chrome.counts:
            count_w = max(count_w, header_width(layout, chrome))
        for i in range(len(chrome.colours) + 1):
            x, y, bw, bh = swatch_box(layout, i)
            if chrome.counts:
                self.counts.append(
                    ax.text(
                        px + pw,
                        y + bh / 2,
                        "",
                        fontsize=layout.body,
                        color=TEXT if i < len(chrome.colours) else MUTED,
                        va="center",
                        ha="right",
                        **kw,
                    )
                )
            if len(chrome.labels) > 1 and i < len(chrome.colours):
                self.labels.append(
                    ax.text(
                        x + bw + 10 * t,
                        y + bh / 2,
                        "",
                        fontsize=layout.body,
                        color=TEXT,
                        va="center",
                        **kw,
                    )
                )
        self._label_w = pw - 44 * t - (56 * t if chrome.counts else 0)
        self.marker: list[Any] = []
        st = layout.strip
        if st is not None:
            from matplotlib.patches import Rectangle

            pad = max(3 * t, 2)
            self._frame = Rectangle(
                (0, st.top - pad), st.bar_w + 2 * pad, st.height + 2 * pad, facecolor="none",
                edgecolor=TEXT, linewidth=max(2.0 * t, 1.5),
            )  # fmt: skip
            ax.add_patch(self._frame)
            self._current = ax.text(
                0, st.top - pad - 3 * t, "", fontsize=16 * t, weight="bold", color=TEXT,
                ha="center", va="bottom", **kw,
            )  # fmt: skip
            self.marker = [self._frame, self._current]
        halo_w, line_w = outline_widths(layout)
        self.halo = LineCollection(
            [], colors=HALO, linewidths=halo_w, joinstyle="round", capstyle="round"
        )
        self.outlines = LineCollection(
            [], colors=OUTLINE, linewidths=line_w, joinstyle="round", capstyle="round"
        )
        ax.add_collection(self.halo)
        ax.add_collection(self.outlines)
        self.marks: list[Any] = []
        self.callouts = ax.text(
            px,
            layout.callout_top,
            "",
            fontsize=layout.small,
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
        marks: Sequence[tuple[str, str, np.ndarray]] = (),
    ) -> None:
        """Show period ``j``: class counts, the strip's marker, outlines, marks and callouts.

        ``marks`` lists ``(kind, colour, xy)`` with ``xy`` the ``[n, 2]`` pixel points of the
        units drawn with that mark in this period.
        """
        chrome, layout = self.chrome, self.layout
        self.j = j
        label = chrome.period_labels[j] if chrome.period_labels else ""
        if self.header is not None:
            self.header.set_text(f"{chrome.text.unit_noun} in {label}")
        if chrome.counts and counts is not None:
            for t, c in zip(self.counts, [*counts, nodata]):
                t.set_text(f"{int(c):,}")
        for t, lab in zip(self.labels, chrome.labels_for(j)):
            t.set_text(lab.partition("\n")[0])
            t.set_fontsize(
                fit_font(lab.partition("\n")[0], layout.body, self._label_w, min_size=layout.small)
            )
        st = layout.strip
        if st is not None:
            pad = max(3 * layout.t, 2)
            x = st.xs[j]
            self._frame.set_x(x - st.bar_w / 2 - pad)
            # keep the period's label inside the strip's extent
            half = 0.5 * fit_font(label, 16 * layout.t, 1e9) * 0.62 * len(label)
            lx = min(max(x, st.xs[0] - st.bar_w / 2 + half), st.xs[-1] + st.bar_w / 2 - half)
            self._current.set_position((lx, st.top - pad - 3 * layout.t))
            self._current.set_text(label)
        self.halo.set_segments(list(outlines))
        self.outlines.set_segments(list(outlines))
        for artist in self.marks:
            artist.remove()
        self.marks = []
        size = mark_size(layout)
        for kind, colour, xy in marks:
            if len(xy):
                self.marks += draw_mark(self.ax, kind, xy, size, colour)
        if chrome.callouts and callouts:
            line_h = layout.small * 1.3 * 1.2
            room = int((layout.panel_bottom - layout.callout_top) / line_h) - 2
            shown = list(callouts[: max(min(room, 8), 0)])
            more = max(n_outlined, len(callouts)) - len(shown)
            head = chrome.outline_label or "outlined"
            head = "\n".join(_wrap_px(f"{head}:", layout.small, layout.panel_w))
            text = (
                f"{head}\n"
                + "\n".join(f"  {c}" for c in shown)
                + (f"\n  and {more:,} more" if more > 0 else "")
            )
            self.callouts.set_text(text)
        else:
            self.callouts.set_text("")

    def groups(self) -> list[tuple[Hashable | None, list[Any]]]:
        """The artists of the current period as sprite groups: ``(key, artists)``; a key names
        the group's state so it is drawn once, ``None`` draws it fresh."""
        j = self.j
        out: list[tuple[Hashable | None, list[Any]]] = []
        if self.header is not None:
            out.append((("header", self.header.get_text()), [self.header]))
        for i, t in enumerate(self.counts):
            out.append((("count", i, t.get_text()), [t]))
        for i, t in enumerate(self.labels):
            out.append((("label", i, t.get_text()), [t]))
        if self.marker:
            out.append((("strip", j), list(self.marker)))
        if self.marks:  # drawn once per period (a period's marks never change)
            out.append((("marks", j), list(self.marks)))
        if len(self.outlines.get_segments()) or self.callouts.get_text():
            out.append((None, [self.halo, self.outlines, self.callouts]))
        return out
