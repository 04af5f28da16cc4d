"""``load_panel``'s work, as a one-way chain of small stages.

::

    read (layer; table with its dialect sniffed once) -> long frame (id, period text, value | counts)
      -> ids (normalise, pad: vectorised, one pass)  -> periods (parsed once per distinct label)
      -> numbers (markers, sentinels, decimal marks) -> duplicates -> crosswalk -> match to layer
      -> rates (counts, bases, small-base flags)     -> Panel (aligned arrays, findings)

Each stage is a function from one plain value to the next that appends its findings to one list;
none calls back up the chain, and none loops in Python over table rows or units (pandas/numpy
column operations and hash joins only), so loading is O(n log n) in the number of rows.
:func:`load` enters the chain from files; :func:`load_frames` (``Panel.from_frames``) enters it at
the long-frame stage from a GeoDataFrame and a DataFrame. Error-level findings raise
:class:`~mapdrift.errors.InputError` with the first error's message.
"""

from __future__ import annotations

import logging
import re
import warnings
from collections.abc import Sequence
from dataclasses import dataclass, replace
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np

from mapdrift.cells import decide_decimal, decimal_evidence, distinct, read_table, to_numbers
from mapdrift.errors import ConfigError, InputError
from mapdrift.findings import Finding, examples, plural, raise_errors
from mapdrift.geo import prepare_geometry, read_layer
from mapdrift.ids import closest, locate, normalise, pad_ids, zfill
from mapdrift.panel import InputSpec, Panel, PanelMeta
from mapdrift.periods import distance, find_year, outlying, read_periods, spacing

if TYPE_CHECKING:
    import geopandas as gpd
    import pandas as pd

__all__ = ["detect_zero_block", "load", "load_frames"]

log = logging.getLogger(__name__)
_ID_GUESSES = ("unit_id", "id", "geoid", "fid_code", "code")
_NAME_GUESSES = ("name", "unit_name", "label")
_ROLES = ("value", "num", "den")


#: How to smooth small-base rates, in words true for every command that prints it: only
#: ``mapdrift clusters`` has ``--smooth``; ``mapdrift run`` takes it from its config or ``--set``.
SMOOTH_HINT = (
    "smooth them (`mapdrift clusters --smooth eb`; for `mapdrift run`, [clusters] "
    'smooth = "eb" in the config or --set clusters.smooth=eb)'
)


def _units_with(mask: np.ndarray, units: Sequence[str]) -> tuple[str, ...]:
    """IDs of the units with any True cell in a ``[units, periods]`` mask (for findings)."""
    return tuple(np.asarray(units, dtype=object)[mask.any(axis=1)].tolist())


# -- the values handed from stage to stage ----------------------------------------------------
@dataclass(frozen=True)
class Layer:
    """The polygon layer read: geometry (map CRS), normalised IDs, names, where it came from."""

    gdf: gpd.GeoDataFrame
    ids: np.ndarray
    names: tuple[str, ...]
    id_col: str
    where: str


@dataclass(frozen=True)
class Table:
    """The values as read: a frame of text (or typed) cells and the name findings use for it."""

    df: pd.DataFrame
    where: str
    path: Path | None
    id_col: str
    sep: str = ","
    from_layer: bool = False
    wide_append: bool = False  # wide tables side by side: drop the blank fill rows (drop_fill)


@dataclass(frozen=True)
class Long:
    """One row per (unit, period): ``id``, ``period_text`` and value columns ``roles``.

    After the ids stage the frame holds ``uid`` (each row's position in ``ids``, the distinct
    normalised IDs) instead of ``id``: string work is done once per distinct ID, not per row.
    After the periods stage, ``period`` holds each row's column in ``periods``.
    """

    frame: pd.DataFrame
    roles: tuple[str, ...]
    columns: dict[str, str]  # period text -> the wide column it came from (for messages)
    periods: tuple[Any, ...] = ()
    labels: tuple[str, ...] = ()
    ids: np.ndarray | None = None
    period_column: str | None = None  # long tables: the period column (for messages)

    def row_ids(self) -> np.ndarray:
        """Each row's ID (object array)."""
        assert self.ids is not None
        return self.ids[self.frame["uid"].to_numpy()]


def _column(df: pd.DataFrame, col: str, where: Any, flag: str) -> str:
    if col in df.columns:
        return col
    lower = {str(c).lower(): c for c in df.columns}
    if col.lower() in lower:
        return lower[col.lower()]
    import difflib

    hint = difflib.get_close_matches(col, [str(c) for c in df.columns], n=1)
    cols = examples([c for c in df.columns if c != "geometry"], 8)
    raise InputError(
        f"{where}: no column {col!r} ({flag}); "
        + (f"did you mean {hint[0]!r}? " if hint else "")
        + f"columns are {cols}"
    )


def _guess(df: pd.DataFrame, guesses: tuple[str, ...]) -> str | None:
    lower = {str(c).lower(): c for c in df.columns}
    for g in guesses:
        if g in lower:
            return lower[g]
    return None


def _matching_column(df: pd.DataFrame, ids: np.ndarray, skip: set[str]) -> tuple[str, float] | None:
    """The column of ``df`` whose distinct values best match ``ids`` (share of them found),
    when they also cover at least half of ``ids``."""
    import pandas as pd

    best: tuple[str, float] | None = None
    target = pd.Index(pd.unique(ids))
    for c in df.columns:
        if c in skip or c == "geometry":
            continue
        vals = pd.unique(normalise(df[c]))
        if not len(vals):
            continue
        found = target.get_indexer(vals) >= 0
        share = float(found.mean())
        covers = found.sum() / len(target)  # a column of a few small codes matches by chance
        if share >= 0.5 and covers >= 0.5 and (best is None or share > best[1]):
            best = (str(c), share)
    return best


