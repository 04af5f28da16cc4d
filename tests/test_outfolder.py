"""The output folder is never lost: what --force may replace, the lock, the swap re-check, and
recovery after killed runs (a fault test that kills real runs with SIGKILL/SIGTERM).

Every folder here is our own, generated in the test; the inputs are the shipped demo county.
"""

from __future__ import annotations

import hashlib
import os
import shutil
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest

from conftest import DEMO
from mapdrift.config import load_config
from mapdrift.errors import ConfigError, OutputExistsError
from mapdrift.outfolder import blockers, lock_out, recover
from mapdrift.pipeline import STEPS, run

# the steps up to and including classify (which writes breaks.json), by name
TO_CLASSIFY = STEPS[: [name for name, _ in STEPS].index("classify") + 1]


def _hashes(folder: Path) -> dict[str, str]:
    return {
        p.relative_to(folder).as_posix(): hashlib.sha256(p.read_bytes()).hexdigest()
        for p in sorted(folder.rglob("*"))
        if p.is_file()
    }


def _quick():
    return load_config(DEMO / "demo.toml").with_values("brief", {"formats": []})


def _strays(parent: Path, name: str) -> list[str]:
    return sorted(p.name for p in parent.glob(f".{name}.*"))


@pytest.fixture
def inputs_copy(tmp_path):
    data = tmp_path / "data"
    shutil.copytree(DEMO, data)
    (data / "notes.txt").write_text("my notes\n")
    return data


def test_force_never_replaces_a_folder_holding_inputs(inputs_copy, runner):
    from mapdrift.cli import app

    before = _hashes(inputs_copy)
    res = runner.invoke(
        app, ["run", str(inputs_copy / "demo.toml"), "--out", str(inputs_copy), "--force"]
    )
    assert res.exit_code == 3
    # the message says exactly what blocks it: the inputs, and that it is not a run folder
    assert "even with --force" in res.output and "demo.toml" in res.output
    assert "filings.csv" in res.output and "no manifest.json" in res.output
    assert _hashes(inputs_copy) == before


def test_force_refuses_unknown_and_edited_files(tmp_path):
    cfg = _quick()
    out = tmp_path / "run"
    run(cfg, out=out, steps=TO_CLASSIFY)
    assert blockers(out) == []
    (out / "notes.txt").write_text("keep me")
    with pytest.raises(OutputExistsError, match=r"1 file no mapdrift run wrote \(notes.txt\)"):
        run(cfg, out=out, force=True, steps=TO_CLASSIFY)
    assert (out / "notes.txt").read_text() == "keep me"
    (out / "notes.txt").unlink()
    (out / "breaks.json").write_text("{}\n")  # an output edited by hand
    with pytest.raises(OutputExistsError, match=r"1 output changed.*breaks.json"):
        run(cfg, out=out, force=True, steps=TO_CLASSIFY)
    assert (out / "breaks.json").read_text() == "{}\n"


def test_explore_into_a_run_keeps_the_folder_replaceable(tmp_path, runner):
    # `explore RUN --force` rewrites explorer.html inside the run: the manifest must follow, or
    # the next `run --force` would refuse the folder as edited by hand (a new user's report)
    from mapdrift.cli import app

    cfg = _quick().with_values("brief", {"formats": ["explorer", "gpkg"]})
    out = tmp_path / "run"
    run(cfg, out=out, steps=[s for s in STEPS if s[0] not in ("animate", "brief")])
    before = (out / "explorer.html").read_bytes()
    res = runner.invoke(app, ["explore", str(out), "--force", "--raster-px", "300"])
    assert res.exit_code == 0, res.output
    assert (out / "explorer.html").read_bytes() != before  # rebuilt, smaller grid
    assert blockers(out) == []
    run(cfg, out=out, force=True, steps=TO_CLASSIFY)  # replaceable as any earlier run
    assert not (out / "explorer.html").exists()


def test_unknown_folder_refused_even_with_force(tmp_path):
    out = tmp_path / "mine"
    out.mkdir()
    (out / "thesis.docx").write_bytes(b"x")
    with pytest.raises(OutputExistsError, match="not a mapdrift run folder"):
        run(_quick(), out=out, force=True, steps=STEPS[:1])
    assert (out / "thesis.docx").exists()


def test_previous_run_is_an_input(tmp_path):
    out = tmp_path / "2024"
    cfg = _quick()
    run(cfg, out=out, steps=TO_CLASSIFY)
    again = cfg.with_values("run", {"previous": str(out)})
    with pytest.raises(OutputExistsError, match="input"):
        run(again, out=out, force=True, steps=TO_CLASSIFY)


