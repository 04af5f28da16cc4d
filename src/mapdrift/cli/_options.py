"""Options shared by every command that reads data, declared once.

``@input_options`` adds the GEOMETRY/TABLE arguments, the input flags and ``--config`` to a
command and hands it one :class:`~mapdrift.panel.InputSpec` as ``inputs`` (config keys from
``[inputs]``, flags overriding them). ``@class_options`` does the same for the classification
flags and ``[classes]``, handing a :class:`~mapdrift.config.ClassSpec` as ``classes``.
Commands also receive ``config`` (the parsed :class:`~mapdrift.config.Config`, or None).
"""

from __future__ import annotations

import functools
import inspect
from collections.abc import Callable
from enum import Enum
from pathlib import Path
from typing import Any, Optional

import typer

from mapdrift.errors import ConfigError

__all__ = ["Basis", "SchemeChoice", "class_options", "input_options", "parse_numbers"]


class SchemeChoice(str, Enum):
    """Mirror of :class:`mapdrift.breaks.Scheme` (kept import-light for --help; a test checks both agree)."""

    quantile = "quantile"
    natural_breaks = "natural-breaks"
    equal_interval = "equal-interval"
    std_dev = "std-dev"
    head_tail = "head-tail"
    manual = "manual"


class Duplicates(str, Enum):
    error = "error"
    first = "first"
    mean = "mean"
    sum = "sum"


Basis = str


def parse_numbers(text: str | None, flag: str) -> tuple[float, ...] | None:
    """``"-999,-1"`` -> ``(-999.0, -1.0)``; a clear error naming the flag otherwise."""
    if text is None:
        return None
    out = []
    for part in text.split(","):
        part = part.strip()
        if not part:
            continue
        try:
            out.append(float(part))
        except ValueError:
            raise ConfigError(
                f"{flag} takes numbers separated by commas, got {part!r} in {text!r}"
            ) from None
    return tuple(out)


def _opt(default: Any, *names: str, help: str, **kw: Any) -> Any:
    return typer.Option(default, *names, help=help, rich_help_panel=kw.pop("panel", "Inputs"), **kw)


def _param(name: str, annotation: Any, default: Any) -> inspect.Parameter:
    return inspect.Parameter(
        name, inspect.Parameter.KEYWORD_ONLY, default=default, annotation=annotation
    )


