"""16:9 slides as PNG (1920 x 1080), drawn with Pillow so every text box is measured.

A :class:`Slide` says what goes on it (title, images, bullets, a table, speaker notes); the same
list feeds :mod:`mapdrift.brief.deck` for the PPTX. :func:`draw_slide` returns the image and the
boxes of every text it drew, so tests can check that no text leaves the slide.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING

from mapdrift.brief.textfit import _font, fit, line_height, text_width

if TYPE_CHECKING:
    import pandas as pd
    from PIL import Image

__all__ = [
    "H",
    "MIN_TEXT_PX",
    "PICTURE_BOX",
    "W",
    "Box",
    "Slide",
    "draw_slide",
    "layout",
    "split_text_region",
    "write_slide_pngs",
]

W, H = 1920, 1080
MARGIN = 80
INK, MUTED, RULE, ACCENT, WARN = (
    (29, 35, 48),
    (91, 100, 117),
    (217, 221, 229),
    (47, 93, 138),
    (138, 90, 0),
)
Box = tuple[float, float, float, float]


@dataclass(frozen=True)
class Slide:
    """One slide. ``movie`` is embedded in the deck (its poster is ``images[0]``)."""

    key: str
    title: str
    subtitle: str = ""
    images: tuple[Path, ...] = ()
    bullets: tuple[str, ...] = ()
    table: pd.DataFrame | None = None
    notes: str = ""
    caption: str = ""
    movie: Path | None = None
    fallback: Path | None = None
    notice: str | None = None


@dataclass(frozen=True)
class Region:
    """Where things go on a slide, in pixels of the 1920 x 1080 canvas."""

    title: Box
    subtitle: Box
    notice: Box
    images: tuple[Box, ...]
    text: Box | None
    caption: Box
    footer: Box


#: Size of the picture box of a slide with one picture and nothing else (pictures drawn for
#: the slides are made at this size, so they fill it pixel for pixel).
PICTURE_BOX = (W - 2 * MARGIN, 860)
#: Smallest text on a slide and on the pictures drawn for it, in pixels of the 1080p slide.
MIN_TEXT_PX = 18


def layout(slide: Slide) -> Region:
    """Boxes for the slide's parts; shared by the PNG and PPTX writers."""
    top = 196 if slide.subtitle else 150
    notice = (MARGIN, top - 4, W - MARGIN, top + 46) if slide.notice else (0, 0, 0, 0)
    if slide.notice:
        top += 58
    bottom = 960 if slide.caption else 1010
    caption = (MARGIN, bottom + 4, W - MARGIN, bottom + 44)
    n_img = len(slide.images)
    has_text = bool(slide.bullets) or slide.table is not None
    if slide.key == "title":
        return Region(
            (MARGIN, 300, W - MARGIN, 520),
            (MARGIN, 540, W - MARGIN, 700),
            (MARGIN, 720, W - MARGIN, 780),
            (),
            (MARGIN, 800, W - MARGIN, 940),
            caption,
            (MARGIN, 1000, W - MARGIN, 1050),
        )
    if n_img and has_text:
        split = MARGIN + int((W - 2 * MARGIN) * 0.62)
        images = ((MARGIN, top, split - 30, bottom),)
        text: Box | None = (split + 10, top, W - MARGIN, bottom)
    elif n_img:
        gap = 40
        width = (W - 2 * MARGIN - gap * (n_img - 1)) / n_img
        images = tuple(
            (MARGIN + i * (width + gap), top, MARGIN + i * (width + gap) + width, bottom)
            for i in range(n_img)
        )
        text = None
    else:
        images, text = (), (MARGIN, top, W - MARGIN, bottom)
    return Region(
        (MARGIN, 34, W - MARGIN, 140),
        (MARGIN, 140, W - MARGIN, 190),
        notice,
        images,
        text,
        caption,
        (MARGIN, 1030, W - MARGIN, 1074),
    )


def _draw_lines(draw, lines: list[str], box: Box, size: float, colour, bold: bool = False) -> Box:
    x0, y0 = box[0], box[1]
    font = _font(int(round(size)), bold)
    y = y0
    right = x0
    for line in lines:
        draw.text((x0, y), line, font=font, fill=colour)
        right = max(right, x0 + text_width(line, size, bold))
        y += line_height(size)
    return (x0, y0, right, y)


