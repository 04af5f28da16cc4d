"""Views of a panel's values: raw, relative to each period, indexed to a base period, deflated.

Values with a strong common trend (incomes over eighty years, prices, most counts of a growing
population) defeat pooled classes: early periods fill the bottom class, late ones the top, and
changes between classes mostly repeat the trend. A *view* rescales the values after loading so
the map compares units with each other:

- ``relative-mean`` / ``relative-median``: each period's values over that period's mean or
  median over units (1 = the period's typical unit);
- ``index:2015``: each unit's values over its own 2015 value (1 = its 2015 level);
- ``deflate:FILE[:COLUMN][@PERIOD]`` or ``deflate:COLUMN[@PERIOD]``: values times
  ``factor[base] / factor[period]`` for a per-period factor such as a price index, read from a
  table (columns period and factor) or from a column of the long values table; the base is the
  last period unless ``@PERIOD`` names another (values then read "in 2009 terms").

:func:`apply_view` returns a derived Panel whose ``meta`` names the view (variable, unit label
and ``meta.view``, the one line every output carries) plus a finding saying what was done.
:func:`common_trend` detects the trend that calls for a view. Arrays in, arrays out: no loop
over units.
"""

from __future__ import annotations

import re
import warnings
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np

from mapdrift.errors import ConfigError, InputError
from mapdrift.findings import Finding, examples

if TYPE_CHECKING:
    from mapdrift.panel import InputSpec, Panel

__all__ = [
    "VIEW_FORMS",
    "View",
    "apply_view",
    "common_trend",
    "parse_view",
    "resolve_view",
    "view_label",
]

#: The accepted forms of ``--view`` / ``[inputs] view``, for help texts and errors.
VIEW_FORMS: tuple[str, ...] = (
    "raw",
    "relative-mean",
    "relative-median",
    "index:PERIOD",
    "deflate:FILE[:COLUMN][@PERIOD]",
    "deflate:COLUMN[@PERIOD]",
)
_TABLE = re.compile(r"^(?P<file>.+?\.(?:csv|tsv|txt|parquet|xlsx))(?::(?P<col>[^:/\\]+))?$", re.I)
_PERIOD_NAMES = ("period", "year", "date", "month", "quarter", "time")


@dataclass(frozen=True)
class View:
    """A parsed view: ``kind`` is raw, relative, index or deflate.

    ``how`` is mean/median (relative); ``base`` the base period's label (index; deflate, where
    None means the last period); ``file``/``column`` where the deflator is.
    """

    kind: str = "raw"
    how: str = ""
    base: str | None = None
    file: Path | None = None
    column: str | None = None

    @property
    def is_raw(self) -> bool:
        return self.kind == "raw"

    def __str__(self) -> str:
        if self.kind == "relative":
            return f"relative-{self.how}"
        if self.kind == "index":
            return f"index:{self.base}"
        if self.kind == "deflate":
            src = ":".join(str(x) for x in (self.file, self.column) if x is not None)
            return f"deflate:{src}" + (f"@{self.base}" if self.base else "")
        return "raw"


def _bad(text: str, why: str = "") -> ConfigError:
    return ConfigError(
        f"--view {text!r} is not a valid view{': ' + why if why else ''}; must be one of "
        f"{', '.join(VIEW_FORMS)} (e.g. --view relative-median, --view index:2015, "
        "--view deflate:cpi.csv)"
    )


def parse_view(text: str | None) -> View:
    """``'relative-median'``, ``'index:2015'``, ``'deflate:cpi.csv:cpi_u@2009'`` -> View.

    >>> parse_view("index:2015")
    View(kind='index', how='', base='2015', file=None, column=None)
    >>> str(parse_view("deflate:cpi.csv:cpi_u"))
    'deflate:cpi.csv:cpi_u'
    """
    if text is None:
        return View()
    t = str(text).strip()
    low = t.lower()
    if low in ("", "raw", "none", "values"):
        return View()
    if low in ("relative", "relative-mean", "relative:mean"):
        return View("relative", "mean")
    if low in ("relative-median", "relative:median"):
        return View("relative", "median")
    kind, sep, rest = t.partition(":")
    kind = kind.strip().lower()
    rest = rest.strip()
    if kind == "index":
        if not rest:
            raise _bad(t, "name the base period, e.g. index:2015")
        return View("index", base=rest)
    if kind == "deflate":
        if not rest:
            raise _bad(t, "name the factor's table or column, e.g. deflate:cpi.csv")
        base = None
        head, at, tail = rest.rpartition("@")
        if at and head and tail and not re.search(r"[/\\]", tail):
            rest, base = head.strip(), tail.strip()
        m = _TABLE.match(rest)
        if m:
            return View("deflate", base=base, file=Path(m["file"]), column=m["col"])
        if re.search(r"[/\\]", rest) or Path(rest).suffix:
            raise _bad(t, "the factor's file must be a .csv, .tsv, .txt, .parquet or .xlsx table")
        return View("deflate", base=base, column=rest)
    raise _bad(t)


