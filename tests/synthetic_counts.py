"""Our own generator of a tract-like panel of noisy small-area counts with planted truth.

Invented data (not a real place), for the noise tests only. :func:`make_panel` builds:

- ``n`` Voronoi "tracts" from seeded random points in a 40 x 40 km square (EPSG:3857 metres);
- a base (mortgaged parcels) per tract, fixed over the years: log-uniform between 300 and 6,000
  for nine tracts in ten, between 10 and 300 for the rest;
- a true filing rate of 5 per 1,000 times a gentle smooth surface (x0.8 to x1.25) and a mild
  county-wide year factor (x0.9 to x1.1); filings are Poisson draws on the base;
- a compact hot spot: the ``hot`` tracts nearest a point in the south-west quarter, at three
  times the rate in every year;
- ``jumpers`` large-base tracts (base 3,000-6,000, away from the hot spot) whose rate goes up
  six-fold from year ``jump_year`` on and stays up (real jumps);
- one tiny tract (10 parcels, far from the hot spot) with no filing in any year but one filing
  in ``spike_year``: a rate of 100 per 1,000 against a median near 5, i.e. a one-year spike
  that is pure count noise.

``truth`` names the planted units (``hot``, ``jumpers``, ``tiny``) and the years.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from mapdrift.panel import Panel

__all__ = ["Synthetic", "make_panel"]


@dataclass(frozen=True)
class Synthetic:
    panel: Panel
    hot: tuple[int, ...]
    jumpers: tuple[int, ...]
    tiny: int
    jump_year: int
    spike_year: int
    years: tuple[int, ...]


def _voronoi(points: np.ndarray, size: float) -> list:
    import shapely
    from shapely.geometry import MultiPoint, box

    frame = box(0, 0, size, size)
    cells = shapely.voronoi_polygons(MultiPoint(points), extend_to=frame)
    polys = list(shapely.get_parts(cells))
    # voronoi_polygons returns cells in no guaranteed order: match each to its point
    tree = shapely.STRtree(polys)
    order = tree.query(shapely.points(points), predicate="intersects")
    by_point = dict(zip(order[0], order[1], strict=True))
    return [polys[by_point[i]].intersection(frame) for i in range(len(points))]


def make_panel(
    n: int = 1600,
    *,
    years: int = 8,
    hot: int = 40,
    jumpers: int = 5,
    seed: int = 20261202,
) -> Synthetic:
    """The panel described in the module docstring (deterministic for a seed)."""
    rng = np.random.default_rng(seed)
    size = 40_000.0
    pts = rng.uniform(0, size, size=(n, 2))
    geoms = _voronoi(pts, size)
    small = rng.random(n) < 0.1
    base = np.where(
        small,
        np.exp(rng.uniform(np.log(10), np.log(300), size=n)),
        np.exp(rng.uniform(np.log(300), np.log(6000), size=n)),
    ).round()
    surface = np.exp(0.22 * np.sin(pts[:, 0] / 9000) * np.cos(pts[:, 1] / 11000))
    year_factor = 1 + 0.1 * np.sin(np.arange(years) * 1.3)
    rate = 0.005 * surface[:, None] * year_factor[None, :]

    centre = np.array([0.3 * size, 0.3 * size])
    dist = np.hypot(*(pts - centre).T)
    hot_idx = np.argsort(dist)[:hot]
    rate[hot_idx] *= 3.0

    far = dist > 0.35 * size
    big = np.flatnonzero(far & (base >= 3000) & (pts[:, 0] < 0.8 * size))
    jump_idx = rng.choice(big, size=jumpers, replace=False)
    jump_year = years // 2
    rate[jump_idx, jump_year:] *= 6.0

    counts = rng.poisson(rate * base[:, None]).astype(np.float64)

    # the tiny tract: the one farthest from the hot spot, not a planted jumper
    order = np.argsort(-dist)
    tiny = int(next(i for i in order if i not in set(jump_idx)))
    base[tiny] = 10
    spike_year = years // 2 - 1
    counts[tiny] = 0
    counts[tiny, spike_year] = 1

    bases = np.repeat(base[:, None], years, axis=1)
    values = counts / bases * 1000
    panel = Panel.from_arrays(
        values,
        geoms,
        crs="EPSG:3857",
        periods=list(range(2010, 2010 + years)),
        numerator=counts,
        denominator=bases,
    )
    return Synthetic(
        panel=panel,
        hot=tuple(int(i) for i in hot_idx),
        jumpers=tuple(int(i) for i in jump_idx),
        tiny=tiny,
        jump_year=jump_year,
        spike_year=spike_year,
        years=tuple(range(2010, 2010 + years)),
    )
