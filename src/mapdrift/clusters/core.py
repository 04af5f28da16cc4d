"""The cluster step: options, result and :func:`analyse_clusters` (panel in, tables out)."""

from __future__ import annotations

import logging
import warnings
from dataclasses import dataclass, field
from functools import partial
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np

from mapdrift.clusters import labels as lab
from mapdrift.clusters.local import P_VALUES, LocalResult, gi_star_panel, local_moran_panel
from mapdrift.clusters.moran import MoranGlobal, moran_global_panel
from mapdrift.clusters.multiple import CORRECTIONS, adjust, describe
from mapdrift.clusters.trends import TrendResult, period_times, trends
from mapdrift.compute import Executor, SerialExecutor
from mapdrift.errors import ConfigError, check_choice
from mapdrift.findings import Finding, examples, plural
from mapdrift.weights import ISLAND_RULES, SpatialWeights, build_weights, parse_kind

if TYPE_CHECKING:
    import geopandas as gpd
    import pandas as pd

    from mapdrift.panel import Panel

__all__ = ["STANDARDISE", "STATISTICS", "ClusterOptions", "ClusterResult", "analyse_clusters"]

log = logging.getLogger(__name__)

STATISTICS: tuple[str, ...] = ("local-moran", "gi-star")
#: What the statistics use when the values are rates from counts (see ClusterOptions).
STANDARDISE: tuple[str, ...] = ("assuncao-reis", "none")
#: Default permutation seed (fixed, so reruns give identical tables).
DEFAULT_SEED = 20240917


@dataclass(frozen=True)
class ClusterOptions:
    """Options of the cluster step (the config section ``[clusters]`` maps onto these keys).

    ``change_from`` / ``change_to`` choose the two periods of the local Moran of change (default
    first and last). ``smooth`` (``eb`` or ``spatial-eb``) smooths rates from counts before the
    statistics. ``cache_dir`` keeps the spatial weights between runs.

    ``standardise``: with counts, ``assuncao-reis`` (default) runs the local and global
    statistics on Assuncao & Reis (1999) EB standardised rates, and the change and the trends
    on global EB smoothed rates (Marshall 1991), so a small base cannot dominate a period;
    ``none`` uses the values as mapped (the old behaviour; also what happens without counts).
    ``p_value``: ``normal`` (default; exact-moment normal approximation, can go below the
    permutation floor) or ``permutation`` (pseudo p-values from ``permutations`` draws).
    """

    weights: str = "queen"
    islands: str = "nearest"
    permutations: int = 999
    alpha: float = 0.05
    correction: str = "fdr"
    seed: int = DEFAULT_SEED
    statistic: str = "local-moran"
    persist: int = 3
    change_from: str | None = None
    change_to: str | None = None
    smooth: str | None = None
    min_periods: int = 4
    cache_dir: Path | None = None
    standardise: str = "assuncao-reis"
    p_value: str = "normal"

    def __post_init__(self) -> None:
        parse_kind(self.weights)
        check_choice("--islands", self.islands, ISLAND_RULES)
        check_choice("--correction", self.correction, CORRECTIONS)
        check_choice("--statistic", self.statistic, STATISTICS)
        if not 0 < self.alpha < 1:
            raise ConfigError(f"--alpha must be between 0 and 1 (e.g. 0.05), got {self.alpha}")
        if self.permutations < 0 or self.permutations > 99_999:
            raise ConfigError(
                f"--permutations must be 0 to 99999 (e.g. 999), got {self.permutations}"
            )
        if self.statistic == "local-moran" and 0 < self.permutations < 99:
            raise ConfigError(
                f"--permutations {self.permutations} is too few for p-values at --alpha "
                f"{self.alpha}; use 99 or more (999 recommended)"
            )
        if self.persist < 1:
            raise ConfigError(f"--persist must be 1 or more periods, got {self.persist}")
        if not 0 <= self.seed < 2**32:
            raise ConfigError(f"--seed must be a whole number from 0 to 2**32 - 1, got {self.seed}")
        if self.min_periods < 3:
            raise ConfigError(
                f"min_periods must be 3 or more (a trend test needs 3 values), got "
                f"{self.min_periods}"
            )
        for key, valid in (("standardise", STANDARDISE), ("p_value", P_VALUES)):
            check_choice("--" + key.replace("_", "-"), getattr(self, key), valid)
        if self.smooth is not None:
            check_choice("--smooth", self.smooth, ("eb", "spatial-eb"))

    @property
    def significance(self) -> str:
        """The sentence every output carries about alpha and the correction."""
        return describe(self.alpha, self.correction) + " per period"

    @property
    def p_text(self) -> str:
        """How local p-values were obtained, for captions and the method."""
        if self.statistic == "gi-star":
            return "analytical normal p-values"
        if self.p_value == "normal":
            return "normal p from the exact permutation mean and variance"
        return f"{self.permutations} conditional permutations (seed {self.seed})"


