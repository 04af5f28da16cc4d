"""Class breaks that keep frames comparable: schemes, bases, legend labels and the breaks file.

Classes are right-closed: a value ``x`` is in class ``i`` when ``edges[i-1] < x <= edges[i]``
(upper-inclusive, as mapclassify does), so equal values always share a class. Values below the
lowest or above the highest edge fall into the first or last class, whose labels are open-ended
(``"<= 2.0"``, ``"> 10.0"``). Missing values (NaN) get class ``-1``.

Bases: ``pooled`` (default: one set of breaks over every unit-period value, frames comparable),
``per-period`` (each period its own; every output warns), ``period:YEAR`` (breaks from one
reference period) and ``file`` (a saved ``breaks.json`` reused, e.g. from last year's run).
"""

from __future__ import annotations

import hashlib
import json
import math
from collections.abc import Sequence
from dataclasses import dataclass, field, replace
from enum import Enum
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np

from mapdrift.errors import ConfigError, InputError
from mapdrift.findings import Finding, plural

if TYPE_CHECKING:
    import geopandas as gpd

    from mapdrift.panel import Panel

__all__ = [
    "BREAKS_FORMAT",
    "PER_PERIOD_WARNING",
    "Breaks",
    "Classes",
    "Scheme",
    "classify",
    "classify_spec",
    "describe",
    "fisher_jenks",
    "fit_breaks",
    "format_labels",
    "parse_basis",
    "quantile_edges",
]

#: Version key of our breaks JSON format (bump on incompatible change).
BREAKS_FORMAT = "mapdrift-breaks/1"
#: Text carried by every output made with per-period breaks.
PER_PERIOD_WARNING = "Classes differ by period; frames are not comparable."
#: Above this many pooled values, natural breaks are fitted on a seeded sample.
JENKS_MAX_VALUES = 20_000
JENKS_SEED = 12345
#: Dynamic-programming layers of the last input of :func:`fisher_jenks` (one entry).
_FISHER_LAYERS: dict[str, dict[str, Any]] = {}


class Scheme(str, Enum):
    """Classification schemes; the CLI's ``--scheme`` choices are exactly these values."""

    QUANTILE = "quantile"
    NATURAL_BREAKS = "natural-breaks"
    EQUAL_INTERVAL = "equal-interval"
    STD_DEV = "std-dev"
    HEAD_TAIL = "head-tail"
    MANUAL = "manual"

    @classmethod
    def parse(cls, name: str | Scheme) -> Scheme:
        try:
            return cls(name)
        except ValueError:
            valid = ", ".join(s.value for s in cls)
            raise ConfigError(
                f"scheme {name!r} is not a valid option, must be one of {valid}"
            ) from None

    @property
    def diverging(self) -> bool:
        """Whether the legend diverges about a centre (std-dev)."""
        return self is Scheme.STD_DEV


