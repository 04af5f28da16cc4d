"""Frames of an animated choropleth: rasterise once, draw the furniture once, composite per period.

:class:`FrameRenderer` prepares, once per animation: the label raster (unit per pixel, with
sub-pixel edge detail), the static furniture as an antialiased RGBA overlay (title, legend
swatches and ranges, boundaries, scale bar, timeline rule, caption, notice), the no-data hatching
pattern, and one transparent matplotlib figure holding the few per-period artists, which are
drawn once per distinct text as small sprites (:mod:`mapdrift.render.sprites`). A frame is then
``colour_of_class[code_of_unit[label]]`` plus alpha composites over the pixels the overlay and the
sprites touch: its cost depends on the pixel count only, not on the number of polygons.

Frames are computed as packed ``uint32`` pixels (bytes R, G, B, unused: ``R | G << 8 | B << 16``)
so that gathers move one word per pixel; :meth:`FrameRenderer.frame` unpacks to ``[H, W, 3]``
and the GIF encoder indexes the packed frames directly (:meth:`FrameRenderer.packed_frame`).

Codes: ``codes[:, j]`` is each unit's category in period ``j`` (0..k-1), ``-1`` = no data, drawn
as the hatched no-data swatch. Colours are by category index, never by which categories happen
to be present, so every frame shares one legend.
"""

from __future__ import annotations

import functools
import logging
from collections.abc import Iterator, Sequence
from typing import Any

import numpy as np

from mapdrift.colour import hex_to_rgb8
from mapdrift.errors import ConfigError
from mapdrift.findings import Finding
from mapdrift.palettes import CLUSTER_BLANK, NODATA, NODATA_HATCH
from mapdrift.render import furniture as fur
from mapdrift.render import layout as lay
from mapdrift.render.pixels import hatch_alpha, pack_rgb, unpack_rgb
from mapdrift.render.raster import LabelRaster, ObjectCache, metres_per_unit, rings_shown
from mapdrift.render.sprites import SpriteCache, composite

__all__ = ["FrameRenderer", "pack_rgb", "render_frames", "unit_rings_px", "unpack_rgb"]

log = logging.getLogger(__name__)

#: Units drawn smaller than this many pixels are not outlined (see ``_dynamic_sprites``).
OUTLINE_MIN_PX = 30.0

_RINGS = ObjectCache(4)  # unit rings in frame pixels, per (geometry, map box)
_STATIC = ObjectCache(6)  # base frame, overlay, hatch, dynamic figure and sprites, per map


def unit_rings_px(geoms: Any, transform: Any) -> tuple[list[np.ndarray], np.ndarray]:
    """Every ring of every unit as an ``[m, 2]`` array of frame pixel coordinates, and its unit."""
    import shapely

    geoms = np.asarray(geoms, dtype=object)
    parts, part_of = shapely.get_parts(geoms, return_index=True)
    rings, ring_part = shapely.get_rings(parts, return_index=True)
    if len(rings) == 0:
        return [], np.zeros(0, dtype=np.int64)
    coords, ring_of = shapely.get_coordinates(rings, return_index=True)
    cx, cy = transform.to_pixels(coords[:, 0], coords[:, 1])
    xy = np.column_stack([cx + transform.left, cy + transform.top])
    cuts = np.flatnonzero(np.diff(ring_of)) + 1
    return np.split(xy, cuts), part_of[ring_part]


@functools.lru_cache(maxsize=4)
def _hatch(h: int, w: int, spacing: float, width: float) -> np.ndarray:
    """The no-data hatching alpha of a frame size (read-only, shared)."""
    a = hatch_alpha(h, w, spacing=spacing, width=width)
    a.setflags(write=False)
    return a


def _rgba(fig: Any) -> np.ndarray:
    fig.canvas.draw()
    return np.asarray(fig.canvas.buffer_rgba())


