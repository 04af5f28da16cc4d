"""Benchmark of the per-unit trends (Mann-Kendall + Theil-Sen) on long series: memory stays
bounded whatever the number of periods.

The baseline, measured in the same run, is the all-pairs computation (every pairwise
difference of every unit held at once: units x periods^2), on a series short enough for it to
fit; the ratio of peak memory is printed. Then the bounded code runs the case that used to need
23 GB (16 units x 10,000 daily periods). Peak memory is numpy's traced allocations
(tracemalloc). Run: ``python benchmarks/bench_trends.py [n_units] [long_periods]``.
"""

from __future__ import annotations

import sys
import time
import tracemalloc

import numpy as np


def _all_pairs(x: np.ndarray, t: np.ndarray) -> np.ndarray:
    """The old way: S and the median slope from every pair at once (the memory baseline)."""
    i, j = np.triu_indices(x.shape[1], k=1)
    S = np.nansum(np.sign(x[:, j] - x[:, i]), axis=1)
    slope = np.nanmedian((x[:, j] - x[:, i]) / (t[j] - t[i]), axis=1)
    return S + slope


def _measure(fn, *args) -> tuple[float, float]:
    tracemalloc.start()
    t0 = time.perf_counter()
    fn(*args)
    dt = time.perf_counter() - t0
    peak = tracemalloc.get_traced_memory()[1]
    tracemalloc.stop()
    return dt, peak / 1e6


def main(n_units: int = 16, long_periods: int = 10_000) -> None:
    from mapdrift.clusters.trends import trends

    rng = np.random.default_rng(9)
    short = rng.normal(size=(n_units, 1_500)).cumsum(axis=1)
    t_short = np.arange(short.shape[1], dtype=float)
    base_t, base_mb = _measure(_all_pairs, short, t_short)
    new_t, new_mb = _measure(trends, short, t_short)
    print(
        f"{n_units} units x 1,500 periods: all pairs {base_t:.1f} s, {base_mb:,.0f} MB; "
        f"bounded {new_t:.1f} s, {new_mb:,.0f} MB ({base_mb / new_mb:.1f}x less memory)"
    )
    long = rng.normal(size=(n_units, long_periods)).cumsum(axis=1)
    t_long = np.arange(long_periods, dtype=float)
    need = n_units * long_periods**2 / 2 * 8 * 3 / 1e9
    lt, lmb = _measure(trends, long, t_long)
    print(
        f"{n_units} units x {long_periods:,} periods: bounded {lt:.1f} s, {lmb:,.0f} MB "
        f"(all pairs would need about {need:,.0f} GB)"
    )


if __name__ == "__main__":
    main(*(int(a) for a in sys.argv[1:3]))
