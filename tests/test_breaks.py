"""Class breaks: exact Fisher-Jenks, quantile ties, bases, labels, breaks file."""

from __future__ import annotations

import itertools
import json

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from mapdrift.breaks import (
    PER_PERIOD_WARNING,
    Breaks,
    Scheme,
    classify,
    fisher_jenks,
    fit_breaks,
    format_labels,
    quantile_edges,
)
from mapdrift.errors import ConfigError, InputError
from mapdrift.panel import Panel


def _wss(x: np.ndarray, edges) -> float:
    cls = np.searchsorted(np.asarray(edges, dtype=float), x, side="left")
    return float(sum(((x[cls == c] - x[cls == c].mean()) ** 2).sum() for c in np.unique(cls)))


def _exhaustive_wss(x: np.ndarray, k: int) -> float:
    """Best within-class SS over every split of the sorted distinct values (enumeration)."""
    u = np.unique(x)
    best = np.inf
    for cut in itertools.combinations(range(len(u) - 1), k - 1):
        best = min(best, _wss(x, [u[c] for c in cut] + [u[-1]]))
    return best


def test_fisher_jenks_small_case_by_enumeration():
    # Computed by enumerating every 3-class split of the 9 values (issue's reference case).
    x = np.array([1, 2, 3, 10, 11, 12, 20, 21, 22], dtype=float)
    assert fisher_jenks(x, 3) == [3.0, 12.0, 22.0]
    assert _wss(x, [3, 12, 22]) == pytest.approx(_exhaustive_wss(x, 3))


def test_fisher_jenks_optimal_on_random_small_inputs():
    # Optimality against exhaustive search (Fisher 1958: the partition minimises within-class SS).
    rng = np.random.default_rng(7)
    for _ in range(150):
        n = int(rng.integers(5, 12))
        x = np.round(rng.gamma(2.0, 3.0, n), int(rng.integers(0, 3)))
        k = int(rng.integers(2, 5))
        if len(np.unique(x)) <= k:
            continue
        edges = fisher_jenks(x, k)
        assert _wss(x, edges) == pytest.approx(_exhaustive_wss(x, k), rel=1e-9, abs=1e-9)


def test_fisher_jenks_shift_invariant():
    # Adding a constant moves every optimal edge by that constant (SS is translation invariant).
    rng = np.random.default_rng(3)
    for _ in range(30):
        x = np.round(rng.normal(10, 4, 60), 2)
        for c in (1000.0, -7.25, 1e6):
            a = np.array(fisher_jenks(x, 5))
            b = np.array(fisher_jenks(x + c, 5)) - c
            np.testing.assert_allclose(a, b, atol=1e-6)


def test_natural_breaks_large_input_is_sampled_and_noted():
    x = np.random.default_rng(0).gamma(2, 3, 25_000)
    b = fit_breaks(x, "natural-breaks", 5)
    assert b.k == 5 and b.edges[-1] == pytest.approx(x.max())
    assert any("seeded sample" in n for n in b.notes)
    # the sample is seeded: refitting gives the same breaks (an unseeded sample fails here)
    assert fit_breaks(x, "natural-breaks", 5).edges == b.edges


def test_quantile_edges_are_type7_quantiles():
    # Hyndman & Fan (1996) type 7 is numpy's default "linear" method: compare with numpy.
    x = np.random.default_rng(1).normal(size=101)
    assert quantile_edges(x, 4)[:3] == pytest.approx(np.quantile(x, [0.25, 0.5, 0.75]).tolist())


def test_quantile_matches_mapclassify_bins():
    # Reference library: mapclassify.Quantiles bins on tie-free data.
    import mapclassify

    x = np.random.default_rng(2).gamma(2.0, 2.0, 200)
    ours = fit_breaks(x, "quantile", 5).edges
    np.testing.assert_allclose(ours, mapclassify.Quantiles(x, k=5).bins)


def test_quantile_ties_collapse_classes():
    # Equal values share a class (common practice; cartography texts on class intervals).
    # 55 values, 30 of them equal and spanning Q1 and the median -> 3 classes, not 4.
    x = np.concatenate([np.arange(10.0), np.full(30, 50.0), np.arange(60.0, 75.0)])
    assert len(x) == 55
    b = fit_breaks(x, "quantile", 4)
    assert b.k == 3
    assert b.requested_k == 4
    assert any("collapsed 4 requested classes to 3" in n for n in b.notes)
    codes = b.classify(x)
    assert len(set(codes[x == 50.0])) == 1


def test_equal_interval_matches_mapclassify():
    import mapclassify

    x = np.random.default_rng(4).uniform(0, 37, 80)
    np.testing.assert_allclose(
        fit_breaks(x, "equal-interval", 4).edges, mapclassify.EqualInterval(x, k=4).bins
    )


