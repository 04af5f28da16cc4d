"""Plain-text printing helpers shared by commands (tables that wrap to the terminal)."""

from __future__ import annotations

import shutil
import textwrap
from collections.abc import Sequence

import typer

from mapdrift.cli._app import state
from mapdrift.findings import Finding

__all__ = ["echo", "print_findings"]

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
