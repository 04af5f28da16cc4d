"""One categorical map (change map, flagged units, trends, clusters) as PNG, PDF or SVG.

PNG goes through the raster path (:class:`~mapdrift.render.frames.FrameRenderer` with one
period and no timeline); PDF and SVG are drawn as vectors with matplotlib on exactly the same
layout, so the two look alike. Codes are one category per unit, ``-1`` = no data (drawn with the
hatched no-data swatch); ``colours`` has one hex per category.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from pathlib import Path
from typing import Any

import numpy as np

from mapdrift.atomic import atomic_path
from mapdrift.errors import ConfigError, OutputExistsError
from mapdrift.palettes import NODATA, NODATA_HATCH
from mapdrift.render import furniture as fur
from mapdrift.render import layout as lay

__all__ = ["add_vector_map", "static_map", "unit_paths"]

VECTOR_SUFFIXES = (".pdf", ".svg")


def unit_paths(geoms: Any, to_xy: Callable[[np.ndarray], np.ndarray]) -> list[Any]:
    """One matplotlib compound Path per unit (holes included), vertices mapped by ``to_xy``.

    ``to_xy`` takes map coordinates ``[m, 2]`` and returns drawing coordinates ``[m, 2]``.
    Empty geometries give an empty path.
    """
    import shapely
    from matplotlib.path import Path as MPath

    geoms = np.asarray(getattr(geoms, "values", geoms), dtype=object)
    n = len(geoms)
    parts, part_of = shapely.get_parts(geoms, return_index=True)
    rings, ring_part = shapely.get_rings(parts, return_index=True)
    empty = MPath(np.zeros((0, 2)))
    if len(rings) == 0:
        return [empty] * n
    coords, ring_of = shapely.get_coordinates(rings, return_index=True)
    xy = to_xy(coords)
    codes = np.full(len(coords), MPath.LINETO, dtype=np.uint8)
    starts = np.r_[0, np.flatnonzero(np.diff(ring_of)) + 1]
    ends = np.r_[starts[1:], len(coords)] - 1
    codes[starts] = MPath.MOVETO
    codes[ends] = MPath.CLOSEPOLY
    unit_of_ring = part_of[ring_part]
    unit_of_coord = unit_of_ring[ring_of]
    order = np.argsort(unit_of_coord, kind="stable")
    xy, codes, unit_of_coord = xy[order], codes[order], unit_of_coord[order]
    bounds = np.searchsorted(unit_of_coord, np.arange(n + 1))
    return [
        MPath(xy[bounds[i] : bounds[i + 1]], codes[bounds[i] : bounds[i + 1]])
        if bounds[i + 1] > bounds[i]
        else empty
        for i in range(n)
    ]


def add_vector_map(
    ax: Any,
    paths: Sequence[Any],
    codes: np.ndarray,
    colours: Sequence[str],
    *,
    linewidth: float = 0.4,
    outline_units: Sequence[int] | None = None,
    outline_width: float = 1.6,
    transform: Any = None,
    boundary: str = lay.BOUNDARY,
) -> None:
    """Draw units as vector polygons: class colour by code, hatched no-data grey for ``-1``.

    Outlines are a dark line on a light halo, so they show on every class colour.

    ``transform`` (a matplotlib transform) places the paths; default: the axes' data units.
    """
    from matplotlib.collections import PathCollection

    place = {"transform": transform} if transform is not None else {}
    codes = np.asarray(codes)
    have = np.flatnonzero(codes >= 0)
    none = np.flatnonzero(codes < 0)
    if have.size:
        ax.add_collection(
            PathCollection(
                [paths[i] for i in have],
                facecolors=[colours[int(codes[i])] for i in have],
                edgecolors=boundary,
                linewidths=linewidth,
                **place,
            )
        )
    if none.size:
        ax.add_collection(
            PathCollection(
                [paths[i] for i in none],
                facecolors=NODATA,
                edgecolors=boundary,
                hatch="////",
                hatchcolor=NODATA_HATCH,
                linewidths=linewidth,
                **place,
            )
        )
    if outline_units is not None and len(outline_units):
        for colour, width in ((lay.HALO, outline_width + 2.6), (lay.OUTLINE, outline_width)):
            ax.add_collection(
                PathCollection(
                    [paths[int(i)] for i in outline_units],
                    facecolors="none",
                    edgecolors=colour,
                    linewidths=width,
                    **place,
                )
            )


def static_map(
    geometry: Any,
    codes: np.ndarray,
    colours: Sequence[str],
    labels: Sequence[str],
    path: Path | str,
    *,
    text: lay.MapText | None = None,
    counts: bool = True,
    outline_units: Sequence[int] | None = None,
    size: tuple[int, int] = (1280, 720),
    names: Sequence[str] | None = None,
    north_arrow: bool = False,
    scale_units: str = "km",
    min_unit_px: float = 3.0,
    marks: Sequence[str | None] | None = None,
    mark_colours: Sequence[str] | None = None,
    boundary: str | None = None,
    force: bool = False,
    **words: Any,
) -> Path:
    """Write one categorical map to ``path`` (.png raster; .pdf/.svg vector) and return the path.

    ``codes`` has one category per unit (``-1`` = no data); the legend lists every category
    with its count. ``text`` (:class:`~mapdrift.render.layout.MapText`) holds the words; its
    fields may also be given as keywords (``title="..."``). ``outline_units`` (unit indices)
    are outlined (dark line on a light halo) and named in a callout when ``names`` is given.
    ``marks``/``mark_colours`` draw the units of some classes as marks (see
    :class:`~mapdrift.render.frames.FrameRenderer`). Raises OutputExistsError if ``path``
    exists and not ``force``.
    """
    from mapdrift.render.frames import FrameRenderer

    path = Path(path)
    suffix = path.suffix.lower()
    if suffix not in (".png", *VECTOR_SUFFIXES):
        raise ConfigError(
            f"{path}: static maps are written as .png, .pdf or .svg, not {suffix or 'no suffix'}"
        )
    if path.exists() and not force:
        raise OutputExistsError(f"{path} exists; pass --force to overwrite it")
    codes = np.asarray(codes).reshape(-1, 1)
    outlines = [list(outline_units)] if outline_units is not None else None
    if outlines is not None and not (text and text.outline_label) and "outline_label" not in words:
        words["outline_label"] = "outlined"
    r = FrameRenderer(
        geometry,
        codes,
        colours,
        labels,
        [""],
        text=text,
        outlines=outlines,
        names=names,
        size=size,
        counts=counts,
        timeline=False,
        north_arrow=north_arrow,
        scale_units=scale_units,
        min_unit_px=min_unit_px,
        show_period=False,
        marks=marks,
        mark_colours=mark_colours,
        boundary=boundary,
        **words,
    )
    try:
        if suffix == ".png":
            from mapdrift.pngwrite import write_png

            return write_png(r.frame(0), path)
        _vector(r, geometry, path, outline_units)
    finally:
        r.close()
    return path


def _vector(r: Any, geometry: Any, path: Path, outline_units: Sequence[int] | None) -> None:
    L = r.layout
    tr = L.transform
    fig, ax = lay.new_figure(L, transparent=False)

    def to_xy(c: np.ndarray) -> np.ndarray:
        x, y = tr.to_pixels(c[:, 0], c[:, 1])
        return np.column_stack([x + tr.left, y + tr.top])

    paths = unit_paths(geometry, to_xy)
    width = r._boundary_width() or 0.0  # same boundary weight as the raster
    add_vector_map(
        ax,
        paths,
        r.codes[:, 0],
        r.colours,
        linewidth=width,
        outline_units=outline_units,
        outline_width=fur.outline_widths(L)[1],
        boundary=r.chrome.boundary,
    )
    fur.draw_static(ax, L, r.chrome, nodata_hatch=True)
    dyn = fur.DynamicArtists(ax, L, r.chrome)
    counts, nodata = r.class_counts(0)
    call = (
        [r.names[int(u)] for u in outline_units] if (r.names and outline_units is not None) else []
    )
    dyn.outlines.set_visible(False)  # outlines are drawn as vector paths above
    dyn.halo.set_visible(False)
    marks = []
    if r.chrome.marks:
        from mapdrift.render.frames import _mark_points

        xy = _mark_points(np.asarray(getattr(geometry, "values", geometry), dtype=object), tr)
        for i, kind in enumerate(r.chrome.marks):
            if kind:
                marks.append((kind, r.chrome.mark_colours[i], xy[r.codes[:, 0] == i]))
    dyn.update(0, counts, nodata, callouts=call, n_outlined=len(call), marks=marks)
    with atomic_path(path) as tmp:
        fig.savefig(tmp, format=path.suffix.lower().lstrip("."), dpi=72)
    fig.clear()
