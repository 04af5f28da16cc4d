"""The run configuration (TOML): typed sections validated with clear errors.

A config file has one table per section, e.g. ``[inputs]`` (keys mirror the input flags of every
command), ``[classes]`` (scheme, k, basis, breaks file). Each section maps onto a frozen dataclass;
unknown keys and wrong types are errors naming the key, the file and its line. Paths are taken
relative to the config file. Command-line flags override keys (see :func:`merge`).
Parsed with :mod:`tomllib` only.
"""

from __future__ import annotations

import dataclasses
import os
import re
import tomllib
import types
import typing
from collections.abc import Mapping
from dataclasses import dataclass, field
from importlib import import_module
from pathlib import Path
from typing import Any

from mapdrift.errors import ConfigError

__all__ = [
    "BriefSpec",
    "ClassSpec",
    "Config",
    "RunSpec",
    "SECTIONS",
    "load_config",
    "merge",
    "parse_setting",
    "section_from_dict",
]


@dataclass(frozen=True)
class ClassSpec:
    """How to classify: scheme, number of classes, basis, or a saved breaks file."""

    scheme: str = "quantile"
    k: int = 5
    basis: str = "pooled"
    values: tuple[float, ...] = ()
    isolate_zeros: bool = False
    breaks_file: Path | None = None

    def __post_init__(self) -> None:
        from mapdrift.breaks import Scheme, parse_basis

        scheme = Scheme.parse(self.scheme)
        if scheme is not Scheme.MANUAL and not 2 <= self.k <= 9:
            raise ConfigError(f"k = {self.k} classes is out of range; choose k from 2 to 9")
        if scheme is Scheme.MANUAL and not self.values:
            raise ConfigError("scheme manual needs break values, e.g. --values 0,2,5,10")
        if self.values and scheme is not Scheme.MANUAL:  # never fit quantiles over given bounds
            bounds = ",".join(f"{v:g}" for v in self.values)
            raise ConfigError(
                f"--values {bounds} are the upper bounds of the manual scheme, but the scheme is "
                f'{scheme.value}: add --scheme manual ([classes] scheme = "manual") or drop --values'
            )
        parse_basis(self.basis)


@dataclass(frozen=True)
class RunSpec:
    """Keys at the top of a run config (outside any section).

    ``previous`` points at last year's run folder (or its ``breaks.json``): its breaks are reused
    so the new frames compare with last year's briefing, and the report says what is new.
    ``rebreak`` refits the breaks deliberately (and every output says so).
    """

    previous: Path | None = None
    out: Path | None = None
    rebreak: bool = False
    crosswalk: Path | None = None


@dataclass(frozen=True)
class BriefSpec:
    """The briefing's words and which outputs to make."""

    title: str | None = None
    subtitle: str | None = None
    author: str = ""
    organisation: str = ""
    source: str | None = None
    date: str | None = None
    formats: tuple[str, ...] = ("gif", "mp4", "png", "pptx", "html", "gpkg")
    #: What the units are called in titles and sentences ("tracts", "neighbourhoods").
    unit_noun: str = "units"

    def __post_init__(self) -> None:
        from mapdrift.safetext import clean

        for name in ("title", "subtitle", "author", "organisation", "source", "date"):
            value = getattr(self, name)
            if isinstance(value, str):  # no line breaks or control characters in drawn text
                object.__setattr__(self, name, clean(value))
        unknown = [f for f in self.formats if f not in FORMATS]
        if unknown:
            hint = _did_you_mean(unknown[0], FORMATS, "{!r}")
            raise ConfigError(
                f"formats {unknown[0]!r} is not an output format; {hint}"
                f"formats: {', '.join(FORMATS)}"
            )


#: The briefing's output formats (``[brief] formats``); ``explorer.html`` is written for
#: ``html`` too, ``explorer`` asks for it alone.
FORMATS: tuple[str, ...] = ("gif", "mp4", "png", "pptx", "html", "gpkg", "explorer")


#: Section name -> "module:Class" of its dataclass (imported when a file uses the section).
#: The root section "run" holds the keys written at the top of the file, outside any [section].
SECTIONS: dict[str, str] = {
    "run": "mapdrift.config:RunSpec",
    "inputs": "mapdrift.panel:InputSpec",
    "classes": "mapdrift.config:ClassSpec",
    "animate": "mapdrift.render.animation:AnimateOptions",
    "changes": "mapdrift.changes:ChangeOptions",
    "clusters": "mapdrift.clusters:ClusterOptions",
    "brief": "mapdrift.config:BriefSpec",
    "compute": "mapdrift.compute:ComputeSpec",
}


