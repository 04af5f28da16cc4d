"""Reading values tables and turning their cells into numbers, counting every non-number.

Tables are read with every column as text so IDs keep their leading zeros. The CSV dialect is
decided once per file from evidence, never per cell:

- the **separator** (``,`` ``;`` tab ``|``) from a sample of the first lines (the candidate that
  splits every sampled line into the same number of fields, more than one);
- the **decimal mark** from the value columns' cells (:func:`decimal_evidence`): ``5,4`` or
  ``1.234,5`` say "decimal comma", ``5.4`` or ``1,234.5`` say "decimal point". Cells such as
  ``1,234`` (or ``1.234`` in a ``;``-separated file) read either way: when nothing else in the
  file decides, loading stops and asks (``--decimal ,`` or ``--decimal .``, ``[inputs] decimal``).

Value cells that are not numbers (suppression marks such as ``(D)``, ``*``, ``n/a``, ``-``,
blanks) become missing and are counted by marker; ``--missing`` codes such as ``-999`` become
missing too; cells read with thousands separators are counted in a note. Infinite values and
``1_000``-style numbers are errors. Each distinct cell text is parsed once, vectorised.
"""

from __future__ import annotations

import csv
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np

from mapdrift.errors import InputError
from mapdrift.findings import Finding, examples, plural

if TYPE_CHECKING:
    import pandas as pd

__all__ = [
    "TABLE_SUFFIXES",
    "DecimalEvidence",
    "Distinct",
    "decide_decimal",
    "decimal_evidence",
    "distinct",
    "need_pyarrow",
    "read_table",
    "sniff_separator",
    "to_numbers",
]

TABLE_SUFFIXES = (".csv", ".tsv", ".txt", ".parquet", ".xlsx")
_SEPARATORS = (",", ";", "\t", "|")
_SAMPLE_BYTES = 64 * 1024

# cell shapes (on stripped text); "group" = exactly 1-3 digits, a mark, 3 digits: reads either way
_SHAPES = {
    "comma_group": r"[+-]?\d{1,3},\d{3}",
    "comma_decimal": r"[+-]?(?:\d+,\d{1,2}|\d+,\d{4,}|0,\d+|\d{4,},\d+|\d{1,3}(?:\.\d{3})+,\d+)",
    "point_thousands": r"[+-]?\d{1,3}(?:\.\d{3}){2,}|[+-]?\d{1,3}(?:\.\d{3})+,\d+",
    "comma_thousands": r"[+-]?\d{1,3}(?:,\d{3}){2,}|[+-]?\d{1,3}(?:,\d{3})+\.\d+",
    "point_group": r"[+-]?\d{1,3}\.\d{3}",
    "point_decimal": r"[+-]?\d+\.\d+",
    "underscore": r"[+-]?\d+(?:_\d+)+(?:\.\d+)?",
}


def sniff_separator(sample: str) -> str:
    """The separator that splits every sampled line into the same number (> 1) of fields.

    >>> sniff_separator("id;rate\\n01;5,4\\n02;6,1\\n")
    ';'
    >>> sniff_separator("id,rate\\n01,5.4\\n")
    ','
    """
    lines = [ln for ln in sample.splitlines() if ln.strip()][:50]
    if not lines:
        return ","
    best, best_fields = ",", 1
    for sep in _SEPARATORS:
        counts = {len(row) for row in csv.reader(lines, delimiter=sep)}
        if len(counts) == 1:
            n = counts.pop()
            if n > best_fields:
                best, best_fields = sep, n
    return best


#: how a table's text is read unless ``--encoding`` names another (a BOM is skipped)
UTF8 = "utf-8-sig"


def _text_encoding(encoding: str | None) -> str:
    """The codec to read a table with: UTF-8 (BOM or not) unless the user named another."""
    if encoding is None or encoding.lower().replace("_", "-") in ("utf-8", "utf8", UTF8):
        return UTF8
    return encoding


def _undecodable(path: Path, encoding: str) -> InputError:
    """The error for a table its encoding cannot read (UTF-8 unless the user named another)."""
    if encoding != UTF8:
        return InputError(
            f"{path}: not {encoding} text either; check the file's encoding "
            "(--encoding, [inputs] encoding)"
        )
    return not_utf8(path)


