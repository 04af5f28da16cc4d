"""The per-period artists as small RGBA sprites, drawn once per distinct state and cached.

A frame changes only a few texts (period, counts, per-period labels), the timeline marker, and
optionally outlines and callouts. Drawing the whole transparent figure for each frame costs a
full-frame raster pass plus a full-frame composite; instead each *group* of artists is drawn
alone into the figure's renderer, cropped to the pixels it touched, and kept under a key that
captures its state (its text, or the period for the timeline). A frame composites the cached
sprites over its rectangles with the same integer "over" formula as before, so the pixels are
unchanged; groups occupy disjoint places on the frame, so compositing them one by one equals
compositing the whole layer at once. Only matplotlib's public API is used (``Artist.draw``,
``get_window_extent``, the Agg renderer's ``clear`` and ``buffer_rgba``): each distinct text is
drawn once per animation, so a frame pays for compositing only.
"""

from __future__ import annotations

from collections.abc import Hashable, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

__all__ = ["Sprite", "SpriteCache", "composite"]

_PAD = 4  # pixels around an artist's reported extent (stroke widths, antialiasing)


@dataclass(frozen=True)
class Sprite:
    """Straight-alpha RGBA pixels ``rgba`` [h, w, 4] uint8 placed at frame row ``top``, col ``left``."""

    top: int
    left: int
    rgba: np.ndarray


def composite(frame8: np.ndarray, sprite: Sprite) -> None:
    """Alpha-composite ``sprite`` onto ``frame8`` ([H, W, >=3] uint8) in place.

    ``out = (src * a + dst * (255 - a) + 127) // 255`` per channel; pixels with ``a == 0`` stay
    exactly as they were.
    """
    h, w = sprite.rgba.shape[:2]
    if h == 0 or w == 0:
        return
    dst = frame8[sprite.top : sprite.top + h, sprite.left : sprite.left + w, :3]
    a = sprite.rgba[..., 3:4].astype(np.uint16)
    src = sprite.rgba[..., :3].astype(np.uint16)
    dst[...] = ((src * a + dst.astype(np.uint16) * (255 - a) + 127) // 255).astype(np.uint8)


class SpriteCache:
    """Draws groups of artists of one transparent figure into sprites, cached by a key.

    ``key=None`` draws without caching (for outlines, which change every frame and can be
    large). Memory: one small sprite per distinct text per slot.
    """

    def __init__(self, fig: Any) -> None:
        fig.canvas.draw()  # realises fonts and transforms once
        self._renderer = fig.canvas.get_renderer()
        self._height = int(round(fig.bbox.height))
        self._width = int(round(fig.bbox.width))
        self._cache: dict[Hashable, Sprite | None] = {}

    def __len__(self) -> int:
        return len(self._cache)

    def get(self, key: Hashable | None, artists: Sequence[Any]) -> Sprite | None:
        """The sprite of ``artists`` (None if they draw nothing), drawn on first use of ``key``."""
        return self.get_many([(key, artists)])[0]

    def get_many(
        self, groups: Sequence[tuple[Hashable | None, Sequence[Any]]]
    ) -> list[Sprite | None]:
        """Sprites of several groups; the groups not yet cached are drawn in one pass.

        The groups must not overlap on the frame (each is cropped from the shared buffer).
        """
        out: list[Sprite | None] = [None] * len(groups)
        todo: list[tuple[int, list[Any]]] = []
        for i, (key, artists) in enumerate(groups):
            if key is not None and key in self._cache:
                out[i] = self._cache[key]
                continue
            visible = [a for a in artists if a.get_visible()]
            if visible:
                todo.append((i, visible))
            elif key is not None:
                self._cache[key] = None
        if not todo:
            return out
        # groups whose (padded) boxes are disjoint share one pass over the renderer
        passes: list[list[tuple[int, list[Any], tuple[int, int, int, int]]]] = []
        for i, vis in todo:
            box = self._box(vis)
            for group in passes:
                if all(_disjoint(box, other) for _, _, other in group):
                    group.append((i, vis, box))
                    break
            else:
                passes.append([(i, vis, box)])
        r = self._renderer
        for group in passes:
            r.clear()
            for a in sorted((a for _, vis, _ in group for a in vis), key=lambda a: a.get_zorder()):
                a.draw(r)
            buf = np.asarray(r.buffer_rgba())
            for i, _vis, box in group:
                sprite = _crop(buf, box)
                out[i] = sprite
                key = groups[i][0]
                if key is not None:
                    self._cache[key] = sprite
        return out

    def _box(self, artists: Sequence[Any]) -> tuple[int, int, int, int]:
        """Rows and columns ``(r0, r1, c0, c1)`` the artists may touch, padded and clipped."""
        r = self._renderer
        H, W = self._height, self._width
        r0, r1, c0, c1 = H, 0, W, 0
        for a in artists:
            bb = a.get_window_extent(r)
            x0, y0, x1, y1 = bb.x0, bb.y0, bb.x1, bb.y1
            if not np.all(np.isfinite([x0, x1, y0, y1])):
                return 0, H, 0, W
            r0 = min(r0, int(np.floor(H - y1)) - _PAD)
            r1 = max(r1, int(np.ceil(H - y0)) + _PAD)
            c0 = min(c0, int(np.floor(x0)) - _PAD)
            c1 = max(c1, int(np.ceil(x1)) + _PAD)
        return max(r0, 0), min(r1, H), max(c0, 0), min(c1, W)


def _disjoint(a: tuple[int, int, int, int], b: tuple[int, int, int, int]) -> bool:
    return a[1] <= b[0] or b[1] <= a[0] or a[3] <= b[2] or b[3] <= a[2]


def _crop(buf: np.ndarray, box: tuple[int, int, int, int]) -> Sprite | None:
    """The drawn (alpha > 0) part of ``buf`` inside ``box``, or None."""
    r0, r1, c0, c1 = box
    if r1 <= r0 or c1 <= c0:
        return None
    crop = buf[r0:r1, c0:c1]
    alpha = crop[..., 3]
    rows = np.flatnonzero(alpha.any(axis=1))
    if rows.size == 0:
        return None
    cols = np.flatnonzero(alpha.any(axis=0))
    rgba = crop[rows[0] : rows[-1] + 1, cols[0] : cols[-1] + 1].copy()
    return Sprite(top=r0 + int(rows[0]), left=c0 + int(cols[0]), rgba=rgba)