def resolve_view(text: str | None, base_dir: Path | None) -> str | None:
    """The view text with a deflator file made relative to ``base_dir`` (a config's folder),
    as other paths in a config are."""
    view = parse_view(text)
    if view.kind != "deflate" or view.file is None or base_dir is None:
        return text
    if view.file.is_absolute():
        return text
    path = Path(base_dir) / view.file
    return str(View("deflate", base=view.base, file=path, column=view.column))


def view_label(panel: Panel) -> str:
    """The one line naming the panel's view for CSV headers, reports and manifests ('' = raw)."""
    return getattr(panel.meta, "view", "") or ""


# ------------------------------------------------------------------------------------------
# applying a view
# ------------------------------------------------------------------------------------------
def apply_view(panel: Panel, view: View | str | None, *, spec: InputSpec | None = None) -> Panel:
    """The panel seen through ``view``; the raw view returns ``panel`` itself.

    ``spec`` (the inputs the panel was loaded from) is needed only for a deflator held in a
    column of the values table. NaN stays NaN; cells without a defined ratio (a zero or missing
    base) become NaN and a warning names them.
    """
    if not isinstance(view, View):
        view = parse_view(view)
    if view.is_raw:
        return panel
    if view.kind == "relative":
        return _relative(panel, view.how)
    if view.kind == "index":
        return _index(panel, view.base or "")
    return _deflate(panel, view, spec)


def _relative(panel: Panel, how: str) -> Panel:
    v = panel.values
    with np.errstate(invalid="ignore", divide="ignore"), warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)  # an all-NaN period
        centre = np.nanmean(v, axis=0) if how == "mean" else np.nanmedian(v, axis=0)
    bad = ~np.isfinite(centre) | (centre == 0)
    rel = v / np.where(bad, np.nan, centre)
    label = f"values divided by each period's {how} over units (1 = the period's {how})"
    if bad.any():
        periods = [panel.period_labels[j] for j in np.flatnonzero(bad)]
        finding = Finding(
            "warning",
            "relative-undefined",
            f"the {how} is zero or missing in {int(bad.sum())} periods ({examples(periods)}); "
            "their relative values are no data",
        )
    else:
        finding = Finding("note", "relative-values", f"view: {label}")
    return panel.with_values(
        rel,
        finding=finding,
        variable=f"{panel.meta.variable} relative to the period {how}",
        unit_label=f"x the period {how}",
        view=f"view: {label}",
    )


def _index(panel: Panel, base: str) -> Panel:
    j = panel.period_index(base)  # ConfigError listing the periods when absent
    label = panel.period_labels[j]
    v = panel.values
    b = v[:, j]
    bad = ~np.isfinite(b) | (b <= 0)
    with np.errstate(invalid="ignore", divide="ignore"):
        out = v / np.where(bad, np.nan, b)[:, None]
    text = f"values divided by each unit's {label} value (1 = its {label} level)"
    if bad.any():
        units = [panel.units[i] for i in np.flatnonzero(bad)]
        finding = Finding(
            "warning",
            "view-index-base-missing",
            f"{len(units)} units have no positive value in {label}, the base of the index "
            f"(e.g. {examples(units)}); they are no data in this view; choose a base period "
            "where every unit has a value",
            tuple(units),
        )
    else:
        finding = Finding("note", "view-indexed", f"view: {text}")
    return panel.with_values(
        out,
        finding=finding,
        variable=f"{panel.meta.variable} indexed to {label}",
        unit_label=f"x the unit's {label} value",
        view=f"view: {text}",
    )


