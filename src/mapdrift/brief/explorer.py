"""``explorer.html``: one self-contained, offline page to step through periods, point, brush, compare.

The page draws from a *label raster* (unit index per pixel, made by :mod:`mapdrift.render.raster`),
so a period change costs one pass over the pixels whatever the number of polygons, and finding the
unit under the pointer is one array lookup. Everything the page needs travels inside the file:

- one ``<script type="application/json">`` with the texts, periods, unit IDs and names, breaks of
  the run and of the alternative classings (fitted here, with :mod:`mapdrift.breaks`, so natural
  breaks match ``mapdrift breaks`` for the same k), palettes and the method text; ``<``, ``>``
  and ``&`` are escaped so no data string can close the script element;
- typed arrays (label raster, values, classes, cluster labels, jumps, neighbours), each
  zlib-compressed and base64-encoded, inflated in the page with the browser's own
  ``DecompressionStream``.

The page's script and style are package data (``explorer_page/``), inlined and pinned by SHA-256
hashes in a Content-Security-Policy that forbids every network request (``default-src 'none'``).
The page builds its DOM with ``textContent`` only, so a unit name is never parsed as HTML.
"""

from __future__ import annotations

import base64
import hashlib
import json
import re
import zlib
from collections.abc import Sequence
from dataclasses import dataclass, field
from importlib import resources
from pathlib import Path
from typing import Any

import numpy as np

from mapdrift.atomic import write_text
from mapdrift.clusters.labels import LABELS

__all__ = [
    "COMPARE_SCHEMES",
    "ExplorerExtras",
    "build_payload",
    "pack_array",
    "payload_from_state",
    "render_page",
    "write_explorer",
]

#: Format key of the page's data block (bump on incompatible change).
EXPLORER_FORMAT = "mapdrift-explorer/1"
#: The alternative classings offered in the page (names of :class:`mapdrift.breaks.Scheme`).
COMPARE_SCHEMES: tuple[str, ...] = ("quantile", "natural-breaks", "equal-interval")
#: k offered for the alternative classings.
COMPARE_K: tuple[int, ...] = tuple(range(2, 10))
#: Longest side of the label raster in pixels: about twice the map's on-screen size, so the map
#: stays crisp when zoomed 2x.
DEFAULT_RASTER_PX = 2048


@dataclass(frozen=True)
class ExplorerExtras:
    """What the page shows besides values and classes; every field is optional.

    ``jumps``: the changes step's table of flagged moves (columns ``unit``, ``to_period``,
    ``size``; ``credible`` when present). ``cluster_codes``: ``[units, periods]`` codes into
    ``cluster_labels`` (-1 = no data). ``neighbours``: CSR ``(indptr, indices)`` of the spatial
    weights. ``raw_values``: the unsmoothed values when the map shows smoothed ones. ``base``:
    the denominator counts ``[units, periods]`` with ``base_label`` naming them.
    ``method``: lines for the footer; ``notice``: the warning every output carries.
    """

    jumps: Any = None
    jump_threshold: int | None = None
    cluster_codes: np.ndarray | None = None
    cluster_labels: tuple[str, ...] = LABELS
    neighbours: tuple[np.ndarray, np.ndarray] | None = None
    raw_values: np.ndarray | None = None
    smoothing: str | None = None
    base: np.ndarray | None = None
    base_label: str = "base"
    title: str = ""
    subtitle: str = ""
    source: str = ""
    notice: str | None = None
    method: tuple[str, ...] = ()
    cautions: tuple[str, ...] = field(default=())


# ------------------------------------------------------------------------------------------
# typed arrays
# ------------------------------------------------------------------------------------------
_DTYPES = {
    "int8": np.int8,
    "uint8": np.uint8,
    "int16": np.int16,
    "int32": np.int32,
    "uint32": np.uint32,
    "float32": np.float32,
    "float64": np.float64,
}


def pack_array(arr: np.ndarray, dtype: str, *, shuffle: bool = True) -> dict[str, Any]:
    """A typed array for the page: little-endian bytes, optionally byte-shuffled,
    zlib-compressed and base64-encoded.

    Byte shuffling puts the i-th byte of every element together, which compresses floats of one
    magnitude better; a label raster (long runs of one unit) compresses best unshuffled. The page
    reverses the steps (``unpack`` in ``explorer.js``).

    >>> p = pack_array(np.arange(5), "int32", shuffle=False)
    >>> (p["dtype"], p["n"], p["shuffle"])
    ('int32', 5, False)
    """
    a = np.ascontiguousarray(
        np.asarray(arr).ravel(), dtype=np.dtype(_DTYPES[dtype]).newbyteorder("<")
    )
    size = a.dtype.itemsize
    shuffle = shuffle and size > 1
    raw = a.view(np.uint8).reshape(-1, size).T.copy() if shuffle else a.view(np.uint8)
    data = zlib.compress(raw.tobytes(), 6)
    return {
        "dtype": dtype,
        "n": int(a.size),
        "shuffle": bool(shuffle),
        "b64": base64.b64encode(data).decode("ascii"),
    }


