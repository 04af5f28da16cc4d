"""Benchmark of the change step: 100,000 units x 30 periods, k = 7 (target: under 5 s).

Everything except the spatially conditioned transitions (which need weights over the real
geometry): transition counts per step, pooled and first-to-last, Markov summaries, the
homogeneity test, trajectories/jumps/spikes/persistence for every unit, and Kendall's tau per
step. Values follow a persistent random walk so that class moves look like real data (mostly
small moves, some jumps). Run: ``python benchmarks/bench_changes.py [n_units] [n_periods]``.
"""

from __future__ import annotations

import sys
import time

import numpy as np


def main(n_units: int = 100_000, n_periods: int = 30, k: int = 7) -> float:
    import shapely

    from mapdrift.breaks import classify
    from mapdrift.changes import ChangeOptions, analyse_changes
    from mapdrift.panel import Panel

    rng = np.random.default_rng(2024)
    base = rng.lognormal(1.5, 0.6, size=(n_units, 1))
    walk = np.cumsum(rng.normal(0, 0.15, size=(n_units, n_periods)), axis=1)
    values = base * np.exp(walk)
    values[rng.random(values.shape) < 0.02] = np.nan  # 2 % missing cells
    geoms = shapely.points(np.arange(n_units, dtype=float), np.zeros(n_units))
    panel = Panel.from_arrays(values, geoms, periods=list(range(1995, 1995 + n_periods)))

    t0 = time.perf_counter()
    classes = classify(panel, "quantile", k)
    t1 = time.perf_counter()
    result = analyse_changes(panel, classes, ChangeOptions(spatial=False))
    t2 = time.perf_counter()

    tr = result.transitions
    print(f"panel: {n_units:,} units x {n_periods} periods, k = {classes.k}")
    print(f"classify (quantile, pooled):          {t1 - t0:6.2f} s  (not part of the target)")
    print(f"changes (all but spatial Markov):     {t2 - t1:6.2f} s  (target < 5 s)")
    print(f"  unit steps counted: {tr.n_pairs:,}; left out (no data): {int(tr.n_missing.sum()):,}")
    print(
        f"  jumps: {len(result.jumps):,}; units with a spike: {int(result.units['spike'].sum()):,}"
    )
    h = result.homogeneity
    print(f"  homogeneity over time: LR {h.LR:.1f}, df {h.df}, p = {h.p_LR:.3g}")
    return t2 - t1


def bench_parts(n_units: int = 100_000, n_periods: int = 30, k: int = 7) -> None:
    """Time each part separately (to see where the time goes)."""
    from mapdrift.changes import count_transitions, homogeneity_test, markov_summary
    from mapdrift.changes.trajectories import rank_mobility, unit_changes

    rng = np.random.default_rng(7)
    codes = np.clip(
        np.cumsum(rng.integers(-1, 2, size=(n_units, n_periods)), axis=1) + 3, 0, k - 1
    ).astype(np.int16)
    values = codes + rng.random(codes.shape)
    periods = list(range(n_periods))
    timings = {}
    t = time.perf_counter()
    tr = count_transitions(codes, k, periods=periods)
    timings["transition counts"] = time.perf_counter() - t
    t = time.perf_counter()
    markov_summary(tr.counts)
    homogeneity_test(tr.by_step)
    timings["Markov summary + homogeneity"] = time.perf_counter() - t
    t = time.perf_counter()
    unit_changes(
        codes,
        values,
        tr.steps,
        units=[str(i) for i in range(n_units)],
        names=[str(i) for i in range(n_units)],
        period_labels=[str(p) for p in periods],
        top=[k - 1] * n_periods,
        class_labels=[f"c{i}" for i in range(k)],
    )
    timings["trajectories, jumps, flags"] = time.perf_counter() - t
    t = time.perf_counter()
    rank_mobility(values, tr.steps, [str(p) for p in periods])
    timings["Kendall's tau per step"] = time.perf_counter() - t
    for name, secs in timings.items():
        print(f"  {name:<32} {secs:6.2f} s")


if __name__ == "__main__":
    args = [int(a) for a in sys.argv[1:3]]
    main(*args)
    print("parts:")
    bench_parts(*args)