_INPUT_PARAMS = [
    _param(
        "geometry",
        Optional[Path],
        typer.Argument(
            None,
            metavar="GEOMETRY",
            help="Polygon layer: GeoPackage, GeoJSON, Shapefile, FlatGeobuf or GeoParquet.",
            show_default=False,
        ),
    ),
    _param(
        "table",
        Optional[Path],
        typer.Argument(
            None,
            metavar="TABLE",
            help="Values table (CSV/TSV, Parquet, .xlsx). Without it the values are columns of the layer.",
            show_default=False,
        ),
    ),
    _param(
        "config_file",
        Optional[Path],
        _opt(None, "--config", help="TOML file whose [inputs] keys mirror these flags; flags win."),
    ),
    _param("layer", Optional[str], _opt(None, "--layer", help="Layer name inside a GeoPackage.")),
    _param(
        "id",
        Optional[str],
        _opt(None, "--id", help="Unit ID column of the layer (and the table, unless --table-id)."),
    ),
    _param(
        "table_id",
        Optional[str],
        _opt(None, "--table-id", help="Unit ID column of the table, when it differs."),
    ),
    _param(
        "name",
        Optional[str],
        _opt(None, "--name", help="Unit name column of the layer (for labels and tables)."),
    ),
    _param(
        "period",
        Optional[str],
        _opt(
            None,
            "--period",
            help="Long table: the period column (years, 74, 2015-2019, 2020-03, 2020Q1, dates).",
        ),
    ),
    _param("value", Optional[str], _opt(None, "--value", help="Long table: the value column.")),
    _param(
        "columns",
        Optional[str],
        _opt(
            None,
            "--columns",
            help="Wide table: value columns as a pattern, e.g. 'rate_*', or a regex whose group is the period, e.g. 'PO(\\d+)'.",
        ),
    ),
    _param(
        "numerator",
        Optional[str],
        _opt(None, "--numerator", help="Count column (or wide pattern) to turn into a rate."),
    ),
    _param(
        "denominator",
        Optional[str],
        _opt(None, "--denominator", help="Base column (or wide pattern) of the rate."),
    ),
    _param(
        "moe",
        Optional[str],
        _opt(
            None,
            "--moe",
            help="Rates only: 90% margin-of-error column (or wide pattern), to test jumps against noise.",
        ),
    ),
    _param(
        "per",
        Optional[float],
        _opt(None, "--per", help="Rate per so many of the base [default: 1000]."),
    ),
    _param(
        "min_base",
        Optional[float],
        _opt(None, "--min-base", help="Flag rates whose base is under this [default: 20]."),
    ),
    _param(
        "duplicates",
        Optional[Duplicates],
        _opt(
            None,
            "--duplicates",
            help="Repeated (unit, period) rows: stop (error) or keep first, mean, sum [default: error].",
        ),
    ),
    _param(
        "missing",
        Optional[str],
        _opt(None, "--missing", help="Extra missing-value codes, e.g. '-999,-1'."),
    ),
    _param(
        "decimal",
        Optional[str],
        _opt(
            None,
            "--decimal",
            help="Decimal mark of the table's numbers, ',' or '.', when its cells read either way (1,234) [default: from the file].",
        ),
    ),
    _param(
        "encoding",
        Optional[str],
        _opt(
            None,
            "--encoding",
            help="Text encoding of a CSV that is not UTF-8, e.g. cp1252 (Excel on Windows) [default: UTF-8].",
        ),
    ),
    _param(
        "crs",
        Optional[str],
        _opt(None, "--crs", help="CRS of a layer that has none, e.g. EPSG:26915."),
    ),
    _param(
        "map_crs",
        Optional[str],
        _opt(
            None,
            "--map-crs",
            help="CRS to map in [default: the layer's if projected, else equal-area centred on the data].",
        ),
    ),
    _param(
        "append",
        Optional[list[Path]],
        _opt(
            None,
            "--append",
            metavar="<path>",
            help="Another table of the same columns to add (repeatable), e.g. next year's release.",
        ),
    ),
    _param(
        "crosswalk",
        Optional[Path],
        _opt(
            None,
            "--crosswalk",
            help="CSV with from, to, weight: move values onto the layer's boundaries first.",
        ),
    ),
    _param(
        "id_width",
        Optional[int],
        _opt(None, "--id-width", help="Zero-pad all-digit IDs to this width."),
    ),
    _param(
        "variable", Optional[str], _opt(None, "--variable", help="Name of the variable for titles.")
    ),
    _param(
        "unit_label",
        Optional[str],
        _opt(None, "--unit-label", help="Unit of the values, e.g. 'per 1,000 mortgaged parcels'."),
    ),
    _param("source", Optional[str], _opt(None, "--source", help="Source line for captions.")),
    _param(
        "view",
        Optional[str],
        _opt(
            None,
            "--view",
            help="Rescale the values after loading, for trending data: raw, relative-mean, "
            "relative-median (each period over its mean/median), index:2015 (each unit over its "
            "2015 value), deflate:FILE[:COLUMN][@PERIOD] or deflate:COLUMN (a per-period factor, "
            "e.g. a price index) [default: raw].",
        ),
    ),
]

_CLASS_PARAMS = [
    _param(
        "scheme",
        Optional[SchemeChoice],
        _opt(
            None,
            "--scheme",
            "-s",
            help="Classification scheme [default: quantile].",
            panel="Classes",
        ),
    ),
    _param(
        "k",
        Optional[int],
        _opt(
            None, "-k", "--classes", help="Number of classes, 2 to 9 [default: 5].", panel="Classes"
        ),
    ),
    _param(
        "basis",
        Optional[str],
        _opt(
            None,
            "--basis",
            help="pooled (comparable frames), per-period, or period:YEAR [default: pooled].",
            panel="Classes",
        ),
    ),
    _param(
        "breaks_file",
        Optional[Path],
        _opt(
            None,
            "--breaks-file",
            help="Reuse saved breaks (breaks.json), e.g. last year's.",
            panel="Classes",
        ),
    ),
    _param(
        "values",
        Optional[str],
        _opt(
            None,
            "--values",
            help="Upper bounds of the classes, e.g. '0,2,5,10'; needs --scheme manual (with "
            "another scheme it is an error, never ignored).",
            panel="Classes",
        ),
    ),
    _param(
        "isolate_zeros",
        Optional[bool],
        _opt(
            None,
            "--isolate-zeros/--no-isolate-zeros",
            help="Give exact zeros a class of their own.",
            panel="Classes",
        ),
    ),
]