# ---------------------------------------------------------------------------------------------
# Breaks
# ---------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class Breaks:
    """Upper bounds of ``k`` classes, ascending, plus how they were obtained.

    ``lower`` is the minimum of the values the breaks were fitted on. ``labels`` are right-closed
    legend texts. ``basis`` is ``pooled``, ``per-period``, ``period:<label>`` or ``file``.
    ``center`` is the mean for std-dev breaks (legend diverges about it), else ``None``.
    ``notes`` say what happened on the way (ties collapsed classes, sampling...).
    """

    edges: tuple[float, ...]
    scheme: str
    basis: str = "pooled"
    lower: float = float("nan")
    labels: tuple[str, ...] = ()
    variable: str = "value"
    requested_k: int | None = None
    isolate_zeros: bool = False
    center: float | None = None
    period: str | None = None
    notes: tuple[str, ...] = ()
    fitted_on: str | None = None
    reused_from: str | None = None
    open_low: bool = True
    open_high: bool = True

    def __post_init__(self) -> None:
        edges = tuple(float(e) for e in self.edges)
        if not edges:
            raise ValueError("breaks need at least one edge")
        if any(b <= a for a, b in zip(edges, edges[1:])):
            raise ValueError(f"break edges must be strictly ascending, got {list(edges)}")
        object.__setattr__(self, "edges", edges)
        if not self.labels:
            object.__setattr__(self, "labels", format_labels(edges, self.lower))
        if self.requested_k is None:
            object.__setattr__(self, "requested_k", len(edges))

    @property
    def k(self) -> int:
        """Number of classes actually obtained (after ties collapsed any)."""
        return len(self.edges)

    @property
    def diverging(self) -> bool:
        return self.center is not None

    def __repr__(self) -> str:
        """How they were made, then one legend label per line."""
        return f"<Breaks: {describe(self)}\n" + "\n".join(f"  {x}" for x in self.labels) + ">"

    def classify(self, values: np.ndarray) -> np.ndarray:
        """Class index per value (int16, ``-1`` for NaN); out-of-range values go to the end classes.

        >>> Breaks((2.0, 5.0, 10.0), "manual").classify(np.array([1, 2, 2.5, 10, 11, np.nan]))
        array([ 0,  0,  1,  2,  2, -1], dtype=int16)
        """
        v = np.asarray(values, dtype=np.float64)
        idx = np.searchsorted(np.asarray(self.edges), v, side="left")
        idx = np.minimum(idx, self.k - 1).astype(np.int16)
        idx[np.isnan(v)] = -1
        return idx

    def out_of_range(self, values: np.ndarray) -> tuple[int, int]:
        """How many values lie below ``lower`` and above the last edge."""
        v = np.asarray(values, dtype=np.float64)
        v = v[~np.isnan(v)]
        below = int((v < self.lower).sum()) if not math.isnan(self.lower) else 0
        return below, int((v > self.edges[-1]).sum())

    # -- file format -------------------------------------------------------------------------
    def to_dict(self) -> dict[str, Any]:
        return {
            "format": BREAKS_FORMAT,
            "scheme": self.scheme,
            "basis": self.basis,
            "period": self.period,
            "fitted_on": self.fitted_on,
            "reused_from": self.reused_from,
            "k": self.k,
            "requested_k": self.requested_k,
            "edges": list(self.edges),
            "lower": None if math.isnan(self.lower) else self.lower,
            "labels": list(self.labels),
            "variable": self.variable,
            "isolate_zeros": self.isolate_zeros,
            "center": self.center,
            "notes": list(self.notes),
        }

    @classmethod
    def from_dict(cls, d: dict[str, Any], *, source: str = "breaks file") -> Breaks:
        if d.get("format") != BREAKS_FORMAT:
            raise InputError(
                f"{source}: not a mapdrift breaks file (format {d.get('format')!r}, expected "
                f"{BREAKS_FORMAT!r}); write one with `mapdrift breaks --save`"
            )
        try:
            lower = d.get("lower")
            return cls(
                edges=tuple(d["edges"]),
                scheme=str(d["scheme"]),
                basis=str(d.get("basis", "pooled")),
                lower=float("nan") if lower is None else float(lower),
                labels=tuple(d.get("labels") or ()),
                variable=str(d.get("variable", "value")),
                requested_k=d.get("requested_k"),
                isolate_zeros=bool(d.get("isolate_zeros", False)),
                center=d.get("center"),
                period=d.get("period"),
                fitted_on=d.get("fitted_on"),
                reused_from=d.get("reused_from"),
                notes=tuple(d.get("notes", ())),
            )
        except (KeyError, TypeError, ValueError) as exc:
            raise InputError(
                f"{source}: malformed breaks ({exc}); re-create it with `mapdrift breaks --save`"
            ) from None

    def save(self, path: Path | str) -> Path:
        """Write our JSON breaks format atomically."""
        from mapdrift.atomic import write_text

        return write_text(Path(path), json.dumps(self.to_dict(), indent=2) + "\n")

    @classmethod
    def load(cls, path: Path | str) -> Breaks:
        path = Path(path)
        try:
            data = json.loads(path.read_text(encoding="utf-8"))
        except FileNotFoundError:
            raise InputError(
                f"{path}: breaks file not found; check the path or drop --breaks-file"
            ) from None
        except json.JSONDecodeError as exc:
            raise InputError(f"{path}: not valid JSON ({exc.msg} at line {exc.lineno})") from None
        if isinstance(data, dict) and "breaks" in data and "format" not in data:
            data = data["breaks"]  # a manifest or wrapper holding the breaks
        return cls.from_dict(data, source=str(path))