# -- stage 1: read ------------------------------------------------------------------------------
def layer_stage(
    gdf: gpd.GeoDataFrame, spec: InputSpec, where: Any, findings: list[Finding]
) -> Layer:
    """IDs (normalised, unique, non-blank), names, and the geometry checked and projected."""
    import pandas as pd

    id_col = spec.id or _guess(gdf, _ID_GUESSES)
    if id_col is None:
        raise InputError(
            f"{where}: which column holds the unit IDs? pass --id; columns are "
            f"{examples([c for c in gdf.columns if c != 'geometry'], 8)}"
        )
    id_col = _column(gdf, id_col, where, "--id")
    ids = normalise(gdf[id_col])
    if spec.id_width:
        digit = pd.Series(ids, dtype=object).str.fullmatch(r"\d+").fillna(False).to_numpy(bool)
        ids[digit] = zfill(ids[digit], spec.id_width)
    blank = np.flatnonzero(ids == "")
    if blank.size:
        raise InputError(
            f"{where}: {len(blank)} features have no ID in {id_col!r} (rows {examples(blank.tolist())}); "
            "every polygon needs an ID"
        )
    dup = pd.Series(ids).duplicated(keep=False).to_numpy()
    if dup.any():
        dups = pd.unique(ids[dup]).tolist()
        raise InputError(
            f"{where}: {len(dups)} IDs in {id_col!r} occur more than once (e.g. {examples(dups)}); "
            "each polygon needs its own ID (dissolve or renumber the duplicates)"
        )
    name_col = spec.name or _guess(gdf, _NAME_GUESSES)
    if name_col is not None:
        name_col = _column(gdf, name_col, where, "--name")
        raw = gdf[name_col]
        text = raw.astype(object).where(raw.notna(), "").astype(str).to_numpy(dtype=object)
        text = np.where((text == "") | (text == "nan"), ids, text)
        names = tuple(text.tolist())
    else:
        names = tuple(ids.tolist())
    path = where if isinstance(where, Path) else Path(str(where))
    gdf, geo_findings = prepare_geometry(
        gdf, ids.tolist(), path, crs=spec.crs, map_crs=spec.map_crs
    )
    findings += geo_findings
    return Layer(gdf, ids, names, id_col, str(where))


def table_stage(spec: InputSpec, layer: Layer, path: Path | None) -> Table:
    """The values table read from ``path`` (plus appended tables), or the layer's own columns."""
    if path is None:
        df = layer.gdf.drop(columns=layer.gdf.geometry.name)
        df[layer.id_col] = layer.ids
        return Table(df, Path(layer.where).name, None, layer.id_col, from_layer=True)
    df = read_table(path, spec.encoding)
    sep = df.attrs.get("sep", ",")
    wide_id = None
    if spec.append:
        if not spec.period:  # wide: a new release may hold only the new periods' columns
            wide_id = _table_id(df, spec, layer, path)
        df = _append_tables(df, path, spec.append, wide_id=wide_id, encoding=spec.encoding)
    where = " + ".join(p.name for p in (path, *spec.append))
    t_id = _table_id(df, spec, layer, path)
    return Table(df, where, path, t_id, sep, wide_append=wide_id is not None)


def _table_id(df: pd.DataFrame, spec: InputSpec, layer: Layer, where: Any) -> str:
    """The table's ID column; when it is missing, suggest the column whose values match."""
    want = spec.table_id or layer.id_col
    flag = "--table-id" if spec.table_id else "--id"
    try:
        return _column(df, want, where, flag)
    except InputError as exc:
        found = _matching_column(df, layer.ids, set())
        if found is None:
            raise
        col, share = found
        raise InputError(
            f"{where}: no column {want!r} ({flag}); column {col!r} holds the layer's IDs "
            f"({share:.0%} of its values match); pass --table-id {col}"
        ) from exc


def _append_tables(
    df: pd.DataFrame,
    first: Path,
    more: tuple[Path, ...],
    *,
    wide_id: str | None = None,
    encoding: str | None = None,
) -> pd.DataFrame:
    """Stack further tables (e.g. next year's release) below the first.

    Long tables need the same columns. Wide tables (``wide_id``, the ID column, given) may hold
    only the ID and the new periods' columns, as a new release usually does: they are stacked
    with the union of columns, and the blank cells that only fill the other tables' columns are
    dropped once the rows are long (:func:`drop_fill`).
    """
    import pandas as pd

    parts = [df]
    for path in more:
        extra = read_table(path, encoding)
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
    if wide_id is not None:
        out = out.fillna("")
    out.attrs["sep"] = df.attrs.get("sep", ",")
    return out


def drop_fill(long: Long) -> Long:
    """Rows of side-by-side wide tables whose cells are all blank only because another table
    holds that (unit, period): dropped, keeping a blank row where no table has a value."""
    f = long.frame
    blank = (f[list(long.roles)] == "").all(axis=1)
    key = f[["uid", "period_text"]].assign(_blank=blank).sort_values("_blank", kind="stable")
    filler = key["_blank"] & key.duplicated(["uid", "period_text"], keep="first")
    return replace(long, frame=f.drop(index=key.index[filler.to_numpy()]))


# -- stage 2: long frame ------------------------------------------------------------------------
def _roles(spec: InputSpec) -> dict[str, str]:
    if spec.numerator or spec.denominator:
        if not (spec.numerator and spec.denominator):
            raise ConfigError("rates need both --numerator and --denominator")
        if spec.value:
            raise ConfigError("give either --value or --numerator/--denominator, not both")
        return {"num": spec.numerator, "den": spec.denominator}
    return {}


_FLAGS = {"value": "--columns", "num": "--numerator", "den": "--denominator", "moe": "--moe"}


