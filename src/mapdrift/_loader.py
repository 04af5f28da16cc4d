"""``load_panel``'s work: read the layer and table, reshape, match IDs, validate, build the Panel.

Kept apart from :mod:`mapdrift.panel` (the data model) so that importing the model stays light.
Every step returns findings; error-level findings raise :class:`~mapdrift.errors.InputError`
with the first error's message.
"""

from __future__ import annotations

import logging
import re
import warnings
from collections.abc import Sequence
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np

from mapdrift.cells import read_table, to_numbers
from mapdrift.errors import ConfigError, InputError
from mapdrift.findings import Finding, examples, plural, raise_errors
from mapdrift.geo import prepare_geometry, read_layer
from mapdrift.ids import closest, normalise_ids, pad_ids
from mapdrift.panel import InputSpec, Panel, PanelMeta
from mapdrift.periods import find_year, missing_periods, parse_periods

if TYPE_CHECKING:
    import pandas as pd

__all__ = ["detect_zero_block", "load"]

log = logging.getLogger(__name__)
_ID_GUESSES = ("unit_id", "id", "geoid", "fid_code", "code")
_NAME_GUESSES = ("name", "unit_name", "label")


def _units_with(mask: np.ndarray, units: Sequence[str]) -> tuple[str, ...]:
    """IDs of the units with any True cell in a ``[units, periods]`` mask (for findings)."""
    return tuple(units[i] for i in np.flatnonzero(mask.any(axis=1)))


def _column(df: pd.DataFrame, col: str, where: Path, flag: str) -> str:
    if col in df.columns:
        return col
    lower = {c.lower(): c for c in df.columns}
    if col.lower() in lower:
        return lower[col.lower()]
    import difflib

    hint = difflib.get_close_matches(col, list(df.columns), n=1)
    cols = examples([c for c in df.columns if c != "geometry"], 8)
    raise InputError(
        f"{where}: no column {col!r} ({flag}); "
        + (f"did you mean {hint[0]!r}? " if hint else "")
        + f"columns are {cols}"
    )


def _guess(df: pd.DataFrame, guesses: tuple[str, ...]) -> str | None:
    lower = {c.lower(): c for c in df.columns}
    for g in guesses:
        if g in lower:
            return lower[g]
    return None


def _wide_columns(df: pd.DataFrame, pattern: str, where: Path, flag: str) -> dict[str, str]:
    """Columns matching a glob pattern -> the period text (the part matched by ``*``)."""
    if "*" not in pattern:
        raise ConfigError(f"{flag} {pattern!r} must contain '*' where the period is, e.g. 'rate_*'")
    rx = re.compile("^" + re.escape(pattern).replace(r"\*", "(.+)") + "$")
    out = {}
    for c in df.columns:
        m = rx.match(c)
        if m:
            out[c] = m.group(1)
    if not out:
        raise InputError(
            f"{where}: no column matches {flag} {pattern!r}; columns are {examples(list(df.columns), 8)}"
        )
    return out


def _auto_year_columns(df: pd.DataFrame, skip: set[str], where: Path) -> dict[str, str]:
    cols = {c: find_year(c) for c in df.columns if c not in skip}
    cols = {c: y for c, y in cols.items() if y is not None}
    if not cols:
        raise InputError(
            f"{where}: found no period columns; pass --period COL --value COL for a long table or "
            "--columns 'PATTERN_*' for a wide one"
        )
    stems = {c.replace(y, "*") for c, y in cols.items()}
    if len(stems) > 1:
        raise InputError(
            f"{where}: columns carrying a year have several patterns ({examples(sorted(stems))}); "
            "choose one with --columns, or --numerator/--denominator patterns for counts"
        )
    return cols


