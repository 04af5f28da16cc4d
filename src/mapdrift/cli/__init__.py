"""The ``mapdrift`` command: a thin typer layer over the library.

Each command lives in its own module and registers itself on :data:`app`; commands parse
options, call library functions and print. Errors of the :class:`~mapdrift.errors.MapdriftError`
family become one red line and an exit code (see ``mapdrift.errors.EXIT_CODES``); tracebacks only
with ``--debug``. Importing this package must not import matplotlib, geopandas or esda.
"""

from __future__ import annotations

from mapdrift.cli._app import app, console, main

# Command modules register themselves on `app` when imported.
from mapdrift.cli import check as _check  # noqa: E402,F401  isort: skip
from mapdrift.cli import breaks as _breaks  # noqa: E402,F401  isort: skip
from mapdrift.cli import animate as _animate  # noqa: E402,F401  isort: skip
from mapdrift.cli import changes as _changes  # noqa: E402,F401  isort: skip
from mapdrift.cli import clusters as _clusters  # noqa: E402,F401  isort: skip
from mapdrift.cli import run as _run  # noqa: E402,F401  isort: skip
from mapdrift.cli import demo as _demo  # noqa: E402,F401  isort: skip
from mapdrift.cli import explore as _explore  # noqa: E402,F401  isort: skip

__all__ = ["app", "console", "main"]