def test_std_dev_centred_on_mean_and_diverging():
    x = np.random.default_rng(5).normal(10, 2, 1000)
    b = fit_breaks(x, "std-dev", 4)
    assert b.center == pytest.approx(x.mean())
    assert b.diverging
    assert min(abs(e - x.mean()) for e in b.edges) < 1e-9  # even k: an edge at the mean


def test_head_tail_on_data_without_a_heavy_tail_warns(tmp_path):
    # Uniform values: the head above the mean holds half of them (> 40 %), so head/tail breaks
    # (Jiang 2013) stop at once with one class; that gets a warning, not a silent one-colour map.
    from conftest import grid_layer
    from mapdrift.panel import Panel

    gdf = grid_layer(4)
    values = np.linspace(1.0, 32.0, 32).reshape(16, 2)
    panel = Panel.from_arrays(values, gdf.geometry, units=gdf["unit_id"], periods=(2020, 2021))
    c = classify(panel, "head-tail", 5)
    assert c.k == 1
    assert "breaks-head-tail-single" in {f.code for f in c.findings if f.level == "warning"}
    assert "breaks-head-tail-single" not in {f.code for f in classify(panel, "quantile").findings}


def test_head_tail_on_heavy_tail():
    # Jiang (2013) head/tail breaks: each edge is the mean of the previous head.
    x = np.array([1.0] * 50 + [2.0] * 20 + [5.0] * 8 + [20.0] * 3 + [100.0])
    b = fit_breaks(x, "head-tail", 6)
    m1 = x.mean()
    assert b.edges[0] == pytest.approx(m1)
    assert b.edges[1] == pytest.approx(x[x > m1].mean())


def test_manual_and_labels_right_closed():
    b = fit_breaks(np.array([0, 1, 3, 7, 12.0]), "manual", manual_values=[0, 2, 5, 10])
    assert b.edges == (0.0, 2.0, 5.0, 10.0, 12.0)
    assert b.labels == ("<= 0", "0 - 2", "2 - 5", "5 - 10", "> 10")
    np.testing.assert_array_equal(b.classify(np.array([0, 2, 2.0001, 10, 11])), [0, 1, 2, 3, 4])


def test_label_decimals_tell_breaks_apart():
    assert format_labels([2.34, 2.38, 5.0]) == ("<= 2.34", "2.34 - 2.38", "> 2.38")
    assert format_labels([1.5, 4.25, 9.0]) == ("<= 1.50", "1.50 - 4.25", "> 4.25")


def test_k_out_of_range_and_bad_scheme():
    with pytest.raises(ConfigError, match="choose k from 2 to 9"):
        fit_breaks(np.arange(10.0), "quantile", 12)
    with pytest.raises(ConfigError, match="must be one of quantile, natural-breaks"):
        Scheme.parse("jenks")


def test_isolate_zeros():
    x = np.array([0.0] * 30 + list(np.linspace(1, 20, 70)))
    b = fit_breaks(x, "quantile", 4, isolate_zeros=True)
    assert b.edges[0] == 0.0 and b.k == 4
    assert (b.classify(x)[:30] == 0).all() and (b.classify(x)[30:] > 0).all()


def _panel(values, periods=(2019, 2020, 2021)):
    from shapely.geometry import box

    n = len(values)
    return Panel.from_arrays(
        np.asarray(values, float), [box(i, 0, i + 1, 1) for i in range(n)], periods=periods
    )


def test_bases_pooled_per_period_reference_and_file(tmp_path):
    v = np.array([[1, 10, 20], [2, 11, 21], [3, 12, 22], [4, 13, 23], [np.nan, 14, 24]], float)
    p = _panel(v)
    pooled = classify(p, "equal-interval", 3)
    assert not pooled.per_period and pooled.warning is None
    assert (pooled.codes[4, 0] == -1) and pooled.codes[0, 0] == 0 and pooled.codes[4, 2] == 2
    per = classify(p, "equal-interval", 3, basis="per-period")
    assert per.per_period and per.warning == PER_PERIOD_WARNING
    assert any(f.code == "breaks-per-period" for f in per.findings)
    ref = classify(p, "quantile", 3, basis="period:2020")
    assert ref.breaks[0].basis == "period:2020"
    assert any(f.code == "breaks-reference-range" for f in ref.findings)
    path = pooled.breaks[0].save(tmp_path / "breaks.json")
    data = json.loads(path.read_text())
    assert data["format"] == "mapdrift-breaks/1" and data["k"] == 3
    reused = classify(_panel(v * 2), breaks_file=path)
    assert reused.breaks[0].edges == pooled.breaks[0].edges
    assert any(f.code == "breaks-out-of-range" for f in reused.findings)
    assert (reused.codes[:, 2] == 2).all()  # above the old range: open-ended last class