def _long_from_wide(
    df: pd.DataFrame, id_col: str, patterns: dict[str, str], where: Path, flags: dict[str, str]
) -> pd.DataFrame:
    """Stack wide columns into long rows: id, period_text, one column per role."""
    import pandas as pd

    parts = {}
    for role, pattern in patterns.items():
        cols = _wide_columns(df, pattern, where, flags[role]) if pattern != "__auto__" else None
        if cols is None:
            cols = _auto_year_columns(df, {id_col}, where)
        m = df[[id_col, *cols]].melt(id_vars=id_col, var_name="_col", value_name=role)
        m["period_text"] = m["_col"].map(cols)
        parts[role] = m.drop(columns="_col").set_index([id_col, "period_text"])
    out = pd.concat(parts.values(), axis=1, join="outer").reset_index()
    return out.rename(columns={id_col: "id"}).fillna("")


def _append_tables(
    df: pd.DataFrame, first: Path, more: tuple[Path, ...], *, wide_id: str | None = None
) -> pd.DataFrame:
    """Stack further tables (e.g. next year's release) below the first.

    Long tables need the same columns. Wide tables (``wide_id``, the ID column, given) may hold
    only the ID and the new periods' columns, as a new release usually does: they are stacked
    with the union of columns, and the blank cells that only fill the other tables' columns are
    dropped once the rows are long (:func:`_drop_fill`).
    """
    import pandas as pd

    parts = [df]
    for path in more:
        extra = read_table(path)
        if wide_id is not None:
            col = _column(extra, wide_id, path, "--id")
            if len(extra.columns) < 2:
                raise InputError(f"{path}: appended table holds only the ID column {col!r}")
            parts.append(extra.rename(columns={col: wide_id}))
            continue
        missing = [c for c in df.columns if c not in extra.columns]
        if missing:
            raise InputError(
                f"{path}: appended table lacks columns of {first.name}: {examples(missing)}; "
                "appended tables need the same columns"
            )
        parts.append(extra[list(df.columns)])
    out = pd.concat(parts, ignore_index=True)
    return out.fillna("") if wide_id is not None else out


def _drop_fill(long: pd.DataFrame, roles: list[str]) -> pd.DataFrame:
    """Rows of side-by-side wide tables whose cells are all blank only because another table
    holds that (unit, period): dropped, keeping a blank row where no table has a value."""
    blank = (long[roles] == "").all(axis=1)
    key = long[["id", "period_text"]].assign(_blank=blank).sort_values("_blank", kind="stable")
    filler = key["_blank"] & key.duplicated(["id", "period_text"], keep="first")
    return long.drop(index=key.index[filler.to_numpy()])


def detect_zero_block(
    values: np.ndarray,
    units: tuple[str, ...],
    labels: tuple[str, ...],
    *,
    denominator: np.ndarray | None = None,
    per: float = 1000.0,
) -> Finding | None:
    """Flag exact zeros that look like a not-reported code rather than real zeros.

    Three signs, any of which flags (rules are common practice, no source):
    - gap: >= 3 zeros and the smallest non-zero value is at least a quarter of the non-zero
      median and more than 3 robust SDs (1.4826 x MAD) above zero;
    - implausible counts (when values are rates from counts): a zero count where the unit's own
      median rate in its other periods times the base expects >= 5 events (Poisson P(0) < 0.7 %);
    - isolated drops: a zero in a unit whose other periods (at least 3) are all above zero.
    The last two flag only when >= 3 zeros qualify and at least half fall in one period (a block).
    """
    zeros = values == 0
    n0 = int(zeros.sum())
    if n0 < 3:
        return None
    x = values[np.isfinite(values)]
    nz = x[x != 0]
    reason = ""
    suspect = np.zeros_like(zeros)
    if nz.size >= 10 and not (nz < 0).any():
        med = float(np.median(nz))
        mad = 1.4826 * float(np.median(np.abs(nz - med)))
        if float(nz.min()) >= 0.25 * med and (mad == 0 or med / mad > 3):
            suspect = zeros.copy()
            reason = f"all {n0} sit far below the smallest non-zero value, {nz.min():.3g} (median {med:.3g})"
    if not reason:
        others = np.where(zeros | ~np.isfinite(values), np.nan, values)
        with np.errstate(all="ignore"), warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)
            unit_med = (
                np.nanmedian(others, axis=1)
                if np.isfinite(others).any()
                else np.full(len(values), np.nan)
            )
            unit_min = np.nanmin(np.where(np.isfinite(others), others, np.inf), axis=1)
        n_other = np.isfinite(others).sum(axis=1)
        if denominator is not None:
            expected = unit_med[:, None] * denominator / per
            implausible = zeros & (expected >= 5)
            kind = "zero counts where the unit's own rate and base expect 5 or more"
        else:
            implausible = zeros & ((n_other >= 3) & (unit_min > 0))[:, None]
            kind = "zeros in units whose other periods are all above zero"
        per_period = implausible.sum(axis=0)
        top = int(np.argmax(per_period)) if per_period.size else 0
        if implausible.sum() >= 3 and per_period[top] >= 0.5 * implausible.sum():
            suspect = implausible
            reason = f"{int(implausible.sum())} of the {n0} exact zeros are {kind}"
    if not reason:
        return None
    per_period = suspect.sum(axis=0)
    top = int(np.argmax(per_period))
    affected = _units_with(suspect, units)
    where = (
        f"; {int(per_period[top])} of them in {labels[top]}"
        if per_period[top] >= 0.5 * suspect.sum()
        else ""
    )
    return Finding(
        "warning",
        "values-zero-block",
        f"exact zeros that look like a missing-value code: {reason}{where} "
        f"(units {examples(affected)}); if 0 means 'not reported' there, blank those cells in the source (or pass --missing 0, [inputs] missing = [0] in a config, if every 0 is such a code)",
        affected,
    )


