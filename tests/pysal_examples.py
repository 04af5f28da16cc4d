"""Paths to open datasets shipped inside libpysal, for tests; skip clearly when absent.

The files are read from the installed package (no download): libpysal bundles ``us_income``
(per capita income of the 48 contiguous US states, 1929-2009, from the US Bureau of Economic
Analysis; ``us48.shp`` polygons and ``usjoin.csv``, one column per year).
"""

from __future__ import annotations

from pathlib import Path

import pytest


def example_dir(name: str, *files: str) -> Path:
    """The folder of libpysal's bundled example ``name``; skip the test when it is missing."""
    try:
        import libpysal
    except ImportError:  # pragma: no cover
        pytest.skip("libpysal is not installed, so its bundled example data are not available")
    folder = Path(libpysal.__file__).parent / "examples" / name
    missing = [f for f in files if not (folder / f).exists()]
    if missing:
        pytest.skip(f"libpysal's bundled example {name!r} lacks {', '.join(missing)} (offline)")
    return folder


def us_income() -> Path:
    """libpysal's us_income example (us48.shp + usjoin.csv)."""
    return example_dir("us_income", "us48.shp", "us48.dbf", "us48.shx", "usjoin.csv")
