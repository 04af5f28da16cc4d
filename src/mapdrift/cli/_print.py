"""Plain-text printing helpers shared by commands (tables that wrap to the terminal)."""

from __future__ import annotations

import shutil
import textwrap
from collections.abc import Sequence
from typing import Any

import typer

from mapdrift.cli._app import state
from mapdrift.findings import Finding, plural

__all__ = ["echo", "print_findings", "print_summary", "summarise_findings"]

_COLOURS = {"error": typer.colors.RED, "warning": typer.colors.YELLOW, "note": typer.colors.BLUE}


def echo(text: str = "", *, err: bool = False) -> None:
    """Print unless ``--quiet``."""
    if not state.get("quiet"):
        typer.echo(text, err=err)


def print_findings(findings: Sequence[Finding]) -> None:
    """One block per finding: level and code, then the wrapped message."""
    if not findings:
        echo("No problems found.")
        return
    width = max(60, min(shutil.get_terminal_size((100, 20)).columns, 120))
    for f in findings:
        if state.get("quiet") and f.level != "error":
            continue
        head = typer.style(f"{f.level:<8}", fg=_COLOURS.get(f.level)) + f" {f.code}"
        typer.echo(head)
        typer.echo(
            textwrap.fill(f.message, width=width, initial_indent="    ", subsequent_indent="    ")
        )


def print_summary(panel: Any) -> None:
    """The data findings of a command that loaded data, short: counts by level, then each
    error and warning on one line (``mapdrift check`` prints them in full). ``-q`` silences it."""
    per = panel.period_labels
    span = f" ({per[0]} to {per[-1]})" if per else ""
    head = f"data: {plural(panel.n_units, 'unit')} x {plural(panel.n_periods, 'period')}{span}"
    summarise_findings(panel.findings, head + ";", view=panel.meta.view)


def summarise_findings(findings: Sequence[Finding], head: str, *, view: str = "") -> None:
    """``head N warnings, M notes``, the view line, then each error and warning on one line."""
    counts = {lvl: sum(f.level == lvl for f in findings) for lvl in ("error", "warning", "note")}
    parts = [plural(n, lvl) for lvl, n in counts.items() if n or lvl != "error"]
    echo(f"{head} " + ", ".join(parts))
    if view:
        echo(f"  {view}")
    for f in findings:
        if f.level in ("error", "warning"):
            head = typer.style(f"{f.level:<8}", fg=_COLOURS.get(f.level))
            echo(f"  {head}{f.code}: {f.message}")
