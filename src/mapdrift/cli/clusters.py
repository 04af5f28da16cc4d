"""``mapdrift clusters``: spatial autocorrelation per period, cluster changes and unit trends."""

from __future__ import annotations

from dataclasses import replace
from enum import Enum
from pathlib import Path
from typing import Any, Optional

import typer

from mapdrift.cli._app import command
from mapdrift.cli._data import load_data, summarise
from mapdrift.cli._options import input_options
from mapdrift.cli._print import echo, print_findings


class Correction(str, Enum):
    fdr = "fdr"
    bonferroni = "bonferroni"
    none = "none"


class Statistic(str, Enum):
    local_moran = "local-moran"
    gi_star = "gi-star"


class Islands(str, Enum):
    nearest = "nearest"
    exclude = "exclude"


class Smooth(str, Enum):
    eb = "eb"
    spatial_eb = "spatial-eb"


class Standardise(str, Enum):
    assuncao_reis = "assuncao-reis"
    none = "none"


class PValue(str, Enum):
    normal = "normal"
    permutation = "permutation"


def _opt(default: Any, *names: str, help: str) -> Any:
    return typer.Option(default, *names, help=help, rich_help_panel="Clusters")


@command("clusters")
@input_options
def clusters(
    inputs: Any,
    config: Any = None,
    out: Path = typer.Option(..., "--out", help="Output folder for tables and maps."),
    weights: Optional[str] = _opt(
        None,
        "--weights",
        help="queen, rook, knn:6, distance:2500 (metres), fuzzy or fuzzy:M, or a .gal/.gwt file (matched by unit ID) [default: queen].",
    ),
    islands: Optional[Islands] = _opt(
        None,
        "--islands",
        help="Units without neighbours: link to the nearest unit, or exclude (labelled isolated) [default: nearest].",
    ),
    permutations: Optional[int] = _opt(
        None, "--permutations", help="Random permutations for p-values [default: 999]."
    ),
    alpha: Optional[float] = _opt(None, "--alpha", help="Significance level [default: 0.05]."),
    correction: Optional[Correction] = _opt(
        None, "--correction", help="Multiple-testing correction per period [default: fdr]."
    ),
    seed: Optional[int] = _opt(
        None,
        "--seed",
        # the number is DEFAULT_SEED of mapdrift.clusters.core (not imported here: --help stays
        # light; a test checks both agree)
        help="Random seed; same inputs and seed give identical tables [default: 20240917].",
    ),
    statistic: Optional[Statistic] = _opt(
        None, "--statistic", help="Local statistic [default: local-moran]."
    ),
    persist: Optional[int] = _opt(
        None,
        "--persist",
        help="Periods in a row that make a steady high-high cluster [default: 3].",
    ),
    change_from: Optional[str] = _opt(
        None, "--from", help="First period of the change analysed [default: first]."
    ),
    change_to: Optional[str] = _opt(
        None, "--to", help="Last period of the change analysed [default: last]."
    ),
    smooth: Optional[Smooth] = _opt(
        None, "--smooth", help="Smooth rates from counts first (empirical Bayes)."
    ),
    standardise: Optional[Standardise] = _opt(
        None,
        "--standardise",
        help="With counts: statistics on EB standardised rates (assuncao-reis) or on the "
        "values as mapped (none) [default: assuncao-reis].",
    ),
    p_value: Optional[PValue] = _opt(
        None,
        "--p-value",
        help="Local p-values: normal approximation from the exact permutation moments, or "
        "permutation pseudo p-values [default: normal].",
    ),
    weights_cache: Optional[Path] = _opt(
        None, "--weights-cache", help="Folder to keep spatial weights between runs."
    ),
    maps: bool = typer.Option(
        True, "--maps/--no-maps", help="Also draw the chart, cluster animation and maps."
    ),
    force: bool = typer.Option(False, "--force", help="Overwrite existing output files."),
) -> None:
    """Global and local Moran's I (or Gi*) per period, cluster changes and trends per unit."""
    from mapdrift.clusters import ClusterOptions, analyse_clusters, write_clusters
    from mapdrift.config import merge
    from mapdrift.outputs import check_free

    flags = {
        "weights": weights,
        "islands": islands.value if islands else None,
        "permutations": permutations,
        "alpha": alpha,
        "correction": correction.value if correction else None,
        "seed": seed,
        "statistic": statistic.value if statistic else None,
        "persist": persist,
        "change_from": change_from,
        "change_to": change_to,
        "smooth": smooth.value if smooth else None,
        "standardise": standardise.value if standardise else None,
        "p_value": p_value.value if p_value else None,
        "cache_dir": weights_cache,
    }
    from_config = (
        config.section("clusters") if config is not None and hasattr(config, "section") else {}
    )
    options = merge(ClusterOptions, from_config, flags)
    from mapdrift.brief.pictures import CLUSTER_PICTURES, cluster_pictures

    check_free([out / n for n in (*_table_names(), *(CLUSTER_PICTURES if maps else ()))], force)
    w: Any = None
    smooth = None
    if options.smooth and inputs.view:
        # smoothing works on counts: smooth first, then rescale (analyse_clusters would smooth
        # the counts again and lose the view)
        from mapdrift.rates import smooth_panel
        from mapdrift.weights import build_weights

        def smooth(raw: Any) -> Any:
            nonlocal w
            w = build_weights(raw.geometry, options.weights, islands=options.islands,
                              cache_dir=options.cache_dir, units=raw.units)  # fmt: skip
            return smooth_panel(raw, options.smooth, weights=w)

    panel = summarise(load_data(inputs, smooth=smooth), view=inputs.view)
    if smooth is not None:
        options = replace(options, smooth=None)
    if options.persist > panel.n_periods:  # "steady for 3 periods" with 2: all there are
        options = replace(options, persist=panel.n_periods)
    result = analyse_clusters(panel, None, options, weights=w)
    written = write_clusters(result, out, force=force, warning=panel.meta.view or None)
    if maps:
        written += cluster_pictures(
            result, panel, out, force=True, trends=panel.n_periods >= max(options.min_periods, 3)
        )  # checked above
    need = max(options.min_periods, 3)
    if panel.n_periods < need:  # said once; the trend map is left out, trends.csv says why
        echo(
            f"trends: {panel.n_periods} periods are too few for a trend per unit (need {need}); "
            "no trend map"
        )
    g = result.global_moran
    echo(f"{options.statistic}, {result.weights.kind} weights; {result.method_text}")
    echo(
        f"  {'period':<10}{'Moran I':>10}{'p perm':>9}{'high-high':>11}{'low-low':>9}{'outliers':>10}"
    )
    for t, label in enumerate(result.period_labels):
        codes = result.codes[:, t]
        echo(
            f"  {label:<10}{g['moran_i'].iloc[t]:>10.3f}{g['p_permutation'].iloc[t]:>9.3f}"
            f"{int((codes == 0).sum()):>11}{int((codes == 1).sum()):>9}{int(((codes == 2) | (codes == 3)).sum()):>10}"
        )
    echo()
    print_findings(result.findings)
    echo()
    for p in written:
        echo(f"wrote {p}")


def _table_names() -> tuple[str, ...]:
    from mapdrift.clusters.io import OUTPUT_FILES

    return tuple(OUTPUT_FILES)