def _pattern(pattern: str, flag: str) -> re.Pattern[str]:
    """A ``--columns`` pattern: a regex with one capture group (``PO(\\d+)``) or a glob (``rate_*``)."""
    if "(" in pattern:
        try:
            rx = re.compile(pattern)
        except re.error as exc:
            raise ConfigError(
                f"{flag} {pattern!r} is not a valid regular expression ({exc})"
            ) from None
        if rx.groups != 1:
            raise ConfigError(
                f"{flag} {pattern!r} needs exactly one capture group around the period, e.g. 'PO(\\d+)'"
            )
        return rx
    if "*" not in pattern:
        raise ConfigError(
            f"{flag} {pattern!r} must contain '*' where the period is (e.g. 'rate_*'), or a regex "
            "capture group (e.g. 'rate_(\\d{4})')"
        )
    return re.compile(re.escape(pattern).replace(r"\*", "(.+)"))


def _wide_columns(df: pd.DataFrame, pattern: str, where: str, flag: str) -> dict[str, str]:
    """Columns matching a pattern -> the period text (the captured part)."""
    rx = _pattern(pattern, flag)
    out = {}
    for c in df.columns:
        m = rx.fullmatch(str(c))
        if m:
            out[str(c)] = m.group(1)
    if not out:
        raise InputError(
            f"{where}: no column matches {flag} {pattern!r}; columns are {examples(list(df.columns), 8)}"
        )
    return out


def _auto_year_columns(df: pd.DataFrame, skip: set[str], where: str) -> dict[str, str]:
    cols = {str(c): find_year(str(c)) for c in df.columns if c not in skip and c != "geometry"}
    found = {c: y for c, y in cols.items() if y is not None}
    if not found:
        raise InputError(
            f"{where}: found no period columns; pass --period COL --value COL for a long table or "
            "--columns 'PATTERN_*' (or a regex such as 'PO(\\d+)') for a wide one"
        )
    stems = {c.replace(y, "*") for c, y in found.items()}
    if len(stems) > 1:
        raise InputError(
            f"{where}: columns carrying a year have several patterns ({examples(sorted(stems))}); "
            "choose one with --columns, or --numerator/--denominator patterns for counts"
        )
    return found


def long_stage(table: Table, spec: InputSpec) -> Long:
    """The table as long rows: ``id``, ``period_text`` and one column per value role."""
    import pandas as pd

    df, where = table.df, table.where
    roles = _roles(spec)
    if spec.period:
        if not roles and not spec.value:
            raise ConfigError(
                "a long table needs --value COL (or --numerator and --denominator) with --period"
            )
        p_col = _column(df, spec.period, where, "--period")
        cols = {"value": spec.value} if spec.value else roles
        if spec.moe:  # margins of error beside the values (rates only)
            cols = {**cols, "moe": spec.moe}
        cols = {
            r: _column(df, c, where, "--value" if r == "value" else _FLAGS[r])
            for r, c in cols.items()
        }
        long = df[[table.id_col, p_col, *cols.values()]].set_axis(
            ["id", "period_text", *cols.keys()], axis=1
        )
        return Long(long.reset_index(drop=True), tuple(cols), {}, period_column=str(p_col))
    patterns = {"value": spec.columns} if spec.columns else (dict(roles) or {"value": ""})
    if spec.moe:
        patterns["moe"] = spec.moe
    parts = []
    col_of: dict[str, str] = {}
    for role, pattern in patterns.items():
        if pattern:
            cols = _wide_columns(df, pattern, where, _FLAGS[role])
        else:
            cols = _auto_year_columns(df, {table.id_col}, where)
        for c, t in cols.items():
            col_of.setdefault(t, c)
        n = len(df)
        block = pd.DataFrame(
            {
                "id": pd.concat([df[table.id_col]] * len(cols), ignore_index=True),
                "period_text": np.repeat(np.array(list(cols.values()), dtype=object), n),
                role: pd.concat([df[c] for c in cols], ignore_index=True),
            }
        )
        parts.append(block.set_index(["id", "period_text"]) if len(patterns) > 1 else block)
    if len(parts) == 1:
        long = parts[0]
    else:
        long = pd.concat(parts, axis=1, join="outer").reset_index()
        for r in patterns:
            long[r] = long[r].where(long[r].notna(), "")
    return Long(long, tuple(patterns), col_of)


# -- stage 3: ids -------------------------------------------------------------------------------
def ids_stage(
    long: Long, layer: Layer, spec: InputSpec, where: str, pad: bool, findings: list[Finding]
) -> Long:
    """Normalise the table's IDs, count rows without one, zero-pad to the layer's width.

    The work is done once per distinct ID; rows keep an integer code (``uid``).
    """
    import pandas as pd

    f = long.frame
    codes, uniq = pd.factorize(f["id"], use_na_sentinel=True)
    ids = normalise(pd.Series(np.asarray(uniq, dtype=object)))
    if pad:
        ids, pad_findings = pad_ids(ids, layer.ids, width=spec.id_width, where=where)
        findings += pad_findings
    # IDs equal after normalising ("6019", "6019.0") share one code
    codes2, distinct = pd.factorize(pd.Series(np.append(ids, ""), dtype=object))
    uid = np.where(codes >= 0, codes2[np.maximum(codes, 0)], codes2[-1])
    distinct = np.asarray(distinct, dtype=object)
    blank = uid == codes2[-1]  # the code of "" (appended last above): rows without an ID
    if blank.any():  # rows that cannot be placed are counted, never dropped silently
        findings.append(
            Finding(
                "warning",
                "ids-blank-rows",
                f"{where}: {plural(int(blank.sum()), 'row')} with no unit ID left out",
            )
        )
        f, uid = f[~blank], uid[~blank]
    f = f.drop(columns="id").assign(uid=uid)
    return replace(long, frame=f, ids=distinct)