def _period_major(arr: np.ndarray) -> np.ndarray:
    """``[units, periods]`` -> flat period-major (one period's units contiguous)."""
    return np.ascontiguousarray(np.asarray(arr).T).ravel()


# ------------------------------------------------------------------------------------------
# payload
# ------------------------------------------------------------------------------------------
def _jump_arrays(
    jumps: Any, units: Sequence[str], periods: Sequence[str]
) -> tuple[np.ndarray, np.ndarray, bool]:
    """Signed jump size into each period ``[units, periods]`` and credibility (0 no jump or not
    tested, 1 not credible, 2 credible); and whether any move was tested for credibility."""
    n_u, n_p = len(units), len(periods)
    size = np.zeros((n_u, n_p), dtype=np.int8)
    cred = np.zeros((n_u, n_p), dtype=np.uint8)
    if jumps is None or len(jumps) == 0:
        return size, cred, bool(jumps is not None and "credible" in getattr(jumps, "columns", ()))
    import pandas as pd

    uidx = pd.Index(list(units)).get_indexer(jumps["unit"].astype(str))
    pidx = pd.Index(list(periods)).get_indexer(jumps["to_period"].astype(str))
    ok = (uidx >= 0) & (pidx >= 0)
    s = np.asarray(jumps["size"], dtype=np.int64)[ok]
    size[uidx[ok], pidx[ok]] = np.clip(s, -127, 127)
    known = "credible" in jumps.columns
    if known:  # "true" / "false", blank when the move could not be tested
        text = jumps["credible"].astype(str).str.strip().str.lower().to_numpy()[ok]
        yes = np.isin(text, ["true", "1", "yes"])
        no = np.isin(text, ["false", "0", "no"])
        cred[uidx[ok], pidx[ok]] = np.where(yes, 2, np.where(no, 1, 0))
        known = bool((yes | no).any())
    return size, cred, known


def _compare_breaks(
    panel: Any, basis: str, isolate_zeros: bool
) -> dict[str, dict[str, dict[str, Any]]]:
    """Edges and labels of every alternative classing, fitted as ``mapdrift breaks`` would."""
    from mapdrift.breaks import classify

    basis = basis if basis == "per-period" or basis.startswith("period:") else "pooled"
    out: dict[str, dict[str, dict[str, Any]]] = {}
    for scheme in COMPARE_SCHEMES:
        out[scheme] = {}
        for k in COMPARE_K:
            c = classify(panel, scheme, k, basis=basis, isolate_zeros=isolate_zeros)
            out[scheme][str(k)] = {
                "edges": [list(b.edges) for b in c.breaks],
                "labels": [list(b.labels) for b in c.breaks],
                "basis": c.breaks[0].basis,
                "describe": _describe(c.breaks[0]),
            }
    return out


def _describe(b: Any) -> str:
    from mapdrift.breaks import describe

    return describe(b)


def _cluster_look(labels: Sequence[str]) -> list[dict[str, Any]]:
    """How the page draws each cluster label, in code order: fill, mark (``"up"``, ``"down"``,
    ``"ring"`` or None), mark colour, the words and the trade term beneath them, all from
    :mod:`mapdrift.palettes` so the page and the static maps share one look."""
    from mapdrift import palettes

    out = []
    for label in labels:
        fill, mark, mark_colour = palettes.CLUSTER_LOOK.get(
            label, (palettes.CLUSTER_BLANK, None, palettes.CLUSTER_BLANK)
        )
        words, _, term = palettes.CLUSTER_WORDS.get(label, label).partition("\n")
        out.append(
            {
                "label": label,
                "fill": fill,
                "mark": mark,
                "markColour": mark_colour,
                "words": words,
                "term": term,
            }
        )
    return out


