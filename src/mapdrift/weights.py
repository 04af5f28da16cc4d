"""Spatial weights: who neighbours whom, built once per geometry and cached.

``build_weights(geometry, kind)`` returns a :class:`SpatialWeights` holding a row-standardised
scipy CSR matrix ``W`` (units in the geometry's order). Kinds:

- ``queen`` (default): polygons sharing at least one boundary point (shapely ``intersects``, so
  T-junctions count, unlike vertex matching).
- ``rook``: polygons sharing a boundary segment of positive length.
- ``knn:K``: the K nearest units by centroid distance (asymmetric by construction).
- ``distance:M``: units whose centroids are within M metres (binary band).
- ``fuzzy`` / ``fuzzy:M``: polygons within M metres of each other (default: 0.5% of the median
  unit's bounding-box diagonal), for layers with slivers or gaps between neighbours.

- a ``.gal`` or ``.gwt`` file (the weights files analysts already have, read with
  ``libpysal.io``), or, from Python, a libpysal ``Graph`` or ``W``: matched to the units by ID
  and row-standardised (see :func:`from_libpysal`). Our own builders stay for the kinds above:
  queen contiguity measured 2.4x (Voronoi cells) to 8.7x (grid) faster than libpysal's
  ``Graph.build_contiguity`` on 10,000 polygons, same neighbours (``benchmarks/bench_weights.py``).

Islands (units with no neighbour) never crash anything: ``islands="nearest"`` (default) links each
to its nearest unit by polygon distance, both ways, with a warning; ``islands="exclude"`` leaves
them without neighbours, so their lag is NaN and the cluster step labels them ``isolated``.
Null or empty geometries are always left without neighbours. Disconnected components are
reported as a finding. Distances are in the geometry's CRS units (metres for a projected map
CRS, which is what :class:`~mapdrift.panel.Panel` carries).

With ``cache_dir`` the result is stored as ``weights-<hash>.npz``, keyed by a SHA-256 of the
geometry's WKB, the CRS, the kind and the island rule, so a yearly rerun does not rebuild it.
"""

from __future__ import annotations

import hashlib
import json
import logging
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np

from mapdrift._lazy import lazy_module
from mapdrift.errors import ConfigError, check_choice
from mapdrift.findings import Finding, examples, plural

if TYPE_CHECKING:  # scipy.sparse is imported on first use (see mapdrift._lazy)
    import geopandas as gpd
    import scipy.sparse as sp
else:
    sp = lazy_module("scipy.sparse")

__all__ = [
    "ISLAND_RULES",
    "WEIGHT_FILES",
    "WEIGHT_KINDS",
    "SpatialWeights",
    "build_weights",
    "from_libpysal",
    "parse_kind",
    "read_weights_file",
    "row_standardise",
]

log = logging.getLogger(__name__)

#: Kinds accepted by ``--weights`` (``knn``, ``distance`` and ``fuzzy`` take ``:number``).
WEIGHT_KINDS: tuple[str, ...] = ("queen", "rook", "knn:K", "distance:M", "fuzzy", "fuzzy:M")
#: Spatial-weights files read with libpysal (``--weights county.gal``).
WEIGHT_FILES: tuple[str, ...] = (".gal", ".gwt")
#: What to do with units that have no neighbour.
ISLAND_RULES: tuple[str, ...] = ("nearest", "exclude")
#: Version of the cache file layout and its findings' texts (bump on change so old caches are
#: ignored).
_CACHE_VERSION = "mapdrift-weights/2"
#: Default fuzzy tolerance as a share of the median unit's bounding-box diagonal.
FUZZY_SHARE = 0.005


