"""The Python API: the README's example runs as a doctest, results print short, convert to
GeoDataFrames, public names resolve lazily, and a report is built without the pipeline."""

from __future__ import annotations

import doctest
import re
import subprocess
import sys

import numpy as np
import pytest

from conftest import ROOT, grid_layer

FLAGS = doctest.ELLIPSIS | doctest.NORMALIZE_WHITESPACE


def _readme_example() -> str:
    text = (ROOT / "README.md").read_text(encoding="utf-8")
    section = text.split("## From Python", 1)[1].split("\n## ", 1)[0]
    blocks = re.findall(r"```pycon\n(.*?)```", section, flags=re.S)
    assert len(blocks) == 1, "the From Python section has one pycon block"
    return blocks[0]


def test_readme_from_python_example_runs():
    parser = doctest.DocTestParser()
    test = parser.get_doctest(_readme_example(), {}, "README.md: From Python", "README.md", 0)
    assert len(test.examples) > 10
    runner = doctest.DocTestRunner(optionflags=FLAGS)
    runner.run(test)
    result = runner.summarize(verbose=False)
    assert result.failed == 0, f"{result.failed} README examples failed (output above)"


@pytest.mark.parametrize("module", ["mapdrift.breaks"])
def test_docstring_examples(module):
    import importlib

    result = doctest.testmod(importlib.import_module(module), optionflags=FLAGS)
    assert result.attempted > 0 and result.failed == 0


def test_public_names_resolve_and_stay_lazy():
    code = (
        "import sys, mapdrift\n"
        "heavy = ('matplotlib', 'geopandas', 'pandas', 'esda', 'libpysal', 'mapclassify')\n"
        "print(sorted(m for m in heavy if m in sys.modules))\n"
        "missing = [n for n in mapdrift.__all__ if not hasattr(mapdrift, n)]\n"
        "print(missing)"
    )
    out = subprocess.run(
        [sys.executable, "-c", code], capture_output=True, text=True, check=True
    ).stdout.splitlines()
    assert out == ["[]", "[]"]


def _tiny():
    import mapdrift

    gdf = grid_layer(4)
    rng = np.random.default_rng(3)
    values = rng.gamma(2.0, 5.0, size=(16, 6))
    values[5, 2] = np.nan
    panel = mapdrift.Panel.from_arrays(
        values, gdf.geometry, units=gdf["unit_id"], periods=range(2015, 2021), crs=gdf.crs
    )
    return panel, mapdrift.classify(panel, "quantile", 4)


def test_reprs_are_a_few_short_lines():
    import mapdrift

    panel, classes = _tiny()
    changes = mapdrift.analyse_changes(panel, classes)
    clusters = mapdrift.analyse_clusters(panel, classes, mapdrift.ClusterOptions(permutations=99))
    for obj in (panel, classes, classes.breaks[0], changes, clusters, clusters.weights):
        text = repr(obj)
        assert text.startswith(f"<{type(obj).__name__}: ")
        assert len(text) < 420 and text.count("\n") <= 5, text
    assert "16 units x 6 periods (2015 to 2020)" in repr(panel)
    assert "quantile, 4 classes, pooled over 2015-2020" in repr(classes)


def test_to_geodataframe_aligns_units_and_keeps_crs():
    import mapdrift

    panel, classes = _tiny()
    gdf = panel.to_geodataframe()
    assert list(gdf["unit"]) == list(panel.units) and gdf.crs == panel.geometry.crs
    np.testing.assert_array_equal(gdf["2017"].to_numpy(), panel.values[:, 2])
    cls = classes.to_geodataframe(panel)
    assert cls["class_2017"].isna().sum() == 1 and cls["class_2015"].min() == 1
    changes = mapdrift.analyse_changes(panel, classes)
    ch = changes.to_geodataframe(panel)
    assert list(ch["unit"]) == list(panel.units)
    assert ch.geometry.equals(panel.geometry.reset_index(drop=True))
    # a table in another order is matched by unit ID, not by position
    from mapdrift.panel import with_geometry

    shuffled = changes.units.iloc[::-1]
    again = with_geometry(shuffled, panel)
    assert list(again["unit"]) == list(panel.units)
    assert again.geometry.equals(ch.geometry)


def test_brief_from_notebook_results_without_a_run(tmp_path):
    import mapdrift
    from mapdrift.brief.assemble import build_slides

    panel, classes = _tiny()
    changes = mapdrift.analyse_changes(panel, classes)
    brief = mapdrift.build_brief(mapdrift.BriefInputs(panel, classes, changes, folder=tmp_path))
    keys = [s.key for s in brief.sections]
    assert "change" in keys and "clusters" not in keys  # no cluster result given
    assert dict(brief.headline)["units with no data at all (kept on the map)"] == "0"
    slides = build_slides(mapdrift.BriefInputs(panel, classes, changes, folder=tmp_path), brief)
    assert slides[0].key == "title" and slides[-1].key == "data-notes"
    html, _ = mapdrift.write_report(brief, tmp_path / "r.html", tmp_path / "r.md", root=tmp_path)
    assert "Which units changed" in html.read_text(encoding="utf-8")


def test_all_lists_exactly_the_lazy_names():
    import mapdrift

    assert sorted(mapdrift.__all__) == sorted(["__version__", *mapdrift._LAZY])
