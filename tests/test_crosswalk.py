"""Crosswalk: values moved onto a new boundary vintage (allocation arithmetic by hand)."""

from __future__ import annotations

import numpy as np
import pytest

from conftest import grid_layer
from mapdrift.panel import InputSpec, load_panel


def test_counts_allocated_and_splits_merges_reported(layer_file, table_file):
    layer = layer_file(gdf=grid_layer(2, ids=["A", "B", "C", "D"]))
    rows = [
        {"unit_id": "1", "year": 2020, "n": 10, "base": 1000},  # split 0.5/0.5 into A and B
        {"unit_id": "2", "year": 2020, "n": 4, "base": 200},  # merged with 3 into C
        {"unit_id": "3", "year": 2020, "n": 6, "base": 300},
        {"unit_id": "D", "year": 2020, "n": 1, "base": 100},  # not in the crosswalk: kept
    ]
    xw = table_file("from,to,weight\n1,A,0.5\n1,B,0.5\n2,C,1\n3,C,1\n", "xw.csv")
    p = load_panel(
        InputSpec(
            geometry=layer,
            table=table_file(rows),
            id="unit_id",
            period="year",
            numerator="n",
            denominator="base",
            crosswalk=xw,
        )
    )
    # by hand: A = 5/500, B = 5/500, C = (4+6)/(200+300), D = 1/100, all per 1,000
    np.testing.assert_allclose(p.values[:, 0], [10.0, 10.0, 20.0, 10.0])
    codes = {f.code: f for f in p.findings}
    assert codes["crosswalk-split"].units == ("1",)
    assert codes["crosswalk-merged"].units == ("C",)
    assert codes["crosswalk-passthrough"].units == ("D",)


def test_rates_averaged_with_warning(layer_file, table_file):
    layer = layer_file(gdf=grid_layer(2, ids=["A", "B", "C", "D"]))
    rows = [
        {"unit_id": u, "year": 2020, "rate": v}
        for u, v in [("1", 2.0), ("2", 4.0), ("3", 8.0), ("D", 1.0)]
    ]
    xw = table_file("from,to,weight\n1,A,1\n1,B,1\n2,C,3\n3,C,1\n", "xw.csv")
    p = load_panel(
        InputSpec(
            geometry=layer,
            table=table_file(rows),
            id="unit_id",
            period="year",
            value="rate",
            crosswalk=xw,
        )
    )
    assert p.values[2, 0] == pytest.approx((3 * 4.0 + 1 * 8.0) / 4)
    assert next(f for f in p.findings if f.code == "crosswalk-merged").level == "warning"
