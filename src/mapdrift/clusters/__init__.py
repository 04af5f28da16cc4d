"""Space-time clusters: global and local spatial autocorrelation per period, their changes
across periods, and per-unit trends.

``analyse_clusters(panel, classes, options)`` returns a :class:`ClusterResult`;
``write_clusters(result, out)`` writes ``clusters.csv``, ``global_moran.csv``,
``cluster_changes.csv``, ``cluster_transitions.csv`` and ``trends.csv``. Maps are drawn by
the command (``mapdrift clusters``) with :mod:`mapdrift.render`; this package never imports it.
See :mod:`mapdrift.clusters.local` for the local Moran convention and permutation scheme.
"""

from __future__ import annotations

from mapdrift.clusters.core import (
    DEFAULT_SEED,
    STATISTICS,
    ClusterOptions,
    ClusterResult,
    analyse_clusters,
)
from mapdrift.clusters.io import OUTPUT_FILES, write_clusters
from mapdrift.clusters.labels import CODES, LABELS
from mapdrift.clusters.multiple import CORRECTIONS

__all__ = [
    "CODES",
    "CORRECTIONS",
    "DEFAULT_SEED",
    "LABELS",
    "OUTPUT_FILES",
    "STATISTICS",
    "ClusterOptions",
    "ClusterResult",
    "analyse_clusters",
    "write_clusters",
]
