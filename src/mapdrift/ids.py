"""Unit IDs: normalising to strings and matching a table's IDs to the layer's.

IDs are read as text on both sides. Whitespace and a trailing ``.0`` (a number that went through
a spreadsheet) are stripped. When the layer's IDs are all digits of one width and the table's
all-digit IDs are shorter, the table's are zero-padded (``6019`` -> ``06019``) and reported.
"""

from __future__ import annotations

import difflib
import re
from collections.abc import Iterable, Sequence

import numpy as np

from mapdrift.findings import Finding, examples, plural

__all__ = ["closest", "normalise_ids", "pad_ids"]

_TRAILING_ZERO = re.compile(r"^(-?\d+)\.0+$")


def normalise_ids(values: Iterable[object]) -> list[str]:
    """Strings with whitespace and a float's trailing ``.0`` removed; missing -> ``''``.

    >>> normalise_ids([" 6019 ", 6019.0, "06019", None])
    ['6019', '6019', '06019', '']
    """
    out = []
    for v in values:
        if v is None or (isinstance(v, float) and np.isnan(v)):
            out.append("")
            continue
        if isinstance(v, float) and v.is_integer():
            v = int(v)
        s = str(v).strip()
        m = _TRAILING_ZERO.match(s)
        out.append(m.group(1) if m else s)
    return out


def pad_ids(
    table_ids: Sequence[str], layer_ids: Sequence[str], *, width: int | None, where: str
) -> tuple[list[str], list[Finding]]:
    """Zero-pad all-digit table IDs to the layer's fixed width (or ``width``), reporting it."""
    findings: list[Finding] = []
    if width is None:
        widths = {len(i) for i in layer_ids if i}
        if len(widths) != 1 or not all(i.isdigit() for i in layer_ids if i):
            return list(table_ids), findings
        width = widths.pop()
        layer_set = set(layer_ids)
        short = [i for i in set(table_ids) if i.isdigit() and len(i) < width]
        # only pad when padding helps: the padded IDs are in the layer and the raw ones are not
        if not short or not any(i.zfill(width) in layer_set and i not in layer_set for i in short):
            return list(table_ids), findings
    padded = [i.zfill(width) if i.isdigit() and len(i) < width else i for i in table_ids]
    changed = sorted({a for a, b in zip(table_ids, padded) if a != b})
    if changed:
        findings.append(
            Finding(
                "warning",
                "ids-zero-padded",
                f"{where}: {plural(len(changed), 'ID')} {'was' if len(changed) == 1 else 'were'} shorter than the layer's {width}-digit IDs and "
                f"were zero-padded (e.g. {examples([f'{c} -> {c.zfill(width)}' for c in changed], 3, total=False)}); "
                "they probably lost their leading zeros in a spreadsheet",
                tuple(c.zfill(width) for c in changed),
            )
        )
    return padded, findings


def closest(ids: Sequence[str], candidates: Sequence[str], n: int = 3) -> dict[str, str]:
    """For each ID, the closest candidate by similarity (for 'did you mean' hints)."""
    out: dict[str, str] = {}
    pool = list(candidates)
    for i in ids[:n]:
        match = difflib.get_close_matches(i, pool, n=1, cutoff=0.6)
        if match:
            out[i] = match[0]
    return out