def build_payload(
    panel: Any,
    classes: Any,
    extras: ExplorerExtras | None = None,
    *,
    raster_px: int = DEFAULT_RASTER_PX,
    min_unit_px: float = 2.0,
) -> dict[str, Any]:
    """Everything the page needs, as one JSON-ready dict (typed arrays packed).

    ``panel`` is a :class:`~mapdrift.panel.Panel` (geometry in a projected map CRS) and
    ``classes`` the run's :class:`~mapdrift.breaks.Classes`. The label raster is ``raster_px``
    pixels on its longest side; units smaller than ``min_unit_px`` pixels are drawn as dots so
    they can still be seen and pointed at.
    """
    from mapdrift import palettes
    from mapdrift.render.layout import GREY_BOUNDARY
    from mapdrift.render.raster import LabelRaster, fit_transform

    ex = extras or ExplorerExtras()
    periods = [str(p) for p in panel.period_labels]
    units = [str(u) for u in panel.units]
    names = [str(n) for n in panel.names]
    n_u, n_p = len(units), len(periods)

    xmin, ymin, xmax, ymax = (float(v) for v in panel.geometry.total_bounds)
    dx, dy = max(xmax - xmin, 1e-9), max(ymax - ymin, 1e-9)
    if dx >= dy:
        w, h = raster_px, max(int(round(raster_px * dy / dx)), 16)
    else:
        w, h = max(int(round(raster_px * dx / dy)), 16), raster_px
    transform = fit_transform((xmin, ymin, xmax, ymax), w, h, pad=0.01)
    raster = LabelRaster.build(
        panel.geometry, transform, ss=1, min_unit_px=min_unit_px, unit_ids=units
    )

    values = np.asarray(panel.values, dtype=np.float64)
    finite = values[np.isfinite(values)]
    lo = float(finite.min()) if finite.size else 0.0
    hi = float(finite.max()) if finite.size else 1.0

    k = classes.k
    run_colours = palettes.colours_for(k, diverging_legend=classes.breaks[0].diverging)
    first = classes.breaks[0]
    arrays: dict[str, Any] = {
        "label": pack_array(raster.label, "int32", shuffle=False),
        "values": pack_array(_period_major(values), "float64"),
        "classes": pack_array(_period_major(classes.codes), "int8"),
    }
    if ex.raw_values is not None:
        arrays["raw"] = pack_array(_period_major(ex.raw_values), "float64")
    if ex.base is not None:
        arrays["base"] = pack_array(_period_major(ex.base), "float64")
    if ex.cluster_codes is not None:
        arrays["clusters"] = pack_array(_period_major(ex.cluster_codes), "int8")
        # where each unit's outlier mark goes: a point inside it (shapely's representative
        # point, which lies inside even a crescent), in raster pixels
        pts = panel.geometry.representative_point()
        px = np.clip(
            np.floor((pts.x.to_numpy() - transform.x0) / transform.res), 0, transform.width - 1
        )
        py = np.clip(
            np.floor((transform.y1 - pts.y.to_numpy()) / transform.res), 0, transform.height - 1
        )
        arrays["ptX"] = pack_array(px.astype(np.int32), "int32")
        arrays["ptY"] = pack_array(py.astype(np.int32), "int32")
    size, cred, cred_known = _jump_arrays(ex.jumps, units, periods)
    if ex.jumps is not None:
        arrays["jumps"] = pack_array(_period_major(size), "int8")
        if cred_known:
            arrays["credible"] = pack_array(_period_major(cred), "uint8")
    if ex.neighbours is not None:
        indptr, indices = ex.neighbours
        arrays["nbrPtr"] = pack_array(np.asarray(indptr), "uint32")
        arrays["nbrIdx"] = pack_array(np.asarray(indices), "uint32")

    basis = first.basis
    isolate = bool(getattr(first, "isolate_zeros", False))
    return {
        "format": EXPLORER_FORMAT,
        "title": ex.title or panel.meta.variable,
        "subtitle": ex.subtitle or panel.meta.unit_label,
        "variable": panel.meta.variable,
        "unitLabel": panel.meta.unit_label,
        "source": ex.source or panel.meta.source,
        "notice": ex.notice,
        "method": list(ex.method),
        "cautions": list(ex.cautions),
        "periods": periods,
        "units": units,
        "names": names,
        "nUnits": n_u,
        "nPeriods": n_p,
        "range": [lo, hi],
        "run": {
            "k": k,
            "colours": run_colours,
            "edges": [list(b.edges) for b in classes.breaks],
            "labels": [list(b.labels) for b in classes.breaks],
            "describe": _describe(first),
            "perPeriod": bool(classes.per_period),
        },
        "compare": _compare_breaks(panel, basis, isolate),
        "palettes": {str(kk): palettes.sequential(kk) for kk in COMPARE_K},
        "nodata": palettes.NODATA,
        "hatch": palettes.NODATA_HATCH,
        "clusterLabels": list(ex.cluster_labels),
        "clusterLook": _cluster_look(ex.cluster_labels),
        "clusterBlank": palettes.CLUSTER_BLANK,
        "clusterLine": GREY_BOUNDARY,
        "jumpThreshold": ex.jump_threshold,
        "credibleKnown": cred_known,
        "smoothing": ex.smoothing,
        "baseLabel": ex.base_label,
        "raster": {
            "width": int(transform.width),
            "height": int(transform.height),
            "x0": transform.x0,
            "y1": transform.y1,
            "res": transform.res,
        },
        "arrays": arrays,
    }


