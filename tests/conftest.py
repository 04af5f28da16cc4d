"""Shared fixtures: a CLI runner, and tiny layers/tables written to tmp files.

The synthetic layers here are test scaffolding (a grid of squares), not reference data; every
numeric expectation in the tests names its outside source.
"""

from __future__ import annotations

import os
from pathlib import Path

os.environ.setdefault("MPLBACKEND", "Agg")

import pytest

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "demo_data"


@pytest.fixture
def runner():
    from typer.testing import CliRunner

    return CliRunner()


@pytest.fixture(scope="session")
def demo_run(tmp_path_factory):
    """One whole run of the demo config (every step and format), shared by every test that
    reads a run's outputs: a run costs about 15 s, so the suite makes this one only once."""
    from mapdrift.config import load_config
    from mapdrift.pipeline import run

    return run(load_config(DEMO / "demo.toml"), out=tmp_path_factory.mktemp("runs") / "2024")


@pytest.fixture(autouse=True)
def _close_figures():
    yield
    import sys

    if "matplotlib.pyplot" in sys.modules:
        sys.modules["matplotlib.pyplot"].close("all")


def grid_layer(
    n_side: int = 4,
    *,
    size: float = 1000.0,
    crs: str | None = "EPSG:3857",
    ids=None,
    x0=0.0,
    y0=0.0,
):
    """An n x n grid of square polygons (metres unless ``crs`` is geographic)."""
    import geopandas as gpd
    from shapely.geometry import box

    geoms, names = [], []
    for r in range(n_side):
        for c in range(n_side):
            geoms.append(
                box(x0 + c * size, y0 + r * size, x0 + (c + 1) * size, y0 + (r + 1) * size)
            )
            names.append(f"cell {r}-{c}")
    ids = ids if ids is not None else [f"{i + 1:05d}" for i in range(n_side * n_side)]
    return gpd.GeoDataFrame({"unit_id": ids, "name": names}, geometry=geoms, crs=crs)


@pytest.fixture
def layer_file(tmp_path):
    """Write a grid layer to a GeoPackage and return its path (kwargs go to grid_layer)."""

    def make(name: str = "units.gpkg", **kw):
        gdf = kw.pop("gdf", None)
        gdf = gdf if gdf is not None else grid_layer(**kw)
        path = tmp_path / name
        gdf.to_file(path, driver="GPKG" if path.suffix == ".gpkg" else None)
        return path

    return make


@pytest.fixture
def table_file(tmp_path):
    """Write rows (list of dicts or a CSV string) to a CSV and return its path."""

    def make(rows, name: str = "values.csv"):
        path = tmp_path / name
        if isinstance(rows, str):
            path.write_text(rows, encoding="utf-8")
        else:
            import pandas as pd

            pd.DataFrame(rows).to_csv(path, index=False)
        return path

    return make


def long_rows(ids, years, value=lambda i, y: float(i + (y - 2000))):
    return [
        {"unit_id": u, "year": y, "rate": value(i, y)} for i, u in enumerate(ids) for y in years
    ]
