"""The explorer's data from a finished run folder (``mapdrift explore RUN_FOLDER``).

Reads what every run writes: ``units.gpkg`` (geometry, value, class and cluster label per
period), ``breaks.json``, ``jumps.csv`` and ``manifest.json`` (texts, smoothing, method). Counts
(the base of each rate) are not in a run folder, so the page shows no base; run ``mapdrift
explore CONFIG`` for them.
"""

from __future__ import annotations

import json
import re
from pathlib import Path
from typing import Any

import numpy as np

from mapdrift.errors import InputError

__all__ = ["payload_from_folder"]


def _need(folder: Path, name: str, fix: str) -> Path:
    path = folder / name
    if not path.exists():
        raise InputError(f"{folder}: no {name} in this run folder; {fix}")
    return path


def payload_from_folder(folder: Path | str, *, raster_px: int | None = None) -> dict[str, Any]:
    """Build the page's data from the files of a run folder (see the module docstring)."""
    import geopandas as gpd
    import pandas as pd

    from mapdrift.breaks import Breaks, Classes
    from mapdrift.brief.content import CAUTIONS
    from mapdrift.brief.explorer import DEFAULT_RASTER_PX, ExplorerExtras, build_payload
    from mapdrift.clusters.labels import CODES, LABELS
    from mapdrift.panel import Panel, PanelMeta

    folder = Path(folder)
    if not folder.is_dir():
        raise InputError(f"{folder}: not a run folder; give a run's output folder or a CONFIG.toml")
    gpkg = _need(
        folder,
        "units.gpkg",
        'run with "gpkg" in [brief] formats, or give the run\'s CONFIG.toml instead',
    )
    layer = gpd.read_file(gpkg)
    vcols = [c for c in layer.columns if re.fullmatch(r"value_.+", str(c))]
    if not vcols:
        raise InputError(f"{gpkg}: no value_<period> columns; is this a mapdrift units layer?")
    periods = [c[len("value_") :] for c in vcols]
    values = layer[vcols].to_numpy(dtype=np.float64)
    codes = np.full(values.shape, -1, dtype=np.int16)
    for j, p in enumerate(periods):
        col = f"class_{p}"
        if col in layer.columns:
            c = pd.to_numeric(layer[col], errors="coerce").to_numpy()
            codes[:, j] = np.where(np.isfinite(c), c - 1, -1)
    bdata = json.loads(
        _need(folder, "breaks.json", "rerun mapdrift to write it").read_text(encoding="utf-8")
    )
    if isinstance(bdata, dict) and "per_period" in bdata:
        breaks = tuple(Breaks.from_dict(b, source="breaks.json") for b in bdata["per_period"])
    else:
        breaks = (Breaks.from_dict(bdata, source=str(folder / "breaks.json")),)
    classes = Classes(codes=codes, breaks=breaks)

    manifest: dict[str, Any] = {}
    if (folder / "manifest.json").exists():
        manifest = json.loads((folder / "manifest.json").read_text(encoding="utf-8"))
    cfg = manifest.get("config", {})
    inputs = cfg.get("inputs", {})
    brief = cfg.get("brief", {})
    params = manifest.get("parameters", {})
    meta = PanelMeta(
        variable=str(inputs.get("variable") or breaks[0].variable or "value"),
        unit_label=str(inputs.get("unit_label") or ""),
        source=str(inputs.get("source") or ""),
    )
    units = layer["unit"].astype(str).tolist()
    names = layer["name"].astype(str).tolist() if "name" in layer.columns else units
    panel = Panel(
        units=tuple(units),
        periods=tuple(periods),
        values=values,
        geometry=layer.geometry.reset_index(drop=True),
        names=tuple(names),
        meta=meta,
    )

    clusters = None
    ccols = [f"cluster_{p}" for p in periods]
    if all(c in layer.columns for c in ccols):
        lookup = {label: code for label, code in CODES.items()}
        clusters = np.column_stack(
            [layer[c].astype(str).map(lookup).fillna(-1).to_numpy(dtype=np.int64) for c in ccols]
        ).astype(np.int8)
    jumps = None
    if (folder / "jumps.csv").exists():
        path = folder / "jumps.csv"
        with path.open(encoding="utf-8") as f:
            skip = 1 if f.readline().startswith("# ") else 0  # the per-period warning line
        # not comment="#": a name may hold a "#"
        jumps = pd.read_csv(path, skiprows=skip, dtype={"unit": str, "to_period": str})
    nbrs = None
    try:
        from mapdrift.weights import build_weights

        kind = str(params.get("weights") or "queen")
        w = build_weights(panel.geometry, kind, cache_dir=folder.parent / ".mapdrift-cache")
        nbrs = (np.asarray(w.W.indptr), np.asarray(w.W.indices))
    except Exception:  # neighbours are a nicety; the page works without them
        nbrs = None
    method = [
        f"Data: {len(units)} units, {len(periods)} periods ({periods[0]} to {periods[-1]})",
        "Classes: "
        + ", ".join(x for x in (breaks[0].scheme, f"{breaks[0].k} classes", breaks[0].basis) if x),
    ]
    if params.get("statistic"):
        method.append(
            f"Clusters: {params['statistic']}, {params.get('permutations')} permutations, "
            f"alpha {params.get('alpha')}, correction {params.get('correction')}, seed {params.get('seed')}"
        )
    smooth = cfg.get("clusters", {}).get("smooth")
    extras = ExplorerExtras(
        jumps=jumps,
        jump_threshold=cfg.get("changes", {}).get("jump"),
        cluster_codes=clusters,
        cluster_labels=tuple(LABELS),
        neighbours=nbrs,
        smoothing=smooth,
        title=str(brief.get("title") or meta.variable),
        subtitle=str(brief.get("subtitle") or meta.unit_label),
        source=str(brief.get("source") or meta.source),
        notice=params.get("notice"),
        method=tuple(method),
        cautions=CAUTIONS,
    )
    return build_payload(panel, classes, extras, raster_px=raster_px or DEFAULT_RASTER_PX)
