"""``run(config)``: the whole job step by step, into a staging folder swapped in on success.

Steps run in order (:data:`STEPS`); each logs one summary line. Outputs are written into a
staging folder beside the target (``.<out>.partial-<pid>``) and moved into place only when every
step succeeded, so a run that fails part-way leaves an earlier run's outputs untouched and says
which step failed. An existing output folder is replaced only with ``force=True``.

An annual rerun points ``previous`` at last year's run: its ``breaks.json`` is reused (unless
``rebreak``) so the new frames compare with last year's briefing, and the briefing gets a
"What's new since the previous run" section.
"""

from __future__ import annotations

import json
import logging
import os
import time
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from dataclasses import dataclass, field, replace
from datetime import date
from pathlib import Path
from typing import Any

from mapdrift.config import BriefSpec, ClassSpec, Config, RunSpec, merge
from mapdrift.errors import ConfigError, InputError, MapdriftError, StepError
from mapdrift.findings import Finding, plural, units_of
from mapdrift.pngwrite import background_writes

__all__ = ["STEPS", "RunResult", "RunState", "default_out", "prepare_out", "run", "run_inputs"]

log = logging.getLogger(__name__)
Progress = Callable[[str], None]
REBREAK_NOTICE = (
    "Breaks refitted for this run (--rebreak): classes differ from the previous run's briefing."
)


@dataclass
class RunState:
    """What the steps hand each other: config, the staging folder and each step's results."""

    config: Config
    staging: Path
    run: RunSpec
    panel: Any = None
    classes: Any = None
    weights: Any = None
    results: dict[str, Any] = field(default_factory=dict)
    findings: list[Finding] = field(default_factory=list)
    timings: dict[str, float] = field(default_factory=dict)
    summaries: dict[str, str] = field(default_factory=dict)
    notices: list[str] = field(default_factory=list)
    inputs: Any = None

    @property
    def view(self) -> str:
        """The line naming the values' view ('' for values as read)."""
        return self.panel.meta.view if self.panel is not None else ""

    @property
    def csv_note(self) -> str | None:
        """The ``# `` first line of every table: the notice, then the view."""
        return " ".join(x for x in (self.notice, self.view) if x) or None

    @property
    def trends_skipped(self) -> bool:
        """Too few periods for per-unit trends: no trend map, slide or sentences."""
        from mapdrift.clusters import ClusterOptions

        need = max(self.section(ClusterOptions, "clusters").min_periods, 3)
        return self.panel is not None and self.panel.n_periods < need

    def path(self, name: str) -> Path:
        p = self.staging / name
        p.parent.mkdir(parents=True, exist_ok=True)
        return p

    def section(self, cls: type, name: str) -> Any:
        return merge(cls, self.config.section(name), {})

    @property
    def notice(self) -> str | None:
        """The warning every output must carry (per-period breaks, refitted breaks), or None."""
        return " ".join(self.notices) or None


@dataclass(frozen=True)
class RunResult:
    out: Path
    findings: tuple[Finding, ...]
    timings: dict[str, float]
    summaries: dict[str, str]
    outputs: tuple[Path, ...]

    def __repr__(self) -> str:
        levels = [f.level for f in self.findings]
        return (
            f"<RunResult: {len(self.outputs)} files in {self.out}; "
            f"{plural(levels.count('warning'), 'warning')}, {plural(levels.count('note'), 'note')}; "
            f"{sum(self.timings.values()):.1f} s>"
        )


def default_out(config: Config) -> Path:
    """``outputs/<config name>-<YYYY-MM-DD>``, numbered when that folder exists already."""
    stem = config.path.stem if config.path else "run"
    base = Path("outputs") / f"{stem}-{date.today().isoformat()}"
    out, n = base, 2
    while out.exists():
        out = base.with_name(f"{base.name}-{n}")
        n += 1
    return out


def run_inputs(config: Config) -> list[Path]:
    """Every file or folder this run reads: the config and each path-valued key."""
    found: list[Path] = [config.path] if config.path is not None else []
    for section, values in config.sections.items():
        for key, v in values.items():
            if (section, key) == ("run", "out"):
                continue
            for item in v if isinstance(v, list | tuple) else (v,):
                if isinstance(item, Path):
                    found.append(item)
    return found


