"""From results to the briefing: the :class:`~mapdrift.brief.content.Brief` (report) and the
list of :class:`~mapdrift.brief.slides.Slide` (PNG slides and the deck).

Both read a :class:`~mapdrift.brief.inputs.BriefInputs` (``state`` below): the results of a run,
or ones made in a notebook, never the pipeline's working state.

The job's answer comes first: how many units rose or fell, jumped, joined clusters, trend.
"""

from __future__ import annotations

from datetime import date
from typing import TYPE_CHECKING

import numpy as np

from mapdrift.breaks import describe
from mapdrift.brief.content import CAUTIONS, Brief, Figure, Section, Table, phrase
from mapdrift.brief.pictures import noun_for
from mapdrift.brief.slides import Slide
from mapdrift.brief.whatsnew import previous_name
from mapdrift.config import BriefSpec
from mapdrift.findings import examples, plural, units_of
from mapdrift.pngwrite import write_png

if TYPE_CHECKING:
    from pathlib import Path

    import pandas as pd

    from mapdrift.brief.inputs import BriefInputs


__all__ = ["build_brief", "build_slides", "headline", "method", "top_movers"]


def _noun(state: BriefInputs) -> str:
    """What the units are called (``[brief] unit_noun``, e.g. "tracts")."""
    return state.spec.unit_noun or "units"


def _period_span(state: BriefInputs) -> str:
    per = state.panel.period_labels
    return f"{per[0]} to {per[-1]}"


def headline(state: BriefInputs) -> list[tuple[str, str]]:
    """The answer in numbers: (label, value) pairs."""
    p = state.panel
    u = _noun(state)
    per = p.period_labels
    out: list[tuple[str, str]] = []
    ch = state.changes
    if ch is not None:
        up, down = ch.net_moves
        cred = "credibly " if ch.tested else ""
        out.append((f"{u} {cred}in a higher class in {per[-1]} than in {per[0]}", f"{up:,}"))
        out.append((f"{u} {cred}in a lower class in {per[-1]} than in {per[0]}", f"{down:,}"))
        if ch.tested:
            out.append(
                (
                    f"{u} whose class moved from {per[0]} to {per[-1]} within {ch.noise_words}",
                    f"{ch.n_net_noise:,}",
                )
            )
        spikes = int((ch.units["jump"] & ch.units["spike"]).sum())
        back = f" ({spikes:,} came straight back: check the data)" if spikes else ""
        if ch.tested:
            noise = int(((ch.units["n_noise_moves"] > 0) & ~ch.units["jump"]).sum())
            out.append(
                (
                    f"{u} that credibly jumped {ch.options.jump}+ classes in {p.step_label}{back}",
                    f"{int(ch.units['jump'].sum()):,}",
                )
            )
            out.append(
                (
                    f"{u} whose {ch.options.jump}+ class moves are within count noise "
                    "(listed in jumps.csv)",
                    f"{noise:,}",
                )
            )
        else:
            out.append(
                (
                    f"{u} that jumped {ch.options.jump}+ classes in {p.step_label}{back} (not tested "
                    "against noise: no counts given)",
                    f"{int(ch.units['jump'].sum()):,}",
                )
            )
    cl = state.clusters
    if cl is not None:
        joined = np.array([bool(v) for v in cl.changes["joined_high_cluster"]])
        still = joined & (cl.codes[:, -1] == 0)
        out.append(
            (f"{u} in a high-high cluster in {per[-1]}", f"{int((cl.codes[:, -1] == 0).sum()):,}")
        )
        out.append(
            (
                f"{u} that entered (or re-entered) a high-high cluster between {per[0]} and "
                f"{per[-1]} ({int(still.sum()):,} of them still in one in {per[-1]})",
                f"{int(joined.sum()):,}",
            )
        )
        rises, falls = int((cl.change_codes == 0).sum()), int((cl.change_codes == 1).sum())
        a, b = cl.change_periods
        out.append(
            (
                f"{u} where the change {a} to {b} clusters in space ({rises:,} rise among rises, "
                f"{falls:,} fall among falls)",
                f"{rises + falls:,}",
            )
        )
        sig = cl.trends["significant"].astype(bool)
        for word in ("rising", "falling") if not state.trends_skipped else ():
            n = int((sig & (cl.trends["direction"] == word)).sum())
            out.append((f"{u} with a significant {word} trend", f"{n:,}"))
    nd = int(np.isnan(p.values).all(axis=1).sum())
    out.append((f"{u} with no data at all (kept on the map)", f"{nd:,}"))
    # "1 tract", not "1 tracts"
    one = noun_for(1, u)[2:]
    return [
        (one + label[len(u) :] if value == "1" and label.startswith(u + " ") else label, value)
        for label, value in out
    ]


