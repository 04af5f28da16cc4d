"""Small multiples: every period side by side on one page, one shared legend (PNG and PDF).

The page's texts, legend and scale bar are drawn once with matplotlib. The maps are raster: the
units are rasterised once at panel size into a label raster (:mod:`mapdrift.render.raster`,
cached, antialiased edges) and each panel is ``colour_of_class[code_of_unit[label]]``, so the
cost grows with the page's pixels, not with units x periods (85,000 tracts x 15 periods drawn
as vector shapes took about two minutes and a 50 MB PDF). Unit boundaries are drawn as lines
when units are large enough on the panel to show them. The PDF carries the same texts as
vectors; its maps are vector shapes for small layers (up to :data:`VECTOR_MAX_UNITS` units,
sharp at any zoom) and the panel images otherwise. With breaks per period the legend shows class
ranks, not ranges, and the page carries the "classes differ by period" notice.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from pathlib import Path
from typing import Any

import numpy as np

from mapdrift.atomic import atomic_path
from mapdrift.errors import ConfigError, OutputExistsError
from mapdrift.palettes import NODATA, NODATA_HATCH
from mapdrift.pngwrite import write_png
from mapdrift.render import layout as lay
from mapdrift.render.raster import LabelRaster, fit_transform, metres_per_unit

__all__ = ["VECTOR_MAX_UNITS", "small_multiples"]

#: Above this many units the PDF's maps are the raster panels (vector shapes would take minutes
#: and tens of MB; at this count a panel has fewer pixels than units anyway).
VECTOR_MAX_UNITS = 5_000


def _grid(n: int, aspect: float, target: float = 1.55) -> int:
    best, best_err = 1, float("inf")
    for cols in range(1, n + 1):
        rows = math.ceil(n / cols)
        page = (cols * aspect) / rows
        err = abs(math.log(page / target))
        if err < best_err - 1e-9:
            best, best_err = cols, err
    return best


def small_multiples(
    geometry: Any,
    codes_2d: np.ndarray,
    colours: Sequence[str],
    labels: Sequence[str] | Sequence[Sequence[str]],
    period_labels: Sequence[str],
    path: Path | str,
    *,
    title: str = "",
    subtitle: str = "",
    caption: str = "",
    notice: str | None = None,
    legend_title: str = "",
    nodata_label: str = "no data",
    ncols: int | None = None,
    width_px: int = 1600,
    formats: Sequence[str] = ("png", "pdf"),
    png_dpi: float = 108.0,
    scale_units: str = "km",
    crs: Any = None,
    force: bool = False,
) -> list[Path]:
    """Write ``<path>.png`` and ``<path>.pdf`` (suffix of ``path`` ignored); return the paths.

    ``codes_2d`` is ``[n_units, n_periods]`` (-1 = no data, hatched). ``labels`` is one list of
    class labels or one per period (then the legend shows class ranks and ``notice`` is
    required wording such as the per-period warning).
    """
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure
    from matplotlib.patches import Rectangle
    from matplotlib.transforms import Affine2D

    from mapdrift.render.static import add_vector_map, unit_paths

    codes = np.asarray(codes_2d)
    n_units, n_p = codes.shape
    if len(period_labels) != n_p:
        raise ConfigError(
            f"codes have {n_p} periods but {len(period_labels)} period labels were given"
        )
    base = Path(path)
    stem = base.with_suffix("") if base.suffix else base
    outs = [stem.with_suffix("." + f.lower().lstrip(".")) for f in formats]
    for o in outs:
        if o.suffix not in (".png", ".pdf", ".svg"):
            raise ConfigError(f"small multiples are written as png, pdf or svg, not {o.suffix}")
        if o.exists() and not force:
            raise OutputExistsError(f"{o} exists; pass --force to overwrite it")
    labels_l = list(labels)
    per_period = bool(labels_l) and not isinstance(labels_l[0], str) and len(labels_l) > 1
    legend_labels = (
        [
            f"class {i + 1}"
            + (" (lowest)" if i == 0 else " (highest)" if i == len(colours) - 1 else "")
            for i in range(len(colours))
        ]
        if per_period
        else list(labels_l[0] if labels_l and not isinstance(labels_l[0], str) else labels_l)
    )
    import shapely

    geoms = np.asarray(getattr(geometry, "values", geometry), dtype=object)
    m_unit = metres_per_unit(crs if crs is not None else getattr(geometry, "crs", None))
    xmin, ymin, xmax, ymax = shapely.total_bounds(geoms)
    aspect = max(xmax - xmin, 1e-9) / max(ymax - ymin, 1e-9)
    W = int(width_px)
    s = W / 1600.0
    m = 32 * s
    legend_w = 260 * s
    gap = 18 * s
    label_h = 24 * s
    cols = int(ncols) if ncols else _grid(n_p, aspect * 1.0)
    rows = math.ceil(n_p / cols)
    grid_w = W - 2 * m - legend_w - 2 * gap
    cell_w = (grid_w - (cols - 1) * gap) / cols
    cell_h = cell_w / aspect + label_h
    head = m + 34 * s + (24 * s if subtitle else 0) + 12 * s
    foot = 30 * s if caption else 12 * s
    H = int(math.ceil(head + rows * cell_h + (rows - 1) * gap + foot + m))
    fig = Figure(figsize=(W / 72.0, H / 72.0), dpi=72)
    FigureCanvasAgg(fig)
    fig.patch.set_facecolor(lay.PAPER)
    ax = fig.add_axes((0, 0, 1, 1))
    ax.set_xlim(0, W)
    ax.set_ylim(H, 0)
    ax.set_axis_off()
    kw = {"family": lay.FONT}
    ax.text(
        m,
        m,
        title,
        fontsize=lay.fit_font(title, 24 * s, W - 2 * m, weight="bold"),
        weight="bold",
        color=lay.TEXT,
        va="top",
        **kw,
    )
    if subtitle:
        ax.text(
            m,
            m + 34 * s,
            subtitle,
            fontsize=lay.fit_font(subtitle, 14 * s, W - 2 * m),
            color=lay.MUTED,
            va="top",
            **kw,
        )
    ppx = float(png_dpi) / 72.0  # PNG pixels per page unit
    box_w, box_h = int(cell_w), int(cell_h - label_h)
    # one label raster at PNG resolution serves every panel (they differ only in placement)
    box_tr = fit_transform((xmin, ymin, xmax, ymax), max(int(box_w * ppx), 1),
                           max(int(box_h * ppx), 1))  # fmt: skip
    raster = LabelRaster.build(geometry, box_tr, ss=2, size_text="the small-multiples panel size")
    area = raster.area_px[raster.area_px > 0]
    med_px = float(np.median(area)) if area.size else 0.0
    show_edges = med_px >= 12 and n_units <= 20_000
    vector_pdf = n_units <= VECTOR_MAX_UNITS
    lw = float(np.clip(cell_w / math.sqrt(max(n_units, 1)) * 0.02, 0.05, 0.4))
    cells: list[tuple[Any, Any]] = []  # (page transform, raster placement) per panel
    tr0 = None
    for j in range(n_p):
        r, c = divmod(j, cols)
        x0 = m + c * (cell_w + gap)
        y0 = head + r * (cell_h + gap)
        ax.text(
            x0, y0, period_labels[j], fontsize=14 * s, weight="bold", color=lay.TEXT, va="top", **kw
        )
        tr = fit_transform(
            (xmin, ymin, xmax, ymax),
            box_w,
            box_h,
            left=int(round(x0)),
            top=int(round(y0 + label_h)),
        )
        tr0 = tr0 or tr
        cells.append(tr)
        cj = codes[:, j]
        nd = int((cj < 0).sum())
        if nd:
            ax.text(
                x0 + cell_w,
                y0 + 2 * s,
                f"{nd:,} {nodata_label}",
                fontsize=10 * s,
                color=lay.MUTED,
                va="top",
                ha="right",
                **kw,
            )
    edges = None
    if show_edges:
        from matplotlib.collections import LineCollection

        from mapdrift.render.frames import unit_rings_px

        rings, _ = unit_rings_px(geoms, box_tr)
        segs = [(rg - (box_tr.left, box_tr.top)) / ppx for rg in rings]
        for tr in cells:
            ax.add_collection(
                LineCollection(
                    [sg + (tr.left, tr.top) for sg in segs],
                    colors=lay.BOUNDARY,
                    linewidths=lw,
                )
            )
        edges = list(ax.collections)
    # shared legend
    lx = W - m - legend_w
    ly = head
    if legend_title:
        ax.text(
            lx,
            ly,
            legend_title,
            fontsize=lay.fit_font(legend_title, 13 * s, legend_w, weight="bold"),
            weight="bold",
            color=lay.TEXT,
            va="top",
            **kw,
        )
    ly += 26 * s
    row = 25 * s
    for i, (col, lab) in enumerate(zip(colours, legend_labels)):
        ax.add_patch(Rectangle((lx, ly + i * row), 34 * s, 17 * s, facecolor=col, edgecolor="none"))
        ax.text(
            lx + 44 * s,
            ly + i * row + 8.5 * s,
            lab,
            fontsize=11.5 * s,
            color=lay.TEXT,
            va="center",
            **kw,
        )
    i = len(colours)
    ax.add_patch(
        Rectangle(
            (lx, ly + i * row),
            34 * s,
            17 * s,
            facecolor=NODATA,
            edgecolor="none",
            hatch="////",
            hatchcolor=NODATA_HATCH,
            linewidth=0,
        )
    )
    ax.text(
        lx + 44 * s,
        ly + i * row + 8.5 * s,
        nodata_label,
        fontsize=11.5 * s,
        color=lay.MUTED,
        va="center",
        **kw,
    )
    ly += (i + 1) * row + 14 * s
    if notice:
        lines = lay._wrap(notice, 11 * s, legend_w - 20 * s)
        bh = len(lines) * 11 * s * 1.35 + 12 * s
        ax.add_patch(
            Rectangle(
                (lx, ly),
                legend_w,
                bh,
                facecolor=lay.NOTICE_BG,
                edgecolor=lay.NOTICE_FG,
                linewidth=0.8 * s,
            )
        )
        ax.text(
            lx + 10 * s,
            ly + 6 * s,
            "\n".join(lines),
            fontsize=11 * s,
            color=lay.NOTICE_FG,
            va="top",
            weight="bold",
            linespacing=1.25,
            **kw,
        )
        ly += bh + 14 * s
    if tr0 is not None:
        res_m = tr0.res * m_unit
        metres, text = lay._nice_length(min(legend_w * 0.8, cell_w * 0.6) * res_m, scale_units)
        bar = metres / res_m
        ly += 20 * s
        ax.add_patch(Rectangle((lx, ly), bar, 4 * s, facecolor=lay.TEXT, edgecolor="none"))
        ax.text(
            lx,
            ly - 4 * s,
            text + " (each map)",
            fontsize=10.5 * s,
            color=lay.TEXT,
            va="bottom",
            **kw,
        )
    if caption:
        ax.text(
            m,
            H - m,
            caption,
            fontsize=lay.fit_font(caption, 10.5 * s, W - 2 * m),
            color=lay.MUTED,
            va="bottom",
            **kw,
        )
    panels = _Panels(raster, codes, colours, ppx)
    maps_added = False
    for o in sorted(outs, key=lambda o: o.suffix != ".png"):  # PNG first: no map artists yet
        if o.suffix == ".png":
            _save_png(fig, panels, cells, o, png_dpi)
            continue
        if edges:
            for e in edges:
                e.remove()
            edges = None
        if not maps_added:
            if vector_pdf:
                paths = unit_paths(geoms, lambda c: c)
                for j, tr in enumerate(cells):
                    # map coords -> page units: col = (x - x0)/res + left, row = (y1 - y)/res + top
                    aff = (
                        Affine2D()
                        .translate(-tr.x0, -tr.y1)
                        .scale(1 / tr.res, -1 / tr.res)
                        .translate(tr.left, tr.top)
                    )
                    add_vector_map(ax, paths, codes[:, j], colours, linewidth=lw,
                                   transform=aff + ax.transData)  # fmt: skip
            else:
                for j, tr in enumerate(cells):
                    ax.imshow(
                        panels.image(j),
                        extent=(tr.left, tr.left + tr.width, tr.top + tr.height, tr.top),
                        interpolation="none",
                        zorder=0.5,
                    )
            maps_added = True
        fig.patch.set_alpha(1.0)
        with atomic_path(o) as tmp:
            fmt = o.suffix.lstrip(".")
            # no creation date in PDF/SVG: the same inputs give byte-identical files
            meta = {"pdf": {"CreationDate": None}, "svg": {"Date": None}}.get(fmt)
            fig.savefig(tmp, format=fmt, dpi=72, metadata=meta)
    fig.clear()
    return outs


class _Panels:
    """Panel images ``[h, w, 3]`` uint8 from the shared label raster, one per period."""

    def __init__(self, raster: LabelRaster, codes: np.ndarray, colours: Sequence[str], ppx: float):
        from mapdrift.colour import hex_to_rgb8
        from mapdrift.render.pixels import hatch_alpha

        self.raster, self.codes = raster, codes
        self.k = len(colours)
        self.rgb = np.array([hex_to_rgb8(c) for c in colours] + [hex_to_rgb8(NODATA)], np.uint8)
        self.paper = np.array(hex_to_rgb8(lay.PAPER), np.uint8)
        tr = raster.transform
        hatch = hatch_alpha(tr.height, tr.width, spacing=max(6.0 * ppx, 4.0),
                            width=max(1.3 * ppx, 1.0))  # fmt: skip
        self.hatch_idx = np.flatnonzero(hatch.ravel() > 0)
        a = hatch.ravel()[self.hatch_idx, None]
        nod = self.rgb[-1].astype(np.float32)
        hat = np.array(hex_to_rgb8(NODATA_HATCH), np.float32)
        self.hatch_rgb = np.round(nod * (1 - a) + hat * a).astype(np.uint8)
        self.hatch_lab = raster.label.ravel()[self.hatch_idx]

    def image(self, j: int) -> np.ndarray:
        c = np.asarray(self.codes[:, j]).astype(np.int64)
        nod = c < 0
        img = self.raster.colourise(self.rgb[np.where(nod, self.k, c)], self.paper).copy()
        if nod.any() and self.hatch_idx.size:
            lab = self.hatch_lab
            sel = lab >= 0
            sel[sel] = nod[lab[sel]]
            img.reshape(-1, 3)[self.hatch_idx[sel]] = self.hatch_rgb[sel]
        return img


def _save_png(fig: Any, panels: _Panels, cells: list[Any], path: Path, dpi: float) -> None:
    """Texts and lines drawn once (transparent) at ``dpi`` over the pasted panel images."""
    ppx = dpi / 72.0
    fig.patch.set_alpha(0.0)
    fig.set_dpi(dpi)
    fig.canvas.draw()
    over = np.asarray(fig.canvas.buffer_rgba())
    H, W = over.shape[:2]
    page = np.empty((H, W, 3), np.uint8)
    page[:] = panels.paper
    for j, tr in enumerate(cells):
        img = panels.image(j)
        top, left = int(round(tr.top * ppx)), int(round(tr.left * ppx))
        h, w = min(img.shape[0], H - top), min(img.shape[1], W - left)
        page[top : top + h, left : left + w] = img[:h, :w]
    a = over[..., 3:4].astype(np.uint16)
    page = ((over[..., :3].astype(np.uint16) * a + page * (255 - a) + 127) // 255).astype(np.uint8)
    write_png(page, path)
    fig.set_dpi(72)