def _load_config(path: Path | None) -> Any:
    if path is None:
        return None
    from mapdrift.config import load_config

    return load_config(path)


def _extend(
    func: Callable[..., Any], extra: list[inspect.Parameter], drop: set[str]
) -> inspect.Signature:
    sig = inspect.signature(func)
    params = [p for p in sig.parameters.values() if p.name not in drop]
    have = {p.name for p in params}
    params += [p for p in extra if p.name not in have]
    return sig.replace(parameters=params)


def input_options(func: Callable[..., Any]) -> Callable[..., Any]:
    """Give ``func`` the shared input arguments/options; it receives ``inputs`` and ``config``."""
    names = [p.name for p in _INPUT_PARAMS]

    @functools.wraps(func)
    def wrapper(**kwargs: Any) -> Any:
        raw = {n: kwargs.pop(n, None) for n in names}
        config = kwargs.get("config") or _load_config(raw.pop("config_file"))
        raw.pop("config_file", None)
        from mapdrift.config import merge
        from mapdrift.panel import InputSpec

        if isinstance(raw.get("duplicates"), Enum):
            raw["duplicates"] = raw["duplicates"].value
        raw["missing"] = parse_numbers(raw.get("missing"), "--missing")
        raw["append"] = tuple(raw["append"]) if raw.get("append") else None
        from_config = config.section("inputs") if config is not None else {}
        if raw.get("view") is None and from_config.get("view") and config.path is not None:
            from mapdrift.views import resolve_view  # a config's paths are relative to it

            from_config["view"] = resolve_view(from_config["view"], config.path.parent)
        if raw.get("view") is not None or from_config.get("view"):
            from mapdrift.views import parse_view

            parse_view(raw.get("view") or from_config.get("view"))  # a bad view stops here
        if raw.get("geometry") is None and "geometry" not in from_config:
            raise ConfigError(
                "no polygon layer given: pass it as the first argument (e.g. `mapdrift check "
                "units.gpkg values.csv --id unit_id ...`) or set [inputs] geometry in --config"
            )
        kwargs["inputs"] = merge(InputSpec, from_config, raw)
        if "config" in inspect.signature(func).parameters:
            kwargs["config"] = config
        return func(**kwargs)

    wrapper.__signature__ = _extend(func, _INPUT_PARAMS, {"inputs", "config"})  # type: ignore[attr-defined]
    return wrapper


def class_options(func: Callable[..., Any]) -> Callable[..., Any]:
    """Give ``func`` the shared classification options; it receives ``classes``.

    Put it *below* ``@input_options`` so that it sees the parsed config.
    """
    names = [p.name for p in _CLASS_PARAMS]

    @functools.wraps(func)
    def wrapper(**kwargs: Any) -> Any:
        raw = {n: kwargs.pop(n, None) for n in names}
        config = kwargs.get("config")
        from mapdrift.config import ClassSpec, merge

        if isinstance(raw.get("scheme"), Enum):
            raw["scheme"] = raw["scheme"].value
        raw["values"] = parse_numbers(raw.get("values"), "--values")
        from_config = config.section("classes") if config is not None else {}
        kwargs["classes"] = merge(ClassSpec, from_config, raw)
        if "config" not in inspect.signature(func).parameters:
            kwargs.pop("config", None)
        return func(**kwargs)

    sig = _extend(func, _CLASS_PARAMS, {"classes"})
    if "config" not in sig.parameters:
        sig = sig.replace(parameters=[*sig.parameters.values(), _param("config", Any, None)])
    wrapper.__signature__ = sig  # type: ignore[attr-defined]
    return wrapper
