"""PNG writes handed to a worker thread (mapdrift.pngwrite): same bytes, all done at the exit,
errors raised there. Pictures are read back with Pillow (the reference decoder)."""

from __future__ import annotations

import threading
from pathlib import Path

import numpy as np
import pytest
from PIL import Image

from mapdrift.pngwrite import background_writes, write_figure, write_png


def _pictures(n=6, seed=3):
    rng = np.random.default_rng(seed)
    return [rng.integers(0, 255, (90, 160, 3), dtype=np.uint8) for _ in range(n)]


def test_background_writes_give_the_same_files_and_all_exist_at_the_exit(tmp_path):
    pics = _pictures()
    for i, a in enumerate(pics):
        write_png(a, tmp_path / f"sync-{i}.png")
    with background_writes():
        paths = [write_png(a, tmp_path / f"bg-{i}.png") for i, a in enumerate(pics)]
    for i, (a, p) in enumerate(zip(pics, paths)):
        assert p.read_bytes() == (tmp_path / f"sync-{i}.png").read_bytes()
        assert np.array_equal(np.asarray(Image.open(p)), a)
    assert not list(tmp_path.glob(".*"))  # no temporary files left


def test_encoding_happens_off_the_calling_thread(tmp_path, monkeypatch):
    import mapdrift.pngwrite as pw

    seen = []
    real = pw._save

    def spy(image, path):
        seen.append(threading.current_thread().name)
        return real(image, path)

    monkeypatch.setattr(pw, "_save", spy)
    write_png(_pictures(1)[0], tmp_path / "a.png")
    with background_writes():
        write_png(_pictures(1)[0], tmp_path / "b.png")
    assert seen[0] == threading.current_thread().name
    assert seen[1].startswith("mapdrift-png")


def test_a_failed_write_is_raised_at_the_exit(tmp_path):
    blocker = tmp_path / "blocker"
    blocker.write_text("a file where a folder should be")
    with pytest.raises(OSError), background_writes():
        write_png(_pictures(1)[0], tmp_path / "fine.png")
        write_png(_pictures(1)[0], blocker / "x.png")
    assert (tmp_path / "fine.png").is_file()  # the other writes finished


def test_write_figure_png_matches_savefig_pixels(tmp_path):
    import matplotlib

    matplotlib.use("Agg", force=False)
    from matplotlib.figure import Figure

    fig = Figure(figsize=(3.2, 2.0), dpi=100)
    ax = fig.add_axes((0.1, 0.1, 0.8, 0.8))
    ax.plot([0, 1, 2], [2, 0, 1])
    ax.set_title("a chart")
    fig.savefig(tmp_path / "ref.png", dpi=100, facecolor="white")
    write_figure(fig, tmp_path / "ours.png", dpi=100)
    ref = np.asarray(Image.open(tmp_path / "ref.png").convert("RGB"))
    ours = np.asarray(Image.open(tmp_path / "ours.png").convert("RGB"))
    assert ours.shape == ref.shape == (200, 320, 3)
    assert np.array_equal(ours, ref)
    write_figure(fig, tmp_path / "chart.svg", dpi=100)
    assert (tmp_path / "chart.svg").read_text().lstrip().startswith("<?xml")


def test_reading_the_umask_never_changes_it(monkeypatch):
    # PNGs are written from a worker thread; os.umask(0) there would, for an instant, make the
    # main thread's new files world-writable (common practice, no source: read /proc instead)
    import os

    from mapdrift import atomic

    if not os.path.exists("/proc/self/status"):
        pytest.skip("no /proc here: the umask read at import is used")
    expected = atomic._umask()

    def forbidden(_mask):
        raise AssertionError("os.umask called while writing")

    monkeypatch.setattr(os, "umask", forbidden)
    assert atomic._umask() == expected
    with background_writes():
        path = write_png(_pictures(1)[0], Path(os.environ.get("TMPDIR", "/tmp")) / "umask.png")
    assert path.is_file()
    path.unlink()


def test_frames_are_on_disk_when_write_png_frames_returns_even_in_a_block(tmp_path):
    from mapdrift.render.encode import write_png_frames

    pics = _pictures(4)
    with background_writes():
        paths = write_png_frames(pics, tmp_path / "frames", ["2001", "2002", "2003", "2004"])
        assert all(p.stat().st_size > 0 for p in paths)  # readable inside the caller's block