def method(state: BriefInputs) -> list[tuple[str, str]]:
    """Method lines for the report and the speaker notes."""
    c = state.classes
    b = c.breaks[0]
    p = state.panel
    rows = [
        (
            "Data",
            f"{p.n_units} units, {p.n_periods} periods ({_period_span(state)}); {p.meta.variable}"
            + (f" ({p.meta.unit_label})" if p.meta.unit_label else ""),
        ),
        (
            "Classes",
            describe(b) + ("" if c.per_period else ": " + " | ".join(b.labels)),
        ),
    ]
    if state.view:
        rows.append(("View", state.view.removeprefix("view: ")))
    if c.per_period:
        rows.append(("Warning", c.warning or ""))
    ch = state.changes
    if ch is not None:
        o = ch.options
        rows.append(
            (
                "Changes",
                f"transitions between consecutive periods on the map's classes; jump = {o.jump}+ classes in one step; spike = back within {o.spike_window} periods; Markov summaries after Kemeny & Snell; homogeneity test after Anderson & Goodman (1957)",
            )
        )
        rows.append(("Jumps and noise", ch.noise_text))
    cl = state.clusters
    if cl is not None:
        o = cl.options
        rows.append(
            ("Spatial weights", f"{cl.weights.kind}, row-standardised; islands: {o.islands}")
        )
        rows.append(
            (
                "Clusters",
                f"{'local Moran (Anselin 1995)' if o.statistic == 'local-moran' else 'Getis-Ord Gi*'} on {cl.inputs}, two-sided p-values by {o.p_text}; {cl.significance}",
            )
        )
        rows.append(
            (
                "Trends",
                f"Mann-Kendall test with Theil-Sen slope on {cl.trend_input}, {cl.significance.replace('per period', 'across units')}"
                if not state.trends_skipped
                else f"not estimated: {plural(p.n_periods, 'period')} are too few for a trend",
            )
        )
    if state.previous is not None:
        rows.append(
            (
                "Previous run",
                previous_name(state.previous)
                + (" (breaks refitted)" if state.rebreak else " (breaks reused)"),
            )
        )
    return rows


def top_movers(state: BriefInputs, n: int = 10) -> pd.DataFrame | None:
    """The largest one-step jumps (size, then the later period), one row each."""
    ch = state.changes
    if ch is None or len(ch.jumps) == 0:
        return None
    j = ch.jumps.copy()
    j["abs"] = j["size"].abs()
    j["noise"] = j["credible"] == "false"  # credible moves first, then moves within noise
    j = j.sort_values(
        ["noise", "abs", "to_period", "unit"], ascending=[True, False, False, True]
    ).head(n)
    small = units_of(state.findings, "rates-small-base")
    check = [
        "; ".join(
            x
            for x in (
                "within count noise" if noisy else "",
                "came back: check data" if s else "",
                "small base: unstable" if u in small else "",
            )
            if x
        )
        for u, s, noisy in zip(j["unit"], j["spike"], j["noise"])
    ]
    return j.assign(
        step=[f"{a}→{b}" for a, b in zip(j["from_period"], j["to_period"])],
        classes=[f"{a}→{b}" for a, b in zip(j["from_class"], j["to_class"])],
        values=[f"{a:.1f}→{b:.1f}" for a, b in zip(j["value_before"], j["value_after"])],
        check=check,
    )[["unit", "name", "step", "classes", "values", "check"]]