class FrameRenderer:
    """Renders the frames of one animation; every frame has the same layout, extent and legend.

    ``geometry`` is a GeoSeries (or a sequence of shapely polygons with ``crs`` given) in a
    projected CRS; ``codes`` is ``[n_units, n_periods]`` int (-1 = no data); ``colours`` one hex
    per category; ``labels`` the legend text per category (or one tuple per period when breaks
    differ by period). ``text`` (a :class:`~mapdrift.render.layout.MapText`) holds every word
    besides the labels; its fields may also be given as keywords (``title="..."``).
    ``outlines`` optionally gives, per period, unit indices to outline (with their ``names``
    listed as callouts); ``units`` are the IDs named in findings. ``min_unit_px`` draws units
    smaller than that many pixels across as dots (and counts them in a finding). ``marks``
    draws the units of some classes as a mark (``"up"``, ``"down"``, ``"ring"``; colours in
    ``mark_colours``) on their fill; ``boundary`` colours the lines between units.
    ``findings`` reports vanishing units and similar.
    """

    def __init__(
        self,
        geometry: Any,
        codes: np.ndarray,
        colours: Sequence[str],
        labels: Sequence[str] | Sequence[Sequence[str]],
        period_labels: Sequence[str],
        *,
        text: lay.MapText | None = None,
        outlines: Sequence[Sequence[int]] | None = None,
        names: Sequence[str] | None = None,
        units: Sequence[str] | None = None,
        size: tuple[int, int] = (1280, 720),
        counts: bool = True,
        timeline: bool = True,
        north_arrow: bool = False,
        scale_units: str = "km",
        min_unit_px: float = 3.0,
        supersample: int = 2,
        crs: Any = None,
        show_period: bool = True,
        marks: Sequence[str | None] | None = None,
        mark_colours: Sequence[str] | None = None,
        boundary: str | None = None,
        **words: Any,
    ) -> None:
        codes = np.asarray(codes)
        if codes.ndim == 1:
            codes = codes[:, None]
        n_units, n_periods = codes.shape
        if len(geometry) != n_units:
            raise ConfigError(
                f"codes have {n_units} units but the geometry has {len(geometry)} polygons"
            )
        if len(period_labels) != n_periods:
            raise ConfigError(
                f"codes have {n_periods} periods but {len(period_labels)} period labels were given"
            )
        k = len(colours)
        if codes.size and int(codes.max(initial=-1)) >= k:
            raise ConfigError(f"codes go up to {int(codes.max())} but only {k} colours were given")
        if outlines is not None and len(outlines) != n_periods:
            raise ConfigError(
                f"outlines need one list of units per period ({n_periods}), got {len(outlines)}"
            )
        w, h = int(size[0]), int(size[1])
        if w < 200 or h < 150:
            raise ConfigError(
                f"frame size {w}x{h} is too small; use at least 200x150 (e.g. --size 1280x720)"
            )
        labels_t = _labels_per_period(labels, k, n_periods)
        self.codes = codes.astype(np.int16)
        self.colours = tuple(colours)
        text = _map_text(text, words, outlines is not None)
        valid = self.codes
        shares = tuple(
            tuple(
                np.bincount(np.where(valid[:, j] >= 0, valid[:, j], k), minlength=k + 1)
                / max(n_units, 1)
            )
            for j in range(n_periods)
        )
        # classes left blank on the map (e.g. "not significant") are left out of the strip,
        # whose bars then fill at a round share just above the tallest period
        strip_skip = tuple(
            i
            for i, c in enumerate(self.colours)
            if c == CLUSTER_BLANK and not (marks is not None and i < len(marks) and marks[i])
        )
        strip_full = 1.0
        if strip_skip and shares:
            keep = [i for i in range(k) if i not in strip_skip]
            top = max(sum(sh[i] for i in keep) for sh in shares)
            strip_full = _round_up_share(top)
        self.chrome = lay.Chrome(
            colours=self.colours,
            labels=labels_t,
            period_labels=tuple(str(p) for p in period_labels),
            text=text,
            counts=counts,
            timeline=timeline,
            north_arrow=north_arrow,
            scale_units=scale_units,
            callouts=names is not None,
            show_period=show_period,
            marks=tuple(marks) if marks is not None else (),
            mark_colours=tuple(mark_colours) if mark_colours is not None else (),
            shares=shares if timeline else (),
            strip_skip=strip_skip,
            strip_full=strip_full,
            boundary=boundary or lay.BOUNDARY,
        )
        self.outlines = outlines
        self.names = tuple(names) if names is not None else None
        geoms = np.asarray(getattr(geometry, "values", geometry), dtype=object)
        crs = crs if crs is not None else getattr(geometry, "crs", None)
        self.metres_per_unit = metres_per_unit(crs)
        import shapely

        bounds = tuple(shapely.total_bounds(geoms))
        if not np.all(np.isfinite(bounds)):
            raise ConfigError("the geometry is empty; nothing to map")
        self.layout = lay.plan((w, h), self.chrome, bounds, self.metres_per_unit)
        tr = self.layout.transform
        ids = [
            str(u)
            for u in (
                units if units is not None else names if names is not None else range(n_units)
            )
        ]
        self.raster = LabelRaster.build(
            geometry,
            tr,
            ss=supersample,
            min_unit_px=min_unit_px,
            unit_ids=ids,
            size_text=f"{w}x{h}",
        )
        self.findings: tuple[Finding, ...] = self.raster.findings
        self._min_unit_px = float(min_unit_px)
        self._class_rgb = np.array(
            [hex_to_rgb8(c) for c in self.colours] + [hex_to_rgb8(NODATA)], dtype=np.uint8
        )
        self._paper = np.array(hex_to_rgb8(lay.PAPER), dtype=np.uint8)
        # what depends only on (geometry, layout, texts) is prepared once and shared by every
        # renderer of the same map: the animation's GIF and MP4 and the poster of one run
        rings_key = (id(geometry), repr(tr))
        rings = _RINGS.get(rings_key, geometry)
        if rings is None:
            rings = unit_rings_px(geoms, tr)
            _RINGS.put(rings_key, geometry, rings)
        self._rings, self._ring_unit = rings
        self._ring_start = np.searchsorted(self._ring_unit, np.arange(n_units + 1))
        self._ring_sorted = bool(np.all(np.diff(self._ring_unit) >= 0))
        self._mark_xy = _mark_points(geoms, tr) if self.chrome.marks else None
        static_key = (id(geometry), repr(self.layout), repr(self.chrome), self._min_unit_px,
                      int(supersample), n_units)  # fmt: skip
        static = _STATIC.get(static_key, geometry)
        if static is None:
            static = self._prepare_static()
            fig, ax = lay.new_figure(self.layout, transparent=True)
            static["dynamic"] = (fig, fur.DynamicArtists(ax, self.layout, self.chrome))
            static["sprites"] = SpriteCache(fig)
            _STATIC.put(static_key, geometry, static)
        for name, value in static.items():
            if name not in ("dynamic", "sprites"):
                setattr(self, name, value)
        self._fig, self._dyn = static["dynamic"]
        self._sprites = static["sprites"]

    # -- preparation -----------------------------------------------------------------------
    def _boundary_width(self) -> float | None:
        area = self.raster.area_px[self.raster.area_px > 0]
        med = float(np.median(area)) if area.size else 0.0
        if med < 12:
            return None  # boundaries would drown the colours; the fill edges are antialiased
        return float(np.clip(0.06 * np.sqrt(med), 0.25, 0.8) * max(self.layout.s, 0.6))

    def _visible_rings(self) -> list[np.ndarray]:
        # rings under 2 px across are noise at this size (and would cover the dots of tiny units)
        if not self._rings:
            return []
        xy = np.concatenate(self._rings)
        starts = np.r_[0, np.cumsum([len(r) for r in self._rings])[:-1]]
        span = np.maximum.reduceat(xy, starts) - np.minimum.reduceat(xy, starts)
        keep = np.flatnonzero(span.max(axis=1) >= 2.0)
        return [self._rings[i] for i in keep]

    def _prepare_static(self) -> dict[str, Any]:
        """The base frame (paper, furniture) and the overlay and hatch pixels of the map box."""
        L, tr = self.layout, self.layout.transform
        fig, ax = lay.new_figure(L, transparent=True)
        bw = self._boundary_width()
        fur.draw_static(
            ax,
            L,
            self.chrome,
            boundaries=self._visible_rings() if bw else None,
            boundary_width=bw or 0.0,
            nodata_hatch=False,
            dots=self.raster.dot_centres
            if rings_shown(len(self.raster.dot_centres), len(self.raster.area_px))
            else None,
            dot_px=self._min_unit_px,
        )
        over8 = np.array(_rgba(fig))  # uint8 [H, W, 4]; float work only where it is drawn
        fig.clear()
        _paint_edge(over8, self.raster.label, tr)
        hatch = _hatch(L.height, L.width, max(6.0 * L.s, 4.0), max(1.3 * L.s, 1.0))
        # base frame: paper, the no-data swatch hatched exactly as on the map, furniture on top
        base = np.empty((L.height, L.width, 3), dtype=np.float32)
        base[:] = self._paper / 255.0
        x, y, sw, sh = (int(round(v)) for v in lay.swatch_box(L, lay.nodata_row(self.chrome)))
        nod = np.array(hex_to_rgb8(NODATA), np.float32) / 255.0
        hat = np.array(hex_to_rgb8(NODATA_HATCH), np.float32) / 255.0
        a = hatch[y : y + sh, x : x + sw, None]
        base[y : y + sh, x : x + sw] = nod * (1 - a) + hat * a
        flat8 = over8.reshape(-1, 4)
        touched = np.flatnonzero(flat8[:, 3])
        a_t = flat8[touched, 3:4].astype(np.float32) / 255.0
        c_t = flat8[touched, :3].astype(np.float32) / 255.0
        bflat = base.reshape(-1, 3)
        bflat[touched] = bflat[touched] * (1 - a_t) + c_t * a_t
        swatch = np.zeros((L.height, L.width), dtype=bool)
        swatch[y : y + sh, x : x + sw] = True
        work = np.union1d(touched, np.flatnonzero(swatch))
        out: dict[str, Any] = {}
        base8 = np.empty((L.height, L.width, 3), dtype=np.uint8)
        base8[:] = self._paper  # = round(paper / 255 * 255) where nothing is drawn
        base8.reshape(-1, 3)[work] = np.round(bflat[work] * 255).astype(np.uint8)
        out["_base"] = base8
        out["_base_packed"] = pack_rgb(base8)
        # over the map box: only pixels the overlay touches are composited per frame
        sl = (slice(tr.top, tr.top + tr.height), slice(tr.left, tr.left + tr.width))
        box8 = over8[sl].reshape(-1, 4)
        out["_ov_idx"] = np.flatnonzero(box8[:, 3])
        a_sel = box8[out["_ov_idx"], 3:4].astype(np.float32) / 255.0
        c_sel = box8[out["_ov_idx"], :3].astype(np.float32) / 255.0
        # integer compositing: out = (px * (256 - a) + c * a) >> 8, a and c * a in 1/256 steps
        # (a fourth, zero channel so the packed pixels are blended as whole words)
        out["_ov_a"] = np.round(a_sel * 256).astype(np.uint16)
        ov_c = np.zeros((len(out["_ov_idx"]), 4), dtype=np.uint16)
        ov_c[:, :3] = np.round(c_sel * a_sel * 255 * 256).astype(np.uint16)
        out["_ov_c"] = ov_c
        h_map = hatch[sl].ravel()
        hatch_idx = np.flatnonzero(h_map > 0)
        hatch_a = h_map[hatch_idx, None]
        hatch_rgb = np.round((nod * (1 - hatch_a) + hat * hatch_a) * 255.0).astype(np.uint8)
        # hatch pixels grouped by the unit they show, so a frame finds its no-data units' pixels
        # by slicing instead of testing every hatch pixel
        lab = self.raster.label.ravel()[hatch_idx]
        order = np.argsort(lab, kind="stable")
        out["_hatch_idx"] = hatch_idx[order]
        out["_hatch_packed"] = pack_rgb(hatch_rgb[order])
        out["_hatch_start"] = np.searchsorted(lab[order], np.arange(len(self.codes) + 1))
        out["_map_slice"] = sl
        return out

    # -- frames ------------------------------------------------------------------------------
    @property
    def n_frames(self) -> int:
        return self.codes.shape[1]

    @property
    def size(self) -> tuple[int, int]:
        return self.layout.width, self.layout.height

    @property
    def exact_colours(self) -> list[str]:
        """Colours that must survive encoding unchanged (classes, no data, furniture)."""
        return [
            *self.colours,
            NODATA,
            NODATA_HATCH,
            lay.PAPER,
            lay.TEXT,
            lay.MUTED,
            lay.FAINT,
            lay.RULE,
            lay.BOUNDARY,
            lay.OUTLINE,
            lay.HALO,
            lay.COAST,
            self.chrome.boundary,
            *self.chrome.mark_colours,
            lay.NOTICE_FG,
            lay.NOTICE_BG,
        ]

    def class_counts(self, j: int) -> tuple[np.ndarray, int]:
        """Units per category in period ``j`` (length k) and the no-data count."""
        c = self.codes[:, j]
        return np.bincount(c[c >= 0], minlength=len(self.colours)), int((c < 0).sum())

    def map_image(self, j: int) -> np.ndarray:
        """The map box of period ``j`` (fill, hatching, boundaries), ``[h, w, 3]`` uint8."""
        tr = self.layout.transform
        return unpack_rgb(self._map_packed(j).reshape(tr.height, tr.width))

    def _map_packed(self, j: int) -> np.ndarray:
        """The map box of period ``j`` as flat packed uint32 pixels (see the module docstring)."""
        c = self.codes[:, j].astype(np.int64)
        nod = c < 0
        unit_rgb = self._class_rgb[np.where(nod, len(self.colours), c)]
        flat = self.raster.colourise_packed(unit_rgb, self._paper)
        if nod.any() and self._hatch_idx.size:
            units = np.flatnonzero(nod)
            lo, hi = self._hatch_start[units], self._hatch_start[units + 1]
            n = hi - lo
            if n.sum():
                sel = np.repeat(lo - (np.cumsum(n) - n), n) + np.arange(int(n.sum()))
                flat[self._hatch_idx[sel]] = self._hatch_packed[sel]
        if self._ov_idx.size:
            px = flat[self._ov_idx].view(np.uint8).reshape(-1, 4).astype(np.uint16)
            mixed = ((px * (256 - self._ov_a) + self._ov_c + 128) >> 8).astype(np.uint8)
            flat[self._ov_idx] = mixed.view("<u4").ravel()
        return flat

    def packed_frame(self, j: int) -> np.ndarray:
        """Frame of period ``j`` as ``[height, width]`` packed uint32 (a new array).

        ``unpack_rgb(packed_frame(j))`` equals :meth:`frame`; encoders that index colours
        (GIF) use it to skip unpacking.
        """
        out = self._base_packed.copy()
        out[self._map_slice] = self._map_packed(j).reshape(
            self.layout.transform.height, self.layout.transform.width
        )
        out8 = out.view(np.uint8).reshape(*out.shape, 4)
        for sprite in self._dynamic_sprites(j):
            composite(out8, sprite)
        return out

    def frame(self, j: int) -> np.ndarray:
        """Frame of period ``j`` as ``[height, width, 3]`` uint8 (a new array)."""
        return unpack_rgb(self.packed_frame(j))

    def packed_frames(self) -> Iterator[np.ndarray]:
        """Every frame in order, packed (see :meth:`packed_frame`)."""
        for j in range(self.n_frames):
            yield self.packed_frame(j)

    def _dynamic_sprites(self, j: int) -> list[Any]:
        """Update the per-period artists for ``j`` and return their sprites (drawn on first use)."""
        counts, nodata = self.class_counts(j)
        segs: list[np.ndarray] = []
        call: list[str] = []
        n_out = 0
        if self.outlines is not None:
            units = np.unique(np.asarray(list(self.outlines[j]), dtype=np.int64))
            n_out = units.size
            # outlines of units a few pixels across would only smear their fill colour (and at
            # national scale thousands of them cost a vector pass per frame): only units of at
            # least OUTLINE_MIN_PX pixels are outlined; the legend still counts every one
            units = units[self.raster.area_px[units] >= OUTLINE_MIN_PX]
            segs = self._segments(units)
            if self.names is not None:
                call = [self.names[u] for u in units]
        d = self._dyn
        marks = []
        if self._mark_xy is not None:  # the units of mark-drawn classes, once per period
            c = self.codes[:, j]
            for i, kind in enumerate(self.chrome.marks):
                if kind:
                    colour = self.chrome.mark_colours[i] if self.chrome.mark_colours else lay.TEXT
                    marks.append((kind, colour, self._mark_xy[c == i]))
        d.update(j, counts, nodata, outlines=segs, callouts=call, n_outlined=n_out, marks=marks)
        return [s for s in self._sprites.get_many(d.groups()) if s is not None]

    def _segments(self, units: np.ndarray) -> list[np.ndarray]:
        if self._ring_sorted:
            return [
                self._rings[i]
                for u in units
                for i in range(self._ring_start[u], self._ring_start[u + 1])
            ]
        want = set(int(u) for u in units)
        return [r for r, u in zip(self._rings, self._ring_unit) if int(u) in want]

    def __iter__(self) -> Iterator[np.ndarray]:
        for j in range(self.n_frames):
            yield self.frame(j)

    def close(self) -> None:
        """Drop this renderer's references (the shared figure is freed with its cache entry)."""
        self._sprites = None  # type: ignore[assignment]
        self._dyn = None


