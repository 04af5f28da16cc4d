"""Cached-glyph text drawing equals matplotlib's own ``Text.draw``, pixel for pixel.

Reference: matplotlib's Agg renderer drawing the same Text artists (the general-purpose
library the frames are drawn with); a difference of even one byte fails.
"""

from __future__ import annotations

import numpy as np
import pytest

from mapdrift.render.glyphs import GlyphAtlas


@pytest.fixture
def canvas():
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    fig = Figure(figsize=(6.4, 3.6), dpi=100, facecolor="none")
    FigureCanvasAgg(fig)
    ax = fig.add_axes((0, 0, 1, 1))
    ax.set_xlim(0, 640)
    ax.set_ylim(360, 0)
    ax.set_axis_off()
    ax.patch.set_visible(False)
    fig.canvas.draw()
    yield fig, ax, fig.canvas.get_renderer()
    fig.clear()


def _draw(r, fn, arg):
    r.clear()
    fn(arg)
    return np.asarray(r.buffer_rgba()).copy()


def test_cached_glyphs_equal_text_draw_for_every_alignment_and_sub_pixel_position(canvas):
    fig, ax, r = canvas
    atlas = GlyphAtlas(r)
    assert atlas.enabled
    texts = [
        ax.text(500.3, 100.7, "", fontsize=11.5, ha="right", va="center", color="#333333"),
        ax.text(20.1, 10.4, "", fontsize=40, weight="bold", va="top"),
        ax.text(320.37, 300.0, "", fontsize=11, weight="bold", ha="center", va="bottom"),
        ax.text(40.0, 200.2, "", fontsize=9.3, va="baseline", alpha=0.6, color="#6a51a3"),
    ]
    strings = [f"{i:,}" for i in range(0, 120_000, 4_999)] + ["2019 Q3", "Ågy, jp", "no data (12)"]
    for t in texts:
        for s in strings:
            t.set_text(s)
            want = _draw(r, t.draw, r)
            plan = atlas.plan(t)
            assert plan is not None
            got = _draw(r, atlas.draw, plan)
            assert (got == want).all(), (s, t.get_fontsize())
            bb = t.get_window_extent(r)
            assert plan.extent == pytest.approx((bb.x0, bb.y0, bb.x1, bb.y1))
    # the same glyph at the same sub-pixel offset is rendered once
    assert 0 < len(atlas) < len(texts) * sum(len(s) for s in strings)


def test_texts_the_fast_path_does_not_cover_fall_back(canvas):
    fig, ax, r = canvas
    atlas = GlyphAtlas(r)
    assert atlas.plan(ax.text(10, 10, "two\nlines")) is None
    assert atlas.plan(ax.text(10, 10, r"$x^2$")) is None
    assert atlas.plan(ax.text(10, 10, "turned", rotation=30)) is None
    assert atlas.plan(ax.text(10, 10, "boxed", bbox={"facecolor": "white"})) is None
    assert atlas.plan(ax.text(10, 10, "")) is None
    assert atlas.plan(ax.plot([0, 1], [0, 1])[0]) is None