def test_reused_breaks_of_other_data_are_questioned(tmp_path):
    # a new user's report: last year's breaks.json of another rate was accepted without a word,
    # leaving classes empty in every period (common practice, no source: say so, never refit)
    from dataclasses import replace

    rng = np.random.default_rng(3)
    v = rng.uniform(0, 30, size=(40, 3))
    own = _panel(v)
    own = replace(own, meta=replace(own.meta, variable="Filing rate"))
    path = classify(own, "quantile", 5).breaks[0].save(tmp_path / "breaks.json")
    same = classify(own, breaks_file=path)
    codes = {f.code for f in same.findings}
    assert not codes & {"breaks-other-variable", "breaks-empty-classes"}
    other = _panel(v / 10)  # another rate: all below 3, in the lowest classes
    other = replace(other, meta=replace(other.meta, variable="SID rate"))
    res = classify(other, breaks_file=path)
    found = {f.code: f.message for f in res.findings}
    assert "'Filing rate'" in found["breaks-other-variable"]
    assert "'SID rate'" in found["breaks-other-variable"]
    assert "classes of the reused breaks" in found["breaks-empty-classes"]
    assert res.breaks[0].edges == same.breaks[0].edges  # reused as asked, never refitted


def test_bad_breaks_file(tmp_path):
    (tmp_path / "b.json").write_text('{"edges": [1, 2]}')
    with pytest.raises(InputError, match="not a mapdrift breaks file"):
        Breaks.load(tmp_path / "b.json")
    with pytest.raises(ConfigError, match="period:<period>"):
        classify(_panel(np.ones((3, 3))), basis="yearly")


finite = st.floats(min_value=-1e6, max_value=1e6, allow_nan=False, allow_infinity=False)


@settings(max_examples=60, deadline=None)
@given(
    st.lists(finite, min_size=3, max_size=60),
    st.sampled_from(["quantile", "natural-breaks", "equal-interval", "std-dev", "head-tail"]),
    st.integers(2, 7),
)
def test_property_one_class_each_and_monotone(xs, scheme, k):
    # Properties of any classification (common practice, no source): every valid value lands in
    # exactly one class in range, and classes are monotone in value.
    x = np.array(xs)
    b = fit_breaks(x, scheme, k)
    codes = b.classify(x)
    assert ((codes >= 0) & (codes < b.k)).all()
    order = np.argsort(x, kind="stable")
    assert (np.diff(codes[order]) >= 0).all()
    assert len(b.labels) == b.k


@settings(max_examples=30, deadline=None)
@given(st.lists(st.lists(finite, min_size=3, max_size=3), min_size=3, max_size=20))
def test_property_pooled_breaks_identical_across_periods(rows):
    v = np.array(rows)
    c = classify(_panel(v), "quantile", 4)
    assert len(c.breaks) == 1
    for j in range(3):  # each period classified with the one pooled set
        np.testing.assert_array_equal(c.codes[:, j], c.breaks[0].classify(v[:, j]))


def test_isolated_zero_class_label():
    x = np.array([0.0] * 10 + list(np.linspace(1, 20, 40)))
    b = fit_breaks(x, "quantile", 3, isolate_zeros=True)
    assert b.labels[0] == "exactly 0" and b.labels[1].startswith("0.0 - ")


def test_why_quantile_and_equal_interval_are_not_mapclassify_s():
    # The reason breaks.py gives for its own quantile and equal-interval edges, on two small
    # inputs: mapclassify's edge lands an ulp above a data value that is exactly the quantile
    # (type 7, Hyndman & Fan 1996) or exactly min + 2 * width, so that value changes class.
    import warnings

    import mapclassify

    x = np.array([0.1, 0.2, 0.3, 0.4])
    ours = Breaks(tuple(quantile_edges(x, 9)), "quantile").classify(x)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        theirs = mapclassify.Quantiles(x, k=9).yb
    assert ours.tolist() == [0, 2, 5, 8] and theirs.tolist() == [0, 3, 5, 8]
    x = np.array([0.1, 0.2, 0.3])  # equal intervals of width 0.05: 0.2 is the 2nd upper bound
    ours = fit_breaks(x, "equal-interval", 4)
    assert ours.edges[1] == 0.2 and ours.classify(x).tolist() == [0, 1, 3]
    assert mapclassify.EqualInterval(x, k=4).yb.tolist() == [0, 2, 3]
