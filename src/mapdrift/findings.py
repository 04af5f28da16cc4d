"""Findings: what loading, checking and analysing the data found worth telling the analyst.

A ``Finding`` has a level (``error`` stops the run, ``warning`` and ``note`` are reported), a stable
kebab-case ``code`` that scripts may rely on, a one-sentence message with counts and examples, and
the affected unit IDs. Every step appends findings; nothing is dropped silently.
"""

from __future__ import annotations

from collections.abc import Iterable, Sequence
from dataclasses import dataclass, field
from typing import Any, Literal

__all__ = ["LEVELS", "Finding", "examples", "plural", "raise_errors", "units_of"]

Level = Literal["error", "warning", "note"]
LEVELS: tuple[str, ...] = ("error", "warning", "note")


@dataclass(frozen=True)
class Finding:
    """One thing found in the data, e.g. ``Finding("warning", "ids-zero-padded", "...", ("07001",))``."""

    level: Level
    code: str
    message: str
    units: tuple[str, ...] = field(default=())

    def __post_init__(self) -> None:
        if self.level not in LEVELS:
            raise ValueError(f"finding level {self.level!r} is not one of {', '.join(LEVELS)}")

    def to_dict(self) -> dict[str, Any]:
        """Plain-JSON form used by ``findings.json`` and the manifest."""
        return {
            "level": self.level,
            "code": self.code,
            "message": self.message,
            "n_units": len(self.units),
            "units": list(self.units),
        }

    @classmethod
    def from_dict(cls, d: dict[str, Any]) -> Finding:
        return cls(d["level"], d["code"], d["message"], tuple(d.get("units", ())))


def examples(items: Iterable[Any], n: int = 5, *, total: bool = True) -> str:
    """Up to ``n`` items joined for a message: ``'a, b, c'`` or ``'a, b, c, ... (12 in all)'``
    (``total=False`` when the message gives the count already: ``'a, b, c, ...'``)."""
    items = list(items)
    shown = ", ".join(str(x) for x in items[:n])
    if len(items) > n:
        shown += f", ... ({len(items)} in all)" if total else ", ..."
    return shown


def raise_errors(findings: Sequence[Finding], error_cls: type[Exception]) -> None:
    """Raise ``error_cls`` with the first error-level finding's message, if any."""
    errors = [f for f in findings if f.level == "error"]
    if errors:
        extra = f" (and {len(errors) - 1} more errors)" if len(errors) > 1 else ""
        raise error_cls(errors[0].message + extra)


def plural(n: int, word: str, words: str | None = None) -> str:
    """``plural(1, "ID")`` -> ``'1 ID'``; ``plural(3, "unit")`` -> ``'3 units'``."""
    return f"{n:,} {word if n == 1 else (words or word + 's')}"


def units_of(findings: Iterable[Finding], code: str) -> frozenset[str]:
    """The units named by the findings with ``code`` (e.g. the small-base units)."""
    return frozenset(u for f in findings if f.code == code for u in f.units)