def not_utf8(path: Path) -> InputError:
    """The error for a table that is not UTF-8: where the first bad byte is, and the fix."""
    raw = path.read_bytes()
    try:
        raw.decode(UTF8)
        where = ""
    except UnicodeDecodeError as exc:
        line = raw.count(b"\n", 0, exc.start) + 1
        start = raw.rfind(b"\n", 0, exc.start) + 1
        text = raw[start : exc.start + 12].decode("utf-8", errors="replace").rstrip("\r\n")
        where = f" (byte 0x{raw[exc.start]:02x} on line {line:,}: {text[:60]!r})"
    return InputError(
        f"{path}: not UTF-8 text{where}; a file saved by Excel on Windows is usually cp1252: "
        'pass --encoding cp1252 ([inputs] encoding = "cp1252"), or re-save it as UTF-8 CSV'
    )


def _sample(path: Path, encoding: str = UTF8) -> str:
    with path.open("rb") as fh:
        raw = fh.read(_SAMPLE_BYTES)
    if len(raw) == _SAMPLE_BYTES and b"\n" in raw:
        raw = raw[: raw.rindex(b"\n")]
    try:
        return raw.decode(encoding)
    except UnicodeDecodeError as exc:
        if exc.start < len(raw) - 4:
            raise _undecodable(path, encoding) from None
        return raw[: exc.start].decode(encoding)


def _read_csv(path: Path, sep: str, encoding: str = UTF8) -> pd.DataFrame:
    """All columns as text with the pyarrow engine when present (multi-threaded), else C."""
    import pandas as pd

    kw: dict[str, Any] = dict(dtype=str, keep_default_na=False, sep=sep, encoding=encoding)
    if encoding != UTF8:  # another encoding, named by the user: the C engine decodes it
        return pd.read_csv(path, engine="c", na_filter=False, **kw)
    try:
        import pyarrow as pa
        import pyarrow.csv as pacsv

        with path.open(encoding=UTF8, newline="") as fh:
            header = next(csv.reader(fh, delimiter=sep), [])
        if header and len(set(header)) == len(header):
            table = pacsv.read_csv(
                path,
                parse_options=pacsv.ParseOptions(delimiter=sep),
                convert_options=pacsv.ConvertOptions(
                    column_types={c: pa.string() for c in header}, strings_can_be_null=False
                ),
            )
            df = table.to_pandas()
            df.columns = header
            return df.astype(str) if any(df.dtypes != df.dtypes.iloc[0]) else df
    except ImportError:
        pass
    except Exception:  # pyarrow is stricter on odd files; the C engine reads them or says why
        pass
    return pd.read_csv(path, engine="c", na_filter=False, **kw)


def read_table(path: Path, encoding: str | None = None) -> pd.DataFrame:
    """Read CSV/TSV/Parquet/XLSX with every column as text (empty cells as '').

    The separator found is kept in ``df.attrs["sep"]`` (the decimal question names it).
    ``encoding`` names the text encoding of a CSV/TSV (default UTF-8, with or without a BOM);
    it is never guessed: a file that is not UTF-8 stops with the byte and line to look at.
    """
    import pandas as pd

    enc = _text_encoding(encoding)

    if not path.exists():
        raise InputError(f"{path}: values table not found; check the path")
    suffix = path.suffix.lower()
    sep = ","
    try:
        if suffix in (".csv", ".txt"):
            sep = sniff_separator(_sample(path, enc))
            df = _read_csv(path, sep, enc)
        elif suffix == ".tsv":
            sep = "\t"
            df = _read_csv(path, sep, enc)
        elif suffix == ".parquet":
            need_pyarrow(path)
            df = pd.read_parquet(path)
            df = df.astype(object).where(df.notna(), "").astype(str)
        elif suffix == ".xlsx":
            try:
                import openpyxl  # noqa: F401
            except ImportError:
                raise InputError(
                    f"{path}: reading .xlsx needs openpyxl; `pip install openpyxl` or save the sheet as CSV"
                ) from None
            df = pd.read_excel(path, dtype=str, keep_default_na=False)
        else:
            raise InputError(
                f"{path}: not a table we can read (suffix {suffix!r}); use CSV, TSV, Parquet or .xlsx"
            )
    except InputError:
        raise
    except UnicodeDecodeError:
        raise _undecodable(path, enc) from None
    except Exception as exc:
        msg = str(exc).splitlines()[0] if str(exc) else type(exc).__name__
        raise InputError(f"{path}: cannot read the table ({msg})") from None
    df.columns = [str(c).strip() for c in df.columns]
    df.attrs["sep"] = sep
    if len(df) == 0:
        raise InputError(f"{path}: the table has no rows")
    return df