def parse_kind(kind: str) -> tuple[str, float | None]:
    """``"knn:6"`` -> ``("knn", 6.0)``, ``"queen"`` -> ``("queen", None)``; else ConfigError."""
    text = str(kind).strip().lower()
    if text.endswith(WEIGHT_FILES):
        if not Path(str(kind).strip()).is_file():
            raise ConfigError(f"--weights {kind!r}: weights file not found; check the path")
        return "file", None
    name, _, arg = text.partition(":")
    valid = ", ".join(WEIGHT_KINDS) + ", or a .gal/.gwt file"
    if name not in ("queen", "rook", "knn", "distance", "fuzzy"):
        raise ConfigError(f"--weights {kind!r} is not a valid option, must be one of {valid}")
    if name in ("queen", "rook"):
        if arg:
            raise ConfigError(f"--weights {kind!r}: {name} takes no number; use {name!r}")
        return name, None
    if not arg:
        if name == "fuzzy":
            return name, None
        example = "knn:6" if name == "knn" else "distance:2500"
        raise ConfigError(f"--weights {kind!r} needs a number, e.g. {example!r}")
    try:
        number = float(arg)
    except ValueError:
        raise ConfigError(f"--weights {kind!r}: {arg!r} is not a number; e.g. 'knn:6'") from None
    if not np.isfinite(number) or number <= 0 or (name == "knn" and number != int(number)):
        what = "a whole number of neighbours >= 1" if name == "knn" else "a distance > 0 in metres"
        raise ConfigError(f"--weights {kind!r}: {name} takes {what}")
    return name, number


def row_standardise(matrix: sp.spmatrix) -> sp.csr_matrix:
    """Divide each row by its sum; rows summing to zero stay all-zero."""
    m = sp.csr_matrix(matrix, dtype=np.float64)
    sums = np.asarray(m.sum(axis=1)).ravel()
    inv = np.divide(1.0, sums, out=np.zeros_like(sums), where=sums > 0)
    return sp.csr_matrix(sp.diags(inv) @ m)


@dataclass(frozen=True, eq=False)
class SpatialWeights:
    """Row-standardised spatial weights over ``n`` units (the geometry's order).

    ``W`` is a CSR matrix with zero diagonal; row ``i`` holds unit ``i``'s neighbours, summing to
    1 (all-zero for units left without neighbours). ``islands`` are the indices of units that had
    no neighbour under ``kind``; ``island_rule`` says what was done (``nearest``: attached;
    ``exclude``: left isolated). ``isolated`` lists the units that still have no neighbour in
    ``W`` (excluded islands, empty geometries).
    ``components`` counts connected groups of units (ignoring direction).
    """

    W: sp.csr_matrix
    kind: str
    islands: tuple[int, ...] = ()
    island_rule: str = "nearest"
    components: int = 1
    findings: tuple[Finding, ...] = ()
    key: str = ""
    isolated: tuple[int, ...] = ()

    @property
    def n(self) -> int:
        return int(self.W.shape[0])

    def __repr__(self) -> str:
        card = self.cardinalities
        mean = float(card.mean()) if len(card) else 0.0
        return (
            f"<SpatialWeights: {self.kind}, {self.n:,} units, {mean:.1f} neighbours on average, "
            f"{plural(len(self.islands), 'island')} ({self.island_rule}), "
            f"{plural(self.components, 'component')}>"
        )

    @property
    def cardinalities(self) -> np.ndarray:
        """Number of neighbours per unit."""
        return np.diff(self.W.indptr)

    def lag(self, values: np.ndarray) -> np.ndarray:
        """Spatial lag: the weighted mean of each unit's neighbours' values.

        NaN-aware: neighbours whose value is NaN are left out and the row re-standardised over
        the rest; a unit with no neighbour with a value gets NaN. Accepts ``[n]`` or
        ``[n, periods]`` (each column lagged separately). The unit's own value is never used.
        """
        x = np.asarray(values, dtype=np.float64)
        if x.shape[0] != self.n:
            raise ValueError(f"lag: got {x.shape[0]} values for {self.n} units")
        valid = ~np.isnan(x)
        num = self.W @ np.where(valid, x, 0.0)
        den = self.W @ valid.astype(np.float64)
        with np.errstate(invalid="ignore", divide="ignore"):
            out = num / den
        out[den <= 1e-12] = np.nan
        return out

    def subset(self, keep: np.ndarray) -> sp.csr_matrix:
        """Weights among the units where ``keep`` is True, re-standardised (missing units dropped).

        Row-standardisation is a per-row scaling, so this equals standardising the original
        (binary or distance) weights of the kept units. Units left with no kept neighbour get
        an all-zero row.
        """
        idx = np.flatnonzero(np.asarray(keep, dtype=bool))
        return row_standardise(self.W[idx][:, idx])

    def neighbours(self, i: int) -> np.ndarray:
        """Indices of unit ``i``'s neighbours."""
        return self.W.indices[self.W.indptr[i] : self.W.indptr[i + 1]].copy()