# -- stage 4: periods ---------------------------------------------------------------------------
def periods_stage(long: Long, spec: InputSpec, where: str, findings: list[Finding]) -> Long:
    """Parse each distinct period label once; sort the periods; report gaps on the one rule."""
    import pandas as pd

    f = long.frame
    codes, uniq = pd.factorize(f["period_text"], use_na_sentinel=True)
    text = pd.Series(np.asarray(uniq, dtype=object)).astype(str).str.strip().to_numpy(dtype=object)
    blank = np.append(text == "", True)[codes]  # code -1 (a missing cell) is blank too
    if blank.any():
        findings.append(
            Finding(
                "warning",
                "periods-blank-rows",
                f"{where}: {plural(int(blank.sum()), 'row')} with no period left out",
            )
        )
        f, codes = f[~blank], codes[~blank]
    hint = None
    if spec.columns and "(" not in spec.columns and "*" in spec.columns:
        head, _, tail = spec.columns.partition("*")
        hint = head + r"(\d+)" + tail
    label = f"{where} column {long.period_column!r}" if long.period_column else f"{where} periods"
    parsed = read_periods(
        [t for t in text if t != ""], where=label, columns=long.columns or None, hint=hint
    )
    findings += parsed.findings
    periods = tuple(sorted(set(parsed.mapping.values())))
    pos = {p: j for j, p in enumerate(periods)}
    col_of_uniq = np.array(
        [pos[parsed.mapping[t]] if t != "" else -1 for t in text], dtype=np.int64
    )
    f = f.assign(period=col_of_uniq[codes])
    labels = tuple(parsed.labels.get(p, str(p)) for p in periods)
    far, stray = _outlying_periods(f, periods, labels, parsed.mapping, long, label, findings)
    if stray:  # a few stray rows of a typo period are left out (counted in the warning)
        keep = np.ones(len(periods), dtype=bool)
        keep[sorted(stray)] = False
        new_col = np.cumsum(keep) - 1
        f = f[keep[f["period"].to_numpy()]]
        f = f.assign(period=new_col[f["period"].to_numpy()])
        periods = tuple(p for p, k in zip(periods, keep) if k)
        labels = tuple(lab for lab, k in zip(labels, keep) if k)
        far = {int(new_col[j]) for j in far - stray}
    sp = spacing([p for j, p in enumerate(periods) if j not in far])
    if sp.gaps:
        findings.append(
            Finding(
                "warning",
                "periods-gap",
                f"{where}: the series has gaps: no data for {examples(sp.gaps)}; changes across a gap "
                "are not bridged unless asked",
            )
        )
    elif not sp.regular and len(periods) >= 3:
        findings.append(
            Finding(
                "note",
                "periods-irregular",
                f"{where}: periods are unevenly spaced ({examples(labels)}); each consecutive pair "
                "counts as one step",
            )
        )
    return replace(long, frame=f, periods=periods, labels=labels)


def _outlying_periods(
    f: pd.DataFrame,
    periods: tuple[Any, ...],
    labels: tuple[str, ...],
    mapping: dict[str, Any],
    long: Long,
    label: str,
    findings: list[Finding],
) -> tuple[set[int], set[int]]:
    """Periods far outside the run of the others (:func:`mapdrift.periods.outlying`: a typo
    such as 2109 among 2015-2023), each reported as ``periods-outlying`` with its rows and units.

    Returns the outlying periods and, among them, the stray ones to leave out: a period with
    under half the run's usual rows per period (3 rows among 85,000 a year) would become
    the first or last frame and every "first to last" comparison, so its rows are left out and
    counted in the warning. An outlying period with at least half the usual rows (a whole
    mislabelled column) holds a period's data, so it is kept as its own period. Either way no
    unit is dropped, and the fix (correct the source) is named.
    """
    import pandas as pd

    col = f["period"].to_numpy()
    rows = np.bincount(col, minlength=len(periods))
    far = outlying(periods, rows)
    if not far:
        return set(), set()
    core = [j for j in range(len(periods)) if j not in far]
    usual = float(np.median(rows[core]))
    sp = spacing([periods[j] for j in core])
    unit = sp.unit or "step"
    step = f", {plural(sp.step, unit)} apart" if sp.step is not None and sp.unit else ""
    run = f"{labels[core[0]]} to {labels[core[-1]]}{step}"
    pos = {p: i for i, p in enumerate(periods)}
    stray: set[int] = set()
    for j in far:
        gap = distance(periods[j], periods[core[0] if j < core[0] else core[-1]])
        side = "before" if j < core[0] else "after"
        texts = [t for t, p in mapping.items() if pos[p] == j]
        cols = [long.columns[t] for t in texts if t in long.columns]
        origin = f" (column {examples(cols, 2)})" if cols else ""
        units = pd.unique(long.ids[f["uid"].to_numpy()[col == j]]) if long.ids is not None else []
        if rows[j] < 0.5 * usual:
            stray.add(j)
            fate = (
                "looks like a typo; with so few rows it is left out of the map (those units "
                "keep their other periods): correct the period of those rows in the source"
            )
        else:
            fate = (
                "may be a typo; it is kept as its own period since it holds a period's worth of "
                "rows: if it is one, correct the period in the source"
                + (" (rename the column)" if cols else "")
            )
        findings.append(
            Finding(
                "warning",
                "periods-outlying",
                f"{label}: period {labels[j]}{origin} sits {plural(gap, unit)} {side} the others "
                f"({run}) in {plural(int(rows[j]), 'row')} (units {examples(list(units), 3)}); it "
                + fate,
                tuple(str(u) for u in units),
            )
        )
    return set(far), stray


