"""``mapdrift demo``: run the whole job on the invented demo county."""

from __future__ import annotations

from pathlib import Path

import typer

from mapdrift.cli._app import command


def demo_config_path(data: Path = Path("demo_data")) -> Path:
    """The demo config: ``demo_data/demo.toml`` of a source checkout, else ``data/demo.toml``,
    generating the invented county there first (from an installed wheel there is no checkout;
    the generator is deterministic, so the files equal the checkout's)."""
    here = Path(__file__).resolve()
    for parent in (*here.parents, Path.cwd()):
        cand = parent / "demo_data" / "demo.toml"
        if cand.exists():
            return cand
    cand = data / "demo.toml"
    if cand.exists():
        return cand
    if data.exists() and any(data.iterdir()):
        from mapdrift.errors import OutputExistsError

        raise OutputExistsError(
            f"{data} holds other files and no demo.toml; pass --data EMPTY_FOLDER for the demo "
            "county's files"
        )
    from mapdrift.cli._print import echo
    from mapdrift.demo import generate

    files = generate(data)
    echo(f"demo data: the invented county generated in {data}/ (see {files.readme.name} there)")
    return files.config


@command("demo")
def demo(
    out: Path = typer.Option(Path("outputs/demo"), "--out", help="Output folder."),
    force: bool = typer.Option(False, "--force", help="Replace an earlier demo run in --out."),
    data: Path = typer.Option(
        Path("demo_data"),
        "--data",
        help="Where to generate the demo county's files when not run from a checkout.",
    ),
) -> None:
    """Run every step on the invented demo county (demo_data/demo.toml) into outputs/demo/.

    Same as `mapdrift run demo_data/demo.toml --out outputs/demo`. Outside a source checkout
    the county is generated first into demo_data/ (about a second; deterministic).
    """
    from mapdrift.cli.run import run_config
    from mapdrift.config import load_config

    run_config(load_config(demo_config_path(data)), out=out, force=force)