def _fig(state: BriefInputs, name: str, caption: str) -> Figure:
    return Figure(state.folder / name, caption)


def _findings_table(state: BriefInputs) -> pd.DataFrame:
    import pandas as pd

    rows = [(f.level, f.code, f.message) for f in state.findings if f.level != "note"]
    rows += [(f.level, f.code, f.message) for f in state.findings if f.level == "note"]
    return pd.DataFrame(rows, columns=["level", "code", "finding"])


def build_brief(state: BriefInputs) -> Brief:
    """Everything the report says, in order: answer, news, maps, changes, clusters, data."""
    spec: BriefSpec = state.spec
    p = state.panel
    per = p.period_labels
    sections: list[Section] = []
    noun = _noun(state)
    wn = state.whatsnew
    if wn is not None:
        sections.append(
            Section(
                "whats-new",
                "What's new since the previous run",
                paragraphs=(f"Compared with the previous run ({previous_name(wn.previous)}).",),
                bullets=tuple(wn.bullets()),
            )
        )
    sections.append(
        Section(
            "maps",
            f"The map, {_period_span(state)}",
            paragraphs=(
                "Every frame uses the same classes, so a colour means the same range in every period."
                if not state.classes.per_period
                else state.classes.warning or "",
                "The animation (animation.gif, animation.mp4) shows one frame per period; below is its last frame, then every period side by side.",
            ),
            figures=(
                _fig(
                    state,
                    "poster.png",
                    f"{p.meta.variable}, {per[-1]} (last frame of the animation)",
                ),
                _fig(state, "small_multiples.png", "Every period on the same classes"),
            ),
        )
    )
    ch = state.changes
    if ch is not None:
        tested_how = (
            f"The change map shows only moves beyond {ch.noise_words}: each unit's {per[0]} and {per[-1]} {'counts' if ch.noise_test == 'poisson' else 'values'} were compared with the same test as the jumps; {noun_for(ch.n_net_noise, noun)} whose class moved within {ch.noise_words} are drawn as no credible change (units.csv: net_change_credible)."
            if ch.tested
            else "Class moves were not tested against noise (no counts given): a move of a unit with few events may be noise."
        )
        sections.append(
            Section(
                "change",
                f"Which {noun} changed",
                paragraphs=(
                    f"Net class change from {per[0]} to {per[-1]}, and the {noun} whose path is worth a look (jumps, spikes, stayed in the top or bottom class).",
                    tested_how,
                ),
                figures=(
                    _fig(state, "change_map.png", f"Class change {per[0]} to {per[-1]}"),
                    _fig(state, "flagged_units.png", "Flagged units"),
                ),
            )
        )
        hom = ch.homogeneity
        paras = [
            f"{ch.transitions.n_pairs:,} unit steps between consecutive periods; share staying in their class: {np.trace(ch.transitions.counts) / max(ch.transitions.counts.sum(), 1):.0%}."
        ]
        if hom.LR is not None and hom.p_LR is not None:
            paras.append(
                "Are the transition probabilities the same in every step? "
                + ("No: they differ" if hom.p_LR <= 0.05 else "No evidence that they differ")
                + f" (Anderson-Goodman likelihood-ratio test: G = {hom.LR:.1f}, df {hom.df}, p = {hom.p_LR:.3g})."
            )
        sections.append(
            Section(
                "transitions",
                "Transitions between classes",
                paragraphs=tuple(paras),
                figures=(
                    _fig(
                        state,
                        "transition_heatmap.png",
                        "Transitions between consecutive periods, pooled",
                    ),
                    _fig(state, "class_flow.png", f"Where {noun} moved, {per[0]} to {per[-1]}"),
                ),
                tables=(
                    Table(
                        ch.transitions.probabilities_table(),
                        "Transition probabilities (rows: from class)",
                        csv_name="transition_probabilities.csv",
                    ),
                ),
            )
        )
        movers = top_movers(state, 25)
        if movers is not None:
            sections.append(
                Section(
                    "jumps",
                    f"{noun.capitalize()} that jumped",
                    paragraphs=(
                        f"Moves of {ch.options.jump} or more classes in one step, largest first. A jump that comes back soon after is often a data error: check it before reading it as change.",
                        ch.noise_text,
                    ),
                    tables=(Table(movers, "Largest one-step jumps", csv_name="jumps.csv"),),
                )
            )
    cl = state.clusters
    if cl is not None:
        g = cl.global_moran
        sig_periods = [
            str(a) for a, b in zip(g["period"], g["p_permutation"]) if b <= cl.options.alpha
        ]
        ctab = cl.changes
        events = ctab[[bool(v) for v in ctab["joined_high_cluster"]]]
        cols = [
            c
            for c in ("unit", "name", "sequence", "joined_high_cluster", "left_high_cluster")
            if c in ctab.columns
        ]
        a, b = cl.change_periods
        sig_text = cl.significance
        where_sig = (
            "every period"
            if len(sig_periods) == len(g)
            else f"{len(sig_periods)} of {len(g)} periods ({examples(sig_periods, 6) or 'none'})"
        )
        sections.append(
            Section(
                "clusters",
                "Where high and low values cluster",
                paragraphs=(
                    f"Global Moran's I (each period tested on its own, permutation p <= {cl.options.alpha:g}, no correction across periods) shows significant clustering in {where_sig}.",
                    f"Local clusters on {cl.inputs}, {cl.options.p_text}: {sig_text}. High-high: a high unit among high neighbours; low-low likewise; high-low and low-high are spatial outliers.",
                ),
                figures=(
                    _fig(state, "global_moran.png", "Global Moran's I per period"),
                    _fig(state, "cluster_map.png", f"Local clusters, {per[-1]}"),
                ),
                tables=(
                    Table(
                        events[cols],
                        f"Units that entered (or re-entered) a high-high cluster between {per[0]} and {per[-1]}.",
                        csv_name="cluster_changes.csv",
                    ),
                ),
            )
        )
        sections.append(
            Section(
                "change-clusters",
                "Is the change clustered in space?",
                paragraphs=(
                    f"Local clusters of the change in value from {a} to {b}: where {noun} rose (or fell) together with their neighbours. {sig_text.replace(' per period', '')}.",
                ),
                figures=(
                    _fig(
                        state, "change_cluster_map.png", f"Where the change {a} to {b} is clustered"
                    ),
                ),
            )
        )
    if cl is not None and not state.trends_skipped:
        tr = cl.trends
        sig = tr[tr["significant"].astype(bool)]
        sig = sig.iloc[np.argsort(-np.abs(sig["theil_sen_slope"].to_numpy()), kind="stable")]
        tcols = [
            c
            for c in ("unit", "name", "direction", "theil_sen_slope", "p_adjusted")
            if c in sig.columns
        ]
        sections.append(
            Section(
                "trends",
                f"Trends per {noun_for(1, noun)[2:]}",
                paragraphs=(
                    f"{noun_for(len(sig), noun)} with a significant monotone trend ({cl.significance.replace('per period', 'across units')}).",
                ),
                figures=(
                    _fig(state, "trend_map.png", "Theil-Sen slope where the trend is significant"),
                ),
                tables=(
                    Table(
                        sig[tcols],
                        f"Significant trends, steepest first (slope in {state.panel.meta.unit_label or 'value units'} per period)",
                        csv_name="trends.csv",
                    ),
                ),
            )
        )
    sections.append(
        Section(
            "data-quality",
            "Data quality",
            paragraphs=(
                "Everything the checks found; no unit was dropped. Codes are stable (see findings.json).",
            ),
            tables=(
                Table(_findings_table(state), "Findings", max_rows=60, csv_name="findings.json"),
            ),
        )
    )
    title = spec.title or f"{p.meta.variable}, {_period_span(state)}"
    subtitle = spec.subtitle or (p.meta.unit_label or "")
    author = " · ".join(x for x in (spec.author, spec.organisation) if x)
    return Brief(
        title=title,
        subtitle=subtitle,
        author=author,
        source=spec.source or p.meta.source,
        date=spec.date or date.today().isoformat(),
        headline=tuple(headline(state)),
        sections=tuple(sections),
        method=tuple(method(state)),
        warning=state.notice,
        cautions=CAUTIONS,
    )


