"""Class-change detection: transitions, Markov summaries, jumps, trajectories, spatial context.

One entry point, :func:`analyse_changes` ``(panel, classes, options)``, returns a
:class:`ChangeResult` (arrays, DataFrames and findings); :func:`write_changes` writes its files
(``transitions.csv``, ``transition_probabilities.csv``, ``transitions_by_pair.csv``,
``markov.json``, ``jumps.csv``, ...). Transitions use exactly the class codes of the
:class:`~mapdrift.breaks.Classes` handed in, so they match the maps. For "who moved relative to
the county" questions, classify :func:`relative_panel` instead of the panel.

Missing data: class ``-1`` (no data) never makes a transition or a move; such unit pairs are
counted in the findings. Steps across a gap in the series count only with ``bridge_gaps``.
"""

from __future__ import annotations

import logging
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

import numpy as np

from mapdrift.changes.markov import (
    HomogeneityTest,
    MarkovSummary,
    first_passage_times,
    homogeneity_test,
    markov_summary,
    stationary_distribution,
)
from mapdrift.changes.spatial_markov import SpatialMarkov, spatial_markov
from mapdrift.changes.trajectories import (
    FLAG_LABELS,
    UnitChanges,
    change_categories,
    rank_mobility,
    unit_changes,
)
from mapdrift.changes.transitions import Transitions, class_labels, count_transitions
from mapdrift.errors import ConfigError, check_choice
from mapdrift.findings import Finding, examples, plural

if TYPE_CHECKING:
    import geopandas as gpd
    import pandas as pd

    from mapdrift.breaks import Classes
    from mapdrift.panel import Panel
    from mapdrift.weights import SpatialWeights

__all__ = [
    "FLAG_LABELS",
    "RELATIVE_CHOICES",
    "ChangeOptions",
    "ChangeResult",
    "HomogeneityTest",
    "MarkovSummary",
    "SpatialMarkov",
    "Transitions",
    "analyse_changes",
    "change_categories",
    "count_transitions",
    "first_passage_times",
    "homogeneity_test",
    "markov_summary",
    "noise_sentence",
    "relative_panel",
    "spatial_markov",
    "stationary_distribution",
    "write_changes",
]

log = logging.getLogger(__name__)

#: Accepted values of ``relative`` / ``--relative``.
RELATIVE_CHOICES: tuple[str, ...] = ("mean", "median")


@dataclass(frozen=True)
class ChangeOptions:
    """Options of the change step (the config's ``[changes]`` section maps onto these).

    ``jump``: classes moved in one step to flag a jump. ``spike_window``: period columns after a
    jump within which a move back makes it a spike. ``persist``: last periods a unit must stay
    in the top/bottom class. ``bridge_gaps``: count steps across missing periods. ``relative``:
    ``mean``/``median`` to divide each period by its mean/median before classing (applied by the
    caller with :func:`relative_panel`). ``spatial``: compute spatially conditioned transitions
    with ``weights`` (a kind of :func:`mapdrift.weights.build_weights`). ``alpha`` and
    ``correction`` (``fdr``, ``bonferroni``, ``none``) decide which jumps are credible against
    count noise (see :mod:`mapdrift.changes.noise`); the pipeline passes the run's.
    """

    jump: int = 2
    spike_window: int = 2
    persist: int = 3
    bridge_gaps: bool = False
    relative: str | None = None
    spatial: bool = True
    weights: str = "queen"
    alpha: float = 0.05
    correction: str = "fdr"

    def __post_init__(self) -> None:
        from mapdrift.clusters.multiple import CORRECTIONS

        check_choice("--correction", self.correction, CORRECTIONS)
        if not 0 < self.alpha < 1:
            raise ConfigError(f"--alpha must be between 0 and 1 (e.g. 0.05), got {self.alpha}")
        for name in ("jump", "spike_window", "persist"):
            v = getattr(self, name)
            if isinstance(v, bool) or not isinstance(v, int | np.integer) or v < 1:
                flag = "--" + name.replace("_", "-")
                raise ConfigError(f"{flag} must be a whole number >= 1, got {v!r}; e.g. {flag} 2")
        if self.relative is not None:
            check_choice("--relative", self.relative, RELATIVE_CHOICES)