def prepare_out(out: Path, *, force: bool, inputs: list[Path] | None = None) -> None:
    """Refuse an ``out`` we may not write: the working folder or one above it, a file, a folder
    we cannot write in, or an existing folder :func:`mapdrift.outfolder.check_replaceable`
    refuses (not an earlier run, holds inputs or unknown files; an earlier run without
    ``force``)."""
    from mapdrift.outfolder import check_replaceable

    _check_target(out)
    check_replaceable(out, inputs or [], force=force)


def _check_target(out: Path) -> None:
    here = Path.cwd().resolve()
    target = out.resolve()
    if target == here or target in here.parents:
        raise ConfigError(
            f"--out {out} is the working folder or one above it; mapdrift writes a new folder, "
            "e.g. --out outputs/run"
        )
    if out.exists() and not out.is_dir():
        raise ConfigError(f"--out {out} is a file; give a folder name, e.g. --out outputs/run")
    existing = next(p for p in target.parents if p.exists())
    if not os.access(existing, os.W_OK | os.X_OK):
        raise ConfigError(
            f"--out {out}: cannot write in {existing} (permission denied); choose a folder you "
            "can write to"
        )


# ------------------------------------------------------------------------------------------
# steps
# ------------------------------------------------------------------------------------------
def _step_load(state: RunState) -> str:
    from mapdrift.panel import InputSpec, load_panel

    inputs = state.config.section("inputs")
    if state.run.crosswalk is not None:
        inputs["crosswalk"] = state.run.crosswalk
    if "geometry" not in inputs:
        raise ConfigError(f'{state.config.path}: [inputs] needs geometry = "<polygon layer>"')
    if inputs.get("view") and state.config.path is not None:
        from mapdrift.views import resolve_view  # a deflator file is relative to the config

        inputs["view"] = resolve_view(inputs["view"], state.config.path.parent)
    state.inputs = merge(InputSpec, inputs, {})
    state.panel = load_panel(state.inputs)
    state.findings += state.panel.findings
    p = state.panel
    if p.n_periods < 2:
        table = inputs.get("table") or inputs["geometry"]
        raise InputError(
            f"{table}: only one period ({', '.join(p.period_labels) or 'none'}) has values; a run "
            "compares periods, so it needs two or more (check the period column, or use "
            "`mapdrift animate --at` for a single map)"
        )
    return (
        f"{p.n_units} units x {p.n_periods} periods ({p.period_labels[0]} to {p.period_labels[-1]})"
    )


def _weights(state: RunState) -> Any:
    from mapdrift.clusters import ClusterOptions
    from mapdrift.weights import build_weights

    if state.weights is None:
        opt = state.section(ClusterOptions, "clusters")
        cache = opt.cache_dir or (state.staging.parent / ".mapdrift-cache")
        state.weights = build_weights(
            state.panel.geometry,
            opt.weights,
            islands=opt.islands,
            cache_dir=cache,
            units=state.panel.units,
        )
    return state.weights


def _step_smooth(state: RunState) -> str:
    """Rate smoothing, then the view (smoothing works on counts, so it comes first); one step,
    so the steps up to the classes stay load, smooth, classify."""
    done = _smooth(state)
    view = _view(state)
    return f"{done}; {view}" if view else done


def _smooth(state: RunState) -> str:
    from mapdrift.clusters import ClusterOptions

    opt = state.section(ClusterOptions, "clusters")
    if not opt.smooth:
        return "off (raw rates)"
    from mapdrift.rates import smooth_panel

    w = _weights(state) if opt.smooth == "spatial-eb" else None
    state.panel = smooth_panel(state.panel, opt.smooth, weights=w)
    state.findings.append(state.panel.findings[-1])
    state.notices.append(f"Rates smoothed ({opt.smooth}) before mapping and statistics.")
    return f"{opt.smooth} smoothing applied to maps and statistics"


def _view(state: RunState) -> str:
    from mapdrift.views import apply_view, parse_view

    view = parse_view(state.inputs.view)
    if view.is_raw:
        return ""
    state.panel = apply_view(state.panel, view, spec=state.inputs)
    state.findings.append(state.panel.findings[-1])
    return state.panel.meta.view