@dataclass(frozen=True, eq=False)
class ClusterResult:
    """Everything the cluster step found: arrays for maps, DataFrames for files, findings.

    ``codes`` are label codes ``[units, periods]`` (index into ``LABELS``; -1 = no data);
    ``change_codes`` the labels of the local Moran of change; ``trend_codes`` index into
    ``trend_labels`` for the trend map. DataFrames: ``clusters`` (long: unit, period, statistic,
    p, adjusted p, label), ``global_moran`` (per period), ``changes`` (flags per unit),
    ``transitions`` (label x label counts), ``trends`` (per unit), ``unit_columns`` (for
    ``units.csv``).
    """

    options: ClusterOptions
    units: tuple[str, ...]
    period_labels: tuple[str, ...]
    weights: SpatialWeights
    local: LocalResult
    p_adjusted: np.ndarray
    codes: np.ndarray
    global_stats: tuple[MoranGlobal, ...]
    change_periods: tuple[str, str]
    change_local: LocalResult
    change_codes: np.ndarray
    trend: TrendResult
    trend_codes: np.ndarray
    trend_labels: tuple[str, ...]
    values: np.ndarray
    findings: tuple[Finding, ...] = ()
    frames: dict[str, Any] = field(default_factory=dict)
    inputs: str = "values as mapped"
    trend_input: str = "values as mapped"
    stat_values: np.ndarray | None = None

    @property
    def significance(self) -> str:
        return self.options.significance

    def __repr__(self) -> str:
        """A few lines: statistic and weights, labels in the last period, global I, trends."""
        o, per = self.options, self.period_labels
        last = self.codes[:, -1]
        counts = ", ".join(
            f"{int((last == i).sum())} {name}"
            for i, name in enumerate(lab.LABELS[:4])
            if (last == i).any()
        )
        g = self.global_moran
        sig = int((g["p_permutation"] <= o.alpha).sum())
        tr = self.trends
        rising = int((tr["significant"].astype(bool) & (tr["direction"] == "rising")).sum())
        falling = int((tr["significant"].astype(bool) & (tr["direction"] == "falling")).sum())
        return (
            f"<ClusterResult: {o.statistic}, {self.weights.kind} weights, {o.permutations} "
            f"permutations, seed {o.seed}; {self.significance}\n"
            f"  {per[-1]}: {counts or 'no significant clusters'}\n"
            f"  global Moran's I significant in {sig} of {len(g)} periods; trends: {rising} "
            f"rising, {falling} falling>"
        )

    def to_geodataframe(self, panel: Panel) -> gpd.GeoDataFrame:
        """The per-unit columns (cluster label per period, trend) with the polygons of
        ``panel``."""
        from mapdrift.panel import with_geometry

        return with_geometry(self.unit_columns, panel)

    @property
    def method_text(self) -> str:
        """One sentence every cluster output carries: what was tested and how."""
        o = self.options
        return f"Statistics on {self.inputs}; {o.p_text}; {o.significance}."

    @property
    def clusters(self) -> pd.DataFrame:
        return self.frames["clusters"]

    @property
    def global_moran(self) -> pd.DataFrame:
        return self.frames["global_moran"]

    @property
    def changes(self) -> pd.DataFrame:
        return self.frames["changes"]

    @property
    def transitions(self) -> pd.DataFrame:
        return self.frames["transitions"]

    @property
    def trends(self) -> pd.DataFrame:
        return self.frames["trends"]

    @property
    def unit_columns(self) -> pd.DataFrame:
        return self.frames["unit_columns"]