def _round_up_share(x: float) -> float:
    """The next of 5 %, 10 %, 20 %, 25 %, 50 %, 100 % at or above ``x``."""
    for step in (0.05, 0.1, 0.2, 0.25, 0.5):
        if x <= step:
            return step
    return 1.0


def _map_text(text: lay.MapText | None, words: dict[str, Any], outlined: bool) -> lay.MapText:
    """The map text: ``text`` with any of its fields given as keywords (``title=...``)."""
    import dataclasses

    fields = {f.name for f in dataclasses.fields(lay.MapText)}
    unknown = sorted(set(words) - fields)
    if unknown:
        raise TypeError(f"unknown map text field(s) {', '.join(unknown)}; use {sorted(fields)}")
    out = dataclasses.replace(text or lay.MapText(), **words)
    if not outlined and out.outline_label:
        out = dataclasses.replace(out, outline_label="")
    return out


def _mark_points(geoms: Any, transform: Any) -> np.ndarray:
    """A point inside each unit, in frame pixels ``[n, 2]`` (where its mark is drawn)."""
    import shapely

    pts = shapely.point_on_surface(geoms)
    xy = shapely.get_coordinates(pts, include_z=False)
    ok = ~shapely.is_empty(pts)
    out = np.full((len(geoms), 2), -1e6)
    cx, cy = transform.to_pixels(xy[:, 0], xy[:, 1])
    out[ok] = np.column_stack([cx + transform.left, cy + transform.top])
    return out


