"""Measuring and wrapping text so it stays inside its box (slides and the deck).

Widths are measured with the DejaVu Sans font that ships with matplotlib, which is wider than
the usual presentation fonts, so text that fits here fits on screen too.
"""

from __future__ import annotations

import functools
from collections.abc import Sequence

__all__ = ["font_path", "line_height", "text_width", "wrap", "fit"]


@functools.lru_cache(maxsize=4)
def font_path(bold: bool = False) -> str:
    from matplotlib import font_manager

    return font_manager.findfont(
        font_manager.FontProperties(family="DejaVu Sans", weight="bold" if bold else "normal")
    )


@functools.lru_cache(maxsize=64)
def _font(size_px: int, bold: bool):
    from PIL import ImageFont

    return ImageFont.truetype(font_path(bold), size_px)


def text_width(text: str, size_px: float, bold: bool = False) -> float:
    """Width in pixels of one line at ``size_px``."""
    return float(_font(max(int(round(size_px)), 1), bold).getlength(text))


def line_height(size_px: float) -> float:
    """Line pitch used for wrapped paragraphs: 1.2 x the font size."""
    return 1.2 * size_px


def wrap(text: str, width_px: float, size_px: float, bold: bool = False) -> list[str]:
    """Greedy word wrap to ``width_px``; a word longer than the line is broken."""
    lines: list[str] = []
    for para in text.split("\n"):
        words = para.split()
        cur = ""
        for w in words:
            trial = f"{cur} {w}".strip()
            if text_width(trial, size_px, bold) <= width_px:
                cur = trial
                continue
            if cur:
                lines.append(cur)
            while text_width(w, size_px, bold) > width_px and len(w) > 1:
                cut = len(w)
                while cut > 1 and text_width(w[:cut], size_px, bold) > width_px:
                    cut -= 1
                lines.append(w[:cut])
                w = w[cut:]
            cur = w
        lines.append(cur)
    return lines


def fit(
    paragraphs: Sequence[str],
    width_px: float,
    height_px: float,
    *,
    max_px: float,
    min_px: float = 10.0,
    bold: bool = False,
    gap_lines: float = 0.4,
) -> tuple[float, list[list[str]]]:
    """Largest size in [min_px, max_px] at which the wrapped paragraphs fit the box.

    Returns the size and the wrapped lines per paragraph. At ``min_px`` the text may still not
    fit: the caller must then cut text (the test suite checks every slide).
    """
    size = max_px
    while True:
        wrapped = [wrap(p, width_px, size, bold) for p in paragraphs]
        n_lines = sum(len(w) for w in wrapped) + gap_lines * max(len(wrapped) - 1, 0)
        if n_lines * line_height(size) <= height_px or size <= min_px:
            return size, wrapped
        size = max(min_px, size * 0.92)