def _previous_breaks(state: RunState) -> Path | None:
    prev = state.run.previous
    if prev is None:
        return None
    path = prev if prev.suffix == ".json" else prev / "breaks.json"
    if not path.exists():
        raise InputError(
            f"previous = {prev}: no breaks.json there; point it at last year's run folder"
        )
    return path


def _same_view(state: RunState, breaks: Path) -> None:
    """Stop when last year's breaks were fitted on values seen through another view (their
    numbers would mean something else), unless the breaks are refitted."""
    manifest = breaks.parent / "manifest.json"
    if state.run.rebreak or not manifest.exists():
        return
    before = json.loads(manifest.read_text(encoding="utf-8")).get("parameters", {}).get("view")
    now = state.view or "values as read"
    if before is not None and before != now:
        raise ConfigError(
            f"previous = {state.run.previous}: its breaks are for {before.removeprefix('view: ')}, "
            f"but this run's values are {now.removeprefix('view: ')}; use the same view "
            "([inputs] view / --view) or refit the breaks with --rebreak"
        )


def _step_classify(state: RunState) -> str:
    from mapdrift.atomic import write_text
    from mapdrift.breaks import classify_spec, describe
    from mapdrift.brief.whatsnew import previous_name

    cs: ClassSpec = state.section(ClassSpec, "classes")
    breaks_file = cs.breaks_file
    reused_from = None
    prev = _previous_breaks(state)
    if prev is not None and breaks_file is None:
        _same_view(state, prev)
        if state.run.rebreak:
            state.notices.append(REBREAK_NOTICE)
            state.findings.append(Finding("warning", "breaks-refitted", REBREAK_NOTICE))
        else:
            breaks_file = prev
            reused_from = f"the previous run ({previous_name(state.run.previous)})"
            state.findings.append(
                Finding(
                    "note",
                    "breaks-reused",
                    f"class breaks reused from {reused_from} so frames compare with its briefing",
                )
            )
    classes = classify_spec(state.panel, cs, breaks_file=breaks_file, reused_from=reused_from)
    state.classes = classes
    state.findings += classes.findings
    if not classes.per_period:
        from mapdrift.views import common_trend

        trend = common_trend(state.panel, classes.codes, k=classes.k, view=state.inputs.view)
        if trend is not None:
            state.findings.append(trend)
    if state.trends_skipped:
        from mapdrift.clusters import ClusterOptions

        need = max(state.section(ClusterOptions, "clusters").min_periods, 3)
        state.findings.append(
            Finding(
                "note",
                "trends-skipped",
                f"{plural(state.panel.n_periods, 'period')}: per-unit trends need at least "
                f"{need}, so the trend map, trend slide and trend sentences are left out",
            )
        )
    if classes.per_period:
        state.notices.insert(0, classes.warning)
        write_text(
            state.path("breaks.json"),
            json.dumps(
                {"per_period": [b.to_dict() for b in classes.breaks], "warning": classes.warning},
                indent=2,
            )
            + "\n",
        )
    else:
        classes.breaks[0].save(state.path("breaks.json"))
    b = classes.breaks[0]
    return describe(b) + ": " + " | ".join(b.labels)


def _text(state: RunState) -> dict[str, Any]:
    from mapdrift.brief.pictures import REPORT_TEXT_PX

    p = state.panel
    brief = state.section(BriefSpec, "brief")
    title = brief.title or p.meta.variable
    sub = brief.subtitle or p.meta.unit_label or ""
    return {
        "title": title,
        "subtitle": sub,
        "caption": brief.source or p.meta.source,
        "notice": state.notice,
        "unit_noun": brief.unit_noun,
        "min_text_px": REPORT_TEXT_PX,
    }