def _deflator(panel: Panel, view: View, spec: InputSpec | None) -> tuple[np.ndarray, str]:
    """One positive factor per period of ``panel`` and a short name of its source."""
    import pandas as pd

    from mapdrift.cells import read_table
    from mapdrift.panel import period_label
    from mapdrift.periods import parse_periods

    if view.file is not None:
        path = view.file
        if not path.exists():
            raise InputError(f"--view {view}: deflator table {path} not found; check the path")
        df = read_table(path)
        lower = {c.lower(): c for c in df.columns}
        pcol = next((lower[n] for n in _PERIOD_NAMES if n in lower), None)
        if pcol is None and spec is not None and spec.period in df.columns:
            pcol = spec.period
        pcol = pcol or df.columns[0]
        col = view.column
        if col is None:
            numeric = [
                c
                for c in df.columns
                if c != pcol
                and pd.to_numeric(df[c].str.replace(",", ""), errors="coerce").notna().all()
            ]
            if len(numeric) != 1:
                raise InputError(
                    f"{path}: which column is the deflator? found "
                    f"{examples(numeric or [c for c in df.columns if c != pcol])}; name it, e.g. "
                    f"--view deflate:{path.name}:{(numeric or [c for c in df.columns if c != pcol] or ['cpi'])[0]}"
                )
            col = numeric[0]
        where, source = path, f"{col} from {path.name}"
    else:
        if spec is None or spec.table is None or not spec.period:
            raise ConfigError(
                f"--view {view}: a deflator column needs a long values table (--period); give "
                "a table of periods and factors instead, e.g. --view deflate:cpi.csv"
            )
        frames = [read_table(p) for p in (spec.table, *spec.append)]
        df = pd.concat([f for f in frames if view.column in f.columns], ignore_index=True)
        pcol, col, where = spec.period, view.column, spec.table
        source = f"column {col} of {spec.table.name}"
        if len(df) == 0:
            raise InputError(
                f"{spec.table}: no column {col!r} for the deflator; columns are "
                f"{examples(frames[0].columns, 8)}"
            )
    if col not in df.columns:
        raise InputError(
            f"{where}: no column {col!r} for the deflator; columns are {examples(df.columns, 8)}"
        )
    if pcol not in df.columns:
        raise InputError(
            f"{where}: no period column {pcol!r}; columns are {examples(df.columns, 8)}"
        )
    texts = df[pcol].astype(str).str.strip()
    keep = texts != ""
    texts, cells = texts[keep], df.loc[keep, col].astype(str).str.strip()
    factor = pd.to_numeric(cells.str.replace(",", ""), errors="coerce")
    bad = cells[factor.isna() & (cells != "")]
    if len(bad):
        raise InputError(
            f"{where}: column {col!r} holds text where a deflator number is expected "
            f"(e.g. {examples(bad.unique())}); fix those cells"
        )
    typed = parse_periods(texts.tolist(), where=f"{where} column {pcol!r}")
    labels = texts.map(lambda t: period_label(typed[t]))  # matched on the typed period
    keys = [period_label(p) for p in panel.periods]
    table = pd.DataFrame({"period": labels.to_numpy(), "factor": factor.to_numpy()}).dropna()
    spread = table.groupby("period")["factor"].agg(["min", "max"])
    varies = spread.index[~np.isclose(spread["min"], spread["max"], rtol=1e-9, atol=0)]
    if len(varies):
        raise InputError(
            f"{where}: the deflator {col!r} differs between rows of one period "
            f"(e.g. {examples(list(varies))}); it must be one factor per period"
        )
    per_period = spread["min"]
    missing = [lab for lab, key in zip(panel.period_labels, keys) if key not in per_period.index]
    if missing:
        raise InputError(
            f"{where}: the deflator {col!r} has no value for {len(missing)} periods of the data "
            f"({examples(missing)}); add them to the table"
        )
    f = per_period.reindex(keys).to_numpy(dtype=float)
    if not (np.isfinite(f) & (f > 0)).all():
        zero = [p for p, x in zip(panel.period_labels, f) if not (np.isfinite(x) and x > 0)]
        raise InputError(
            f"{where}: the deflator {col!r} must be positive; it is not in {examples(zero)}"
        )
    return f, source


def _deflate(panel: Panel, view: View, spec: InputSpec | None) -> Panel:
    factor, source = _deflator(panel, view, spec)
    j = panel.period_index(view.base) if view.base else panel.n_periods - 1
    base = panel.period_labels[j]
    out = panel.values * (factor[j] / factor)[None, :]
    text = f"values deflated by {source} to {base} terms (value x factor in {base} / factor in the period)"
    unit = panel.meta.unit_label
    return panel.with_values(
        out,
        finding=Finding("note", "view-deflated", f"view: {text}"),
        variable=f"{panel.meta.variable}, in {base} terms",
        unit_label=f"{unit}, in {base} terms" if unit else "",
        view=f"view: {text}",
    )


# ------------------------------------------------------------------------------------------
# detecting the trend that calls for a view
# ------------------------------------------------------------------------------------------
#: Thresholds of :func:`common_trend` (common practice, no source; chosen so the invented demo
#: county does not trigger and eighty years of nominal incomes do).
CROWDED_SHARE = 0.8
SHIFT_RATIO = 1.5
MONOTONE_TAU = 0.7


def _fmt(x: float) -> str:
    """A number for a sentence: ``36830.5`` -> ``'36,830'``, ``0.0421`` -> ``'0.0421'``."""
    return f"{x:,.0f}" if abs(x) >= 100 else f"{x:.3g}"


