"""What a briefing says, independent of its form (HTML, Markdown, slides, PPTX).

The pipeline fills a :class:`Brief` from the run's results; :mod:`report`, :mod:`slides` and
:mod:`deck` only lay it out. Texts coming from the data (unit names) stay plain strings here
and are escaped by each writer.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING

if TYPE_CHECKING:
    import pandas as pd

__all__ = ["CAUTIONS", "Brief", "Figure", "Section", "Table", "phrase"]

#: The cautions every report and deck carries (also in the README).
CAUTIONS: tuple[str, ...] = (
    "Rates for small areas are unstable: a few events on a small base swing the rate and the "
    "class. Read single units with care; check the small-base findings.",
    "Filings are not outcomes: a foreclosure filing does not mean a household lost its home, and "
    "reporting practice differs between courts and years.",
    "Maps of neighbourhood distress can stigmatise places and the people who live there. They "
    "must never be used to deny or price credit, insurance or housing by area.",
    "Follow local fair-housing and fair-lending law and licensed professional practice; this "
    "briefing gives no legal or professional advice.",
)


@dataclass(frozen=True)
class Figure:
    """An image file of the run with a caption (and alt text for the report)."""

    path: Path
    caption: str
    alt: str = ""


@dataclass(frozen=True)
class Table:
    """A table to show (first ``max_rows`` rows; the full table is in the CSV named)."""

    df: pd.DataFrame
    caption: str
    max_rows: int = 25
    csv_name: str | None = None


@dataclass(frozen=True)
class Section:
    """One part of the briefing; ``key`` is stable (tests and anchors use it)."""

    key: str
    title: str
    paragraphs: tuple[str, ...] = ()
    bullets: tuple[str, ...] = ()
    figures: tuple[Figure, ...] = ()
    tables: tuple[Table, ...] = ()


@dataclass(frozen=True)
class Brief:
    """The whole briefing: headline numbers first, then sections, method and cautions."""

    title: str
    subtitle: str = ""
    author: str = ""
    source: str = ""
    date: str = ""
    headline: tuple[tuple[str, str], ...] = ()
    sections: tuple[Section, ...] = ()
    method: tuple[tuple[str, str], ...] = ()
    warning: str | None = None
    cautions: tuple[str, ...] = field(default=CAUTIONS)

    def section(self, key: str) -> Section | None:
        return next((s for s in self.sections if s.key == key), None)


def phrase(label: str, value: str) -> str:
    """A headline number and its label: ``('units that jumped', '1')`` -> ``'1 unit that jumped'``."""
    if value == "1" and label.startswith("units"):
        label = "unit" + label[len("units") :]
    return f"{value} {label}"
