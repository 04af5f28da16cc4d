"""Atomic writes: a temporary name, then a rename; normal file modes."""

from __future__ import annotations


def test_atomic_outputs_get_normal_permissions(tmp_path):
    # files written through a temporary name keep the umask's mode, not mkstemp's 0600
    import os

    from mapdrift.atomic import write_text

    p = write_text(tmp_path / "a.txt", "x")
    mask = os.umask(0)
    os.umask(mask)
    assert (p.stat().st_mode & 0o777) == (0o666 & ~mask)


def test_failed_write_leaves_target_untouched(tmp_path):
    import pytest

    from mapdrift.atomic import atomic_path

    target = tmp_path / "t.csv"
    target.write_text("old")
    with pytest.raises(RuntimeError), atomic_path(target) as tmp:
        tmp.write_text("half")
        raise RuntimeError("boom")
    assert target.read_text() == "old"
    assert [p.name for p in tmp_path.iterdir()] == ["t.csv"]
