"""Benchmark of loading from files: ``load_panel`` against a plain geopandas + pandas read.

Writes (once, into ``--dir``) a GeoPackage of an n x n grid of square tracts with 11-digit IDs
and a long CSV of counts (``unit_id,year,filings,parcels``) with a few suppressed cells
(``(D)``), blanks and IDs that lost their leading zero, then times:

- the floor: ``geopandas.read_file`` of the layer + ``pandas.read_csv`` of the table (C engine),
  nothing else;
- ``mapdrift.panel.load_panel`` of the same files (rates from counts, every check on).

It prints both times and their ratio (target: loading within 3x of the floor). Timings on a
shared machine are noisy: run it more than once (``--repeat``) and read the spread.

Run: ``python benchmarks/bench_load.py [--units 50176] [--periods 20] [--repeat 1]``.
"""

from __future__ import annotations

import argparse
import math
import time
from pathlib import Path

import numpy as np


def write_files(folder: Path, n_units: int, n_periods: int) -> tuple[Path, Path]:
    """The layer and long table for ``n_units`` (rounded up to a square grid) x ``n_periods``."""
    import geopandas as gpd
    import pandas as pd
    import shapely

    side = math.isqrt(n_units - 1) + 1 if n_units > 1 else 1
    n = side * side
    folder.mkdir(parents=True, exist_ok=True)
    layer = folder / f"tracts_{n}.gpkg"
    table = folder / f"filings_{n}x{n_periods}.csv"
    ids = np.array([f"{17031000000 + i * 7:011d}" for i in range(n)], dtype=object)
    ids = np.array(["0" + s[1:] for s in ids], dtype=object)  # leading zero, like FIPS codes
    if not layer.exists():
        r, c = np.divmod(np.arange(n), side)
        geoms = shapely.box(c * 500.0, r * 500.0, c * 500.0 + 500.0, r * 500.0 + 500.0)
        gdf = gpd.GeoDataFrame(
            {"unit_id": ids, "name": [f"tract {i}" for i in range(n)]},
            geometry=geoms,
            crs="EPSG:26916",
        )
        gdf.to_file(layer, driver="GPKG")
    if not table.exists():
        rng = np.random.default_rng(11)
        years = np.arange(2005, 2005 + n_periods)
        parcels = rng.integers(200, 3000, size=(n, 1)) * np.ones((1, n_periods), dtype=np.int64)
        filings = rng.poisson(parcels * 0.01).astype(object)
        filings[rng.random(filings.shape) < 0.01] = "(D)"  # suppressed cells
        filings[rng.random(filings.shape) < 0.005] = ""  # blanks
        uid = np.repeat(ids, n_periods)
        lost = np.repeat(rng.random(n) < 0.05, n_periods)  # lost leading zeros (a spreadsheet)
        uid[lost] = [s.lstrip("0") for s in uid[lost]]
        pd.DataFrame(
            {
                "unit_id": uid,
                "year": np.tile(years, n),
                "filings": filings.ravel(),
                "parcels": parcels.ravel(),
            }
        ).to_csv(table, index=False)
    return layer, table


def floor(layer: Path, table: Path) -> float:
    """Seconds for the plain read: geopandas.read_file + pandas.read_csv."""
    import geopandas as gpd
    import pandas as pd

    t0 = time.perf_counter()
    gpd.read_file(layer)
    pd.read_csv(table)
    return time.perf_counter() - t0


def ours(layer: Path, table: Path) -> tuple[float, object]:
    from mapdrift.panel import InputSpec, load_panel

    spec = InputSpec(
        geometry=layer,
        table=table,
        id="unit_id",
        period="year",
        numerator="filings",
        denominator="parcels",
    )
    t0 = time.perf_counter()
    panel = load_panel(spec)
    return time.perf_counter() - t0, panel


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--units", type=int, default=50_176)
    ap.add_argument("--periods", type=int, default=20)
    ap.add_argument("--repeat", type=int, default=1)
    ap.add_argument("--dir", type=Path, default=Path("/tmp/mapdrift-bench-load"))
    ap.add_argument("--skip-floor", action="store_true")
    a = ap.parse_args()
    layer, table = write_files(a.dir, a.units, a.periods)
    import geopandas  # noqa: F401  (imports are not part of either timing)
    import pandas  # noqa: F401

    import mapdrift._loader  # noqa: F401

    for i in range(a.repeat):
        base = float("nan") if a.skip_floor else floor(layer, table)
        t, panel = ours(layer, table)
        print(
            f"run {i + 1}: {panel.n_units:,} units x {panel.n_periods} periods: "
            f"plain read {base:7.2f} s   load_panel {t:7.2f} s   ratio {t / base:5.2f}x (target <= 3x)"
        )
        for f in panel.findings:
            print(f"   {f.level:7s} {f.code}: {f.message[:110]}")


if __name__ == "__main__":
    main()