def _step_animate(state: RunState) -> str:
    from mapdrift import palettes
    from mapdrift.render.animation import AnimateOptions, animate
    from mapdrift.render.frames import FrameRenderer
    from mapdrift.render.multiples import small_multiples

    opt = state.section(AnimateOptions, "animate")
    formats = state.section(BriefSpec, "brief").formats
    p, c = state.panel, state.classes
    colours = palettes.colours_for(c.k, diverging_legend=c.breaks[0].diverging)
    labels = [b.labels for b in c.breaks] if c.per_period else list(c.breaks[0].labels)
    text = _text(state)
    text["legend_title"] = p.meta.unit_label or p.meta.variable
    ch = state.results.get("changes")
    if ch is not None and len(ch.jumps):  # outline the units that jumped into each period
        from mapdrift.brief.pictures import jump_outlines

        text["outlines"], text["outline_label"] = jump_outlines(ch, p)
    done = []
    for fmt in ("gif", "mp4"):
        if fmt in formats:
            res = animate(
                p.geometry,
                c.codes,
                colours,
                labels,
                p.period_labels,
                state.path(f"animation.{fmt}"),
                options=opt,
                names=p.names,
                **text,
            )
            if fmt == "gif":
                state.findings += res.findings
            done.append(f"{fmt} {res.bytes / 1e6:.1f} MB")
    r = FrameRenderer(
        p.geometry,
        c.codes,
        colours,
        labels,
        p.period_labels,
        size=tuple(opt.size),
        scale_units=opt.scale_units,
        north_arrow=opt.north_arrow,
        names=p.names,
        **text,
    )
    try:
        from mapdrift.pngwrite import write_png

        write_png(r.frame(p.n_periods - 1), state.path("poster.png"))
    finally:
        r.close()
    small_multiples(
        p.geometry,
        c.codes,
        colours,
        labels,
        p.period_labels,
        state.path("small_multiples.png"),
        title=text["title"],
        subtitle=text["subtitle"],
        caption=text["caption"],
        notice=text["notice"],
        legend_title=text["legend_title"],
        scale_units=opt.scale_units,
    )
    return ", ".join(done + ["poster.png", "small_multiples.png/.pdf"])


def _step_changes(state: RunState) -> str:
    from mapdrift.breaks import classify_spec
    from mapdrift.brief.pictures import change_pictures
    from mapdrift.changes import ChangeOptions, analyse_changes, relative_panel, write_changes
    from mapdrift.clusters import ClusterOptions

    opt = state.section(ChangeOptions, "changes")
    given = state.config.section("changes")
    cl_opt = state.section(ClusterOptions, "clusters")  # the run's multiple-testing choice
    opt = replace(
        opt,
        alpha=given.get("alpha", cl_opt.alpha),
        correction=given.get("correction", cl_opt.correction),
    )
    panel, classes = state.panel, state.classes
    if opt.persist > panel.n_periods:  # "the last 3 periods" with 2: all there are
        opt = replace(opt, persist=panel.n_periods)
    if opt.relative:
        cs: ClassSpec = state.section(ClassSpec, "classes")
        panel = relative_panel(panel, opt.relative)
        # relative values get breaks of their own: saved breaks are in the raw values' units
        classes = classify_spec(panel, cs, breaks_file=None)
        state.findings.append(
            Finding(
                "note",
                "changes-relative",
                f"changes use values relative to each period's {opt.relative}",
            )
        )
    same_weights = opt.weights == cl_opt.weights
    result = analyse_changes(
        panel, classes, opt, weights=_weights(state) if opt.spatial and same_weights else None
    )
    if panel.meta.view:  # every table says which view its values are in
        result = replace(
            result, warning=" ".join(x for x in (result.warning, panel.meta.view) if x)
        )
    state.results["changes"] = result
    state.findings += [f for f in result.findings if f not in state.findings]
    write_changes(result, state.staging, units_table=False)
    change_pictures(result, panel, state.staging, look=_look(state))
    n_jump = int(result.units["jump"].sum())
    up, down = result.net_moves
    if not result.tested:
        return (
            f"{plural(up, 'unit')} up, {down:,} down first to last; {plural(n_jump, 'unit')} "
            f"jumped {opt.jump}+ "
            "classes (not tested against noise: no counts)"
        )
    noise = int(((result.units["n_noise_moves"] > 0) & ~result.units["jump"]).sum())
    return (
        f"{plural(up, 'unit')} credibly up, {down:,} down first to last ({result.n_net_noise:,} "
        f"more moved within count noise); {plural(n_jump, 'unit')} credibly jumped {opt.jump}+ "
        f"classes ({noise:,} more moved within count noise)"
    )


