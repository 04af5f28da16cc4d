"""Pictures of the change and cluster steps, drawn with :mod:`mapdrift.render` from the
results' plain arrays, and the slide-sized versions of the run's pictures.

They live here, above both the analyses and the renderer (``brief → render, changes,
clusters``), so that the commands, the pipeline and the slides draw the same pictures with one
code path. :class:`Look` says at what size and with what smallest text a set of pictures is
drawn: the run's files use the defaults (1280 x 720), the slides ask for the size of the
slide's picture box with text of at least 18 px, so they read from the back of a room.

Cluster pictures have a look of our own (see :data:`mapdrift.palettes.CLUSTER_LOOK`): cluster
cores are filled areas, outliers and units without neighbours are marks on a blank unit, the
legend says in words what each means with the trade term beneath.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from mapdrift.pngwrite import write_png

__all__ = [
    "CHANGE_PICTURES",
    "CLUSTER_PICTURES",
    "Look",
    "change_pictures",
    "cluster_look",
    "cluster_pictures",
    "jump_outlines",
    "multiples_pages",
    "noun_for",
    "write_cluster_style",
]

#: Legend words for the first four cluster labels on a map of change (high-high, low-low,
#: high-low, low-high of the change between two periods).
CHANGE_CLUSTER_LABELS: tuple[str, ...] = (
    "rise, among rising neighbours\nhigh-high of the change",
    "fall, among falling neighbours\nlow-low of the change",
    "rise, among falling neighbours\nhigh-low outlier",
    "fall, among rising neighbours\nlow-high outlier",
)
CHANGE_PICTURES = (
    "transition_heatmap.png",
    "class_flow.png",
    "change_map.png",
    "flagged_units.png",
)
CLUSTER_PICTURES: tuple[str, ...] = (
    "global_moran.png",
    "cluster_animation.gif",
    "cluster_map.png",
    "change_cluster_map.png",
    "trend_map.png",
)


#: Smallest text of the run's pictures (1280 x 720): the report shows them about 1,000 px
#: wide, where this is still about 10 px.
REPORT_TEXT_PX = 13.0


@dataclass(frozen=True)
class Look:
    """Size of the pictures, their smallest text in pixels, and what the units are called."""

    size: tuple[int, int] = (1280, 720)
    min_text_px: float = REPORT_TEXT_PX
    unit_noun: str = "units"

    @property
    def chart_dpi(self) -> int:
        """Dots per inch of the charts: 100, or more so that 9-point text is ``min_text_px``."""
        return int(round(max(100.0, self.min_text_px / 9.0 * 72.0)))


def noun_for(n: int, noun: str) -> str:
    """``"1 tract"``, ``"1,208 tracts"``: the count with thousands separators and the noun."""
    one = noun[:-1] if noun.endswith("s") and not noun.endswith("ss") else noun
    return f"{n:,} {one if n == 1 else noun}"


def _text(look: Look, **words: Any) -> Any:
    from mapdrift.render.layout import MapText

    return MapText(unit_noun=look.unit_noun, min_text_px=look.min_text_px, **words)


def jump_outlines(changes: Any, panel: Any) -> tuple[list[list[int]] | None, str]:
    """Per period, the units that jumped into it (credible jumps only when tested against
    count noise), and the legend's words for them; ``(None, "")`` without jumps."""
    if changes is None or not len(changes.jumps):
        return None, ""
    index = {u: i for i, u in enumerate(panel.units)}
    landed: dict[str, list[int]] = {label: [] for label in panel.period_labels}
    counted = changes.jumps["credible"] != "false"  # moves within count noise are not outlined
    for unit, to in zip(
        changes.jumps["unit"][counted], changes.jumps["to_period"][counted].astype(str)
    ):
        landed[to].append(index[unit])
    what = "credibly jumped" if changes.tested else "jumped"
    return (
        [landed[label] for label in panel.period_labels],
        f"{what} {changes.options.jump}+ classes since the previous period",
    )


def cluster_look(labels: Sequence[str]) -> tuple[list[str], list[str | None], list[str]]:
    """Fill colours, marks and mark colours for cluster ``labels`` (see ``CLUSTER_LOOK``)."""
    from mapdrift.palettes import CLUSTER_LOOK

    looks = [CLUSTER_LOOK[label] for label in labels]
    return [f for f, _, _ in looks], [m for _, m, _ in looks], [c for _, _, c in looks]


