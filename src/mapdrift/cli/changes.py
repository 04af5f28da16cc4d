"""``mapdrift changes``: class transitions, Markov summaries, jumps and the change maps.

Thin layer: loads the panel, optionally makes values relative, classifies with the shared class
options, calls :func:`mapdrift.changes.analyse_changes`, writes the tables and draws the charts
and maps from the plain arrays of the result.
"""

from __future__ import annotations

from dataclasses import replace
from enum import Enum
from pathlib import Path
from typing import Any, Optional

import typer

from mapdrift.cli._app import command
from mapdrift.cli._data import load_data, summarise
from mapdrift.cli._options import class_options, input_options
from mapdrift.cli._print import echo, print_findings
from mapdrift.findings import plural


class Relative(str, Enum):
    mean = "mean"
    median = "median"


def _options(config: Any, overrides: dict[str, Any]) -> Any:
    from mapdrift.changes import ChangeOptions
    from mapdrift.config import merge

    # the [changes] section, when the config has one, maps onto ChangeOptions; flags win
    from_config = config.section("changes") if config is not None else {}
    return merge(ChangeOptions, from_config, overrides)


@command("changes")
@input_options
@class_options
def changes(
    inputs: Any,
    classes: Any,
    config: Any = None,
    out: Path = typer.Option(..., "--out", help="Folder for the tables, charts and maps."),
    jump: Optional[int] = typer.Option(
        None, "--jump", help="Flag moves of this many classes or more in one step [default: 2]."
    ),
    spike_window: Optional[int] = typer.Option(
        None,
        "--spike-window",
        help="A jump undone within this many periods is a spike, often a data error [default: 2].",
    ),
    persist: Optional[int] = typer.Option(
        None,
        "--persist",
        help="Flag units in the top/bottom class for each of the last N periods [default: 3].",
    ),
    bridge_gaps: Optional[bool] = typer.Option(
        None,
        "--bridge-gaps/--no-bridge-gaps",
        help="Count steps across missing periods (e.g. 2016 -> 2018) [default: no].",
    ),
    relative: Optional[Relative] = typer.Option(
        None,
        "--relative",
        help="Divide each period by its mean or median before classing ('who moved relative "
        "to the whole area').",
    ),
    weights: Optional[str] = typer.Option(
        None,
        "--weights",
        help="Neighbours for the spatially conditioned transitions: queen, rook, knn:6, "
        "distance:2500 (metres), fuzzy, or a .gal/.gwt file [default: queen].",
    ),
    spatial: Optional[bool] = typer.Option(
        None,
        "--spatial/--no-spatial",
        help="Compute transitions conditioned on the neighbours' class [default: yes].",
    ),
    pictures: bool = typer.Option(
        True, "--pictures/--no-pictures", help="Draw the charts and maps (PNG)."
    ),
    force: bool = typer.Option(False, "--force", help="Overwrite existing output files."),
) -> None:
    """Which units changed class, how often, by how much, and whether neighbours matter.

    Writes transitions.csv, transition_probabilities.csv, transitions_by_pair.csv, markov.json,
    jumps.csv, units.csv and more into --out, plus a transition heatmap, a flow of class shares
    from the first to the last period, a change map and a map of flagged units.
    """
    from mapdrift.breaks import classify_spec
    from mapdrift.brief.pictures import CHANGE_PICTURES, change_pictures
    from mapdrift.changes import analyse_changes, relative_panel, write_changes
    from mapdrift.changes.io import check_outputs, output_names

    options = _options(
        config,
        {
            "jump": jump,
            "spike_window": spike_window,
            "persist": persist,
            "bridge_gaps": bridge_gaps,
            "relative": relative.value if relative is not None else None,
            "weights": weights,
            "spatial": spatial,
        },
    )
    names = output_names(spatial=options.spatial) + (list(CHANGE_PICTURES) if pictures else [])
    check_outputs(out, names, force)  # before any work
    panel = load_data(inputs)
    if options.relative:
        panel = relative_panel(panel, options.relative)
    cls = classify_spec(panel, classes)
    panel = summarise(panel, cls, view="relative" if options.relative else inputs.view)
    if options.persist > panel.n_periods:  # "the last 3 periods" with 2: all there are
        options = replace(options, persist=panel.n_periods)
    result = analyse_changes(panel, cls, options)
    if panel.meta.view:  # every table says which view its values are in
        result = replace(
            result, warning=" ".join(x for x in (result.warning, panel.meta.view) if x)
        )
    written = write_changes(result, out, force=True)
    if pictures:
        written += change_pictures(result, panel, out, force=True)  # checked above

    tr = result.transitions
    per = result.period_labels
    echo(
        f"{panel.n_units} units, {panel.n_periods} periods ({per[0]} to {per[-1]}), "
        f"{cls.k} classes: {tr.n_pairs:,} unit steps over {len(tr.steps)} steps"
    )
    stayed = tr.counts.trace() / max(tr.n_pairs, 1)
    echo(f"stayed in their class: {stayed:.0%} of unit steps")
    hom = result.homogeneity
    if hom.p_LR is not None:
        echo(
            f"same transitions every step? likelihood ratio {hom.LR:.1f}, df {hom.df}, p = {hom.p_LR:.3g}"
        )
    if result.spatial is not None and result.spatial.test.p_LR is not None:
        t = result.spatial.test
        echo(
            f"transitions independent of the neighbours' class? LR {t.LR:.1f}, df {t.df}, p = {t.p_LR:.3g}"
        )
    u = result.units
    noise = int(((u["n_noise_moves"] > 0) & ~u["jump"]).sum())
    echo(
        f"flagged: {plural(int(u['jump'].sum()), 'unit')} {'credibly ' if result.tested else ''}jumped "
        f"{options.jump}+ classes"
        + (f" ({noise:,} more moved within count noise)" if result.tested else "")
        + f", {plural(int(u['spike'].sum()), 'spike')}, {int(u['stayed_top'].sum()):,} stayed in "
        f"top class, {int(u['stayed_bottom'].sum()):,} stayed in bottom class"
    )
    echo(result.noise_text)
    if cls.warning:  # (result.warning also names the view, said in the summary above)
        echo(typer.style(f"warning: {cls.warning}", fg=typer.colors.YELLOW))
    shown = [
        f
        for f in result.findings
        if f.code not in ("changes-homogeneity", "changes-spatial-context")
    ]
    if shown:
        echo()
        print_findings(shown)
    echo()
    echo(f"wrote {len(written)} files to {out}")
