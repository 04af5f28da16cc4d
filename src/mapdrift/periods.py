"""Periods as they are written, and the one rule for their spacing (steps and gaps).

Forms read (each distinct label is parsed once, however many rows carry it):

- years ``2019`` (also ``2019.0``), months ``2020-03``, quarters ``2020Q1``, ISO dates
  ``2020-03-31`` (dates all on 1 January are years, all on the first of a month are months);
- two-digit years ``74`` (e.g. from columns ``SID74``/``SID79``): 69-99 are read as 19xx and
  00-68 as 20xx, the pivot POSIX ``strptime %y`` uses (common practice, no source); a finding
  names the century assumed;
- multi-year periods ``2015-2019`` (ACS-style five-year estimates), ``2015-19``, ``2015/16``
  and four-digit start-end tokens such as ``7984`` (from ``HR7984``: 1979-1984). The label is
  kept for display; the period's **end year** places it for ordering and spacing.

Periods are typed: ``int`` for years (and for multi-year periods, their end), :class:`pandas.Period`
for months, quarters and days.

**Spacing.** :func:`spacing` infers the series' regular step once from the data: the smallest
difference between consecutive periods, when every difference is a multiple of it (decadal data
have a step of 10 years and no gaps); with only two periods, one calendar unit (or their
difference when it is a multiple of 5 years, e.g. 2000 and 2010). Periods whose differences are
not multiples of one step (1984, 1988, 1993) are *irregular*: every consecutive pair is one step
and nothing is a gap. ``check``, ``changes``, trends and the report use this one rule; words for a
step come from :attr:`Spacing.step_label` (never "one year" when steps are not years).

**Outlying periods.** :func:`outlying` finds one or two periods at either end that sit far
outside the run of the others (``2109`` among 2015-2023: a typo), measured in the run's own
step, so decadal, quarterly and multi-year series are judged alike.
"""

from __future__ import annotations

import re
from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from mapdrift.findings import Finding

__all__ = [
    "PeriodParse",
    "Spacing",
    "distance",
    "find_year",
    "missing_periods",
    "outlying",
    "parse_periods",
    "read_periods",
    "spacing",
]

_YEAR = re.compile(r"^\s*(\d{4})(?:\.0+)?\s*$")
_MONTH = re.compile(r"^\s*(\d{4})-(\d{1,2})\s*$")
_QUARTER = re.compile(r"^\s*(\d{4})\s*-?\s*[Qq]([1-4])\s*$")
_DATE = re.compile(r"^\s*(\d{4})-(\d{2})-(\d{2})(?:[T ].*)?$")
_RANGE = re.compile(r"^\s*(\d{4})\s*(?:-|–|/|_|to)\s*(\d{4}|\d{2})\s*$")
_TWO = re.compile(r"^\s*(\d{2})\s*$")
_PAIR = re.compile(r"^\s*(\d{2})(\d{2})\s*$")
_YEAR_IN_NAME = re.compile(r"(?<!\d)((?:19|20)\d{2})(?!\d)")
_RANGE_IN_NAME = re.compile(r"(?<!\d)((?:19|20)\d{2}[-_–](?:(?:19|20)\d{2}|\d{2}))(?!\d)")
#: two-digit years at or above the pivot are 19xx, below it 20xx (POSIX strptime %y)
CENTURY_PIVOT = 69


def find_year(name: str) -> str | None:
    """The period a column name carries: a year (``rate_2019`` -> ``'2019'``) or a range of
    years (``rate_2015_2019`` -> ``'2015_2019'``), else None.

    >>> find_year("rate_2019"), find_year("acs_2015-2019_rate"), find_year("POLY_ID")
    ('2019', '2015-2019', None)
    """
    ranges = _RANGE_IN_NAME.findall(str(name))
    if len(ranges) == 1:
        return ranges[0]
    found = _YEAR_IN_NAME.findall(str(name))
    return found[-1] if len(found) == 1 else None


def _century(yy: int) -> int:
    return 1900 + yy if yy >= CENTURY_PIVOT else 2000 + yy


@dataclass(frozen=True)
class PeriodParse:
    """The result of parsing distinct period labels.

    ``mapping``: label as written -> typed period (int year, end year, or pandas Period);
    ``labels``: typed period -> label for display; ``findings``: notes on what was assumed.
    """

    mapping: dict[str, Any]
    labels: dict[Any, str] = field(default_factory=dict)
    findings: tuple[Finding, ...] = ()


