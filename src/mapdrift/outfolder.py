"""The output folder of a run: what may be replaced, the lock, staging and the recoverable swap.

A run writes into a staging folder ``.<out>.partial-<pid>`` beside ``out`` and swaps it in only
when every step succeeded. The rules that keep users' files safe:

- ``out`` is replaced (with ``force``) only when an earlier mapdrift run made it: it holds our
  ``manifest.json`` and nothing but the files that manifest lists, unchanged (operating-system
  clutter such as ``.DS_Store`` aside). A folder holding an input of this run, an unknown file
  or an edited output is never replaced; :func:`blockers` says exactly what blocks it.
- One run at a time per ``out``: a lock file ``.<out>.lock`` beside it (``fcntl.flock``, freed
  by the kernel if the run dies) makes a second run into the same folder stop at once.
- The check is repeated at swap time, after ``out`` was renamed aside to ``.<out>.old-<pid>``,
  so a file added to ``out`` during the run stops the swap and ``out`` is put back.
- The new run's manifest names the folder the earlier run is set aside as (``"replaces"``),
  and the set-aside folder's ``manifest.json`` is deleted first when it is thrown away. So the
  next run (:func:`recover`) can tell an interrupted swap (set-aside run intact, ``out``
  missing: renamed back) from a finished one (removed); anything else is reported, not touched. Staging
  folders of killed runs are removed, after stopping any encoder still writing into them.
"""

from __future__ import annotations

import json
import logging
import os
import shutil
import signal
import sys
from collections.abc import Iterable, Iterator
from contextlib import contextmanager, suppress
from pathlib import Path

from mapdrift.errors import OutputExistsError
from mapdrift.findings import examples, plural

__all__ = [
    "OS_CLUTTER",
    "blockers",
    "check_replaceable",
    "lock_out",
    "recover",
    "remove_staging",
    "set_aside_for",
    "staging_for",
    "swap_in",
]

log = logging.getLogger(__name__)

#: Files an operating system drops into folders it shows; never a reason to refuse.
OS_CLUTTER: frozenset[str] = frozenset({".DS_Store", "Thumbs.db", "desktop.ini"})
MANIFEST = "manifest.json"


def staging_for(out: Path) -> Path:
    """The staging folder of this process for ``out`` (beside it, hidden)."""
    return out.with_name(f".{out.name}.partial-{os.getpid()}")


def set_aside_for(out: Path) -> Path:
    """Where this process sets an earlier run aside while swapping in a new one."""
    return out.with_name(f".{out.name}.old-{os.getpid()}")


def _inside(path: Path, folder: Path) -> bool:
    try:
        path.resolve().relative_to(folder.resolve())
    except ValueError:
        return False
    return True


