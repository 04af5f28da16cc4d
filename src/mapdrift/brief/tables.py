"""Tables for spreadsheets and GIS: CSV with formula-injection defused, and the units layer.

A text cell that starts with ``=``, ``+``, ``-``, ``@``, a tab or a carriage return is prefixed
with ``'`` so a spreadsheet shows it as text instead of running it (OWASP's advice on CSV
injection). Numbers are left alone, so negative values stay numbers.
"""

from __future__ import annotations

from collections.abc import Mapping
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np

from mapdrift.atomic import atomic_path

if TYPE_CHECKING:
    import geopandas as gpd
    import pandas as pd

    from mapdrift.breaks import Classes
    from mapdrift.panel import Panel

__all__ = ["defuse", "units_table", "write_csv", "write_units_gpkg"]

_TRIGGERS = ("=", "+", "-", "@", "\t", "\r")


def defuse(value: Any) -> Any:
    """``'=HYPERLINK("x")'`` -> ``"'=HYPERLINK(\\"x\\")"``; numbers and safe text unchanged."""
    if isinstance(value, str) and value.startswith(_TRIGGERS):
        return "'" + value
    return value


def write_csv(df: pd.DataFrame, path: Path, *, float_format: str = "%.6g") -> Path:
    """Write ``df`` atomically as UTF-8 CSV with text cells defused; byte-stable for equal input."""
    out = df.copy()
    for col in out.columns:
        if out[col].dtype == object or str(out[col].dtype) in ("string", "str"):
            out[col] = out[col].map(defuse)
    out.columns = [defuse(str(c)) for c in out.columns]
    with atomic_path(path) as tmp:
        out.to_csv(tmp, index=False, float_format=float_format, lineterminator="\n")
    return path


def units_table(
    panel: Panel, classes: Classes, extra: Mapping[str, Any] | None = None
) -> pd.DataFrame:
    """One row per unit: id, name, value and class per period, then ``extra`` columns.

    Class columns are 1-based (``class_2019`` = 1 is the lowest class); no data is empty.
    ``extra`` maps column names to per-unit arrays (jumps, flags, cluster labels, trend...).
    """
    import pandas as pd

    data: dict[str, Any] = {"unit_id": list(panel.units), "name": list(panel.names)}
    for j, label in enumerate(panel.period_labels):
        data[f"value_{label}"] = panel.values[:, j]
    for j, label in enumerate(panel.period_labels):
        c = classes.codes[:, j].astype(np.float64) + 1
        c[classes.codes[:, j] < 0] = np.nan
        data[f"class_{label}"] = pd.array(c, dtype="Int64")
    df = pd.DataFrame(data)
    for name, col in (extra or {}).items():
        df[name] = list(col) if not isinstance(col, pd.Series) else col.to_numpy()
    return df


def write_units_gpkg(df: pd.DataFrame, geometry: gpd.GeoSeries, path: Path, *, layer: str = "units") -> Path:
    """The units table with geometry as a GeoPackage layer (written atomically)."""
    import geopandas as gpd

    gdf = gpd.GeoDataFrame(df.reset_index(drop=True), geometry=geometry.reset_index(drop=True))
    for col in gdf.columns:
        if str(gdf[col].dtype) == "Int64":
            gdf[col] = gdf[col].astype("float64")
    with atomic_path(path) as tmp:
        tmp.unlink()  # GDAL wants to create the file itself
        gdf.to_file(tmp, layer=layer, driver="GPKG", engine="pyogrio")
    return path
