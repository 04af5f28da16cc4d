"""Small multiples: every period side by side on one page, one shared legend (PNG and PDF).

Drawn as vectors with matplotlib (the PDF stays sharp at any zoom). The unit paths are built
once and reused in every panel through an affine transform, so the cost is one polygon layer
per panel. With breaks per period the legend shows class ranks, not ranges, and the page
carries the "classes differ by period" notice.
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
from mapdrift.render import layout as lay
from mapdrift.render.raster import fit_transform, metres_per_unit

__all__ = ["small_multiples"]


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
    paths = unit_paths(geoms, lambda c: c)
    n_cells = max(n_units, 1)
    lw = float(np.clip(cell_w / math.sqrt(n_cells) * 0.02, 0.05, 0.4))
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
            int(cell_w),
            int(cell_h - label_h),
            left=int(round(x0)),
            top=int(round(y0 + label_h)),
        )
        tr0 = tr0 or tr
        # map coords -> page pixels: col = (x - x0)/res + left, row = (y1 - y)/res + top
        aff = (
            Affine2D()
            .translate(-tr.x0, -tr.y1)
            .scale(1 / tr.res, -1 / tr.res)
            .translate(tr.left, tr.top)
        )
        t = aff + ax.transData
        cj = codes[:, j]
        add_vector_map(ax, paths, cj, colours, linewidth=lw, transform=t)
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
    for o in outs:
        with atomic_path(o) as tmp:
            fmt = o.suffix.lstrip(".")
            # no creation date in PDF/SVG: the same inputs give byte-identical files
            meta = {"pdf": {"CreationDate": None}, "svg": {"Date": None}}.get(fmt)
            fig.savefig(tmp, format=fmt, dpi=png_dpi if fmt == "png" else 72, metadata=meta)
    fig.clear()
    return outs