# -- stage 5: numbers ---------------------------------------------------------------------------
def numbers_stage(long: Long, spec: InputSpec, table: Table, findings: list[Finding]) -> Long:
    """Cells to floats with one decimal mark for the whole file (decided from its cells)."""
    f = long.frame
    label = {
        "value": spec.value or spec.columns or "value",
        "num": spec.numerator,
        "den": spec.denominator,
        "moe": spec.moe,
    }
    factorised = {r: distinct(f[r]) for r in long.roles}  # each column factorised once
    evidence = decimal_evidence({str(label[r]): factorised[r] for r in long.roles})
    decimal = decide_decimal(evidence, where=table.where, sep=table.sep, given=spec.decimal)
    if decimal == "," and spec.decimal is None:
        findings.append(
            Finding(
                "note",
                "values-decimal-comma",
                f"{table.where}: numbers are written with decimal commas (e.g. "
                f"{examples((evidence.first('comma_decimal') or evidence.first('point_thousands') or ('', []))[1], 3, total=False)}); "
                "read as 5,4 = 5.4 (pass --decimal . if that is wrong)",
            )
        )
    ids = long.row_ids()
    row_periods = f["period"].to_numpy()
    new = {}
    for r in long.roles:
        nums, fs = to_numbers(
            factorised[r],
            where=table.where,
            column=str(label[r]),
            missing_codes=spec.missing,
            ids=ids,
            decimal=decimal,
            raw=f[r],
        )
        new[r] = nums
        findings += fs
        findings += negative_checks(
            nums,
            ids,
            where=table.where,
            column=str(label[r]),
            role=r,
            periods=(row_periods, long.labels),
        )
    return replace(long, frame=f.assign(**new))


#: the fewest cells of one negative value that make it look like a missing-value code
CODE_MIN_CELLS = 3


def negative_checks(
    nums: np.ndarray,
    ids: np.ndarray,
    *,
    where: str,
    column: str,
    role: str = "value",
    periods: tuple[np.ndarray, Sequence[str]] | None = None,
) -> list[Finding]:
    """Negative numbers in one column of values or counts (``role`` as in :class:`Long`);
    ``ids`` and ``periods`` (each cell's period code and the labels of the codes) name each
    cell's unit and period for the messages.

    One negative value repeated (at least :data:`CODE_MIN_CELLS` cells, whole, and most of the
    column's negatives), e.g. ``-999``, is reported as a probable missing-value code
    (``values-negative-code``) with the ``--missing`` fix; any other negatives as
    ``values-negative`` (rates and counts cannot be negative). Negative bases are left to the
    rates' own ``rates-negative-base``; margins of error get only the code check.

    >>> x = np.array([3.0, -999, 2.5, -999, -999, 4.0])
    >>> [f.code for f in negative_checks(x, np.array(list("aabbcc")), where="t.csv", column="rate")]
    ['values-negative-code']
    """
    import pandas as pd

    neg = nums < 0
    n_neg = int(neg.sum())
    if not n_neg:
        return []
    out: list[Finding] = []
    vals, counts = np.unique(nums[neg], return_counts=True)
    top = int(np.argmax(counts))
    code, n_code = float(vals[top]), int(counts[top])
    if n_code >= CODE_MIN_CELLS and 2 * n_code > n_neg and code == round(code):
        hit = nums == code
        units = pd.unique(ids[hit]).astype(str)
        when = (
            f"; periods {examples([periods[1][j] for j in np.unique(periods[0][hit])])}"
            if periods is not None
            else ""
        )
        out.append(
            Finding(
                "warning",
                "values-negative-code",
                f"{where}: {plural(n_code, 'cell')} of {column!r} hold {code:g} (units "
                f"{examples(units.tolist())}{when}); a negative value repeated like that is most likely "
                "a missing-value code, yet it is read as a number: pass "
                f"--missing {code:g} ([inputs] missing = [{code:g}] in a config) to show those "
                "cells as no data, or blank them in the source",
                tuple(units.tolist()),
            )
        )
        neg &= ~hit
    if neg.any() and role in ("value", "num"):
        units = pd.unique(ids[neg]).astype(str)
        shown = examples(sorted({f"{x:g}" for x in nums[neg][:50]}), 3, total=False)
        what = "counts" if role == "num" else "rates and counts"
        out.append(
            Finding(
                "warning",
                "values-negative",
                f"{where}: {plural(int(neg.sum()), 'cell')} of {column!r} {'is' if neg.sum() == 1 else 'are'} negative ({shown}; "
                f"units {examples(units.tolist())}); {what} cannot be: fix them in the source, or "
                "pass them to --missing if they mark missing values",
                tuple(units.tolist()),
            )
        )
    return out


