"""Text from data files made safe to draw and write: no control characters.

A unit name with a line break, a tab or a bidirectional override would break a slide's text
layout, start a new heading in ``report.md`` or reorder what a reader sees. :func:`clean`
turns every control character (Unicode Cc), line or paragraph separator (Zl, Zp) and
bidirectional control into a space, collapses runs of spaces and trims the ends. It is applied
where names enter (:class:`mapdrift.panel.Panel`) and to the briefing's own texts.
"""

from __future__ import annotations

import re
from collections.abc import Iterable

__all__ = ["clean", "clean_all", "needs_cleaning"]

# C0 and C1 controls (tab, CR, LF, ESC, NEL ...), line/paragraph separators, bidi controls
_BAD = re.compile(r"[\x00-\x1f\x7f-\x9f\u2028\u2029\u202a-\u202e\u2066-\u2069]")
_SPACES = re.compile(r"  +")


def needs_cleaning(text: str) -> bool:
    return _BAD.search(text) is not None


def clean(text: str) -> str:
    """``'Oak\\nHill\\t(west)'`` -> ``'Oak Hill (west)'``; clean text is returned unchanged."""
    if not _BAD.search(text):
        return text
    return _SPACES.sub(" ", _BAD.sub(" ", text)).strip()


def clean_all(texts: Iterable[str]) -> tuple[tuple[str, ...], list[int]]:
    """Cleaned texts and the positions that changed (a quick scan first: most data is clean)."""
    texts = tuple(texts)
    try:
        joined = "".join(texts)  # one scan in C: most data is clean
    except TypeError:  # a non-text name (a number): compare as text
        texts = tuple(map(str, texts))
        joined = "".join(texts)
    if not _BAD.search(joined):
        return texts, []
    out = tuple(clean(t) for t in texts)
    return out, [i for i, (a, b) in enumerate(zip(texts, out)) if a != b]
