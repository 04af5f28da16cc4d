"""``mapdrift check``: load and validate the inputs, print findings and completeness."""

from __future__ import annotations

import json
from typing import Any

import typer

from mapdrift.cli._app import command
from mapdrift.cli._options import input_options
from mapdrift.cli._print import echo, print_findings
from mapdrift.findings import plural


def completeness_lines(panel: Any, width: int = 100) -> list[str]:
    """Units with a value per period, as rows of fixed-width columns that wrap."""
    comp = panel.completeness()
    cells = [f"{p}:{n}" for p, n in zip(comp["period"], comp["with_value"])]
    per_row = max(1, width // 14)
    return [
        "  " + "  ".join(f"{c:<12}" for c in cells[i : i + per_row])
        for i in range(0, len(cells), per_row)
    ]


@command("check")
@input_options
def check(
    inputs: Any,
    as_json: bool = typer.Option(
        False, "--json", help="Print the findings and completeness as JSON."
    ),
) -> None:
    """Load the layer and table, align them, and report every problem found.

    Exit code 0 when the data are usable (warnings allowed), 1 when a problem stops the job.
    """
    from mapdrift.cli._data import load_data
    from mapdrift.views import common_trend

    panel = load_data(inputs)
    trend = common_trend(panel, view=inputs.view)
    if trend is not None:
        panel = panel.with_findings([trend])
    if as_json:
        comp = panel.completeness()
        typer.echo(
            json.dumps(
                {
                    "units": panel.n_units,
                    "periods": list(panel.period_labels),
                    "view": panel.meta.view or "values as read",
                    "findings": [f.to_dict() for f in panel.findings],
                    "completeness": [
                        {"period": p, "with_value": int(n), "missing": int(m)}
                        for p, n, m in zip(comp["period"], comp["with_value"], comp["missing"])
                    ],
                },
                indent=2,
            )
        )
        return
    labels = panel.period_labels
    files = " + ".join(p.name for p in panel.inputs)
    echo(
        f"{files}: {panel.n_units} units x {panel.n_periods} periods ({labels[0]} to {labels[-1]})"
    )
    echo(
        f"variable: {panel.meta.variable}"
        + (f" ({panel.meta.unit_label})" if panel.meta.unit_label else "")
    )
    if panel.meta.view:
        echo(panel.meta.view)
    echo()
    print_findings(panel.findings)
    echo()
    echo(f"Units with a value, per period (of {panel.n_units}):")
    for line in completeness_lines(panel):
        echo(line)
    n_warn = sum(f.level == "warning" for f in panel.findings)
    echo()
    n_note = sum(f.level == "note" for f in panel.findings)
    echo(f"Usable: {plural(n_warn, 'warning')}, {plural(n_note, 'note')}.")
    if panel.n_periods < 2:  # `run` compares periods and stops on this; say it here first
        echo(
            "Only one period: enough for one map (`mapdrift animate --at`), not for `mapdrift "
            "run`, changes or trends, which compare two or more periods."
        )
