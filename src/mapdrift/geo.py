"""Reading the polygon layer: CRS checks, reprojection for mapping, geometry repair.

A layer without a CRS whose coordinates fit longitude/latitude ranges is taken as EPSG:4326 with
a warning; otherwise the user must pass ``--crs``. Coordinates that contradict the CRS (metres
labelled as degrees, or latitude beyond +/-90) stop the run with a hint. A geographic layer is
reprojected to a Lambert azimuthal equal-area projection centred on the data so that areas,
distances and the scale bar are true; ``--map-crs`` overrides.
"""

from __future__ import annotations

from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np

from mapdrift.cells import need_pyarrow
from mapdrift.errors import InputError
from mapdrift.findings import Finding, examples

if TYPE_CHECKING:
    import geopandas as gpd

__all__ = [
    "GEOMETRY_SUFFIXES",
    "central_longitude",
    "equal_area_crs",
    "prepare_geometry",
    "read_layer",
]

GEOMETRY_SUFFIXES = (
    ".gpkg",
    ".geojson",
    ".json",
    ".shp",
    ".fgb",
    ".parquet",
    ".geoparquet",
    ".zip",
)


def read_layer(path: Path, layer: str | None) -> gpd.GeoDataFrame:
    """Read a polygon layer with pyogrio (GeoParquet with pyarrow); clear errors for the usual mistakes."""
    import geopandas as gpd

    if not path.exists():
        raise InputError(f"{path}: geometry file not found; check the path")
    suffix = path.suffix.lower()
    if suffix not in GEOMETRY_SUFFIXES and not path.is_dir():
        raise InputError(
            f"{path}: not a polygon layer we can read (suffix {suffix!r}); use GeoPackage, GeoJSON, "
            "Shapefile, FlatGeobuf or GeoParquet"
        )
    if suffix == ".shp":
        _check_shapefile_parts(path)
    try:
        if suffix in (".parquet", ".geoparquet"):
            need_pyarrow(path)
            gdf = gpd.read_parquet(path)
        else:
            if suffix == ".gpkg" and layer is None:
                import pyogrio

                layers = [row[0] for row in pyogrio.list_layers(path)]
                if len(layers) > 1:
                    raise InputError(
                        f"{path}: the GeoPackage has {len(layers)} layers ({examples(layers)}); "
                        "choose one with --layer"
                    )
            gdf = gpd.read_file(path, layer=layer, engine="pyogrio")
    except InputError:
        raise
    except Exception as exc:  # pyogrio/pyarrow raise many types; keep the message, lose the trace
        msg = str(exc).splitlines()[0] if str(exc) else type(exc).__name__
        if layer is not None and "layer" in msg.lower():
            import pyogrio

            try:
                layers = [row[0] for row in pyogrio.list_layers(path)]
            except Exception:
                layers = []
            raise InputError(f"{path}: no layer {layer!r}; layers are {examples(layers)}") from None
        raise InputError(f"{path}: cannot read the layer ({msg})") from None
    if len(gdf) == 0:
        raise InputError(f"{path}: the layer has no features")
    return gdf


def _check_shapefile_parts(path: Path) -> None:
    """A Shapefile is several files; without its ``.dbf`` it has no columns (no IDs), without
    its ``.shx`` GDAL may refuse it. Say which part is missing instead of an empty column list."""
    present = {p.suffix.lower() for p in path.parent.glob(f"{path.stem}.*")}
    missing = [s for s in (".dbf", ".shx") if s not in present]
    if missing:
        parts = ", ".join(path.stem + s for s in missing)
        raise InputError(
            f"{path}: the Shapefile's {parts} {'is' if len(missing) == 1 else 'are'} missing "
            "(a Shapefile is several files: .shp, .shx, .dbf, .prj, holding the columns and the "
            "index); copy all of them beside the .shp, or use a GeoPackage"
        )


def _fits_lonlat(bounds: np.ndarray) -> bool:
    minx, miny, maxx, maxy = bounds
    return minx >= -180.0 and maxx <= 360.0 and miny >= -90.0 and maxy <= 90.0


def central_longitude(lons: np.ndarray) -> float:
    """Middle of the shortest arc of longitude holding every value in ``lons`` (degrees).

    Layers crossing the 180th meridian (Fiji, the Aleutians; or one polygon running from 179
    to -179) have extents of nearly 360 degrees in -180..180 terms, which would centre the map
    at longitude 0 and stretch it; the largest empty gap around the circle marks the arc's ends.
    """
    lons = np.sort(np.mod(np.asarray(lons, dtype=np.float64), 360.0))
    if len(lons) == 0:
        return 0.0
    gaps = np.diff(np.concatenate([lons, [lons[0] + 360.0]]))
    k = int(np.argmax(gaps))  # the arc starts after the largest gap
    start = lons[(k + 1) % len(lons)]
    width = 360.0 - gaps[k]
    centre = (start + width / 2.0) % 360.0
    return float(centre - 360.0 if centre >= 180.0 else centre)


