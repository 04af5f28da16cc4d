"""Writing the cluster step's tables (atomically; never over an existing file without force)."""

from __future__ import annotations

from pathlib import Path
from typing import TYPE_CHECKING

from mapdrift.atomic import write_text
from mapdrift.errors import OutputExistsError
from mapdrift.findings import examples

if TYPE_CHECKING:
    from mapdrift.clusters.core import ClusterResult

__all__ = ["OUTPUT_FILES", "check_free", "write_clusters"]

#: File name -> frame name in ClusterResult.frames.
OUTPUT_FILES: dict[str, str] = {
    "clusters.csv": "clusters",
    "global_moran.csv": "global_moran",
    "cluster_changes.csv": "changes",
    "cluster_transitions.csv": "transitions",
    "trends.csv": "trends",
}


def check_free(paths: list[Path], force: bool) -> None:
    """Raise OutputExistsError naming the files that exist, unless ``force``."""
    if force:
        return
    existing = [p for p in paths if p.exists()]
    if existing:
        raise OutputExistsError(
            f"{existing[0].parent}: {len(existing)} output files exist "
            f"({examples([p.name for p in existing], 4)}); pass --force to overwrite or choose "
            "another --out folder"
        )


def write_clusters(result: ClusterResult, out: Path | str, *, force: bool = False) -> list[Path]:
    """Write the tables into ``out``; returns the paths written. CSV floats keep 10 digits."""
    out = Path(out)
    targets = [out / name for name in OUTPUT_FILES]
    check_free(targets, force)
    written = []
    for path, frame in zip(targets, OUTPUT_FILES.values(), strict=True):
        df = result.frames[frame]
        text = df.to_csv(index=frame == "transitions", float_format="%.10g", lineterminator="\n")
        written.append(write_text(path, text))
    return written