def change_pictures(
    result: Any, panel: Any, out: Path, *, force: bool = False, look: Look | None = None
) -> list[Path]:
    """Transition heatmap, first-to-last class flow, change map and flagged-units map."""
    from mapdrift import palettes
    from mapdrift.changes import FLAG_LABELS, change_categories
    from mapdrift.render.static import static_map
    from mapdrift.render.transition_charts import class_flow, transition_heatmap

    look = look or Look()
    noun = look.unit_noun
    tr = result.transitions
    per = result.period_labels
    first, last = per[0], per[-1]
    var = panel.meta.variable
    source = panel.meta.source
    notice = result.warning
    k = len(result.labels)
    written = []
    pooled = f"all {len(tr.steps):,} steps between consecutive periods pooled"
    if tr.skipped_steps:
        pooled += f" ({len(tr.skipped_steps):,} across gaps left out)"
    chart = {"size": look.size, "dpi": look.chart_dpi}
    written.append(
        transition_heatmap(
            tr.counts,
            result.labels,
            out / "transition_heatmap.png",
            title=f"{var}: class transitions, {first} to {last}",
            subtitle=f"{tr.n_pairs:,} steps of one of the {noun}; {pooled}",
            caption=source,
            notice=notice,
            unit_noun=noun,
            **chart,
        )
    )
    colours = palettes.colours_for(k)
    written.append(
        class_flow(
            tr.first_last,
            result.labels,
            colours,
            out / "class_flow.png",
            first_label=first,
            last_label=last,
            title=f"{var}: where {noun} moved, {first} to {last}",
            subtitle=f"Share of {noun} per class in the first and the last period",
            caption=source,
            notice=notice,
            unit_noun=noun,
            **chart,
        )
    )
    # moves within count noise are shown as no change: a map of every move would let a few
    # filings on a small base paint a unit as risen or fallen
    codes, labels = change_categories(result.credible_net_change, k)
    if result.tested:
        from mapdrift.clusters.multiple import describe

        labels = ["no credible change" if lab == "no change" else lab for lab in labels]
        tested_how = (
            f"{result.n_net_noise:,} {noun} whose class moved within {result.noise_words} are "
            f"shown as no credible change ({result.noise_how} of {first} against {last}, "
            f"{describe(result.options.alpha, result.options.correction)} over all {noun}; "
            "see units.csv)."
        )
    else:
        tested_how = "Moves not tested against noise (no counts): a move of a unit with few events may be noise."
    change_caption = tested_how + (f" {source}" if source else "")
    written.append(
        static_map(
            panel.geometry,
            codes,
            palettes.diverging(len(labels)),
            labels,
            out / "change_map.png",
            text=_text(
                look,
                title=f"{var}: class change, {first} to {last}",
                subtitle=(
                    f"Classes moved between {first} and {last} (same breaks in both)"
                    if notice is None
                    else f"Class ranks moved between {first} and {last}; breaks differ by period"
                ),
                caption=change_caption,
                legend_title="net change",
                nodata_label=f"no data in {first} or {last}",
                notice=notice,
            ),
            size=look.size,
            force=force,
        )
    )
    opts = result.options
    written.append(
        static_map(
            panel.geometry,
            result.flag,
            list(palettes.FLAG_COLOURS),
            list(FLAG_LABELS),
            out / "flagged_units.png",
            text=_text(
                look,
                title=f"{var}: {noun} to look at",
                subtitle=(
                    f"jump = {opts.jump}+ classes in one step; spike = jumped and came back "
                    f"within {opts.spike_window} periods; stayed = top or bottom class in each "
                    f"of the last {opts.persist} periods"
                ),
                caption=(
                    f"{result.noise_short} First flag in the legend's order; all in units.csv "
                    "and jumps.csv." + (f" {source}" if source else "")
                ),
                legend_title="flag",
                nodata_label="no data",
                notice=notice,
            ),
            size=look.size,
            force=force,
        )
    )
    return written


