"""units.gpkg past SQLite's 2,000-column limit: the per-period columns go to a long table.

The limit is SQLite's documented default SQLITE_MAX_COLUMN = 2000 (sqlite.org/limits.html);
the table here is our own synthetic one (700 periods x 3 per-period columns).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pyogrio
import pytest

from conftest import grid_layer
from mapdrift.brief.tables import write_units_gpkg


def _wide(n_units: int, labels: list[str]) -> pd.DataFrame:
    rng = np.random.default_rng(0)
    data: dict = {"unit": [f"{i:05d}" for i in range(n_units)], "name": ["x"] * n_units}
    values = rng.random((n_units, len(labels)))
    for j, p in enumerate(labels):
        data[f"value_{p}"] = values[:, j]
    for j, p in enumerate(labels):
        data[f"class_{p}"] = pd.array((values[:, j] * 5).astype(int) + 1, dtype="Int64")
    for j, p in enumerate(labels):
        data[f"cluster_{p}"] = ["high-high" if v > 0.9 else "not significant" for v in values[:, j]]
    data["trend_slope"] = values.mean(axis=1)
    return pd.DataFrame(data)


def test_wide_table_over_the_limit_is_written_long(tmp_path):
    labels = [str(1300 + i) for i in range(700)]
    df = _wide(9, labels)
    geom = grid_layer(3).geometry
    assert write_units_gpkg(df, geom, tmp_path / "units.gpkg", period_labels=labels) is True
    layers = dict(pyogrio.list_layers(tmp_path / "units.gpkg"))
    assert set(layers) == {"units", "units_by_period"}
    wide = pyogrio.read_dataframe(tmp_path / "units.gpkg", layer="units")
    assert list(wide.columns) == ["unit", "name", "trend_slope", "geometry"]
    long = pyogrio.read_dataframe(tmp_path / "units.gpkg", layer="units_by_period")
    assert len(long) == 9 * 700 and list(long.columns) == [
        "unit",
        "period",
        "value",
        "class",
        "cluster",
    ]
    back = long.pivot(index="unit", columns="period", values="value")[labels]
    assert np.array_equal(back.to_numpy(), df[[f"value_{p}" for p in labels]].to_numpy())
    row = long[(long.unit == "00004") & (long.period == "1350")].iloc[0]
    assert row["class"] == df.loc[4, "class_1350"] and row["cluster"] == df.loc[4, "cluster_1350"]


def test_small_table_stays_one_layer(tmp_path):
    labels = ["2019", "2020"]
    assert write_units_gpkg(_wide(9, labels), grid_layer(3).geometry, tmp_path / "u.gpkg") is False
    assert [n for n, _ in pyogrio.list_layers(tmp_path / "u.gpkg")] == ["units"]


def test_over_the_limit_without_periods_is_a_clear_error(tmp_path):
    labels = [str(i) for i in range(700)]
    with pytest.raises(ValueError, match="SQLite's limit of 2000"):
        write_units_gpkg(_wide(9, labels), grid_layer(3).geometry, tmp_path / "u.gpkg")
