"""Rendering: label raster, frame layout, frame iterator, encoders, small multiples, static maps.

Plain arrays in, files out. Import-light: the public functions below are resolved on first use
(PEP 562), so ``import mapdrift.render`` loads neither matplotlib nor Pillow nor imageio.

- :func:`render_frames` / :class:`FrameRenderer` (frames.py): stream ``[H, W, 3]`` uint8 frames.
- :func:`write_gif`, :func:`write_mp4`, :func:`write_png_frames` (encode.py).
- :func:`small_multiples` (multiples.py), :func:`static_map` (static.py).
- :func:`animate` / :class:`AnimateOptions` (animation.py): frames + encoder + ``max_mb``.
"""

from __future__ import annotations

from typing import TYPE_CHECKING, Any

_LAZY = {
    "FrameRenderer": "mapdrift.render.frames",
    "MapText": "mapdrift.render.layout",
    "render_frames": "mapdrift.render.frames",
    "write_gif": "mapdrift.render.encode",
    "write_mp4": "mapdrift.render.encode",
    "write_png_frames": "mapdrift.render.encode",
    "small_multiples": "mapdrift.render.multiples",
    "static_map": "mapdrift.render.static",
    "animate": "mapdrift.render.animation",
    "AnimateOptions": "mapdrift.render.animation",
    "AnimateResult": "mapdrift.render.animation",
}

__all__ = [
    "AnimateOptions",
    "AnimateResult",
    "FrameRenderer",
    "MapText",
    "animate",
    "render_frames",
    "small_multiples",
    "static_map",
    "write_gif",
    "write_mp4",
    "write_png_frames",
]

if TYPE_CHECKING:
    from mapdrift.render.animation import AnimateOptions, AnimateResult, animate
    from mapdrift.render.encode import write_gif, write_mp4, write_png_frames
    from mapdrift.render.frames import FrameRenderer, render_frames
    from mapdrift.render.layout import MapText
    from mapdrift.render.multiples import small_multiples
    from mapdrift.render.static import static_map


def __getattr__(name: str) -> Any:
    if name in _LAZY:
        import importlib

        return getattr(importlib.import_module(_LAZY[name]), name)
    raise AttributeError(f"module 'mapdrift.render' has no attribute {name!r}")