def _step_clusters(state: RunState) -> str:
    from mapdrift.brief.pictures import cluster_pictures
    from mapdrift.clusters import ClusterOptions, analyse_clusters, write_clusters

    opt = state.section(ClusterOptions, "clusters")
    opt = replace(opt, smooth=None)  # smoothing, when asked, was applied to the panel already
    if opt.persist > state.panel.n_periods:  # "steady for 3 periods" with 2: all there are
        opt = replace(opt, persist=state.panel.n_periods)
    from mapdrift.compute import ComputeSpec, executor_for

    with executor_for(state.section(ComputeSpec, "compute")) as executor:
        result = analyse_clusters(
            state.panel, state.classes, opt, weights=_weights(state), executor=executor
        )
    state.results["clusters"] = result
    state.findings += [f for f in result.findings if f not in state.findings]
    write_clusters(result, state.staging, warning=state.view or None)
    cluster_pictures(
        result, state.panel, state.staging, trends=not state.trends_skipped, look=_look(state)
    )
    last = result.period_labels[-1]
    hh = int((result.codes[:, -1] == 0).sum())
    if state.trends_skipped:
        return f"{hh} units high-high in {last}; trends skipped (too few periods)"
    sig = int(result.trend.significant.sum())
    trend_sig = result.significance.replace("per period", "across units")
    return f"{hh} units high-high in {last}; {sig} significant trends ({trend_sig})"


def _step_units(state: RunState) -> str:
    from mapdrift.brief.tables import SQLITE_MAX_COLUMNS, units_table, write_units_gpkg
    from mapdrift.outputs import write_csv

    extra: dict[str, Any] = {}
    for key, frame in (("changes", "units"), ("clusters", "unit_columns")):
        res = state.results.get(key)
        if res is None:
            continue
        df = getattr(res, frame)
        for col in df.columns:
            if col not in ("unit", "name"):
                extra[col] = df[col].to_numpy()
    small = units_of(state.findings, "rates-small-base")
    extra["small_base"] = [u in small for u in state.panel.units]
    df = units_table(state.panel, state.classes, extra)
    state.results["units"] = df
    write_csv(df, state.path("units.csv"), warning=state.csv_note)
    formats = state.section(BriefSpec, "brief").formats
    style = ""
    if "gpkg" in formats:
        p = state.panel
        if write_units_gpkg(
            df, p.geometry, state.path("units.gpkg"), period_labels=p.period_labels
        ):
            state.findings.append(
                Finding(
                    "note",
                    "units-gpkg-long",
                    f"units.gpkg: {len(df.columns)} columns are more than a GeoPackage table "
                    f"holds ({SQLITE_MAX_COLUMNS}); the per-period columns are in its table "
                    "units_by_period (one row per unit and period)",
                )
            )
        last = f"cluster_{state.panel.period_labels[-1]}"
        if last in df.columns:  # the cluster look for the units layer, as an OGC SLD
            from mapdrift.brief.pictures import write_cluster_style

            write_cluster_style(state.path("units_clusters.sld"), last)
            style = ", units_clusters.sld"
    return f"{len(df)} units x {len(df.columns)} columns (units.csv" + (
        f", units.gpkg{style})" if "gpkg" in formats else ")"
    )


def _step_explorer(state: RunState) -> str:
    formats = state.section(BriefSpec, "brief").formats
    if "html" not in formats and "explorer" not in formats:
        return 'not asked for ([brief] formats has neither "html" nor "explorer")'
    from mapdrift.brief.explorer import payload_from_state, write_explorer

    path = write_explorer(payload_from_state(state), state.path("explorer.html"))
    return f"explorer.html ({path.stat().st_size / 1e6:.2f} MB)"


def _step_whatsnew(state: RunState) -> str:
    if state.run.previous is None:
        return "no previous run given"
    from mapdrift.atomic import write_text
    from mapdrift.brief.whatsnew import compare_runs

    ch = state.results.get("changes")
    cl = state.results.get("clusters")
    wn = compare_runs(
        state.run.previous,
        jumps=ch.jumps if ch is not None else None,
        cluster_changes=cl.changes if cl is not None else None,
        trends=cl.trends if cl is not None else None,
        findings=state.findings,
        names=dict(zip(state.panel.units, state.panel.names)),
    )
    state.results["whatsnew"] = wn
    write_text(
        state.path("whats_new.json"),
        json.dumps(wn.to_json(), indent=2, ensure_ascii=False) + "\n",
    )
    return (
        f"{plural(len(wn.new_jumps), 'new jump')}, {plural(len(wn.cluster_events), 'new cluster event')}, "
        f"{plural(len(wn.new_trends), 'new trend')}"
    )