def cluster_pictures(
    result: Any,
    panel: Any,
    out: Path,
    *,
    force: bool = False,
    look: Look | None = None,
    animation: bool = True,
    trends: bool | None = None,
) -> list[Path]:
    """Global Moran chart, cluster animation (GIF, unless ``animation`` is False), last-period
    cluster map, change-cluster map and trend map. Returns the paths written.

    The trend map is left out when ``trends`` is False, or (None) when no unit has enough
    periods for a trend (a map of "too few periods" everywhere says nothing)."""
    from mapdrift.clusters.labels import LABELS
    from mapdrift.palettes import CLUSTER_WORDS, diverging
    from mapdrift.render.encode import write_gif
    from mapdrift.render.frames import render_frames
    from mapdrift.render.layout import GREY_BOUNDARY
    from mapdrift.render.moran_charts import moran_line_chart
    from mapdrift.render.static import static_map

    look = look or Look()
    opt = result.options
    var = panel.meta.variable or "value"
    sig = result.significance
    stat_name = "Local Moran's I" if opt.statistic == "local-moran" else "Getis-Ord Gi*"
    caption = (  # the subtitle carries the significance sentence
        f"{stat_name}, {result.weights.kind} weights, on {result.inputs}; {opt.p_text}. "
        f"{panel.meta.source}".strip()
    )
    written: list[Path] = []
    g = result.global_moran
    written.append(
        moran_line_chart(
            list(result.period_labels), g["moran_i"], g["expected_i"], g["p_permutation"],
            out / "global_moran.png", alpha=opt.alpha, title=f"Spatial clustering of {var}",
            subtitle=f"Global Moran's I per period ({result.weights.kind} weights)",
            caption=f"Markers filled where the permutation p-value <= {opt.alpha:g}, each period "
            f"tested on its own, no correction across periods ({opt.permutations:,} permutations, "
            f"seed {opt.seed}). {panel.meta.source}".strip(),
            size=look.size, dpi=look.chart_dpi,
        )
    )  # fmt: skip
    colours, marks, mark_colours = cluster_look(LABELS)
    labels = [CLUSTER_WORDS[label] for label in LABELS]
    if opt.statistic == "gi-star":
        labels[0] = "high, among high neighbours\nhot spot"
        labels[1] = "low, among low neighbours\ncold spot"
    look_kw = {"marks": marks, "mark_colours": mark_colours, "boundary": GREY_BOUNDARY}
    title = f"Clusters of {var}"
    sub = f"Local {'Moran' if opt.statistic == 'local-moran' else 'Gi*'} clusters, {sig}"
    legend_title = "local clusters"

    if animation:

        def frames():
            return render_frames(
                panel.geometry, result.codes, colours, labels, list(result.period_labels),
                text=_text(look, title=title, subtitle=sub, caption=caption,
                           legend_title=legend_title),
                units=list(panel.units), **look_kw,
            )  # fmt: skip

        written.append(
            write_gif(
                frames(),
                out / "cluster_animation.gif",
                exact_colours=[*colours, *mark_colours],
                force=force,
            )
        )
    last = result.codes[:, -1]
    written.append(
        static_map(panel.geometry, last, colours, labels, out / "cluster_map.png",
                   text=_text(look, title=f"{title}, {result.period_labels[-1]}", subtitle=sub,
                              caption=caption, legend_title=legend_title),
                   size=look.size, force=force, **look_kw)
    )  # fmt: skip
    a, b = result.change_periods
    # the categories of a map of change speak of rises and falls, not of high and low levels
    change_labels = list(CHANGE_CLUSTER_LABELS) + labels[4:]
    change_sig = sig.replace(" per period", "")
    change_caption = caption.replace(sig, change_sig)
    written.append(
        static_map(panel.geometry, result.change_codes, colours, change_labels,
                   out / "change_cluster_map.png",
                   text=_text(look, title=f"Where the change in {var} is clustered, {a} to {b}",
                              subtitle=f"Local clusters of the change {a} to {b}, {change_sig}",
                              legend_title=f"change {a} to {b}", caption=change_caption),
                   size=look.size, force=force, **look_kw)
    )  # fmt: skip
    if trends is None:
        trends = bool((result.trends["direction"] != "too few periods").any())
    if not trends:
        return written
    written.append(
        static_map(panel.geometry, result.trend_codes, diverging(5), list(result.trend_labels),
                   out / "trend_map.png",
                   text=_text(look, title=f"Trend in {var}",
                              subtitle=f"Theil-Sen slope where the Mann-Kendall trend is "
                              f"{result.trend.correction and sig.replace('per period', 'across units')}",
                              caption=f"Mann-Kendall and Theil-Sen on {result.trend_input}. Slopes "
                              f"are change per period in {panel.meta.unit_label or 'the value'}; "
                              f"grey: no significant trend. {panel.meta.source}".strip(),
                              legend_title="trend (Theil-Sen slope)"),
                   size=look.size, force=force)
    )  # fmt: skip
    return written