# -- stage 6: duplicates ------------------------------------------------------------------------
def duplicates_stage(long: Long, spec: InputSpec, table: Table, findings: list[Finding]) -> Long:
    """Exact repeats of a row are dropped and counted; conflicting rows stop the run unless
    ``--duplicates`` says how to combine them."""
    import pandas as pd

    f = long.frame
    key = f["uid"].to_numpy().astype(np.int64) * max(len(long.periods), 1) + f["period"].to_numpy()
    if not pd.Series(key).duplicated().any():
        return long
    keyed = pd.DataFrame({"key": key, **{r: f[r].to_numpy() for r in long.roles}})
    exact = keyed.duplicated(keep="first").to_numpy()
    if exact.any():
        ex = examples(
            [
                f"{a}/{long.labels[b]}"
                for a, b in zip(long.row_ids()[exact][:5], f["period"].to_numpy()[exact][:5])
            ],
            total=False,
        )
        findings.append(
            Finding(
                "note",
                "values-duplicate-rows",
                f"{table.where}: {plural(int(exact.sum()), 'row')} repeated exactly (same unit, period and "
                f"values; e.g. {ex}) counted once",
            )
        )
        f, key = f[~exact], key[~exact]
    dup = pd.Series(key).duplicated(keep=False).to_numpy()
    if not dup.any():
        return replace(long, frame=f)
    pairs = f.loc[dup, ["uid", "period"]].drop_duplicates()
    pairs = pairs.assign(id=long.ids[pairs["uid"].to_numpy()])[["id", "period"]]
    shown = [f"{a}/{long.labels[b]}" for a, b in pairs.head(5).itertuples(index=False)]
    ex = examples(shown, total=False) + (f", ... ({len(pairs)} in all)" if len(pairs) > 5 else "")
    if spec.duplicates == "error":
        raise InputError(
            f"{table.path or table.where}: {plural(len(pairs), '(unit, period) pair')} with more than one row (e.g. {ex}); "
            "fix the table or pass --duplicates first|mean|sum"
        )
    if spec.duplicates not in ("first", "mean", "sum"):
        raise ConfigError(
            f"--duplicates {spec.duplicates!r} must be one of error, first, mean, sum"
        )
    agg = {r: spec.duplicates for r in long.roles}
    g = f.groupby(["uid", "period"], as_index=False, sort=False).agg(agg | {"period_text": "first"})
    findings.append(
        Finding(
            "warning",
            "values-duplicates-combined",
            f"{table.where}: {len(pairs)} (unit, period) pairs had several conflicting rows (e.g. {ex}); "
            f"combined by {spec.duplicates} (--duplicates)",
            tuple(pd.unique(pairs["id"].to_numpy()).tolist()),
        )
    )
    return replace(long, frame=g)


# -- stage 7: crosswalk (optional) ----------------------------------------------------------------
def crosswalk_stage(
    long: Long, layer: Layer, spec: InputSpec, counts: bool, findings: list[Finding]
) -> Long:
    """Move the rows onto the layer's boundary vintage (see :mod:`mapdrift.crosswalk`)."""
    if spec.crosswalk is None:
        return long
    import pandas as pd

    from mapdrift.crosswalk import apply_crosswalk, read_crosswalk

    xw = read_crosswalk(spec.crosswalk)
    assert long.ids is not None
    xw["from"], f_from = pad_ids(
        xw["from"].to_numpy(object), long.ids, width=None, where=spec.crosswalk.name
    )
    xw["to"], f_to = pad_ids(
        xw["to"].to_numpy(object), layer.ids, width=spec.id_width, where=spec.crosswalk.name
    )
    frame = long.frame.assign(id=long.row_ids()).drop(columns="uid")
    f, xf = apply_crosswalk(frame, xw, list(long.roles), counts=counts, where=spec.crosswalk.name)
    findings += f_from + f_to + xf
    uid, ids = pd.factorize(f["id"].to_numpy(object))
    return replace(
        long, frame=f.drop(columns="id").assign(uid=uid), ids=np.asarray(ids, dtype=object)
    )


# -- stage 8: match to the layer ----------------------------------------------------------------
def match_stage(
    long: Long, layer: Layer, table: Table, findings: list[Finding]
) -> tuple[np.ndarray, np.ndarray, Long]:
    """Row of each table row in the layer (one hash join); unmatched rows and units reported."""

    f = long.frame
    assert long.ids is not None
    uid = f["uid"].to_numpy()
    present = np.zeros(len(long.ids), dtype=bool)
    present[uid] = True  # distinct IDs that still have rows
    where_in_layer = locate(long.ids, layer.ids)
    rows = where_in_layer[uid]
    n = len(layer.ids)
    matched = np.zeros(n, dtype=bool)
    matched[where_in_layer[present & (where_in_layer >= 0)]] = True
    n_matched = int(matched.sum())
    table_ids = long.ids[present]
    only_mask = rows < 0
    table_only = long.ids[present & (where_in_layer < 0)].tolist()
    if not table.from_layer and n_matched < 0.5 * n:
        hints = closest(table_only, layer.ids.tolist())
        hint = (
            "; closest layer IDs: " + ", ".join(f"{a} -> {b}?" for a, b in hints.items())
            if hints
            else ""
        )
        other = _matching_column(table.df, layer.ids, {table.id_col})
        if other is not None:
            hint += f"; column {other[0]!r} of the table matches {other[1]:.0%}: pass --table-id {other[0]}"
        mine = _matching_column(layer.gdf, table_ids, {layer.id_col})
        if mine is not None:
            hint += (
                f"; the layer's column {mine[0]!r} holds {mine[1]:.0%} of the table's IDs: "
                f"pass --id {mine[0]}"
            )
        raise InputError(
            f"{table.path or table.where}: only {n_matched} of {n} layer units match a table ID (column "
            f"{table.id_col!r}: e.g. {examples(table_ids[:5].tolist())}; layer {layer.id_col!r}: e.g. "
            f"{examples(layer.ids[:5].tolist())}){hint}; check --id/--table-id, or --id-width if leading zeros were lost"
        )
    if table_only:
        unmatched_layer = layer.ids[~matched]
        hints = closest(
            table_only, (unmatched_layer if len(unmatched_layer) else layer.ids).tolist(), n=5
        )
        hint = (
            " (closest layer IDs: " + ", ".join(f"{a} -> {b}?" for a, b in hints.items()) + ")"
            if hints
            else ""
        )
        findings.append(
            Finding(
                "warning",
                "ids-table-only",
                f"{table.where}: {plural(len(table_only), 'table ID')} ({plural(int(only_mask.sum()), 'row')}) with no "
                f"polygon, not mapped: {examples(table_only, total=False)}{hint}; check for a "
                "boundary vintage change or typos",
                tuple(str(u) for u in table_only),
            )
        )
        f, rows = f[~only_mask], rows[~only_mask]
    no_rows = layer.ids[~matched]
    if len(no_rows):
        findings.append(
            Finding(
                "warning",
                "units-no-values",
                f"{len(no_rows) / n:.0%} of layer units have no row in the table ({plural(len(no_rows), 'unit')} "
                f"of {n:,}, e.g. {examples(no_rows.tolist(), total=False)}); they are kept and shown as no data",
                tuple(no_rows.tolist()),
            )
        )
    return rows, f["period"].to_numpy(), replace(long, frame=f)