def _fail(
    where: str, bad: list[str], columns: dict[str, str] | None, hint: str | None
) -> Exception:
    from mapdrift.errors import InputError
    from mapdrift.findings import examples

    if columns:
        shown = examples([f"{t!r} (column {columns[t]})" for t in bad if t in columns], 4)
        return InputError(
            f"{where}: cannot read the period in {shown}; periods must be years (2019), two-digit "
            "years (74), ranges (2015-2019), months (2020-03), quarters (2020Q1) or dates; rename "
            "those columns (e.g. rate_2019) or capture only the period part with a regex group, "
            + (f"e.g. --columns '{hint}'" if hint else r"e.g. --columns 'rate_(\d{4})'")
        )
    return InputError(
        f"{where}: periods must be years (2019), months (2020-03), quarters (2020Q1), ISO "
        f"dates (2020-03-31) or ranges (2015-2019); found {examples(bad)}; recode those labels "
        "as one of these (e.g. a lookup column of years) and point --period at it"
    )


def read_periods(
    texts: Sequence[Any],
    *,
    where: str,
    columns: dict[str, str] | None = None,
    hint: str | None = None,
) -> PeriodParse:
    """Parse distinct period labels (see the module doc for the forms); raise InputError naming
    ``where`` (and the columns a label came from, for wide tables, with ``hint`` as the
    ``--columns`` regex to suggest) when one cannot be read.

    >>> r = read_periods(["74", "79"], where="sids")
    >>> r.mapping, r.findings[0].code
    ({'74': 1974, '79': 1979}, 'periods-century-assumed')
    >>> read_periods(["7984", "8488", "8893"], where="stl").labels
    {1984: '1979-1984', 1988: '1984-1988', 1993: '1988-1993'}
    """
    import pandas as pd

    from mapdrift.errors import InputError
    from mapdrift.findings import examples

    distinct = list(dict.fromkeys(str(t).strip() for t in texts))
    if not distinct:
        raise InputError(f"{where}: no periods found")

    def every(rx: re.Pattern[str]) -> bool:
        return all(rx.match(t) for t in distinct)

    if every(_YEAR):
        years = {t: int(_YEAR.match(t).group(1)) for t in distinct}  # type: ignore[union-attr]
        if all(1000 <= y <= 2999 for y in years.values()) or not every(_PAIR):
            return PeriodParse(years)
    if every(_MONTH):
        parts = {t: tuple(int(x) for x in _MONTH.match(t).groups()) for t in distinct}  # type: ignore[union-attr]
        school = all(m == (y + 1) % 100 for y, m in parts.values())
        if all(1 <= m <= 12 for _, m in parts.values()) and not school:
            return PeriodParse(
                {t: pd.Period(year=y, month=m, freq="M") for t, (y, m) in parts.items()}
            )
        if not school:
            bad = [t for t, (_, m) in parts.items() if not 1 <= m <= 12]
            if not all(_RANGE.match(t) for t in distinct):
                raise InputError(
                    f"{where}: period {bad[0]!r} has month {parts[bad[0]][1]}; months run 1 to 12"
                )
    if every(_QUARTER):
        return PeriodParse(
            {
                t: pd.Period(year=int(m.group(1)), quarter=int(m.group(2)), freq="Q")
                for t in distinct
                if (m := _QUARTER.match(t))
            }
        )
    if every(_DATE):
        try:
            dates = {t: pd.Timestamp(t[:10]) for t in distinct}
        except ValueError as exc:
            raise InputError(f"{where}: a period is not a valid date ({exc})") from None
        if all(d.month == 1 and d.day == 1 for d in dates.values()):
            return PeriodParse({t: d.year for t, d in dates.items()})
        if all(d.day == 1 for d in dates.values()):
            return PeriodParse({t: pd.Period(d, freq="M") for t, d in dates.items()})
        return PeriodParse({t: pd.Period(d, freq="D") for t, d in dates.items()})
    if every(_RANGE) or every(_PAIR):
        spans: dict[str, tuple[int, int]] = {}
        for t in distinct:
            m = _RANGE.match(t)
            if m:
                a, b = int(m.group(1)), m.group(2)
                end = (
                    int(b)
                    if len(b) == 4
                    else a - a % 100 + int(b) + (100 if int(b) < a % 100 else 0)
                )
            else:
                m = _PAIR.match(t)
                a, end = _century(int(m.group(1))), _century(int(m.group(2)))  # type: ignore[union-attr]
                if end < a:  # 9903: 1999-2003
                    end += 100
            spans[t] = (a, end)
        bad = [t for t, (a, b) in spans.items() if not a <= b <= a + 30]
        if bad:
            raise InputError(
                f"{where}: period {bad[0]!r} is not a range of years; write start-end, e.g. 2015-2019"
            )
        ends = [b for _, b in spans.values()]
        if len(set(ends)) < len(ends):
            raise InputError(
                f"{where}: periods {examples(distinct)} share an end year; multi-year periods are "
                "placed at their end year, so each needs its own"
            )
        mapping = {t: b for t, (a, b) in spans.items()}
        labels = {b: (t if _RANGE.match(t) else f"{a}-{b}") for t, (a, b) in spans.items()}
        note = Finding(
            "note",
            "periods-multi-year",
            f"{where}: multi-year periods ({examples(sorted(labels.values()))}) are ordered and "
            "spaced by their end year; their labels are kept for display",
        )
        notes = [note]
        if every(_PAIR) and not every(_RANGE):
            notes.append(
                _century_note(where, sorted({t[:2] for t in distinct} | {t[2:] for t in distinct}))
            )
        return PeriodParse(mapping, labels, tuple(notes))
    if every(_TWO):
        mapping = {t: _century(int(t)) for t in distinct}
        return PeriodParse(mapping, {}, (_century_note(where, sorted(distinct)),))
    kinds = [_YEAR, _MONTH, _QUARTER, _DATE, _RANGE, _TWO, _PAIR]
    bad = [t for t in distinct if not any(rx.match(t) for rx in kinds)]
    if bad:
        raise _fail(where, bad, columns, hint)
    raise InputError(
        f"{where}: periods mix kinds (e.g. years and months: {examples(distinct)}); use one kind"
    )


