"""Fast, pixel-identical drawing of simple matplotlib texts: each glyph is rasterised once.

Agg draws a text glyph by glyph: FreeType renders each glyph at its pen position (in 1/64
pixel) and the coverage bitmap is blended onto the canvas with the text colour. Rendering a
glyph is the costly part, and it depends on the position only through its fractional 1/64
offset (a whole-pixel move shifts the bitmap by whole pixels), so :class:`GlyphAtlas` keeps one
bitmap per (font, size, glyph, sub-pixel offset) and blends the cached bitmap through the same
``draw_text_image`` call Agg uses: the pixels are the ones ``Text.draw`` makes. The text layout
(anchor, alignment) comes from matplotlib's own ``Text._get_layout``, computed once per text and
used both for the sprite box and for drawing, instead of twice.

Only single-line, unrotated, plain (no mathtext, TeX, path effects or box) texts take this
path; :meth:`GlyphAtlas.plan` returns None for everything else, and for a matplotlib whose
internals differ, so the caller falls back to ``artist.draw``.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np

__all__ = ["GlyphAtlas", "TextPlan"]

_IDENTITY = np.array([[0x10000, 0], [0, 0x10000]])


@dataclass
class TextPlan:
    """Where one text draws: its display-space bbox and the renderer call it would make."""

    text: Any
    extent: tuple[float, float, float, float]  # x0, y0, x1, y1 in display pixels (y up)
    x: float
    y: float  # y down (Agg canvas), as passed to draw_text
    line: str


class GlyphAtlas:
    """Glyph bitmaps cached by sub-pixel position, drawn onto one Agg renderer."""

    def __init__(self, renderer: Any) -> None:
        self._r = renderer
        self._glyphs: dict[tuple[Any, ...], tuple[np.ndarray, int, int]] = {}
        try:
            from matplotlib.backends.backend_agg import RendererAgg, get_hinting_flag
            from matplotlib.ft2font import RenderMode
            from matplotlib.text import Text

            ok = isinstance(renderer, RendererAgg) and all(
                hasattr(x, a)
                for x, a in (
                    (Text, "_get_layout"),
                    (renderer, "_prepare_font"),
                    (renderer, "_renderer"),
                )
            )
        except ImportError:  # pragma: no cover - matplotlib without these modules
            ok = False
        self.enabled = ok
        if ok:
            self._Text = Text
            self._flags = get_hinting_flag()
            self._modes = (RenderMode.MONO, RenderMode.NORMAL)

    def __len__(self) -> int:
        return len(self._glyphs)

    def plan(self, text: Any) -> TextPlan | None:
        """The layout of ``text`` if it can take the fast path, else None."""
        if not self.enabled or type(text) is not self._Text:
            return None
        s = text.get_text()
        if (
            not s
            or "\n" in s
            or text.get_rotation() != 0
            or text.get_usetex()
            or text.get_path_effects()
            or text.get_bbox_patch() is not None
            or text.get_wrap()
            or not np.isfinite(text.get_fontsize())
        ):
            return None
        try:
            line_s, ismath = text._preprocess_math(s)
            if ismath:
                return None
            r = self._r
            bbox, info, _ = text._get_layout(r)
            if len(info) != 1:
                return None
            posx, posy = text.get_transform().transform(text.get_unitless_position())
            if not (np.isfinite(posx) and np.isfinite(posy)):
                return None
            line, _wad, (dx, dy) = info[0]
            clean, ismath = text._preprocess_math(line)
            if ismath:
                return None
            ext = bbox.translated(posx, posy)
            y = posy + dy
            if r.flipy():
                y = r.get_canvas_width_height()[1] - y
            return TextPlan(text, (ext.x0, ext.y0, ext.x1, ext.y1), posx + dx, y, clean)
        except (AttributeError, TypeError, ValueError):  # internals changed: use Text.draw
            return None

    def draw(self, plan: TextPlan) -> None:
        """Draw ``plan``'s text onto the renderer, exactly as ``Text.draw`` would."""
        import matplotlib.colors as mcolors

        t, r = plan.text, self._r
        gc = r.new_gc()
        gc.set_foreground(mcolors.to_rgba(t.get_color()), isRGBA=True)
        gc.set_alpha(t.get_alpha())
        gc.set_antialiased(t._antialiased)
        gc.set_snap(t.get_snap())
        t._set_gc_clip(gc)
        prop = t._fontproperties
        font = r._prepare_font(prop)
        items = font._layout(
            plan.line,
            flags=self._flags,
            features=t.get_fontfeatures(),
            language=t.get_language(),
        )
        size = prop.get_size_in_points()
        dpi = r.dpi
        height = int(r.height)
        aa = bool(gc.get_antialiased())
        for item in items:
            ix = round(0x40 * (plan.x + item.x))
            iy = round(0x40 * (r.height - plan.y + item.y))
            f = item.ft_object
            key = (f.fname, id(f), size, dpi, item.glyph_index, ix & 63, iy & 63, aa)
            hit = self._glyphs.get(key)
            if hit is None:
                f.set_size(size, dpi)
                f._set_transform(_IDENTITY, [ix & 63, iy & 63])
                bm = f._render_glyph(item.glyph_index, self._flags, self._modes[aa])
                buf = np.array(bm.buffer, dtype=np.uint8, copy=True)
                if not aa:
                    buf *= 0xFF
                hit = (buf, int(bm.left), int(bm.top))
                self._glyphs[key] = hit
            buf, left, top = hit
            r._renderer.draw_text_image(
                buf, left + (ix >> 6), height - (top + (iy >> 6)) + buf.shape[0], 0, gc
            )
        gc.restore()