def _manifest_doc(folder: Path) -> dict:
    """``folder``'s manifest as a dict; empty when missing, unreadable or not ours."""
    from mapdrift.brief.manifest import MANIFEST_FORMAT

    try:
        doc = json.loads((folder / MANIFEST).read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return {}
    return doc if isinstance(doc, dict) and doc.get("format") == MANIFEST_FORMAT else {}


def _manifest_outputs(folder: Path) -> dict[str, tuple[str, int]] | None:
    """``{relative path: (sha256, bytes)}`` from ``folder``'s manifest, or None if not ours."""
    doc = _manifest_doc(folder)
    if not doc:
        return None
    out: dict[str, tuple[str, int]] = {}
    for entry in doc.get("outputs", []):
        try:
            out[str(entry["path"])] = (str(entry["sha256"]), int(entry["bytes"]))
        except (KeyError, TypeError, ValueError):
            return None
    return out


def blockers(out: Path, inputs: Iterable[Path] = (), *, hashes: bool = True) -> list[str]:
    """Why ``out`` may not be replaced: empty list when an earlier mapdrift run made it.

    Each item is a short phrase for the error message (inputs of this run inside it, unknown
    files, outputs changed since the run wrote them, or no manifest at all).
    """
    from mapdrift.brief.manifest import sha256

    out = Path(out)
    if not out.exists():
        return []
    if not out.is_dir():
        return [f"{out} is a file, not a folder"]
    reasons: list[str] = []
    held = sorted({str(p) for p in inputs if _inside(Path(p), out)})
    if held:
        reasons.append(
            f"it holds {plural(len(held), 'input')} of this run ({examples(held, 3, total=False)})"
        )
    listed = _manifest_outputs(out)
    files = sorted(
        p.relative_to(out).as_posix()
        for p in out.rglob("*")
        if (p.is_file() or p.is_symlink()) and p.name not in OS_CLUTTER
    )
    if listed is None:
        if files:
            what = (
                "an unreadable manifest.json" if (out / MANIFEST).exists() else "no manifest.json"
            )
            reasons.append(
                f"it is not a mapdrift run folder ({what}; it holds {examples(files, 4)})"
            )
        return reasons
    unknown = [f for f in files if f != MANIFEST and f not in listed]
    if unknown:
        reasons.append(
            f"it holds {plural(len(unknown), 'file')} no mapdrift run wrote "
            f"({examples(unknown, 4, total=False)})"
        )
    if hashes:
        changed = []
        for rel, (digest, size) in listed.items():
            p = out / rel
            if p.is_file() and (p.stat().st_size != size or sha256(p) != digest):
                changed.append(rel)
        if changed:
            reasons.append(
                f"{plural(len(changed), 'output')} changed since the run wrote them "
                f"({examples(changed, 4, total=False)})"
            )
    return reasons


def check_replaceable(out: Path, inputs: Iterable[Path], *, force: bool, when: str = "") -> None:
    """Raise OutputExistsError unless ``out`` is new, empty, or (with ``force``) an earlier run."""
    out = Path(out)
    if not out.exists() or (out.is_dir() and not any(out.iterdir())):
        return
    reasons = blockers(out, inputs)
    if reasons:
        raise OutputExistsError(
            f"{out}{when}: not replacing it, even with --force: {'; '.join(reasons)}. mapdrift "
            "replaces only a folder an earlier run wrote; choose a new --out folder"
        )
    if not force:
        raise OutputExistsError(
            f"{out}{when} holds an earlier mapdrift run; pass --force to replace it or choose "
            "another --out"
        )


# ------------------------------------------------------------------------------------------
# one run at a time per output folder
# ------------------------------------------------------------------------------------------
@contextmanager
def lock_out(out: Path) -> Iterator[None]:
    """Hold ``.<out>.lock`` beside ``out`` for the run; raise if another run holds it.

    ``flock`` locks are freed by the kernel when a process dies, so a killed run never leaves a
    stale lock. The lock file is removed on the way out (the inode check on taking it makes that
    safe against a run that opened it just before).
    """
    try:
        import fcntl
    except ImportError:  # pragma: no cover - Windows: no advisory locks, the swap checks remain
        yield
        return
    path = out.with_name(f".{out.name}.lock")
    while True:
        fd = os.open(path, os.O_RDWR | os.O_CREAT, 0o644)
        try:
            fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except BlockingIOError:
            try:
                other = os.read(fd, 32).decode(errors="replace").strip() or "?"
            finally:
                os.close(fd)
            raise OutputExistsError(
                f"{out}: another mapdrift run (pid {other}) is writing to this folder; wait for "
                "it to finish or choose another --out"
            ) from None
        try:
            same = os.fstat(fd).st_ino == os.stat(path).st_ino
        except FileNotFoundError:
            same = False
        if same:
            break
        os.close(fd)  # the holder removed it between our open and lock: take the new one
    try:
        os.ftruncate(fd, 0)
        os.write(fd, str(os.getpid()).encode())
        yield
    finally:
        with suppress(FileNotFoundError):
            os.unlink(path)
        os.close(fd)


def list_output(out: Path, path: Path) -> bool:
    """Record ``path`` (a file mapdrift just wrote inside the run folder ``out``) in the run's
    manifest with its current hash, so the folder stays replaceable by ``--force``.

    ``mapdrift explore RUN_FOLDER --force`` rewrites ``explorer.html`` inside a run: without
    this the next ``run --force`` would refuse the folder ("an output changed since the run").
    Returns False (and changes nothing) when ``out`` is not a run folder of ours. Call it while
    holding :func:`lock_out`.
    """
    from mapdrift.atomic import write_text
    from mapdrift.brief.manifest import sha256

    doc = _manifest_doc(out)
    if not doc or _manifest_outputs(out) is None:
        return False
    rel = path.resolve().relative_to(out.resolve()).as_posix()
    entry = {"path": rel, "sha256": sha256(path), "bytes": path.stat().st_size}
    outputs = [e for e in doc.get("outputs", []) if e.get("path") != rel] + [entry]
    doc["outputs"] = sorted(outputs, key=lambda e: str(e["path"]))
    write_text(out / MANIFEST, json.dumps(doc, indent=2, sort_keys=False) + "\n")
    return True


# ------------------------------------------------------------------------------------------
# recovery of killed runs, and the swap
# ------------------------------------------------------------------------------------------
def _stop_writers(folder: Path) -> int:
    """SIGKILL processes (encoders of a killed run) with a file of ``folder`` on their command
    line; Linux only (reads ``/proc``), elsewhere nothing is stopped."""
    proc = Path("/proc")
    if not proc.is_dir():
        return 0
    key = folder.name.encode()
    stopped = 0
    for entry in proc.iterdir():
        if not entry.name.isdigit() or int(entry.name) == os.getpid():
            continue
        try:
            args = (entry / "cmdline").read_bytes().split(b"\0")
            if not any(key in a for a in args):
                continue
            cwd = Path(os.readlink(entry / "cwd"))
        except OSError:
            continue
        named = (cwd / os.fsdecode(a) for a in args if key in a)
        if any(_inside(p, folder) for p in named):
            try:
                os.kill(int(entry.name), signal.SIGKILL)
                stopped += 1
            except OSError:
                pass
    return stopped


def remove_staging(staging: Path) -> int:
    """Remove a staging folder, first stopping any process still writing into it (an encoder
    finishing its file as the run dies could otherwise recreate a file mid-removal). Returns
    the number of processes stopped."""
    stopped = 0
    for _ in range(3):
        if not staging.exists():
            break
        shutil.rmtree(staging, ignore_errors=True)
        if staging.exists():
            stopped += _stop_writers(staging)
    return stopped


def recover(out: Path) -> list[str]:
    """Clean up after killed runs into ``out`` (call with the lock held); return what was done.

    Stale ``.<out>.partial-*`` staging folders are removed (encoders still writing into them
    are stopped first). An intact ``.<out>.old-*`` folder (one with its manifest) is an earlier
    run set aside by a swap that was cut short: it is renamed back to ``out`` when ``out`` is
    missing, and reported (left alone) otherwise. An ``.old-*`` folder that ``out``'s manifest
    names as the run it replaced (``"replaces"``), or one whose manifest was already deleted,
    belongs to a swap that finished: it is removed.
    """
    out = Path(out)
    done: list[str] = []
    parent = out.parent if str(out.parent) else Path(".")
    if not parent.is_dir():
        return done
    for stale in sorted(parent.glob(f".{out.name}.partial-*")):
        if stale.is_dir() and stale != staging_for(out):
            n = _stop_writers(stale) + remove_staging(stale)
            done.append(
                f"removed {stale.name}, the staging folder of a run that was killed"
                + (f" (stopped {n} encoder process(es) still writing into it)" if n else "")
            )
    for old in sorted(parent.glob(f".{out.name}.old-*")):
        if not old.is_dir():
            continue
        replaced_by_out = _manifest_doc(out).get("replaces") == old.name
        if (old / MANIFEST).exists() and not replaced_by_out:
            if not out.exists():
                os.replace(old, out)
                done.append(f"restored {out} from {old.name}: a run was killed while replacing it")
            else:
                done.append(
                    f"{old} holds an earlier run set aside by a replacement that was cut short; "
                    f"{out} exists too, so it was left alone: keep or delete it yourself"
                )
                log.warning(done[-1])
        else:
            shutil.rmtree(old, ignore_errors=True)
            done.append(f"removed {old.name}, an earlier run a killed run had replaced")
    return done


@contextmanager
def _signals_held() -> Iterator[None]:
    """Hold SIGINT/SIGTERM for the two renames, so a Ctrl-C cannot land between them."""
    if sys.platform.startswith("win") or not hasattr(signal, "pthread_sigmask"):
        yield
        return
    held = {signal.SIGINT, signal.SIGTERM}
    previous = signal.pthread_sigmask(signal.SIG_BLOCK, held)
    try:
        yield
    finally:
        signal.pthread_sigmask(signal.SIG_SETMASK, previous)


def swap_in(staging: Path, out: Path, inputs: Iterable[Path], *, force: bool) -> None:
    """Move ``staging`` to ``out``, replacing an earlier run only as :func:`check_replaceable`
    allows, checked again on the set-aside folder so nothing added meanwhile is lost."""
    inputs = list(inputs)
    with _signals_held():
        if not out.exists():
            try:
                os.rename(staging, out)
            except OSError:  # a non-empty folder appeared under that name during the run
                raise OutputExistsError(
                    f"{out}: a folder of that name was created while this run worked; not "
                    "replacing it. Choose another --out"
                ) from None
            return
        check_replaceable(out, inputs, force=force, when=" (at the end of the run)")
        old = set_aside_for(out)
        os.rename(out, old)
        reasons = blockers(old)
        if reasons:  # something arrived between the check and the rename: put it back
            os.rename(old, out)
            raise OutputExistsError(
                f"{out} changed during the run: {'; '.join(reasons)}; it was left as it was. "
                "Choose a new --out folder"
            )
        os.rename(staging, out)
        (old / MANIFEST).unlink(missing_ok=True)  # from here on, `old` is garbage
    shutil.rmtree(old, ignore_errors=True)