def load(spec: InputSpec) -> Panel:
    """Read, align and validate a panel; see :func:`mapdrift.panel.load_panel`."""
    findings: list[Finding] = []
    gpath = spec.geometry
    gdf = read_layer(gpath, spec.layer)
    id_col = spec.id or _guess(gdf, _ID_GUESSES)
    if id_col is None:
        raise InputError(
            f"{gpath}: which column holds the unit IDs? pass --id; columns are "
            f"{examples([c for c in gdf.columns if c != 'geometry'], 8)}"
        )
    id_col = _column(gdf, id_col, gpath, "--id")
    layer_ids = normalise_ids(gdf[id_col].tolist())
    if spec.id_width:
        layer_ids = [i.zfill(spec.id_width) if i.isdigit() else i for i in layer_ids]
    blank = [i for i, u in enumerate(layer_ids) if u == ""]
    if blank:
        raise InputError(
            f"{gpath}: {len(blank)} features have no ID in {id_col!r} (rows {examples(blank)}); "
            "every polygon needs an ID"
        )
    seen: dict[str, int] = {}
    for u in layer_ids:
        seen[u] = seen.get(u, 0) + 1
    dups = [u for u, c in seen.items() if c > 1]
    if dups:
        raise InputError(
            f"{gpath}: {len(dups)} IDs in {id_col!r} occur more than once (e.g. {examples(dups)}); "
            "each polygon needs its own ID (dissolve or renumber the duplicates)"
        )
    name_col = spec.name or _guess(gdf, _NAME_GUESSES)
    if name_col is not None:
        name_col = _column(gdf, name_col, gpath, "--name")
        names = tuple(
            str(n) if n is not None and str(n) not in ("", "nan") else u
            for n, u in zip(gdf[name_col].tolist(), layer_ids)
        )
    else:
        names = tuple(layer_ids)

    gdf, geo_findings = prepare_geometry(gdf, layer_ids, gpath, crs=spec.crs, map_crs=spec.map_crs)
    findings += geo_findings

    # -- the values table, as long rows of text ------------------------------------------
    if spec.table is not None:
        tpath = spec.table
        df = read_table(tpath)
        if spec.append:
            wide_id = None
            if not spec.period:  # wide: a new release may hold only the new periods' columns
                flag = "--table-id" if spec.table_id else "--id"
                wide_id = _column(df, spec.table_id or id_col, tpath, flag)
            df = _append_tables(df, tpath, spec.append, wide_id=wide_id)
        t_id = _column(
            df, spec.table_id or id_col, tpath, "--table-id" if spec.table_id else "--id"
        )
    else:
        tpath = gpath
        df = gdf.drop(columns=gdf.geometry.name).copy()
        df = df.astype(object).where(df.notna(), "")
        df[id_col] = layer_ids
        t_id = id_col
    # the name findings use for the values' source: the table and any appended tables
    tname = " + ".join(p.name for p in (tpath, *(spec.append if spec.table is not None else ())))
    roles: dict[str, str] = {}
    if spec.numerator or spec.denominator:
        if not (spec.numerator and spec.denominator):
            raise ConfigError("rates need both --numerator and --denominator")
        roles = {"num": spec.numerator, "den": spec.denominator}
        if spec.value:
            raise ConfigError("give either --value or --numerator/--denominator, not both")
    flags = {"value": "--columns", "num": "--numerator", "den": "--denominator"}
    if spec.period:
        if not roles and not spec.value:
            raise ConfigError(
                "a long table needs --value COL (or --numerator and --denominator) with --period"
            )
        p_col = _column(df, spec.period, tpath, "--period")
        cols = {"value": spec.value} if spec.value else roles
        cols = {
            r: _column(df, c, tpath, flags.get(r, "--value") if r != "value" else "--value")
            for r, c in cols.items()
        }
        long = df[[t_id, p_col, *cols.values()]].copy()
        long.columns = ["id", "period_text", *cols.keys()]
    else:
        if spec.columns:
            patterns = {"value": spec.columns}
        elif roles:
            patterns = dict(roles)
        else:
            patterns = {"value": "__auto__"}
        long = _long_from_wide(df, t_id, patterns, tpath, flags)
    long["id"] = normalise_ids(long["id"].tolist())
    long["period_text"] = [str(p).strip() for p in long["period_text"]]

    for col, code, what in (
        ("id", "ids-blank-rows", "unit ID"),
        ("period_text", "periods-blank-rows", "period"),
    ):
        blank = long[col] == ""
        if blank.any():  # rows that cannot be placed are counted, never dropped silently
            msg = f"{tname}: {plural(int(blank.sum()), 'row')} with no {what} left out"
            findings.append(Finding("warning", code, msg))
            long = long[~blank]
    if spec.table is not None:
        padded, pad_findings = pad_ids(
            long["id"].tolist(), layer_ids, width=spec.id_width, where=tname
        )
        long["id"] = padded
        findings += pad_findings
        if spec.append and not spec.period:
            long = _drop_fill(long, [c for c in ("value", "num", "den") if c in long.columns])

    # -- numbers --------------------------------------------------------------------------
    ids_arr = long["id"].to_numpy()
    num_cols = [c for c in ("value", "num", "den") if c in long.columns]
    label = {
        "value": spec.value or spec.columns or "value",
        "num": spec.numerator,
        "den": spec.denominator,
    }
    for c in num_cols:
        nums, f = to_numbers(
            long[c], where=tname, column=str(label[c]), missing_codes=spec.missing, ids=ids_arr
        )
        long[c] = nums
        findings += f

    # -- periods --------------------------------------------------------------------------
    mapping = parse_periods(long["period_text"].tolist(), where=f"{tname} periods")
    long["period"] = long["period_text"].map(mapping)
    periods = tuple(sorted(set(mapping.values())))
    gaps = missing_periods(periods)
    if gaps:
        findings.append(
            Finding(
                "warning",
                "periods-gap",
                f"{tname}: the series has gaps: no data for {examples(gaps)}; changes across a gap "
                "are not bridged unless asked",
            )
        )

    # -- duplicates -----------------------------------------------------------------------
    dup = long.duplicated(["id", "period"], keep=False)
    if dup.any():
        pairs = long.loc[dup, ["id", "period_text"]].drop_duplicates()
        ex = examples([f"{a}/{b}" for a, b in pairs.itertuples(index=False)])
        if spec.duplicates == "error":
            raise InputError(
                f"{tpath}: {plural(len(pairs), '(unit, period) pair')} with more than one row (e.g. {ex}); "
                "fix the table or pass --duplicates first|mean|sum"
            )
        if spec.duplicates not in ("first", "mean", "sum"):
            raise ConfigError(
                f"--duplicates {spec.duplicates!r} must be one of error, first, mean, sum"
            )
        agg = {c: spec.duplicates for c in num_cols}
        long = long.groupby(["id", "period"], as_index=False, sort=False).agg(
            agg | {"period_text": "first"}
        )
        findings.append(
            Finding(
                "warning",
                "values-duplicates-combined",
                f"{tname}: {len(pairs)} (unit, period) pairs had several rows (e.g. {ex}); "
                f"combined by {spec.duplicates} (--duplicates)",
                tuple(pairs["id"].unique()),
            )
        )

    # -- boundary vintage -----------------------------------------------------------------
    if spec.crosswalk is not None:
        from mapdrift.crosswalk import apply_crosswalk, read_crosswalk

        xw = read_crosswalk(spec.crosswalk)
        xw["from"], f_from = pad_ids(
            xw["from"].tolist(), long["id"].tolist(), width=None, where=spec.crosswalk.name
        )
        xw["to"], f_to = pad_ids(
            xw["to"].tolist(), layer_ids, width=spec.id_width, where=spec.crosswalk.name
        )
        long, xf = apply_crosswalk(
            long, xw, num_cols, counts=bool(roles), where=spec.crosswalk.name
        )
        findings += f_from + f_to + xf

    # -- match IDs ------------------------------------------------------------------------
    layer_set = set(layer_ids)
    table_ids = list(dict.fromkeys(long["id"]))
    table_only = [u for u in table_ids if u not in layer_set]
    matched = [u for u in layer_ids if u in set(table_ids)]
    if spec.table is not None and len(matched) < 0.5 * len(layer_ids):
        hints = closest(table_only, layer_ids)
        hint = (
            "; closest layer IDs: " + ", ".join(f"{a} -> {b}?" for a, b in hints.items())
            if hints
            else ""
        )
        raise InputError(
            f"{tpath}: only {len(matched)} of {len(layer_ids)} layer units match a table ID (column "
            f"{t_id!r}: e.g. {examples(table_ids[:5])}; layer {id_col!r}: e.g. {examples(layer_ids[:5])})"
            f"{hint}; check --id/--table-id, or --id-width if leading zeros were lost"
        )
    if table_only:
        hints = closest(table_only, [u for u in layer_ids if u not in set(table_ids)] or layer_ids)
        hint = (
            " (closest layer IDs: " + ", ".join(f"{a} -> {b}?" for a, b in hints.items()) + ")"
            if hints
            else ""
        )
        rows = int(long["id"].isin(table_only).sum())
        findings.append(
            Finding(
                "warning",
                "ids-table-only",
                f"{tname}: {plural(len(table_only), 'table ID')} ({plural(rows, 'row')}) with no "
                f"polygon, not mapped: {examples(table_only, total=False)}{hint}; check for a "
                "boundary vintage change or typos",
                tuple(table_only),
            )
        )
        long = long[~long["id"].isin(table_only)]
    no_rows = [u for u in layer_ids if u not in set(table_ids)]
    if no_rows:
        findings.append(
            Finding(
                "warning",
                "units-no-values",
                f"layer units with no row in the table, kept and shown as no data: {examples(no_rows)} "
                f"({plural(len(no_rows), 'unit')})",
                tuple(no_rows),
            )
        )

    # -- to arrays ------------------------------------------------------------------------
    uidx = {u: i for i, u in enumerate(layer_ids)}
    pidx = {p: j for j, p in enumerate(periods)}
    rows = long["id"].map(uidx).to_numpy()
    cols = long["period"].map(pidx).to_numpy()
    shape = (len(layer_ids), len(periods))

    def grid(col: str) -> np.ndarray:
        g = np.full(shape, np.nan)
        g[rows, cols] = long[col].to_numpy(dtype=np.float64)
        return g

    numerator = denominator = None
    if roles:
        numerator, denominator = grid("num"), grid("den")
        values, rate_findings = _rates(numerator, denominator, spec, layer_ids)
        findings += rate_findings
    else:
        values = grid("value")

    # -- value checks ---------------------------------------------------------------------
    labels = tuple(str(p) for p in periods)
    neg = values < 0
    if neg.any():
        units_neg = _units_with(neg, layer_ids)
        findings.append(
            Finding(
                "warning",
                "values-negative",
                f"{int(neg.sum())} values are negative (units {examples(units_neg)}); rates should not be",
                units_neg,
            )
        )
    zf = detect_zero_block(values, tuple(layer_ids), labels, denominator=denominator, per=spec.per)
    if zf is not None:
        findings.append(zf)
    present = np.isfinite(values)
    partial = np.flatnonzero(present.any(axis=1) & ~present.all(axis=1))
    if partial.size:
        units_p = tuple(layer_ids[i] for i in partial)
        findings.append(
            Finding(
                "note",
                "values-missing",
                f"{len(units_p)} units miss values in some periods ({int((~present[partial]).sum())} "
                f"unit-periods, e.g. {examples(units_p)}); they are shown as no data there",
                units_p,
            )
        )
    all_missing = [labels[j] for j in np.flatnonzero(~present.any(axis=0))]
    if all_missing:
        findings.append(
            Finding(
                "warning", "periods-empty", f"periods with no value at all: {examples(all_missing)}"
            )
        )

    if not np.isfinite(values).any():
        what = "rates" if roles else f"column {str(label['value'])!r}"
        raise InputError(
            f"{tpath}: no usable number in {what}: every cell is missing or text (see the "
            "values-not-numeric counts with `mapdrift check --json`); check --value/--columns, "
            "and write decimals with a point (5.3, not 5,3)"
        )
    raise_errors(findings, InputError)

    def words(col: str | None) -> str:  # column names read as words in titles
        return str(col).replace("_", " ").replace("*", "").strip()

    variable = spec.variable or (
        f"{words(spec.numerator)} rate" if roles else words(spec.value or spec.columns or "value")
    )
    unit_label = spec.unit_label or (
        f"{words(spec.numerator)} per {spec.per:,g} {words(spec.denominator)}" if roles else ""
    )
    geometry = gdf.geometry.reset_index(drop=True)
    inputs = tuple(p for p in (gpath, spec.table, *spec.append, spec.crosswalk) if p is not None)
    log.info("loaded %d units x %d periods from %s", len(layer_ids), len(periods), examples(inputs))
    return Panel(
        units=tuple(layer_ids),
        periods=periods,
        values=values,
        geometry=geometry,
        names=names,
        findings=tuple(findings),
        meta=PanelMeta(variable=variable, unit_label=unit_label, source=spec.source or ""),
        numerator=numerator,
        denominator=denominator,
        inputs=inputs,
    )


