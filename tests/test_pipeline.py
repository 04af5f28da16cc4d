"""The whole run: outputs named as in DESIGN.md, manifest hashes, byte-identical tables,
--force, a failure mid-run leaving earlier outputs untouched, and the annual rerun."""

from __future__ import annotations

import hashlib
import json
import re
from pathlib import Path

import pytest

from conftest import DEMO
from mapdrift.config import load_config
from mapdrift.errors import OutputExistsError, StepError
from mapdrift.pipeline import STEPS, run

# the steps up to and including classify (which writes breaks.json), by name
TO_CLASSIFY = STEPS[: [name for name, _ in STEPS].index("classify") + 1]

DESIGN_OUTPUTS = [
    "animation.gif", "animation.mp4", "small_multiples.png", "small_multiples.pdf", "change_map.png",
    "units.csv", "units.gpkg", "transitions.csv", "transition_probabilities.csv", "breaks.json",
    "findings.json", "report.html", "brief.pptx", "manifest.json",
]  # fmt: skip


def _sha(p: Path) -> str:
    return hashlib.sha256(p.read_bytes()).hexdigest()


def _tables(folder: Path) -> dict[str, str]:
    return {p.name: _sha(p) for p in sorted(folder.glob("*.csv"))} | {
        n: _sha(folder / n) for n in ("breaks.json", "markov.json", "findings.json")
    }


def _without(*names: str) -> list:
    """The steps but ``names``: the pictures and the briefing make no table."""
    return [(n, f) for n, f in STEPS if n not in names]


def test_outputs_named_as_designed(demo_run):
    out = demo_run.out
    for name in DESIGN_OUTPUTS:
        assert (out / name).is_file(), name
    assert sorted(p.name for p in (out / "slides").glob("*.png"))
    assert not list(out.parent.glob(".*partial*"))  # staging folder gone


def test_manifest_hashes_match(demo_run):
    out = demo_run.out
    man = json.loads((out / "manifest.json").read_text())
    assert man["format"] == "mapdrift-manifest/1"
    assert {Path(i["path"]).name for i in man["inputs"]} == {"county_units.gpkg", "filings.csv"}
    for item in man["inputs"]:
        assert item["sha256"] == _sha(Path(item["path"]))
    listed = {o["path"]: o["sha256"] for o in man["outputs"]}
    assert "report.html" in listed and "slides/01-title.png" in listed
    for rel, digest in listed.items():
        assert _sha(out / rel) == digest, rel
    p = man["parameters"]
    assert p["permutations"] == 999 and p["correction"] == "fdr" and p["weights"] == "queen"
    assert p["breaks"][0]["scheme"] == "quantile"
    assert set(man["timings_s"]) >= {"load", "classify", "animate", "changes", "clusters", "brief"}


def test_same_inputs_and_seed_give_identical_tables(demo_run, tmp_path):
    # the second run makes the tables only (same steps up to them; no pictures, no briefing)
    cfg = load_config(DEMO / "demo.toml").with_values("brief", {"formats": []})
    again = run(cfg, out=tmp_path / "again", steps=_without("animate", "brief"))
    assert _tables(again.out) == _tables(demo_run.out)


def test_force_rules(demo_run, tmp_path):
    cfg = load_config(DEMO / "demo.toml").with_values("brief", {"formats": []})
    out = tmp_path / "run"
    run(cfg, out=out, steps=TO_CLASSIFY)
    with pytest.raises(OutputExistsError, match="--force"):
        run(cfg, out=out, steps=TO_CLASSIFY)
    run(cfg, out=out, force=True, steps=TO_CLASSIFY)


def test_failure_mid_run_leaves_previous_outputs(tmp_path):
    cfg = load_config(DEMO / "demo.toml").with_values("brief", {"formats": []})
    out = tmp_path / "run"
    run(cfg, out=out, steps=TO_CLASSIFY)
    before = {p.relative_to(out): _sha(p) for p in out.rglob("*") if p.is_file()}

    def broken(state):
        raise RuntimeError("disk on fire")

    with pytest.raises(StepError, match="step 'changes' failed.*disk on fire"):
        run(cfg, out=out, force=True, steps=[*TO_CLASSIFY, ("changes", broken)])
    after = {p.relative_to(out): _sha(p) for p in out.rglob("*") if p.is_file()}
    assert after == before
    assert not list(tmp_path.glob(".*partial*"))


def _planted_new_jumper() -> str:
    # the demo's README (written by the generator) lists the planted stories with their IDs
    text = (DEMO / "README.md").read_text()
    row = next(line for line in text.splitlines() if line.startswith("| New jumper"))
    return re.findall(r"\b0\d{4}\b", row)[0]