def _paint_edge(over8: np.ndarray, label: np.ndarray, tr: Any) -> None:
    """Paint the edge of the mapped area (mapped pixels next to outside ones) into the overlay
    ``over8`` ([H, W, 4] uint8, straight alpha), so pale classes stay visible on the paper."""
    inside = label >= 0
    if not inside.any():
        return
    pad = np.pad(inside, 1, constant_values=False)
    core = pad[:-2, 1:-1] & pad[2:, 1:-1] & pad[1:-1, :-2] & pad[1:-1, 2:]
    edge = inside & ~core
    sub = over8[tr.top : tr.top + tr.height, tr.left : tr.left + tr.width]
    sub[edge] = (*hex_to_rgb8(lay.COAST), 217)


def _labels_per_period(labels: Any, k: int, n_periods: int) -> tuple[tuple[str, ...], ...]:
    labels = list(labels)
    if labels and not isinstance(labels[0], str):
        per = tuple(tuple(str(x) for x in row) for row in labels)
        if len(per) == 1:
            per = per
        elif len(per) != n_periods:
            raise ConfigError(
                f"per-period labels need one list per period ({n_periods}), got {len(per)}"
            )
    else:
        per = (tuple(str(x) for x in labels),)
    for row in per:
        if len(row) != k:
            raise ConfigError(f"{len(row)} legend labels for {k} colours; give one label per class")
    return per


def render_frames(
    geometry: Any,
    codes_2d: np.ndarray,
    colours: Sequence[str],
    labels: Sequence[str] | Sequence[Sequence[str]],
    period_labels: Sequence[str],
    *,
    text: lay.MapText | None = None,
    outlines: Sequence[Sequence[int]] | None = None,
    size: tuple[int, int] = (1280, 720),
    **kwargs: Any,
) -> Iterator[np.ndarray]:
    """Stream the frames (``[H, W, 3]`` uint8, one per period) of an animated map.

    A thin generator over :class:`FrameRenderer` (see there for the arguments); frames are
    made one at a time so an encoder never needs them all in memory.
    """
    r = FrameRenderer(
        geometry,
        codes_2d,
        colours,
        labels,
        period_labels,
        text=text,
        outlines=outlines,
        size=size,
        **kwargs,
    )
    for f in r.findings:
        log.warning("%s", f.message)
    try:
        yield from r
    finally:
        r.close()