@dataclass(frozen=True)
class Config:
    """A parsed config: its path and each section as a dict of validated, typed values."""

    path: Path | None = None
    sections: dict[str, dict[str, Any]] = field(default_factory=dict)

    def section(self, name: str) -> dict[str, Any]:
        return dict(self.sections.get(name, {}))

    def with_values(self, section: str, values: Mapping[str, Any]) -> Config:
        """A copy with ``values`` (non-None ones) set in ``section``: flags overriding keys."""
        given = {k: v for k, v in values.items() if v is not None}
        if not given:
            return self
        checked = section_from_dict(section, given)
        sections = {k: dict(v) for k, v in self.sections.items()}
        sections.setdefault(section, {}).update(checked)
        _check_values(section, sections[section], None)
        return Config(path=self.path, sections=sections)


def _line_of(text: str, section: str | None, key: str) -> int | None:
    """1-based line where ``key`` is set (inside ``[section]`` when given), for messages."""
    current: str | None = None
    for no, line in enumerate(text.splitlines(), 1):
        head = re.match(r"\s*\[([^\]]+)\]", line)
        if head:
            current = head.group(1).strip()
            continue
        if re.match(rf"\s*{re.escape(key)}\s*=", line) and (section is None or current == section):
            return no
    return None


def _where(path: Path | None, text: str, section: str | None, key: str) -> str:
    if path is None:
        return f"key {key!r}"
    line = _line_of(text, section, key)
    return f"{path}{f':{line}' if line else ''}: key {key!r}" + (
        f" in [{section}]" if section else ""
    )


def _did_you_mean(word: str, choices: Any, fmt: str) -> str:
    import difflib

    near = difflib.get_close_matches(word, sorted(choices), n=1)
    return f"did you mean {fmt.format(near[0])}? " if near else ""


def _type_name(tp: Any) -> str:
    return getattr(tp, "__name__", str(tp))


def _coerce(value: Any, tp: Any, base: Path | None) -> Any:
    """Check ``value`` against the annotation ``tp``; convert paths and tuples. Raise TypeError."""
    origin = typing.get_origin(tp)
    if origin in (typing.Union, types.UnionType):
        args = [a for a in typing.get_args(tp) if a is not type(None)]
        errors = []
        for a in args:
            try:
                return _coerce(value, a, base)
            except TypeError as exc:
                errors.append(str(exc))
        raise TypeError(" or ".join(_type_name(a) for a in args))
    if origin is tuple:
        (item, *_rest) = typing.get_args(tp) or (Any,)
        if isinstance(value, str) and item in (float, int):
            # "0,2,5,10" for break values; "1280x720" for sizes
            value = [v for v in re.split(r"[,x]", value) if v.strip()]
            try:
                value = [item(v) for v in value]
            except ValueError:
                raise TypeError(f"a list of {_type_name(item)}") from None
        if isinstance(value, str) and item is Path:
            value = [value]  # one path (append = "next.csv", --set inputs.append=next.csv)
        if not isinstance(value, list | tuple):
            raise TypeError(f"a list of {_type_name(item)}")
        return tuple(_coerce(v, item, base) for v in value)
    if tp is Any:
        return value
    if tp is bool:
        if not isinstance(value, bool):
            raise TypeError("true or false")
        return value
    if tp is int:
        if isinstance(value, bool) or not isinstance(value, int):
            raise TypeError("a whole number")
        return value
    if tp is float:
        if isinstance(value, bool):
            raise TypeError("a number")
        if not isinstance(value, int | float):
            raise TypeError("a number")
        return float(value)
    if tp is str:
        if not isinstance(value, str | int):
            raise TypeError("a string")
        return str(value)
    if tp is Path:
        if not isinstance(value, str):
            raise TypeError("a path string")
        p = Path(value).expanduser()
        return p if p.is_absolute() or base is None else Path(os.path.normpath(base / p))
    if isinstance(tp, type) and isinstance(value, tp):
        return value
    raise TypeError(_type_name(tp))


def _dataclass_for(section: str) -> type:
    module, cls = SECTIONS[section].split(":")
    return getattr(import_module(module), cls)


def section_from_dict(
    section: str, raw: Mapping[str, Any], *, path: Path | None = None, text: str = ""
) -> dict[str, Any]:
    """Validate one section's keys and types; return the typed values given (not the defaults)."""
    cls = _dataclass_for(section)
    hints = typing.get_type_hints(cls)
    names = {f.name for f in dataclasses.fields(cls)}
    out: dict[str, Any] = {}
    base = path.parent if path is not None else None
    for key, value in raw.items():
        if key not in names:
            valid = ", ".join(sorted(names))
            raise ConfigError(
                f"{_where(path, text, section, key)} is not a known key; "
                f"{_did_you_mean(key, names, '{!r}')}valid keys: {valid}"
            )
        try:
            out[key] = _coerce(value, hints[key], base)
        except TypeError as exc:
            raise ConfigError(
                f"{_where(path, text, section, key)} should be {exc}, got {value!r}"
            ) from None
    return out


