"""``mapdrift explore CONFIG|RUN_FOLDER``: write the interactive ``explorer.html`` of a run."""

from __future__ import annotations

from pathlib import Path
from typing import Optional

import typer

from mapdrift.cli._app import command
from mapdrift.cli._print import echo

#: The pipeline steps the explorer needs from a config (no animation, tables or briefing).
EXPLORE_STEPS = ("load", "smooth", "view", "classify", "changes", "clusters")


@command("explore")
def explore(
    target: Path = typer.Argument(
        ...,
        metavar="CONFIG|RUN_FOLDER",
        help="A run configuration (TOML) to analyse, or a finished run's output folder.",
    ),
    out: Optional[Path] = typer.Option(
        None,
        "--out",
        help="Where to write the page [default: RUN_FOLDER/explorer.html, or explorer.html here for a CONFIG].",
    ),
    force: bool = typer.Option(False, "--force", help="Overwrite an existing page."),
    raster_px: int = typer.Option(
        2048,  # mapdrift.brief.explorer.DEFAULT_RASTER_PX (not imported: the CLI stays light)
        "--raster-px",
        min=200,
        max=6000,
        help="Longest side of the map's pixel grid; about twice the on-screen size keeps 2x zoom crisp.",
    ),
) -> None:
    """Write one self-contained, offline HTML page to explore a run: step through the periods,
    point at units, brush the histogram, compare classings, save the view as PNG.

    From a CONFIG the loading, classes, changes and clusters are computed as `mapdrift run` would
    (nothing else is written). From a RUN_FOLDER the page is built from the run's files
    (units.gpkg, breaks.json, jumps.csv, manifest.json); bases of rates are then not shown.
    """
    from mapdrift.errors import InputError, OutputExistsError

    if not target.exists():
        raise InputError(f"{target}: no such file or folder; give a CONFIG.toml or a run folder")
    dest = out or (target / "explorer.html" if target.is_dir() else Path("explorer.html"))
    if dest.exists() and not force:
        raise OutputExistsError(
            f"{dest} exists; pass --force to overwrite it or choose another --out"
        )
    if target.is_dir():
        from mapdrift.brief.explorer import write_explorer
        from mapdrift.brief.explorer_folder import payload_from_folder
        from mapdrift.outfolder import list_output, lock_out

        payload = payload_from_folder(target, raster_px=raster_px)
        if dest.resolve().parent == target.resolve():
            # inside the run: no run may swap the folder meanwhile, and the manifest keeps
            # listing the page with its new hash (so `run --force` may still replace the folder)
            with lock_out(target):
                write_explorer(payload, dest)
                list_output(target, dest)
        else:
            write_explorer(payload, dest)
    else:
        import shutil
        import tempfile

        from mapdrift.atomic import atomic_path
        from mapdrift.brief.explorer import payload_from_state, write_explorer
        from mapdrift.config import load_config
        from mapdrift.pipeline import STEPS, run

        def _step_explorer(state):  # type: ignore[no-untyped-def]
            path = write_explorer(
                payload_from_state(state, raster_px=raster_px), state.path("explorer.html")
            )
            return f"explorer.html ({path.stat().st_size / 1e6:.2f} MB)"

        cfg = load_config(target)
        steps = [s for s in STEPS if s[0] in EXPLORE_STEPS] + [("explorer", _step_explorer)]
        dest.parent.mkdir(parents=True, exist_ok=True)
        with tempfile.TemporaryDirectory(dir=dest.parent, prefix=".explore-") as tmp:
            result = run(cfg, out=Path(tmp) / "run", steps=steps, progress=echo)
            with atomic_path(dest) as part:
                shutil.copyfile(result.out / "explorer.html", part)
    size = dest.stat().st_size
    echo(f"wrote {dest} ({size / 1e6:.2f} MB); open it in a browser (works offline)")