@dataclass(frozen=True, eq=False)
class ChangeResult:
    """Everything the change step found (see :func:`analyse_changes`).

    ``net_change`` (float per unit, NaN = no data in the first or last period) and ``flag``
    (index into ``flag_labels`` per unit, -1 = no data at all) feed the change map and the
    flagged-units map. ``warning`` is the per-period-breaks text every output must carry.
    """

    transitions: Transitions
    markov: MarkovSummary
    homogeneity: HomogeneityTest
    units: pd.DataFrame
    jumps: pd.DataFrame
    rank_mobility: pd.DataFrame
    spatial: SpatialMarkov | None
    net_change: np.ndarray
    flag: np.ndarray
    options: ChangeOptions
    labels: tuple[str, ...]
    period_labels: tuple[str, ...]
    class_shares: np.ndarray
    warning: str | None = None
    findings: tuple[Finding, ...] = field(default=())
    noise_test: str = ""
    net_p_adjusted: np.ndarray | None = None

    @property
    def _moved(self) -> np.ndarray:
        """Per unit: its class differs first to last (False without data in either)."""
        net = np.asarray(self.net_change, dtype=np.float64)
        with np.errstate(invalid="ignore"):
            return ~np.isnan(net) & (net != 0)

    @property
    def net_credible(self) -> np.ndarray:
        """Per unit: its first-to-last class move is beyond count noise (every move when the
        moves could not be tested); False for units that did not move or lack data."""
        if self.net_p_adjusted is None:
            return self._moved
        with np.errstate(invalid="ignore"):
            return self._moved & (self.net_p_adjusted <= self.options.alpha)

    @property
    def credible_net_change(self) -> np.ndarray:
        """``net_change`` with moves within count noise set to 0 (NaN = no data stays NaN):
        what the change map, the answer and the slides show."""
        net = np.asarray(self.net_change, dtype=np.float64).copy()
        net[self._moved & ~self.net_credible] = 0.0
        return net

    @property
    def net_moves(self) -> tuple[int, int]:
        """Units whose class rose, and fell, first to last beyond count noise."""
        net = self.credible_net_change
        return int((net > 0).sum()), int((net < 0).sum())

    @property
    def n_net_noise(self) -> int:
        """Units whose first-to-last class move is within count noise."""
        return int((self._moved & ~self.net_credible).sum())

    @property
    def noise_words(self) -> str:
        """What a move within noise is within: "count noise", or "the margins of error"."""
        return "the margins of error" if self.noise_test == "moe" else "count noise"

    @property
    def noise_how(self) -> str:
        """The test of moves against noise, in a few words (for captions)."""
        return "conditional Poisson test" if self.noise_test == "poisson" else "margins of error"

    @property
    def tested(self) -> bool:
        """Whether the jumps were tested against noise (counts or standard errors known)."""
        return bool(self.noise_test)

    @property
    def noise_short(self) -> str:
        """A short form of :attr:`noise_text` for captions."""
        if not self.noise_test:
            return "Jumps not tested against noise (no counts)."
        return (
            f"Jumps tested against count noise ({self.noise_how}, {self.options.correction} "
            "over all steps)."
        )

    @property
    def noise_text(self) -> str:
        """The sentence every output about jumps carries: how (or whether) they were tested."""
        return noise_sentence(self.noise_test, self.options)

    def __repr__(self) -> str:
        """A few lines: steps and stayers, moves first to last, jumps, the homogeneity test."""
        tr, per = self.transitions, self.period_labels
        stay = float(np.trace(tr.counts) / max(tr.counts.sum(), 1))
        up, down = int((self.net_change > 0).sum()), int((self.net_change < 0).sum())
        beyond = (
            " ({} up, {} down beyond count noise)".format(*self.net_moves)
            if self.net_p_adjusted is not None
            else ""
        )
        hom = self.homogeneity
        test = f"p = {hom.p_LR:.3g}" if hom.p_LR is not None else "not testable"
        return (
            f"<ChangeResult: {len(self.net_change):,} units, {per[0]} to {per[-1]}, "
            f"{len(self.labels)} classes\n"
            f"  {tr.n_pairs:,} unit steps, {stay:.0%} stay in their class; first to last "
            f"{up} up, {down} down{beyond}\n"
            f"  {int(self.units['jump'].sum())} units {'credibly ' if self.tested else ''}"
            f"jumped {self.options.jump}+ classes ({len(self.jumps)} moves of {self.options.jump}+ "
            f"listed); same probabilities every step: {test}>"
        )

    def to_geodataframe(self, panel: Panel) -> gpd.GeoDataFrame:
        """The per-unit table (``units``: trajectory, net change, jumps, flags) with the
        polygons of ``panel``."""
        from mapdrift.panel import with_geometry

        return with_geometry(self.units, panel)

    def markov_json(self) -> dict[str, Any]:
        """The content of ``markov.json``."""
        from mapdrift.changes.io import markov_document

        return markov_document(self)