# ---------------------------------------------------------------------------------------------
# building
# ---------------------------------------------------------------------------------------------
def _pairs_to_matrix(n: int, i: np.ndarray, j: np.ndarray) -> sp.csr_matrix:
    keep = i != j
    i, j = i[keep], j[keep]
    m = sp.csr_matrix((np.ones(len(i)), (i, j)), shape=(n, n))
    m.data[:] = 1.0  # duplicates summed by the constructor -> binary again
    return m


def _valid_mask(geoms: np.ndarray) -> np.ndarray:
    import shapely

    return ~(shapely.is_missing(geoms) | shapely.is_empty(geoms))


def _contiguity(geoms: np.ndarray, rook: bool, tolerance: float | None) -> sp.csr_matrix:
    import shapely

    n = len(geoms)
    ok = np.flatnonzero(_valid_mask(geoms))
    tree = shapely.STRtree(geoms[ok])
    if tolerance is None:
        a, b = tree.query(geoms[ok], predicate="intersects")
    else:
        a, b = tree.query(geoms[ok], predicate="dwithin", distance=tolerance)
    a, b = ok[a], ok[b]
    off = a != b
    a, b = a[off], b[off]
    if rook and len(a):
        upper = a < b
        ua, ub = a[upper], b[upper]
        shared = shapely.intersection(shapely.boundary(geoms[ua]), shapely.boundary(geoms[ub]))
        # A shared edge has positive length; a shared corner is a point (length 0).
        scale = np.sqrt(np.nanmedian(shapely.area(geoms[ok]))) if len(ok) else 1.0
        edge = shapely.length(shared) > 1e-9 * max(scale, 1e-12)
        ua, ub = ua[edge], ub[edge]
        a, b = np.concatenate([ua, ub]), np.concatenate([ub, ua])
    return _pairs_to_matrix(n, a, b)


def _centroids(geoms: np.ndarray) -> np.ndarray:
    import shapely

    pts = shapely.centroid(geoms)
    xy = np.full((len(geoms), 2), np.nan)
    ok = _valid_mask(geoms)
    xy[ok] = shapely.get_coordinates(pts[ok])
    return xy


def _knn(geoms: np.ndarray, k: int) -> sp.csr_matrix:
    from scipy.spatial import cKDTree

    n = len(geoms)
    xy = _centroids(geoms)
    ok = np.flatnonzero(~np.isnan(xy[:, 0]))
    k_eff = min(k, len(ok) - 1)
    if k_eff < 1:
        return sp.csr_matrix((n, n))
    _, nb = cKDTree(xy[ok]).query(xy[ok], k=k_eff + 1)
    rows = np.repeat(ok, k_eff + 1)
    cols = ok[nb.ravel()]
    return _pairs_to_matrix(n, rows, cols)


def _distance_band(geoms: np.ndarray, threshold: float) -> sp.csr_matrix:
    from scipy.spatial import cKDTree

    n = len(geoms)
    xy = _centroids(geoms)
    ok = np.flatnonzero(~np.isnan(xy[:, 0]))
    pairs = cKDTree(xy[ok]).query_pairs(threshold, output_type="ndarray")
    if len(pairs) == 0:
        return sp.csr_matrix((n, n))
    a, b = ok[pairs[:, 0]], ok[pairs[:, 1]]
    return _pairs_to_matrix(n, np.concatenate([a, b]), np.concatenate([b, a]))


def _fuzzy_default(geoms: np.ndarray) -> float:
    import shapely

    ok = _valid_mask(geoms)
    if not ok.any():
        return 0.0
    b = shapely.bounds(geoms[ok])
    diag = np.hypot(b[:, 2] - b[:, 0], b[:, 3] - b[:, 1])
    return float(FUZZY_SHARE * np.median(diag))


