"""Files of the change step: CSV tables and ``markov.json``, written atomically.

``write_changes(result, out)`` writes ``transitions.csv`` (k x k counts, all included steps
pooled), ``transition_probabilities.csv`` (row shares; an empty row has blank cells and a
note), ``transitions_first_last.csv``, ``transitions_by_pair.csv`` (long form), ``markov.json``,
``jumps.csv``, ``rank_mobility.csv``, ``transitions_by_neighbourhood.csv`` (when spatially
conditioned transitions were computed) and, unless ``units_table=False``, ``units.csv`` with the
per-unit change columns. Nothing is overwritten without ``force``; CSVs go through :func:`mapdrift.outputs.write_csv`
(atomic, spreadsheet formulas defused). Class numbers in the tables
are 1-based (class 1 = lowest) beside the legend labels. With per-period breaks every CSV starts
with a ``#`` comment line carrying the warning and ``markov.json`` has a ``warning`` key.
"""

from __future__ import annotations

import json
import math
from pathlib import Path
from typing import TYPE_CHECKING, Any

from mapdrift.atomic import write_text
from mapdrift.outputs import check_free, write_csv

if TYPE_CHECKING:
    import pandas as pd

    from mapdrift.changes import ChangeResult

__all__ = ["MARKOV_FORMAT", "markov_document", "output_names", "write_changes"]

#: Version key of ``markov.json``.
MARKOV_FORMAT = "mapdrift-markov/1"


def _clean(obj: Any) -> Any:
    """JSON-safe: NaN/inf -> None, numpy scalars -> Python."""
    if isinstance(obj, dict):
        return {str(k): _clean(v) for k, v in obj.items()}
    if isinstance(obj, list | tuple):
        return [_clean(v) for v in obj]
    if hasattr(obj, "item") and not isinstance(obj, str):
        obj = obj.item()
    if isinstance(obj, float) and not math.isfinite(obj):
        return None
    return obj


def markov_document(result: ChangeResult) -> dict[str, Any]:
    """``markov.json``: stationary distribution, first passage times, mobility, tests."""
    tr = result.transitions
    doc: dict[str, Any] = {
        "format": MARKOV_FORMAT,
        "warning": result.warning,
        "classes": list(result.labels),
        "class_numbers": "1 = lowest class",
        "steps_counted": [tr.step_label(s) for s in range(len(tr.steps))],
        "steps_bridging_gaps": [tr.step_label(s) for s, g in enumerate(tr.gap_steps) if g],
        "steps_skipped_as_gaps": [
            f"{tr.period_labels[a]}-{tr.period_labels[b]}" for a, b in tr.skipped_steps
        ],
        "unit_pairs_counted": tr.n_pairs,
        "unit_pairs_with_no_data": int(tr.n_missing.sum()),
        "markov": result.markov.to_dict(),
        "homogeneity_over_time": result.homogeneity.to_dict(),
        "rank_mobility": result.rank_mobility.to_dict(orient="records"),
        "spatial": result.spatial.to_dict() if result.spatial is not None else None,
        "noise_test": result.noise_text,
        "options": {
            "jump": result.options.jump,
            "spike_window": result.options.spike_window,
            "persist": result.options.persist,
            "bridge_gaps": result.options.bridge_gaps,
            "relative": result.options.relative,
            "weights": result.options.weights if result.options.spatial else None,
        },
        "findings": [f.to_dict() for f in result.findings],
    }
    return _clean(doc)


def output_names(*, spatial: bool = True, units_table: bool = True) -> list[str]:
    """File names :func:`write_changes` writes (``spatial``: with conditioned transitions)."""
    names = [
        "transitions.csv",
        "transition_probabilities.csv",
        "transitions_first_last.csv",
        "transitions_by_pair.csv",
        "markov.json",
        "jumps.csv",
        "rank_mobility.csv",
    ]
    if spatial:
        names.append("transitions_by_neighbourhood.csv")
    if units_table:
        names.append("units.csv")
    return names


def check_outputs(out: Path | str, names: list[str], force: bool) -> None:
    """Raise OutputExistsError naming the files in ``out`` that exist, unless ``force``."""
    check_free([Path(out) / n for n in names], force)


def write_changes(
    result: ChangeResult, out: Path | str, *, force: bool = False, units_table: bool = True
) -> list[Path]:
    """Write the change tables into ``out`` (created if needed); returns the paths written.

    Raises :class:`~mapdrift.errors.OutputExistsError` before writing anything when a file
    exists and ``force`` is False.
    """
    out = Path(out)
    names = output_names(spatial=result.spatial is not None, units_table=units_table)
    check_outputs(out, names, force)
    out.mkdir(parents=True, exist_ok=True)
    tr, w = result.transitions, result.warning
    tables: dict[str, pd.DataFrame] = {
        "transitions.csv": tr.counts_table(),
        "transition_probabilities.csv": tr.probabilities_table(),
        "transitions_first_last.csv": tr.first_last_table(),
        "transitions_by_pair.csv": tr.by_step_table(),
        "jumps.csv": result.jumps,
        "rank_mobility.csv": result.rank_mobility,
    }
    if result.spatial is not None:
        tables["transitions_by_neighbourhood.csv"] = result.spatial.table()
    if units_table:
        tables["units.csv"] = result.units
    written = []
    for name, df in tables.items():
        note = w
        if name == "jumps.csv" and not result.tested:  # say it where the jumps are listed
            note = " ".join(x for x in (w, result.noise_text) if x)
        written.append(write_csv(df, out / name, warning=note))
    doc = json.dumps(markov_document(result), indent=2, ensure_ascii=False)
    written.append(write_text(out / "markov.json", doc + "\n"))
    return written