# -- the decimal mark, per file --------------------------------------------------------------
@dataclass
class DecimalEvidence:
    """Per column and cell shape: how many distinct cells have it, and a few examples."""

    shapes: dict[str, dict[str, tuple[int, list[str]]]]

    def count(self, shape: str) -> int:
        return sum(v[shape][0] for v in self.shapes.values() if shape in v)

    def first(self, shape: str) -> tuple[str, list[str]] | None:
        for col, v in self.shapes.items():
            if shape in v:
                return col, v[shape][1]
        return None


def _strings(text: np.ndarray) -> pd.Series:
    """Texts as a pandas string Series (pyarrow-backed when available: vectorised regexes)."""
    import pandas as pd

    try:
        return pd.Series(text, dtype="string[pyarrow]")
    except (ImportError, TypeError, ValueError):
        return pd.Series(text, dtype=object)


def _match(s: pd.Series, rx: str) -> np.ndarray:
    return s.str.fullmatch(rx).fillna(False).to_numpy(dtype=bool)


def _has(s: pd.Series, ch: str) -> np.ndarray:
    return s.str.contains(ch, regex=False).fillna(False).to_numpy(dtype=bool)


class Distinct(tuple):
    """A column factorised once: ``(codes, distinct stripped texts, numeric)`` (see
    :func:`distinct`); pass it to :func:`decimal_evidence` and :func:`to_numbers` in place of the
    cells so that a column is factorised only once."""


def distinct(cells: Any) -> Distinct:
    """Factorise a column once for :func:`decimal_evidence` and :func:`to_numbers`."""
    return Distinct(_distinct_text(cells))


def _distinct_text(cells: Any) -> tuple[np.ndarray, np.ndarray, bool]:
    """``(codes, distinct stripped texts, numeric)``; numeric columns are not texts at all."""
    import pandas as pd

    if isinstance(cells, Distinct):
        return cells  # type: ignore[return-value]

    s = cells if isinstance(cells, pd.Series) else pd.Series(np.asarray(cells, dtype=object))
    if pd.api.types.is_bool_dtype(s.dtype):
        s = s.astype(object)
    if pd.api.types.is_numeric_dtype(s.dtype):
        return np.zeros(0, np.intp), np.zeros(0, object), True
    kind = pd.api.types.infer_dtype(s, skipna=True) if s.dtype == object else ""
    if kind in ("integer", "floating", "mixed-integer-float") or (kind == "empty" and not len(s)):
        return np.zeros(0, np.intp), np.zeros(0, object), True
    codes, uniq = pd.factorize(s, use_na_sentinel=True)
    text = pd.Series(np.asarray(uniq, dtype=object)).astype(str).str.strip().to_numpy(dtype=object)
    if (codes < 0).any():  # missing (None/NaN) cells read as blanks
        codes = np.where(codes < 0, len(text), codes)
        text = np.append(text, "")
    return codes, text, False


def decimal_evidence(columns: dict[str, Any]) -> DecimalEvidence:
    """Collect, per column, the distinct cells that say something about the decimal mark."""
    shapes: dict[str, dict[str, tuple[int, list[str]]]] = {}
    for name, cells in columns.items():
        _, text, numeric = _distinct_text(cells)
        if numeric or not len(text):
            continue
        s = _strings(text)
        marked = _has(s, ",") | _has(s, ".") | _has(s, "_")
        if not marked.any():
            continue
        text, s = text[marked], _strings(text[marked])
        found = {}
        for shape, rx in _SHAPES.items():
            m = _match(s, rx)
            if m.any():
                found[shape] = (int(m.sum()), text[m][:5].tolist())
        shapes[name] = found
    return DecimalEvidence(shapes)


