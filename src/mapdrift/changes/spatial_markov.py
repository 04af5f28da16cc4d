"""Spatially conditioned transitions (Rey 2001, "spatial Markov").

For each step, every unit's neighbourhood context is the class of its *spatial lag* (the
weighted mean of its neighbours' values, from :meth:`mapdrift.weights.SpatialWeights.lag`) at
the start of the step, classed with the same breaks as the map. Transitions are then counted
separately per context class, giving ``k`` conditional k x k matrices, and the Anderson-Goodman
homogeneity test (see :mod:`mapdrift.changes.markov`) checks whether transitions are independent
of the neighbourhood context. A unit whose lag is NaN (no neighbour with a value) or whose own
class is -1 in either period is left out and counted.

Rey, S. J. (2001). Spatial empirics for economic growth and convergence. *Geographical
Analysis* 33(3), 195-214.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

import numpy as np

from mapdrift.changes.markov import HomogeneityTest, homogeneity_test, stationary_distribution
from mapdrift.changes.transitions import row_probabilities

if TYPE_CHECKING:
    import pandas as pd

    from mapdrift.breaks import Breaks, Classes
    from mapdrift.weights import SpatialWeights

__all__ = ["SpatialMarkov", "spatial_markov"]


@dataclass(frozen=True, eq=False)
class SpatialMarkov:
    """Conditional transition counts ``counts[c, i, j]`` (c = class of the spatial lag).

    ``test`` asks whether transitions depend on the neighbourhood class. ``n_no_lag`` counts
    unit pairs left out because the lag was NaN; ``weights`` names the weights used.
    """

    counts: np.ndarray
    labels: tuple[str, ...]
    context_labels: tuple[str, ...]
    test: HomogeneityTest
    n_no_lag: int
    n_missing: int
    weights: str

    @property
    def probabilities(self) -> np.ndarray:
        return row_probabilities(self.counts)

    def stationary(self) -> list[list[float] | None]:
        """Stationary distribution of each context's chain (None when not unique or empty)."""
        out: list[list[float] | None] = []
        for c in range(self.counts.shape[0]):
            m = self.counts[c].astype(np.float64)
            rows = m.sum(axis=1)
            if rows.sum() == 0 or (rows == 0).any():
                out.append(None)
                continue
            pi, _ = stationary_distribution(m / rows[:, None])
            out.append(None if pi is None else [float(x) for x in pi])
        return out

    def table(self) -> pd.DataFrame:
        """Long form: neighbourhood class, from class, to class, count, probability."""
        import pandas as pd

        k = self.counts.shape[1]
        kc = self.counts.shape[0]
        lab = np.array(self.labels, dtype=object)
        clab = np.array(self.context_labels, dtype=object)
        c = np.repeat(np.arange(kc), k * k)
        fr = np.tile(np.repeat(np.arange(k), k), kc)
        to = np.tile(np.arange(k), kc * k)
        return pd.DataFrame(
            {
                "neighbourhood_class": c + 1,
                "neighbourhood_label": clab[c],
                "from_class": fr + 1,
                "from_label": lab[fr],
                "to_class": to + 1,
                "to_label": lab[to],
                "count": self.counts.reshape(-1).astype(np.int64),
                "probability": self.probabilities.reshape(-1),
            }
        )

    def to_dict(self) -> dict[str, Any]:
        return {
            "method": "spatially conditioned transitions (Rey 2001)",
            "weights": self.weights,
            "context": (
                "class of the spatial lag at the start of each step (same breaks as the map "
                "unless other lag breaks were given)"
            ),
            "pairs_without_lag": self.n_no_lag,
            "pairs_with_no_data": self.n_missing,
            "test": self.test.to_dict(),
            "stationary_by_context": self.stationary(),
        }


def spatial_markov(
    values: np.ndarray,
    classes: Classes,
    weights: SpatialWeights,
    steps: Sequence[tuple[int, int]],
    *,
    labels: Sequence[str],
    lag_breaks: Breaks | None = None,
) -> SpatialMarkov:
    """Count transitions conditioned on the lag class at the start of each step; test them.

    ``values`` are the panel's values (the lag is of values, not classes); the lag is classed
    with the breaks of the step's first period, or with ``lag_breaks`` when given (e.g.
    quantiles of the lag itself). NaN lags (no neighbour with a value) are left out and counted.
    """
    values = np.asarray(values, dtype=np.float64)
    codes = np.asarray(classes.codes).astype(np.int64)
    k = classes.k
    kc = lag_breaks.k if lag_breaks is not None else k
    counts = np.zeros((kc, k, k), dtype=np.int64)
    n_no_lag = n_missing = 0
    for j0, j1 in steps:
        lag = weights.lag(values[:, j0])
        br = lag_breaks if lag_breaks is not None else classes.breaks_for(j0)
        lc = br.classify(lag).astype(np.int64)
        a, b = codes[:, j0], codes[:, j1]
        own = (a >= 0) & (b >= 0)
        ok = own & (lc >= 0)
        n_missing += int((~own).sum())
        n_no_lag += int((own & (lc < 0)).sum())
        flat = (lc[ok] * k + a[ok]) * k + b[ok]
        counts += np.bincount(flat, minlength=kc * k * k).reshape(kc, k, k)
    test = homogeneity_test(counts, what="neighbourhood classes", labels=labels)
    return SpatialMarkov(
        counts=counts,
        labels=tuple(labels),
        context_labels=tuple(lag_breaks.labels) if lag_breaks is not None else tuple(labels),
        test=test,
        n_no_lag=n_no_lag,
        n_missing=n_missing,
        weights=weights.kind,
    )
