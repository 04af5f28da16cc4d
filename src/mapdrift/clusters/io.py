"""Writing the cluster step's tables (atomically, text defused; never over an existing file
without force)."""

from __future__ import annotations

from pathlib import Path
from typing import TYPE_CHECKING

from mapdrift.outputs import check_free, write_csv

if TYPE_CHECKING:
    from mapdrift.clusters.core import ClusterResult

__all__ = ["OUTPUT_FILES", "write_clusters"]

#: File name -> frame name in ClusterResult.frames.
OUTPUT_FILES: dict[str, str] = {
    "clusters.csv": "clusters",
    "global_moran.csv": "global_moran",
    "cluster_changes.csv": "changes",
    "cluster_transitions.csv": "transitions",
    "trends.csv": "trends",
}


def write_clusters(
    result: ClusterResult, out: Path | str, *, force: bool = False, warning: str | None = None
) -> list[Path]:
    """Write the tables into ``out``; returns the paths written. CSV floats keep 10 digits.
    ``warning`` (e.g. the values' view) becomes each CSV's ``# `` first line."""
    out = Path(out)
    targets = [out / name for name in OUTPUT_FILES]
    check_free(targets, force)
    written = []
    for path, frame in zip(targets, OUTPUT_FILES.values(), strict=True):
        written.append(
            write_csv(result.frames[frame], path, index=frame == "transitions", warning=warning)
        )
    return written
