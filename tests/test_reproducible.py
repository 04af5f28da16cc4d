"""Same inputs and seed, byte-identical files: every output of two runs of the demo county
compared, apart from manifest.json (timings) and run.log (clock times)."""

from __future__ import annotations

import hashlib
import sqlite3
import zipfile

from conftest import DEMO
from mapdrift.config import load_config
from mapdrift.pipeline import run


def _hashes(folder):
    return {
        p.relative_to(folder).as_posix(): hashlib.sha256(p.read_bytes()).hexdigest()
        for p in sorted(folder.rglob("*"))
        if p.is_file() and p.name not in ("manifest.json", "run.log")
    }


def test_two_runs_give_identical_files(tmp_path):
    cfg = load_config(DEMO / "demo.toml").with_values(
        "brief", {"formats": ["gif", "mp4", "png", "pptx", "html", "gpkg"]}
    )
    cfg = cfg.with_values("clusters", {"permutations": 99})
    a = run(cfg, out=tmp_path / "a").out
    b = run(cfg, out=tmp_path / "b").out
    ha, hb = _hashes(a), _hashes(b)
    assert {"units.gpkg", "brief.pptx", "small_multiples.pdf"} <= set(ha)
    assert [k for k in ha if ha[k] != hb.get(k)] == [] and set(ha) == set(hb)
    # the fixed stamps are what we say they are (README "Promises")
    stamp = sqlite3.connect(a / "units.gpkg").execute("select last_change from gpkg_contents")
    assert stamp.fetchall() == [("2000-01-01T00:00:00.000Z",)]
    with zipfile.ZipFile(a / "brief.pptx") as z:
        assert {i.date_time for i in z.infolist()} == {(2000, 1, 1, 0, 0, 0)}
        assert b"Steve" not in z.read("docProps/core.xml")  # not the template's author
    assert b"/CreationDate" not in (a / "small_multiples.pdf").read_bytes()