def test_annual_rerun_reuses_breaks_and_reports_new_jumper(demo_run, tmp_path):
    # the shipped rerun config, pointed at this test's 2024 run
    cfg = load_config(DEMO / "rerun_2025.toml")
    cfg = cfg.with_values("run", {"previous": str(demo_run.out)})
    cfg = cfg.with_values("brief", {"formats": ["html"]})
    new = run(cfg, out=tmp_path / "2025", steps=_without("animate"))
    old_b = json.loads((demo_run.out / "breaks.json").read_text())
    new_b = json.loads((new.out / "breaks.json").read_text())
    assert new_b["edges"] == old_b["edges"] and new_b["basis"] == old_b["basis"] == "pooled"
    assert new_b["fitted_on"] == "2012-2024" and new_b["reused_from"].startswith("the previous run")
    news = json.loads((new.out / "whats_new.json").read_text())["news"]
    jumper = _planted_new_jumper()
    assert jumper in news[0], news
    html = (new.out / "report.html").read_text()
    assert 'id="whats-new"' in html and jumper in html
    assert "2025" in json.loads((new.out / "manifest.json").read_text())["parameters"]["periods"]


def test_rebreak_refits_and_says_so(demo_run, tmp_path):
    # with a previous run the breaks are reused; --rebreak refits them on the new data and
    # every output carries the notice (checked here on breaks.json and findings)
    cfg = load_config(DEMO / "rerun_2025.toml").with_values("run", {"previous": str(demo_run.out)})
    reused = run(cfg, out=tmp_path / "reused", steps=TO_CLASSIFY)
    refit = run(
        cfg.with_values("run", {"rebreak": True}), out=tmp_path / "refit", steps=TO_CLASSIFY
    )
    old = json.loads((demo_run.out / "breaks.json").read_text())
    assert json.loads((reused.out / "breaks.json").read_text())["edges"] == old["edges"]
    new = json.loads((refit.out / "breaks.json").read_text())
    assert new["edges"] != old["edges"] and new["fitted_on"] == "2012-2025"
    assert "breaks-refitted" in {f.code for f in refit.findings}
    assert "breaks-reused" not in {f.code for f in refit.findings}


def _story(prefix: str) -> list[str]:
    text = (DEMO / "README.md").read_text()
    row = next(line for line in text.splitlines() if line.startswith(f"| {prefix}"))
    return re.findall(r"\b0\d{4}\b", row.split("|")[2])


def test_demo_stories_found_and_noise_named(demo_run):
    # the demo's planted stories (its README, written by the generator) survive the noise tests:
    # planted jumps and the spike are credible, the small-base units' moves are noise, and the
    # emerging hot cluster is high-high in its last years
    from mapdrift.outputs import read_csv

    out = demo_run.out
    jumps = read_csv(out / "jumps.csv", dtype={"unit": str})
    credible = jumps["credible"].astype(str).str.lower() == "true"
    for prefix in (
        "Jump that stays up (~5 to ~60 per 1,000 in 2019)",
        "Jump that stays up (~5 to ~60 per 1,000 in 2021)",
    ):
        (unit,) = _story(prefix)
        assert credible[jumps["unit"] == unit].any(), unit
    (spike,) = _story("One-year spike")
    assert jumps.loc[jumps["unit"] == spike, "spike"].astype(str).str.lower().eq("true").any()
    small = set(_story("Small base"))
    assert not credible[jumps["unit"].isin(small)].any()
    clusters = read_csv(out / "clusters.csv", dtype={"unit": str, "period": str})
    hot = set(_story("Emerging hot cluster"))
    for year in ("2022", "2023", "2024"):
        hh = set(
            clusters.loc[(clusters["period"] == year) & (clusters["label"] == "high-high"), "unit"]
        )
        assert len(hh & hot) >= 0.6 * len(hot), (year, sorted(hh & hot))
    report = (out / "report.md").read_text()
    assert "credibly jumped" in report and "within count noise" in report


def test_tables_and_wording_read_cleanly(demo_run):
    # every CSV of a run writes booleans as true / false (README's outputs table), never as
    # pandas' True / False; the report's cluster line reads as a phrase
    for path in sorted(demo_run.out.glob("*.csv")):
        text = path.read_text(encoding="utf-8")
        assert not re.search(r"(^|,)(True|False)(,|$)", text, re.M), path.name
    jumps = (demo_run.out / "jumps.csv").read_text(encoding="utf-8")
    assert ",true," in jumps or ",false," in jumps
    report = (demo_run.out / "report.md").read_text(encoding="utf-8")
    assert not re.search(r"\(\d[\d,]* in one in", report)
    assert re.search(r"\(\d[\d,]* of them still in one in \d{4}\)", report)
