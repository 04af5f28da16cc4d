"""Empirical Bayes rate smoothing: exact hand check, Marshall's negative-variance rule, esda."""

from __future__ import annotations

import warnings

import numpy as np
import pytest
import scipy.sparse as sp

from mapdrift.errors import ConfigError
from mapdrift.rates import eb_global, eb_spatial, smooth, smooth_panel

EVENTS = np.array([1, 4, 16, 3.0])
BASES = np.array([10, 20, 40, 30.0])


def test_global_eb_exact():
    # By hand (Marshall 1991 moments): b = 24/100 = 0.24, s^2 = 0.0184, a = 0.0184 - 0.24/25
    # = 0.0088 -> smoothed 83/410, 29/130, 62/185, 1/6.
    r, b, C, zeroed = eb_global(EVENTS, BASES)
    assert b == pytest.approx(0.24)
    np.testing.assert_allclose(r, [83 / 410, 29 / 130, 62 / 185, 1 / 6])
    assert not zeroed


def test_global_eb_matches_esda_when_variance_positive():
    # Reference: esda.smoothing.Empirical_Bayes (agrees whenever the variance estimate is > 0).
    from esda.smoothing import Empirical_Bayes

    rng = np.random.default_rng(3)
    bases = rng.integers(20, 2000, size=60).astype(float)
    events = rng.poisson(bases * rng.gamma(4, 0.01, size=60)).astype(float)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        ref = Empirical_Bayes(events, bases).r.ravel()
    r, _, _, zeroed = eb_global(events, bases)
    assert not zeroed
    np.testing.assert_allclose(r, ref)


def test_negative_variance_shrinks_to_prior():
    # Marshall (1991): a negative between-area variance is set to 0 -> every rate = prior mean.
    # Events exactly proportional to small bases: s^2 = 0 < b / nbar.
    events = np.array([1, 2, 3, 4.0])
    bases = np.array([10, 20, 30, 40.0])
    r, b, C, zeroed = eb_global(events, bases)
    assert zeroed
    np.testing.assert_allclose(r, b)
    np.testing.assert_allclose(C, 0.0)


def test_spatial_eb_full_neighbourhood_equals_global():
    # When every unit neighbours every other, each neighbourhood is the whole map.
    W = sp.csr_matrix(np.ones((4, 4)) - np.eye(4))
    r, b, C, zeroed = eb_spatial(EVENTS, BASES, W)
    np.testing.assert_allclose(r, [83 / 410, 29 / 130, 62 / 185, 1 / 6])
    np.testing.assert_allclose(b, 0.24)


def test_spatial_eb_two_pairs_by_hand():
    # Neighbourhoods {0,1} and {2,3}: pair {0,1}: b = 5/30, s^2 = (10(0.1-1/6)^2 +
    # 20(0.2-1/6)^2)/30 = 1/15 * (1/30), a = s^2 - b/15 < 0 -> zeroed, both = 1/6.
    W = sp.csr_matrix(np.array([[0, 1, 0, 0], [1, 0, 0, 0], [0, 0, 0, 1], [0, 0, 1, 0.0]]))
    r, b, C, zeroed = eb_spatial(EVENTS, BASES, W)
    np.testing.assert_allclose(r[:2], 1 / 6)
    assert zeroed[:2].all()
    # pair {2,3}: b = 19/70, s^2 = (40(0.4-b)^2 + 30(0.1-b)^2)/70, nbar = 35
    b23 = 19 / 70
    s2 = (40 * (0.4 - b23) ** 2 + 30 * (0.1 - b23) ** 2) / 70
    a = s2 - b23 / 35
    assert r[2] == pytest.approx(b23 + a / (a + b23 / 40) * (0.4 - b23))


def test_missing_and_zero_base_stay_nan():
    ev = np.array([[1, np.nan], [4, 2], [16, 5], [3, 1.0]])
    ba = np.array([[10, 10], [20, 0], [40, 40], [30, 30.0]])
    res = smooth(ev, ba, "eb")
    assert np.isnan(res.rates[0, 1]) and np.isnan(res.rates[1, 1])
    np.testing.assert_allclose(res.rates[:, 0], [83 / 410, 29 / 130, 62 / 185, 1 / 6])


def test_smooth_panel_keeps_per_and_notes():
    from shapely.geometry import box

    from mapdrift.panel import Panel

    geoms = [box(i, 0, i + 1, 1) for i in range(4)]
    p = Panel.from_arrays(
        (EVENTS / BASES * 1000)[:, None], geoms, crs="EPSG:3857",
        numerator=EVENTS[:, None], denominator=BASES[:, None],
    )  # fmt: skip
    out = smooth_panel(p, "eb")
    np.testing.assert_allclose(
        out.values[:, 0], np.array([83 / 410, 29 / 130, 62 / 185, 1 / 6]) * 1000
    )
    assert out.findings[-1].code == "rates-smoothed-eb"
    with pytest.raises(ConfigError, match="--numerator"):
        smooth_panel(Panel.from_arrays(np.ones((4, 1)), geoms, crs="EPSG:3857"), "eb")


def test_bad_method():
    with pytest.raises(ConfigError, match="--smooth"):
        smooth(EVENTS, BASES, "loess")
    with pytest.raises(ConfigError, match="spatial weights"):
        smooth(EVENTS, BASES, "spatial-eb")


def test_spatial_eb_matches_esda_on_st_louis_homicides():
    # Reference: esda.smoothing.Spatial_Empirical_Bayes (which, like us, sets a negative
    # between-area variance to zero) on the St Louis homicide counts and populations bundled
    # with libpysal (stl_hom, 1979-84), neighbours from the bundled stl.gal.
    import libpysal
    import pandas as pd
    from esda.smoothing import Spatial_Empirical_Bayes
    from libpysal import examples

    df = pd.read_csv(examples.get_path("stl_hom.csv"))
    e, b = df["HC7984"].to_numpy(float), df["PO7984"].to_numpy(float)
    w = libpysal.io.open(examples.get_path("stl.gal")).read()
    ref = Spatial_Empirical_Bayes(e, b, w).r.ravel()
    r, _, _, zeroed = eb_spatial(e, b, w.sparse)  # stl.gal lists the rows in table order
    np.testing.assert_allclose(r, ref, rtol=1e-10)
    assert zeroed.any()  # the case where the two conventions could differ does occur