def decide_decimal(ev: DecimalEvidence, *, where: str, sep: str, given: str | None) -> str:
    """The file's decimal mark: ``given`` (``--decimal``), else the evidence; ask when unclear.

    >>> ev = decimal_evidence({"rate": ["5,449", "12,25", "(D)"]})
    >>> decide_decimal(ev, where="t.csv", sep=";", given=None)
    ','
    """
    if given is not None:
        if given not in (",", "."):
            from mapdrift.errors import ConfigError

            raise ConfigError(
                f"--decimal {given!r} must be ',' (decimal comma) or '.' (decimal point)"
            )
        return given
    comma = ev.count("comma_decimal") + ev.count("point_thousands")
    point = ev.count("point_decimal") - ev.count("point_group") + ev.count("comma_thousands")
    if comma and point:
        a = ev.first("comma_decimal") or ev.first("point_thousands")
        b = ev.first("comma_thousands") or ev.first("point_decimal")
        assert a is not None and b is not None
        raise InputError(
            f"{where}: column {a[0]!r} has decimal commas ({examples(a[1], 3, total=False)}) but "
            f"column {b[0]!r} has decimal points ({examples(b[1], 3, total=False)}); say which mark "
            'the file uses: --decimal , or --decimal . ([inputs] decimal = "," in a config)'
        )
    if comma:
        return ","
    if point:
        return "."
    ambiguous = ev.first("comma_group") or (ev.first("point_group") if sep == ";" else None)
    if ambiguous:
        col, cells = ambiguous
        mark = "," if "," in cells[0] else "."
        other = "." if mark == "," else ","
        raise InputError(
            f"{where}: column {col!r} has numbers like {examples(cells, 3, total=False)} that read "
            f"either way ('{mark}' as a thousands mark or as a decimal mark) and nothing else in the "
            f"file decides; say which: --decimal {mark} if '{mark}' marks decimals, --decimal {other} "
            f'if not ([inputs] decimal = "{mark}" in a config)'
        )
    return "."


# -- cells to numbers --------------------------------------------------------------------------
def _numbers(text: np.ndarray) -> np.ndarray:
    import pandas as pd

    if not len(text):
        return np.zeros(0)
    return pd.to_numeric(pd.Series(text, dtype=object), errors="coerce").to_numpy(
        dtype=np.float64, na_value=np.nan
    )


def _parse_text(text: np.ndarray, decimal: str) -> tuple[np.ndarray, np.ndarray]:
    """Distinct texts -> floats (NaN = not a number) and a mask of those read with thousands marks."""
    s = _strings(text)
    has_comma, has_point = _has(s, ","), _has(s, ".")
    thousands = np.zeros(len(text), dtype=bool)
    if decimal == ".":
        out = np.full(len(text), np.nan)
        simple = ~has_comma & ~_has(s, "_")
        out[simple] = _numbers(text[simple])
        if has_comma.any():
            idx = np.flatnonzero(has_comma)
            grouped = _match(_strings(text[idx]), r"[+-]?\d{1,3}(?:,\d{3})+(?:\.\d+)?")
            idx = idx[grouped]
            out[idx] = _numbers(
                _strings(text[idx]).str.replace(",", "", regex=False).to_numpy(object)
            )
            thousands[idx] = True
    else:
        out = np.full(len(text), np.nan)
        simple = ~has_point & ~_has(s, "_")
        out[simple] = _numbers(
            _strings(text[simple]).str.replace(",", ".", regex=False).to_numpy(dtype=object)
        )
        if has_point.any():
            idx = np.flatnonzero(has_point)
            grouped = _match(_strings(text[idx]), r"[+-]?\d{1,3}(?:\.\d{3})+(?:,\d+)?")
            idx = idx[grouped]
            g = (
                _strings(text[idx])
                .str.replace(".", "", regex=False)
                .str.replace(",", ".", regex=False)
            )
            out[idx] = _numbers(g.to_numpy(object))
            thousands[idx] = True
    return out, thousands


