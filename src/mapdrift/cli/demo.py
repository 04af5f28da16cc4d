"""``mapdrift demo``: run the whole job on the invented demo county."""

from __future__ import annotations

from pathlib import Path

import typer

from mapdrift.cli._app import command
from mapdrift.cli._print import echo


def demo_config_path() -> Path:
    """The shipped demo config: ``demo_data/demo.toml`` of the source checkout."""
    here = Path(__file__).resolve()
    for parent in here.parents:
        cand = parent / "demo_data" / "demo.toml"
        if cand.exists():
            return cand
    cand = Path.cwd() / "demo_data" / "demo.toml"
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
    """Run every step on the invented demo county (demo_data/demo.toml) into outputs/demo/."""
    from mapdrift.config import load_config
    from mapdrift.pipeline import run

    cfg = load_config(demo_config_path())
    echo(f"mapdrift demo: {cfg.path} -> {out}")
    result = run(cfg, out=out, force=force, progress=echo)
    echo(f"done: {len(result.outputs)} files in {result.out}")