def _notes(brief: Brief, extra: str = "") -> str:
    lines = [extra] if extra else []
    lines.append("Method: " + "; ".join(f"{k}: {v}" for k, v in brief.method))
    lines.append("Cautions: " + " ".join(brief.cautions))
    return "\n\n".join(lines)


def _short(message: str, limit: int = 160) -> str:
    """The message, or its first clauses up to ``limit`` characters (cut at '; ' if possible)."""
    if len(message) <= limit:
        return message
    head = message[:limit]
    cut = head.rfind("; ")
    head = head[:cut] if cut > limit // 2 else head.rsplit(" ", 1)[0]
    return head.rstrip(",;:( ") + " …"


def _slide_pictures(state: BriefInputs, folder: Path) -> dict[str, Path]:
    """Draw the slides' own pictures into ``folder`` at the slide's picture box with text of at
    least 18 px: the poster frame, the change and cluster pictures, and the small multiples
    split into pages. Returns ``{name: path}`` (multiples as ``multiples-1.png`` ...)."""
    from mapdrift import palettes
    from mapdrift.brief.pictures import (
        Look,
        change_pictures,
        cluster_pictures,
        jump_outlines,
        multiples_pages,
    )
    from mapdrift.brief.slides import MIN_TEXT_PX, PICTURE_BOX
    from mapdrift.render.frames import FrameRenderer
    from mapdrift.render.layout import MapText

    folder.mkdir(parents=True, exist_ok=True)
    spec: BriefSpec = state.spec
    look = Look(size=PICTURE_BOX, min_text_px=MIN_TEXT_PX + 1, unit_noun=_noun(state))
    p, c = state.panel, state.classes
    out: dict[str, Path] = {}
    colours = palettes.colours_for(c.k, diverging_legend=c.breaks[0].diverging)
    labels = [b.labels for b in c.breaks] if c.per_period else list(c.breaks[0].labels)
    legend = p.meta.unit_label or p.meta.variable
    ch = state.changes
    outlines, outline_label = jump_outlines(ch, p)
    text = MapText(
        title=spec.title or p.meta.variable,
        subtitle=spec.subtitle or p.meta.unit_label or "",
        caption=spec.source or p.meta.source,
        notice=state.notice,
        legend_title=legend,
        outline_label=outline_label,
        unit_noun=look.unit_noun,
        min_text_px=look.min_text_px,
    )
    r = FrameRenderer(
        p.geometry, c.codes, colours, labels, p.period_labels, text=text, outlines=outlines,
        size=PICTURE_BOX, units=list(p.units),
    )  # fmt: skip
    try:
        out["poster.png"] = write_png(r.frame(p.n_periods - 1), folder / "poster.png")
    finally:
        r.close()
    if not c.per_period:
        for path, _periods in multiples_pages(
            p.geometry, c.codes, colours, labels, p.period_labels, folder,
            size=PICTURE_BOX, legend_title=legend, text_px=26,
        ):  # fmt: skip
            out[path.name] = path
    if ch is not None:
        for path in change_pictures(ch, p, folder, force=True, look=look):
            out[path.name] = path
    cl = state.clusters
    if cl is not None:
        for path in cluster_pictures(
            cl, p, folder, force=True, look=look, animation=False, trends=not state.trends_skipped
        ):
            out[path.name] = path
    return out


