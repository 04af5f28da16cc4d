"""``brief.pptx``: the slides as a PowerPoint deck (python-pptx), 16:9, with speaker notes.

Positions come from :func:`mapdrift.brief.slides.layout` (pixels of 1920 x 1080; 1 px = 6350
EMU, so 1 px = 0.5 pt). Text is sized with :mod:`mapdrift.brief.textfit` so it fits its shape,
then placed as plain paragraphs (no hard line breaks) in a frame that wraps and shrinks on
overflow, so someone editing the deck gets clean rewrapping. The animation slide carries the MP4 as a movie
with a poster frame, on top of the GIF as a picture: viewers that cannot play the movie show the
(animated) GIF beneath.
"""

from __future__ import annotations

from collections.abc import Sequence
from pathlib import Path
from typing import Any

from mapdrift.atomic import atomic_path
from mapdrift.brief.slides import (
    MARGIN,
    Box,
    Slide,
    W,
    layout,
    split_text_region,
    table_cells,
    table_geometry,
)
from mapdrift.brief.textfit import fit
from mapdrift.outputs import fixed_zip_dates

__all__ = ["EMU_PER_PX", "FONT", "write_deck"]

EMU_PER_PX = 6350
FONT = "DejaVu Sans"


def _emu(v: float) -> int:
    return int(round(v * EMU_PER_PX))


def _textbox(
    shapes,
    box: Box,
    paragraphs: Sequence[str],
    *,
    max_px: float,
    min_px: float = 18,
    bold: bool = False,
    colour=(29, 35, 48),
    bullets: bool = False,
    align_right: bool = False,
):
    from pptx.dml.color import RGBColor
    from pptx.enum.text import MSO_AUTO_SIZE
    from pptx.util import Pt

    width, height = box[2] - box[0], box[3] - box[1]
    inner_w = width - (36 if bullets else 0)
    size, wrapped = fit(list(paragraphs), inner_w, height, max_px=max_px, min_px=min_px, bold=bold)
    tb = shapes.add_textbox(_emu(box[0]), _emu(box[1]), _emu(width), _emu(height))
    tf = tb.text_frame
    tf.word_wrap = True
    # the viewer wraps the paragraphs and shrinks them if its font runs wider than ours
    tf.auto_size = MSO_AUTO_SIZE.TEXT_TO_FIT_SHAPE
    tf.margin_left = tf.margin_right = tf.margin_top = tf.margin_bottom = 0
    for i, lines in enumerate(wrapped):
        p = tf.paragraphs[0] if i == 0 else tf.add_paragraph()
        # one paragraph per paragraph: no hard line breaks, so an edited deck rewraps cleanly
        p.text = ("•\t" if bullets else "") + " ".join(lines)
        if bullets:  # hanging indent: wrapped lines start under the text, not the bullet
            p._p.get_or_add_pPr().set("marL", str(_emu(36)))
            p._p.get_or_add_pPr().set("indent", str(-_emu(36)))
            p.space_after = Pt(size / 2 * 0.4)
        if align_right:
            from pptx.enum.text import PP_ALIGN

            p.alignment = PP_ALIGN.RIGHT
        for run in p.runs:
            run.font.size = Pt(size / 2)
            run.font.bold = bold
            run.font.name = FONT
            run.font.color.rgb = RGBColor(*colour)
    return tb


def _picture(shapes, path: Path, box: Box):
    from PIL import Image

    with Image.open(path) as im:
        w, h = im.size
    bw, bh = box[2] - box[0], box[3] - box[1]
    scale = min(bw / w, bh / h)
    pw, ph = w * scale, h * scale
    left, top = box[0] + (bw - pw) / 2, box[1] + (bh - ph) / 2
    source: Any = str(path)
    if path.stat().st_size > 1_500_000:  # multi-MB pictures (national scale): slide resolution
        import io

        with Image.open(path) as im:
            small = im.convert("RGB")
            small.thumbnail((1600, 1600))
            source = io.BytesIO()
            small.save(source, format="PNG", compress_level=6)
            source.seek(0)
    return shapes.add_picture(source, _emu(left), _emu(top), _emu(pw), _emu(ph)), (
        left,
        top,
        left + pw,
        top + ph,
    )