def _attach_nearest(geoms: np.ndarray, m: sp.csr_matrix, islands: np.ndarray) -> sp.csr_matrix:
    """Link each island to its nearest other unit (polygon distance), in both directions."""
    import shapely

    ok = np.flatnonzero(_valid_mask(geoms))
    if len(ok) < 2:
        return m
    tree = shapely.STRtree(geoms[ok])
    rows, cols = [], []
    for i in islands:
        # exclusive=True skips the island itself (it is in the tree and at distance 0).
        hits = tree.query_nearest(geoms[i], exclusive=True, all_matches=False)
        if len(hits):
            j = int(ok[hits[0]])
            rows += [i, j]
            cols += [j, i]
    if not rows:
        return m
    extra = _pairs_to_matrix(m.shape[0], np.array(rows), np.array(cols))
    out = sp.csr_matrix(m + extra)
    out.data[:] = 1.0
    return out


def _cache_key(geometry: gpd.GeoSeries, kind: str, islands: str) -> str:
    import shapely

    h = hashlib.sha256()
    h.update(_CACHE_VERSION.encode())
    h.update(f"|{kind}|{islands}|{geometry.crs.to_string() if geometry.crs else ''}|".encode())
    for wkb in shapely.to_wkb(np.asarray(geometry.values), hex=False):
        h.update(wkb if wkb is not None else b"<null>")
        h.update(b"\x00")
    return h.hexdigest()[:24]


def _save_cache(path: Path, w: SpatialWeights) -> None:
    from mapdrift.atomic import atomic_path

    meta = {
        "version": _CACHE_VERSION,
        "kind": w.kind,
        "islands": list(w.islands),
        "island_rule": w.island_rule,
        "components": w.components,
        "isolated": list(w.isolated),
        "findings": [f.to_dict() for f in w.findings],
    }
    with atomic_path(path) as tmp, open(tmp, "wb") as fh:
        np.savez_compressed(
            fh,
            data=w.W.data,
            indices=w.W.indices,
            indptr=w.W.indptr,
            shape=np.array(w.W.shape),
            meta=np.array(json.dumps(meta)),
        )


def _load_cache(path: Path, key: str) -> SpatialWeights | None:
    try:
        with np.load(path, allow_pickle=False) as z:
            meta = json.loads(str(z["meta"]))
            if meta.get("version") != _CACHE_VERSION:
                return None
            W = sp.csr_matrix(
                (z["data"], z["indices"], z["indptr"]), shape=tuple(int(s) for s in z["shape"])
            )
    except (OSError, ValueError, KeyError) as exc:
        log.warning("ignoring unreadable weights cache %s (%s); rebuilding", path, exc)
        return None
    return SpatialWeights(
        W=W,
        kind=meta["kind"],
        islands=tuple(meta["islands"]),
        island_rule=meta["island_rule"],
        components=int(meta["components"]),
        findings=tuple(Finding.from_dict(f) for f in meta["findings"]),
        key=key,
        isolated=tuple(meta["isolated"]),
    )


def _unit_ids(units: Any, idx: Any) -> tuple[str, ...]:
    return tuple(str(units[i]) for i in idx)


