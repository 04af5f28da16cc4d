"""mapdrift: comparable animated choropleths and change detection for values over many periods.

The library works in a notebook as well as behind the ``mapdrift`` command::

    from mapdrift import load_panel, InputSpec, classify
    panel = load_panel(InputSpec(geometry="units.gpkg", table="values.csv", id="unit_id",
                                 period="year", value="rate"))
    classes = classify(panel, scheme="quantile", k=5)

Heavy libraries (geopandas, matplotlib, esda) are imported where they are used, so importing
``mapdrift`` and running ``mapdrift --help`` stay fast.
"""

from __future__ import annotations

import logging
from typing import TYPE_CHECKING, Any

__version__ = "0.1.0"

logging.getLogger(__name__).addHandler(logging.NullHandler())

# Public names, resolved lazily (PEP 562) so that `import mapdrift` imports no heavy library.
_LAZY = {
    "Finding": "mapdrift.findings",
    "Panel": "mapdrift.panel",
    "InputSpec": "mapdrift.panel",
    "load_panel": "mapdrift.panel",
    "Breaks": "mapdrift.breaks",
    "Classes": "mapdrift.breaks",
    "Scheme": "mapdrift.breaks",
    "classify": "mapdrift.breaks",
    "fit_breaks": "mapdrift.breaks",
    "MapdriftError": "mapdrift.errors",
    "InputError": "mapdrift.errors",
}

__all__ = [
    "Breaks",
    "Classes",
    "Finding",
    "InputError",
    "InputSpec",
    "MapdriftError",
    "Panel",
    "Scheme",
    "__version__",
    "classify",
    "fit_breaks",
    "load_panel",
]

if TYPE_CHECKING:
    from mapdrift.breaks import Breaks, Classes, Scheme, classify, fit_breaks
    from mapdrift.errors import InputError, MapdriftError
    from mapdrift.findings import Finding
    from mapdrift.panel import InputSpec, Panel, load_panel


def __getattr__(name: str) -> Any:
    if name in _LAZY:
        import importlib

        return getattr(importlib.import_module(_LAZY[name]), name)
    raise AttributeError(f"module 'mapdrift' has no attribute {name!r}")