def _text(
    draw, text: str, box: Box, max_px: float, colour, bold: bool = False, min_px: float = 14
) -> Box:
    size, wrapped = fit(
        [text], box[2] - box[0], box[3] - box[1], max_px=max_px, min_px=min_px, bold=bold
    )
    return _draw_lines(draw, wrapped[0], box, size, colour, bold)


def _paste(canvas: Image.Image, path: Path, box: Box) -> Box:
    from PIL import Image

    with Image.open(path) as im:
        im = im.convert("RGB")
        bw, bh = box[2] - box[0], box[3] - box[1]
        scale = min(bw / im.width, bh / im.height)
        size = (max(1, int(im.width * scale)), max(1, int(im.height * scale)))
        im = im.resize(size, Image.LANCZOS)
        x = int(box[0] + (bw - size[0]) / 2)
        y = int(box[1] + (bh - size[1]) / 2)
        canvas.paste(im, (x, y))
        return (x, y, x + size[0], y + size[1])


def _bullets(draw, bullets: tuple[str, ...], box: Box, max_px: float = 34) -> list[Box]:
    width = box[2] - box[0] - 36
    size, wrapped = fit(list(bullets), width, box[3] - box[1], max_px=max_px, min_px=MIN_TEXT_PX)
    boxes = []
    y = box[1]
    for lines in wrapped:
        draw.ellipse(
            (box[0] + 4, y + size * 0.45, box[0] + 4 + size * 0.35, y + size * 0.8), fill=ACCENT
        )
        b = _draw_lines(draw, lines, (box[0] + 36, y, box[2], box[3]), size, INK)
        boxes.append(b)
        y = b[3] + 0.4 * line_height(size)
    return boxes


def table_cells(df: pd.DataFrame, max_rows: int = 12) -> list[list[str]]:
    """Header plus up to ``max_rows`` rows as text (numbers with two decimals)."""
    rows = [[str(c) for c in df.columns]]
    for rec in df.head(max_rows).itertuples(index=False):
        rows.append([_cell(v) for v in rec])
    return rows


def _cell(v: object) -> str:
    """One table cell: floats with two decimals, integers with thousands separators."""
    import numbers

    if v is None:
        return ""
    if isinstance(v, bool):
        return str(v)
    if isinstance(v, numbers.Integral):
        return f"{int(v):,}"
    if isinstance(v, numbers.Real):
        return f"{float(v):,.2f}"
    return str(v)


def table_geometry(cells: list[list[str]], box: Box) -> tuple[float, list[float]]:
    """Font size and column widths so the table fits ``box`` (widths sum to the box width)."""
    bw, bh = box[2] - box[0], box[3] - box[1]
    size = max(min(30.0, bh / (len(cells) * 1.5)), MIN_TEXT_PX)
    while True:
        need = [
            max(text_width(r[j], size, i == 0) for i, r in enumerate(cells)) + 24
            for j in range(len(cells[0]))
        ]
        if sum(need) <= bw or size <= MIN_TEXT_PX:
            break
        size = max(size * 0.92, MIN_TEXT_PX)
    extra = (bw - sum(need)) / len(need) if sum(need) < bw else 0
    return size, [n + extra for n in need]


def split_text_region(slide: Slide, box: Box) -> tuple[Box | None, Box | None]:
    """Where the table and the bullets go inside the text box (shared by PNG and PPTX).

    The table takes the whole box, or its top 70 % when bullets follow; the bullets start 30 px
    below the table's last row.
    """
    table_box = bullets_box = None
    top = box[1]
    if slide.table is not None:
        table_box = (
            box if not slide.bullets else (box[0], box[1], box[2], box[1] + 0.7 * (box[3] - box[1]))
        )
        cells = table_cells(slide.table)
        size, _ = table_geometry(cells, table_box)
        top = box[1] + size * 1.5 * len(cells) + 30
    if slide.bullets:
        bullets_box = (box[0], top, box[2], box[3])
    return table_box, bullets_box


