"""Loading data for a command: read the panel, apply the view, add the trend check, print the
short findings summary. One place, so every command that loads data does the same."""

from __future__ import annotations

from typing import Any

from mapdrift.cli._print import print_summary

__all__ = ["load_data", "summarise"]


def load_data(inputs: Any, *, smooth: Any = None) -> Any:
    """The panel of ``inputs`` (an InputSpec), seen through ``inputs.view``.

    ``smooth`` (a function Panel -> Panel) runs before the view: rate smoothing works on the
    counts, so it must come before the view rescales the values.
    """
    from mapdrift.panel import load_panel
    from mapdrift.views import apply_view

    panel = load_panel(inputs)
    if smooth is not None:
        panel = smooth(panel)
    return apply_view(panel, inputs.view, spec=inputs)


def summarise(panel: Any, classes: Any = None, *, view: str | None = None) -> Any:
    """Add the common-trend check (on ``classes`` when given) and print the findings summary;
    returns the panel with that finding."""
    from mapdrift.views import common_trend

    per_period = classes is not None and classes.per_period
    finding = common_trend(
        panel,
        None if classes is None or per_period else classes.codes,
        k=None if classes is None else classes.k,
        view=view,
    )
    if finding is not None and not per_period:
        panel = panel.with_findings([finding])
    print_summary(panel)
    return panel