def parse_setting(text: str) -> tuple[str, str, Any]:
    """``"clusters.permutations=9999"`` -> ``("clusters", "permutations", 9999)``.

    The value is read as a TOML value (numbers, true/false, ["lists"]), else as plain text; a
    key without a section is a top-level key (``previous=outputs/2024``).
    """
    key, sep, raw = text.partition("=")
    if not sep or not key.strip():
        raise ConfigError(
            f"--set {text!r} should be SECTION.KEY=VALUE, e.g. --set clusters.permutations=9999"
        )
    section, _, name = key.strip().rpartition(".")
    try:
        value = tomllib.loads(f"v = {raw.strip()}")["v"]
    except tomllib.TOMLDecodeError:
        value = raw.strip()
    return section or "run", name, value


def _decode(raw: bytes, path: Path) -> str:
    """Config text: UTF-8 (a BOM allowed), or UTF-16 with its BOM as some editors save it."""
    import codecs

    if raw.startswith((codecs.BOM_UTF16_LE, codecs.BOM_UTF16_BE)):
        return raw.decode("utf-16")
    try:
        return raw.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        raise ConfigError(
            f"{path}: not UTF-8 text (byte {exc.start}); save the config as UTF-8"
        ) from None


def load_config(path: Path | str) -> Config:
    """Parse and validate a TOML run configuration."""
    path = Path(path)
    try:
        text = _decode(path.read_bytes(), path)
    except FileNotFoundError:
        raise ConfigError(f"{path}: config file not found; check the path") from None
    except IsADirectoryError:
        raise ConfigError(f"{path}: is a folder; give the run config file (.toml)") from None
    except PermissionError:
        raise ConfigError(f"{path}: cannot read the config file (permission denied)") from None
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise ConfigError(f"{path}: not valid TOML ({exc})") from None
    sections: dict[str, dict[str, Any]] = {}
    root = {k: v for k, v in data.items() if not isinstance(v, dict)}
    if root:
        sections["run"] = _root_section(root, path, text)
    for name, raw in data.items():
        if not isinstance(raw, dict):
            continue
        if name not in SECTIONS or name == "run":
            valid = [s for s in SECTIONS if s != "run"]
            head = re.compile(rf"\s*\[\s*{re.escape(name)}\s*\]")
            line = next((i for i, t in enumerate(text.splitlines(), 1) if head.match(t)), None)
            raise ConfigError(
                f"{path}{f':{line}' if line else ''}: section [{name}] is not known; "
                f"{_did_you_mean(name, valid, '[{}]')}valid sections: {', '.join(valid)}"
            )
        sections[name] = section_from_dict(name, raw, path=path, text=text)
    for name, values in sections.items():
        _check_values(name, values, path)
    return Config(path=path, sections=sections)


def _check_values(section: str, values: Mapping[str, Any], path: Path | None) -> None:
    """Build the section's dataclass now, so a bad value (alpha = 1.5, weights = "queeen")
    stops at load time naming the file and section, not later inside a step."""
    cls = _dataclass_for(section)
    try:
        cls(**values)
    except ConfigError as exc:
        where = f"{path}: [{section}]" if path is not None else f"[{section}]"
        raise ConfigError(f"{where} {exc}") from None
    except TypeError:
        return  # a required key (e.g. [inputs] geometry) may come from the command line


def _root_section(root: Mapping[str, Any], path: Path, text: str) -> dict[str, Any]:
    names = {f.name for f in dataclasses.fields(_dataclass_for("run"))}
    for key in root:
        if key not in names:
            raise ConfigError(
                f"{_where(path, text, None, key)} is not a known top-level key (top-level keys: "
                f"{', '.join(sorted(names))}); other keys belong in a section such as "
                f"[{', '.join(s for s in SECTIONS if s != 'run')}]"
            )
    return section_from_dict("run", root, path=path, text=text)


def merge(cls: type, config_values: Mapping[str, Any], overrides: Mapping[str, Any]) -> Any:
    """Build ``cls`` from config values, with non-None ``overrides`` (command-line flags) winning."""
    values = dict(config_values)
    values.update({k: v for k, v in overrides.items() if v is not None})
    try:
        return cls(**values)
    except TypeError as exc:
        raise ConfigError(f"{cls.__name__}: {exc}") from None