# ------------------------------------------------------------------------------------------
# the page
# ------------------------------------------------------------------------------------------
def _asset(name: str) -> str:
    return (resources.files("mapdrift.brief") / "explorer_page" / name).read_text(encoding="utf-8")


def _sha256(text: str) -> str:
    return (
        "'sha256-" + base64.b64encode(hashlib.sha256(text.encode("utf-8")).digest()).decode() + "'"
    )


def _json_for_script(payload: dict[str, Any]) -> str:
    """JSON safe inside a ``<script>`` element: no ``<``, ``>``, ``&`` or line separators."""
    text = json.dumps(payload, ensure_ascii=False, separators=(",", ":"), allow_nan=False)
    for ch, esc in (("<", "\\u003c"), (">", "\\u003e"), ("&", "\\u0026")):
        text = text.replace(ch, esc)
    return text.replace("\u2028", "\\u2028").replace("\u2029", "\\u2029")


def render_page(payload: dict[str, Any]) -> str:
    """The whole HTML page for ``payload``, script and style inline and pinned by hashes."""
    import html

    script = _asset("explorer.js")
    style = _asset("explorer.css")
    template = _asset("explorer.html")
    csp = (
        "default-src 'none'; "
        f"script-src {_sha256(script)}; "
        f"style-src {_sha256(style)}; "
        "img-src data: blob:; base-uri 'none'; form-action 'none'"
    )
    parts = {
        "CSP": html.escape(csp, quote=True),
        "TITLE": html.escape(str(payload.get("title") or "mapdrift explorer"), quote=True),
        "STYLE": style,
        "DATA": _json_for_script(payload),
        "SCRIPT": script,
    }
    # one pass over the template: a data string that looks like a placeholder stays data
    return re.sub(r"\{\{([A-Z]+)\}\}", lambda m: parts[m.group(1)], template)


def write_explorer(payload: dict[str, Any], path: Path | str) -> Path:
    """Write ``explorer.html`` atomically; returns the path."""
    return write_text(Path(path), render_page(payload))


# ------------------------------------------------------------------------------------------
# from a run
# ------------------------------------------------------------------------------------------
def payload_from_state(state: Any, *, raster_px: int = DEFAULT_RASTER_PX) -> dict[str, Any]:
    """The page's data from a pipeline :class:`~mapdrift.pipeline.RunState` after its steps ran
    (load, classify; changes and clusters when they ran)."""
    from mapdrift.brief.assemble import method
    from mapdrift.brief.content import CAUTIONS
    from mapdrift.brief.inputs import BriefInputs
    from mapdrift.clusters import ClusterOptions
    from mapdrift.config import BriefSpec

    panel = state.panel
    brief = state.section(BriefSpec, "brief")
    ch = state.results.get("changes")
    cl = state.results.get("clusters")
    smooth = state.section(ClusterOptions, "clusters").smooth
    inputs = state.config.section("inputs")
    raw = None
    # raw rates beside smoothed ones, unless a view (e.g. change since a base period) turned
    # the values into something else
    viewed = bool(getattr(panel.meta, "view", ""))
    if smooth and not viewed and panel.numerator is not None and panel.denominator is not None:
        with np.errstate(invalid="ignore", divide="ignore"):
            raw = panel.numerator / panel.denominator * float(inputs.get("per", 1000.0))
    nbrs = None
    if state.weights is not None:
        w = state.weights.W
        nbrs = (np.asarray(w.indptr), np.asarray(w.indices))
    extras = ExplorerExtras(
        jumps=ch.jumps if ch is not None else None,
        jump_threshold=ch.options.jump if ch is not None else None,
        cluster_codes=cl.codes if cl is not None else None,
        cluster_labels=tuple(LABELS),
        neighbours=nbrs,
        raw_values=raw,
        smoothing=smooth,
        base=panel.denominator,
        base_label=str(inputs.get("denominator") or "base"),
        title=brief.title or panel.meta.variable,
        subtitle=brief.subtitle or panel.meta.unit_label or "",
        source=brief.source or panel.meta.source,
        notice=" ".join(x for x in (state.notice, getattr(state, "view", "")) if x) or None,
        method=tuple(f"{k}: {v}" for k, v in method(BriefInputs.from_run(state))),
        cautions=CAUTIONS,
    )
    return build_payload(panel, state.classes, extras, raster_px=raster_px)