def _step_findings(state: RunState) -> str:
    from mapdrift.atomic import write_text

    write_text(
        state.path("findings.json"),
        json.dumps([f.to_dict() for f in state.findings], indent=2) + "\n",
    )
    n = {lvl: sum(f.level == lvl for f in state.findings) for lvl in ("warning", "note")}
    return f"{plural(n['warning'], 'warning')}, {plural(n['note'], 'note')}"


def _look(state: RunState) -> Any:
    from mapdrift.brief.pictures import Look

    return Look(unit_noun=state.section(BriefSpec, "brief").unit_noun)


def _step_brief(state: RunState) -> str:
    from mapdrift.brief.assemble import build_brief, build_slides
    from mapdrift.brief.inputs import BriefInputs
    from mapdrift.brief.report import write_report

    formats = state.section(BriefSpec, "brief").formats
    inputs = BriefInputs.from_run(state)
    brief = build_brief(inputs)
    done = []
    if "html" in formats:
        write_report(brief, state.path("report.html"), state.path("report.md"), root=state.staging)
        done.append("report.html, report.md")
    if "png" in formats or "pptx" in formats:
        import tempfile

        from mapdrift.brief.slides import write_slide_pngs

        # the slides' own pictures (drawn at the slide's size, text >= 18 px) live only until
        # the slides and the deck are written
        with tempfile.TemporaryDirectory(prefix="mapdrift-slides-") as parts:
            slides = build_slides(inputs, brief, pictures=Path(parts))
            footer = brief.source
            if "png" in formats:
                write_slide_pngs(slides, state.path("slides"), footer=footer)
                done.append(f"{len(slides)} slides")
            if "pptx" in formats:
                from mapdrift.brief.deck import write_deck

                write_deck(slides, state.path("brief.pptx"), footer=footer)
                done.append("brief.pptx")
    return ", ".join(done) or "no briefing formats asked for"


#: The steps in order: name -> function(state) -> one-line summary.
STEPS: list[tuple[str, Callable[[RunState], str]]] = [
    ("load", _step_load),
    ("smooth", _step_smooth),
    ("classify", _step_classify),
    ("changes", _step_changes),
    ("clusters", _step_clusters),
    ("animate", _step_animate),
    ("units", _step_units),
    ("explorer", _step_explorer),
    ("whats-new", _step_whatsnew),
    ("findings", _step_findings),
    ("brief", _step_brief),
]


def _manifest(state: RunState, replaces: str | None = None) -> None:
    from mapdrift.brief.manifest import write_manifest

    c = state.classes
    cfg = {name: state.config.section(name) for name in state.config.sections}
    params: dict[str, Any] = {
        "periods": list(state.panel.period_labels) if state.panel is not None else [],
        "units": state.panel.n_units if state.panel is not None else 0,
        "breaks": [b.to_dict() for b in c.breaks] if c is not None else [],
        "notice": state.notice,
        "view": state.view or "values as read",
    }
    cl = state.results.get("clusters")
    if cl is not None:
        o = cl.options
        params.update(
            weights=cl.weights.kind,
            islands=o.islands,
            permutations=o.permutations,
            p_value=o.p_value,
            standardise=o.standardise,
            cluster_inputs=cl.inputs,
            alpha=o.alpha,
            correction=o.correction,
            seed=o.seed,
            statistic=o.statistic,
        )
    if state.run.previous is not None:
        from mapdrift.brief.whatsnew import previous_name

        params["previous"] = previous_name(state.run.previous)
    outputs = [p for p in state.staging.rglob("*") if p.is_file() and p.name != "manifest.json"]
    write_manifest(
        state.path("manifest.json"),
        inputs=state.panel.inputs if state.panel is not None else (),
        outputs=outputs,
        root=state.staging,
        config=cfg,
        parameters=params,
        findings=state.findings,
        timings=state.timings,
        summaries=state.summaries,
        replaces=replaces,
    )


