"""Atomic file writes: write to a temporary name beside the target, then rename.

A run that fails part-way never leaves a half-written file under a final name.
"""

from __future__ import annotations

import os
import tempfile
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from pathlib import Path

__all__ = ["atomic_path", "write_bytes", "write_text", "write_with"]


@contextmanager
def atomic_path(target: Path | str, suffix: str | None = None) -> Iterator[Path]:
    """Yield a temporary path beside ``target``; rename it onto ``target`` if the block succeeds.

    The temporary name keeps the target's suffix so writers that infer the format from the
    extension (GIF, MP4, GeoPackage) still work.
    """
    target = Path(target)
    target.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(
        prefix=f".{target.stem}.",
        suffix=suffix if suffix is not None else target.suffix,
        dir=target.parent,
    )
    os.close(fd)
    tmp_path = Path(tmp)
    try:
        yield tmp_path
        if tmp_path.is_file():  # mkstemp makes 0600 files; outputs get the usual umask mode
            os.chmod(tmp_path, 0o666 & ~_umask())
        os.replace(tmp_path, target)
    finally:
        if tmp_path.exists():
            tmp_path.unlink()


def _proc_umask() -> int | None:
    """The process umask from ``/proc`` (Linux): a read-only look, safe while another thread
    creates files; None where it cannot be read."""
    try:
        with open("/proc/self/status", encoding="ascii") as f:
            for line in f:
                if line.startswith("Umask:"):
                    return int(line.split()[1], 8)
    except (OSError, ValueError):
        pass
    return None


def _umask_at_import() -> int:
    mask = _proc_umask()
    if mask is None:  # set and restore, once, at import (before any worker thread)
        mask = os.umask(0)
        os.umask(mask)
    return mask


_UMASK_AT_IMPORT = _umask_at_import()


def _umask() -> int:
    """The umask for new outputs. PNGs are written from a worker thread (``pngwrite``): setting
    the umask to read it would, for an instant, let the main thread create world-writable
    files, so where ``/proc`` cannot be read the value read at import is used."""
    mask = _proc_umask()
    return _UMASK_AT_IMPORT if mask is None else mask


def write_bytes(target: Path, data: bytes) -> Path:
    with atomic_path(target) as tmp:
        tmp.write_bytes(data)
    return target


def write_text(target: Path, text: str) -> Path:
    with atomic_path(target) as tmp:
        tmp.write_text(text, encoding="utf-8", newline="\n")
    return target


def write_with(target: Path, writer: Callable[[Path], object]) -> Path:
    """Call ``writer(tmp_path)`` and rename the result onto ``target``."""
    with atomic_path(target) as tmp:
        writer(tmp)
    return target
