"""Colour arithmetic for honest palettes: hex/RGB, CIELAB, CIEDE2000, colour-vision simulation.

Map classes must stay apart for readers with the common colour-vision deficiencies. This module
gives the pieces :mod:`mapdrift.palettes` needs to check that: conversion to CIELAB (via
colorspacious, D65), the CIEDE2000 colour difference (Sharma, Wu & Dalal 2005 formulation,
implemented here and tested against their published pairs), and simulation of deuteranopia,
protanopia and tritanopia (Machado, Oliveira & Fernandes 2009, via colorspacious).
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

__all__ = [
    "CVD_KINDS",
    "ciede2000",
    "delta_e",
    "hex_to_rgb",
    "hex_to_rgb8",
    "rgb_to_hex",
    "rgb_to_lab",
    "simulate_cvd",
]

#: Colour-vision deficiencies we simulate (colorspacious names, Machado et al. 2009 model).
CVD_KINDS: dict[str, str] = {
    "deuteranopia": "deuteranomaly",
    "protanopia": "protanomaly",
    "tritanopia": "tritanomaly",
}


def hex_to_rgb(colour: str) -> tuple[float, float, float]:
    """``'#1f77b4'`` (or ``'1f77b4'``, ``'#17b'``) -> sRGB floats in 0..1."""
    h = colour.strip().lstrip("#")
    if len(h) == 3:
        h = "".join(c * 2 for c in h)
    if len(h) not in (6, 8):
        raise ValueError(f"colour {colour!r} is not a hex colour like '#1f77b4'")
    try:
        r, g, b = (int(h[i : i + 2], 16) / 255.0 for i in (0, 2, 4))
    except ValueError:
        raise ValueError(f"colour {colour!r} is not a hex colour like '#1f77b4'") from None
    return r, g, b


def hex_to_rgb8(colour: str) -> tuple[int, int, int]:
    """``'#1f77b4'`` -> ``(31, 119, 180)``."""
    r, g, b = hex_to_rgb(colour)
    return round(r * 255), round(g * 255), round(b * 255)


def rgb_to_hex(rgb: Sequence[float]) -> str:
    """sRGB floats 0..1 -> ``'#rrggbb'`` (values clipped to the gamut)."""
    r, g, b = (int(round(min(max(float(c), 0.0), 1.0) * 255)) for c in rgb[:3])
    return f"#{r:02x}{g:02x}{b:02x}"


def _as_rgb_array(colours: Sequence[str] | np.ndarray) -> np.ndarray:
    if isinstance(colours, np.ndarray):
        return np.asarray(colours, dtype=np.float64).reshape(-1, 3)
    return np.array([hex_to_rgb(c) for c in colours], dtype=np.float64).reshape(-1, 3)


def rgb_to_lab(colours: Sequence[str] | np.ndarray) -> np.ndarray:
    """Hex colours (or sRGB floats ``[n, 3]`` in 0..1) -> CIELAB ``[n, 3]`` (D65, colorspacious)."""
    from colorspacious import cspace_convert

    return np.asarray(cspace_convert(_as_rgb_array(colours), "sRGB1", "CIELab"), dtype=np.float64)


def simulate_cvd(
    colours: Sequence[str] | np.ndarray, kind: str, severity: float = 100.0
) -> np.ndarray:
    """sRGB floats ``[n, 3]`` as seen with ``kind`` (deuteranopia, protanopia, tritanopia).

    ``severity`` 100 is the full dichromacy of Machado et al. (2009); results are clipped to the
    displayable range 0..1.
    """
    from colorspacious import cspace_convert

    if kind not in CVD_KINDS:
        raise ValueError(f"colour-vision kind {kind!r} is not one of {', '.join(CVD_KINDS)}")
    space = {"name": "sRGB1+CVD", "cvd_type": CVD_KINDS[kind], "severity": float(severity)}
    out = cspace_convert(_as_rgb_array(colours), space, "sRGB1")
    return np.clip(np.asarray(out, dtype=np.float64), 0.0, 1.0)


def ciede2000(
    lab1: np.ndarray, lab2: np.ndarray, *, kl: float = 1.0, kc: float = 1.0, kh: float = 1.0
) -> np.ndarray:
    """CIEDE2000 colour difference between CIELAB colours (arrays ``[..., 3]``), vectorised.

    Follows the formulation and the hue-angle conventions of Sharma, Wu & Dalal (2005), "The
    CIEDE2000 color-difference formula: implementation notes, supplementary test data, and
    mathematical observations", Color Res. Appl. 30(1). NaN inputs give NaN.
    """
    lab1 = np.asarray(lab1, dtype=np.float64)
    lab2 = np.asarray(lab2, dtype=np.float64)
    l1, a1, b1 = lab1[..., 0], lab1[..., 1], lab1[..., 2]
    l2, a2, b2 = lab2[..., 0], lab2[..., 1], lab2[..., 2]
    c1 = np.hypot(a1, b1)
    c2 = np.hypot(a2, b2)
    cbar7 = ((c1 + c2) / 2.0) ** 7
    g = 0.5 * (1.0 - np.sqrt(cbar7 / (cbar7 + 25.0**7)))
    a1p, a2p = (1.0 + g) * a1, (1.0 + g) * a2
    c1p, c2p = np.hypot(a1p, b1), np.hypot(a2p, b2)
    # hue angles in degrees 0..360; zero chroma -> hue 0 (eq. 7 of Sharma et al.)
    h1p = np.where((a1p == 0) & (b1 == 0), 0.0, np.degrees(np.arctan2(b1, a1p)) % 360.0)
    h2p = np.where((a2p == 0) & (b2 == 0), 0.0, np.degrees(np.arctan2(b2, a2p)) % 360.0)
    dlp = l2 - l1
    dcp = c2p - c1p
    zero = (c1p * c2p) == 0
    # Hue differences of exactly 180 degrees (Sharma et al.'s pairs 13-14) land an ulp either
    # side depending on the platform's trigonometry: compare with a tolerance so every numpy
    # and CPU takes the same (the paper's) branch.
    eps = 1e-9
    dh = h2p - h1p
    dh = np.where(dh > 180.0 + eps, dh - 360.0, np.where(dh < -180.0 - eps, dh + 360.0, dh))
    dh = np.where(zero, 0.0, dh)
    dhp = 2.0 * np.sqrt(c1p * c2p) * np.sin(np.radians(dh) / 2.0)
    lbarp = (l1 + l2) / 2.0
    cbarp = (c1p + c2p) / 2.0
    hsum = h1p + h2p
    hbarp = np.where(
        zero,
        hsum,
        np.where(
            np.abs(h1p - h2p) <= 180.0 + eps,
            hsum / 2.0,
            np.where(hsum < 360.0, (hsum + 360.0) / 2.0, (hsum - 360.0) / 2.0),
        ),
    )
    t = (
        1.0
        - 0.17 * np.cos(np.radians(hbarp - 30.0))
        + 0.24 * np.cos(np.radians(2.0 * hbarp))
        + 0.32 * np.cos(np.radians(3.0 * hbarp + 6.0))
        - 0.20 * np.cos(np.radians(4.0 * hbarp - 63.0))
    )
    dtheta = 30.0 * np.exp(-(((hbarp - 275.0) / 25.0) ** 2))
    cbarp7 = cbarp**7
    rc = 2.0 * np.sqrt(cbarp7 / (cbarp7 + 25.0**7))
    sl = 1.0 + 0.015 * (lbarp - 50.0) ** 2 / np.sqrt(20.0 + (lbarp - 50.0) ** 2)
    sc = 1.0 + 0.045 * cbarp
    sh = 1.0 + 0.015 * cbarp * t
    rt = -np.sin(np.radians(2.0 * dtheta)) * rc
    tl, tc, th = dlp / (kl * sl), dcp / (kc * sc), dhp / (kh * sh)
    return np.sqrt(tl**2 + tc**2 + th**2 + rt * tc * th)


def delta_e(
    colours1: Sequence[str] | np.ndarray,
    colours2: Sequence[str] | np.ndarray,
    *,
    metric: str = "ciede2000",
) -> np.ndarray:
    """Pairwise (element by element) perceptual difference of two lists of colours.

    ``metric`` is ``"ciede2000"`` (CIELAB, our implementation) or ``"cam02-ucs"`` (Euclidean
    distance in CAM02-UCS, colorspacious).
    """
    if metric == "ciede2000":
        return ciede2000(rgb_to_lab(colours1), rgb_to_lab(colours2))
    if metric == "cam02-ucs":
        from colorspacious import deltaE

        return np.asarray(
            deltaE(_as_rgb_array(colours1), _as_rgb_array(colours2), input_space="sRGB1"),
            dtype=np.float64,
        )
    raise ValueError(f"metric {metric!r} is not one of ciede2000, cam02-ucs")
