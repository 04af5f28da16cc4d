"""PNG files encoded on the second core while the next picture is drawn.

A run writes some 40 PNG pictures (maps, slides, charts, the poster); deflating them is about a
sixth of the demo's time. Pillow releases the GIL while it encodes, so inside
:func:`background_writes` :func:`write_png` hands the encoding to one worker thread and returns
at once; drawing (matplotlib, numpy) goes on in the calling thread. Leaving the block waits for
every write and raises the first error, so a step's files all exist when the step ends.

Outside the block (a notebook, a single command's helper) :func:`write_png` writes before it
returns, as any save does. Every write is atomic (:func:`mapdrift.atomic.atomic_path`) and the
bytes do not depend on which thread wrote them.
"""

from __future__ import annotations

import contextvars
from collections.abc import Iterator
from concurrent.futures import Future, ThreadPoolExecutor
from contextlib import contextmanager
from pathlib import Path
from typing import Any

import numpy as np

from mapdrift.atomic import atomic_path

__all__ = ["background_writes", "write_figure", "write_png"]

#: zlib level of every PNG we write: 6 is zlib's default; level 1 saved a quarter of the time
#: for files 14 % larger on the demo's pictures, not worth it once encoding is off the path.
COMPRESS_LEVEL = 6

_POOL: contextvars.ContextVar[_Writes | None] = contextvars.ContextVar("mapdrift_png", default=None)


class _Writes:
    def __init__(self) -> None:
        self.pool = ThreadPoolExecutor(max_workers=1, thread_name_prefix="mapdrift-png")
        self.pending: list[Future[Path]] = []


def _save(image: Any, path: Path) -> Path:
    from PIL import Image

    img = Image.fromarray(image) if isinstance(image, np.ndarray) else image
    with atomic_path(path) as tmp:
        img.save(tmp, format="PNG", compress_level=COMPRESS_LEVEL)
    return path


def write_png(image: np.ndarray | Any, path: Path | str) -> Path:
    """Write ``image`` (``[H, W, 3|4]`` uint8 array or a Pillow image) to ``path`` as PNG.

    Inside :func:`background_writes` the encoding runs on a worker thread: the caller must not
    change ``image`` afterwards (pass a fresh array, e.g. ``renderer.frame(j)``).
    """
    path = Path(path)
    writes = _POOL.get()
    if writes is None:
        return _save(image, path)
    writes.pending.append(writes.pool.submit(_save, image, path))
    return path


def write_figure(fig: Any, path: Path | str, *, dpi: float, facecolor: str = "white") -> Path:
    """Save a matplotlib figure to ``path`` (format from the suffix) at ``dpi``.

    A PNG is drawn here by the Agg canvas and encoded by :func:`write_png` (so in the
    background inside :func:`background_writes`); other formats are saved by ``savefig``.
    """
    path = Path(path)
    fmt = path.suffix.lower().lstrip(".") or "png"
    if fmt != "png":
        with atomic_path(path) as tmp:
            fig.savefig(tmp, format=fmt, dpi=dpi, facecolor=facecolor)
        return path
    from matplotlib.backends.backend_agg import FigureCanvasAgg

    fig.set_dpi(dpi)
    fig.patch.set_facecolor(facecolor)
    canvas = FigureCanvasAgg(fig)
    canvas.draw()
    rgba = np.asarray(canvas.buffer_rgba())
    # the figure's face is opaque: RGB holds every pixel (the copy leaves the canvas free)
    image = rgba[..., :3].copy() if bool((rgba[..., 3] == 255).all()) else rgba.copy()
    return write_png(image, path)


@contextmanager
def background_writes() -> Iterator[None]:
    """Within the block, :func:`write_png` encodes on a worker thread; the exit waits for all.

    The first failed write is raised at the exit (after every other write has finished or
    failed), unless the block itself raised.
    """
    writes = _Writes()
    token = _POOL.set(writes)
    failed = True
    try:
        yield
        failed = False
    finally:
        _POOL.reset(token)
        writes.pool.shutdown(wait=True)
        if not failed:
            for fut in writes.pending:
                fut.result()
