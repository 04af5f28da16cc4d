"""Unit IDs: normalising to strings and matching a table's IDs to the layer's, vectorised.

IDs are read as text on both sides. Whitespace and a trailing ``.0`` (a number that went through
a spreadsheet) are stripped. When the layer's IDs are all digits of one width and the table's
all-digit IDs are shorter, the table's are zero-padded (``6019`` -> ``06019``) and reported.
Every step works on whole columns (pandas string methods, hash joins): no loop over rows.
"""

from __future__ import annotations

import difflib
import unicodedata
from collections.abc import Iterable, Sequence
from typing import TYPE_CHECKING, Any

import numpy as np

from mapdrift.findings import Finding, examples, plural

if TYPE_CHECKING:
    import pandas as pd

__all__ = ["closest", "locate", "normalise", "normalise_ids", "pad_ids", "zfill"]


def normalise(values: Any) -> np.ndarray:
    """IDs as an object array of strings: whitespace and a float's trailing ``.0`` removed,
    missing -> ``''``. One vectorised pass over the column.

    >>> normalise([" 6019 ", 6019.0, "06019", None]).tolist()
    ['6019', '6019', '06019', '']
    """
    import pandas as pd

    if not isinstance(values, pd.Series):
        values = pd.Series(values if isinstance(values, np.ndarray) else list(values), dtype=object)
    s = values
    if s.dtype == object and pd.api.types.infer_dtype(s, skipna=True) in ("floating", "integer"):
        s = pd.to_numeric(s)
    s = s.reset_index(drop=True)
    missing = s.isna().to_numpy()
    if pd.api.types.is_float_dtype(s.dtype):
        whole = s.notna() & (s % 1 == 0)
        text = s.astype(object).astype(str)
        text[whole] = s[whole].astype(np.int64).astype(str)
    elif pd.api.types.is_integer_dtype(s.dtype):
        text = s.astype(str)
    else:
        text = s.astype(object).where(~missing, "").astype(str)
    text = _text(text.to_numpy(dtype=object)).str.strip()
    dotted = text.str.contains(".", regex=False).fillna(False).to_numpy(bool)
    out = text.to_numpy(dtype=object)
    if dotted.any():  # a float's trailing ".0": only the few cells with a point go through re
        fixed = pd.Series(out[dotted], dtype=object).str.replace(
            r"^(-?\d+)\.0+$", r"\1", regex=True
        )
        out[dotted] = fixed.to_numpy(dtype=object)
    out[missing] = ""
    return out


def _text(values: np.ndarray) -> pd.Series:
    """Strings as a pandas Series, pyarrow-backed when available (string methods in C)."""
    import pandas as pd

    try:
        return pd.Series(values, dtype="string[pyarrow]")
    except (ImportError, TypeError, ValueError):
        return pd.Series(values, dtype=object).astype(str)


def normalise_ids(values: Iterable[object]) -> list[str]:
    """Strings with whitespace and a float's trailing ``.0`` removed; missing -> ``''``.

    >>> normalise_ids([" 6019 ", 6019.0, "06019", None])
    ['6019', '6019', '06019', '']
    """
    return normalise(values).tolist()


def zfill(ids: np.ndarray, width: int) -> np.ndarray:
    """Zero-pad strings to ``width`` in C (numpy string ufuncs), as an object array.

    >>> zfill(np.array(["6019", "12"], dtype=object), 5).tolist()
    ['06019', '00012']
    """
    arr = np.asarray(ids, dtype=str)
    strings = getattr(np, "strings", None)
    padded = strings.zfill(arr, width) if strings is not None else np.char.zfill(arr, width)
    return padded.astype(object)


