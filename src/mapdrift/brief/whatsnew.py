"""What is new since the previous run: new jumps, cluster entries/exits, trends, findings.

The previous run is read back from its folder (``jumps.csv``, ``cluster_changes.csv``,
``trends.csv``, ``findings.json``). An event is new when the previous run did not list it: a
jump is keyed by (unit, from period, to period, direction), a cluster event by (unit, kind,
period), a trend by (unit, direction) among significant trends; findings by (code, unit).
"""

from __future__ import annotations

import json
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING

from mapdrift.errors import InputError
from mapdrift.findings import Finding, examples, plural, units_of
from mapdrift.outputs import read_csv

if TYPE_CHECKING:
    import pandas as pd

__all__ = ["CLUSTER_EVENTS", "WhatsNew", "compare_runs", "previous_name"]

#: cluster_changes.csv columns that list periods of an event, and how the report words them.
CLUSTER_EVENTS: dict[str, str] = {
    "joined_high_cluster": "entered a high-high cluster",
    "left_high_cluster": "left a high-high cluster",
    "joined_low_cluster": "entered a low-low cluster",
    "left_low_cluster": "left a low-low cluster",
}


@dataclass(frozen=True)
class WhatsNew:
    """The differences, each a small table (empty when nothing is new)."""

    previous: Path
    previous_periods: tuple[str, ...]
    new_jumps: pd.DataFrame
    cluster_events: pd.DataFrame
    new_trends: pd.DataFrame
    ended_trends: pd.DataFrame
    findings: tuple[str, ...] = field(default=())
    small_base: frozenset[str] = field(default=frozenset())
    names: dict[str, str] = field(default_factory=dict)

    def _who(self, unit: str) -> str:
        name = self.names.get(unit, "")
        return f"{unit} {name}" if name and name != unit else unit

    def bullets(self) -> list[str]:
        """One sentence per kind of news, for the report and the slide."""
        out = []
        if len(self.new_jumps):
            ex = [
                f"{self._who(r.unit)} ({r.from_period}→{r.to_period}, {r.direction} {abs(int(r.size))}"
                + (", small base: unstable)" if r.unit in self.small_base else ")")
                for r in self.new_jumps.itertuples()
            ]
            out.append(f"{plural(len(self.new_jumps), 'new jump')}: {examples(ex)}.")
        else:
            out.append("No new jumps.")
        for kind, words in CLUSTER_EVENTS.items():
            ev = (
                self.cluster_events[self.cluster_events["event"] == kind]
                if len(self.cluster_events)
                else self.cluster_events
            )
            if len(ev):
                out.append(
                    f"{plural(ev['unit'].nunique(), 'unit')} newly {words}: {examples([f'{self._who(u)} ({p})' for u, p in zip(ev['unit'], ev['period'])])}."
                )
        if len(self.new_trends):
            ex = [
                f"{self._who(u)} ({d})"
                for u, d in zip(self.new_trends["unit"], self.new_trends["direction"])
            ]
            out.append(f"{plural(len(self.new_trends), 'new significant trend')}: {examples(ex)}.")
        if len(self.ended_trends):
            out.append(
                f"{plural(len(self.ended_trends), 'trend')} no longer significant: {examples([self._who(u) for u in self.ended_trends['unit']])}."
            )
        out.extend(self.findings)
        return out


def previous_name(previous: Path | None) -> str:
    """A short name for the previous run in outputs: its folder relative to here, else its name
    (no absolute local paths in a briefing that travels)."""
    if previous is None:
        return ""
    folder = previous.parent if previous.suffix == ".json" else previous
    try:
        return folder.resolve().relative_to(Path.cwd().resolve()).as_posix()
    except ValueError:
        return folder.name


def _read(prev: Path, name: str) -> pd.DataFrame | None:
    path = prev / name
    if not path.exists():
        return None
    return read_csv(path, dtype={"unit": str, "from_period": str, "to_period": str})


def _empty(columns: Sequence[str]) -> pd.DataFrame:
    import pandas as pd

    return pd.DataFrame({c: [] for c in columns})


def _events(df: pd.DataFrame | None) -> set[tuple[str, str, str]]:
    out: set[tuple[str, str, str]] = set()
    if df is None:
        return out
    for kind in CLUSTER_EVENTS:
        if kind not in df.columns:
            continue
        cells = df[kind].astype(object).where(df[kind].notna(), "").astype(str)
        for unit, cell in zip(df["unit"].astype(str), cells):
            for period in filter(None, cell.split(";")):
                out.add((unit, kind, period))
    return out