@pytest.mark.parametrize("where", [".", "file"])
def test_out_must_be_a_new_folder(tmp_path, monkeypatch, where):
    monkeypatch.chdir(tmp_path)
    (tmp_path / "file").write_text("x")
    with pytest.raises(ConfigError, match="--out"):
        run(_quick(), out=Path(where), steps=STEPS[:1])


@pytest.mark.skipif(os.geteuid() == 0, reason="root writes anywhere")
def test_read_only_parent_refused_before_any_work(tmp_path):
    ro = tmp_path / "ro"
    ro.mkdir()
    ro.chmod(0o555)
    try:
        with pytest.raises(ConfigError, match="permission denied"):
            run(_quick(), out=ro / "run", steps=STEPS[:1])
    finally:
        ro.chmod(0o755)


def test_unwritable_parent_refused_before_any_work(tmp_path, monkeypatch):
    # the same check as above for a process that may write anywhere (tests may run as root)
    import mapdrift.pipeline as pipeline

    monkeypatch.setattr(pipeline.os, "access", lambda path, mode: False)
    with pytest.raises(ConfigError, match=r"cannot write in .* \(permission denied\)"):
        run(_quick(), out=tmp_path / "ro" / "run", steps=STEPS[:1])
    assert not (tmp_path / "ro").exists()


def test_second_run_into_the_same_folder_stops_at_once(tmp_path):
    out = tmp_path / "new"
    with lock_out(out), pytest.raises(OutputExistsError, match="another mapdrift run"):
        run(_quick(), out=out, steps=STEPS[:1])
    assert not out.exists() and _strays(tmp_path, "new") == []


def test_folder_created_during_the_run_is_not_replaced(tmp_path):
    out = tmp_path / "new"

    def someone_else(state):  # another program fills the folder while we work
        out.mkdir()
        (out / "theirs.txt").write_text("theirs")
        return "made a folder"

    with pytest.raises(OutputExistsError, match=r"at the end of the run.*theirs.txt"):
        run(_quick(), out=out, steps=[*STEPS[:1], ("other", someone_else)])
    assert _hashes(out) == {"theirs.txt": hashlib.sha256(b"theirs").hexdigest()}
    assert _strays(tmp_path, "new") == []


def test_file_added_during_the_run_stops_the_swap(tmp_path):
    out = tmp_path / "run"
    cfg = _quick()
    run(cfg, out=out, steps=TO_CLASSIFY)
    before = _hashes(out)

    def add_file(state):
        (out / "added.txt").write_text("added during the run")
        return "added"

    with pytest.raises(OutputExistsError, match=r"at the end of the run.*added.txt"):
        run(cfg, out=out, force=True, steps=[*TO_CLASSIFY, ("user", add_file)])
    assert _hashes(out) == before | {"added.txt": _hashes(out)["added.txt"]}
    assert _strays(tmp_path, "run") == []


def test_recover_restores_an_interrupted_swap_and_cleans_staging(tmp_path):
    out = tmp_path / "run"
    run(_quick(), out=out, steps=TO_CLASSIFY)
    before = _hashes(out)
    os.rename(out, tmp_path / ".run.old-99999")  # killed between the two renames
    stale = tmp_path / ".run.partial-99998"
    (stale / "slides").mkdir(parents=True)
    (stale / "animation.mp4").write_bytes(b"half")
    done = recover(out)
    assert any("restored" in d for d in done) and any("partial-99998" in d for d in done)
    assert _hashes(out) == before and _strays(tmp_path, "run") == []


def test_recover_reports_an_intact_old_folder_beside_out(tmp_path):
    out = tmp_path / "run"
    run(_quick(), out=out, steps=TO_CLASSIFY)
    shutil.copytree(out, tmp_path / ".run.old-4242")
    done = recover(out)
    assert "left alone" in done[0] and (tmp_path / ".run.old-4242").is_dir()


def test_recover_removes_a_half_deleted_old_folder(tmp_path):
    out = tmp_path / "run"
    run(_quick(), out=out, steps=TO_CLASSIFY)
    old = tmp_path / ".run.old-4243"
    shutil.copytree(out, old)
    (old / "manifest.json").unlink()  # the swap finished and had begun deleting it
    recover(out)
    assert not old.exists() and (out / "manifest.json").exists()


