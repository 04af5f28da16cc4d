"""``manifest.json``: what a run read, how it was set, what it found and wrote.

Inputs and outputs are listed with their SHA-256, so a later reader can tell whether a rerun
used the same files and whether an output was changed since.
"""

from __future__ import annotations

import hashlib
import json
import platform
from collections.abc import Iterable, Mapping
from dataclasses import asdict, is_dataclass
from importlib import metadata
from pathlib import Path
from typing import Any

from mapdrift.atomic import write_text

__all__ = ["MANIFEST_FORMAT", "sha256", "versions", "write_manifest"]

MANIFEST_FORMAT = "mapdrift-manifest/1"
_LIBS = (
    "numpy",
    "pandas",
    "scipy",
    "geopandas",
    "shapely",
    "pyproj",
    "pyogrio",
    "mapclassify",
    "matplotlib",
    "pillow",
    "imageio",
    "imageio-ffmpeg",
    "libpysal",
    "esda",
    "python-pptx",
    "typer",
)


def sha256(path: Path) -> str:
    h = hashlib.sha256()
    with open(path, "rb") as f:
        for chunk in iter(lambda: f.read(1 << 20), b""):
            h.update(chunk)
    return h.hexdigest()


def versions() -> dict[str, str]:
    out = {"python": platform.python_version()}
    for name in ("mapdrift", *_LIBS):
        try:
            out[name] = metadata.version(name)
        except metadata.PackageNotFoundError:
            continue
    return out


def _plain(obj: Any) -> Any:
    if is_dataclass(obj) and not isinstance(obj, type):
        return _plain(asdict(obj))
    if isinstance(obj, Mapping):
        return {str(k): _plain(v) for k, v in obj.items()}
    if isinstance(obj, list | tuple):
        return [_plain(v) for v in obj]
    if isinstance(obj, Path):
        return str(obj)
    if hasattr(obj, "item") and callable(obj.item):  # numpy scalars
        return obj.item()
    return obj


#: Affected units listed per finding in the manifest (``n_units`` gives the count).
MANIFEST_UNITS = 20


def write_manifest(
    path: Path,
    *,
    inputs: Iterable[Path],
    outputs: Iterable[Path],
    root: Path,
    config: Mapping[str, Any],
    parameters: Mapping[str, Any],
    findings: Iterable[Any],
    timings: Mapping[str, float],
    summaries: Mapping[str, str],
    replaces: str | None = None,
) -> Path:
    """Write the manifest; outputs are listed relative to ``root`` with their hashes.

    ``replaces`` names the folder an earlier run is set aside as while this one is swapped in
    (``.<out>.old-<pid>``), so a run killed mid-swap can tell which leftover is garbage.
    """
    doc = {
        "format": MANIFEST_FORMAT,
        "versions": versions(),
        "inputs": [
            {"path": str(p), "sha256": sha256(p), "bytes": p.stat().st_size}
            for p in inputs
            if Path(p).is_file()
        ],
        "config": _plain(config),
        "parameters": _plain(parameters),
        "timings_s": dict(timings),
        "summaries": dict(summaries),
        # every affected unit is listed in findings.json; here the first few (at national scale
        # the full lists made the manifest 12 MB)
        "findings": [
            {**d, "units": d["units"][:MANIFEST_UNITS]} for d in (f.to_dict() for f in findings)
        ],
        "outputs": [
            {"path": p.relative_to(root).as_posix(), "sha256": sha256(p), "bytes": p.stat().st_size}
            for p in sorted(set(outputs))
            if p.is_file()
        ],
    }
    if replaces is not None:
        doc["replaces"] = replaces
    return write_text(path, json.dumps(doc, indent=2, sort_keys=False) + "\n")