def _finding_news(prev_findings: list[dict], findings: Sequence[Finding]) -> list[str]:
    before: dict[str, set[str]] = {}
    for f in prev_findings:
        before.setdefault(f["code"], set()).update(f.get("units", []))
    out = []
    for f in findings:
        if f.level == "note":
            continue
        if f.code not in before:
            out.append(f"New data finding ({f.code}): {f.message}")
            continue
        new_units = [u for u in f.units if u not in before[f.code]]
        if new_units:
            out.append(f"Newly named in a data check ({f.code}): {examples(new_units)}.")
    now = {f.code for f in findings}
    for code in sorted(set(before) - now):
        out.append(f"Resolved since the previous run: {code}.")
    return out


def compare_runs(
    previous: Path,
    *,
    jumps: pd.DataFrame,
    cluster_changes: pd.DataFrame | None,
    trends: pd.DataFrame | None,
    findings: Sequence[Finding],
    names: Mapping[str, str] | None = None,
) -> WhatsNew:
    """Compare this run's tables with the previous run's folder."""
    import pandas as pd

    previous = Path(previous)
    if previous.is_file():
        previous = previous.parent
    if not previous.is_dir():
        raise InputError(
            f"previous run {previous} not found; point `previous` at last year's run folder"
        )
    periods: tuple[str, ...] = ()
    manifest = previous / "manifest.json"
    if manifest.exists():
        periods = tuple(
            json.loads(manifest.read_text(encoding="utf-8"))
            .get("parameters", {})
            .get("periods", ())
        )
    prev_jumps = _read(previous, "jumps.csv")
    key = ["unit", "from_period", "to_period", "direction"]
    cur = jumps.astype({"unit": str, "from_period": str, "to_period": str}) if len(jumps) else jumps
    if len(cur) and "credible" in cur.columns:  # moves within count noise are not news
        cur = cur[cur["credible"].astype(str).str.lower() != "false"]
    if prev_jumps is not None and len(cur):
        seen = set(map(tuple, prev_jumps[key].astype(str).to_numpy()))
        mask = [tuple(map(str, r)) not in seen for r in cur[key].to_numpy()]
        new_jumps = cur[mask]
    else:
        new_jumps = cur.reset_index(drop=True) if len(cur) else _empty(key)
    small = units_of(findings, "rates-small-base")
    if len(new_jumps):  # the clearest news leads: reliable bases first, then the largest moves
        order = new_jumps.assign(_small=new_jumps["unit"].isin(small), _abs=new_jumps["size"].abs())
        order = order.sort_values(
            ["_small", "_abs", "to_period", "unit"], ascending=[True, False, False, True]
        )
        new_jumps = order.drop(columns=["_small", "_abs"]).reset_index(drop=True)
    old_ev = _events(_read(previous, "cluster_changes.csv"))
    now_ev = _events(cluster_changes)
    ev_rows = sorted(now_ev - old_ev, key=lambda t: (t[2], t[1], t[0]))
    cluster_events = pd.DataFrame(ev_rows, columns=["unit", "event", "period"])
    new_trends = _empty(["unit", "direction", "theil_sen_slope"])
    ended = _empty(["unit", "direction"])
    prev_tr = _read(previous, "trends.csv")
    if trends is not None:
        sig = trends[trends["significant"].astype(bool)]
        prev_sig: set[tuple[str, str]] = set()
        if prev_tr is not None:
            ps = prev_tr[prev_tr["significant"].astype(str).str.lower() == "true"]
            prev_sig = set(zip(ps["unit"].astype(str), ps["direction"].astype(str)))
        now_sig = set(zip(sig["unit"].astype(str), sig["direction"].astype(str)))
        new_trends = sig[
            [
                (u, d) not in prev_sig
                for u, d in zip(sig["unit"].astype(str), sig["direction"].astype(str))
            ]
        ]
        new_trends = new_trends[
            [c for c in ("unit", "name", "direction", "theil_sen_slope") if c in sig.columns]
        ].reset_index(drop=True)
        ended = pd.DataFrame(sorted(prev_sig - now_sig), columns=["unit", "direction"])
    prev_findings = []
    fpath = previous / "findings.json"
    if fpath.exists():
        prev_findings = json.loads(fpath.read_text(encoding="utf-8"))
    return WhatsNew(
        previous=previous,
        previous_periods=periods,
        new_jumps=new_jumps,
        cluster_events=cluster_events,
        new_trends=new_trends,
        ended_trends=ended,
        findings=tuple(_finding_news(prev_findings, findings)),
        small_base=small,
        names=dict(names or {}),
    )
