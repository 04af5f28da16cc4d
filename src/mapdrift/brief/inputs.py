"""What a briefing is built from: plain results, whether a run or a notebook made them.

:func:`~mapdrift.brief.assemble.build_brief` and ``build_slides`` read only a
:class:`BriefInputs`, never the pipeline's working state, so an analyst can classify, analyse and
brief from Python and get the same report a ``mapdrift run`` writes.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Any

from mapdrift.config import BriefSpec

if TYPE_CHECKING:
    from mapdrift.breaks import Classes
    from mapdrift.brief.whatsnew import WhatsNew
    from mapdrift.changes import ChangeResult
    from mapdrift.clusters import ClusterResult
    from mapdrift.findings import Finding
    from mapdrift.panel import Panel

__all__ = ["BriefInputs"]


@dataclass(frozen=True, eq=False)
class BriefInputs:
    """The results a briefing reports on.

    ``changes``/``clusters``/``whatsnew`` are optional: their sections are left out without
    them. ``findings`` defaults to those of the panel, classes, changes and clusters (each once);
    ``notice`` (the text every output must carry) to the classes' per-period warning. Pictures
    (``poster.png``, ``change_map.png``, ...) are looked up in ``folder``; missing ones are left
    out. ``previous``/``rebreak`` describe an annual rerun.
    """

    panel: Panel
    classes: Classes
    changes: ChangeResult | None = None
    clusters: ClusterResult | None = None
    whatsnew: WhatsNew | None = None
    findings: tuple[Finding, ...] | None = None
    notice: str | None = None
    folder: Path = field(default_factory=Path)
    spec: BriefSpec = field(default_factory=BriefSpec)
    previous: Path | None = None
    rebreak: bool = False

    def __post_init__(self) -> None:
        if self.findings is None:
            seen: list[Finding] = []
            for part in (self.panel, self.classes, self.changes, self.clusters):
                for f in getattr(part, "findings", ()) or ():
                    if f not in seen:
                        seen.append(f)
            object.__setattr__(self, "findings", tuple(seen))
        else:
            object.__setattr__(self, "findings", tuple(self.findings))
        if self.notice is None:
            object.__setattr__(self, "notice", self.classes.warning)
        object.__setattr__(self, "folder", Path(self.folder))

    @classmethod
    def from_run(cls, state: Any) -> BriefInputs:
        """The inputs of a pipeline run (its ``RunState`` after the steps ran); the one place
        that reads the run's working state for the briefing."""
        return cls(
            panel=state.panel,
            classes=state.classes,
            changes=state.results.get("changes"),
            clusters=state.results.get("clusters"),
            whatsnew=state.results.get("whatsnew"),
            findings=tuple(state.findings),
            notice=state.notice,
            folder=state.staging,
            spec=state.section(BriefSpec, "brief"),
            previous=state.run.previous,
            rebreak=state.run.rebreak,
        )

    @property
    def view(self) -> str:
        """The line naming the values' view ('' for values as read)."""
        return getattr(self.panel.meta, "view", "") or ""

    @property
    def trends_skipped(self) -> bool:
        """Too few periods for per-unit trends: no trend map, slide or sentences."""
        if self.clusters is not None:
            need = self.clusters.options.min_periods
        else:
            from mapdrift.clusters import ClusterOptions

            need = ClusterOptions().min_periods
        return self.panel.n_periods < max(need, 3)

    def __repr__(self) -> str:
        parts = [p for p, r in (("changes", self.changes), ("clusters", self.clusters)) if r]
        return (
            f"<BriefInputs: {self.panel.n_units:,} units x {self.panel.n_periods} periods; "
            f"{', '.join(parts) or 'maps only'}; pictures from {self.folder}>"
        )