# -- stage 9: arrays, rates, value checks, Panel ------------------------------------------------
def _grid(shape: tuple[int, int], rows: np.ndarray, cols: np.ndarray, x: np.ndarray) -> np.ndarray:
    g = np.full(shape, np.nan)
    g[rows, cols] = np.asarray(x, dtype=np.float64)
    return g


def _value_checks(
    values: np.ndarray,
    units: np.ndarray,
    labels: tuple[str, ...],
    denominator: np.ndarray | None,
    spec: InputSpec,
    findings: list[Finding],
) -> None:
    zf = detect_zero_block(
        values, tuple(units.tolist()), labels, denominator=denominator, per=spec.per
    )
    if zf is not None:
        findings.append(zf)
    present = np.isfinite(values)
    partial = present.any(axis=1) & ~present.all(axis=1)
    if partial.any():
        units_p = tuple(units[partial].tolist())
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


class _Clock:
    """Stage timings for the debug log (the run's own step timings cover the whole load)."""

    def __init__(self) -> None:
        import time

        self._now = time.perf_counter
        self._t = self._now()

    def lap(self, stage: str, value: Any) -> Any:
        t = self._now()
        log.debug("load stage %s: %.3f s", stage, t - self._t)
        self._t = t
        return value


# characters of a regex that never belong in a title (a glob's '*' is dropped by _words)
_REGEX_MARKS = frozenset("\\[](){}+?^$|")


def _names(spec: InputSpec, counts: bool, findings: list[Finding]) -> tuple[str, str]:
    """The variable name and unit label of titles and legends: as given, else from the columns.

    A name that would come out of a regex column pattern, such as ``(\\d{4})``, becomes a plain
    word ("value", or "rate" for counts) with a ``variable-unnamed`` note naming ``--variable``;
    names the user gave, and real column names, stay as written.
    """
    variable = spec.variable or (
        f"{_words(spec.numerator)} rate"
        if counts
        else _words(spec.value or spec.columns or "value")
    )
    unit_label = spec.unit_label or (
        f"{_words(spec.numerator)} per {spec.per:,g} {_words(spec.denominator)}" if counts else ""
    )
    pattern = (spec.numerator or spec.columns) if spec.period is None else None
    if not pattern or "(" not in pattern:  # a pattern with "(" is read as a regex
        return variable, unit_label
    if spec.unit_label is None and _REGEX_MARKS & set(unit_label):
        unit_label = ""
    if spec.variable is None and _REGEX_MARKS & set(variable):
        variable = "rate" if spec.numerator else "value"
        findings.append(
            Finding(
                "note",
                "variable-unnamed",
                f"the column pattern '{pattern}' gives no name for titles, so titles and legends "
                f"call the values {variable!r}; pass --variable (and --unit-label), e.g. "
                "--variable 'Filing rate', to name them",
            )
        )
    return variable, unit_label


def _words(col: str | None) -> str:
    """Column names (or patterns) read as words in titles: ``rate_*`` -> ``rate``,
    ``HR(\\d+)`` -> ``HR``."""
    text = re.sub(r"\(.*?\)", "", str(col)) if "(" in str(col) else str(col)
    return text.replace("_", " ").replace("*", "").strip() or str(col)


def _chain(
    layer: Layer, table: Table, spec: InputSpec, findings: list[Finding], inputs: tuple[Path, ...]
) -> Panel:
    """Everything after reading: long frame -> ids -> periods -> numbers -> ... -> Panel.

    Each stage's time is logged at DEBUG level (``mapdrift -v``-style logging shows them).
    """
    clock = _Clock()
    long = clock.lap("long frame", long_stage(table, spec))
    long = clock.lap(
        "ids", ids_stage(long, layer, spec, table.where, not table.from_layer, findings)
    )
    if table.wide_append:
        long = drop_fill(long)
    long = clock.lap("periods", periods_stage(long, spec, table.where, findings))
    long = clock.lap("numbers", numbers_stage(long, spec, table, findings))
    long = clock.lap("duplicates", duplicates_stage(long, spec, table, findings))
    counts = "num" in long.roles
    long = clock.lap("crosswalk", crosswalk_stage(long, layer, spec, counts, findings))
    rows, cols, long = clock.lap("match", match_stage(long, layer, table, findings))

    shape = (len(layer.ids), len(long.periods))
    numerator = denominator = None
    if counts:
        numerator = _grid(shape, rows, cols, long.frame["num"].to_numpy())
        denominator = _grid(shape, rows, cols, long.frame["den"].to_numpy())
        values, rate_findings = _rates(
            numerator, denominator, spec, layer.ids, labels=long.labels, where=table.where
        )
        findings += rate_findings
    else:
        values = _grid(shape, rows, cols, long.frame["value"].to_numpy())
    moe = _grid(shape, rows, cols, long.frame["moe"].to_numpy()) if "moe" in long.roles else None
    _value_checks(values, layer.ids, long.labels, denominator, spec, findings)
    if not np.isfinite(values).any():
        what = "rates" if counts else f"column {str(spec.value or spec.columns or 'value')!r}"
        raise InputError(
            f"{table.path or table.where}: no usable number in {what}: every cell is missing or "
            "text (see the values-not-numeric counts with `mapdrift check --json`); check "
            "--value/--columns (and --decimal if the file writes 5,3)"
        )
    raise_errors(findings, InputError)

    variable, unit_label = _names(spec, counts, findings)
    log.info("loaded %d units x %d periods from %s", shape[0], shape[1], examples(inputs))
    labels = long.labels if any(lab != str(p) for lab, p in zip(long.labels, long.periods)) else ()
    return Panel(
        units=tuple(layer.ids.tolist()),
        periods=long.periods,
        values=values,
        geometry=layer.gdf.geometry.reset_index(drop=True),
        names=layer.names,
        findings=tuple(findings),
        meta=PanelMeta(variable=variable, unit_label=unit_label, source=spec.source or ""),
        numerator=numerator,
        denominator=denominator,
        inputs=inputs,
        labels=labels,
        moe=moe,
    )


