"""Transition heatmap and class flow charts: real files, the numbers drawn, empty rows shown."""

from __future__ import annotations

import matplotlib
import numpy as np
from PIL import Image

from mapdrift.render.transition_charts import class_flow, transition_heatmap

COUNTS = np.array([[40, 9, 1], [0, 0, 0], [2, 8, 30]])
LABELS = ["<= 2", "2 - 5", "> 5"]
COLOURS = ["#edf8b1", "#7fcdbb", "#2c7fb8"]


def _svg_text(path):
    return path.read_text(encoding="utf-8")


def test_heatmap_png_size(tmp_path):
    out = transition_heatmap(COUNTS, LABELS, tmp_path / "heat.png", size=(800, 450))
    with Image.open(out) as im:
        assert im.format == "PNG" and im.size == (800, 450)
    assert not list(tmp_path.glob(".heat*"))  # atomic write left no temporary file


def test_heatmap_counts_shares_and_empty_row(tmp_path):
    # text kept as text in SVG so the drawn numbers can be read back (matplotlib rcParam)
    with matplotlib.rc_context({"svg.fonttype": "none"}):
        out = transition_heatmap(
            COUNTS, LABELS, tmp_path / "heat.svg", title="T", notice="Classes differ by period"
        )
    svg = _svg_text(out)
    for text in (">40<", ">9<", ">30<", "80%", "75%", "none of the units started in this class"):
        assert text in svg, text
    assert "Classes differ by period" in svg
    assert "(0)" in svg  # the empty row's total


def test_flow_shares(tmp_path):
    with matplotlib.rc_context({"svg.fonttype": "none"}):
        out = class_flow(
            COUNTS, LABELS, COLOURS, tmp_path / "flow.svg", first_label="2010", last_label="2020"
        )
    svg = _svg_text(out)
    # 50 of 90 units start in class 1 (56 %); 42 end in class 1 (47 %); 70 stayed (78 %)
    assert "56%" in svg and "47%" in svg
    assert "90 units with data in both periods; 78% ended in the class they started in" in svg
    assert "2010" in svg and "2020" in svg


def test_flow_pdf_and_nothing_to_draw(tmp_path):
    out = class_flow(
        np.zeros((3, 3)), LABELS, COLOURS, tmp_path / "flow.pdf", first_label="a", last_label="b"
    )
    assert out.read_bytes()[:5] == b"%PDF-"