def _table(shapes, slide: Slide, box: Box) -> None:
    from pptx.util import Pt

    cells = table_cells(slide.table)
    size, widths = table_geometry(cells, box)
    row_h = size * 1.5
    shape = shapes.add_table(
        len(cells),
        len(cells[0]),
        _emu(box[0]),
        _emu(box[1]),
        _emu(sum(widths)),
        _emu(row_h * len(cells)),
    )
    table = shape.table
    for j, w in enumerate(widths):
        table.columns[j].width = _emu(w)
    for i, row in enumerate(cells):
        table.rows[i].height = _emu(row_h)
        for j, text in enumerate(row):
            cell = table.cell(i, j)
            cell.margin_left = cell.margin_right = _emu(8)
            cell.margin_top = cell.margin_bottom = _emu(2)
            tf = cell.text_frame
            tf.word_wrap = False
            run = tf.paragraphs[0].add_run()
            run.text = text
            run.font.size = Pt(size / 2)
            run.font.name = FONT
            run.font.bold = i == 0


def write_deck(slides: Sequence[Slide], path: Path, *, footer: str = "") -> Path:
    """Write the deck atomically; the movie needs ``slide.images[0]`` as its poster frame."""
    from pptx import Presentation
    from pptx.util import Emu

    prs = Presentation()
    prs.slide_width, prs.slide_height = Emu(_emu(W)), Emu(_emu(1080))
    blank = prs.slide_layouts[6]
    for n, s in enumerate(slides, 1):
        sl = prs.slides.add_slide(blank)
        r = layout(s)
        sh = sl.shapes
        if s.key == "title":
            _textbox(sh, r.title, [s.title], max_px=84, bold=True)
            if s.subtitle:
                _textbox(sh, r.subtitle, [s.subtitle], max_px=40, colour=(91, 100, 117))
            if s.notice:
                _textbox(sh, r.notice, [s.notice], max_px=30, bold=True, colour=(138, 90, 0))
            if s.bullets:
                _textbox(
                    sh,
                    r.text or r.caption,
                    [" · ".join(s.bullets)],
                    max_px=30,
                    colour=(91, 100, 117),
                )
        else:
            _textbox(sh, r.title, [s.title], max_px=60, bold=True)
            if s.subtitle:
                _textbox(sh, r.subtitle, [s.subtitle], max_px=32, colour=(91, 100, 117))
            if s.notice:
                _textbox(sh, r.notice, [s.notice], max_px=26, bold=True, colour=(138, 90, 0))
            if s.movie is not None and s.images:
                box = r.images[0]
                if s.fallback is not None and s.fallback.exists():
                    _pic, placed = _picture(sh, s.fallback, box)
                else:
                    placed = box
                left, top, right, bottom = placed
                sh.add_movie(
                    str(s.movie),
                    _emu(left),
                    _emu(top),
                    _emu(right - left),
                    _emu(bottom - top),
                    poster_frame_image=str(s.images[0]),
                    mime_type="video/mp4",
                )
            else:
                for p, box in zip(s.images, r.images):
                    if p.exists():
                        _picture(sh, p, box)
            if r.text is not None:
                table_box, bullets_box = split_text_region(s, r.text)
                if table_box is not None:
                    _table(sh, s, table_box)
                if bullets_box is not None:
                    _textbox(sh, bullets_box, list(s.bullets), max_px=34, min_px=18, bullets=True)
            if s.caption:
                _textbox(sh, r.caption, [s.caption], max_px=24, colour=(91, 100, 117))
        src = "" if s.images else footer  # pictures carry their own source line
        foot = f"{src}   {n}/{len(slides)}" if src else f"{n}/{len(slides)}"
        _textbox(
            sh,
            (MARGIN + 600, r.footer[1], W - MARGIN, r.footer[1] + 30),
            [foot],
            max_px=20,
            min_px=18,
            colour=(91, 100, 117),
            align_right=True,
        )
        if s.notes:
            sl.notes_slide.notes_text_frame.text = s.notes
    _fixed_properties(prs, slides)
    with atomic_path(path) as tmp:
        prs.save(str(tmp))
    return fixed_zip_dates(path)


def _fixed_properties(prs: object, slides: Sequence[Slide]) -> None:
    """Document properties of our own with a fixed date (not the template's, not the clock),
    so reruns give identical bytes."""
    from datetime import datetime

    from mapdrift.outputs import FIXED_TIME

    when = datetime.fromisoformat(FIXED_TIME.replace("Z", "")).replace(microsecond=0)
    props = prs.core_properties  # type: ignore[attr-defined]
    props.title = slides[0].title if slides else ""
    props.author = "mapdrift"
    props.last_modified_by = "mapdrift"
    props.comments = ""
    props.revision = 1
    props.created = when
    props.modified = when
