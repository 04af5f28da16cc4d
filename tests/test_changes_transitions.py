"""Transition counting: brute-force checks, gaps, missing cells, and PySAL's US income example."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
import shapely

from mapdrift.breaks import classify
from mapdrift.changes import count_transitions, markov_summary, relative_panel
from mapdrift.changes.transitions import adjacent_steps, row_probabilities
from mapdrift.panel import Panel


def _brute(codes, steps, k):
    m = np.zeros((k, k), dtype=np.int64)
    missing = 0
    for row in codes:
        for a, b in steps:
            if row[a] >= 0 and row[b] >= 0:
                m[row[a], row[b]] += 1
            else:
                missing += 1
    return m, missing


@pytest.fixture
def known_codes():
    rng = np.random.default_rng(11)
    codes = rng.integers(0, 4, size=(60, 7))
    codes[rng.random(codes.shape) < 0.1] = -1
    codes[:, :][codes[:, 0] == 3, 0] = 2  # class 4 never starts in period 1 (a sparser row)
    return codes


def test_counts_equal_brute_force_loop(known_codes):
    periods = list(range(2001, 2008))
    t = count_transitions(known_codes, 4, periods=periods)
    steps = [(j, j + 1) for j in range(6)]
    ref, missing = _brute(known_codes, steps, 4)
    np.testing.assert_array_equal(t.counts, ref)
    assert int(t.n_missing.sum()) == missing
    # sum of counts = number of valid consecutive pairs (common practice, no source)
    valid = ((known_codes[:, :-1] >= 0) & (known_codes[:, 1:] >= 0)).sum()
    assert t.n_pairs == valid
    for s, (a, b) in enumerate(steps):
        np.testing.assert_array_equal(t.by_step[s], _brute(known_codes, [(a, b)], 4)[0])
    np.testing.assert_array_equal(t.first_last, _brute(known_codes, [(0, 6)], 4)[0])


def test_probabilities_sum_to_one_and_empty_rows():
    codes = np.array([[0, 0, 1], [0, 1, 1], [1, 0, 0], [2, -1, 2]])
    t = count_transitions(codes, 4, periods=[1, 2, 3])
    p = t.probabilities
    full = ~t.empty_rows
    np.testing.assert_allclose(p[full].sum(axis=1), 1.0)
    assert t.empty_rows.tolist() == [False, False, True, True]
    assert np.isnan(p[2]).all()
    table = t.probabilities_table()
    assert table.loc[2, "note"].startswith("empty")
    assert table.loc[2, "n_from"] == 0
    np.testing.assert_allclose(row_probabilities(np.zeros((2, 2))), np.full((2, 2), np.nan))


def test_gaps_skipped_unless_bridged():
    # 2016 -> 2018 misses 2017: that step is not counted unless bridge_gaps
    assert adjacent_steps([2015, 2016, 2018, 2019]).tolist() == [True, False, True]
    assert adjacent_steps([2010, 2012, 2014]).tolist() == [True, True]  # biennial: no gap
    q = [pd.Period("2020Q1"), pd.Period("2020Q2"), pd.Period("2020Q4")]
    assert adjacent_steps(q).tolist() == [True, False]
    codes = np.array([[0, 1, 2, 2], [1, 1, 0, 0]])
    t = count_transitions(codes, 3, periods=[2015, 2016, 2018, 2019])
    assert t.steps == ((0, 1), (2, 3))
    assert t.skipped_steps == ((1, 2),)
    assert t.n_pairs == 4
    tb = count_transitions(codes, 3, periods=[2015, 2016, 2018, 2019], bridge_gaps=True)
    assert tb.steps == ((0, 1), (1, 2), (2, 3))
    assert tb.gap_steps == (False, True, False)
    assert tb.n_pairs == 6
    long = tb.by_step_table()
    assert len(long) == 3 * 9
    assert long["bridged_gap"].sum() == 9
    assert long["count"].sum() == 6


def _usjoin_panel():
    import libpysal

    df = pd.read_csv(libpysal.examples.get_path("usjoin.csv"))
    years = list(range(1929, 2010))
    values = df[[str(y) for y in years]].to_numpy(float)
    geoms = [shapely.box(i, 0, i + 1, 1) for i in range(len(df))]  # stand-ins: not used here
    return Panel.from_arrays(values, geoms, units=df["STATE_FIPS"].astype(str), periods=years)


def test_us_income_per_period_quintiles():
    # PySAL giddy.markov.Markov docstring: US per capita income, 48 states, 1929-2009, classed
    # into quintiles per year; data = libpysal's bundled example "usjoin.csv"
    panel = _usjoin_panel()
    classes = classify(panel, "quantile", 5, basis="per-period")
    t = count_transitions(classes.codes, 5, periods=panel.periods)
    expected = [
        [729, 71, 1, 0, 0],
        [72, 567, 80, 3, 0],
        [0, 81, 631, 86, 2],
        [0, 3, 86, 573, 56],
        [0, 0, 1, 57, 741],
    ]
    np.testing.assert_array_equal(t.counts, expected)
    s = markov_summary(t.counts)
    np.testing.assert_allclose(
        s.stationary, [0.20774716, 0.18725774, 0.20740537, 0.18821787, 0.20937187], atol=1e-8
    )


def test_us_income_relative_to_mean_pooled_quintiles():
    # same docstring, "Relative incomes": each year divided by its mean, pooled quintiles
    panel = relative_panel(_usjoin_panel(), "mean")
    np.testing.assert_allclose(np.nanmean(panel.values, axis=0), 1.0)
    assert panel.findings[-1].code == "relative-values"
    classes = classify(panel, "quantile", 5)
    t = count_transitions(classes.codes, 5, periods=panel.periods)
    expected = [
        [707, 58, 7, 1, 0],
        [50, 629, 80, 1, 1],
        [4, 79, 610, 73, 2],
        [0, 7, 72, 650, 37],
        [0, 0, 0, 48, 724],
    ]
    np.testing.assert_array_equal(t.counts, expected)
    s = markov_summary(t.counts)
    np.testing.assert_allclose(
        s.stationary, [0.17957376, 0.21631443, 0.21499942, 0.21134662, 0.17776576], atol=1e-8
    )


def test_relative_median_and_zero_centre():
    v = np.array([[1.0, 0.0], [2.0, 0.0], [6.0, np.nan]])
    panel = Panel.from_arrays(v, [shapely.box(i, 0, i + 1, 1) for i in range(3)])
    rel = relative_panel(panel, "median")
    np.testing.assert_allclose(rel.values[:, 0], [0.5, 1.0, 3.0])  # median 2
    assert np.isnan(rel.values[:, 1]).all()  # a zero median: no relative values
    assert rel.findings[-1].code == "relative-undefined"
    from mapdrift.errors import ConfigError

    with pytest.raises(ConfigError, match="mean, median"):
        relative_panel(panel, "mode")


def test_per_period_breaks_warning_reaches_every_table(tmp_path):
    # classes that differ by period must say so on every output (project rule, no source)
    from mapdrift.breaks import PER_PERIOD_WARNING
    from mapdrift.changes import ChangeOptions, analyse_changes, write_changes
    from mapdrift.errors import OutputExistsError

    rng = np.random.default_rng(4)
    v = rng.gamma(2.0, 1.0, size=(30, 4)) * np.array([1.0, 2.0, 3.0, 4.0])
    panel = Panel.from_arrays(v, [shapely.box(i, 0, i + 1, 1) for i in range(30)])
    classes = classify(panel, "quantile", 3, basis="per-period")
    res = analyse_changes(panel, classes, ChangeOptions(spatial=False))
    assert res.warning == PER_PERIOD_WARNING
    assert res.labels == ("class 1", "class 2", "class 3")  # labels differ by period
    written = write_changes(res, tmp_path)
    for path in written:
        text = path.read_text(encoding="utf-8")
        assert PER_PERIOD_WARNING in text.splitlines()[0] or path.suffix == ".json", path
    doc = json.loads((tmp_path / "markov.json").read_text())
    assert doc["warning"] == PER_PERIOD_WARNING
    with pytest.raises(OutputExistsError, match="--force"):
        write_changes(res, tmp_path)
    assert write_changes(res, tmp_path, force=True)
