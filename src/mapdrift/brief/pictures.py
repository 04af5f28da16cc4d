"""Pictures of the change and cluster steps, drawn with :mod:`mapdrift.render` from the
results' plain arrays.

They live here, above both the analyses and the renderer (``brief → render, changes,
clusters``), so that the commands and the pipeline draw the same pictures with one code path.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

__all__ = [
    "CHANGE_PICTURES",
    "CLUSTER_PICTURES",
    "change_pictures",
    "cluster_pictures",
]

#: Legend words for the first four cluster labels on a map of change (high-high, low-low,
#: high-low, low-high of the change between two periods).
CHANGE_CLUSTER_LABELS: tuple[str, ...] = (
    "rise among rises",
    "fall among falls",
    "rise among falls",
    "fall among rises",
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


def change_pictures(result: Any, panel: Any, out: Path, *, force: bool = False) -> list[Path]:
    """Transition heatmap, first-to-last class flow, change map and flagged-units map."""
    from mapdrift import palettes
    from mapdrift.changes import FLAG_LABELS, change_categories
    from mapdrift.render.static import static_map
    from mapdrift.render.transition_charts import class_flow, transition_heatmap

    tr = result.transitions
    per = result.period_labels
    first, last = per[0], per[-1]
    var = panel.meta.variable
    source = panel.meta.source
    notice = result.warning
    k = len(result.labels)
    written = []
    pooled = f"all {len(tr.steps)} steps between consecutive periods pooled"
    if tr.skipped_steps:
        pooled += f" ({len(tr.skipped_steps)} across gaps left out)"
    written.append(
        transition_heatmap(
            tr.counts,
            result.labels,
            out / "transition_heatmap.png",
            title=f"{var}: class transitions, {first} to {last}",
            subtitle=f"{tr.n_pairs:,} unit steps; {pooled}",
            caption=source,
            notice=notice,
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
            title=f"{var}: where units moved, {first} to {last}",
            subtitle="Share of units per class in the first and the last period",
            caption=source,
            notice=notice,
        )
    )
    codes, labels = change_categories(result.net_change, k)
    written.append(
        static_map(
            panel.geometry,
            codes,
            palettes.diverging(len(labels)),
            labels,
            out / "change_map.png",
            title=f"{var}: class change, {first} to {last}",
            subtitle=(
                f"Classes moved between {first} and {last} (same breaks in both)"
                if notice is None
                else f"Class ranks moved between {first} and {last}; breaks differ by period"
            ),
            caption=source,
            legend_title="net change",
            nodata_label=f"no data in {first} or {last}",
            notice=notice,
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
            title=f"{var}: units to look at",
            subtitle=(
                f"jump = {opts.jump}+ classes in one step; spike = jumped and came back within "
                f"{opts.spike_window} periods; stayed = top or bottom class in each of the "
                f"last {opts.persist} periods"
            ),
            caption=(
                f"{result.noise_short} First flag in the legend's order; all in units.csv "
                "and jumps.csv." + (f" {source}" if source else "")
            ),
            legend_title="flag",
            nodata_label="no data",
            notice=notice,
            force=force,
        )
    )
    return written


def cluster_pictures(
    result: Any, panel: Any, out: Path, *, force: bool = False, trends: bool | None = None
) -> list[Path]:
    """Global Moran chart, cluster animation (GIF), last-period cluster map, change-cluster map
    and trend map. Returns the paths written.

    The trend map is left out when ``trends`` is False, or (None) when no unit has enough
    periods for a trend (a map of "too few periods" everywhere says nothing)."""
    from mapdrift.clusters.labels import LABELS
    from mapdrift.palettes import CLUSTER_COLOURS, diverging
    from mapdrift.render.encode import write_gif
    from mapdrift.render.frames import render_frames
    from mapdrift.render.moran_charts import moran_line_chart
    from mapdrift.render.static import static_map

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
            out / "global_moran.png", alpha=opt.alpha, title=f"Spatial clustering of {var.lower()}",
            subtitle=f"Global Moran's I per period ({result.weights.kind} weights)",
            caption=f"Markers filled where the permutation p-value <= {opt.alpha:g}, each period "
            f"tested on its own, no correction across periods ({opt.permutations} permutations, "
            f"seed {opt.seed}). {panel.meta.source}".strip(),
        )
    )  # fmt: skip
    colours = [CLUSTER_COLOURS[label] for label in LABELS]
    labels = list(LABELS)
    if opt.statistic == "gi-star":
        labels[0], labels[1] = "hot spot", "cold spot"
    title = f"Clusters of {var.lower()}"
    sub = f"Local {'Moran' if opt.statistic == 'local-moran' else 'Gi*'} clusters, {sig}"

    def frames():
        return render_frames(
            panel.geometry, result.codes, colours, labels, list(result.period_labels),
            title=title, subtitle=sub, caption=caption,
        )  # fmt: skip

    written.append(
        write_gif(frames(), out / "cluster_animation.gif", exact_colours=colours, force=force)
    )
    last = result.codes[:, -1]
    written.append(
        static_map(panel.geometry, last, colours, labels, out / "cluster_map.png", legend_title="local clusters",
                 title=f"{title}, {result.period_labels[-1]}", subtitle=sub, caption=caption, force=force)
    )  # fmt: skip
    a, b = result.change_periods
    # the categories of a map of change speak of rises and falls, not of high and low levels
    change_labels = list(CHANGE_CLUSTER_LABELS) + labels[4:]
    change_sig = sig.replace(" per period", "")
    change_caption = caption.replace(sig, change_sig)
    written.append(
        static_map(panel.geometry, result.change_codes, colours, change_labels, out / "change_cluster_map.png",
                 title=f"Where the change in {var.lower()} is clustered, {a} to {b}",
                 subtitle=f"Local clusters of the change {a} to {b}, {change_sig}",
                 legend_title=f"change {a} to {b}", caption=change_caption, force=force)
    )  # fmt: skip
    if trends is None:
        trends = bool((result.trends["direction"] != "too few periods").any())
    if not trends:
        return written
    written.append(
        static_map(panel.geometry, result.trend_codes, diverging(5), list(result.trend_labels),
                 out / "trend_map.png", title=f"Trend in {var.lower()}",
                 subtitle=f"Theil-Sen slope where the Mann-Kendall trend is "
                 f"{result.trend.correction and sig.replace('per period', 'across units')}",
                 caption=f"Mann-Kendall and Theil-Sen on {result.trend_input}. Slopes are change per "
                 f"period in {panel.meta.unit_label or 'the value'}; grey: no "
                 f"significant trend. {panel.meta.source}".strip(),
                 legend_title="trend (Theil-Sen slope)", force=force)
    )  # fmt: skip
    return written
