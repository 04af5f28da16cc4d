"""Reading values tables and turning their cells into numbers, counting every non-number.

Tables are read with every column as text so IDs keep their leading zeros. Value cells that are
not numbers (suppression marks such as ``(D)``, ``*``, ``n/a``, ``-``, blanks) become missing and
are counted by marker; ``--missing`` codes such as ``-999`` become missing too. Infinite values
are an error; thousands separators (``1,234``) are accepted.
"""

from __future__ import annotations

import re
from collections import Counter
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np

from mapdrift.errors import InputError
from mapdrift.findings import Finding, examples, plural

if TYPE_CHECKING:
    import pandas as pd

__all__ = ["TABLE_SUFFIXES", "need_pyarrow", "read_table", "to_numbers"]

TABLE_SUFFIXES = (".csv", ".tsv", ".txt", ".parquet", ".xlsx")
_THOUSANDS = re.compile(r"^[+-]?\d{1,3}(,\d{3})+(\.\d+)?$")
_DECIMAL_COMMA = re.compile(r"^[+-]?\d+,\d+$")


def read_table(path: Path) -> pd.DataFrame:
    """Read CSV/TSV/Parquet/XLSX with every column as text (empty cells as '')."""
    import pandas as pd

    if not path.exists():
        raise InputError(f"{path}: values table not found; check the path")
    suffix = path.suffix.lower()
    try:
        if suffix in (".csv", ".txt"):
            df = pd.read_csv(
                path,
                dtype=str,
                keep_default_na=False,
                sep=None,
                engine="python",
                encoding="utf-8-sig",
            )
        elif suffix == ".tsv":
            df = pd.read_csv(path, dtype=str, keep_default_na=False, sep="\t", encoding="utf-8-sig")
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
        raise InputError(f"{path}: not UTF-8 text; re-save the table as UTF-8 CSV") from None
    except Exception as exc:
        msg = str(exc).splitlines()[0] if str(exc) else type(exc).__name__
        raise InputError(f"{path}: cannot read the table ({msg})") from None
    df.columns = [str(c).strip() for c in df.columns]
    if len(df) == 0:
        raise InputError(f"{path}: the table has no rows")
    return df


def to_numbers(
    cells: pd.Series | np.ndarray,
    *,
    where: str,
    column: str,
    missing_codes: tuple[float, ...] = (),
    ids: np.ndarray | None = None,
) -> tuple[np.ndarray, list[Finding]]:
    """Parse text cells to float64; non-numbers and missing codes become NaN, each kind counted."""
    text = np.asarray(cells, dtype=object)
    out = np.full(len(text), np.nan)
    markers: Counter[str] = Counter()
    marker_units: list[str] = []
    findings: list[Finding] = []
    for i, raw in enumerate(text):
        if raw is None or (isinstance(raw, float) and np.isnan(raw)):
            markers["(blank)"] += 1
            continue
        if isinstance(raw, int | float | np.integer | np.floating):
            out[i] = float(raw)
            continue
        s = str(raw).strip()
        if s == "":
            markers["(blank)"] += 1
            continue
        if _THOUSANDS.match(s):
            s = s.replace(",", "")
        try:
            out[i] = float(s)
        except ValueError:
            markers[s] += 1
            if ids is not None:
                marker_units.append(str(ids[i]))
    n_marked = sum(markers.values())
    if n_marked:
        by_marker = ", ".join(f"{m!r} x{c}" for m, c in markers.most_common(6))
        commas = sum(c for m, c in markers.items() if _DECIMAL_COMMA.match(m))
        if commas:
            by_marker += f"; {commas} look like decimal commas (write 5.3, not 5,3)"
        findings.append(
            Finding(
                "warning" if any(m != "(blank)" for m in markers) else "note",
                "values-not-numeric",
                f"{where}: {n_marked} cells of {column!r} are not numbers and are treated as missing "
                f"({by_marker}); suppressed or blank cells are shown as no data",
                tuple(dict.fromkeys(marker_units)),
            )
        )
    if np.isinf(out).any():
        bad = ids[np.isinf(out)] if ids is not None else np.flatnonzero(np.isinf(out))
        raise InputError(
            f"{where}: {plural(int(np.isinf(out).sum()), 'cell')} of {column!r} infinite (units "
            f"{examples(bad)}); fix the source or mark them missing"
        )
    if missing_codes:
        hit = np.isin(out, np.asarray(missing_codes))
        if hit.any():
            counts = Counter(out[hit].tolist())
            desc = ", ".join(f"{c:g} x{n}" for c, n in counts.most_common())
            units = tuple(dict.fromkeys(str(u) for u in ids[hit])) if ids is not None else ()
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


def need_pyarrow(path: Path) -> None:
    """Raise a one-line InputError when Parquet is asked for but pyarrow is missing."""
    try:
        import pyarrow  # noqa: F401
    except ImportError:
        raise InputError(
            f"{path}: reading Parquet needs pyarrow; `pip install pyarrow` (or mapdrift[parquet]) "
            "or save the file as GeoPackage/CSV"
        ) from None
