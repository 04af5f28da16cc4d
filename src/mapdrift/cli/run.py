"""``mapdrift run CONFIG.toml``: the whole job from one config file, rerun every year."""

from __future__ import annotations

from pathlib import Path
from typing import Any, Optional

import typer

from mapdrift.cli._app import command, state
from mapdrift.cli._options import SchemeChoice, parse_numbers
from mapdrift.cli._print import echo, summarise_findings


def _o(default: Any, *names: str, help: str) -> Any:
    return typer.Option(default, *names, help=help)


def run_config(config: Any, *, out: Path | None, force: bool) -> Any:
    """Run the pipeline with progress lines; shared by ``run`` and ``demo``."""
    import sys

    from mapdrift.pipeline import run

    echo(f"mapdrift run: {config.path}" + (f" -> {out}" if out else ""))
    if state.get("quiet") or not sys.stdout.isatty():
        result = run(config, out=out, force=force, progress=echo)
    else:  # a spinner naming the running step, one line per finished step
        from rich.console import Console

        console = Console()
        with console.status("starting") as status:
            result = run(
                config,
                out=out,
                force=force,
                progress=lambda line: console.print(line, markup=False, highlight=False),
                on_start=lambda name: status.update(f"running {name} ..."),
            )
    summarise_findings(result.findings, "data findings:")
    n_warn = sum(f.level == "warning" for f in result.findings)
    report = next((n for n in ("report.html", "report.md") if (result.out / n).exists()), None)
    see = f"; see {report}" if report else "; see findings.json"
    echo(f"done: {len(result.outputs)} files in {result.out} ({n_warn} data warnings{see})")
    return result


@command("run")
def run_cmd(
    config_file: Path = typer.Argument(
        ..., metavar="CONFIG", help="Run configuration (TOML), e.g. demo_data/demo.toml."
    ),
    out: Optional[Path] = _o(
        None,
        "--out",
        help="Output folder [default: the config's `out`, else outputs/<config>-<date>].",
    ),
    force: bool = _o(False, "--force", help="Replace an existing output folder."),
    previous: Optional[Path] = _o(
        None, "--previous", help="Last year's run folder: reuse its breaks and report what is new."
    ),
    append: Optional[list[Path]] = typer.Option(
        None,
        "--append",
        metavar="<path>",
        help="Another values table to add, e.g. next year's release (repeatable; added to the "
        "config's [inputs] append). Long tables need the same columns; a wide table may hold "
        "only the ID and the new periods' columns.",
    ),
    view: Optional[str] = _o(
        None,
        "--view",
        help="Rescale the values: raw, relative-mean, relative-median, index:PERIOD, "
        "deflate:FILE[:COLUMN][@PERIOD] (overrides [inputs] view).",
    ),
    rebreak: Optional[bool] = _o(
        None,
        "--rebreak/--keep-breaks",
        help="Refit breaks instead of reusing the previous run's (said on every output).",
    ),
    scheme: Optional[SchemeChoice] = _o(None, "--scheme", help="Classification scheme."),
    k: Optional[int] = _o(None, "-k", "--classes", help="Number of classes, 2 to 9."),
    basis: Optional[str] = _o(None, "--basis", help="pooled, per-period or period:YEAR."),
    breaks_file: Optional[Path] = _o(None, "--breaks-file", help="Reuse saved breaks."),
    values: Optional[str] = _o(
        None,
        "--values",
        help="Upper bounds of the classes, e.g. '0,2,5,10'; needs --scheme manual.",
    ),
    jump: Optional[int] = _o(None, "--jump", help="Classes moved in one step that flag a jump."),
    weights: Optional[str] = _o(
        None, "--weights", help="Spatial weights: queen, rook, knn:6, distance:M, fuzzy."
    ),
    permutations: Optional[int] = _o(
        None, "--permutations", help="Permutations for the cluster tests."
    ),
    alpha: Optional[float] = _o(None, "--alpha", help="Significance level."),
    correction: Optional[str] = _o(None, "--correction", help="fdr, bonferroni or none."),
    seed: Optional[int] = _o(
        None, "--seed", help="Seed of the permutation tests [default: the config's, else 20240917]."
    ),
    title: Optional[str] = _o(None, "--title", help="Title of the report and slides."),
    unit_noun: Optional[str] = _o(
        None, "--unit-noun", help="What the units are called in titles, e.g. tracts."
    ),
    settings: Optional[list[str]] = typer.Option(
        None,
        "--set",
        metavar="<section.key=value>",
        help="Override any config key: SECTION.KEY=VALUE (repeatable), e.g. --set animate.size=1920x1080.",
    ),
) -> None:
    """Run every step (check, classes, animation, changes, clusters, briefing) from a config.

    Writes into a new folder, or replaces --out only with --force; a failed step leaves earlier
    outputs untouched. Keys of the config file are overridden by these flags.
    """
    from mapdrift.config import load_config

    cfg = load_config(config_file)
    cfg = cfg.with_values(
        "run", {"previous": str(previous) if previous else None, "rebreak": rebreak}
    )
    if append:  # added to the config's list; a table listed there already is not read twice
        have = [Path(p) for p in cfg.section("inputs").get("append", ())]
        seen = {p.resolve() for p in have}
        extra = [p for p in append if p.resolve() not in seen]
        cfg = cfg.with_values("inputs", {"append": [str(p) for p in (*have, *extra)]})
    if view is not None:
        from mapdrift.views import parse_view, resolve_view

        parse_view(view)  # a bad view stops before any work
        cfg = cfg.with_values("inputs", {"view": resolve_view(view, Path.cwd())})
    cfg = cfg.with_values(
        "classes",
        {
            "scheme": scheme.value if scheme else None,
            "k": k,
            "basis": basis,
            "breaks_file": str(breaks_file) if breaks_file else None,
            "values": list(parse_numbers(values, "--values")) if values else None,
        },
    )
    cfg = cfg.with_values("changes", {"jump": jump})
    cfg = cfg.with_values(
        "clusters",
        {
            "weights": weights,
            "permutations": permutations,
            "alpha": alpha,
            "correction": correction,
            "seed": seed,
        },
    )
    cfg = cfg.with_values("brief", {"title": title, "unit_noun": unit_noun})
    from mapdrift.config import SECTIONS, parse_setting
    from mapdrift.errors import ConfigError

    for text in settings or ():
        section, key, value = parse_setting(text)
        if section not in SECTIONS:
            raise ConfigError(
                f"--set {text!r}: no section [{section}]; sections: {', '.join(SECTIONS)}"
            )
        cfg = cfg.with_values(section, {key: value})
    run_config(cfg, out=out, force=force)