def _kendall_tau(y: np.ndarray) -> float:
    """Kendall's tau-a of ``y`` against its order (NaN-free input); 0 for fewer than 2."""
    n = len(y)
    if n < 2:
        return 0.0
    d = np.sign(y[None, :] - y[:, None])[np.triu_indices(n, 1)]
    return float(d.sum() / (n * (n - 1) / 2))


def _spans(labels: list[str], idx: np.ndarray) -> str:
    """Period columns ``idx`` (sorted) as runs: ``'1969, 2001-2009'``."""
    out: list[str] = []
    start = prev = None
    for j in list(idx) + [None]:
        if j is not None and prev is not None and j == prev + 1:
            prev = j
            continue
        if start is not None:
            out.append(labels[start] if start == prev else f"{labels[start]}-{labels[prev]}")
        start = prev = j
    return examples(out, 4)


def common_trend(
    panel: Panel,
    codes: np.ndarray | None = None,
    *,
    k: int | None = None,
    view: View | str | None = None,
) -> Finding | None:
    """A warning when a common trend, not differences between units, drives the map; or None.

    Two signs (common practice, no source): the period median moves by at least
    :data:`SHIFT_RATIO` times the typical spread between units in a period (median IQR) and
    moves mostly one way (|Kendall tau| of the medians over time >= :data:`MONOTONE_TAU`,
    with 4+ periods); or, with comparable classes (``codes``), some periods put at least
    :data:`CROWDED_SHARE` of their units in one class while the medians drift one way. The
    message says what was seen and which views (other than ``view``, the one in use) compare
    units with each other instead.
    """
    v = panel.values
    have = np.isfinite(v).sum(axis=0) >= 3
    if have.sum() < 2:
        return None
    labels = list(panel.period_labels)
    cols = np.flatnonzero(have)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)
        med = np.nanmedian(v[:, cols], axis=0)
        iqr = np.nanpercentile(v[:, cols], 75, axis=0) - np.nanpercentile(v[:, cols], 25, axis=0)
    spread = float(np.median(iqr))
    shift = float(med.max() - med.min())
    tau = _kendall_tau(med)
    one_way = abs(tau) >= MONOTONE_TAU if len(cols) >= 4 else True
    strong = one_way and shift > 0 and (spread <= 0 or shift >= SHIFT_RATIO * spread)
    crowded_txt = ""
    if codes is not None:
        c = np.asarray(codes)
        n_with = (c >= 0).sum(axis=0)
        kk = int(k or (c.max() + 1 if (c >= 0).any() else 1))
        counts = np.stack([(c == i).sum(axis=0) for i in range(kk)])  # [k, periods]
        top = counts.max(axis=0)
        crowded = np.flatnonzero((n_with >= 5) & (top >= CROWDED_SHARE * np.maximum(n_with, 1)))
        if len(crowded) and kk >= 3:
            cls = counts.argmax(axis=0)
            parts = []
            for name, ci in (("bottom", 0), ("top", kk - 1)):
                sel = crowded[cls[crowded] == ci]
                if len(sel):
                    parts.append(f"the {name} class in {_spans(labels, sel)}")
            mid = crowded[(cls[crowded] != 0) & (cls[crowded] != kk - 1)]
            if len(mid):
                parts.append(f"one middle class in {_spans(labels, mid)}")
            j = int(crowded[np.argmax(top[crowded] / np.maximum(n_with[crowded], 1))])
            crowded_txt = (
                f", and {len(crowded)} of {len(labels)} periods put {CROWDED_SHARE:.0%} or more of "
                f"their units in one class ({'; '.join(parts)}; e.g. {labels[j]}: {int(top[j])} "
                f"of {int(n_with[j])})"
            )
            strong = strong or abs(tau) >= MONOTONE_TAU
    if not strong:
        return None
    word = "rose" if med[-1] > med[0] else "fell"
    spread_txt = (
        f" {shift / spread:.0f} times the typical spread between units in a period"
        if spread > 0
        else " large while units in a period hardly differ"
    )
    current = view if isinstance(view, View) else parse_view(view)
    options = [
        ("relative", "--view relative-median (each period over its median)"),
        ("index", f"--view index:{labels[0]} (each unit over its own {labels[0]} value)"),
        ("deflate", "--view deflate:FILE (a price index per period)"),
    ]
    advice = [o for key, o in options if key != current.kind]
    return Finding(
        "warning",
        "values-common-trend",
        f"the values share a strong common trend (the period median {word} from "
        f"{_fmt(med[0])} in {labels[cols[0]]} to {_fmt(med[-1])} in {labels[cols[-1]]}), so "
        "pooled classes and class changes mostly show that trend, not how units differ; to "
        f"compare units, use {', '.join(advice[:-1])} or {advice[-1]} (in a config: view = "
        f'"relative-median" under [inputs]); the median\'s range is{spread_txt}{crowded_txt}',
    )
