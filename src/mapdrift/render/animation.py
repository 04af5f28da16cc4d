"""One call from class codes to an animation file: frames, encoder, and the ``max_mb`` budget.

:func:`animate` picks the encoder from the output name (``.gif``, ``.mp4``, or a folder for PNG
frames) and streams :class:`~mapdrift.render.frames.FrameRenderer` frames into it. With
``max_mb`` it re-renders smaller (never below 480 px wide), then with every other period, until
the file fits, and says what it did in a finding.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from mapdrift.errors import ConfigError, OutputExistsError
from mapdrift.findings import Finding

__all__ = ["AnimateOptions", "AnimateResult", "animate", "parse_size"]

MIN_WIDTH = 480


def parse_size(text: str | Sequence[int]) -> tuple[int, int]:
    """``'1280x720'`` (or ``(1280, 720)``) -> ``(1280, 720)``; ConfigError naming ``--size``
    when malformed or out of range. The one size check of the flag, the config and ``--set``."""
    try:
        if isinstance(text, str):
            w, h = (int(v) for v in str(text).lower().replace(" ", "").split("x"))
        else:
            w, h = (int(v) for v in text)
    except (TypeError, ValueError):
        raise ConfigError(
            f"--size {text!r} should be WIDTHxHEIGHT in pixels, e.g. 1280x720"
        ) from None
    if not (200 <= w <= 7680 and 150 <= h <= 4320):
        raise ConfigError(f"--size {w}x{h} is out of range; use 200x150 up to 7680x4320")
    return w, h


@dataclass(frozen=True)
class AnimateOptions:
    """How to animate (the config's ``[animate]`` section maps onto this).

    ``seconds_per_period`` per frame, the last held ``hold_last`` seconds; ``fps`` and
    ``tween`` (cross-fade frames) for MP4; ``max_mb`` a size budget for the file;
    ``min_unit_px`` draws smaller units as dots; ``loop`` 0 = forever (GIF).
    """

    size: tuple[int, int] = (1280, 720)
    seconds_per_period: float = 1.0
    hold_last: float = 3.0
    fps: int = 10
    tween: int = 0
    max_mb: float | None = None
    min_unit_px: float = 3.0
    north_arrow: bool = False
    scale_units: str = "km"
    loop: int = 0

    def __post_init__(self) -> None:
        # every range is checked here, so flags, config keys and --set share one path
        object.__setattr__(self, "size", parse_size(self.size))
        if not 1 <= self.fps <= 120:
            raise ConfigError(f"--fps {self.fps} is out of range; use 1 to 120")
        if self.seconds_per_period <= 0 or self.hold_last < 0 or self.tween < 0:
            raise ConfigError("--seconds-per-period must be > 0, --hold-last and --tween >= 0")
        if self.scale_units not in ("km", "mi"):
            raise ConfigError(f"scale_units {self.scale_units!r} must be km or mi")
        if self.loop < 0:
            raise ConfigError(f"loop {self.loop} must be 0 (forever) or a number of repeats")
        if self.max_mb is not None and self.max_mb <= 0:
            raise ConfigError(f"--max-mb {self.max_mb:g} must be positive, e.g. 5")
        if self.min_unit_px < 0:
            raise ConfigError("--min-unit-px must be 0 (off) or a size in pixels such as 3")


@dataclass(frozen=True)
class AnimateResult:
    """What :func:`animate` wrote: the file (or PNG folder), its kind, frame size and findings."""

    path: Path
    kind: str
    size: tuple[int, int]
    frames: int
    bytes: int
    periods: tuple[str, ...]
    findings: tuple[Finding, ...] = field(default=())
    files: tuple[Path, ...] = field(default=())


def _kind(out: Path) -> str:
    suffix = out.suffix.lower()
    if suffix in (".gif", ".mp4"):
        return suffix[1:]
    if suffix == "":
        return "png"
    raise ConfigError(
        f"--out {out}: animations are written as .gif, .mp4 or a folder of PNG frames (no suffix), "
        f"not {suffix}"
    )


def animate(
    geometry: Any,
    codes: np.ndarray,
    colours: Sequence[str],
    labels: Sequence[str] | Sequence[Sequence[str]],
    period_labels: Sequence[str],
    out: Path | str,
    *,
    options: AnimateOptions | None = None,
    force: bool = False,
    **text: Any,
) -> AnimateResult:
    """Render every period and write ``out`` (.gif, .mp4, or a folder of PNG frames).

    ``text`` passes title, subtitle, caption, notice, legend_title, nodata_label, outlines,
    outline_label and names on to :class:`~mapdrift.render.frames.FrameRenderer`.
    """
    from mapdrift.render import encode
    from mapdrift.render.frames import FrameRenderer

    opts = options or AnimateOptions()
    out = Path(out)
    kind = _kind(out)
    if kind != "png" and out.exists() and not force:
        raise OutputExistsError(f"{out} exists; pass --force to overwrite it")
    codes = np.asarray(codes)
    n_p = codes.shape[1]
    keep = list(range(n_p))
    size = tuple(opts.size)
    findings: list[Finding] = []
    outlines = text.pop("outlines", None)
    labels_l = list(labels)
    per_period_labels = bool(labels_l) and not isinstance(labels_l[0], str) and len(labels_l) > 1
    first_bytes = None
    step = 1
    files: tuple[Path, ...] = ()
    for attempt in range(8):
        sub_labels = [labels_l[j] for j in keep] if per_period_labels else labels_l
        r = FrameRenderer(
            geometry,
            codes[:, keep],
            colours,
            sub_labels,
            [period_labels[j] for j in keep],
            outlines=[outlines[j] for j in keep] if outlines is not None else None,
            size=size,
            north_arrow=opts.north_arrow,
            scale_units=opts.scale_units,
            min_unit_px=opts.min_unit_px,
            **text,
        )
        if attempt == 0:
            findings += r.findings
        try:
            if kind == "gif":
                encode.write_gif(
                    r,
                    out,
                    seconds_per_period=opts.seconds_per_period * step,
                    hold_last=opts.hold_last,
                    loop=opts.loop,
                    exact_colours=r.exact_colours,
                    force=force or attempt > 0,
                )
            elif kind == "mp4":
                encode.write_mp4(
                    r,
                    out,
                    fps=opts.fps,
                    seconds_per_period=opts.seconds_per_period * step,
                    hold_last=opts.hold_last,
                    tween=opts.tween,
                    force=force or attempt > 0,
                )
            else:
                files = tuple(
                    encode.write_png_frames(r, out, [period_labels[j] for j in keep], force=force)
                )
        finally:
            r.close()
        nbytes = sum(p.stat().st_size for p in files) if kind == "png" else out.stat().st_size
        if first_bytes is None:
            first_bytes = nbytes
        limit = opts.max_mb * 1e6 if opts.max_mb else None
        if limit is None or kind == "png" or nbytes <= limit:
            break
        scale = math.sqrt(limit / nbytes) * 0.93
        new_w = max(int(size[0] * scale) // 2 * 2, MIN_WIDTH)
        if new_w < size[0]:
            size = (new_w, int(round(size[1] * new_w / size[0])) // 2 * 2)
        elif len(keep) > 2:
            step *= 2
            keep = list(range(0, n_p, step))
            if keep[-1] != n_p - 1:
                keep.append(n_p - 1)
        else:
            findings.append(
                Finding(
                    "warning",
                    "animation-over-size",
                    f"{out.name} is {nbytes / 1e6:.1f} MB, over --max-mb {opts.max_mb:g}, even at "
                    f"{size[0]}x{size[1]} with {len(keep)} frames; raise --max-mb or use MP4",
                )
            )
            break
    if (
        opts.max_mb
        and first_bytes is not None
        and (size != tuple(opts.size) or step > 1)
        and kind != "png"
    ):
        what = []
        if size != tuple(opts.size):
            what.append(f"frame size {opts.size[0]}x{opts.size[1]} -> {size[0]}x{size[1]}")
        if step > 1:
            dropped = [period_labels[j] for j in range(n_p) if j not in keep]
            what.append(
                f"one period in {step} kept ({len(dropped)} left out: {', '.join(dropped[:6])}"
                + (", ..." if len(dropped) > 6 else "")
                + ")"
            )
        findings.append(
            Finding(
                "warning" if step > 1 else "note",
                "animation-shrunk",
                f"{out.name} was {first_bytes / 1e6:.1f} MB, over --max-mb {opts.max_mb:g}; "
                f"{'; '.join(what)}: now {nbytes / 1e6:.1f} MB",
            )
        )
    return AnimateResult(
        path=out,
        kind=kind,
        size=(int(size[0]), int(size[1])),
        frames=len(keep),
        bytes=int(nbytes),
        periods=tuple(period_labels[j] for j in keep),
        findings=tuple(findings),
        files=files,
    )