def build_slides(state: BriefInputs, brief: Brief, pictures: Path | None = None) -> list[Slide]:
    """The deck: title, answer, what's new, animation, small multiples, then one picture per
    slide (change, flagged units, transitions, flow, movers, clusters, change clusters, trends)
    and the data notes. Pictures carry their own titles and sources, so the slide adds a
    takeaway title and the page number only."""
    d = state.folder
    per = state.panel.period_labels
    notice = brief.warning
    first, last = per[0], per[-1]
    slides = [
        Slide(
            "title",
            brief.title,
            subtitle=brief.subtitle,
            bullets=tuple(x for x in (brief.author, brief.date) if x),
            notice=notice,
            notes=_notes(brief, "Title slide."),
        ),
        Slide(
            "answer",
            "The answer",
            bullets=tuple(phrase(k, v) for k, v in brief.headline),
            notice=notice,
            notes=_notes(brief, "The headline numbers of this run."),
        ),
    ]
    sec = brief.section("whats-new")
    if sec is not None:
        slides.append(
            Slide(
                "whats-new",
                "What's new since the previous run",
                bullets=tuple(_short(b, 230) for b in sec.bullets[:8]),
                notice=notice,
                notes=_notes(brief, "Differences from the previous run."),
            )
        )
    noun = _noun(state)
    drawn: dict[str, Path] = {}
    if pictures is not None:
        from mapdrift.pngwrite import background_writes

        with background_writes():  # encoded beside the drawing; all written before pasting
            drawn = _slide_pictures(state, pictures)

    def pic(name: str) -> Path:
        return drawn.get(name, d / name)

    gif, mp4, poster = d / "animation.gif", d / "animation.mp4", pic("poster.png")
    same = (
        "Every frame on the same classes"
        if not state.classes.per_period
        else "Classes differ by period"
    )
    ch = state.changes
    cl = state.clusters
    if poster.exists():
        slides.append(
            Slide(
                "animation",
                f"{same}: {first} to {last}",
                images=(poster,),
                movie=mp4 if mp4.exists() else None,
                fallback=gif if gif.exists() else None,
                notice=notice,
                notes=_notes(
                    brief,
                    f"Animation: one frame per period; outlined {noun} jumped into that period. "
                    "The strip at the bottom shows each period's class shares.",
                ),
            )
        )
    pages = sorted((k for k in drawn if k.startswith("multiples-")), key=lambda k: int(k[10:-4]))
    if pages:
        for i, name in enumerate(pages, 1):
            slides.append(
                Slide(
                    "small-multiples" if len(pages) == 1 else f"small-multiples-{i}",
                    f"Every period on the same classes ({i} of {len(pages)})",
                    images=(drawn[name],),
                    notice=notice,
                    notes=_notes(brief, "Every period side by side, on the same classes."),
                )
            )
    elif (d / "small_multiples.png").exists():
        slides.append(
            Slide(
                "small-multiples",
                "Every period side by side",
                images=(d / "small_multiples.png",),
                notice=notice,
                notes=_notes(brief, "All periods on one page."),
            )
        )
    if ch is not None:
        up, down = ch.net_moves
        n_jump = int(ch.units["jump"].sum())
        stay = np.trace(ch.transitions.counts) / max(ch.transitions.counts.sum(), 1)
        change_title = (
            f"{noun_for(up, noun)} rose and {down:,} fell beyond {ch.noise_words}, {first} to {last}"
            if ch.tested
            else f"{noun_for(up, noun)} rose and {down:,} fell a class or more, {first} to {last}"
        )
        flag_title = f"{noun_for(n_jump, noun)} jumped {ch.options.jump}+ classes in one step"
        trans_title = f"{stay:.0%} of steps stay in their class"
        flow_title = f"Where {noun} moved, {first} to {last}"
    else:
        change_title = f"Which {noun} changed class, {first} to {last}"
        flag_title, trans_title = (
            f"{noun.capitalize()} worth a closer look",
            f"How {noun} move between classes",
        )
        flow_title = f"Where {noun} moved, {first} to {last}"
    pictures_l = [
        ("change", "change_map.png", change_title, "Net class change between the first and the last period."),
        ("flagged", "flagged_units.png", flag_title, "Jumps, spikes (often data errors) and units that stayed in the top or bottom class."),
        ("transitions", "transition_heatmap.png", trans_title, "Counts of moves between consecutive periods, pooled."),
        ("flow", "class_flow.png", flow_title, "Shares of units per class in the first and last period."),
    ]  # fmt: skip
    for key, name, title, note in pictures_l:
        if pic(name).exists():
            slides.append(
                Slide(key, title, images=(pic(name),), notice=notice, notes=_notes(brief, note))
            )
    movers = top_movers(state, 10)
    ch = state.changes
    ch_note = ch.noise_text if ch is not None else ""
    if movers is not None:
        slides.append(
            Slide(
                "movers",
                f"The {min(len(movers), 10):,} largest one-step jumps: check these first",
                table=movers,
                bullets=(
                    "A jump that came back soon after is often a data error; a small base makes rates unstable: check both first.",
                    ch_note,
                ),
                notice=notice,
                notes=_notes(brief, "Largest one-step jumps."),
            )
        )
    later = []
    if cl is not None:
        a, b = cl.change_periods
        n_hh, n_ll = int((cl.codes[:, -1] == 0).sum()), int((cl.codes[:, -1] == 1).sum())
        g = cl.global_moran
        n_sig = int((np.asarray(g["p_permutation"], dtype=float) <= cl.options.alpha).sum())
        rises, falls = int((cl.change_codes == 0).sum()), int((cl.change_codes == 1).sum())
        n_trend = 0 if state.trends_skipped else int(cl.trends["significant"].astype(bool).sum())
        later = [
            ("clusters", "cluster_map.png",
             (f"{noun_for(n_hh, noun)} in high-high and {n_ll:,} in low-low clusters, {last}"
              if n_ll else f"{noun_for(n_hh, noun)} in high-high clusters, {last}"),
             "Local clusters in the last period."),
            ("global-moran", "global_moran.png",
             f"The map is clustered in {n_sig:,} of {len(g):,} periods",
             "Global Moran's I per period."),
            ("change-clusters", "change_cluster_map.png",
             f"Change {a} to {b}: {noun_for(rises, noun)} rose among rises, {falls:,} fell among falls",
             "Local clusters of the change between two periods."),
            ("trends", "trend_map.png", f"{noun_for(n_trend, noun)} with a significant trend",
             "Theil-Sen slope where the Mann-Kendall trend is significant."),
        ]  # fmt: skip
    for key, name, title, note in later:
        if pic(name).exists():
            slides.append(
                Slide(key, title, images=(pic(name),), notice=notice, notes=_notes(brief, note))
            )
    warn = [f for f in state.findings if f.level == "warning"]
    bullets = tuple(_short(f.message, 230) for f in warn[:6]) or ("No data problems found.",)
    if len(warn) > 6:
        bullets += (f"… and {len(warn) - 6} more warnings in findings.json and the report.",)
    slides.append(
        Slide(
            "data-notes",
            "Data notes",
            bullets=bullets,
            notice=notice,
            notes=_notes(brief, "Data-quality findings."),
        )
    )
    return slides
