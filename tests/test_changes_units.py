"""Per-unit trajectories, jumps, spikes and persistence on hand-built class histories."""

from __future__ import annotations

import itertools

import numpy as np
import pytest
import shapely

from mapdrift.breaks import Breaks, Classes
from mapdrift.changes import FLAG_LABELS, ChangeOptions, analyse_changes
from mapdrift.changes.trajectories import rank_mobility, trajectories
from mapdrift.errors import ConfigError
from mapdrift.panel import Panel

_ = -1  # no data
# hand-built class histories (k = 5, codes 0..4), one row per unit; periods 2015-2017, 2019,
# 2020 (2018 missing: the step 2017 -> 2019 is a gap)
HISTORIES = {
    "spike": [0, 0, 3, 0, 0],  # up 3 then straight back down 3
    "climb": [1, 2, 3, 4, 4],  # one class per step; top in the last 2 periods
    "top": [4, 4, 4, 4, 4],
    "bottom": [0, 0, 0, 0, 0],
    "hole": [0, _, 4, 4, 4],  # the move 0 -> 4 spans a no-data cell
    "slow_back": [4, 1, 1, 1, 4],  # down 3, back up 3 three period columns later
    "gap_jump": [0, 0, 0, 4, 4],  # 0 -> 4 only across the 2017 -> 2019 gap
    "empty": [_, _, _, _, _],
}
PERIODS = [2015, 2016, 2017, 2019, 2020]


def _result(bridge=False, **opts):
    codes = np.array(list(HISTORIES.values()), dtype=np.int16)
    values = np.where(codes >= 0, codes.astype(float) + 0.5, np.nan)
    breaks = Breaks((1.0, 2.0, 3.0, 4.0, 5.0), "manual")
    classes = Classes(codes=codes, breaks=(breaks,))
    np.testing.assert_array_equal(
        np.column_stack([breaks.classify(values[:, j]) for j in range(5)]), codes
    )
    geoms = [shapely.box(i, 0, i + 1, 1) for i in range(len(codes))]
    panel = Panel.from_arrays(values, geoms, units=list(HISTORIES), periods=PERIODS)
    options = ChangeOptions(bridge_gaps=bridge, spatial=False, **opts)
    return analyse_changes(panel, classes, options)


def _row(res, unit):
    t = res.units.set_index("unit")
    return t.loc[unit]


def test_trajectory_text():
    res = _result()
    assert _row(res, "spike")["trajectory"] == "1-1-4-1-1"
    assert _row(res, "hole")["trajectory"] == "1-_-5-5-5"
    assert _row(res, "empty")["trajectory"] == "_-_-_-_-_"
    # the slow path (more than 9 classes) gives the same text
    codes = np.array([[0, 11, _], [9, 9, 9]])
    assert trajectories(codes).tolist() == ["1-12-_", "10-10-10"]
    small = np.array([[0, 3, _], [2, 2, 2]])
    assert trajectories(small).tolist() == ["1-4-_", "3-3-3"]


def test_jumps_without_bridging():
    res = _result()
    j = res.jumps
    # expected flags by hand: only steps inside 2015-2017 and 2019-2020 count
    got = sorted(zip(j["unit"], j["from_period"], j["to_period"], j["size"], strict=True))
    assert got == [
        ("slow_back", "2015", "2016", -3),
        ("slow_back", "2019", "2020", 3),
        ("spike", "2016", "2017", 3),
    ]
    spike = j[j["unit"] == "spike"].iloc[0]
    assert (spike["from_class"], spike["to_class"], spike["direction"]) == (1, 4, "up")
    assert spike["value_before"] == 0.5 and spike["value_after"] == 3.5
    # the spike window counts period columns, so 2019 (class 1 again) is one column after the
    # landing in 2017 even though the 2017 -> 2019 step itself is an unbridged gap
    assert bool(spike["spike"]) and spike["back_by"] == "2019"
    slow = j[j["unit"] == "slow_back"].sort_values("from_period")
    assert not slow["spike"].any()  # back 3 columns after landing: outside the window of 2
    u = res.units.set_index("unit")
    assert u["change_flags"].to_dict() == {
        "spike": "jump;spike",
        "climb": "",
        "top": "stayed-top",
        "bottom": "stayed-bottom",
        "hole": "stayed-top",
        "slow_back": "jump",
        "gap_jump": "",
        "empty": "",
    }