def _century_note(where: str, two_digit: list[str]) -> Finding:
    from mapdrift.findings import examples

    read = [f"{t} -> {_century(int(t))}" for t in two_digit]
    centuries = sorted({_century(int(t)) // 100 + 1 for t in two_digit})
    cent = " and ".join(f"{c}th century" if c != 21 else "21st century" for c in centuries)
    return Finding(
        "note",
        "periods-century-assumed",
        f"{where}: two-digit years read as the {cent} ({examples(read, 4)}; {CENTURY_PIVOT}-99 are "
        f"19xx, 00-{CENTURY_PIVOT - 1:02d} are 20xx); rename the columns with four-digit years if that is wrong",
    )


def parse_periods(texts: Sequence[Any], *, where: str) -> dict[str, Any]:
    """Map each distinct period text to a typed period; raise InputError naming ``where``.

    >>> parse_periods(["2019", "2018", 2020.0], where="t.csv")
    {'2019': 2019, '2018': 2018, '2020.0': 2020}
    """
    return read_periods(texts, where=where).mapping


# -- spacing -------------------------------------------------------------------------------
_UNIT = {"Y": "year", "M": "month", "Q": "quarter", "D": "day"}


@dataclass(frozen=True)
class Spacing:
    """The series' step: ``step`` in calendar ``unit`` s (None when irregular or a single period),
    ``adjacent`` (one flag per consecutive pair: exactly one step apart) and ``gaps`` (periods
    missing from a regular series, as labels).

    >>> s = spacing([1940, 1950, 1960, 1980])
    >>> s.step, s.step_label, s.gaps, s.adjacent
    (10, 'one step (10 years)', ('1970',), (True, True, False))
    >>> spacing([1984, 1988, 1993]).step_label
    'one step'
    """

    step: int | None
    unit: str | None
    adjacent: tuple[bool, ...] = ()
    gaps: tuple[str, ...] = ()

    @property
    def regular(self) -> bool:
        return self.step is not None

    @property
    def step_label(self) -> str:
        """Words for one step, for "in one year" style sentences: ``'one year'``,
        ``'one quarter'``, ``'one step (10 years)'``, or ``'one step'`` when irregular."""
        if self.step is None or self.unit is None:
            return "one step"
        if self.step == 1:
            return f"one {self.unit}"
        return f"one step ({self.step} {self.unit}s)"


def _positions(periods: Sequence[Any]) -> tuple[np.ndarray | None, str | None]:
    out = []
    unit = None
    for p in periods:
        if isinstance(p, bool):
            return None, None
        if isinstance(p, int | np.integer):
            out.append(int(p))
            u = "year"
        elif hasattr(p, "ordinal") and hasattr(p, "freqstr"):
            out.append(int(p.ordinal))
            u = _UNIT.get(str(p.freqstr)[:1])
        else:
            return None, None
        if unit is not None and u != unit:
            return None, None
        unit = u
    return np.asarray(out, dtype=np.int64), unit


def distance(a: Any, b: Any) -> int:
    """Calendar units between two typed periods of one kind (years, or a Period's own unit).

    >>> distance(2109, 2023)
    86
    """
    pos, _ = _positions([a, b])
    if pos is None:
        raise ValueError(f"periods {a!r} and {b!r} are not of one calendar kind")
    return abs(int(pos[1] - pos[0]))


def spacing(periods: Sequence[Any]) -> Spacing:
    """The one spacing rule (see the module doc) for sorted, typed periods."""
    n = len(periods)
    pos, unit = _positions(periods)
    if n < 2:
        return Spacing(1 if pos is not None else None, unit)
    if pos is None:
        return Spacing(None, None, (True,) * (n - 1))
    d = np.diff(pos)
    if (d <= 0).any():
        return Spacing(None, unit, (True,) * (n - 1))
    if n == 2:
        step = int(d[0]) if unit == "year" and d[0] % 5 == 0 else 1
    else:
        step = int(d.min())
        if (d % step).any():
            return Spacing(None, unit, (True,) * (n - 1))
    adjacent = tuple(bool(x) for x in d == step)
    gaps: list[str] = []
    if not all(adjacent):
        have = set(pos.tolist())
        missing = [x for x in range(int(pos[0]), int(pos[-1]) + 1, step) if x not in have]
        if unit == "year":
            gaps = [str(x) for x in missing]
        else:
            import pandas as pd

            freq = periods[0].freq
            gaps = [str(pd.Period(ordinal=x, freq=freq)) for x in missing]
    return Spacing(step, unit, adjacent, tuple(gaps))


def missing_periods(periods: Sequence[Any]) -> list[str]:
    """Labels of the periods absent from an otherwise regular series (gaps), in order.

    >>> missing_periods([2015, 2016, 2019])
    ['2017', '2018']
    >>> missing_periods([1940, 1950, 1960])
    []
    """
    return list(spacing(periods).gaps)


#: an end period is outlying when its gap to the run is at least this many of the run's steps...
OUTLYING_STEPS = 10
#: ... and wider than this many times the run's whole span (or see ``rows`` in :func:`outlying`)
OUTLYING_SPAN = 1.5


def outlying(periods: Sequence[Any], rows: Sequence[int] | None = None) -> tuple[int, ...]:
    """Indices of the (sorted, typed) ``periods`` that sit far outside the run of the others,
    such as a typo ``2109`` among 2015-2023.

    The run is the longest stretch of periods whose consecutive differences stay under 5 times
    the median difference; it needs at least 3 periods. The periods before it (or after it),
    if there are only one or two, are outlying when the gap that separates them from the run is

    - at least :data:`OUTLYING_STEPS` of the run's usual step (its median difference) and wider
      than :data:`OUTLYING_SPAN` times the run's span, or
    - at least 5 steps, when ``rows`` (the number of table rows of each period) is given and
      each of them has under a tenth of the run's median rows (a few stray rows).

    The thresholds are our own rule (common practice, no source): a real panel with a missing
    year (gap of 2 steps), a decadal census series, or a few census years before annual
    estimates (1990, 2000, 2010, 2015-2023) is not flagged; a transposed digit (2019 -> 2109,
    2091) or a wrong century (1915) is.

    >>> outlying([2015, 2016, 2017, 2018, 2019, 2020, 2021, 2022, 2023, 2109])
    (9,)
    >>> outlying([1940, 1950, 1960, 1970, 1980, 1990, 2000, 2100])
    (7,)
    >>> outlying([1990, 2000, 2010, 2015, 2016, 2017, 2018, 2019])
    ()
    >>> outlying([2015, 2016, 2017, 2018, 2019, 2020, 2021, 2022, 2024])
    ()
    >>> outlying([2015, 2016, 2017, 2018, 2027], rows=[900, 900, 900, 900, 3])
    (4,)
    """
    pos, _ = _positions(periods)
    n = len(periods)
    if pos is None or n < 4:
        return ()
    d = np.diff(pos)
    if (d <= 0).any():
        return ()
    breaks = np.flatnonzero(d >= 5 * float(np.median(d)))
    starts = np.r_[0, breaks + 1]
    ends = np.r_[breaks + 1, n]
    run = int(np.argmax(ends - starts))
    lo, hi = int(starts[run]), int(ends[run])
    if hi - lo < 3:
        return ()
    step = float(np.median(d[lo : hi - 1]))
    span = float(pos[hi - 1] - pos[lo])
    counts = None if rows is None else np.asarray(rows, dtype=np.float64)
    usual = None if counts is None else float(np.median(counts[lo:hi]))
    out: list[int] = []
    for side, gap in (
        (range(0, lo), d[lo - 1] if lo else 0),
        (range(hi, n), d[hi - 1] if hi < n else 0),
    ):
        if not 1 <= len(side) <= 2:
            continue
        far = gap >= OUTLYING_STEPS * step and gap > OUTLYING_SPAN * span
        stray = (
            usual is not None
            and counts is not None
            and gap >= 5 * step
            and bool((counts[list(side)] < 0.1 * usual).all())
        )
        if far or stray:
            out.extend(side)
    return tuple(out)
