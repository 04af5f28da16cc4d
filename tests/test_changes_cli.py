"""``mapdrift changes`` end to end on the demo county: files, exit codes, consistent tables."""

from __future__ import annotations

import json
from collections import Counter

import numpy as np
import pandas as pd
import pytest
from PIL import Image

from conftest import DEMO
from mapdrift.cli import app
from mapdrift.outputs import read_csv

pytestmark = pytest.mark.skipif(not (DEMO / "demo.toml").exists(), reason="demo data not built")


@pytest.fixture(scope="module")
def demo_run(tmp_path_factory):
    from typer.testing import CliRunner

    out = tmp_path_factory.mktemp("changes")
    res = CliRunner().invoke(
        app, ["changes", "--config", str(DEMO / "demo.toml"), "--out", str(out)]
    )
    assert res.exit_code == 0, res.output
    return out, res.output


def test_files_and_pictures(demo_run):
    out, text = demo_run
    for name in (
        "transitions.csv",
        "transition_probabilities.csv",
        "transitions_by_pair.csv",
        "markov.json",
        "jumps.csv",
        "units.csv",
        "transitions_by_neighbourhood.csv",
    ):
        assert (out / name).stat().st_size > 0, name
    for name in ("transition_heatmap.png", "class_flow.png", "change_map.png", "flagged_units.png"):
        with Image.open(out / name) as im:
            assert im.size == (1280, 720), name
    assert "unit steps" in text


def test_tables_agree_with_trajectories(demo_run):
    # the pooled matrix equals a count of consecutive pairs read back from units.csv
    # trajectories (a brute-force recount from another output)
    out, _ = demo_run
    units = read_csv(out / "units.csv")
    counts = read_csv(out / "transitions.csv")
    k = len(counts)
    ref = Counter()
    for traj in units["trajectory"]:
        cells = traj.split("-")
        for a, b in zip(cells, cells[1:], strict=False):
            if a != "_" and b != "_":
                ref[(int(a) - 1, int(b) - 1)] += 1
    matrix = counts.iloc[:, 2 : 2 + k].to_numpy()
    expected = np.array([[ref[(i, j)] for j in range(k)] for i in range(k)])
    np.testing.assert_array_equal(matrix, expected)
    doc = json.loads((out / "markov.json").read_text())
    assert doc["unit_pairs_counted"] == matrix.sum()
    probs = read_csv(out / "transition_probabilities.csv")
    np.testing.assert_allclose(probs.iloc[:, 2 : 2 + k].sum(axis=1), 1.0)
    by_pair = read_csv(out / "transitions_by_pair.csv")
    assert by_pair["count"].sum() == matrix.sum()
    jumps = read_csv(out / "jumps.csv")
    assert (jumps["size"].abs() >= 2).all()
    credible = jumps["credible"].astype(str).str.lower() == "true"
    assert set(jumps.loc[credible, "unit"]) == set(units.loc[units["jump"], "unit"])
    noisy = units["n_noise_moves"] > 0
    assert set(jumps.loc[~credible, "unit"]) == set(units.loc[noisy, "unit"])
    assert isinstance(pd.read_json(out / "markov.json", typ="series")["markov"], dict)


def test_existing_outputs_need_force(demo_run, runner):
    out, _ = demo_run
    args = ["changes", "--config", str(DEMO / "demo.toml"), "--out", str(out), "--no-pictures"]
    res = runner.invoke(app, args)
    assert res.exit_code == 3
    assert "--force" in res.output
    res = runner.invoke(app, [*args, "--force", "--jump", "3", "--no-spatial"])
    assert res.exit_code == 0, res.output
    jumps = read_csv(out / "jumps.csv")
    assert (jumps["size"].abs() >= 3).all()


def test_bad_option_is_one_line(runner, tmp_path):
    args = ["changes", "--config", str(DEMO / "demo.toml"), "--out", str(tmp_path), "--jump", "0"]
    res = runner.invoke(app, args)
    assert res.exit_code == 2
    assert "--jump must be a whole number >= 1" in res.output


def test_relative_option(runner, tmp_path):
    args = ["changes", "--config", str(DEMO / "demo.toml"), "--out", str(tmp_path)]
    res = runner.invoke(app, [*args, "--relative", "median", "--no-pictures", "--no-spatial"])
    assert res.exit_code == 0, res.output
    doc = json.loads((tmp_path / "markov.json").read_text())
    assert doc["options"]["relative"] == "median"
    # classes are of values relative to each year's median: the lowest class ends below 1
    assert doc["classes"][0].startswith("<= ")
    assert float(doc["classes"][0][3:]) < 1.0
