"""``mapdrift animate``: an animated choropleth (GIF, MP4 or PNG frames), small multiples, one map.

Thin layer: loads the panel, classifies it with the shared class options, picks the palette by
legend kind and calls :func:`mapdrift.render.animate` (or :func:`~mapdrift.render.static_map`
for ``--at PERIOD``, :func:`~mapdrift.render.small_multiples` for ``--small-multiples``).
"""

from __future__ import annotations

from enum import Enum
from pathlib import Path
from typing import Any, Optional

import typer

from mapdrift.cli._app import command
from mapdrift.cli._data import load_data, summarise
from mapdrift.cli._options import class_options, input_options
from mapdrift.cli._print import echo, print_findings


class ScaleUnits(str, Enum):
    km = "km"
    mi = "mi"


def map_text(panel: Any, cls: Any) -> dict[str, Any]:
    """Title, subtitle, caption, legend title, notice, colours and labels for a classed panel."""
    from mapdrift import palettes

    b0 = cls.breaks[0]
    k = cls.k
    colours = palettes.colours_for(k, diverging_legend=b0.diverging)
    if cls.per_period:
        labels: Any = [
            tuple(list(cls.breaks_for(j).labels) + ["-"] * (k - cls.breaks_for(j).k))
            for j in range(panel.n_periods)
        ]
        basis = "breaks per period"
    else:
        labels = list(b0.labels)
        basis = {"pooled": "pooled over all periods", "file": "from a saved breaks file"}.get(
            b0.basis, b0.basis.replace("period:", "breaks of ")
        )
    per = panel.period_labels
    unit = panel.meta.unit_label
    sub = f"{unit} · " if unit else ""
    sub += f"{k} {b0.scheme.replace('-', ' ')} classes, {basis}"
    if not cls.per_period and len(per) > 1:
        sub += f" ({panel.period_span})"
    return {
        "title": panel.meta.variable or "value",
        "subtitle": sub,
        "caption": panel.meta.source or "",
        "legend_title": unit or (panel.meta.variable or "value"),
        "notice": cls.warning,
        "colours": colours,
        "labels": labels,
    }


