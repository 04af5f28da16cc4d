"""The units table (one row per unit, every per-unit result joined) as CSV and GeoPackage.

CSVs are written with :func:`mapdrift.outputs.write_csv` (formula injection defused).
"""

from __future__ import annotations

from collections.abc import Iterator, Mapping, Sequence
from contextlib import contextmanager
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np

from mapdrift.atomic import atomic_path

if TYPE_CHECKING:
    import geopandas as gpd
    import pandas as pd

    from mapdrift.breaks import Classes
    from mapdrift.panel import Panel

__all__ = ["SQLITE_MAX_COLUMNS", "split_per_period", "units_table", "write_units_gpkg"]


def units_table(
    panel: Panel, classes: Classes, extra: Mapping[str, Any] | None = None
) -> pd.DataFrame:
    """One row per unit: ``unit`` (ID), name, value and class per period, then ``extra`` columns.

    Class columns are 1-based (``class_2019`` = 1 is the lowest class); no data is empty.
    ``extra`` maps column names to per-unit arrays (jumps, flags, cluster labels, trend...).
    """
    import pandas as pd

    data: dict[str, Any] = {"unit": list(panel.units), "name": list(panel.names)}
    for j, label in enumerate(panel.period_labels):
        data[f"value_{label}"] = panel.values[:, j]
    for j, label in enumerate(panel.period_labels):
        c = classes.codes[:, j].astype(np.float64) + 1
        c[classes.codes[:, j] < 0] = np.nan
        data[f"class_{label}"] = pd.array(c, dtype="Int64")
    for name, col in (extra or {}).items():
        if isinstance(col, pd.Series):
            data[name] = col.to_numpy()
        elif isinstance(col, np.ndarray):
            data[name] = col  # keeps its dtype (a list would make an object column)
        else:
            data[name] = list(col)
    return pd.DataFrame(data)  # built in one go: no column-by-column inserts


#: SQLite's default limit of columns per table; a GeoPackage layer adds fid and geometry.
SQLITE_MAX_COLUMNS = 2000


def split_per_period(
    df: pd.DataFrame, period_labels: Sequence[str]
) -> tuple[pd.DataFrame, pd.DataFrame]:
    """``df`` without its per-period columns (``value_2019``, ``class_2019``, ``cluster_2019``
    ...), and those columns as a long table: ``unit``, ``period``, ``value``, ``class``, ..."""
    import pandas as pd

    labels = list(period_labels)
    wanted = set(labels)
    kinds: dict[str, list[str]] = {}
    for col in df.columns:
        head, sep, tail = str(col).partition("_")
        if sep and tail in wanted:
            kinds.setdefault(head, []).append(col)
    kinds = {k: v for k, v in kinds.items() if [c.partition("_")[2] for c in v] == labels}
    per_period = [c for cols in kinds.values() for c in cols]
    n_u, n_p = len(df), len(labels)
    long = pd.DataFrame(
        {
            "unit": np.repeat(df["unit"].to_numpy(dtype=object), n_p),
            "period": np.tile(np.asarray(labels, dtype=object), n_u),
        }
    )
    for kind, cols in kinds.items():
        block = df[cols]
        if any(str(t) == "Int64" for t in block.dtypes):
            block = block.astype("float64")
        long[kind] = block.to_numpy().reshape(-1)
    return df.drop(columns=per_period), long


def write_units_gpkg(
    df: pd.DataFrame,
    geometry: gpd.GeoSeries,
    path: Path,
    *,
    layer: str = "units",
    period_labels: Sequence[str] | None = None,
) -> bool:
    """The units table with geometry as a GeoPackage layer (written atomically).

    When the table has more columns than SQLite allows (:data:`SQLITE_MAX_COLUMNS`, e.g. 1,000
    periods), the per-period columns go to a second, non-spatial table ``<layer>_by_period``
    (one row per unit and period) and True is returned; that needs ``period_labels``.
    """
    import geopandas as gpd
    import pyogrio

    long = None
    if len(df.columns) + 2 > SQLITE_MAX_COLUMNS:
        if period_labels is None:
            raise ValueError(
                f"{path}: {len(df.columns)} columns exceed SQLite's limit of "
                f"{SQLITE_MAX_COLUMNS}; pass period_labels to write the per-period columns long"
            )
        df, long = split_per_period(df, period_labels)
    # nullable integers as floats (GDAL has no nullable int here), converted in one pass
    plain = df.reset_index(drop=True).astype(
        {c: "float64" for c in df.columns if str(df[c].dtype) == "Int64"}
    )
    gdf = gpd.GeoDataFrame(plain, geometry=geometry.reset_index(drop=True))
    with atomic_path(path) as tmp, _fixed_gdal_date():
        tmp.unlink()  # GDAL wants to create the file itself
        gdf.to_file(tmp, layer=layer, driver="GPKG", engine="pyogrio")
        if long is not None:
            pyogrio.write_dataframe(long, tmp, layer=f"{layer}_by_period", driver="GPKG")
    return long is not None


@contextmanager
def _fixed_gdal_date() -> Iterator[None]:
    """GDAL stamps a GeoPackage's ``last_change`` with the clock unless ``OGR_CURRENT_DATE``
    is set: set it to :data:`mapdrift.outputs.FIXED_TIME` while writing (reruns identical)."""
    import pyogrio

    from mapdrift.outputs import FIXED_TIME

    before = pyogrio.get_gdal_config_option("OGR_CURRENT_DATE")
    pyogrio.set_gdal_config_options({"OGR_CURRENT_DATE": FIXED_TIME})
    try:
        yield
    finally:
        pyogrio.set_gdal_config_options({"OGR_CURRENT_DATE": before})