def _digits(ids: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(all-digit mask, lengths) of an object array of strings, vectorised."""
    s = _text(np.asarray(ids, dtype=object))
    digit = s.str.fullmatch(r"[0-9]+").fillna(False).to_numpy(bool)
    return digit, s.str.len().fillna(0).to_numpy(dtype=np.int64)


def pad_ids(
    table_ids: Sequence[str] | np.ndarray,
    layer_ids: Sequence[str] | np.ndarray,
    *,
    width: int | None,
    where: str,
) -> tuple[np.ndarray, list[Finding]]:
    """Zero-pad all-digit table IDs to the layer's fixed width (or ``width``), reporting it.

    Without ``width`` padding happens only when it helps: the padded IDs are in the layer and
    the raw ones are not.
    """
    import pandas as pd

    findings: list[Finding] = []
    table = np.asarray(table_ids, dtype=object)
    layer = np.asarray(layer_ids, dtype=object)
    uniq = pd.unique(table)
    u_digit, u_len = _digits(uniq)
    if width is None:
        l_digit, l_len = _digits(layer[layer != ""])
        widths = np.unique(l_len)
        if len(widths) != 1 or not l_digit.all():
            return table, findings
        width = int(widths[0])
        short = uniq[u_digit & (u_len < width)]
        if not len(short):
            return table, findings
        padded = zfill(short, width)
        layer_index = pd.Index(layer)
        helps = layer_index.get_indexer(padded) >= 0
        helps &= layer_index.get_indexer(short) < 0
        if not helps.any():
            return table, findings
    short_mask = u_digit & (u_len < width)
    changed = np.sort(uniq[short_mask].astype(str))
    if not len(changed):
        return table, findings
    fixed = uniq.copy()
    fixed[short_mask] = zfill(uniq[short_mask], width)
    codes = pd.Index(uniq).get_indexer(table)
    out = fixed[codes]
    findings.append(
        Finding(
            "warning",
            "ids-zero-padded",
            f"{where}: {plural(len(changed), 'ID')} {'was' if len(changed) == 1 else 'were'} shorter than the layer's {width}-digit IDs and "
            f"were zero-padded (e.g. {examples([f'{c} -> {c.zfill(width)}' for c in changed[:4]], 3, total=False)}); "
            "they probably lost their leading zeros in a spreadsheet",
            tuple(zfill(changed, width).tolist()),
        )
    )
    return out, findings


def locate(ids: np.ndarray, layer_ids: np.ndarray) -> np.ndarray:
    """Row of each ID in the layer (``-1`` when absent): one hash join."""
    import pandas as pd

    return pd.Index(layer_ids).get_indexer(ids)


def _fold(text: str) -> str:
    """Case, accents, punctuation and spacing folded away (``'Querétaro de-Arteaga'`` ->
    ``'queretaro de arteaga'``) for comparing names."""
    t = unicodedata.normalize("NFKD", text)
    t = "".join(c for c in t if not unicodedata.combining(c)).casefold()
    return " ".join("".join(c if c.isalnum() else " " for c in t).split())


def _name_score(a: str, b: str) -> float:
    """Similarity of two folded names: whole-string ratio, or the ratio against the start of the
    longer one (``'quertaro'`` vs ``'queretaro de arteaga'``) slightly discounted."""
    if not a or not b:
        return 0.0
    whole = difflib.SequenceMatcher(None, a, b).ratio()
    short, long_ = (a, b) if len(a) <= len(b) else (b, a)
    head = difflib.SequenceMatcher(None, short, long_[: len(short) + 1]).ratio() * 0.95
    return max(whole, head)


def closest(ids: Sequence[str], candidates: Sequence[str], n: int = 3) -> dict[str, str]:
    """For each of the first ``n`` IDs, the closest candidate (for 'did you mean' hints).

    Codes are compared as written; names also with case, accents and spacing folded, and
    against the start of longer names (``Queretaro`` -> ``Queretaro de Arteaga``).

    >>> closest(["Quertaro", "Veracruz"], ["Queretaro de Arteaga", "Veracruz-Llave", "Yucatan"])
    {'Quertaro': 'Queretaro de Arteaga', 'Veracruz': 'Veracruz-Llave'}
    """
    out: dict[str, str] = {}
    pool = list(candidates)
    names = any(not str(i).replace("-", "").isdigit() for i in list(ids)[:n])
    folded = [_fold(str(c)) for c in pool] if names and len(pool) <= 20_000 else None
    for i in list(ids)[:n]:
        match = difflib.get_close_matches(i, pool, n=1, cutoff=0.6)
        if match:
            out[i] = match[0]
            continue
        if folded is not None:
            f = _fold(str(i))
            scores = [_name_score(f, c) for c in folded]
            best = int(np.argmax(scores)) if scores else -1
            if best >= 0 and scores[best] >= 0.75:
                out[i] = pool[best]
    return out