def to_numbers(
    cells: pd.Series | np.ndarray,
    *,
    where: str,
    column: str,
    missing_codes: tuple[float, ...] = (),
    ids: np.ndarray | None = None,
    decimal: str = ".",
    raw: Any = None,
) -> tuple[np.ndarray, list[Finding]]:
    """Parse cells to float64; non-numbers and missing codes become NaN, each kind counted.

    Each distinct text is parsed once (vectorised), so a column of a million cells with a few
    thousand distinct values costs a few thousand parses. ``cells`` may be a :class:`Distinct`
    (then ``raw`` holds the cells themselves, needed when they are numeric).

    >>> v, f = to_numbers(["1", "(D)", "2,5"], where="t.csv", column="rate", decimal=",")
    >>> v.tolist(), f[0].code
    ([1.0, nan, 2.5], 'values-not-numeric')
    """
    import pandas as pd

    findings: list[Finding] = []
    codes, text, numeric = _distinct_text(cells)
    if isinstance(cells, Distinct):
        cells = raw if raw is not None else cells
    if numeric:
        out = np.asarray(cells, dtype=np.float64).copy()
        blank_n = int(np.isnan(out).sum())
        markers: dict[str, int] = {"(blank)": blank_n} if blank_n else {}
        marked = np.isnan(out)
        thousands_n = 0
    else:
        values, thousands = _parse_text(text, decimal)
        under = np.zeros(len(text), dtype=bool)
        us = _has(_strings(text), "_")
        if us.any():
            under[us] = _match(_strings(text[us]), _SHAPES["underscore"])
        if under.any():
            raise InputError(
                f"{where}: {plural(int(np.bincount(codes, minlength=len(text))[under].sum()), 'cell')} of "
                f"{column!r} written with underscores ({examples(text[under].tolist(), 3)}); write "
                "1000 or 1,000: mapdrift does not read 1_000"
            )
        freq = np.bincount(codes, minlength=len(text))
        bad = np.isnan(values)
        order = np.argsort(-freq[bad], kind="stable")
        bad_text = text[bad][order]
        bad_freq = freq[bad][order]
        markers = {
            ("(blank)" if t == "" else str(t)): int(c) for t, c in zip(bad_text, bad_freq) if c
        }
        out = values[codes]
        marked = bad[codes]
        thousands_n = int(freq[thousands].sum())
        if thousands_n:
            findings.append(
                Finding(
                    "note",
                    "values-thousands-separators",
                    f"{where}: {plural(thousands_n, 'cell')} of {column!r} read with thousands "
                    f"separators (e.g. {examples(text[thousands].tolist(), 3)})",
                )
            )
    n_marked = int(sum(markers.values()))
    if n_marked:
        top = sorted(markers.items(), key=lambda kv: -kv[1])[:6]
        by_marker = ", ".join(f"{m!r} x{c}" for m, c in top)
        if decimal == ".":
            commas = sum(c for m, c in markers.items() if "," in m and m.replace(",", "").isdigit())
            if commas:
                by_marker += (
                    f"; {commas} look like decimal commas (pass --decimal , if the file writes 5,3)"
                )
        marker_units = (
            pd.unique(
                np.asarray(ids, dtype=object)[marked & _not_blank(cells, numeric, codes, text)]
            )
            if ids is not None
            else np.zeros(0, dtype=object)
        )
        findings.append(
            Finding(
                "warning" if any(m != "(blank)" for m in markers) else "note",
                "values-not-numeric",
                f"{where}: {n_marked} cells of {column!r} are not numbers and are treated as missing "
                f"({by_marker}); suppressed or blank cells are shown as no data",
                tuple(np.asarray(marker_units).astype(str).tolist()),
            )
        )
    inf = np.isinf(out)
    if inf.any():
        bad_ids = np.asarray(ids, dtype=object)[inf] if ids is not None else np.flatnonzero(inf)
        raise InputError(
            f"{where}: {plural(int(inf.sum()), 'cell')} of {column!r} infinite (units "
            f"{examples(bad_ids)}); fix the source or mark them missing"
        )
    if missing_codes:
        hit = np.isin(out, np.asarray(missing_codes))
        if hit.any():
            vals, counts = np.unique(out[hit], return_counts=True)
            order = np.argsort(-counts, kind="stable")
            desc = ", ".join(f"{vals[i]:g} x{counts[i]}" for i in order)
            units = (
                tuple(pd.unique(np.asarray(ids, dtype=object)[hit]).astype(str).tolist())
                if ids is not None
                else ()
            )
            findings.append(
                Finding(
                    "note",
                    "values-missing-code",
                    f"{where}: {int(hit.sum())} cells of {column!r} hold missing-value codes ({desc}) "
                    "and are treated as missing (--missing)",
                    units,
                )
            )
            out[hit] = np.nan
    return out, findings


def _not_blank(cells: Any, numeric: bool, codes: np.ndarray, text: np.ndarray) -> np.ndarray:
    """Cells that hold some text (marker units list the units with a marker, not blanks)."""
    if numeric:
        return np.zeros(len(np.asarray(cells)), dtype=bool)
    return (text != "")[codes]


def need_pyarrow(path: Path) -> None:
    """Raise a one-line InputError when Parquet is asked for but pyarrow is missing."""
    try:
        import pyarrow  # noqa: F401
    except ImportError:
        raise InputError(
            f"{path}: reading Parquet needs pyarrow; `pip install pyarrow` (or mapdrift[parquet]) "
            "or save the file as GeoPackage/CSV"
        ) from None