def _decimals(edges: Sequence[float]) -> int:
    """Fewest decimals that keep edges distinct and each within 1 % of the narrowest class.

    Whole-number edges get none; otherwise at least one. Rounding must not misplace a value
    visibly: 4.25 is not shown as 4.2 when the classes are only a few units wide.
    """
    finite = [e for e in edges if math.isfinite(e)]
    if finite and all(float(e).is_integer() for e in finite):
        return 0
    gaps = [b - a for a, b in zip(finite, finite[1:]) if b > a]
    tol = 0.01 * min(gaps) if gaps else 0.0
    for d in range(1, 5):
        rounded = [round(e, d) for e in finite]
        if len(set(rounded)) == len(rounded) and all(
            abs(r - e) <= tol + 1e-12 for r, e in zip(rounded, finite)
        ):
            return d
    for d in range(1, 9):
        if len({round(e, d) for e in finite}) == len(finite):
            return max(d, 4)
    return 8


def format_labels(edges: Sequence[float], lower: float = float("nan")) -> tuple[str, ...]:
    """Right-closed legend labels: ``<= 2.0``, ``2.0 - 5.0``, ``> 5.0`` (open-ended ends).

    >>> format_labels([2, 5, 10])
    ('<= 2', '2 - 5', '> 5')
    >>> format_labels([0.25, 1.5])
    ('<= 0.25', '> 0.25')
    """
    edges = list(edges)
    d = _decimals(edges)

    def f(x: float) -> str:
        return f"{x:,.{d}f}"

    if len(edges) == 1:
        return (f"all values <= {f(edges[0])}",)
    labels = [f"<= {f(edges[0])}"]
    for a, b in zip(edges[:-2], edges[1:-1]):
        labels.append(f"{f(a)} - {f(b)}")
    labels.append(f"> {f(edges[-2])}")
    return tuple(labels)


# ---------------------------------------------------------------------------------------------
# Schemes (pure functions over a 1-D array of finite values)
# ---------------------------------------------------------------------------------------------
# Why each scheme is written here rather than taken from mapclassify (checked in
# tests/test_breaks.py): quantile and equal-interval -- mapclassify's edges land an ulp off a data
# value (percentiles stepped by 100/k; widths summed), moving that value to the next class in
# about 3 % of 4,000 random inputs; std-dev -- mapclassify's StdMean uses fixed multiples and
# ddof 1, ours k classes one population sd wide; head-tail -- mapclassify's has no k cap and no
# 40 % head rule; natural breaks -- mapclassify's Fisher-Jenks is not optimal in float32 on
# some inputs, ours is exact in float64.
def quantile_edges(x: np.ndarray, k: int) -> list[float]:
    """Type-7 sample quantiles at i/k (Hyndman & Fan 1996; numpy/R default) plus the maximum.

    Ties collapse classes: repeated edges are dropped, so the result may have fewer than k edges.
    """
    qs = np.quantile(x, np.arange(1, k) / k, method="linear")
    return sorted(set([float(q) for q in qs] + [float(np.max(x))]))


