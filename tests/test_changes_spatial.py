"""Spatially conditioned transitions: a brute-force loop and PySAL's US income example."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import scipy.sparse as sp
import shapely

from mapdrift.breaks import Breaks, Classes, classify, fit_breaks
from mapdrift.changes import (
    ChangeOptions,
    analyse_changes,
    count_transitions,
    relative_panel,
    spatial_markov,
)
from mapdrift.panel import Panel
from mapdrift.weights import SpatialWeights, build_weights


def _grid_panel(n_side=6, n_periods=6, seed=1):
    rng = np.random.default_rng(seed)
    geoms = [
        shapely.box(c * 100.0, r * 100.0, (c + 1) * 100.0, (r + 1) * 100.0)
        for r in range(n_side)
        for c in range(n_side)
    ]
    v = rng.gamma(2.0, 2.0, size=(n_side * n_side, n_periods))
    v[rng.random(v.shape) < 0.08] = np.nan
    return Panel.from_arrays(v, geoms, crs="EPSG:3857", periods=list(range(2010, 2010 + n_periods)))


def test_counts_equal_brute_force_loop():
    panel = _grid_panel()
    classes = classify(panel, "quantile", 4)
    w = build_weights(panel.geometry, "queen")
    res = analyse_changes(panel, classes, ChangeOptions(), weights=w)
    sm = res.spatial
    geoms = list(panel.geometry)
    n, k = panel.n_units, classes.k
    # neighbours by brute force: squares sharing a point (queen contiguity, common practice)
    nbrs = [[j for j in range(n) if j != i and geoms[i].intersects(geoms[j])] for i in range(n)]
    b = classes.breaks[0]
    ref = np.zeros((k, k, k), dtype=np.int64)
    no_lag = 0
    for t in range(panel.n_periods - 1):
        for i in range(n):
            a, z = classes.codes[i, t], classes.codes[i, t + 1]
            if a < 0 or z < 0:
                continue
            vals = [panel.values[j, t] for j in nbrs[i] if not np.isnan(panel.values[j, t])]
            if not vals:
                no_lag += 1
                continue
            c = int(b.classify(np.array([np.mean(vals)]))[0])
            ref[c, a, z] += 1
    np.testing.assert_array_equal(sm.counts, ref)
    assert sm.n_no_lag == no_lag
    # conditioned counts add up to the unconditioned ones less the pairs without a lag
    assert sm.counts.sum() + no_lag == res.transitions.n_pairs
    table = sm.table()
    assert len(table) == k**3 and table["count"].sum() == sm.counts.sum()
    assert "stationary_by_context" in sm.to_dict()


@pytest.fixture(scope="module")
def us_income():
    import libpysal

    df = pd.read_csv(libpysal.examples.get_path("usjoin.csv"))
    years = list(range(1929, 2010))
    values = df[[str(y) for y in years]].to_numpy(float)
    gal = libpysal.io.open(libpysal.examples.get_path("states48.gal")).read()
    gal.transform = "r"
    # the .gal file lists states in the table's row order (ids 0..47)
    assert list(gal.id_order) == [str(i) for i in range(48)]
    w = SpatialWeights(W=sp.csr_matrix(gal.sparse), kind="states48.gal")
    geoms = [shapely.box(i, 0, i + 1, 1) for i in range(48)]  # geometry is not used here
    panel = relative_panel(Panel.from_arrays(values, geoms, periods=years), "mean")
    return panel, w


def test_us_income_manual_cutoffs(us_income):
    # PySAL giddy.markov.Spatial_Markov docstring, case (3): relative per capita income of the
    # 48 states 1929-2009 (libpysal example usjoin.csv, weights states48.gal), cutoffs
    # 0.8, 0.9, 1.0, 1.2 for both the incomes and their spatial lags
    panel, w = us_income
    b = Breaks((0.8, 0.9, 1.0, 1.2, float(np.nanmax(panel.values))), "manual")
    codes = np.column_stack([b.classify(panel.values[:, j]) for j in range(panel.n_periods)])
    classes = Classes(codes=codes, breaks=(b,))
    t = count_transitions(codes, 5, periods=panel.periods)
    sm = spatial_markov(panel.values, classes, w, t.steps, labels=b.labels)
    P = sm.probabilities
    np.testing.assert_allclose(
        P[0][:4],
        [
            [0.96703297, 0.03296703, 0, 0, 0],
            [0.10638298, 0.68085106, 0.21276596, 0, 0],
            [0, 0.14285714, 0.7755102, 0.08163265, 0],
            [0, 0, 0.5, 0.5, 0],
        ],
        atol=1e-8,
    )
    assert np.isnan(P[0][4]).all()  # empty row: no state in class 5 with poorest neighbours
    np.testing.assert_allclose(
        P[3],
        [
            [0.82692308, 0.15384615, 0, 0.01923077, 0],
            [0.0703125, 0.7890625, 0.125, 0.015625, 0],
            [0.00295858, 0.06213018, 0.82248521, 0.10946746, 0.00295858],
            [0, 0.00185529, 0.07606679, 0.88497217, 0.03710575],
            [0, 0, 0, 0.07803468, 0.92196532],
        ],
        atol=1e-8,
    )


def test_us_income_lag_quintiles_test(us_income):
    # same docstring, case (1): pooled quintiles of the incomes and, separately, of their
    # lags; published LR = 170.659, Q = 200.624, dof = 60, and the first conditional matrix
    panel, w = us_income
    classes = classify(panel, "quantile", 5)
    np.testing.assert_allclose(
        classes.breaks[0].edges[:4], [0.83999133, 0.94707545, 1.03242697, 1.14911154], atol=1e-8
    )
    lag_breaks = fit_breaks(w.lag(panel.values), "quantile", 5)
    np.testing.assert_allclose(
        lag_breaks.edges[:4], [0.88973386, 0.95891917, 1.01469758, 1.1183566], atol=1e-8
    )
    t = count_transitions(classes.codes, 5, periods=panel.periods)
    sm = spatial_markov(
        panel.values, classes, w, t.steps, labels=classes.breaks[0].labels, lag_breaks=lag_breaks
    )
    assert f"{sm.test.LR:.3f}" == "170.659"
    assert f"{sm.test.Q:.3f}" == "200.624"
    assert sm.test.df == 60
    np.testing.assert_allclose(
        sm.probabilities[0][0], [0.96341463, 0.0304878, 0.00609756, 0, 0], atol=1e-8
    )


def test_context_independent_vs_dependent():
    # seeded simulation: when the next class follows the neighbours, the test rejects; when it
    # ignores them, it does not
    rng = np.random.default_rng(42)
    n_side, n_p, k = 20, 8, 3
    panel0 = _grid_panel(n_side, n_p, seed=0)
    w = build_weights(panel0.geometry, "queen")
    breaks = Breaks((1.0, 2.0, 3.0), "manual")
    n = n_side * n_side
    for dependent, check in ((True, lambda p: p < 1e-6), (False, lambda p: p > 0.05)):
        v = np.zeros((n, n_p))
        v[:, 0] = rng.integers(0, k, n) + 0.5
        for t in range(n_p - 1):
            if dependent:
                target = np.clip(np.round(w.lag(v[:, t]) - 0.5), 0, k - 1)
                move = rng.random(n) < 0.6
                nxt = np.where(move, target, v[:, t] - 0.5)
            else:
                nxt = np.where(rng.random(n) < 0.6, rng.integers(0, k, n), v[:, t] - 0.5)
            v[:, t + 1] = nxt + 0.5
        codes = np.column_stack([breaks.classify(v[:, j]) for j in range(n_p)])
        classes = Classes(codes=codes, breaks=(breaks,))
        steps = [(j, j + 1) for j in range(n_p - 1)]
        sm = spatial_markov(v, classes, w, steps, labels=breaks.labels)
        assert check(sm.test.p_LR), (dependent, sm.test.p_LR)