def _local(values: np.ndarray, w: SpatialWeights, opt: ClusterOptions) -> LocalResult:
    if opt.statistic == "gi-star":
        return gi_star_panel(values, w)
    return local_moran_panel(
        values, w, permutations=opt.permutations, seed=opt.seed, p_value=opt.p_value
    )


def _label(
    res: LocalResult, values: np.ndarray, opt: ClusterOptions
) -> tuple[np.ndarray, np.ndarray]:
    p_adj = np.column_stack([adjust(res.p[:, t], opt.correction) for t in range(values.shape[1])])
    with np.errstate(invalid="ignore"):
        sig = (p_adj <= opt.alpha) & ~np.isnan(p_adj)
    codes = lab.assign_labels(
        res.z, res.lag, sig, res.isolated, ~np.isnan(values), statistic=opt.statistic, stat=res.stat
    )
    return p_adj, codes


def _trend_map(tr: TrendResult, unit_label: str) -> tuple[np.ndarray, tuple[str, ...]]:
    """Five classes on a diverging palette: two falling, neutral, two rising (significant
    slopes only; the split is the median absolute significant slope)."""
    codes = np.full(len(tr.slope), 2, dtype=np.int16)
    codes[np.array([d == "too few periods" for d in tr.direction])] = -1
    sig = tr.significant & np.isfinite(tr.slope)
    mags = np.abs(tr.slope[sig])
    m = float(np.median(mags)) if len(mags) else 0.0
    codes[sig & (tr.slope < 0)] = 1
    codes[sig & (tr.slope < -m)] = 0
    codes[sig & (tr.slope > 0)] = 3
    codes[sig & (tr.slope > m)] = 4
    u = f" {unit_label}" if unit_label else ""
    labels = (
        f"falling, steep (slope < -{m:.3g}{u} per period)",
        "falling",
        "no significant trend",
        "rising",
        f"rising, steep (slope > {m:.3g}{u} per period)",
    )
    return codes, labels


def _period_factors(panel: Panel) -> np.ndarray | None:
    """Per period, the factor from raw rates to the panel's values (``per``, times a view's
    per-period rescaling such as relative-median or a deflator); None when the factor differs
    between units of a period (a per-unit view such as index:2015)."""
    with np.errstate(invalid="ignore", divide="ignore"):
        ratio = np.asarray(panel.values) / (panel.numerator / panel.denominator)
    ratio[~np.isfinite(ratio) | (ratio <= 0)] = np.nan
    if np.isnan(ratio).all(axis=0).any():
        return None
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)
        mid = np.nanmedian(ratio, axis=0)
        spread = np.nanmax(np.abs(ratio / mid - 1), axis=0)
    return mid if np.all(spread < 1e-6) else None


def _empty_periods(
    panel: Panel,
    stat_values: np.ndarray,
    local: LocalResult,
    codes: np.ndarray,
    glob: tuple[MoranGlobal, ...],
    opt: ClusterOptions,
    counts: bool,
) -> list[Finding]:
    """A warning for each period whose global Moran's I is significant but that has no local
    high-high or low-low cluster, naming the likely reason (and the unit(s) behind it)."""
    out = []
    for t, g in enumerate(glob):
        p = g.p_permutation if np.isfinite(g.p_permutation) else g.p_random
        if not (np.isfinite(p) and p <= opt.alpha and g.I > 0):
            continue
        if ((codes[:, t] == lab.HH) | (codes[:, t] == lab.LL)).any():
            continue
        period = panel.period_labels[t]
        x = stat_values[:, t]
        ok = ~np.isnan(x)
        dev = (x - np.nanmean(x)) ** 2
        share = dev / np.nansum(dev)
        big = np.flatnonzero(ok & (share >= 0.2))
        m = int((~np.isnan(local.p[:, t])).sum())
        reasons = []
        if len(big):
            who = []
            for i in big[np.argsort(-share[big])][:3]:
                base = ""
                if counts and panel.denominator is not None:
                    base = f", base {panel.denominator[i, t]:,.0f}"
                who.append(f"{panel.units[i]} ({share[i]:.0%} of the period's variance{base})")
            verb = "dominates" if len(big) == 1 else "dominate"
            reasons.append(
                f"{plural(len(big), 'unit')} far from the rest {verb} the period's variance: "
                f"{', '.join(who)}"
                + (
                    "; with counts, the default EB standardisation guards against this"
                    if counts and opt.standardise == "none"
                    else ""
                )
            )
        if opt.p_value == "permutation" and opt.statistic == "local-moran" and m:
            floor = 2.0 / (opt.permutations + 1)
            if floor > opt.alpha / m and opt.correction != "none":
                reasons.append(
                    f"with {opt.permutations} permutations no p-value can go below {floor:.3g}, "
                    f"too coarse for {m} tests under {opt.correction}; "
                    'use p_value = "normal" or more permutations'
                )
        if not reasons:
            reasons.append(
                f"the clustering is spread thinly: no unit's local evidence survives the "
                f"{opt.correction} correction over {m} tests"
            )
        out.append(
            Finding(
                "warning",
                "clusters-none-despite-global",
                f"{period}: global Moran's I is {g.I:.2f} (p = {p:.3g}) but no unit is in a "
                f"local high-high or low-low cluster; " + "; ".join(reasons),
                tuple(panel.units[i] for i in big[:3]),
            )
        )
    return out