def build_weights(
    geometry: gpd.GeoSeries,
    kind: Any = "queen",
    *,
    islands: str = "nearest",
    cache_dir: Path | str | None = None,
    units: Any = None,
) -> SpatialWeights:
    """Spatial weights for ``geometry`` (see the module docstring for kinds and island rules).

    ``kind`` may also be a ``.gal``/``.gwt`` path or a libpysal ``Graph``/``W``; those are
    matched to ``units`` by ID (and not cached: reading them is cheap).

    ``units`` (optional, same order as ``geometry``) gives the IDs named in findings; without
    it findings name row positions. Findings: ``weights-islands`` (warning), ``weights-empty-
    geometry`` (warning), ``weights-components`` (note, more than one connected group).
    """
    if not isinstance(kind, str) or str(kind).strip().lower().endswith(WEIGHT_FILES):
        check_choice("--islands", islands, ISLAND_RULES)
        ids = list(units) if units is not None else [str(i) for i in range(len(geometry))]
        if isinstance(kind, str):
            parse_kind(kind)
            return read_weights_file(kind, ids)
        return from_libpysal(kind, ids)
    name, number = parse_kind(kind)
    check_choice("--islands", islands, ISLAND_RULES)
    kind_text = name if number is None else f"{name}:{number:g}"
    n = len(geometry)
    ids = list(units) if units is not None else [str(i) for i in range(n)]

    key = ""
    cache_path: Path | None = None
    if cache_dir is not None:
        key = _cache_key(geometry, kind_text, islands)
        cache_path = Path(cache_dir) / f"weights-{key}.npz"
        if cache_path.exists():
            cached = _load_cache(cache_path, key)
            if cached is not None and cached.n == n:
                log.info("weights %s read from cache %s", kind_text, cache_path)
                return cached

    if geometry.crs is not None and geometry.crs.is_geographic and name != "queen":
        log.warning("weights %s on a geographic CRS: distances are in degrees", kind_text)

    geoms = np.asarray(geometry.values)
    if name == "queen":
        m = _contiguity(geoms, rook=False, tolerance=None)
    elif name == "rook":
        m = _contiguity(geoms, rook=True, tolerance=None)
    elif name == "fuzzy":
        tol = number if number is not None else _fuzzy_default(geoms)
        m = _contiguity(geoms, rook=False, tolerance=tol)
    elif name == "knn":
        m = _knn(geoms, int(number or 6))
    else:
        m = _distance_band(geoms, float(number or 0.0))

    findings: list[Finding] = []
    valid = _valid_mask(geoms)
    empty = np.flatnonzero(~valid)
    if len(empty):
        findings.append(
            Finding(
                "warning",
                "weights-empty-geometry",
                f"{len(empty)} units have no geometry and get no neighbours "
                f"(e.g. {', '.join(_unit_ids(ids, empty[:5]))}); they are left out of spatial "
                "statistics",
                _unit_ids(ids, empty),
            )
        )
    card = np.diff(m.indptr)
    island_idx = np.flatnonzero((card == 0) & valid)
    if len(island_idx):
        shown = ", ".join(_unit_ids(ids, island_idx[:5]))
        if islands == "nearest":
            m = _attach_nearest(geoms, m, island_idx)
            what = (
                "linked to the nearest unit; to leave them out pass `mapdrift clusters "
                '--islands exclude`, or for `mapdrift run` set [clusters] islands = "exclude" '
                "(--set clusters.islands=exclude)"
            )
        else:
            what = "left without neighbours and labelled isolated (islands = exclude)"
        findings.append(
            Finding(
                "warning",
                "weights-islands",
                f"units with no neighbour under {kind_text} weights: {shown} "
                f"({plural(len(island_idx), 'unit')}); {what}",
                _unit_ids(ids, island_idx),
            )
        )

    from scipy.sparse.csgraph import connected_components

    has_nb = np.diff(m.indptr) > 0
    labels = connected_components(m, directed=False)[1] if n else np.array([], dtype=int)
    # Units without neighbours are their own "component"; count connected groups of 2+ units
    # plus lone units separately so the message is meaningful.
    groups = len(np.unique(labels[has_nb])) if has_nb.any() else 0
    lone = int((~has_nb).sum())
    if groups > 1:
        sizes = np.bincount(labels[has_nb])
        sizes = np.sort(sizes[sizes > 0])[::-1]
        findings.append(
            Finding(
                "note",
                "weights-components",
                f"the {kind_text} weights split the units into {groups} disconnected groups "
                f"(sizes {examples(sizes.tolist(), 6)}); "
                "local statistics only compare units within a group",
            )
        )
    isolated = tuple(int(i) for i in np.flatnonzero(~has_nb))
    for f in findings:
        log.log(logging.WARNING if f.level == "warning" else logging.INFO, "%s", f.message)

    w = SpatialWeights(
        W=row_standardise(m),
        kind=kind_text,
        islands=tuple(int(i) for i in island_idx),
        island_rule=islands,
        components=int(groups + lone) if n else 0,
        findings=tuple(findings),
        key=key,
        isolated=isolated,
    )
    if cache_path is not None:
        _save_cache(cache_path, w)
        log.info("weights %s cached at %s", kind_text, cache_path)
    return w


# ---------------------------------------------------------------------------------------------
# weights analysts already have: .gal/.gwt files, libpysal objects
# ---------------------------------------------------------------------------------------------
def read_weights_file(path: Path | str, units: Any) -> SpatialWeights:
    """Read a ``.gal``/``.gwt`` file with ``libpysal.io`` and match it to ``units`` by ID."""
    import warnings

    import libpysal

    path = Path(path)
    try:
        with warnings.catch_warnings():  # e.g. "DBF relating to GWT was not found": IDs as text
            warnings.simplefilter("ignore")
            w = libpysal.io.open(str(path)).read()
    except Exception as exc:  # libpysal raises many types for a malformed file
        raise ConfigError(
            f"{path}: not a readable {path.suffix} weights file ({type(exc).__name__}: {exc})"
        ) from None
    return from_libpysal(w, units, kind=f"file {path.name}", source=str(path))