def _table(draw, df: pd.DataFrame, box: Box) -> list[Box]:
    cells = table_cells(df)
    size, widths = table_geometry(cells, box)
    row_h = size * 1.5
    boxes = []
    y = box[1]
    for i, row in enumerate(cells):
        x = box[0]
        if i == 0:
            draw.rectangle((box[0], y, box[2], y + row_h), fill=(243, 245, 248))
        for j, cell in enumerate(row):
            label = cell
            while text_width(label, size, i == 0) > widths[j] - 16 and len(label) > 1:
                label = label[:-2] + "…"
            draw.text(
                (x + 10, y + size * 0.22), label, font=_font(int(round(size)), i == 0), fill=INK
            )
            boxes.append((x + 10, y, x + 10 + text_width(label, size, i == 0), y + row_h))
            x += widths[j]
        y += row_h
        draw.line((box[0], y, box[2], y), fill=RULE, width=2)
    return boxes


def draw_slide(
    slide: Slide, number: int, total: int, footer: str = ""
) -> tuple[Image.Image, list[Box]]:
    """The slide as an RGB image and the boxes of all texts drawn on it."""
    from PIL import Image, ImageDraw

    img = Image.new("RGB", (W, H), "white")
    d = ImageDraw.Draw(img)
    r = layout(slide)
    boxes: list[Box] = []
    if slide.key == "title":
        d.rectangle((0, 0, 24, H), fill=ACCENT)
        boxes.append(_text(d, slide.title, r.title, 84, INK, bold=True))
        if slide.subtitle:
            boxes.append(_text(d, slide.subtitle, r.subtitle, 40, MUTED))
        if slide.notice:
            boxes.append(_text(d, slide.notice, r.notice, 30, WARN, bold=True))
        if slide.bullets:
            boxes.append(_text(d, " · ".join(slide.bullets), r.text or r.caption, 30, MUTED))
    else:
        d.rectangle((0, 0, W, 12), fill=ACCENT)
        boxes.append(_text(d, slide.title, r.title, 54, INK, bold=True, min_px=30))
        if slide.subtitle:
            boxes.append(_text(d, slide.subtitle, r.subtitle, 32, MUTED, min_px=MIN_TEXT_PX))
        if slide.notice:
            d.rectangle(r.notice, fill=(255, 248, 230), outline=(227, 198, 122))
            inner = (r.notice[0] + 14, r.notice[1] + 8, r.notice[2] - 14, r.notice[3] - 4)
            boxes.append(_text(d, slide.notice, inner, 26, WARN, bold=True, min_px=MIN_TEXT_PX))
        for path, box in zip(slide.images, r.images):
            if path.exists():
                _paste(img, path, box)
        if r.text is not None:
            table_box, bullets_box = split_text_region(slide, r.text)
            if table_box is not None:
                boxes += _table(d, slide.table, table_box)
            if bullets_box is not None:
                boxes += _bullets(d, slide.bullets, bullets_box)
        if slide.caption:
            boxes.append(_text(d, slide.caption, r.caption, 24, MUTED, min_px=MIN_TEXT_PX))
    footer = "" if slide.images else footer  # pictures carry their own source line
    foot = f"{footer}   {number}/{total}" if footer else f"{number}/{total}"
    size = 22
    x = W - MARGIN - text_width(foot, size)
    d.text((x, r.footer[1]), foot, font=_font(size, False), fill=MUTED)
    boxes.append((x, r.footer[1], W - MARGIN, r.footer[1] + line_height(size)))
    return img, boxes


def write_slide_pngs(slides: list[Slide], folder: Path, *, footer: str = "") -> list[Path]:
    """Write ``slides/01-title.png``... atomically; returns the paths."""
    from mapdrift.pngwrite import write_png

    folder.mkdir(parents=True, exist_ok=True)
    out = []
    for i, s in enumerate(slides, 1):
        img, _ = draw_slide(s, i, len(slides), footer)
        # zlib's default level; optimize=True took 3 s for a few % smaller files
        out.append(write_png(img, folder / f"{i:02d}-{s.key}.png"))
    return out
