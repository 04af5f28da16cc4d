"""``mapdrift breaks``: fit class breaks, show classes per period, save them for next year."""

from __future__ import annotations

from pathlib import Path
from typing import Any, Optional

import typer

from mapdrift.cli._app import command
from mapdrift.cli._data import load_data, summarise
from mapdrift.cli._options import class_options, input_options
from mapdrift.cli._print import echo, print_findings
from mapdrift.errors import OutputExistsError


@command("breaks")
@input_options
@class_options
def breaks(
    inputs: Any,
    classes: Any,
    save: Optional[Path] = typer.Option(
        None, "--save", help="Write the breaks as JSON (reuse with --breaks-file)."
    ),
    force: bool = typer.Option(False, "--force", help="Overwrite an existing --save file."),
) -> None:
    """Fit class breaks (pooled over all periods by default) and show the classes per period."""
    from mapdrift.breaks import classify_spec

    if save is not None and save.exists() and not force:
        raise OutputExistsError(
            f"{save} exists; pass --force to overwrite it or choose another --save path"
        )
    panel = load_data(inputs)
    result = classify_spec(panel, classes)
    panel = summarise(panel, result, view=inputs.view)
    counts = result.counts()
    nodata = result.no_data()
    for j, label in enumerate(panel.period_labels):
        if result.per_period or j == 0:
            b = result.breaks_for(j)
            head = f"{b.scheme}, {b.k} classes, basis {b.basis}" + (
                f" ({label})" if result.per_period else ""
            )
            echo(head)
            echo("  " + " | ".join(b.labels))
        if j == 0 or result.per_period:
            echo(
                f"  {'period':<10}"
                + "".join(f"{i + 1:>8}" for i in range(result.k))
                + f"{'no data':>9}"
            )
        echo(f"  {label:<10}" + "".join(f"{c:>8}" for c in counts[j]) + f"{nodata[j]:>9}")
    if result.warning:
        echo()
        echo(typer.style(f"warning: {result.warning}", fg=typer.colors.YELLOW))
    if result.findings:
        echo()
        print_findings([f for f in result.findings if f.code != "breaks-per-period"])
    if save is not None:
        if result.per_period:
            from mapdrift.errors import ConfigError

            raise ConfigError("--save writes one set of breaks; use --basis pooled or period:YEAR")
        result.breaks[0].save(save)
        echo(f"saved {save}")
