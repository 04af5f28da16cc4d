"""DataFrames of the cluster step (built from a ClusterResult) for the files and units.csv."""

from __future__ import annotations

from typing import TYPE_CHECKING, Any

import numpy as np

from mapdrift.clusters import labels as lab

if TYPE_CHECKING:
    from mapdrift.clusters.core import ClusterResult
    from mapdrift.panel import Panel

__all__ = ["build_frames"]


def _label_names(codes: np.ndarray) -> np.ndarray:
    names = np.array([*lab.LABELS, lab.NO_DATA], dtype=object)
    return names[np.where(codes < 0, len(lab.LABELS), codes)]


def build_frames(res: ClusterResult, panel: Panel) -> dict[str, Any]:
    import pandas as pd

    opt = res.options
    n_u, n_t = res.codes.shape
    units = np.array(res.units, dtype=object)
    periods = list(res.period_labels)
    stat_name = "local_i" if opt.statistic == "local-moran" else "gi_star_z"
    clusters = pd.DataFrame(
        {
            "unit": np.repeat(units, n_t),
            "period": periods * n_u,
            "value": res.values.ravel(),
            stat_name: res.local.stat.ravel(),
            "p": res.local.p.ravel(),
            "p_adjusted": res.p_adjusted.ravel(),
            "label": _label_names(res.codes).ravel(),
            "alpha": opt.alpha,
            "correction": opt.correction,
        }
    )
    if res.stat_values is not None and res.stat_values is not res.values:
        clusters.insert(3, "eb_standardised_rate", res.stat_values.ravel())
    clusters["p_method"] = res.local.p_value
    glob = pd.DataFrame(
        [
            {
                "period": p,
                "n_units": g.n,
                "moran_i": g.I,
                "expected_i": g.expected,
                "z_randomisation": g.z_random,
                "p_randomisation": g.p_random,
                "z_normality": g.z_normal,
                "p_permutation": g.p_permutation,
                "permutations": g.permutations,
                "weights": res.weights.kind,
                "input": res.inputs,
            }
            for p, g in zip(periods, res.global_stats, strict=True)
        ]
    )
    fl = lab.flags(res.codes, periods, opt.persist)
    a, b = res.change_periods
    ch_stat = res.change_local
    changes = pd.DataFrame(
        {
            "unit": units,
            "sequence": lab.label_sequences(res.codes),
            **fl,
            "change_from": a,
            "change_to": b,
            "change": res.values[:, periods.index(b)] - res.values[:, periods.index(a)],
            "change_" + stat_name: ch_stat.stat[:, 0],
            "change_p": ch_stat.p[:, 0],
            "change_label": _label_names(res.change_codes),
            "alpha": opt.alpha,
            "correction": opt.correction,
        }
    )
    trans = pd.DataFrame(
        lab.label_transitions(res.codes), index=list(lab.LABELS), columns=list(lab.LABELS)
    )
    trans.index.name = "from \\ to"
    tr = res.trend
    trends = pd.DataFrame(
        {
            "unit": units,
            "n_periods": tr.n_values,
            "mann_kendall_s": tr.S,
            "var_s": tr.var_s,
            "z": tr.z,
            "p": tr.p,
            "p_adjusted": tr.p_adjusted,
            "theil_sen_slope": tr.slope,
            "significant": tr.significant,
            "direction": list(tr.direction),
            "series": res.trend_input,
            "alpha": opt.alpha,
            "correction": opt.correction,
        }
    )
    names = _label_names(res.codes)
    unit_cols = pd.DataFrame({"unit": units})
    for t, p in enumerate(periods):
        unit_cols[f"cluster_{p}"] = names[:, t]
    unit_cols["cluster_sequence"] = changes["sequence"].values
    unit_cols["steady_high_cluster"] = changes["steady_high_cluster"].values
    unit_cols["trend_slope"] = tr.slope
    unit_cols["trend_p_adjusted"] = tr.p_adjusted
    unit_cols["trend"] = list(tr.direction)
    if panel.names and tuple(panel.names) != tuple(panel.units):
        for df in (changes, trends, unit_cols):
            df.insert(1, "name", list(panel.names))
    return {
        "clusters": clusters,
        "global_moran": glob,
        "changes": changes,
        "transitions": trans,
        "trends": trends,
        "unit_columns": unit_cols,
    }