def equal_area_crs(gdf_lonlat: gpd.GeoDataFrame) -> str:
    """Lambert azimuthal equal-area centred on the layer's extent (PROJ string, metres); the
    centre longitude is taken around the circle (:func:`central_longitude`)."""
    _, miny, _, maxy = gdf_lonlat.total_bounds
    b = gdf_lonlat.geometry.bounds.dropna()
    lon0 = central_longitude(np.concatenate([b["minx"].to_numpy(), b["maxx"].to_numpy()]))
    lat0 = (miny + maxy) / 2.0
    return f"+proj=laea +lat_0={lat0:.6f} +lon_0={lon0:.6f} +x_0=0 +y_0=0 +datum=WGS84 +units=m +no_defs"


def _repair(
    gdf: gpd.GeoDataFrame, ids: list[str], path: Path
) -> tuple[gpd.GeoDataFrame, list[Finding]]:
    import shapely

    findings: list[Finding] = []
    geom = gdf.geometry.values
    missing = np.asarray(gdf.geometry.isna())
    empty = missing | np.asarray(shapely.is_empty(geom))
    invalid = ~empty & ~np.asarray(shapely.is_valid(geom))
    if invalid.any():
        fixed = shapely.make_valid(geom[invalid])
        # make_valid can return collections with lines/points: keep the polygonal part
        fixed = np.array([_polygonal(g) for g in fixed], dtype=object)
        geom = geom.copy()
        geom[invalid] = fixed
        gdf = gdf.set_geometry(geom)
        bad = [ids[i] for i in np.flatnonzero(invalid)]
        findings.append(
            Finding(
                "warning",
                "geometry-repaired",
                f"{path.name}: {len(bad)} invalid polygons were repaired with make_valid "
                f"(e.g. {examples(bad)})",
                tuple(bad),
            )
        )
    kinds = gdf.geometry.geom_type.fillna("")
    non_poly = ~empty & ~kinds.isin(["Polygon", "MultiPolygon", "GeometryCollection"]).to_numpy()
    if non_poly.any():
        bad = [ids[i] for i in np.flatnonzero(non_poly)]
        raise InputError(
            f"{path}: {len(bad)} features are not polygons (e.g. {examples(bad)}, "
            f"{kinds[non_poly].iloc[0]}); mapdrift maps polygon layers"
        )
    findings += _degenerate(gdf.geometry.values, empty, ids, path)
    if empty.any():
        bad = [ids[i] for i in np.flatnonzero(empty)]
        findings.append(
            Finding(
                "warning",
                "geometry-empty",
                f"{path.name}: {len(bad)} units have no geometry (e.g. {examples(bad)}); they are kept "
                "in the tables but cannot be drawn",
                tuple(bad),
            )
        )
    return gdf, findings


def _degenerate(geom: np.ndarray, empty: np.ndarray, ids: list[str], path: Path) -> list[Finding]:
    """Polygons with zero area (nothing to draw, no neighbours by area) and units whose
    polygons are identical (often a duplicated record or a copy-paste in the layer)."""
    import shapely

    findings: list[Finding] = []
    drawn = ~empty
    zero = drawn & (np.asarray(shapely.area(geom), dtype=np.float64) <= 0.0)
    if zero.any():
        bad = [ids[i] for i in np.flatnonzero(zero)]
        findings.append(
            Finding(
                "warning",
                "geometry-zero-area",
                f"{path.name}: {len(bad)} polygons have zero area (e.g. {examples(bad)}); they "
                "cannot be seen on the map; check the layer",
                tuple(bad),
            )
        )
    idx = np.flatnonzero(drawn & ~zero)
    if len(idx) > 1:
        # identical polygons share their bounds and vertex count whatever their vertex order:
        # only units sharing both are compared exactly (normalised WKB), not all 240,000
        g = np.asarray(geom[idx], dtype=object)
        cheap = np.column_stack([shapely.bounds(g), shapely.get_num_coordinates(g)])
        _, inverse, counts = np.unique(cheap, axis=0, return_inverse=True, return_counts=True)
        idx = idx[counts[inverse.ravel()] > 1]
    if len(idx) > 1:
        import pandas as pd

        keys = pd.Series(shapely.to_wkb(shapely.normalize(geom[idx]), output_dimension=2))
        dup = keys.duplicated(keep=False).to_numpy()
        if dup.any():
            groups = pd.Series(np.asarray(ids, dtype=object)[idx[dup]]).groupby(
                keys[dup].to_numpy()
            )
            pairs = [" = ".join(map(str, g)) for _, g in groups]
            units = tuple(str(u) for u in np.asarray(ids, dtype=object)[idx[dup]])
            findings.append(
                Finding(
                    "warning",
                    "geometry-duplicate",
                    f"{path.name}: {len(units)} units share identical polygons with another unit "
                    f"({examples(pairs, 3)}); one of each may be a duplicate record; they are "
                    "drawn on top of each other and count as neighbours",
                    units,
                )
            )
    return findings


