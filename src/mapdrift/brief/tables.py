"""The units table (one row per unit, every per-unit result joined) as CSV and GeoPackage.

CSVs are written with :func:`mapdrift.outputs.write_csv` (formula injection defused).
"""

from __future__ import annotations

from collections.abc import Iterator, Mapping
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

__all__ = ["units_table", "write_units_gpkg"]


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


def write_units_gpkg(
    df: pd.DataFrame, geometry: gpd.GeoSeries, path: Path, *, layer: str = "units"
) -> Path:
    """The units table with geometry as a GeoPackage layer (written atomically)."""
    import geopandas as gpd

    # nullable integers as floats (GDAL has no nullable int here), converted in one pass
    plain = df.reset_index(drop=True).astype(
        {c: "float64" for c in df.columns if str(df[c].dtype) == "Int64"}
    )
    gdf = gpd.GeoDataFrame(plain, geometry=geometry.reset_index(drop=True))
    with atomic_path(path) as tmp, _fixed_gdal_date():
        tmp.unlink()  # GDAL wants to create the file itself
        gdf.to_file(tmp, layer=layer, driver="GPKG", engine="pyogrio")
    return path


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