NOT_TESTED = (
    "Jumps were not tested against noise (no counts given): a move of a unit with few events "
    "may be noise."
)


def noise_sentence(test: str, options: ChangeOptions) -> str:
    """How the jumps were tested, for every output that counts them."""
    from mapdrift.clusters.multiple import describe

    if not test:
        return NOT_TESTED
    how = {
        "poisson": "the exact conditional test for two Poisson rates (Przyborowski & Wilenski "
        "1940) on the counts",
        "moe": "a normal test on the margins of error (90 %)",
    }[test]
    rest = "moves within count noise" if test == "poisson" else "moves within the margins of error"
    return (
        f"Credible jumps: every step of every unit tested with {how}, "
        f"{describe(options.alpha, options.correction)} over all tested steps; the rest are "
        f"{rest}."
    )


def _tester(panel: Panel, moe: np.ndarray | None) -> tuple[Any, str]:
    """``(tester, kind)`` for :func:`unit_changes` from the panel's counts or margins of error."""
    from mapdrift.changes.noise import MOE_Z, moe_change_p, poisson_change_p

    num, den = panel.numerator, panel.denominator
    if num is not None and den is not None:

        def poisson(rows: np.ndarray, a: np.ndarray, b: np.ndarray) -> np.ndarray:
            return poisson_change_p(num[rows, a], den[rows, a], num[rows, b], den[rows, b])

        return poisson, "poisson"
    if moe is not None:
        se = np.asarray(moe, dtype=np.float64) / MOE_Z
        if se.shape != panel.values.shape:
            raise ValueError(
                f"moe shape {se.shape} does not match the panel's {panel.values.shape}"
            )
        v = panel.values

        def normal(rows: np.ndarray, a: np.ndarray, b: np.ndarray) -> np.ndarray:
            return moe_change_p(v[rows, a], se[rows, a], v[rows, b], se[rows, b])

        return normal, "moe"
    return None, ""


def relative_panel(panel: Panel, how: str = "mean") -> Panel:
    """Each period's values divided by that period's mean (or median) over units.

    NaN stays NaN; a period whose mean/median is zero or missing gets NaN values throughout and
    a warning finding. The result is a derived Panel whose values are ratios (1 = the period's
    typical value), the same as the ``relative-mean``/``relative-median`` view of
    :func:`mapdrift.views.apply_view` (one definition), labelled on every output.
    """
    from mapdrift.views import View, apply_view

    check_choice("--relative", how, RELATIVE_CHOICES)
    return apply_view(panel, View("relative", how))


