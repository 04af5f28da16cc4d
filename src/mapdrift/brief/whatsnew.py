"""What is new since the previous run: new jumps, cluster entries/exits, trends, findings.

The previous run is read back from its folder (``jumps.csv``, ``cluster_changes.csv``,
``trends.csv``, ``findings.json``). An event is new when the previous run did not list it: a
jump is keyed by (unit, from period, to period, direction), a cluster event by (unit, kind,
period), a trend by (unit, direction) among significant trends; findings by (code, unit).

:meth:`WhatsNew.bullets` words the news for people (long lists cut at "... (7 in all)");
:meth:`WhatsNew.records` gives scripts every item in full, one dict each with the same keys
(``kind``, ``unit``, ``name``, ``what``, ``from``, ``to``, plus details of the kind), and
:meth:`WhatsNew.to_json` is the content of ``whats_new.json``. A new kind of news adds a table
field and its records in :meth:`WhatsNew.records`; the keys above stay.
"""

from __future__ import annotations

import json
import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Any

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
#: The states before and after each cluster event, for whats_new.json's ``from`` and ``to``.
_EVENT_STATES: dict[str, tuple[str, str]] = {
    "joined_high_cluster": ("not high-high", "high-high"),
    "left_high_cluster": ("high-high", "not high-high"),
    "joined_low_cluster": ("not low-low", "low-low"),
    "left_low_cluster": ("low-low", "not low-low"),
}


