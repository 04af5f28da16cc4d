"""mapdrift: comparable animated choropleths and change detection for values over many periods.

The library works in a notebook as well as behind the ``mapdrift`` command (the README's
"From Python" section is a runnable, tested example)::

    import mapdrift
    panel = mapdrift.load_panel(mapdrift.InputSpec(geometry="units.gpkg", table="values.csv",
                                                   id="unit_id", period="year", value="rate"))
    classes = mapdrift.classify(panel, "quantile", 5)
    changes = mapdrift.analyse_changes(panel, classes)
    clusters = mapdrift.analyse_clusters(panel, classes)
    changes.to_geodataframe(panel)     # one row per unit, with its polygon

Every public name below is resolved lazily (PEP 562): ``import mapdrift`` and ``mapdrift
--help`` import no heavy library (geopandas, matplotlib, pandas); each name's module is imported
the first time the name is used.
"""

from __future__ import annotations

import logging
from typing import TYPE_CHECKING, Any

__version__ = "0.1.0"

logging.getLogger(__name__).addHandler(logging.NullHandler())

# Public name -> the module that defines it.
_LAZY = {
    # data
    "InputSpec": "mapdrift.panel",
    "Panel": "mapdrift.panel",
    "load_panel": "mapdrift.panel",
    "Finding": "mapdrift.findings",
    # classes
    "Breaks": "mapdrift.breaks",
    "Classes": "mapdrift.breaks",
    "Scheme": "mapdrift.breaks",
    "classify": "mapdrift.breaks",
    "fit_breaks": "mapdrift.breaks",
    "colours_for": "mapdrift.palettes",
    # analyses
    "ChangeOptions": "mapdrift.changes",
    "ChangeResult": "mapdrift.changes",
    "analyse_changes": "mapdrift.changes",
    "ClusterOptions": "mapdrift.clusters",
    "ClusterResult": "mapdrift.clusters",
    "analyse_clusters": "mapdrift.clusters",
    "SpatialWeights": "mapdrift.weights",
    "build_weights": "mapdrift.weights",
    "smooth_panel": "mapdrift.rates",
    # briefing and the whole job
    "BriefInputs": "mapdrift.brief.inputs",
    "build_brief": "mapdrift.brief.assemble",
    "write_report": "mapdrift.brief.report",
    "Config": "mapdrift.config",
    "load_config": "mapdrift.config",
    "RunResult": "mapdrift.pipeline",
    "run": "mapdrift.pipeline",
    # errors
    "MapdriftError": "mapdrift.errors",
    "InputError": "mapdrift.errors",
    "ConfigError": "mapdrift.errors",
}

__all__ = [
    "Breaks",
    "BriefInputs",
    "ChangeOptions",
    "ChangeResult",
    "Classes",
    "ClusterOptions",
    "ClusterResult",
    "Config",
    "ConfigError",
    "Finding",
    "InputError",
    "InputSpec",
    "MapdriftError",
    "Panel",
    "RunResult",
    "Scheme",
    "SpatialWeights",
    "__version__",
    "analyse_changes",
    "analyse_clusters",
    "build_brief",
    "build_weights",
    "classify",
    "colours_for",
    "fit_breaks",
    "load_config",
    "load_panel",
    "run",
    "smooth_panel",
    "write_report",
]

if TYPE_CHECKING:
    from mapdrift.breaks import Breaks, Classes, Scheme, classify, fit_breaks
    from mapdrift.brief.assemble import build_brief
    from mapdrift.brief.inputs import BriefInputs
    from mapdrift.brief.report import write_report
    from mapdrift.changes import ChangeOptions, ChangeResult, analyse_changes
    from mapdrift.clusters import ClusterOptions, ClusterResult, analyse_clusters
    from mapdrift.config import Config, load_config
    from mapdrift.errors import ConfigError, InputError, MapdriftError
    from mapdrift.findings import Finding
    from mapdrift.palettes import colours_for
    from mapdrift.panel import InputSpec, Panel, load_panel
    from mapdrift.pipeline import RunResult, run
    from mapdrift.rates import smooth_panel
    from mapdrift.weights import SpatialWeights, build_weights


def __getattr__(name: str) -> Any:
    if name in _LAZY:
        import importlib

        value = getattr(importlib.import_module(_LAZY[name]), name)
        globals()[name] = value  # later look-ups skip this function
        return value
    raise AttributeError(f"module 'mapdrift' has no attribute {name!r}")


def __dir__() -> list[str]:
    return sorted(set(globals()) | set(__all__))