@contextmanager
def _terminate_as_exit() -> Iterator[None]:
    """Turn SIGTERM (and SIGHUP) into SystemExit while a run works, so its clean-up runs: the
    staging folder is removed and encoders are stopped instead of being left behind."""
    import signal
    import threading

    if threading.current_thread() is not threading.main_thread():
        yield
        return
    wanted = [s for s in ("SIGTERM", "SIGHUP") if hasattr(signal, s)]

    def _exit(signum: int, frame: Any) -> None:
        raise SystemExit(128 + signum)

    previous = {name: signal.signal(getattr(signal, name), _exit) for name in wanted}
    try:
        yield
    finally:
        for name, handler in previous.items():
            signal.signal(getattr(signal, name), handler)


def run(
    config: Config,
    *,
    out: Path | None = None,
    force: bool = False,
    progress: Progress | None = None,
    steps: list[tuple[str, Callable[[RunState], str]]] | None = None,
    on_start: Progress | None = None,
) -> RunResult:
    """Run every step into ``out``; raise StepError naming the failed step (``out`` untouched).

    ``progress`` gets one summary line per finished step; ``on_start`` the name of each step as
    it starts (the CLI shows a spinner with it). ``out`` is checked before any work and again
    at the swap (see :mod:`mapdrift.outfolder`); leftovers of killed runs are cleaned first.
    """
    from mapdrift.outfolder import (
        lock_out,
        recover,
        remove_staging,
        set_aside_for,
        staging_for,
        swap_in,
    )

    run_spec: RunSpec = merge(RunSpec, config.section("run"), {})
    out = Path(out or run_spec.out or default_out(config))
    inputs = run_inputs(config)
    _check_target(out)
    out.parent.mkdir(parents=True, exist_ok=True)
    with lock_out(out), _terminate_as_exit():
        recovered = recover(out)  # leftovers of killed runs first: it may restore `out`
        for line in recovered:
            log.warning(line)
            if progress is not None:
                progress(f"{'recover':<10} {line}")
        prepare_out(out, force=force, inputs=inputs)  # before any work
        staging = staging_for(out)
        try:
            staging.mkdir(parents=True)
            state = RunState(config=config, staging=staging, run=run_spec)
            state.findings += [Finding("warning", "out-recovered", m) for m in recovered]
            _run_steps(state, out, steps, progress, on_start)
            _manifest(state, replaces=set_aside_for(out).name if out.exists() else None)
            swap_in(staging, out, inputs, force=force)
        finally:
            remove_staging(staging)
    outputs = tuple(sorted(p for p in out.rglob("*") if p.is_file()))
    return RunResult(
        out, tuple(state.findings), dict(state.timings), dict(state.summaries), outputs
    )


def _run_steps(
    state: RunState,
    out: Path,
    steps: list[tuple[str, Callable[[RunState], str]]] | None,
    progress: Progress | None,
    on_start: Progress | None,
) -> None:
    """Run every step into the staging folder, logging to its ``run.log``."""
    handler = logging.FileHandler(state.staging / "run.log", encoding="utf-8")
    handler.setFormatter(logging.Formatter("%(asctime)s %(levelname)s %(name)s: %(message)s"))
    root = logging.getLogger("mapdrift")
    root.addHandler(handler)
    old_level = root.level
    if root.getEffectiveLevel() > logging.INFO:
        root.setLevel(logging.INFO)
    try:
        for name, step in steps or STEPS:
            t0 = time.perf_counter()
            if on_start is not None:
                on_start(name)
            try:
                # pictures are deflated on the second core while the step draws the next; all
                # of a step's files exist when it ends (later steps read them)
                with background_writes():
                    summary = step(state)
            except MapdriftError as exc:
                log.info("step %s failed: %s", name, exc)  # the CLI prints the error itself
                raise type(exc)(f"step {name!r} failed: {exc}") from exc
            except Exception as exc:
                log.info("step %s failed", name, exc_info=True)
                raise StepError(
                    f"step {name!r} failed: {type(exc).__name__}: {exc}; earlier outputs in "
                    f"{out} were left untouched"
                ) from exc
            state.timings[name] = round(time.perf_counter() - t0, 3)
            state.summaries[name] = summary
            log.info("%s: %s", name, summary)
            if progress is not None:
                progress(f"{name:<10} {summary}")
    finally:  # close the log before hashing it into the manifest
        root.removeHandler(handler)
        handler.close()
        root.setLevel(old_level)
