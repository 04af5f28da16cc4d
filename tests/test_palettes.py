"""Palettes: order, colour-vision safety, cluster colours."""

from __future__ import annotations

import numpy as np
import pytest

from mapdrift import palettes
from mapdrift.colour import ciede2000, hex_to_rgb, rgb_to_hex, rgb_to_lab, simulate_cvd


@pytest.mark.parametrize("k", range(2, 8))
def test_default_sequential_is_ordered_light_to_dark_and_cvd_safe(k):
    cols = palettes.sequential(k)
    assert len(cols) == k == len(set(cols))
    lab = rgb_to_lab(cols)
    # a sequential legend must read as an order: lightness falls strictly (common practice, no source)
    assert np.all(np.diff(lab[:, 0]) < 0)
    # Machado et al. (2009) simulation via colorspacious: adjacent classes stay apart for
    # deuteranopia, protanopia and tritanopia as well as normal vision
    assert palettes.check_palette(cols) == []
    for d in palettes.adjacent_differences(cols).values():
        assert d.min() >= palettes.MIN_DELTA_E


def test_default_sequential_is_not_red_dominant():
    # CIELAB hue angle of red is near 40 degrees (CIE 1976 a*, b*); keep every class out of
    # 0..60 degrees with real chroma, i.e. no red or red-orange class.
    lab = rgb_to_lab(palettes.sequential(7))
    hue = np.degrees(np.arctan2(lab[:, 2], lab[:, 1])) % 360
    chroma = np.hypot(lab[:, 1], lab[:, 2])
    assert not np.any((hue < 60) & (chroma > 20))


def test_check_palette_warns_on_a_pair_only_normal_vision_separates():
    # A colour and its own deuteranopia simulation: far apart for normal vision, nearly the
    # same for a deuteranope (the Machado 2009 dichromat model is close to a projection).
    a = "#d8472b"
    b = rgb_to_hex(simulate_cvd([a], "deuteranopia")[0])
    normal = ciede2000(rgb_to_lab([a]), rgb_to_lab([b]))[0]
    assert normal > palettes.MIN_DELTA_E
    found = palettes.check_palette([a, b], ["low", "high"], nodata=None)
    assert [f.code for f in found] and all(f.code == "palette-classes-close" for f in found)
    assert any("deuteranopia" in f.message and "'low' and 'high'" in f.message for f in found)
    assert not any("normal vision" in f.message for f in found)


def test_diverging_centre_is_visible_on_white_and_ends_are_dark():
    for k in (3, 5, 7):
        cols = palettes.diverging(k)
        L = rgb_to_lab(cols)[:, 0]
        c = k // 2
        assert L[c] <= 93.0 + 0.5  # our cap so the centre class does not vanish into paper
        assert L[0] < L[c] and L[-1] < L[c]
        assert palettes.check_palette(cols) == []


def test_cluster_colours_cover_the_labels_and_differ():
    want = {
        "high-high",
        "low-low",
        "high-low",
        "low-high",
        "not significant",
        "isolated",
        "no data",
    }
    assert set(palettes.CLUSTER_COLOURS) == want == set(palettes.CLUSTER_LOOK)
    # every label is drawn differently: by its fill, or by its mark on the blank fill
    looks = {(fill, mark) for fill, mark, _ in palettes.CLUSTER_LOOK.values()}
    assert len(looks) == len(want)
    assert palettes.CLUSTER_COLOURS["no data"] == palettes.NODATA
    # only the two cores are filled areas; outliers are marks, not pale fills
    assert {k for k, (f, m, _) in palettes.CLUSTER_LOOK.items() if f != palettes.CLUSTER_BLANK} == {
        "high-high",
        "low-low",
        "no data",
    }
    assert palettes.CLUSTER_LOOK["high-low"][1] and palettes.CLUSTER_LOOK["low-high"][1]
    # cores, blank and no data apart for normal vision and each simulated deficiency (CIEDE2000
    # >= MIN_DELTA_E; threshold common practice, no source)
    fills = [palettes.CLUSTER_COLOURS[k] for k in ("high-high", "low-low", "not significant")]
    assert palettes.check_palette(fills, nodata=palettes.NODATA) == []
    assert palettes.check_palette(fills[::2], nodata=None) == []


def test_qualitative_colours_are_distinct_and_not_grey():
    cols = palettes.qualitative(9)
    assert len(set(cols)) == 9
    for c in cols:
        r, g, b = hex_to_rgb(c)
        assert max(r, g, b) - min(r, g, b) > 0.1  # grey is reserved for no data


def test_palette_sizes_checked():
    with pytest.raises(ValueError, match="1 to 12"):
        palettes.sequential(0)
    assert palettes.colours_for(5, diverging_legend=True) == palettes.diverging(5)