#: Above this magnitude squared deviations overflow float64 (1e308); statistics then use the
#: values scaled by a power of two (exact), which Moran's I and Gi* do not depend on.
_HUGE = 1e150


def _rescaled(values: np.ndarray) -> tuple[np.ndarray, Finding | None]:
    """``values`` scaled by a power of two when they are huge, with a note saying so."""
    finite = values[np.isfinite(values)]
    big = float(np.abs(finite).max()) if finite.size else 0.0
    if big <= _HUGE:
        return values, None
    exp = int(np.frexp(big)[1])
    note = Finding(
        "note",
        "values-rescaled",
        f"values reach {big:.3g}; the cluster statistics used them divided by 2^{exp} (exact, "
        "and Moran's I and Gi* do not change with the scale) so squares do not overflow",
    )
    return np.ldexp(values, -exp), note


def analyse_clusters(
    panel: Panel,
    classes: Any = None,
    options: ClusterOptions | None = None,
    *,
    weights: SpatialWeights | None = None,
    executor: Executor | None = None,
) -> ClusterResult:
    """Global and local spatial autocorrelation per period, cluster changes and unit trends.

    ``classes`` is accepted for the pipeline's uniform signature and not used (statistics use
    the values, not the classes). Missing values are left out per period; ``weights`` may be
    passed to reuse weights built elsewhere. ``executor`` (:mod:`mapdrift.compute`) runs the four
    independent statistics (local per period, global per period, local of the change, trends);
    the default runs them here, a Dask executor on a cluster, with identical results.
    """
    from mapdrift.clusters.tables import build_frames

    opt = options or ClusterOptions()
    findings: list[Finding] = []
    if weights is None:
        weights = build_weights(
            panel.geometry,
            opt.weights,
            islands=opt.islands,
            cache_dir=opt.cache_dir,
            units=panel.units,
        )
    findings += weights.findings
    values = np.array(panel.values, dtype=np.float64)
    if opt.smooth:
        from mapdrift.rates import smooth_panel

        smoothed = smooth_panel(panel, opt.smooth, weights=weights)
        values = np.array(smoothed.values)
        findings.append(smoothed.findings[-1])
    labels_p = panel.period_labels
    n_t = len(labels_p)
    counts = panel.numerator is not None and panel.denominator is not None
    stat_values, series = values, values  # levels; change and trends
    inputs = trend_input = "values as mapped"
    use_eb = counts and opt.standardise == "assuncao-reis"
    # rates smoothed already (smooth = "eb" / "spatial-eb"): trends and change use them as they are
    smoothed = bool(opt.smooth) or any(f.code.startswith("rates-smoothed") for f in panel.findings)
    factors = _period_factors(panel) if use_eb and not smoothed else None
    if use_eb and not smoothed and factors is None:
        findings.append(
            Finding(
                "note",
                "clusters-eb-not-combined",
                "the values are rescaled unit by unit (a per-unit view), which EB "
                "standardisation of the counts would undo; statistics use the values as mapped",
            )
        )
    if use_eb and (smoothed or factors is not None):
        from mapdrift.rates import eb_standardise, smooth

        missing = np.isnan(values)
        stat_values = eb_standardise(panel.numerator, panel.denominator)
        stat_values[missing] = np.nan
        inputs = "EB standardised rates (Assuncao & Reis 1999)"
        if smoothed:
            trend_input = "the smoothed rates"
        else:
            assert factors is not None
            series = smooth(panel.numerator, panel.denominator, "eb").rates * factors[None, :]
            series[missing] = np.nan
            trend_input = "EB smoothed rates (Marshall 1991)"
        findings.append(
            Finding(
                "note",
                "clusters-eb-standardised",
                f"local and global statistics use {inputs}, so a small base cannot dominate a "
                f"period; the change and the trends use {trend_input}; "
                'set [clusters] standardise = "none" for the rates as mapped',
            )
        )

    # local Moran of change between two periods
    a = panel.period_index(opt.change_from) if opt.change_from is not None else 0
    b = panel.period_index(opt.change_to) if opt.change_to is not None else n_t - 1
    if n_t < 2 or a == b:
        raise ConfigError(
            f"the change between periods needs two different periods; got --from "
            f"{labels_p[a]} --to {labels_p[b]} (periods: {examples(labels_p, 6)})"
        )
    stat_values, rescaled = _rescaled(stat_values)
    if rescaled is not None:
        findings.append(rescaled)
    change_base = _rescaled(series)[0]  # the local Moran of change does not depend on scale
    delta = (change_base[:, b] - change_base[:, a])[:, None]
    # four independent computations, the same calls on every executor
    local, glob_list, ch_local, tr = (executor or SerialExecutor()).run(
        [
            (_local, (stat_values, weights, opt)),
            (partial(moran_global_panel, permutations=opt.permutations, seed=opt.seed),
             (stat_values, weights)),
            (_local, (delta, weights, opt)),
            (partial(trends, alpha=opt.alpha, correction=opt.correction,
                     min_periods=opt.min_periods), (series, period_times(panel.periods))),
        ]
    )  # fmt: skip
    p_adj, codes = _label(local, stat_values, opt)
    glob = tuple(glob_list)
    _, ch_codes = _label(ch_local, delta, opt)
    t_codes, t_labels = _trend_map(tr, "")

    if opt.statistic == "local-moran" and opt.permutations > 0 and opt.p_value == "permutation":
        m = int(np.nanmax((~np.isnan(local.p)).sum(axis=0), initial=0))
        floor = 2.0 / (opt.permutations + 1)
        if m and floor > opt.alpha / m and opt.correction != "none":
            need = int(np.ceil(floor * m / opt.alpha))
            what = (
                "no unit can be significant"
                if opt.correction == "bonferroni"
                else f"a unit can only be significant when at least {need} units are"
            )
            findings.append(
                Finding(
                    # under Bonferroni nothing can pass: a warning; under FDR it only limits
                    # significance to groups of small p-values, as clusters are: a note
                    "warning" if opt.correction == "bonferroni" else "note",
                    "clusters-permutation-floor",
                    f"with {opt.permutations} permutations the smallest possible p-value is "
                    f"{floor:.3g}, above {opt.alpha:g}/{m} tests, so after {opt.correction} "
                    f"correction {what}; use more --permutations (e.g. 9999)",
                )
            )
    n_hh = (codes == lab.HH).sum(axis=0)
    findings.append(
        Finding(
            "note",
            "clusters-summary",
            f"{opt.statistic} on {inputs} with {weights.kind} weights, {opt.p_text}, "
            f"{opt.significance}: high-high units per period "
            f"{', '.join(f'{p} {int(c)}' for p, c in zip(labels_p, n_hh, strict=True))}",
        )
    )
    findings += _empty_periods(panel, stat_values, local, codes, glob, opt, counts)
    result = ClusterResult(
        options=opt,
        units=panel.units,
        period_labels=labels_p,
        weights=weights,
        local=local,
        p_adjusted=p_adj,
        codes=codes,
        global_stats=glob,
        change_periods=(labels_p[a], labels_p[b]),
        change_local=ch_local,
        change_codes=ch_codes[:, 0],
        trend=tr,
        trend_codes=t_codes,
        trend_labels=t_labels,
        values=values,
        findings=tuple(findings),
        inputs=inputs,
        trend_input=trend_input,
        stat_values=stat_values,
    )
    result.frames.update(build_frames(result, panel))
    return result
