"""Spatial weights: our contiguity builder against libpysal's, on the same polygons.

Why ours stays (weights.py): it is measured faster here. Both sides build queen contiguity on
the same layer in the same run; the script prints seconds and the ratio, and checks that the
neighbour sets agree. Usage::

    python benchmarks/bench_weights.py [--side 150]

A grid of squares (``side`` x ``side``) and jittered Voronoi cells of the same count (irregular
polygons, as real tracts are). Timings on a shared machine are noisy: run it more than once.
"""

from __future__ import annotations

import argparse
import time
import warnings

import numpy as np


def layers(side: int) -> dict[str, object]:
    import geopandas as gpd
    import shapely
    from shapely.geometry import box

    n = side * side
    grid = gpd.GeoSeries(
        [
            box(c * 100, r * 100, c * 100 + 100, r * 100 + 100)
            for r in range(side)
            for c in range(side)
        ],
        crs="EPSG:3857",
    )
    rng = np.random.default_rng(1)
    pts = shapely.points(rng.uniform(0, side * 100, size=(n, 2)))
    cells = shapely.voronoi_polygons(
        shapely.multipoints(pts), extend_to=box(0, 0, side * 100, side * 100)
    )
    cells = shapely.intersection(shapely.get_parts(cells), box(0, 0, side * 100, side * 100))
    return {"grid": grid, "voronoi": gpd.GeoSeries(cells, crs="EPSG:3857")}


def timed(f):
    t0 = time.perf_counter()
    out = f()
    return out, time.perf_counter() - t0


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--side", type=int, default=150)
    args = ap.parse_args()
    import geopandas as gpd
    from libpysal import graph

    from mapdrift.weights import build_weights

    for name, geom in layers(args.side).items():
        ours, t_ours = timed(lambda geom=geom: build_weights(geom, "queen", islands="exclude"))
        gdf = gpd.GeoDataFrame(geometry=geom)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            ref, t_ref = timed(lambda gdf=gdf: graph.Graph.build_contiguity(gdf, rook=False))
        same = (abs((ours.W > 0).astype(int) - (ref.sparse > 0).astype(int))).nnz == 0
        print(
            f"{name:8s} {len(geom):,} polygons: mapdrift {t_ours:.2f} s, libpysal Graph "
            f"{t_ref:.2f} s, ratio {t_ref / t_ours:.1f}x; same neighbours: {same}"
        )


if __name__ == "__main__":
    main()
