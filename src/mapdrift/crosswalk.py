"""Moving values from one boundary vintage onto another with a crosswalk (from, to, weight).

Counts are allocated: ``new[to] = sum(weight * old[from])`` (weights are the share of the old
unit that falls in the new one, e.g. by households or area). Rates and other values without
counts are averaged: ``new[to] = sum(w * v) / sum(w)`` over the old units with a value, which is
exact for splits and an approximation for merges (reported). Units split or merged are reported
as findings; IDs the crosswalk does not name pass through unchanged.
"""

from __future__ import annotations

from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np

from mapdrift.cells import decide_decimal, decimal_evidence, read_table, to_numbers
from mapdrift.errors import InputError
from mapdrift.findings import Finding, examples, plural
from mapdrift.ids import normalise

if TYPE_CHECKING:
    import pandas as pd

__all__ = ["apply_crosswalk", "read_crosswalk"]


def read_crosswalk(path: Path) -> pd.DataFrame:
    """Read ``from,to,weight`` (any column order; ``weight`` optional, default 1)."""
    df = read_table(path)
    cols = {c.lower(): c for c in df.columns}
    missing = [c for c in ("from", "to") if c not in cols]
    if missing:
        raise InputError(
            f"{path}: a crosswalk needs columns from, to and (optionally) weight; missing "
            f"{', '.join(missing)}; columns are {examples(list(df.columns))}"
        )
    out = df[[cols["from"], cols["to"]]].copy()
    out.columns = ["from", "to"]
    out["from"] = normalise(out["from"])
    out["to"] = normalise(out["to"])
    if "weight" in cols:
        ev = decimal_evidence({"weight": df[cols["weight"]]})
        mark = decide_decimal(ev, where=path.name, sep=df.attrs.get("sep", ","), given=None)
        w, findings = to_numbers(df[cols["weight"]], where=path.name, column="weight", decimal=mark)
        if findings or np.isnan(w).any():
            raise InputError(
                f"{path}: every crosswalk weight must be a number; found blanks or text"
            )
        if (w < 0).any():
            raise InputError(
                f"{path}: crosswalk weights must not be negative (e.g. {examples(w[w < 0])})"
            )
        out["weight"] = w
    else:
        out["weight"] = 1.0
    return out


def apply_crosswalk(
    long: pd.DataFrame, xwalk: pd.DataFrame, roles: list[str], *, counts: bool, where: str
) -> tuple[pd.DataFrame, list[Finding]]:
    """Re-key ``long`` rows (``id``, ``period``, value columns ``roles``) onto the new vintage."""
    import pandas as pd

    findings: list[Finding] = []
    n_to = xwalk.groupby("from")["to"].nunique()
    n_from = xwalk.groupby("to")["from"].nunique()
    split = sorted(n_to[n_to > 1].index)
    merged = sorted(n_from[n_from > 1].index)
    named = set(xwalk["from"])
    unmatched = sorted(set(long["id"]) - named)
    hit = long[long["id"].isin(named)].merge(xwalk, left_on="id", right_on="from", how="inner")
    if counts:
        for r in roles:
            hit[r] = hit[r] * hit["weight"]
        moved = hit.groupby(["to", "period"], as_index=False)[roles].sum(min_count=1)
    else:
        parts = {}
        for r in roles:
            ok = hit[r].notna()
            num = (hit[r].where(ok, 0.0) * hit["weight"]).groupby([hit["to"], hit["period"]]).sum()
            den = hit["weight"].where(ok, 0.0).groupby([hit["to"], hit["period"]]).sum()
            parts[r] = num / den.replace(0, np.nan)
        moved = pd.DataFrame(parts).reset_index()
    moved = moved.rename(columns={"to": "id"})
    passthrough = long[~long["id"].isin(named)][["id", "period", *roles]]
    out = pd.concat([moved, passthrough], ignore_index=True)
    period_text = long.drop_duplicates("period").set_index("period")["period_text"]
    out["period_text"] = out["period"].map(period_text)
    findings.append(
        Finding(
            "note",
            "crosswalk-applied",
            f"{where}: values moved onto the new boundaries ({'counts allocated by weight' if counts else 'values averaged by weight'}); "
            f"{plural(len(split), 'old unit')} split, {plural(len(merged), 'new unit')} merged from several",
            tuple(merged),
        )
    )
    if split:
        findings.append(
            Finding(
                "note",
                "crosswalk-split",
                f"{where}: old units split across new ones: {examples(split)}",
                tuple(split),
            )
        )
    if merged:
        msg = f"{where}: new units merged from several old ones: {examples(merged)}"
        if not counts:
            msg += "; their values are weighted averages (give counts with --numerator/--denominator to allocate exactly)"
        findings.append(
            Finding("warning" if not counts else "note", "crosswalk-merged", msg, tuple(merged))
        )
    if unmatched:
        findings.append(
            Finding(
                "note",
                "crosswalk-passthrough",
                f"{where}: {plural(len(unmatched), 'table ID')} not in the crosswalk kept as they are: {examples(unmatched)}",
                tuple(unmatched),
            )
        )
    return out, findings