def _ssd_table(vals: np.ndarray, w: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    cw = np.concatenate([[0.0], np.cumsum(w)])
    c1 = np.concatenate([[0.0], np.cumsum(w * vals)])
    c2 = np.concatenate([[0.0], np.cumsum(w * vals * vals)])
    return cw, c1, c2


def fisher_jenks(x: np.ndarray, k: int) -> list[float]:
    """Exact Fisher (1958) optimal partition into ``k`` classes minimising within-class SS.

    Dynamic programming over the distinct sorted values (weighted by their counts), in float64 on
    values centred at their median, so the partition is unchanged when a constant is added. Ties
    in cost prefer the earlier split. Returns the classes' upper bounds (fewer than ``k`` when there
    are fewer distinct values).

    >>> fisher_jenks(np.array([1, 2, 3, 10, 11, 12, 20, 21, 22.0]), 3)
    [3.0, 12.0, 22.0]
    """
    x = np.asarray(x, dtype=np.float64)
    uniq, counts = np.unique(x, return_counts=True)
    n = len(uniq)
    if n <= k:
        return [float(u) for u in uniq]
    # The layers for j classes do not depend on k, so the layers of the last input are kept:
    # natural breaks for several k on the same values (the explorer's comparison) fill each
    # layer once. Same input, same layers, same edges.
    key = hashlib.sha256(uniq.tobytes() + counts.tobytes()).hexdigest()
    tables = _FISHER_LAYERS.get(key)
    if tables is None:
        vals = uniq - uniq[n // 2]
        w = counts.astype(np.float64)
        cw, c1, c2 = _ssd_table(vals, w)
        scale = float(np.sum(w * vals * vals)) + 1.0
        cost0 = np.full(n + 1, np.inf)
        cost0[1:] = c2[1:] - c1[1:] ** 2 / cw[1:]
        tables = {"sums": (cw, c1, c2), "tol": 1e-12 * scale, "cost": [cost0], "back": [None]}
        _FISHER_LAYERS.clear()
        _FISHER_LAYERS[key] = tables
    cw, c1, c2 = tables["sums"]
    tol = tables["tol"]

    def ssd(lo: np.ndarray, hi: int) -> np.ndarray:
        # within-class SS of sorted distinct values lo..hi-1 (half-open), vectorised over lo
        ww = cw[hi] - cw[lo]
        s1 = c1[hi] - c1[lo]
        return (c2[hi] - c2[lo]) - s1 * s1 / ww

    # cost[j][i]: best SS of the first i distinct values in j+1 classes. The best start of the
    # last class is monotone in i for 1-D squared error, so each layer is filled by divide and
    # conquer (O(n log n) per class) instead of the O(n^2) full scan.
    cost, back = tables["cost"], tables["back"]
    for j in range(len(cost), k):
        prev = cost[j - 1]
        cur = np.full(n + 1, np.inf)
        bk = np.zeros(n + 1, dtype=np.int64)
        stack = [(j + 1, n, j, n - 1)]  # fill i in [lo, hi] with split m in [mlo, mhi]
        while stack:
            lo, hi, mlo, mhi = stack.pop()
            if lo > hi:
                continue
            i = (lo + hi) // 2
            m = np.arange(mlo, min(mhi, i - 1) + 1)
            total = prev[m] + ssd(m, i)
            best = total.min()
            pick = int(m[np.flatnonzero(total <= best + tol)[0]])
            cur[i], bk[i] = best, pick
            stack.append((lo, i - 1, mlo, pick))
            stack.append((i + 1, hi, pick, mhi))
        cost.append(cur)
        back.append(bk)
    # walk back the split points
    edges: list[float] = []
    i = n
    for j in range(k - 1, 0, -1):
        m = int(back[j][i])
        edges.append(float(uniq[i - 1]))
        i = m
    edges.append(float(uniq[i - 1]))
    return sorted(edges)


def _equal_interval(x: np.ndarray, k: int) -> list[float]:
    lo, hi = float(np.min(x)), float(np.max(x))
    if hi == lo:
        return [hi]
    edges = [lo + (hi - lo) * i / k for i in range(1, k)] + [hi]
    return sorted(set(edges))


def _std_dev(x: np.ndarray, k: int) -> tuple[list[float], float]:
    """k classes one standard deviation wide, centred on the mean (an edge at the mean when k is even)."""
    mean, sd = float(np.mean(x)), float(np.std(x))
    hi = float(np.max(x))
    if sd == 0:
        return [hi], mean
    offsets = np.arange(1, k) - k / 2.0  # k=5: -1.5,-0.5,0.5,1.5 ; k=4: -1,0,1
    edges = [mean + o * sd for o in offsets]
    edges = [e for e in edges if np.min(x) <= e < hi] + [hi]
    return sorted(set(edges)), mean


def _head_tail(x: np.ndarray, k: int, head_share: float = 0.4) -> list[float]:
    """Head/tail breaks (Jiang 2013): split at the mean while the head stays under 40 %."""
    edges: list[float] = []
    part = x
    while len(edges) < k - 1 and len(part) > 1:
        m = float(np.mean(part))
        head = part[part > m]
        if len(head) == 0 or len(head) / len(part) > head_share:
            break
        edges.append(m)
        part = head
    return sorted(set(edges + [float(np.max(x))]))


def _manual(x: np.ndarray, values: Sequence[float]) -> list[float]:
    edges = sorted(float(v) for v in values)
    if len(set(edges)) != len(edges):
        raise ConfigError(f"--values has repeated breaks: {', '.join(map(str, values))}")
    if len(x) and float(np.max(x)) > edges[-1]:
        edges.append(float(np.max(x)))
    return edges


def _fit_edges(
    x: np.ndarray, scheme: Scheme, k: int, values: Sequence[float] | None, notes: list[str]
) -> tuple[list[float], float | None]:
    center = None
    if scheme is Scheme.QUANTILE:
        edges = quantile_edges(x, k)
    elif scheme is Scheme.NATURAL_BREAKS:
        sample = x
        if len(x) > JENKS_MAX_VALUES:
            rng = np.random.default_rng(JENKS_SEED)
            sample = np.concatenate(
                [rng.choice(x, JENKS_MAX_VALUES - 2, replace=False), [x.min(), x.max()]]
            )
            notes.append(
                f"natural breaks fitted on a seeded sample of {JENKS_MAX_VALUES:,} of "
                f"{len(x):,} values (seed {JENKS_SEED})"
            )
        edges = fisher_jenks(sample, k)
        edges[-1] = float(np.max(x))
    elif scheme is Scheme.EQUAL_INTERVAL:
        edges = _equal_interval(x, k)
    elif scheme is Scheme.STD_DEV:
        edges, center = _std_dev(x, k)
    elif scheme is Scheme.HEAD_TAIL:
        edges = _head_tail(x, k)
    else:
        if not values:
            raise ConfigError("scheme manual needs break values, e.g. --values 0,2,5,10")
        edges = _manual(x, values)
    return edges, center


def fit_breaks(
    values: np.ndarray,
    scheme: str | Scheme = Scheme.QUANTILE,
    k: int = 5,
    *,
    basis: str = "pooled",
    manual_values: Sequence[float] | None = None,
    isolate_zeros: bool = False,
    variable: str = "value",
    period: str | None = None,
) -> Breaks:
    """Fit breaks on all finite values in ``values`` (any shape; NaN ignored).

    With ``isolate_zeros`` exact zeros get a class of their own (upper bound 0) and the other
    ``k - 1`` classes are fitted on the positive values.
    """
    scheme = Scheme.parse(scheme)
    if scheme is not Scheme.MANUAL and not 2 <= int(k) <= 9:
        raise ConfigError(f"k = {k} classes is out of range; choose k from 2 to 9")
    x = np.asarray(values, dtype=np.float64).ravel()
    x = x[np.isfinite(x)]
    if x.size == 0:
        raise InputError("no finite values to fit class breaks on; check the value column")
    notes: list[str] = []
    if isolate_zeros:
        if (x < 0).any():
            raise ConfigError("--isolate-zeros needs non-negative values; the data have negatives")
        pos = x[x > 0]
        if pos.size == 0:
            edges, center = [0.0], None
        else:
            sub, center = _fit_edges(pos, scheme, max(k - 1, 1), manual_values, notes)
            edges = [0.0] + [e for e in sub if e > 0]
        notes.append(f"exact zeros ({int((x == 0).sum()):,} values) have a class of their own")
    else:
        edges, center = _fit_edges(x, scheme, int(k), manual_values, notes)
    requested = len(manual_values) + 1 if scheme is Scheme.MANUAL and manual_values else int(k)
    if scheme in (Scheme.QUANTILE, Scheme.NATURAL_BREAKS) and len(edges) < requested:
        notes.append(
            f"ties in the data collapsed {requested} requested classes to {len(edges)}; "
            "equal values always share a class"
        )
    if scheme is Scheme.HEAD_TAIL and len(edges) < requested:
        notes.append(
            f"head/tail breaks found {len(edges)} classes (the tail ended), not {requested}"
        )
    labels = format_labels(edges, float(np.min(x)))
    if isolate_zeros and edges[0] == 0.0 and len(edges) > 1:
        labels = ("exactly 0",) + labels[1:]
    return Breaks(
        edges=tuple(edges),
        labels=labels,
        scheme=scheme.value,
        basis=basis,
        lower=float(np.min(x)),
        variable=variable,
        requested_k=requested,
        isolate_zeros=isolate_zeros,
        center=center,
        period=period,
        notes=tuple(notes),
    )


# ---------------------------------------------------------------------------------------------
# Classes over a panel
# ---------------------------------------------------------------------------------------------
@dataclass(frozen=True, eq=False)
class Classes:
    """Class codes ``[n_units, n_periods]`` (int16, -1 = no data) and the breaks behind them.

    ``breaks`` holds one Breaks (pooled, reference period, file) or one per period
    (``per_period`` is then True and every output must carry :data:`PER_PERIOD_WARNING`).
    """

    codes: np.ndarray
    breaks: tuple[Breaks, ...]
    findings: tuple[Finding, ...] = field(default=())

    def __post_init__(self) -> None:
        codes = np.array(self.codes, dtype=np.int16)
        codes.flags.writeable = False
        object.__setattr__(self, "codes", codes)

    @property
    def per_period(self) -> bool:
        return len(self.breaks) > 1

    @property
    def k(self) -> int:
        """Number of classes (the largest k over periods when breaks differ by period)."""
        return max(b.k for b in self.breaks)

    @property
    def warning(self) -> str | None:
        """The text every output must carry, or None when frames are comparable."""
        return PER_PERIOD_WARNING if self.per_period else None

    def breaks_for(self, j: int) -> Breaks:
        """Breaks used for period column ``j``."""
        return self.breaks[j] if self.per_period else self.breaks[0]

    def counts(self) -> np.ndarray:
        """Units per class per period, shape ``[n_periods, k]`` (no-data units not counted)."""
        n_p = self.codes.shape[1]
        out = np.zeros((n_p, self.k), dtype=np.int64)
        for j in range(n_p):
            c = self.codes[:, j]
            out[j] = np.bincount(c[c >= 0], minlength=self.k)[: self.k]
        return out

    def no_data(self) -> np.ndarray:
        """No-data units per period, shape ``[n_periods]``."""
        return (self.codes < 0).sum(axis=0)

    def __repr__(self) -> str:
        """Size, how the breaks were made, and units per class in the last period."""
        n_u, n_p = self.codes.shape
        b = self.breaks[-1]
        last = self.counts()[-1] if n_p else np.zeros(self.k, dtype=int)
        shares = ", ".join(f"{lab}: {n}" for lab, n in zip(b.labels, last))
        head = describe(self.breaks[0]) if not self.per_period else f"{b.scheme}, per period"
        return (
            f"<Classes: {n_u:,} units x {n_p} periods; {head}\n"
            f"  last period: {shares}; no data: {int(self.no_data()[-1]) if n_p else 0}"
            + (f"\n  {self.warning}" if self.warning else "")
            + ">"
        )

    def to_geodataframe(self, panel: Panel) -> gpd.GeoDataFrame:
        """One row per unit of ``panel``: ``unit``, ``name``, the 1-based class per period
        (``class_<period>``, empty for no data, as in ``units.csv``), geometry."""
        import pandas as pd

        from mapdrift.panel import with_geometry

        data: dict[str, Any] = {"unit": list(panel.units), "name": list(panel.names)}
        for j, label in enumerate(panel.period_labels):
            c = self.codes[:, j].astype(np.float64) + 1
            c[self.codes[:, j] < 0] = np.nan
            data[f"class_{label}"] = pd.array(c, dtype="Int64")
        return with_geometry(pd.DataFrame(data), panel)


def parse_basis(basis: str) -> tuple[str, str | None]:
    if basis in ("pooled", "per-period", "file"):
        return basis, None
    if basis.startswith("period:") and len(basis) > len("period:"):
        return "period", basis.split(":", 1)[1]
    raise ConfigError(
        f"basis {basis!r} is not a valid option, must be one of pooled, per-period, "
        "period:<period> (e.g. period:2019), or give --breaks-file"
    )


def _reuse_checks(b: Breaks, vals: np.ndarray, variable: str, source: str) -> list[Finding]:
    """Signs that saved breaks belong to other data: another variable, or classes left empty
    in every period (a new user reused last year's breaks.json of another rate)."""
    out: list[Finding] = []
    theirs = (b.variable or "").strip()
    if theirs and variable and theirs.casefold() != str(variable).strip().casefold():
        out.append(
            Finding(
                "warning",
                "breaks-other-variable",
                f"the reused breaks ({source}) were fitted to {theirs!r} but these values are "
                f"{variable!r}; their classes may not mean the same here: check the breaks file, "
                "or fit new ones (leave out --breaks-file; after --previous, add --rebreak)",
            )
        )
    codes = b.classify(vals[np.isfinite(vals)])
    empty = [lab for i, lab in enumerate(b.labels) if not (codes == i).any()]
    if codes.size and empty:
        out.append(
            Finding(
                "warning",
                "breaks-empty-classes",
                f"{plural(len(empty), 'class', 'classes')} of the reused breaks ({source}) "
                f"{'holds' if len(empty) == 1 else 'hold'} no value in any period ({', '.join(repr(e) for e in empty[:4])}"
                f"{', ...' if len(empty) > 4 else ''}); the breaks may come from other data: "
                "check the breaks file, or fit new ones (leave out --breaks-file; after "
                "--previous, add --rebreak)",
            )
        )
    return out


def classify(
    panel: Panel,
    scheme: str | Scheme = Scheme.QUANTILE,
    k: int = 5,
    *,
    basis: str = "pooled",
    manual_values: Sequence[float] | None = None,
    isolate_zeros: bool = False,
    breaks_file: Path | str | None = None,
    breaks: Breaks | None = None,
    reused_from: str | None = None,
) -> Classes:
    """Classify every unit-period value with breaks chosen by ``basis``.

    ``breaks`` (or ``breaks_file``) reuses saved breaks: values beyond their range fall into the
    open-ended first/last classes, with a warning finding.
    """
    variable = panel.meta.variable
    vals = panel.values
    findings: list[Finding] = []
    if breaks_file is not None and breaks is None:
        breaks = Breaks.load(breaks_file)
    if breaks is not None:
        # the breaks keep how they were fitted (basis, periods); reused_from says where from
        source = reused_from or (str(breaks_file) if breaks_file is not None else "saved breaks")
        reused = replace(breaks, reused_from=source)
        below, above = reused.out_of_range(vals)
        if below or above:
            findings.append(
                Finding(
                    "warning",
                    "breaks-out-of-range",
                    f"{below} values fall below and {above} above the reused breaks' range "
                    f"({reused.lower:g} to {reused.edges[-1]:g}); they are shown in the open-ended "
                    f"first/last classes ({reused.labels[0]!r}, {reused.labels[-1]!r}); pass "
                    "--rebreak to refit deliberately",
                )
            )
        findings += _reuse_checks(reused, vals, variable, source)
        all_b: tuple[Breaks, ...] = (reused,)
    else:
        kind, ref = parse_basis(basis)
        kw: dict[str, Any] = dict(
            scheme=scheme,
            k=k,
            manual_values=manual_values,
            isolate_zeros=isolate_zeros,
            variable=variable,
        )
        if kind == "pooled":
            span = panel.period_span
            all_b = (replace(fit_breaks(vals, basis="pooled", **kw), fitted_on=span),)
        elif kind == "per-period":
            bs = []
            for j, label in enumerate(panel.period_labels):
                if np.isfinite(vals[:, j]).any():
                    bs.append(fit_breaks(vals[:, j], basis="per-period", period=label, **kw))
                else:  # a period with no values still needs breaks of some kind
                    bs.append(fit_breaks(vals, basis="per-period", period=label, **kw))
            all_b = tuple(bs)
            findings.append(Finding("warning", "breaks-per-period", PER_PERIOD_WARNING))
        elif kind == "period":
            j = panel.period_index(ref)
            b = replace(
                fit_breaks(vals[:, j], basis=f"period:{ref}", period=ref, **kw), fitted_on=ref
            )
            all_b = (b,)
            below, above = b.out_of_range(vals)
            if below or above:
                findings.append(
                    Finding(
                        "note",
                        "breaks-reference-range",
                        f"{below + above} values of other periods lie outside {ref}'s range and "
                        "fall in the open-ended first/last classes",
                    )
                )
        else:
            raise ConfigError("basis file needs --breaks-file PATH")
    codes = np.empty(vals.shape, dtype=np.int16)
    for j in range(vals.shape[1]):
        codes[:, j] = all_b[j if len(all_b) > 1 else 0].classify(vals[:, j])
    for b in all_b[:1] if len(all_b) == 1 else ():
        for note in b.notes:
            findings.append(Finding("note", "breaks-note", note))
    x = vals[np.isfinite(vals)]
    if not isolate_zeros and x.size and (x == 0).mean() >= 0.2 and breaks is None:
        findings.append(
            Finding(
                "note",
                "breaks-many-zeros",
                f"{(x == 0).mean():.0%} of values are exact zeros; consider --isolate-zeros to give "
                "them a class of their own",
            )
        )
    single = [b for b in all_b if b.scheme == Scheme.HEAD_TAIL.value and b.k == 1]
    if single and breaks is None:
        findings.append(
            Finding(
                "warning",
                "breaks-head-tail-single",
                "head/tail breaks found a single class: the values are not heavy-tailed (the "
                "head above the mean holds more than 40 % of them), so the map shows one "
                "colour; use --scheme quantile or natural-breaks",
            )
        )
    if max(b.k for b in all_b) > 7:
        findings.append(
            Finding(
                "warning",
                "breaks-many-classes",
                "more than 7 classes are hard to tell apart on a map",
            )
        )
    return Classes(codes=codes, breaks=all_b, findings=tuple(findings))


def classify_spec(panel: Panel, spec: Any, **overrides: Any) -> Classes:
    """:func:`classify` with the settings of a :class:`~mapdrift.config.ClassSpec` (scheme, k,
    basis, values, isolate_zeros, breaks_file); ``overrides`` go to :func:`classify` as given
    (e.g. ``breaks_file=None`` to refit, ``reused_from=...``)."""
    kwargs: dict[str, Any] = {
        "scheme": spec.scheme,
        "k": spec.k,
        "basis": spec.basis,
        "manual_values": spec.values or None,
        "isolate_zeros": spec.isolate_zeros,
        "breaks_file": spec.breaks_file,
    }
    return classify(panel, **(kwargs | overrides))


def describe(breaks: Breaks) -> str:
    """How the breaks were made, e.g. ``quantile, 5 classes, pooled over 2012-2024, reused from
    the previous run (2024)``."""
    text = f"{breaks.scheme}, {breaks.k} classes, {breaks.basis}"
    if breaks.fitted_on:
        text += f" over {breaks.fitted_on}"
    if breaks.reused_from:
        text += f", reused from {breaks.reused_from}"
    return text
