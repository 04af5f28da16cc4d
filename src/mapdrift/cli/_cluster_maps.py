"""Pictures of the cluster step, drawn with mapdrift.render from the result's plain arrays."""

from __future__ import annotations

from pathlib import Path
from typing import Any

import numpy as np

from mapdrift.atomic import atomic_path

MAP_FILES: tuple[str, ...] = (
    "global_moran.png",
    "cluster_animation.gif",
    "cluster_map.png",
    "change_cluster_map.png",
    "trend_map.png",
)


def _save_png(frame: np.ndarray, path: Path) -> Path:
    from PIL import Image

    with atomic_path(path) as tmp:
        Image.fromarray(frame).save(tmp, format="PNG")
    return path


def _one_map(
    panel: Any, codes: np.ndarray, colours: list[str], labels: list[str], path: Path, **text: Any
) -> Path:
    from mapdrift import render

    static_map = getattr(render, "static_map", None)
    if static_map is not None:
        return static_map(panel.geometry, codes, colours, labels, path, **text)
    from mapdrift.render.frames import render_frames

    frame = next(iter(render_frames(
        panel.geometry, codes[:, None], colours, labels, [""], title=text.get("title", ""),
        subtitle=text.get("subtitle", ""), caption=text.get("caption", ""), timeline=False, show_period=False,
    )))  # fmt: skip
    return _save_png(frame, path)


def draw_maps(result: Any, panel: Any, out: Path) -> list[Path]:
    """Global Moran chart, cluster animation (GIF) + last-period map, change-cluster map and
    trend map. Returns the paths written."""
    from mapdrift import render
    from mapdrift.clusters.labels import LABELS
    from mapdrift.palettes import CLUSTER_COLOURS, diverging
    from mapdrift.render.frames import render_frames
    from mapdrift.render.moran_charts import moran_line_chart

    opt = result.options
    var = panel.meta.variable or "value"
    sig = result.significance
    caption = (
        f"{opt.statistic} with {result.weights.kind} weights, {opt.permutations} permutations "
        f"(seed {opt.seed}); {sig}. {panel.meta.source}".strip()
    )
    written: list[Path] = []
    g = result.global_moran
    written.append(
        moran_line_chart(
            list(result.period_labels), g["moran_i"], g["expected_i"], g["p_permutation"],
            out / "global_moran.png", alpha=opt.alpha, title=f"Spatial clustering of {var.lower()}",
            subtitle=f"Global Moran's I per period ({result.weights.kind} weights)",
            caption=f"Markers filled where the permutation p-value <= {opt.alpha:g} "
            f"({opt.permutations} permutations, seed {opt.seed}). {panel.meta.source}".strip(),
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

    write_gif = getattr(render, "write_gif", None)
    if write_gif is not None:
        written.append(write_gif(frames(), out / "cluster_animation.gif"))
    else:
        import imageio.v3 as iio

        with atomic_path(out / "cluster_animation.gif") as tmp:
            iio.imwrite(tmp, np.stack(list(frames())), extension=".gif", duration=900, loop=0)
        written.append(out / "cluster_animation.gif")
    last = result.codes[:, -1]
    written.append(
        _one_map(panel, last, colours, labels, out / "cluster_map.png",
                 title=f"{title}, {result.period_labels[-1]}", subtitle=sub, caption=caption)
    )  # fmt: skip
    a, b = result.change_periods
    written.append(
        _one_map(panel, result.change_codes, colours, labels, out / "change_cluster_map.png",
                 title=f"Where the change in {var.lower()} is clustered, {a} to {b}",
                 subtitle=f"Local clusters of the change {a}-{b}, {sig}", caption=caption)
    )  # fmt: skip
    written.append(
        _one_map(panel, result.trend_codes, diverging(5), list(result.trend_labels),
                 out / "trend_map.png", title=f"Trend in {var.lower()}",
                 subtitle=f"Theil-Sen slope where the Mann-Kendall trend is "
                 f"{result.trend.correction and sig.replace('per period', 'across units')}",
                 caption=f"Slopes per period; neutral: no significant trend. {panel.meta.source}".strip())
    )  # fmt: skip
    return written
