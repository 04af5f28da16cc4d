"""Colour difference and colour-vision simulation."""

from __future__ import annotations

import numpy as np
import pytest

from mapdrift.colour import (
    ciede2000,
    delta_e,
    hex_to_rgb,
    hex_to_rgb8,
    rgb_to_hex,
    rgb_to_lab,
    simulate_cvd,
)

# Sharma, G., Wu, W., Dalal, E. N. (2005). "The CIEDE2000 color-difference formula:
# implementation notes, supplementary test data, and mathematical observations."
# Color Research & Application 30(1), Table 1: the 34 test pairs (L1 a1 b1, L2 a2 b2, dE00).
# Values typed from memory of that table; every pair agreeing to 1e-4 with an implementation of
# the formula is strong evidence that both the recollection and the code are right.
SHARMA_2005 = [
    (50.0000, 2.6772, -79.7751, 50.0000, 0.0000, -82.7485, 2.0425),
    (50.0000, 3.1571, -77.2803, 50.0000, 0.0000, -82.7485, 2.8615),
    (50.0000, 2.8361, -74.0200, 50.0000, 0.0000, -82.7485, 3.4412),
    (50.0000, -1.3802, -84.2814, 50.0000, 0.0000, -82.7485, 1.0000),
    (50.0000, -1.1848, -84.8006, 50.0000, 0.0000, -82.7485, 1.0000),
    (50.0000, -0.9009, -85.5211, 50.0000, 0.0000, -82.7485, 1.0000),
    (50.0000, 0.0000, 0.0000, 50.0000, -1.0000, 2.0000, 2.3669),
    (50.0000, -1.0000, 2.0000, 50.0000, 0.0000, 0.0000, 2.3669),
    (50.0000, 2.4900, -0.0010, 50.0000, -2.4900, 0.0009, 7.1792),
    (50.0000, 2.4900, -0.0010, 50.0000, -2.4900, 0.0010, 7.1792),
    (50.0000, 2.4900, -0.0010, 50.0000, -2.4900, 0.0011, 7.2195),
    (50.0000, 2.4900, -0.0010, 50.0000, -2.4900, 0.0012, 7.2195),
    (50.0000, -0.0010, 2.4900, 50.0000, 0.0009, -2.4900, 4.8045),
    (50.0000, -0.0010, 2.4900, 50.0000, 0.0010, -2.4900, 4.8045),
    (50.0000, -0.0010, 2.4900, 50.0000, 0.0011, -2.4900, 4.7461),
    (50.0000, 2.5000, 0.0000, 50.0000, 0.0000, -2.5000, 4.3065),
    (50.0000, 2.5000, 0.0000, 73.0000, 25.0000, -18.0000, 27.1492),
    (50.0000, 2.5000, 0.0000, 61.0000, -5.0000, 29.0000, 22.8977),
    (50.0000, 2.5000, 0.0000, 56.0000, -27.0000, -3.0000, 31.9030),
    (50.0000, 2.5000, 0.0000, 58.0000, 24.0000, 15.0000, 19.4535),
    (50.0000, 2.5000, 0.0000, 50.0000, 3.1736, 0.5854, 1.0000),
    (50.0000, 2.5000, 0.0000, 50.0000, 3.2972, 0.0000, 1.0000),
    (50.0000, 2.5000, 0.0000, 50.0000, 1.8634, 0.5757, 1.0000),
    (50.0000, 2.5000, 0.0000, 50.0000, 3.2592, 0.3350, 1.0000),
    (60.2574, -34.0099, 36.2677, 60.4626, -34.1751, 39.4387, 1.2644),
    (63.0109, -31.0961, -5.8663, 62.8187, -29.7946, -4.0864, 1.2630),
    (61.2901, 3.7196, -5.3901, 61.4292, 2.2480, -4.9620, 1.8731),
    (35.0831, -44.1164, 3.7933, 35.0232, -40.0716, 1.5901, 1.8645),
    (22.7233, 20.0904, -46.6940, 23.0331, 14.9730, -42.5619, 2.0373),
    (36.4612, 47.8580, 18.3852, 36.2715, 50.5065, 21.2231, 1.4146),
    (90.8027, -2.0831, 1.4410, 91.1528, -1.6435, 0.0447, 1.4441),
    (90.9257, -0.5406, -0.9208, 88.6381, -0.8985, -0.7239, 1.5381),
    (6.7747, -0.2908, -2.4247, 5.8714, -0.0985, -2.2286, 0.6377),
    (2.0776, 0.0795, -1.1350, 0.9033, -0.0636, -0.5514, 0.9082),
]