def from_libpysal(w: Any, units: Any, *, kind: str = "", source: str = "") -> SpatialWeights:
    """Our row-standardised weights from a libpysal ``Graph`` or ``W``, matched by unit ID.

    IDs are compared as text (``7001`` matches ``07001`` when the only difference is leading
    zeros). Units the weights do not know get no neighbours (reported, labelled isolated);
    weights IDs that are not units are ignored (reported). Given weight values (e.g. a
    ``.gwt``'s inverse distances) are kept and rows standardised.
    """
    from mapdrift.ids import normalise_ids

    if hasattr(w, "unique_ids") and hasattr(w, "sparse"):  # libpysal.graph.Graph
        their_ids, matrix = list(w.unique_ids), w.sparse
        kind = kind or "libpysal Graph"
    elif hasattr(w, "id_order") and hasattr(w, "sparse"):  # libpysal.weights.W
        their_ids, matrix = list(w.id_order), w.sparse
        kind = kind or "libpysal W"
    else:
        raise ConfigError(
            f"weights of type {type(w).__name__} are not understood; give a libpysal Graph or "
            "W, a .gal/.gwt file, or a kind such as 'queen'"
        )
    source = source or kind
    ours = normalise_ids(units)
    theirs = normalise_ids(their_ids)
    index = {u: i for i, u in enumerate(ours)}
    stripped = {u.lstrip("0"): i for i, u in enumerate(ours) if u.isdigit()}
    pos = np.array(
        [index.get(t, stripped.get(t.lstrip("0"), -1) if t.isdigit() else -1) for t in theirs]
    )
    n = len(ours)
    findings: list[Finding] = []
    unknown = [their_ids[i] for i in np.flatnonzero(pos < 0)]
    if len(unknown) == len(theirs) and theirs:
        raise ConfigError(
            f"{source}: none of its {len(theirs)} IDs match the units (e.g. weights "
            f"{examples([str(x) for x in their_ids], 3)}; units {examples(ours, 3)}); the "
            "weights must use the layer's unit IDs"
        )
    if unknown:
        findings.append(
            Finding(
                "warning",
                "weights-ids-unknown",
                f"{source}: {plural(len(unknown), 'ID')} match no unit and are ignored "
                f"(e.g. {examples([str(x) for x in unknown], 5)})",
            )
        )
    coo = sp.coo_matrix(matrix)
    keep = (pos[coo.row] >= 0) & (pos[coo.col] >= 0) & (coo.row != coo.col)
    m = sp.csr_matrix(
        (coo.data[keep], (pos[coo.row[keep]], pos[coo.col[keep]])), shape=(n, n), dtype=float
    )
    covered = np.zeros(n, dtype=bool)
    covered[pos[pos >= 0]] = True
    has_nb = np.diff(m.indptr) > 0
    lone = np.flatnonzero(~has_nb)
    if len(lone):
        missing = np.flatnonzero(~covered)
        findings.append(
            Finding(
                "warning",
                "weights-islands",
                f"{plural(len(lone), 'unit')} have no neighbour in {source} "
                f"(e.g. {', '.join(_unit_ids(ours, lone[:5]))}; {len(missing)} of them are not "
                "in the weights at all); they are labelled isolated",
                _unit_ids(ours, lone),
            )
        )
    from scipy.sparse.csgraph import connected_components

    labels = connected_components(m, directed=False)[1] if n else np.array([], dtype=int)
    groups = len(np.unique(labels[has_nb])) if has_nb.any() else 0
    for f in findings:
        log.warning("%s", f.message)
    W = row_standardise(m)
    W.sort_indices()
    return SpatialWeights(
        W=W,
        kind=kind,
        islands=tuple(int(i) for i in lone),
        island_rule="exclude",
        components=int(groups + len(lone)),
        findings=tuple(findings),
        isolated=tuple(int(i) for i in lone),
    )
