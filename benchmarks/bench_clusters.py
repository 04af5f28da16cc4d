"""Benchmark of the cluster step (run by hand: `python benchmarks/bench_clusters.py`).

1. The cluster step on 50,000 units (a 224 x 224 queen grid) x 20 periods of Poisson counts,
   end to end (`analyse_clusters`: local and global Moran with 999 permutations for the global
   I, change, trends, tables), with the old defaults (rates as mapped, 999-permutation local
   p-values) as the baseline and the new defaults (EB standardised rates, exact-moment normal
   p-values) in the same run; target < 120 s.
2. Local Moran with 999 permutations on the same grid, complete vs. a few missing cells (0.1 %
   of the cells, different in every period): one table of draws is shared across periods
   either way, so the ratio should stay near 1 (it was 3.6-4.4x when each period drew its own).
3. The demo county's cluster step (target < 10 s) and esda 2.9's Moran_Local (no numba) on one
   10,000-unit period for comparison.

Prints the figures and ratios; `--quick` runs a smaller grid. The machine is shared and noisy:
compare ratios within one run, not seconds across runs.
"""

from __future__ import annotations

import sys
import time
import warnings
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]


def grid(side: int):
    import geopandas as gpd
    from shapely.geometry import box

    return gpd.GeoSeries(
        [
            box(c * 100, r * 100, c * 100 + 100, r * 100 + 100)
            for r in range(side)
            for c in range(side)
        ],
        crs="EPSG:3857",
    )


def counts_panel(side: int, periods: int, missing: float = 0.0):
    """Poisson counts on bases 10-6,000 over a queen grid, a raised block, optional holes."""
    from mapdrift.panel import Panel

    geom = grid(side)
    n = len(geom)
    rng = np.random.default_rng(1)
    base = np.exp(rng.uniform(np.log(10), np.log(6000), size=n)).round()
    rate = np.full((n, periods), 0.005)
    rows, cols = np.divmod(np.arange(n), side)
    rate[(rows < side // 8) & (cols < side // 8)] *= 3
    counts = rng.poisson(rate * base[:, None]).astype(float)
    bases = np.repeat(base[:, None], periods, axis=1)
    values = counts / bases * 1000
    if missing:
        holes = rng.random(values.shape) < missing
        values[holes] = np.nan
        counts[holes] = np.nan
    panel = Panel.from_arrays(
        values,
        geom,
        periods=list(range(2000, 2000 + periods)),
        numerator=counts,
        denominator=bases,
    )
    return panel, geom


def bench_large(side: int = 224, periods: int = 20) -> None:
    from mapdrift.clusters import ClusterOptions, analyse_clusters
    from mapdrift.clusters.local import local_moran_panel
    from mapdrift.weights import build_weights

    panel, geom = counts_panel(side, periods)
    n = panel.n_units
    t0 = time.perf_counter()
    w = build_weights(geom, "queen")
    t1 = time.perf_counter()
    print(f"{n} units x {periods} periods, weights {t1 - t0:.1f} s")
    old = ClusterOptions(standardise="none", p_value="permutation")
    t2 = time.perf_counter()
    r_old = analyse_clusters(panel, None, old, weights=w)
    t3 = time.perf_counter()
    r_new = analyse_clusters(panel, None, ClusterOptions(), weights=w)
    t4 = time.perf_counter()
    hh_old = (r_old.codes == 0).sum(axis=0)
    hh_new = (r_new.codes == 0).sum(axis=0)
    print(
        f"cluster step, old defaults (rates as mapped, 999-permutation local p): {t3 - t2:.1f} s; "
        f"high-high per period {hh_old.min()}-{hh_old.max()}"
    )
    print(
        f"cluster step, new defaults (EB standardised, exact-moment normal p): {t4 - t3:.1f} s "
        f"({(t3 - t2) / (t4 - t3):.1f}x faster); high-high per period "
        f"{hh_new.min()}-{hh_new.max()} (target < 120 s)"
    )
    values = np.array(panel.values)
    holed, _ = counts_panel(side, periods, missing=0.001)
    t5 = time.perf_counter()
    local_moran_panel(values, w, permutations=999, seed=1)
    t6 = time.perf_counter()
    local_moran_panel(np.array(holed.values), w, permutations=999, seed=1)
    t7 = time.perf_counter()
    print(
        f"local Moran 999 permutations: complete {t6 - t5:.1f} s, with 0.1% missing cells "
        f"{t7 - t6:.1f} s (ratio {(t7 - t6) / (t6 - t5):.2f}; was 3.6-4.4)"
    )


def bench_demo() -> None:
    from mapdrift.clusters import ClusterOptions, analyse_clusters
    from mapdrift.config import load_config
    from mapdrift.panel import InputSpec, load_panel

    cfg = load_config(ROOT / "demo_data" / "demo.toml")
    panel = load_panel(InputSpec(**cfg.section("inputs")))
    t0 = time.perf_counter()
    analyse_clusters(panel, None, ClusterOptions())
    t1 = time.perf_counter()
    print(
        f"demo county ({panel.n_units} units x {panel.n_periods} periods) cluster step: "
        f"{t1 - t0:.2f} s (target < 10 s)"
    )


def bench_esda(side: int = 100) -> None:
    import esda
    from libpysal import weights as lw

    from mapdrift.clusters.local import local_moran_panel
    from mapdrift.weights import build_weights

    geom = grid(side)
    y = np.random.default_rng(2).normal(size=len(geom))
    w = build_weights(geom, "queen")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        ref = lw.W.from_sparse(w.W)
        t0 = time.perf_counter()
        esda.Moran_Local(y, ref, permutations=999, seed=1, n_jobs=1)
        t1 = time.perf_counter()
    local_moran_panel(y[:, None], w, permutations=999, seed=1)
    t2 = time.perf_counter()
    print(
        f"one {len(geom)}-unit period, 999 perms: esda Moran_Local {t1 - t0:.1f} s, "
        f"mapdrift {t2 - t1:.1f} s"
    )


if __name__ == "__main__":
    quick = "--quick" in sys.argv
    bench_demo()
    bench_esda(50 if quick else 100)
    bench_large(60 if quick else 224, 20)