def test_ciede2000_matches_sharma_wu_dalal_2005_pairs():
    data = np.array(SHARMA_2005)
    got = ciede2000(data[:, 0:3], data[:, 3:6])
    np.testing.assert_allclose(got, data[:, 6], atol=1e-4)


def test_ciede2000_matches_colour_science():
    # Second check of the recalled table: colour-science (reference library) computes CIEDE2000
    # for the same pairs, and on random Lab pairs.
    import colour

    data = np.array(SHARMA_2005)
    ref = colour.delta_E(data[:, 0:3], data[:, 3:6], method="CIE 2000")
    # Pairs whose hues are exactly 180 degrees apart (a2 = -a1, b2 = -b1) sit on the branch
    # point of the formula: colour-science takes either branch depending on the platform's
    # trigonometry (on numpy 1.25 the other one), so it is no reference there; ours is pinned
    # to the paper's branch and checked against the table above.
    flip = (data[:, 1] == -data[:, 4]) & (data[:, 2] == -data[:, 5]) & (data[:, 1] != 0)
    assert flip.sum() == 2
    np.testing.assert_allclose(ref[~flip], data[~flip, 6], atol=1e-4)  # the recollection holds
    ours = ciede2000(data[:, 0:3], data[:, 3:6])
    np.testing.assert_allclose(ours[~flip], ref[~flip], rtol=1e-9)
    rng = np.random.default_rng(4)
    a = np.column_stack([rng.uniform(0, 100, 500), rng.uniform(-80, 80, (500, 2))])
    b = np.column_stack([rng.uniform(0, 100, 500), rng.uniform(-80, 80, (500, 2))])
    np.testing.assert_allclose(ciede2000(a, b), colour.delta_E(a, b, method="CIE 2000"), rtol=1e-9)


def test_ciede2000_is_symmetric_and_zero_on_identity():
    # Sharma et al. (2005) note the formula is symmetric in its two arguments.
    data = np.array(SHARMA_2005)
    np.testing.assert_allclose(ciede2000(data[:, 3:6], data[:, 0:3]), data[:, 6], atol=1e-4)
    assert np.all(ciede2000(data[:, 0:3], data[:, 0:3]) == 0)


def test_lab_of_srgb_white_and_black():
    # sRGB white is the D65 white point: L* = 100, a* = b* = 0 (CIE definition).
    lab = rgb_to_lab(["#ffffff", "#000000"])
    # (0.05 tolerance: colorspacious rounds the sRGB matrix and white point)
    np.testing.assert_allclose(lab[0], [100, 0, 0], atol=0.05)
    np.testing.assert_allclose(lab[1], [0, 0, 0], atol=0.01)


def test_hex_round_trip_and_errors():
    assert hex_to_rgb8("#1f77b4") == (31, 119, 180)
    assert rgb_to_hex(hex_to_rgb("#1f77b4")) == "#1f77b4"
    assert hex_to_rgb8("#fff") == (255, 255, 255)
    with pytest.raises(ValueError, match="not a hex colour"):
        hex_to_rgb("red")


def test_deuteranopia_merges_red_and_green():
    # Machado et al. (2009): full deuteranopia maps pure red and a matched green close together;
    # normal vision sees them very far apart. Checked as an order relation, not exact values.
    red, green = ["#d62728"], ["#2ca02c"]
    normal = delta_e(red, green)[0]
    seen = simulate_cvd(["#d62728", "#2ca02c"], "deuteranopia")
    deut = ciede2000(rgb_to_lab(seen[:1]), rgb_to_lab(seen[1:]))[0]
    assert normal > 60
    assert deut < normal / 2
    # Greys are unchanged by every simulation (the model preserves the achromatic axis).
    for kind in ("deuteranopia", "protanopia", "tritanopia"):
        grey = simulate_cvd(["#808080"], kind)[0]
        np.testing.assert_allclose(grey, [128 / 255] * 3, atol=0.02)


def test_cam02ucs_metric_is_available():
    d = delta_e(["#000000"], ["#ffffff"], metric="cam02-ucs")[0]
    assert d > 90  # J' spans 0..100 in CAM02-UCS (Luo, Cui & Li 2006)
    with pytest.raises(ValueError, match="metric"):
        delta_e(["#000000"], ["#ffffff"], metric="cie76x")