# ------------------------------------------------------------------------------------------
# fault test: real runs killed at several points
# ------------------------------------------------------------------------------------------
#: A wrapper around the CLI that can kill itself inside the swap (between or after the renames).
_WRAPPER = """
import os, signal, sys
point = os.environ.get("MD_KILL_AT")
real = os.rename
def rename(a, b):
    real(a, b)
    if point == "swap" and ".old-" in str(b):
        os.kill(os.getpid(), signal.SIGKILL)
    if point == "after-swap" and ".partial-" in str(a):
        os.kill(os.getpid(), signal.SIGKILL)
os.rename = rename
from mapdrift.cli import main
sys.exit(main(sys.argv[1:]))
"""

_ARGS = ["--permutations", "99", "--set", 'brief.formats=["mp4", "html"]']


def _cli(tmp_path: Path, out: Path, *extra: str, kill_at: str | None = None) -> subprocess.Popen:
    env = dict(os.environ, MD_KILL_AT=kill_at or "", PYTHONUNBUFFERED="1")
    return subprocess.Popen(
        [sys.executable, "-c", _WRAPPER, "run", str(DEMO / "demo.toml"), "--out", str(out)]
        + _ARGS
        + list(extra),
        cwd=tmp_path,
        env=env,
        stdout=subprocess.PIPE,
        stderr=subprocess.STDOUT,
        text=True,
    )


def _procs_naming(text: str) -> list[int]:
    found = []
    for entry in Path("/proc").iterdir():
        if entry.name.isdigit() and int(entry.name) != os.getpid():
            try:
                if text.encode() in (entry / "cmdline").read_bytes():
                    found.append(int(entry.name))
            except OSError:
                continue
    return found


def _wait_for(cond, timeout: float = 120.0) -> bool:
    end = time.monotonic() + timeout
    while time.monotonic() < end:
        if cond():
            return True
        time.sleep(0.05)
    return False


@pytest.fixture(scope="module")
def earlier_run(tmp_path_factory):
    """One earlier run through the CLI, copied into each fault case."""
    tmp = tmp_path_factory.mktemp("earlier")
    first = _cli(tmp, tmp / "run")
    assert first.wait(timeout=600) == 0, first.stdout.read()
    return tmp / "run"


@pytest.mark.skipif(not Path("/proc").is_dir(), reason="uses /proc to find encoder processes")
@pytest.mark.parametrize(
    "point, sig",
    [
        ("load", signal.SIGKILL),  # after the first step's line
        ("mp4", signal.SIGKILL),  # while ffmpeg is writing the MP4 into the staging folder
        ("mp4", signal.SIGTERM),
        ("swap", None),  # between renaming the earlier run aside and moving the new one in
        ("after-swap", None),  # new run in place, earlier one not yet deleted
    ],
)
def test_killed_run_loses_nothing_and_next_run_cleans_up(earlier_run, tmp_path, point, sig):
    out = tmp_path / "run"
    shutil.copytree(earlier_run, out)
    earlier = _hashes(out)
    proc = _cli(tmp_path, out, "--force", kill_at=point)
    if point == "load":
        for line in proc.stdout:
            if line.startswith("load"):
                break
        proc.send_signal(sig)
    elif point == "mp4":
        # this test's own encoder (other test sessions may run encoders at the same time)
        assert _wait_for(lambda: any(_procs_naming(str(tmp_path / ".run.partial-"))))
        proc.send_signal(sig)
    rc = proc.wait(timeout=600)
    assert rc != 0
    if sig is signal.SIGTERM:  # cleaned up at once: nothing left behind, encoder stopped
        assert rc == 128 + signal.SIGTERM and _strays(tmp_path, "run") == []
    # encoders of the killed run stop on their own (stdin closed) or are stopped by the next run
    after = _cli(tmp_path, out)  # no --force: recovers, then refuses to replace the run
    log = after.communicate(timeout=600)[0]
    assert after.returncode == 3, log
    if point == "after-swap":  # the new run had landed: it is complete (its manifest checks)
        import json

        listed = json.loads((out / "manifest.json").read_text())["outputs"]
        assert {o["path"]: o["sha256"] for o in listed} == {
            k: v for k, v in _hashes(out).items() if k != "manifest.json"
        }
    else:
        assert _hashes(out) == earlier  # the earlier run byte-identical
    assert _strays(tmp_path, "run") == []
    assert _wait_for(lambda: not _procs_naming(str(tmp_path)), timeout=10)