def _plain(x: Any) -> Any:
    """A JSON-safe scalar: numpy numbers to Python, NaN to None."""
    if hasattr(x, "item"):
        x = x.item()
    if isinstance(x, float) and not math.isfinite(x):
        return None
    return x


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
    finding_items: tuple[dict[str, Any], ...] = field(default=())

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
                where = [
                    f"{self._who(u)} ({p}"
                    + (", small base: unstable)" if u in self.small_base else ")")
                    for u, p in zip(ev["unit"], ev["period"])
                ]
                out.append(
                    f"{plural(ev['unit'].nunique(), 'unit')} newly {words}: {examples(where)}."
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

    def records(self) -> list[dict[str, Any]]:
        """Every news item in full (no list is cut), one dict each, for scripts.

        Keys common to every kind: ``kind`` (jump, cluster, trend, trend-ended, finding),
        ``unit``, ``name``, ``what`` (a few words), ``from`` and ``to`` (the state before and
        after: a period/class/value dict for jumps, a cluster state, a trend direction; None for
        findings, which list their ``units`` instead).
        """
        out: list[dict[str, Any]] = []
        for r in self.new_jumps.to_dict("records") if len(self.new_jumps) else ():
            unit = str(r["unit"])
            ends = {}
            for end, when, cls, label, value in (
                ("from", "from_period", "from_class", "from_label", "value_before"),
                ("to", "to_period", "to_class", "to_label", "value_after"),
            ):
                ends[end] = {
                    "period": str(r.get(when, "")),
                    "class": _plain(r.get(cls)),
                    "label": _plain(r.get(label)),
                    "value": _plain(r.get(value)),
                }
            size = _plain(r.get("size"))
            out.append(
                {
                    "kind": "jump",
                    "unit": unit,
                    "name": self.names.get(unit, _plain(r.get("name")) or unit),
                    "what": f"jumped {r.get('direction', '')} {abs(int(size or 0))} classes",
                    **ends,
                    "size": size,
                    "spike": bool(r.get("spike", False)),
                    "small_base": unit in self.small_base,
                    # the count-noise test of the jump, when the run made one
                    **{c: _plain(r[c]) for c in ("p", "p_adjusted", "credible") if c in r},
                }
            )
        for unit, event, period in self.cluster_events.itertuples(index=False):
            before, after = _EVENT_STATES.get(event, ("", ""))
            out.append(
                {
                    "kind": "cluster",
                    "unit": str(unit),
                    "name": self.names.get(str(unit), str(unit)),
                    "what": CLUSTER_EVENTS.get(event, event),
                    "from": before,
                    "to": after,
                    "event": event,
                    "period": str(period),
                }
            )
        for r in self.new_trends.to_dict("records") if len(self.new_trends) else ():
            unit = str(r["unit"])
            out.append(
                {
                    "kind": "trend",
                    "unit": unit,
                    "name": self.names.get(unit, unit),
                    "what": f"new significant {r['direction']} trend",
                    "from": r.get("before", "no significant trend"),
                    "to": r["direction"],
                    "theil_sen_slope": _plain(r.get("theil_sen_slope")),
                }
            )
        for unit, direction in zip(self.ended_trends["unit"], self.ended_trends["direction"]):
            out.append(
                {
                    "kind": "trend-ended",
                    "unit": str(unit),
                    "name": self.names.get(str(unit), str(unit)),
                    "what": f"{direction} trend no longer significant",
                    "from": direction,
                    "to": "no significant trend",
                }
            )
        out.extend(dict(item) for item in self.finding_items)
        return out

    def to_json(self) -> dict[str, Any]:
        """The content of ``whats_new.json``: the sentences, counts per kind and every item."""
        items = self.records()
        counts: dict[str, int] = {}
        for item in items:
            counts[item["kind"]] = counts.get(item["kind"], 0) + 1
        return {
            "previous": previous_name(self.previous),
            "previous_periods": list(self.previous_periods),
            "news": self.bullets(),
            "counts": counts,
            "items": items,
        }


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


def _finding_news(
    prev_findings: list[dict], findings: Sequence[Finding]
) -> tuple[list[str], list[dict[str, Any]]]:
    """Sentences and full records of the data findings that are new, newly name units, or are
    resolved since the previous run."""
    before: dict[str, set[str]] = {}
    levels: dict[str, str] = {}
    for f in prev_findings:
        before.setdefault(f["code"], set()).update(f.get("units", []))
        levels[f["code"]] = f.get("level", "")
    out: list[str] = []
    items: list[dict[str, Any]] = []

    def item(f_code: str, level: str, what: str, units: Sequence[str], message: str) -> None:
        items.append(
            {"kind": "finding", "unit": None, "name": None, "what": what, "from": None,
             "to": None, "code": f_code, "level": level, "units": list(units), "message": message}
        )  # fmt: skip

    for f in findings:
        if f.level == "note":
            continue
        if f.code not in before:
            out.append(f"New data finding ({f.code}): {f.message}")
            item(f.code, f.level, "new data finding", f.units, f.message)
            continue
        new_units = [u for u in f.units if u not in before[f.code]]
        if new_units:
            out.append(f"Newly named in a data check ({f.code}): {examples(new_units)}.")
            item(f.code, f.level, "newly named in a data check", new_units, f.message)
    now = {f.code for f in findings}
    for code in sorted(set(before) - now):
        out.append(f"Resolved since the previous run: {code}.")
        item(
            code, levels.get(code, ""), "resolved since the previous run", sorted(before[code]), ""
        )
    return out, items


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
        if prev_tr is not None and len(new_trends):  # the state before, for whats_new.json
            was = dict(zip(prev_tr["unit"].astype(str), prev_tr["direction"].astype(str)))
            new_trends["before"] = [
                was.get(u, "not in the previous run") for u in new_trends["unit"].astype(str)
            ]
        ended = pd.DataFrame(sorted(prev_sig - now_sig), columns=["unit", "direction"])
    prev_findings = []
    fpath = previous / "findings.json"
    if fpath.exists():
        prev_findings = json.loads(fpath.read_text(encoding="utf-8"))
    finding_text, finding_items = _finding_news(prev_findings, findings)
    return WhatsNew(
        previous=previous,
        previous_periods=periods,
        new_jumps=new_jumps,
        cluster_events=cluster_events,
        new_trends=new_trends,
        ended_trends=ended,
        findings=tuple(finding_text),
        small_base=small,
        names=dict(names or {}),
        finding_items=tuple(finding_items),
    )
