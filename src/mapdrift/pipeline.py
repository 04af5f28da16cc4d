"""``run(config)``: the whole job step by step, into a staging folder swapped in on success.

Steps run in order and each one logs a summary line. Outputs are written into a staging folder
beside the target (``<out>.partial-<pid>``) and moved into place only when every step succeeded,
so a run that fails part-way leaves an earlier run's outputs untouched. An existing output folder
is replaced only with ``force=True``.
"""

from __future__ import annotations

import json
import logging
import os
import shutil
import time
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from mapdrift.config import ClassSpec, Config, merge
from mapdrift.errors import MapdriftError, OutputExistsError, StepError
from mapdrift.findings import Finding

__all__ = ["RunResult", "RunState", "prepare_out", "run"]

log = logging.getLogger(__name__)
Progress = Callable[[str], None]


@dataclass
class RunState:
    """What the steps hand each other: config, the staging folder, and each step's results."""

    config: Config
    staging: Path
    panel: Any = None
    classes: Any = None
    results: dict[str, Any] = field(default_factory=dict)
    findings: list[Finding] = field(default_factory=list)
    timings: dict[str, float] = field(default_factory=dict)
    outputs: list[Path] = field(default_factory=list)
    summaries: dict[str, str] = field(default_factory=dict)

    def path(self, name: str) -> Path:
        """A file in the staging folder (recorded as an output)."""
        p = self.staging / name
        p.parent.mkdir(parents=True, exist_ok=True)
        self.outputs.append(p)
        return p


@dataclass(frozen=True)
class RunResult:
    out: Path
    findings: tuple[Finding, ...]
    timings: dict[str, float]
    summaries: dict[str, str]
    outputs: tuple[Path, ...]


def prepare_out(out: Path, *, force: bool) -> None:
    """Refuse to touch a non-empty ``out`` unless ``force``."""
    if out.exists() and any(out.iterdir()) and not force:
        raise OutputExistsError(
            f"{out} already holds an earlier run; pass --force to replace it or choose another --out"
        )


def _step_load(state: RunState) -> str:
    from mapdrift.panel import InputSpec, load_panel

    spec = merge(InputSpec, state.config.section("inputs"), {})
    state.panel = load_panel(spec)
    state.findings += state.panel.findings
    p = state.panel
    return (
        f"{p.n_units} units x {p.n_periods} periods ({p.period_labels[0]} to {p.period_labels[-1]})"
    )


def _step_classify(state: RunState) -> str:
    from mapdrift.breaks import classify

    cs: ClassSpec = merge(ClassSpec, state.config.section("classes"), {})
    classes = classify(
        state.panel,
        scheme=cs.scheme,
        k=cs.k,
        basis=cs.basis,
        manual_values=cs.values or None,
        isolate_zeros=cs.isolate_zeros,
        breaks_file=cs.breaks_file,
    )
    state.classes = classes
    state.findings += classes.findings
    if not classes.per_period:
        classes.breaks[0].save(state.path("breaks.json"))
    else:
        from mapdrift.atomic import write_text

        write_text(
            state.path("breaks.json"),
            json.dumps(
                {"per_period": [b.to_dict() for b in classes.breaks], "warning": classes.warning},
                indent=2,
            ),
        )
    b = classes.breaks[0]
    return f"{b.scheme}, {classes.k} classes, {b.basis}: " + " | ".join(b.labels)


def _step_findings(state: RunState) -> str:
    from mapdrift.atomic import write_text

    write_text(
        state.path("findings.json"),
        json.dumps([f.to_dict() for f in state.findings], indent=2) + "\n",
    )
    n = {lvl: sum(f.level == lvl for f in state.findings) for lvl in ("warning", "note")}
    return f"{n['warning']} warnings, {n['note']} notes"


#: The steps in order: name -> function(state) -> one-line summary.
STEPS: list[tuple[str, Callable[[RunState], str]]] = [
    ("load", _step_load),
    ("classify", _step_classify),
    ("findings", _step_findings),
]


def _swap_in(staging: Path, out: Path) -> None:
    old = None
    if out.exists():
        old = out.with_name(f".{out.name}.old-{os.getpid()}")
        os.replace(out, old)
    os.replace(staging, out)
    if old is not None:
        shutil.rmtree(old, ignore_errors=True)


def run(
    config: Config, *, out: Path, force: bool = False, progress: Progress | None = None
) -> RunResult:
    """Run every step into ``out``; raise StepError naming the failed step (``out`` untouched)."""
    out = Path(out)
    prepare_out(out, force=force)
    out.parent.mkdir(parents=True, exist_ok=True)
    staging = out.with_name(f".{out.name}.partial-{os.getpid()}")
    shutil.rmtree(staging, ignore_errors=True)
    staging.mkdir(parents=True)
    state = RunState(config=config, staging=staging)
    try:
        for name, step in STEPS:
            t0 = time.perf_counter()
            try:
                summary = step(state)
            except MapdriftError:
                raise
            except Exception as exc:
                raise StepError(f"step {name!r} failed: {type(exc).__name__}: {exc}") from exc
            state.timings[name] = round(time.perf_counter() - t0, 3)
            state.summaries[name] = summary
            log.info("%s: %s", name, summary)
            if progress is not None:
                progress(f"{name:<10} {summary}")
        _swap_in(staging, out)
    finally:
        shutil.rmtree(staging, ignore_errors=True)
    outputs = tuple(out / p.relative_to(staging) for p in state.outputs)
    return RunResult(
        out, tuple(state.findings), dict(state.timings), dict(state.summaries), outputs
    )
