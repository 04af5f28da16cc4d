"""Colour schemes by legend kind, the no-data look, cluster colours, and colour-vision checks.

``sequential(k)`` (default ramp pale yellow-green to deep blue: no red, which reads as danger),
``diverging(k)`` (purple below the centre, orange above) and ``qualitative(k)`` return lists of
``'#rrggbb'``. Sequential and diverging colours are sampled from matplotlib's ColorBrewer-derived
maps at *equal perceptual steps* (equal CIEDE2000 distance along the ramp, not equal steps of
the map's parameter), which maximises the smallest difference between adjacent classes.

:func:`check_palette` simulates deuteranopia, protanopia and tritanopia (Machado et al. 2009)
and returns a warning :class:`~mapdrift.findings.Finding` when two adjacent classes fall below
:data:`MIN_DELTA_E` (CIEDE2000) for normal vision or any of these.
"""

from __future__ import annotations

from collections.abc import Sequence
from functools import lru_cache

import numpy as np

from mapdrift.findings import Finding

__all__ = [
    "CLUSTER_BLANK",
    "CLUSTER_COLOURS",
    "CLUSTER_LOOK",
    "CLUSTER_WORDS",
    "DIVERGING",
    "FLAG_COLOURS",
    "MIN_DELTA_E",
    "NODATA",
    "NODATA_HATCH",
    "QUALITATIVE",
    "SEQUENTIAL",
    "adjacent_differences",
    "check_palette",
    "colours_for",
    "diverging",
    "qualitative",
    "sequential",
]

#: Default matplotlib maps and the part of each we sample (ends too pale or too dark are cut).
SEQUENTIAL = ("YlGnBu", 0.12, 0.95)
DIVERGING = ("PuOr_r", 0.0, 1.0)
QUALITATIVE = ("Set2", "Dark2")

#: No-data units: a neutral mid-light grey with darker diagonal hatching, distinct from classes.
NODATA = "#cfcfcf"
NODATA_HATCH = "#8c8c8c"

#: Smallest CIEDE2000 difference we accept between adjacent classes (normal vision and each
#: simulated deficiency). About twice the usual just-noticeable difference of ~2.3 plus room for
#: small map areas; common practice, no source.
MIN_DELTA_E = 6.0

#: Fill of a unit that is in no cluster: almost paper, so that the cores stand out; the map
#: draws grey boundaries on cluster maps so these units still read as land.
CLUSTER_BLANK = "#f6f5f1"

#: How each local-cluster label is drawn. Our own design: only the two kinds of *core* are
#: filled areas (a dark aubergine for high values among high neighbours, an ochre for low among
#: low: they differ in lightness by about 50 L*, so they stay apart in every simulated colour
#: deficiency); the two kinds of *outlier* are marks on an otherwise blank unit (a triangle
#: pointing up for a high unit among low neighbours, down for a low unit among high ones), drawn
#: at a fixed pixel size so that small units keep them; a unit with no neighbours gets a small
#: open ring. Not significant is left blank. ``(fill, mark, mark colour)``; ``mark`` is one of
#: ``"up"``, ``"down"``, ``"ring"`` or None.
CLUSTER_LOOK: dict[str, tuple[str, str | None, str]] = {
    "high-high": ("#4b1d5c", None, "#4b1d5c"),
    "low-low": ("#c7a93a", None, "#c7a93a"),
    "high-low": (CLUSTER_BLANK, "up", "#4b1d5c"),
    "low-high": (CLUSTER_BLANK, "down", "#c7a93a"),
    "not significant": (CLUSTER_BLANK, None, CLUSTER_BLANK),
    "isolated": (CLUSTER_BLANK, "ring", "#5c5c5c"),
    "no data": (NODATA, None, NODATA),
}

#: Fill colour per cluster label (the units layer and tables use these).
CLUSTER_COLOURS: dict[str, str] = {label: look[0] for label, look in CLUSTER_LOOK.items()}

#: What each cluster label means, in words, for legends (trade term on the second line).
CLUSTER_WORDS: dict[str, str] = {
    "high-high": "high, among high neighbours\nhigh-high",
    "low-low": "low, among low neighbours\nlow-low",
    "high-low": "high, among low neighbours\nhigh-low outlier",
    "low-high": "low, among high neighbours\nlow-high outlier",
    "not significant": "no significant pattern",
    "isolated": "no neighbours (not tested)",
}

#: Colours of the flagged-units map, in the order of ``mapdrift.changes.FLAG_LABELS``.
FLAG_COLOURS: tuple[str, ...] = (
    "#c51b7d",  # spike (check data)
    "#7b3294",  # jumps up and down
    "#e66101",  # jump up
    "#3b6fb6",  # jump down
    "#1b7837",  # stayed in top class
    "#a6dba0",  # stayed in bottom class
    "#e3d9c6",  # moves within count noise (a pale sand, apart from no flag and no data)
    "#f4f4f4",  # no flag
)

# Lightest colour a diverging centre may have, so it does not vanish into white paper.
_MAX_CENTRE_L = 93.0