@command("animate")
@input_options
@class_options
def animate(
    inputs: Any,
    classes: Any,
    config: Any = None,
    out: Path = typer.Option(
        Path("animation.gif"),
        "--out",
        help="animation.gif, animation.mp4, or a folder (no suffix) for PNG frames; with --at a "
        ".png/.pdf/.svg file or a folder.",
    ),
    size: Optional[str] = typer.Option(
        None, "--size", help="Frame size WIDTHxHEIGHT [default: 1280x720]."
    ),
    seconds_per_period: Optional[float] = typer.Option(
        None, "--seconds-per-period", help="Seconds each period is shown [default: 1.0]."
    ),
    hold_last: Optional[float] = typer.Option(
        None, "--hold-last", help="Seconds the last period is held [default: 3]."
    ),
    fps: Optional[int] = typer.Option(None, "--fps", help="MP4 frames per second [default: 10]."),
    tween: Optional[int] = typer.Option(
        None, "--tween", help="MP4: cross-fade frames between periods [default: 0]."
    ),
    max_mb: Optional[float] = typer.Option(
        None, "--max-mb", help="Shrink the file until it fits this many MB (e.g. 5 for e-mail)."
    ),
    min_unit_px: Optional[float] = typer.Option(
        None,
        "--min-unit-px",
        help="Draw units smaller than this many pixels as dots [default: 0, off].",
    ),
    north_arrow: Optional[bool] = typer.Option(
        None, "--north-arrow/--no-north-arrow", help="Draw a north arrow."
    ),
    scale_units: Optional[ScaleUnits] = typer.Option(
        None, "--scale-units", help="Scale bar in km or mi [default: km]."
    ),
    at: Optional[str] = typer.Option(
        None, "--at", help="Map one period (e.g. --at 2019) instead of animating."
    ),
    small_multiples: bool = typer.Option(
        False, "--small-multiples", help="Also write small_multiples.png and .pdf beside --out."
    ),
    force: bool = typer.Option(False, "--force", help="Overwrite existing output files."),
) -> None:
    """Animate the classed values over the periods: same breaks, legend and extent in every frame.

    Writes --out (GIF, MP4 or PNG frames); --small-multiples adds a grid of all periods;
    --at PERIOD writes a single map instead.
    """
    from mapdrift import palettes
    from mapdrift.breaks import classify_spec
    from mapdrift.config import merge
    from mapdrift.errors import OutputExistsError
    from mapdrift.render.animation import AnimateOptions, parse_size

    overrides = {
        "size": parse_size(size) if size else None,
        "seconds_per_period": seconds_per_period,
        "hold_last": hold_last,
        "fps": fps,
        "tween": tween,
        "max_mb": max_mb,
        "min_unit_px": min_unit_px,
        "north_arrow": north_arrow,
        "scale_units": scale_units.value if scale_units is not None else None,
    }
    from_config = config.section("animate") if config is not None else {}
    opts = merge(AnimateOptions, from_config, overrides)
    folder = out if out.suffix == "" else out.parent
    sm_paths = (
        [folder / "small_multiples.png", folder / "small_multiples.pdf"] if small_multiples else []
    )
    for p in sm_paths:
        if p.exists() and not force:
            raise OutputExistsError(f"{p} exists; pass --force to overwrite it")
    panel = load_data(inputs)
    cls = classify_spec(panel, classes)
    panel = summarise(panel, cls, view=inputs.view)
    t = map_text(panel, cls)
    colours, labels = t.pop("colours"), t.pop("labels")
    findings = list(cls.findings)
    findings += palettes.check_palette(colours, labels[0] if cls.per_period else labels)
    written: list[Path] = []
    if at is not None:
        from mapdrift.render.static import static_map

        j = panel.period_index(at)
        target = (
            out
            if out.suffix.lower() in (".png", ".pdf", ".svg")
            else folder / f"map_{panel.period_labels[j]}.png"
        )
        title = f"{t['title']}, {panel.period_labels[j]}"
        static_map(
            panel.geometry,
            cls.codes[:, j],
            colours,
            labels[j] if cls.per_period else labels,
            target,
            title=title,
            subtitle=t["subtitle"],
            caption=t["caption"],
            legend_title=t["legend_title"],
            notice=t["notice"],
            size=opts.size,
            north_arrow=opts.north_arrow,
            scale_units=opts.scale_units,
            min_unit_px=opts.min_unit_px,
            force=force,
        )
        written.append(target)
        echo(f"wrote {target}: {panel.period_labels[j]}, {opts.size[0]}x{opts.size[1]}")
    else:
        from mapdrift.render.animation import animate as run_animation

        res = run_animation(
            panel.geometry,
            cls.codes,
            colours,
            labels,
            list(panel.period_labels),
            out,
            options=opts,
            force=force,
            units=list(panel.units),
            **t,
        )
        findings += list(res.findings)
        written.append(res.path)
        what = {"gif": "GIF", "mp4": "MP4", "png": "PNG frames"}[res.kind]
        echo(
            f"wrote {res.path} ({what}): {res.frames} periods, {res.size[0]}x{res.size[1]}, "
            f"{res.bytes / 1e6:.2f} MB"
        )
    if small_multiples:
        from mapdrift.render.multiples import small_multiples as draw_multiples

        paths = draw_multiples(
            panel.geometry,
            cls.codes,
            colours,
            labels,
            list(panel.period_labels),
            folder / "small_multiples",
            title=t["title"],
            subtitle=t["subtitle"],
            caption=t["caption"],
            notice=t["notice"],
            legend_title=t["legend_title"],
            scale_units=opts.scale_units,
            force=force,
        )
        written += paths
        echo("wrote " + ", ".join(str(p) for p in paths))
    if cls.warning:
        echo(typer.style(f"warning: {cls.warning}", fg=typer.colors.YELLOW))
    shown = [f for f in findings if f.code != "breaks-per-period"]
    if shown:
        echo()
        print_findings(shown)