def load(spec: InputSpec) -> Panel:
    """Read, align and validate a panel from files; see :func:`mapdrift.panel.load_panel`."""
    findings: list[Finding] = []
    layer = layer_stage(read_layer(spec.geometry, spec.layer), spec, spec.geometry, findings)
    table = table_stage(spec, layer, spec.table)
    inputs = tuple(
        p for p in (spec.geometry, spec.table, *spec.append, spec.crosswalk) if p is not None
    )
    return _chain(layer, table, spec, findings, inputs)


def load_frames(gdf: gpd.GeoDataFrame, df: pd.DataFrame | None, spec: InputSpec) -> Panel:
    """Enter the chain at the long-frame stage from in-memory frames (``Panel.from_frames``)."""
    import geopandas as gpd

    if not isinstance(gdf, gpd.GeoDataFrame):
        raise InputError("from_frames needs a GeoDataFrame of polygons as its first argument")
    if len(gdf) == 0:
        raise InputError("the GeoDataFrame has no features")
    findings: list[Finding] = []
    layer = layer_stage(gdf.reset_index(drop=True), spec, "GeoDataFrame", findings)
    if df is None:
        table = table_stage(spec, layer, None)
        table = replace(table, where="GeoDataFrame")
    else:
        if len(df) == 0:
            raise InputError("DataFrame: the table has no rows")
        df = df.reset_index(drop=True)
        df.columns = [str(c).strip() for c in df.columns]
        t_id = _table_id(df, spec, layer, "DataFrame")
        table = Table(df, "DataFrame", None, t_id)
    return _chain(layer, table, spec, findings, ())


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
            # the median is needed only for units with a zero (a partition of those rows only)
            unit_med = np.full(len(values), np.nan)
            rows = zeros.any(axis=1) & np.isfinite(others).any(axis=1)
            if rows.any():
                unit_med[rows] = np.nanmedian(others[rows], axis=1)
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


def _rates(
    num: np.ndarray,
    den: np.ndarray,
    spec: InputSpec,
    units: np.ndarray,
    *,
    labels: Sequence[str] = (),
    where: str = "table",
) -> tuple[np.ndarray, list[Finding]]:
    """Counts to rates per ``spec.per``; zero bases -> missing, small bases flagged, counts
    above their base reported (``rates-over-base``)."""
    findings: list[Finding] = []
    with np.errstate(divide="ignore", invalid="ignore"):
        rate = num / den * spec.per
    over = rates_over_base(num, den, spec, units, labels=labels, where=where)
    if over is not None:
        findings.append(over)
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
                f"(units {examples(us)}); such rates are unstable — read them with care or {SMOOTH_HINT}",
                us,
            )
        )
    return rate, findings


def rates_over_base(
    num: np.ndarray,
    den: np.ndarray,
    spec: InputSpec,
    units: np.ndarray,
    *,
    labels: Sequence[str] = (),
    where: str = "table",
) -> Finding | None:
    """A ``rates-over-base`` warning when counts exceed their base in some unit-periods.

    A count of events among the base (filings among mortgaged parcels) cannot exceed the base,
    so its rate cannot exceed ``per``; when it does, the columns are swapped (said outright when
    most pairs are over) or the base is wrong. The rates are kept as computed.

    >>> spec = InputSpec(geometry="x.gpkg", numerator="filings", denominator="parcels")
    >>> f = rates_over_base(np.array([[3.0, 90]]), np.array([[50.0, 40]]), spec,
    ...                     np.array(["07001"]), labels=("2019", "2020"), where="t.csv")
    >>> f.code, f.units
    ('rates-over-base', ('07001',))
    """
    over = (num > den) & (den > 0)
    n_over = int(over.sum())
    if not n_over:
        return None
    pairs = int(((den > 0) & np.isfinite(num)).sum())
    r, c = np.nonzero(over)
    shown = ", ".join(
        f"{units[i]} in {labels[j] if j < len(labels) else j}: {num[i, j]:,g} > {den[i, j]:,g}"
        for i, j in zip(r[:3].tolist(), c[:3].tolist())
    )
    if n_over > 3:
        shown += ", ..."
    swapped = (
        f"in {n_over / pairs:.0%} of the pairs, so the columns look swapped: pass "
        f"--numerator {spec.denominator} --denominator {spec.numerator}"
        if 2 * n_over > pairs
        else "check whether the columns are swapped or the base is wrong in those rows"
    )
    affected = _units_with(over, units)
    return Finding(
        "warning",
        "rates-over-base",
        f"{where}: {plural(n_over, 'unit-period')} {'has' if n_over == 1 else 'have'} more "
        f"{spec.numerator!r} than {spec.denominator!r} (e.g. {shown}): a rate above "
        f"{spec.per:,g} per {spec.per:,g} is impossible when {spec.numerator!r} counts events "
        f"among {spec.denominator!r}; {swapped} (rates are kept as computed)",
        affected,
    )
