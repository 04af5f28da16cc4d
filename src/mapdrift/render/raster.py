"""The label raster: which unit each pixel shows, computed once per map and size.

Polygons are filled by a vectorised even-odd scanline fill (numpy only, no per-polygon Python
loop) on a grid supersampled ``ss`` times in each direction. A pixel whose ``ss x ss``
sub-samples all hit one unit is *pure* (it stores that unit's index); the others are *mixed*
and keep their sub-sample labels, so a frame can average the sub-sample colours and get
antialiased fill edges. A frame is then ``colours_of_unit[label]``: its cost depends on the
pixel count, never on the number of polygons.

Conventions: pixel ``(row, col)`` covers ``[col, col+1) x [row, row+1)`` of the map box and is
sampled at its centre; ``-1`` means outside every polygon. Holes and multipolygons are handled
by the even-odd rule over all rings of a unit; where (invalid) polygons overlap, the later unit
wins.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

import numpy as np

from mapdrift.errors import InputError
from mapdrift.findings import Finding, examples

if TYPE_CHECKING:
    import geopandas as gpd

__all__ = ["LabelRaster", "MapTransform", "fit_transform", "metres_per_unit", "scanline_fill"]

_CHUNK = 4_000_000  # pixels painted per numpy batch (bounds temporary memory)


@dataclass(frozen=True)
class MapTransform:
    """Map CRS -> pixels of a map box: ``col = (x - x0) / res``, ``row = (y1 - y) / res``.

    ``width`` x ``height`` is the box in pixels, ``left``/``top`` its offset in the frame,
    ``res`` map units per pixel (same in x and y: the map is never stretched).
    """

    x0: float
    y1: float
    res: float
    width: int
    height: int
    left: int = 0
    top: int = 0

    @property
    def extent(self) -> tuple[float, float, float, float]:
        """``(xmin, xmax, ymin, ymax)`` of the box in map units."""
        return (
            self.x0,
            self.x0 + self.width * self.res,
            self.y1 - self.height * self.res,
            self.y1,
        )

    def to_pixels(self, x: np.ndarray, y: np.ndarray, ss: int = 1) -> tuple[np.ndarray, np.ndarray]:
        """Map coordinates -> fractional (col, row) in the box, on an ``ss``-times finer grid."""
        return (np.asarray(x) - self.x0) * (ss / self.res), (self.y1 - np.asarray(y)) * (
            ss / self.res
        )


def fit_transform(
    bounds: tuple[float, float, float, float],
    width: int,
    height: int,
    *,
    left: int = 0,
    top: int = 0,
    pad: float = 0.015,
) -> MapTransform:
    """The largest scale at which ``bounds`` (xmin, ymin, xmax, ymax) fit the box, centred."""
    xmin, ymin, xmax, ymax = (float(b) for b in bounds)
    dx, dy = max(xmax - xmin, 1e-9), max(ymax - ymin, 1e-9)
    res = max(dx / width, dy / height) * (1.0 + 2 * pad)
    cx, cy = (xmin + xmax) / 2, (ymin + ymax) / 2
    return MapTransform(
        x0=cx - width * res / 2,
        y1=cy + height * res / 2,
        res=res,
        width=int(width),
        height=int(height),
        left=int(left),
        top=int(top),
    )


def metres_per_unit(crs: Any) -> float:
    """Length of one map unit in metres; InputError for a geographic or missing CRS."""
    if crs is None:
        raise InputError(
            "the geometry has no CRS, so the scale bar cannot be true; set one (e.g. --crs "
            "EPSG:26915) or --map-crs"
        )
    from pyproj import CRS

    crs = CRS.from_user_input(crs)
    if crs.is_geographic:
        raise InputError(
            f"the geometry is in a geographic CRS ({crs.to_string()}); project it first "
            "(e.g. --map-crs EPSG:3857 or a local projected CRS) so that areas and the scale bar "
            "are true"
        )
    return float(crs.axis_info[0].unit_conversion_factor)


def scanline_fill(geoms: Any, transform: MapTransform, ss: int = 1) -> np.ndarray:
    """Label image ``[height*ss, width*ss]`` int32: index of the unit at each sample, -1 outside."""
    import shapely

    h, w = transform.height * ss, transform.width * ss
    out = np.full(h * w, -1, dtype=np.int32)
    geoms = np.asarray(geoms, dtype=object)
    parts, part_of = shapely.get_parts(geoms, return_index=True)
    rings, ring_part = shapely.get_rings(parts, return_index=True)
    if len(rings) == 0:
        return out.reshape(h, w)
    coords, ring_of = shapely.get_coordinates(rings, return_index=True)
    unit_of_ring = part_of[ring_part]
    px, py = transform.to_pixels(coords[:, 0], coords[:, 1], ss)
    same = ring_of[:-1] == ring_of[1:]
    xa, ya, xb, yb = px[:-1][same], py[:-1][same], px[1:][same], py[1:][same]
    unit = unit_of_ring[ring_of[:-1][same]]
    # canonical direction (lower y first) so a shared edge gives bit-identical crossings
    flip = ya > yb
    xa, xb = np.where(flip, xb, xa), np.where(flip, xa, xb)
    ya, yb = np.where(flip, yb, ya), np.where(flip, ya, yb)
    # scanline at row centre r + 0.5 crosses the edge when ya <= r + 0.5 < yb
    r0 = np.clip(np.ceil(ya - 0.5), 0, h).astype(np.int64)
    r1 = np.clip(np.ceil(yb - 0.5), 0, h).astype(np.int64)
    n = r1 - r0
    keep = n > 0
    xa, ya, xb, yb, unit, r0, n = (
        xa[keep],
        ya[keep],
        xb[keep],
        yb[keep],
        unit[keep],
        r0[keep],
        n[keep],
    )
    if n.size == 0:
        return out.reshape(h, w)
    slope = (xb - xa) / (yb - ya)
    edge = np.repeat(np.arange(n.size), n)
    start = np.cumsum(n) - n
    rows = r0[edge] + (np.arange(edge.size) - start[edge])
    xs = xa[edge] + (rows + 0.5 - ya[edge]) * slope[edge]
    units = unit[edge]
    order = np.lexsort((xs, rows, units))
    rows, xs, units = rows[order], xs[order], units[order]
    key = units.astype(np.int64) * h + rows
    # pair crossings within each (unit, row) run: 1st-2nd, 3rd-4th, ...
    run_start = np.flatnonzero(np.r_[True, key[1:] != key[:-1]])
    run_id = np.cumsum(np.r_[True, key[1:] != key[:-1]]) - 1
    pos = np.arange(key.size) - run_start[run_id]
    first = np.flatnonzero((pos % 2 == 0)[:-1] & (key[1:] == key[:-1]))
    c0 = np.clip(np.ceil(xs[first] - 0.5), 0, w).astype(np.int64)
    c1 = np.clip(np.ceil(xs[first + 1] - 0.5), 0, w).astype(np.int64)
    span_rows, span_units = rows[first], units[first]
    length = c1 - c0
    ok = length > 0
    c0, length, span_rows, span_units = c0[ok], length[ok], span_rows[ok], span_units[ok]
    # paint in batches of spans (later spans win where polygons overlap)
    csum = np.cumsum(length)
    lo = 0
    while lo < length.size:
        base = csum[lo - 1] if lo else 0
        hi = int(np.searchsorted(csum, base + _CHUNK, side="right"))
        hi = max(hi, lo + 1)
        ln = length[lo:hi]
        sel = np.repeat(np.arange(lo, hi), ln)
        offs = np.arange(sel.size) - np.repeat(np.cumsum(ln) - ln, ln)
        out[span_rows[sel] * w + c0[sel] + offs] = span_units[sel]
        lo = hi
    return out.reshape(h, w)


#: Rings mark a few tiny units among larger ones; when dots are more than this share of the
#: units (a nation of tracts at slide size) rings would cover the map, so they are left out.
RING_MAX_SHARE = 0.05


def rings_shown(n_dots: int, n_units: int) -> bool:
    """Whether tiny units drawn as dots also get a ring (only while they are few)."""
    return 0 < n_dots <= RING_MAX_SHARE * max(n_units, 1)


@dataclass(eq=False)
class LabelRaster:
    """Unit index per pixel of a map box, with sub-pixel detail for antialiased edges.

    ``label`` [height, width] int32: the unit of a pure pixel, -1 outside, and for a mixed pixel
    its most frequent sub-sample. ``mixed`` (flat pixel indices) lists the mixed pixels;
    ``mixed_a``/``mixed_b`` their two most frequent sub-sample labels and ``mixed_w`` the weight
    of ``a`` in 0..256 (a third unit at a triple junction is folded into the other two). ``area_px`` is each unit's drawn area in pixels (a
    unit with 0 has vanished at this size). ``dots`` lists units drawn as dots (``min_unit_px``).
    """

    transform: MapTransform
    ss: int
    label: np.ndarray
    mixed: np.ndarray
    mixed_a: np.ndarray
    mixed_b: np.ndarray
    mixed_w: np.ndarray
    area_px: np.ndarray
    dots: np.ndarray
    dot_centres: np.ndarray
    findings: tuple[Finding, ...] = ()

    @classmethod
    def build(
        cls,
        geometry: gpd.GeoSeries | Any,
        transform: MapTransform,
        *,
        ss: int = 3,
        min_unit_px: float = 0.0,
        unit_ids: Any = None,
        size_text: str = "",
        cache: bool = True,
    ) -> LabelRaster:
        """Rasterise ``geometry`` (map CRS, order = unit order) into ``transform``'s box.

        Units drawn smaller than one pixel become a finding; with ``min_unit_px`` > 0 every unit
        drawn smaller than a ``min_unit_px`` square is stamped as a disc of that diameter at its
        representative point, so it keeps its class colour.

        With ``cache`` (the default) the raster is kept for the same ``geometry`` object and
        box (its size, extent and resolution; the box's place on the frame does not matter),
        so the animation, the poster and the static maps of one run rasterise once. The
        geometry must not be changed in place between calls (a Panel's never is).
        """
        key = (id(geometry), transform.x0, transform.y1, transform.res, transform.width,
               transform.height, int(ss), float(min_unit_px))  # fmt: skip
        core = _CACHE.get(key, geometry) if cache else None
        if core is None:
            core = _rasterise(geometry, transform, ss, min_unit_px)
            if cache:
                _CACHE.put(key, geometry, core)
        fields, small, gone = core
        n = len(fields["area_px"])
        ids = list(unit_ids) if unit_ids is not None else [str(i) for i in range(n)]
        findings: list[Finding] = []
        if small.size:
            fix = (
                f"they are drawn as {min_unit_px:g}-pixel dots"
                if min_unit_px > 0
                else "to draw them as dots pass `mapdrift animate --min-unit-px 3` (or a larger "
                "--size), or for `mapdrift run` set [animate] min_unit_px = 3"
            )
            findings.append(
                Finding(
                    "warning" if min_unit_px <= 0 else "note",
                    "units-below-pixel",
                    f"{small.size} units are smaller than one pixel at {size_text or 'this size'}"
                    + (f" ({gone} vanish entirely)" if gone else "")
                    + f" (e.g. {examples([ids[i] for i in small], 4)}); {fix}",
                    tuple(ids[i] for i in small),
                )
            )
        tiny = np.setdiff1d(fields["dots"], small)
        if tiny.size:
            findings.append(
                Finding(
                    "note",
                    "units-drawn-as-dots",
                    f"{tiny.size:,} units are under {min_unit_px:g} pixels across at "
                    f"{size_text or 'this size'} (e.g. {examples([ids[i] for i in tiny], 4)}); "
                    f"they are drawn as {min_unit_px:g}-pixel dots"
                    + (
                        " with a ring so they stay visible"
                        if rings_shown(len(fields["dots"]), n)
                        else " (no rings: at this size they are most of the map; a larger "
                        "--size shows them as areas)"
                    ),
                    tuple(ids[i] for i in tiny),
                )
            )
        return cls(transform=transform, ss=ss, findings=tuple(findings), **fields)

    def colourise(self, unit_rgb: np.ndarray, outside: Any) -> np.ndarray:
        """RGB image ``[height, width, 3]`` uint8 from a colour per unit ``[n_units, 3]`` uint8.

        Mixed pixels blend their two units' colours (``outside`` for the part outside every
        unit) by area, which antialiases the fill edges. Cost: O(pixels), not O(units).
        """
        img = self.colourise_packed(unit_rgb, outside)
        rgba = img.view(np.uint8).reshape(self.transform.height, self.transform.width, 4)
        return rgba[..., :3]

    def colourise_packed(self, unit_rgb: np.ndarray, outside: Any) -> np.ndarray:
        """As :meth:`colourise`, as flat little-endian uint32 pixels ``R | G << 8 | B << 16``."""
        lut = np.zeros((unit_rgb.shape[0] + 1, 4), dtype=np.uint8)
        lut[0, :3] = outside
        lut[1:, :3] = unit_rgb
        lut32 = lut.view("<u4").ravel()
        img = np.take(lut32, self.label.ravel() + 1)
        if self.mixed.size:
            ca = np.take(lut32, self.mixed_a + 1).view(np.uint8).reshape(-1, 4).astype(np.uint16)
            cb = np.take(lut32, self.mixed_b + 1).view(np.uint8).reshape(-1, 4).astype(np.uint16)
            w = self.mixed_w[:, None]
            mix = ((ca * w + cb * (256 - w) + 128) >> 8).astype(np.uint8)
            img[self.mixed] = mix.view("<u4").ravel()
        return img


def _two_labels(sub: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Most and second most frequent label per row and the first one's weight in 0..256."""
    if sub.shape[0] == 0:
        z = np.zeros(0, dtype=np.int32)
        return z, z, np.zeros(0, dtype=np.uint16)
    counts = (sub[:, :, None] == sub[:, None, :]).sum(axis=2)
    ia = np.argmax(counts, axis=1)
    rows = np.arange(sub.shape[0])
    a = sub[rows, ia]
    na = counts[rows, ia]
    other = np.where(sub != a[:, None], counts, -1)
    ib = np.argmax(other, axis=1)
    b = np.where(other[rows, ib] > 0, sub[rows, ib], a)
    nb = np.where(other[rows, ib] > 0, other[rows, ib], 0)
    # weight of a among a and b, the rest shared in proportion
    w = np.where(nb > 0, np.round(256.0 * na / (na + nb)), 256).astype(np.uint16)
    return a.astype(np.int32), b.astype(np.int32), w


def _stamp_discs(
    fine: np.ndarray, cx: np.ndarray, cy: np.ndarray, radius: float, units: np.ndarray
) -> None:
    """Paint discs of ``radius`` (fine pixels) centred at (cx, cy) with each unit's index."""
    h, w = fine.shape
    r = int(math.ceil(radius))
    dy, dx = np.mgrid[-r : r + 1, -r : r + 1]
    inside = (dx + 0.5) ** 2 + (dy + 0.5) ** 2 <= radius**2
    dx, dy = dx[inside], dy[inside]
    cols = np.floor(cx).astype(np.int64)[:, None] + dx[None, :]
    rows = np.floor(cy).astype(np.int64)[:, None] + dy[None, :]
    ok = (cols >= 0) & (cols < w) & (rows >= 0) & (rows < h)
    vals = np.broadcast_to(units[:, None], cols.shape)
    fine[rows[ok], cols[ok]] = vals[ok]


def _rasterise(
    geometry: Any, transform: MapTransform, ss: int, min_unit_px: float
) -> tuple[dict[str, np.ndarray], np.ndarray, int]:
    """The arrays of a :class:`LabelRaster`, the sub-pixel units and how many vanish."""
    import shapely

    geoms = np.asarray(getattr(geometry, "values", geometry), dtype=object)
    n = len(geoms)
    fine = scanline_fill(geoms, transform, ss)
    counts = np.bincount(fine.ravel() + 1, minlength=n + 1)[1:]
    area_px = counts / float(ss * ss)
    empty = shapely.is_empty(geoms) | shapely.is_missing(geoms)
    small = np.flatnonzero((area_px < 1.0) & ~empty)
    dots = np.zeros(0, dtype=np.int64)
    centres = np.zeros((0, 2))
    if min_unit_px > 0:
        dots = np.flatnonzero((area_px < min_unit_px**2) & ~empty)
    if dots.size:
        pts = shapely.point_on_surface(geoms[dots])
        xy = shapely.get_coordinates(pts)
        cx, cy = transform.to_pixels(xy[:, 0], xy[:, 1], ss)
        centres = np.column_stack(transform.to_pixels(xy[:, 0], xy[:, 1], 1))
        _stamp_discs(fine, cx, cy, min_unit_px * ss / 2.0, dots)
        counts = np.bincount(fine.ravel() + 1, minlength=n + 1)[1:]
        area_px = counts / float(ss * ss)
    gone = int((counts[small] == 0).sum()) if not dots.size else 0
    hh, ww = transform.height, transform.width
    sub = fine.reshape(hh, ss, ww, ss).transpose(0, 2, 1, 3).reshape(hh * ww, ss * ss)
    first = sub[:, 0]
    pure = (sub == first[:, None]).all(axis=1)
    mixed = np.flatnonzero(~pure)
    a, b, wa = _two_labels(sub[mixed])
    label = first.copy()
    label[mixed] = a
    fields = {
        "label": label.reshape(hh, ww),
        "mixed": mixed,
        "mixed_a": a,
        "mixed_b": b,
        "mixed_w": wa,
        "area_px": area_px,
        "dots": dots,
        "dot_centres": centres,
    }
    for v in fields.values():
        v.setflags(write=False)  # shared between renderers through the cache
    return fields, small, gone


class ObjectCache:
    """A small least-recently-used cache keyed by a tuple that starts with ``id(owner)``.

    The entry keeps a reference to ``owner`` and is returned only for that very object, so
    an id reused by a new object after the old one was freed can never hit.
    """

    def __init__(self, size: int = 4) -> None:
        from collections import OrderedDict

        self.size = size
        self._d: OrderedDict[tuple[Any, ...], tuple[Any, Any]] = OrderedDict()

    def get(self, key: tuple[Any, ...], owner: Any) -> Any:
        hit = self._d.get(key)
        if hit is None or hit[0] is not owner:
            return None
        self._d.move_to_end(key)
        return hit[1]

    def put(self, key: tuple[Any, ...], owner: Any, value: Any) -> None:
        self._d[key] = (owner, value)
        self._d.move_to_end(key)
        while len(self._d) > self.size:
            self._d.popitem(last=False)

    def clear(self) -> None:
        self._d.clear()


_CACHE = ObjectCache(4)