@lru_cache(maxsize=64)
def _even_samples(name: str, lo: float, hi: float, k: int) -> tuple[str, ...]:
    import matplotlib

    from mapdrift.colour import ciede2000, rgb_to_hex, rgb_to_lab

    cmap = matplotlib.colormaps[name]
    t = np.linspace(lo, hi, 513)
    rgb = np.asarray(cmap(t))[:, :3]
    lab = rgb_to_lab(rgb)
    dist = np.concatenate([[0.0], np.cumsum(ciede2000(lab[:-1], lab[1:]))])
    pos = np.interp(np.linspace(0.0, dist[-1], k), dist, t)
    return tuple(rgb_to_hex(c) for c in np.asarray(cmap(pos))[:, :3])


def _check_k(k: int) -> int:
    k = int(k)
    if not 1 <= k <= 12:
        raise ValueError(f"palettes have 1 to 12 colours, asked for {k}")
    return k


def sequential(k: int, name: str | None = None) -> list[str]:
    """``k`` colours from light (low values) to dark (high values).

    ``name`` picks another matplotlib colour map (e.g. ``"PuBu"``), sampled whole.
    """
    k = _check_k(k)
    cmap, lo, hi = (name, 0.05, 0.95) if name else SEQUENTIAL
    if k == 1:
        return [_even_samples(cmap, lo, hi, 3)[1]]
    return list(_even_samples(cmap, lo, hi, k))


def diverging(k: int, name: str | None = None) -> list[str]:
    """``k`` colours diverging about the centre class (odd ``k``) or the middle edge (even ``k``).

    The centre colour is darkened to at most L* 93 so that it stays visible on white paper.
    """
    from mapdrift.colour import rgb_to_hex, rgb_to_lab

    k = _check_k(k)
    cmap, lo, hi = (name, 0.0, 1.0) if name else DIVERGING
    if k < 3:
        return list(_even_samples(cmap, lo, hi, 5)[1::2][:k])
    cols = list(_even_samples(cmap, lo, hi, k))
    lab = rgb_to_lab(cols)
    for i, L in enumerate(lab[:, 0]):
        if L > _MAX_CENTRE_L:
            from colorspacious import cspace_convert

            fixed = lab[i].copy()
            fixed[0] = _MAX_CENTRE_L
            cols[i] = rgb_to_hex(np.clip(cspace_convert(fixed, "CIELab", "sRGB1"), 0, 1))
    return cols


def qualitative(k: int) -> list[str]:
    """``k`` distinct colours of equal weight for categories (no order implied)."""
    import matplotlib

    from mapdrift.colour import rgb_to_hex

    k = _check_k(k)
    out: list[str] = []
    for name in QUALITATIVE:
        cmap = matplotlib.colormaps[name]
        out += [rgb_to_hex(cmap(i)[:3]) for i in range(cmap.N)]
    # drop the greys: grey is reserved for no data
    out = [c for c in out if c not in ("#b3b3b3", "#666666")]
    return out[:k]


def colours_for(k: int, *, diverging_legend: bool = False) -> list[str]:
    """The palette a legend of ``k`` classes gets: diverging when it has a centre, else sequential."""
    return diverging(k) if diverging_legend else sequential(k)


def adjacent_differences(colours: Sequence[str]) -> dict[str, np.ndarray]:
    """CIEDE2000 difference of each adjacent pair, for normal vision and each simulated deficiency.

    Returns ``{"normal": [k-1], "deuteranopia": [k-1], "protanopia": ..., "tritanopia": ...}``.
    """
    from mapdrift.colour import CVD_KINDS, ciede2000, rgb_to_lab, simulate_cvd

    out: dict[str, np.ndarray] = {}
    lab = rgb_to_lab(list(colours))
    out["normal"] = ciede2000(lab[:-1], lab[1:])
    for kind in CVD_KINDS:
        sim = rgb_to_lab(simulate_cvd(list(colours), kind))
        out[kind] = ciede2000(sim[:-1], sim[1:])
    return out


def check_palette(
    colours: Sequence[str],
    labels: Sequence[str] | None = None,
    *,
    threshold: float = MIN_DELTA_E,
    nodata: str | None = NODATA,
) -> list[Finding]:
    """Warn when adjacent classes (or a class and the no-data grey) are hard to tell apart.

    One warning per vision kind that fails, naming the closest pair and its CIEDE2000 difference.
    """
    colours = list(colours)
    labels = list(labels) if labels is not None else [f"class {i + 1}" for i in range(len(colours))]
    findings: list[Finding] = []
    if len(colours) >= 2:
        for kind, d in adjacent_differences(colours).items():
            i = int(np.argmin(d))
            if d[i] < threshold:
                who = "normal vision" if kind == "normal" else f"simulated {kind}"
                findings.append(
                    Finding(
                        "warning",
                        "palette-classes-close",
                        f"classes {labels[i]!r} and {labels[i + 1]!r} are hard to tell apart for "
                        f"{who} (CIEDE2000 {d[i]:.1f} < {threshold:g}); use fewer classes or "
                        "another palette",
                    )
                )
    if nodata is not None and colours:
        from mapdrift.colour import delta_e

        d = delta_e(colours, [nodata] * len(colours))
        i = int(np.argmin(d))
        if d[i] < threshold:
            findings.append(
                Finding(
                    "warning",
                    "palette-nodata-close",
                    f"class {labels[i]!r} ({colours[i]}) looks like the no-data grey {nodata} "
                    f"(CIEDE2000 {d[i]:.1f}); the hatching still tells them apart, but pick "
                    "another colour if you can",
                )
            )
    return findings