def _rates(
    num: np.ndarray, den: np.ndarray, spec: InputSpec, units: list[str]
) -> tuple[np.ndarray, list[Finding]]:
    """Counts to rates per ``spec.per``; zero bases -> missing, small bases flagged."""
    findings: list[Finding] = []
    with np.errstate(divide="ignore", invalid="ignore"):
        rate = num / den * spec.per
    zero = den == 0
    if zero.any():
        uz = _units_with(zero, units)
        findings.append(
            Finding(
                "warning",
                "rates-zero-base",
                f"{int(zero.sum())} unit-periods have a zero {spec.denominator!r}; their rate is missing "
                f"(units {examples(uz)})",
                uz,
            )
        )
        rate[zero] = np.nan
    if (den < 0).any():
        findings.append(
            Finding(
                "warning",
                "rates-negative-base",
                f"{int((den < 0).sum())} values of {spec.denominator!r} are negative",
            )
        )
    small = (den > 0) & (den < spec.min_base)
    if small.any():
        us = _units_with(small, units)
        findings.append(
            Finding(
                "warning",
                "rates-small-base",
                f"{int(small.sum())} rates rest on fewer than {spec.min_base:g} {spec.denominator} "
                f"(units {examples(us)}); such rates are unstable — read them with care or smooth them (--smooth eb, [clusters] smooth = 'eb')",
                us,
            )
        )
    return rate, findings
