"""Pixel helpers shared by the frame renderer and the encoders.

Packed pixels: one little-endian ``uint32`` per pixel holding the bytes R, G, B and an unused
fourth byte (``R | G << 8 | B << 16``), so that gathers and copies move one word per pixel.
"""

from __future__ import annotations

import numpy as np

__all__ = ["hatch_alpha", "pack_rgb", "unpack_rgb"]


def pack_rgb(rgb: np.ndarray) -> np.ndarray:
    """``[..., 3]`` uint8 -> ``[...]`` little-endian uint32 ``R | G << 8 | B << 16``."""
    rgb = np.asarray(rgb, dtype=np.uint8)
    out = np.zeros((*rgb.shape[:-1], 4), dtype=np.uint8)
    out[..., :3] = rgb
    return out.view("<u4")[..., 0]


def unpack_rgb(packed: np.ndarray) -> np.ndarray:
    """Packed ``[...]`` uint32 -> a new ``[..., 3]`` uint8 array."""
    p = np.ascontiguousarray(packed, dtype="<u4")
    if p.ndim == 2 and p.size:  # Pillow drops the fourth byte in C, much faster than numpy
        from PIL import Image

        h, w = p.shape
        im = Image.frombuffer("RGBX", (w, h), p, "raw", "RGBX", 0, 1).convert("RGB")
        return np.asarray(im).copy()
    return np.ascontiguousarray(p.view(np.uint8).reshape(*p.shape, 4)[..., :3])


def hatch_alpha(h: int, w: int, spacing: float, width: float) -> np.ndarray:
    """Antialiased diagonal lines (rising to the right), alpha 0..1, aligned to the frame origin."""
    yy, xx = np.mgrid[0:h, 0:w].astype(np.float32)
    u = np.mod(xx + 0.5 + (h - yy - 0.5), spacing)
    dist = np.minimum(u, spacing - u) / np.float32(np.sqrt(2.0))
    return np.clip(width / 2 + 0.5 - dist, 0.0, 1.0).astype(np.float32)
