"""Period parsing: integer years, months (``2020-03``), quarters (``2020Q1``) and ISO dates.

Periods are sorted chronologically and typed: ``int`` for years, :class:`pandas.Period` for
months, quarters and days. ISO dates that all fall on 1 January are read as years, dates that
all fall on the first of a month as months.
"""

from __future__ import annotations

import re
from collections.abc import Sequence
from typing import Any

__all__ = ["find_year", "missing_periods", "parse_periods"]

_YEAR = re.compile(r"^\s*(\d{4})(?:\.0+)?\s*$")
_MONTH = re.compile(r"^\s*(\d{4})-(\d{1,2})\s*$")
_QUARTER = re.compile(r"^\s*(\d{4})\s*-?\s*[Qq]([1-4])\s*$")
_DATE = re.compile(r"^\s*(\d{4})-(\d{2})-(\d{2})(?:[T ].*)?$")
_YEAR_IN_NAME = re.compile(r"(?<!\d)((?:19|20)\d{2})(?!\d)")


def find_year(name: str) -> str | None:
    """The year a column name carries (``rate_2019`` -> ``'2019'``), or None."""
    found = _YEAR_IN_NAME.findall(str(name))
    return found[-1] if len(found) == 1 else None


def parse_periods(texts: Sequence[Any], *, where: str) -> dict[str, Any]:
    """Map each distinct period text to a typed period; raise InputError naming ``where``.

    >>> parse_periods(["2019", "2018", 2020.0], where="t.csv")
    {'2019': 2019, '2018': 2018, '2020.0': 2020}
    """
    import pandas as pd

    from mapdrift.errors import InputError
    from mapdrift.findings import examples

    distinct = list(dict.fromkeys(str(t).strip() for t in texts))
    if not distinct:
        raise InputError(f"{where}: no periods found")
    if all(_YEAR.match(t) for t in distinct):
        return {t: int(_YEAR.match(t).group(1)) for t in distinct}  # type: ignore[union-attr]
    if all(_MONTH.match(t) for t in distinct):
        out = {}
        for t in distinct:
            y, m = _MONTH.match(t).groups()  # type: ignore[union-attr]
            if not 1 <= int(m) <= 12:
                raise InputError(f"{where}: period {t!r} has month {m}; months run 1 to 12")
            out[t] = pd.Period(year=int(y), month=int(m), freq="M")
        return out
    if all(_QUARTER.match(t) for t in distinct):
        return {
            t: pd.Period(
                year=int(_QUARTER.match(t).group(1)),
                quarter=int(_QUARTER.match(t).group(2)),
                freq="Q",
            )  # type: ignore[union-attr]
            for t in distinct
        }
    if all(_DATE.match(t) for t in distinct):
        try:
            dates = {t: pd.Timestamp(t[:10]) for t in distinct}
        except ValueError as exc:
            raise InputError(f"{where}: a period is not a valid date ({exc})") from None
        if all(d.month == 1 and d.day == 1 for d in dates.values()):
            return {t: d.year for t, d in dates.items()}
        if all(d.day == 1 for d in dates.values()):
            return {t: pd.Period(d, freq="M") for t, d in dates.items()}
        return {t: pd.Period(d, freq="D") for t, d in dates.items()}
    bad = [
        t
        for t in distinct
        if not (_YEAR.match(t) or _MONTH.match(t) or _QUARTER.match(t) or _DATE.match(t))
    ]
    if bad:
        raise InputError(
            f"{where}: periods must be years (2019), months (2020-03), quarters (2020Q1) or ISO "
            f"dates (2020-03-31); found {examples(bad)}"
        )
    raise InputError(
        f"{where}: periods mix kinds (e.g. years and months: {examples(distinct)}); use one kind"
    )


def missing_periods(periods: Sequence[Any]) -> list[Any]:
    """Periods absent from an otherwise regular series (gaps), in order."""
    import pandas as pd

    if len(periods) < 2:
        return []
    first, last = periods[0], periods[-1]
    if isinstance(first, int):
        full = range(first, last + 1)
    else:
        full = pd.period_range(first, last, freq=first.freq)
    have = set(periods)
    return [p for p in full if p not in have]