def test_jumps_with_bridged_gap_and_window():
    res = _result(bridge=True, spike_window=3)
    j = res.jumps
    got = sorted(zip(j["unit"], j["from_period"], j["to_period"], j["size"], strict=True))
    assert got == [
        ("gap_jump", "2017", "2019", 4),
        ("slow_back", "2015", "2016", -3),
        ("slow_back", "2019", "2020", 3),
        ("spike", "2016", "2017", 3),
        ("spike", "2017", "2019", -3),
    ]
    flagged = dict(zip(j["unit"] + j["from_period"], j["spike"], strict=True))
    assert flagged["slow_back2015"]  # back within 3 columns now
    assert not flagged["spike2017"]  # the way back is not itself undone


def test_moves_and_net_change():
    res = _result()
    u = res.units.set_index("unit")
    assert u.loc["climb", "class_changes"] == 2  # 2017 -> 2019 is an unbridged gap
    assert u.loc["climb", "largest_move"] == 1
    assert (u.loc["climb", "largest_move_from"], u.loc["climb", "largest_move_to"]) == (
        "2015",
        "2016",
    )  # earliest of the tied largest moves
    assert u.loc["climb", "net_change"] == 3
    assert u.loc["hole", "net_change"] == 4
    assert u.loc["hole", "class_changes"] == 0
    assert np.isnan(u.loc["empty", "net_change"]) and np.isnan(u.loc["empty", "largest_move"])
    assert u.loc["top", "largest_move"] == 0 and u.loc["top", "largest_move_from"] == ""
    np.testing.assert_array_equal(res.net_change, u["net_change"].to_numpy())


def test_persistence_window():
    res = _result(persist=2)
    u = res.units.set_index("unit")
    assert bool(u.loc["climb", "stayed_top"])  # top in 2019 and 2020
    res = _result(persist=3)
    assert not bool(res.units.set_index("unit").loc["climb", "stayed_top"])


def test_flag_categories_for_the_map():
    res = _result()
    by_unit = dict(zip(HISTORIES, res.flag, strict=True))
    assert FLAG_LABELS[by_unit["spike"]] == "spike (check data)"
    assert FLAG_LABELS[by_unit["slow_back"]] == "jumps up and down"
    assert FLAG_LABELS[by_unit["hole"]] == "stayed in top class"
    assert FLAG_LABELS[by_unit["top"]] == "stayed in top class"
    assert FLAG_LABELS[by_unit["bottom"]] == "stayed in bottom class"
    assert FLAG_LABELS[by_unit["climb"]] == "no flag"
    assert by_unit["empty"] == -1
    codes = {f.code for f in res.findings}
    assert {"changes-spikes", "changes-jumps", "changes-gap-skipped"} <= codes
    spikes = next(f for f in res.findings if f.code == "changes-spikes")
    assert spikes.units == ("spike",)
    assert spikes.message.startswith("1 unit jumped and came straight back")  # not "1 units"
    gap = next(f for f in res.findings if f.code == "changes-gap-skipped")
    assert "mapdrift changes --bridge-gaps" in gap.message and "bridge_gaps = true" in gap.message


def test_bad_options_are_clear():
    with pytest.raises(ConfigError, match="--jump must be a whole number >= 1"):
        ChangeOptions(jump=0)
    with pytest.raises(ConfigError, match="--spike-window"):
        ChangeOptions(spike_window=-1)
    with pytest.raises(ConfigError, match="one of mean, median"):
        ChangeOptions(relative="max")


def _tau_b(x, y):
    # Kendall (1945) tau-b by the O(n^2) pair count: (C - D) / sqrt((n0 - n1)(n0 - n2))
    c = d = tx = ty = 0
    for i, j in itertools.combinations(range(len(x)), 2):
        sx, sy = np.sign(x[i] - x[j]), np.sign(y[i] - y[j])
        if sx == 0 and sy == 0:
            continue
        if sx == 0:
            tx += 1
        elif sy == 0:
            ty += 1
        elif sx == sy:
            c += 1
        else:
            d += 1
    return (c - d) / np.sqrt((c + d + tx) * (c + d + ty))


def test_rank_mobility_matches_pair_count():
    rng = np.random.default_rng(5)
    v = np.round(rng.normal(size=(40, 3)), 1)  # rounding makes ties
    v[3, 1] = np.nan
    df = rank_mobility(v, [(0, 1), (1, 2)], ["a", "b", "c"])
    assert df["kind"].tolist() == ["step", "step", "first-last"]
    ok = ~np.isnan(v[:, 1])
    assert df.loc[0, "n_units"] == 39
    assert df.loc[0, "kendall_tau"] == pytest.approx(_tau_b(v[ok, 0], v[ok, 1]))
    assert df.loc[2, "kendall_tau"] == pytest.approx(_tau_b(v[:, 0], v[:, 2]))