def _findings(
    tr: Transitions,
    mk: MarkovSummary,
    hom: HomogeneityTest,
    uc: UnitChanges,
    classes: Classes,
    spatial: SpatialMarkov | None,
    units: tuple[str, ...],
    jump: int,
    noise_text: str,
    tested: bool,
) -> list[Finding]:
    out: list[Finding] = []
    if classes.warning:
        out.append(Finding("warning", "changes-per-period-breaks", classes.warning))
    if tr.skipped_steps:
        pairs = [f"{tr.period_labels[a]}-{tr.period_labels[b]}" for a, b in tr.skipped_steps]
        out.append(
            Finding(
                "warning",
                "changes-gap-skipped",
                f"{len(pairs)} step(s) between periods span missing periods "
                f"({examples(pairs)}) and were not counted; to count them pass `mapdrift changes "
                "--bridge-gaps`, or for `mapdrift run` set [changes] bridge_gaps = true",
            )
        )
    if any(tr.gap_steps):
        pairs = [tr.step_label(s) for s, g in enumerate(tr.gap_steps) if g]
        out.append(
            Finding("note", "changes-gap-bridged", f"steps across gaps counted: {examples(pairs)}")
        )
    miss = int(tr.n_missing.sum())
    if miss:
        out.append(
            Finding(
                "note",
                "changes-missing-pairs",
                f"{miss:,} unit steps have no data in one of their periods and were left out "
                f"({tr.n_pairs:,} counted)",
            )
        )
    if not tr.steps:
        out.append(
            Finding("warning", "changes-no-steps", "no pair of consecutive periods to compare")
        )
    for note in mk.notes:
        out.append(Finding("note", "changes-markov", note))
    if hom.p_LR is not None:
        differ = hom.p_LR < 0.05
        out.append(
            Finding(
                "note",
                "changes-homogeneity",
                (
                    "transition probabilities differ between steps"
                    if differ
                    else "no evidence that transition probabilities differ between steps"
                )
                + f" (likelihood ratio {hom.LR:.1f}, df {hom.df}, p = {hom.p_LR:.3g})",
            )
        )
    if spatial is not None and spatial.test.p_LR is not None:
        t = spatial.test
        differ = t.p_LR < 0.05
        out.append(
            Finding(
                "note",
                "changes-spatial-context",
                (
                    "transitions depend on the neighbourhood's class"
                    if differ
                    else "no evidence that transitions depend on the neighbourhood's class"
                )
                + f" (likelihood ratio {t.LR:.1f}, df {t.df}, p = {t.p_LR:.3g})",
            )
        )
    uid = np.array(units, dtype=object)
    spikes = uc.table["spike"].to_numpy()
    if spikes.any():
        ids = tuple(uid[spikes])
        out.append(
            Finding(
                "warning",
                "changes-spikes",
                f"{plural(len(ids), 'unit')} jumped and came straight back ({examples(ids)}); "
                "check these values for data errors",
                ids,
            )
        )
    jumped = uc.table["jump"].to_numpy()
    if jumped.any():
        ids = tuple(uid[jumped])
        what = "credibly moved" if tested else "moved"
        out.append(
            Finding(
                "note",
                "changes-jumps",
                f"{plural(len(ids), 'unit')} {what} {jump} or more classes in one step ({examples(ids)})",
                ids,
            )
        )
    noisy = uc.table["n_noise_moves"].to_numpy() > 0
    if noisy.any():
        ids = tuple(uid[noisy])
        n_moves = int(uc.table["n_noise_moves"].sum())
        out.append(
            Finding(
                "note",
                "changes-noise-moves",
                f"{n_moves} moves of {jump}+ classes by {len(ids)} units are within count noise "
                f"({examples(ids)}); they stay listed in jumps.csv with credible = false",
                ids,
            )
        )
    out.append(Finding("note" if tested else "warning", "changes-noise-test", noise_text))
    return out


