"""Writing output tables safely: atomic, never over an existing file without ``force``,
and with spreadsheet formula injection defused.

A text cell that starts with ``=``, ``+``, ``-``, ``@``, a tab or a carriage return is prefixed
with ``'`` so a spreadsheet shows it as text instead of running it (OWASP's advice on CSV
injection). Numbers are left alone, so negative values stay numbers. When classes differ by
period, the table's first line is ``# <warning>`` (read it back with ``comment="#"``).
"""

from __future__ import annotations

import csv
from collections.abc import Iterable
from pathlib import Path
from typing import TYPE_CHECKING, Any

from mapdrift.atomic import atomic_path
from mapdrift.errors import OutputExistsError
from mapdrift.findings import examples

if TYPE_CHECKING:
    import pandas as pd

__all__ = [
    "FIXED_TIME",
    "check_free",
    "defuse",
    "fixed_zip_dates",
    "read_csv",
    "undefuse",
    "write_csv",
]

#: The timestamp written into files that want one (GeoPackage ``last_change``, the deck's
#: created/modified dates and zip entries), so the same inputs and seed give identical bytes.
FIXED_TIME = "2000-01-01T00:00:00.000Z"

_TRIGGERS = ("=", "+", "-", "@", "\t", "\r")
_DEFUSED = r"'+[=+\-@\t\r]"  # a value written by defuse(): quotes, then a trigger


def defuse(value: Any) -> Any:
    """``'=HYPERLINK("x")'`` -> ``"'=HYPERLINK(\\"x\\")"``; numbers and safe text unchanged.

    Text that already starts with quotes before a trigger (``"'=x"``) gets one more, so
    :func:`undefuse` gives back exactly what was written.
    """
    if isinstance(value, str) and value.lstrip("'").startswith(_TRIGGERS):
        return "'" + value
    return value


def undefuse(value: Any) -> Any:
    """The inverse of :func:`defuse`: ``"'=x"`` -> ``"=x"``; anything else unchanged."""
    if isinstance(value, str) and value[:1] == "'" and value.lstrip("'").startswith(_TRIGGERS):
        return value[1:]
    return value


def check_free(paths: Iterable[Path], force: bool) -> None:
    """Raise OutputExistsError naming the files that exist, unless ``force``."""
    if force:
        return
    existing = [Path(p) for p in paths if Path(p).exists()]
    if existing:
        raise OutputExistsError(
            f"{existing[0].parent}: {len(existing)} output files exist "
            f"({examples([p.name for p in existing], 4)}); pass --force to overwrite or choose "
            "another --out folder"
        )


def _defuse_column(col: pd.Series) -> pd.Series | None:
    """``col`` with its text cells defused, or None when no cell needs it (no copy then).

    Vectorised: the column is factorised (hashing in C) and only its distinct values are
    tested, so a cluster-label column of 1.3 million cells costs a handful of Python calls.
    """
    import numpy as np
    import pandas as pd

    codes, uniques = pd.factorize(col, use_na_sentinel=True)
    fixed = [defuse(v) for v in uniques]
    if all(a is b for a, b in zip(fixed, uniques)):
        return None
    table = np.empty(len(fixed) + 1, dtype=object)
    table[:-1] = fixed
    table[-1] = None
    values = table[codes]  # code -1 (missing) takes the last slot
    return pd.Series(values, index=col.index, name=col.name, dtype=object)


def _bool_text(col: pd.Series) -> pd.Series | None:
    """A column of booleans (with blanks allowed) as ``true``/``false`` text, else None.

    pandas writes ``True``/``False``; the tables say ``true``/``false`` throughout, as JSON
    and most readers do (pandas reads both back as booleans).
    """
    import numpy as np
    import pandas as pd

    kind = str(col.dtype)
    if kind == "bool":
        return pd.Series(
            np.where(col.to_numpy(), "true", "false"), index=col.index, name=col.name, dtype=object
        )
    if kind != "boolean" and kind != "object":
        return None
    if pd.api.types.infer_dtype(col, skipna=True) != "boolean":
        return None
    return col.map({True: "true", False: "false"}).astype(object)


def write_csv(
    df: pd.DataFrame,
    path: Path,
    *,
    warning: str | None = None,
    index: bool = False,
    float_format: str = "%.10g",
) -> Path:
    """Write ``df`` atomically as UTF-8 CSV, text cells defused; byte-stable for equal input.

    The text is streamed to the file in chunks (never built whole in memory) and defusing is
    vectorised (see :func:`_defuse_column`).
    """
    out = df.copy(deep=False)
    for col in out.columns:  # booleans as true / false in every table (README, outputs)
        text = _bool_text(out[col])
        if text is not None:
            out[col] = text
    for col in out.columns:
        if out[col].dtype == object or str(out[col].dtype) in ("string", "str", "category"):
            fixed = _defuse_column(out[col])
            if fixed is not None:
                out[col] = fixed
    out.columns = [defuse(str(c)) for c in out.columns]
    if index:
        name = out.index.name
        out.index = out.index.map(defuse)
        out.index.name = defuse(name) if isinstance(name, str) else name
    # a bare CR is not quoted by the csv module when lines end in LF, and readers take it for
    # a line end: quote every text cell then (rare; the usual output stays unquoted)
    has_cr = any("\r" in str(c) for c in out.columns) or any(
        out[c].astype("string").str.contains("\r", regex=False, na=False).any()
        for c in out.columns
        if out[c].dtype == object or str(out[c].dtype) in ("string", "str", "category")
    )
    with atomic_path(Path(path)) as tmp, open(tmp, "w", encoding="utf-8", newline="") as fh:
        if warning:
            fh.write(f"# {warning}\n")
        out.to_csv(
            fh,
            index=index,
            float_format=float_format,
            lineterminator="\n",
            chunksize=20_000,
            quoting=csv.QUOTE_NONNUMERIC if has_cr else csv.QUOTE_MINIMAL,
        )
    return Path(path)


def read_csv(path: Path, **kw: Any) -> pd.DataFrame:
    """Read a table written by :func:`write_csv` (skips the warning line, keeps IDs as text)."""
    import pandas as pd

    kw.setdefault("dtype", {"unit_id": str, "unit": str})
    df = pd.read_csv(path, comment=None, skiprows=_warning_lines(path), **kw)
    # give back what we wrote: the quote that defused a formula is not part of the value
    df.columns = [undefuse(c) for c in df.columns]
    for col in df.columns:
        if df[col].dtype == object or str(df[col].dtype) in ("string", "str"):
            text = df[col].astype("string")
            mask = text.str.match(_DEFUSED).fillna(False).to_numpy(dtype=bool)
            if mask.any():
                df.loc[mask, col] = text[mask].str.slice(1).to_numpy(dtype=object)
    return df


def _warning_lines(path: Path) -> int:
    with open(path, encoding="utf-8") as f:
        return 1 if f.readline().startswith("# ") else 0


def fixed_zip_dates(path: Path) -> Path:
    """Rewrite the zip file ``path`` (e.g. a .pptx) with every entry dated :data:`FIXED_TIME`,
    keeping order, names, content and compression; atomic."""
    import zipfile

    with (
        zipfile.ZipFile(path) as src,
        atomic_path(path) as tmp,
        zipfile.ZipFile(tmp, "w") as dst,
    ):
        for info in src.infolist():
            fixed = zipfile.ZipInfo(info.filename, date_time=(2000, 1, 1, 0, 0, 0))
            fixed.compress_type = info.compress_type
            fixed.external_attr = info.external_attr
            fixed.create_system = 3  # Unix, whatever the machine
            dst.writestr(fixed, src.read(info.filename))
    return path
