"""``mapdrift demo``: run the whole job on the invented demo county."""

from __future__ import annotations

from pathlib import Path

import typer

from mapdrift.cli._app import command


def demo_config_path() -> Path:
    """The shipped demo config: ``demo_data/demo.toml`` of the source checkout."""
    here = Path(__file__).resolve()
    for parent in (*here.parents, Path.cwd()):
        cand = parent / "demo_data" / "demo.toml"
        if cand.exists():
            return cand
    from mapdrift.errors import InputError

    raise InputError(
        "demo_data/demo.toml not found; run `mapdrift demo` from the mapdrift checkout"
    )


@command("demo")
def demo(
    out: Path = typer.Option(Path("outputs/demo"), "--out", help="Output folder."),
    force: bool = typer.Option(False, "--force", help="Replace an earlier demo run in --out."),
) -> None:
    """Run every step on the invented demo county (demo_data/demo.toml) into outputs/demo/.

    Same as `mapdrift run demo_data/demo.toml --out outputs/demo`.
    """
    from mapdrift.cli.run import run_config
    from mapdrift.config import load_config

    run_config(load_config(demo_config_path()), out=out, force=force)