def analyse_changes(
    panel: Panel,
    classes: Classes,
    options: ChangeOptions | None = None,
    *,
    weights: SpatialWeights | None = None,
    moe: np.ndarray | None = None,
) -> ChangeResult:
    """Run every change computation on ``classes`` (computed from ``panel``).

    Jumps are tested against noise with the panel's counts when it has them, else with
    ``moe`` (90 % margins of error of the values, ``[units, periods]``) when given; otherwise
    every output says they were not tested.

    ``weights`` (optional) are reused for the spatially conditioned transitions; without them
    and with ``options.spatial`` they are built from the panel's geometry. ``options.relative``
    is *not* applied here: classify :func:`relative_panel` first.
    """
    options = options or ChangeOptions()
    codes = np.asarray(classes.codes)
    if codes.shape != panel.values.shape:
        raise ValueError(
            f"classes shape {codes.shape} does not match the panel's {panel.values.shape}"
        )
    k = classes.k
    labels = class_labels(classes)
    per = panel.period_labels
    tester, test_kind = _tester(panel, moe if moe is not None else panel.moe)
    tr = count_transitions(
        codes, k, periods=panel.periods, labels=labels, bridge_gaps=options.bridge_gaps
    )
    mk = markov_summary(tr.counts, labels)
    hom = homogeneity_test(tr.by_step, what="steps", labels=labels)
    top = [classes.breaks_for(j).k - 1 for j in range(panel.n_periods)]
    uc = unit_changes(
        codes,
        panel.values,
        tr.steps,
        units=panel.units,
        names=panel.names,
        period_labels=per,
        top=top,
        class_labels=labels,
        jump=options.jump,
        spike_window=options.spike_window,
        persist=options.persist,
        tester=tester,
        alpha=options.alpha,
        correction=options.correction,
    )
    net_p_adj = _net_change_p(tester, uc.net_change, panel.n_periods, options.correction)
    if net_p_adj is not None:
        with np.errstate(invalid="ignore"):
            cred = np.where(
                np.isnan(net_p_adj), "", np.where(net_p_adj <= options.alpha, "true", "false")
            )
        moved = ~np.isnan(uc.net_change) & (np.nan_to_num(uc.net_change) != 0)
        uc.table["net_change_p_adjusted"] = net_p_adj
        uc.table["net_change_credible"] = np.where(moved, cred, "").astype(object)
    rm = rank_mobility(panel.values, tr.steps, per)
    sm = None
    if options.spatial and tr.steps:
        if weights is None:
            from mapdrift.weights import build_weights

            weights = build_weights(panel.geometry, options.weights, units=panel.units)
        sm = spatial_markov(panel.values, classes, weights, tr.steps, labels=labels)
    shares = classes.counts().astype(np.float64)
    tot = shares.sum(axis=1, keepdims=True)
    shares = np.divide(shares, tot, out=np.zeros_like(shares), where=tot > 0)
    noise_text = noise_sentence(test_kind, options)
    findings = _findings(
        tr, mk, hom, uc, classes, sm, panel.units, options.jump, noise_text, bool(test_kind)
    )
    if weights is not None and sm is not None:
        findings.extend(weights.findings)
    log.info("changes: %d steps, %d unit pairs, %d jumps", len(tr.steps), tr.n_pairs, len(uc.jumps))
    return ChangeResult(
        transitions=tr,
        markov=mk,
        homogeneity=hom,
        units=uc.table,
        jumps=uc.jumps,
        rank_mobility=rm,
        spatial=sm,
        net_change=uc.net_change,
        flag=uc.flag,
        options=options,
        labels=labels,
        period_labels=per,
        class_shares=shares,
        warning=classes.warning,
        findings=tuple(findings),
        noise_test=test_kind,
        net_p_adjusted=net_p_adj,
    )


def _net_change_p(
    tester: Any, net_change: np.ndarray, n_periods: int, correction: str
) -> np.ndarray | None:
    """Adjusted p of each unit's change from the first to the last period (NaN without data).

    Every unit with data in both periods is tested with the same test as the jumps (one
    family, ``correction`` over it), whether or not its class moved, so that picking the
    movers does not shrink the family. None when the values cannot be tested.
    """
    if tester is None or n_periods < 2:
        return None
    from mapdrift.clusters.multiple import adjust

    net = np.asarray(net_change, dtype=np.float64)
    rows = np.flatnonzero(~np.isnan(net))
    out = np.full(net.shape, np.nan)
    if rows.size:
        first = np.zeros(rows.size, dtype=np.int64)
        last = np.full(rows.size, n_periods - 1, dtype=np.int64)
        out[rows] = adjust(np.asarray(tester(rows, first, last), dtype=np.float64), correction)
    return out


def write_changes(*args: Any, **kwargs: Any) -> list[Any]:
    """Write the change tables; see :func:`mapdrift.changes.io.write_changes`."""
    from mapdrift.changes.io import write_changes as _write

    return _write(*args, **kwargs)