def multiples_pages(
    geometry: Any,
    codes: np.ndarray,
    colours: Sequence[str],
    labels: Sequence[str],
    period_labels: Sequence[str],
    folder: Path,
    *,
    size: tuple[int, int],
    legend_title: str = "",
    min_map_px: int = 420,
    text_px: int = 26,
    stem: str = "multiples",
) -> list[tuple[Path, tuple[str, ...]]]:
    """Every period as a small map, split over as many pages of ``size`` as it takes for each
    map to be at least ``min_map_px`` wide, with one legend per page; text is ``text_px``.

    Returns ``(path, periods on that page)`` per page. Maps are drawn from one label raster
    (rasterised once for all pages), so a page costs its pixels, not its polygons.
    """
    import shapely
    from PIL import Image, ImageDraw

    from mapdrift.brief.textfit import _font, text_width
    from mapdrift.colour import hex_to_rgb8
    from mapdrift.palettes import NODATA, NODATA_HATCH
    from mapdrift.render.pixels import hatch_alpha
    from mapdrift.render.raster import LabelRaster, fit_transform

    codes = np.asarray(codes)
    n_p = codes.shape[1]
    W, H = size
    geoms = np.asarray(getattr(geometry, "values", geometry), dtype=object)
    bounds = tuple(shapely.total_bounds(geoms))
    aspect = max(bounds[2] - bounds[0], 1e-9) / max(bounds[3] - bounds[1], 1e-9)
    gap = 28
    label_h = int(text_px * 1.5)
    legend_w = max(
        (text_width(lab, text_px) for lab in [*labels, "no data", legend_title]), default=0
    )
    legend_w = int(min(legend_w + 70, W * 0.3))
    grid_w = W - legend_w - gap
    # the grid with the fewest pages whose maps are at least min_map_px wide, then the largest
    best = None
    for cols in range(1, max(grid_w // min_map_px, 1) + 1):
        for rows in range(1, max(H // (min_map_px // 2), 1) + 1):
            w_fit = (grid_w - (cols - 1) * gap) / cols
            h_fit = (H - (rows - 1) * gap) / rows - label_h
            cw = min(w_fit, h_fit * aspect)
            if cw < min_map_px and (cols, rows) != (1, 1):
                continue
            pages = -(-n_p // (cols * rows))
            score = (pages, -cw)
            if best is None or score < best[0]:
                best = (score, cols, rows, cw, cw / aspect)
    _, cols, rows, cell_w, map_h = best
    per_page = cols * rows
    pages = -(-n_p // per_page)
    per_page = -(-n_p // pages)  # balance the pages
    mw, mh = int(cell_w), int(map_h)
    tr = fit_transform(bounds, mw, mh, left=0, top=0)
    raster = LabelRaster.build(geoms, tr, ss=2, min_unit_px=3)
    rgb = np.array([hex_to_rgb8(c) for c in colours] + [hex_to_rgb8(NODATA)], dtype=np.uint8)
    hat = hatch_alpha(tr.height, tr.width, spacing=7.0, width=1.6)[..., None]
    hat_rgb = np.array(hex_to_rgb8(NODATA_HATCH), np.float32)
    label = raster.label
    # one-pixel white lines between units, as on the run's maps
    seam = np.zeros(label.shape, dtype=bool)
    seam[:, 1:] |= (label[:, 1:] != label[:, :-1]) & (label[:, 1:] >= 0) & (label[:, :-1] >= 0)
    seam[1:, :] |= (label[1:, :] != label[:-1, :]) & (label[1:, :] >= 0) & (label[:-1, :] >= 0)
    font_b, font = _font(text_px, True), _font(text_px, False)
    small = _font(max(int(text_px * 0.8), 18), False)
    out: list[tuple[Path, tuple[str, ...]]] = []
    folder.mkdir(parents=True, exist_ok=True)
    for page in range(pages):
        js = list(range(page * per_page, min((page + 1) * per_page, n_p)))
        img = Image.new("RGB", (W, H), "white")
        d = ImageDraw.Draw(img)
        for slot, j in enumerate(js):
            r, c = divmod(slot, cols)
            x0 = int(c * (cell_w + gap))
            y0 = int(r * (mh + label_h + gap))
            cj = codes[:, j].astype(np.int64)
            unit_rgb = rgb[np.where(cj < 0, len(colours), cj)]
            m = raster.colourise(unit_rgb, (255, 255, 255)).astype(np.float32)
            nod = (label >= 0) & (cj[np.maximum(label, 0)] < 0)
            m = np.where(nod[..., None], m * (1 - hat) + hat_rgb * hat, m)
            m[seam] = 255.0
            img.paste(Image.fromarray(m.astype(np.uint8)), (x0, y0 + label_h))
            d.text((x0, y0), str(period_labels[j]), font=font_b, fill=(31, 31, 31))
            n_nd = int((cj < 0).sum())
            if n_nd:
                note = f"{n_nd:,} no data"
                d.text(
                    (x0 + mw - text_width(note, small.size), y0 + 4),
                    note,
                    font=small,
                    fill=(92, 92, 92),
                )
        # legend
        lx, ly = grid_w + gap, 0
        if legend_title:
            d.text((lx, ly), legend_title, font=font_b, fill=(31, 31, 31))
            ly += label_h
        for colour, lab in [*zip(colours, labels), (None, "no data")]:
            box = (lx, ly + 4, lx + 44, ly + text_px + 4)
            if colour is None:
                d.rectangle(box, fill=hex_to_rgb8(NODATA), outline=hex_to_rgb8(NODATA_HATCH))
                for off in range(0, 60, 8):
                    d.line(
                        (box[0] + off, box[3], box[0] + off + 20, box[1]),
                        fill=hex_to_rgb8(NODATA_HATCH),
                        width=2,
                    )
                d.rectangle((box[2] + 1, box[1], box[2] + 40, box[3]), fill="white")
            else:
                d.rectangle(box, fill=hex_to_rgb8(colour), outline=(200, 200, 200))
            d.text((lx + 56, ly), lab, font=font, fill=(31, 31, 31))
            ly += int(text_px * 1.6)
        path = folder / f"{stem}-{page + 1}.png"
        write_png(img, path)
        out.append((path, tuple(str(period_labels[j]) for j in js)))
    return out


def write_cluster_style(path: Path, column: str, *, title: str = "") -> Path:
    """Write an OGC Styled Layer Descriptor (SLD 1.0) giving the units layer the cluster look.

    One rule per cluster label on ``column`` (e.g. ``cluster_2024`` of ``units.gpkg``): cores
    filled, outliers as a triangle mark on the blank fill, units without neighbours as a ring,
    no data grey; the rule titles are the legend's words. Any GIS that reads SLD applies it.
    """
    from xml.sax.saxutils import escape

    from mapdrift.atomic import atomic_path
    from mapdrift.palettes import CLUSTER_LOOK, CLUSTER_WORDS
    from mapdrift.render.layout import GREY_BOUNDARY, TEXT

    def css(name: str, value: str) -> str:
        return f'<CssParameter name="{name}">{escape(value)}</CssParameter>'

    rules = []
    for label, (fill, mark, mark_colour) in CLUSTER_LOOK.items():
        words = CLUSTER_WORDS.get(label, label).replace("\n", " (") + (
            ")" if "\n" in CLUSTER_WORDS.get(label, "") else ""
        )
        sym = (
            "<PolygonSymbolizer><Fill>" + css("fill", fill) + "</Fill><Stroke>"
            + css("stroke", GREY_BOUNDARY) + css("stroke-width", "0.5")
            + "</Stroke></PolygonSymbolizer>"
        )  # fmt: skip
        if mark:
            shape = "circle" if mark == "ring" else "triangle"
            inside = (
                "<Stroke>" + css("stroke", mark_colour) + css("stroke-width", "2") + "</Stroke>"
                if mark == "ring"
                else "<Fill>" + css("fill", mark_colour) + "</Fill><Stroke>"
                + css("stroke", TEXT) + css("stroke-width", "1") + "</Stroke>"
            )  # fmt: skip
            rotation = "<Rotation>180</Rotation>" if mark == "down" else ""
            sym += (
                f"<PointSymbolizer><Graphic><Mark><WellKnownName>{shape}</WellKnownName>"
                f"{inside}</Mark><Size>13</Size>{rotation}</Graphic></PointSymbolizer>"
            )
        rules.append(
            f"<Rule><Name>{escape(label)}</Name><Title>{escape(words)}</Title>"
            "<ogc:Filter><ogc:PropertyIsEqualTo>"
            f"<ogc:PropertyName>{escape(column)}</ogc:PropertyName>"
            f"<ogc:Literal>{escape(label)}</ogc:Literal>"
            f"</ogc:PropertyIsEqualTo></ogc:Filter>{sym}</Rule>"
        )
    xml = (
        '<?xml version="1.0" encoding="UTF-8"?>\n'
        '<StyledLayerDescriptor version="1.0.0" xmlns="http://www.opengis.net/sld" '
        'xmlns:ogc="http://www.opengis.net/ogc">'
        "<NamedLayer><Name>units</Name><UserStyle>"
        f"<Title>{escape(title or 'local clusters, ' + column)}</Title><FeatureTypeStyle>"
        + "".join(rules)
        + "</FeatureTypeStyle></UserStyle></NamedLayer></StyledLayerDescriptor>\n"
    )
    with atomic_path(path) as tmp:
        Path(tmp).write_text(xml, encoding="utf-8")
    return path