def _polygonal(g: object) -> object:
    import shapely
    from shapely.geometry import MultiPolygon, Polygon

    if isinstance(g, Polygon | MultiPolygon):
        return g
    parts = [p for p in getattr(g, "geoms", []) if isinstance(p, Polygon | MultiPolygon)]
    if not parts:
        return shapely.Polygon()
    return shapely.union_all(parts)


def prepare_geometry(
    gdf: gpd.GeoDataFrame,
    ids: list[str],
    path: Path,
    *,
    crs: str | None,
    map_crs: str | None,
) -> tuple[gpd.GeoDataFrame, list[Finding]]:
    """Check and set the CRS, repair geometries, and reproject for mapping."""
    from pyproj import CRS
    from pyproj.exceptions import CRSError

    findings: list[Finding] = []
    valid_geom = gdf[~gdf.geometry.isna() & ~gdf.geometry.is_empty]
    if len(valid_geom) == 0:
        raise InputError(f"{path}: every feature has an empty geometry")
    bounds = valid_geom.total_bounds
    if crs is not None:
        try:
            user = CRS.from_user_input(crs)
        except CRSError:
            raise InputError(
                f"--crs {crs!r} is not a CRS we know; use e.g. EPSG:4326 or EPSG:26915"
            ) from None
        if gdf.crs is not None and CRS(gdf.crs) != user:
            findings.append(
                Finding(
                    "warning",
                    "crs-overridden",
                    f"{path.name}: the file says {CRS(gdf.crs).to_string()} but --crs {crs} was given; "
                    "using --crs",
                )
            )
        gdf = gdf.set_crs(user, allow_override=True)
    elif gdf.crs is None:
        if _fits_lonlat(bounds):
            gdf = gdf.set_crs("EPSG:4326")
            findings.append(
                Finding(
                    "warning",
                    "crs-assumed",
                    f"{path.name}: the layer has no CRS; its coordinates fit longitude/latitude "
                    "ranges, so EPSG:4326 was assumed; pass --crs if that is wrong",
                )
            )
        else:
            minx, miny, maxx, maxy = bounds
            raise InputError(
                f"{path}: the layer has no CRS and its coordinates ({minx:.0f} {miny:.0f}) to "
                f"({maxx:.0f} {maxy:.0f}) are not longitude/latitude; pass --crs, e.g. --crs EPSG:26915"
            )
    src = CRS(gdf.crs)
    if src.is_geographic:
        minx, miny, maxx, maxy = bounds
        if not _fits_lonlat(bounds):
            if minx >= -90 and maxx <= 90 and (miny < -90 or maxy > 90):
                raise InputError(
                    f"{path}: latitudes run from {miny:.1f} to {maxy:.1f}, outside +/-90; the axes look "
                    "swapped (latitude, longitude); write the file as longitude, latitude"
                )
            raise InputError(
                f"{path}: the CRS is geographic ({src.to_string()}) but the coordinates "
                f"({minx:.0f} {miny:.0f}) look like metres or feet; pass the true CRS with --crs"
            )
    elif _fits_lonlat(bounds) and (bounds[2] - bounds[0]) < 10 and (bounds[3] - bounds[1]) < 10:
        findings.append(
            Finding(
                "warning",
                "crs-suspect",
                f"{path.name}: the CRS is projected ({src.to_string()}) but the layer spans under 10 "
                "units; the coordinates may be degrees; pass --crs EPSG:4326 if so",
            )
        )
    gdf, repair = _repair(gdf, ids, path)
    findings += repair
    if map_crs is not None:
        try:
            target = CRS.from_user_input(map_crs)
        except CRSError:
            raise InputError(
                f"--map-crs {map_crs!r} is not a CRS we know; use e.g. EPSG:3035"
            ) from None
        if target.is_geographic:
            raise InputError(f"--map-crs {map_crs}: choose a projected CRS (metres) for mapping")
        gdf = gdf.to_crs(target)
        findings.append(Finding("note", "crs-map", f"mapped in {target.to_string()} (--map-crs)"))
    elif src.is_geographic:
        target_s = equal_area_crs(gdf.to_crs("EPSG:4326"))
        gdf = gdf.to_crs(target_s)
        findings.append(
            Finding(
                "note",
                "crs-reprojected",
                f"{path.name}: geographic coordinates ({src.to_string()}) were reprojected to a Lambert "
                "azimuthal equal-area projection centred on the data, so areas and distances are true",
            )
        )
    return gdf, findings
