"""Briefing outputs: the deck (movie, pictures, no overflowing text), slide PNGs, the report's
sections and escaping, and spreadsheet formula injection in CSVs."""

from __future__ import annotations

import html.parser
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from conftest import grid_layer
from mapdrift.brief.content import Brief, Section, Table
from mapdrift.brief.report import render_html, render_markdown
from mapdrift.brief.slides import H, Slide, W, draw_slide
from mapdrift.brief.textfit import line_height, wrap
from mapdrift.config import load_config
from mapdrift.outputs import defuse, write_csv
from mapdrift.pipeline import run

EVIL = "<script>alert(1)</script>"
FORMULA = '=HYPERLINK("x")'


def test_defuse_formula_cells(tmp_path):
    # OWASP "CSV Injection": cells starting with = + - @ tab CR are prefixed with a quote.
    for s in ("=1+1", "+1", "-1", "@SUM(A1)", "\tx", "\rx"):
        assert defuse(s) == "'" + s
    assert defuse("plain") == "plain" and defuse(-1.5) == -1.5
    p = write_csv(pd.DataFrame({"name": [FORMULA, "ok"], "v": [-1.0, 2.0]}), tmp_path / "t.csv")
    text = p.read_text()
    assert text.splitlines()[1] == '"\'=HYPERLINK(""x"")",-1'  # quoted text, number left alone


def test_write_csv_defuses_every_cell_like_the_per_cell_rule(tmp_path):
    # Reference: the per-cell rule (defuse applied to every cell with pandas' own to_csv).
    df = pd.DataFrame(
        {
            "label": pd.Series(["high-high", "=cmd", None, "=cmd", "-x", "ok"], dtype=object),
            "mixed": [1, "@a", 2.5, None, "b", "+c"],
            "cat": pd.Categorical(["=a", "b", "=a", "b", "b", None]),
            "n": [1, -2, 3, -4, 5, 6],
        }
    )
    p = write_csv(df, tmp_path / "t.csv", warning="note")
    ref = df.astype(object).map(defuse).to_csv(index=False, lineterminator="\n")
    assert p.read_text() == "# note\n" + ref


@pytest.fixture(scope="module")
def tiny_run(tmp_path_factory):
    """A full run on a 5 x 5 grid whose unit names are hostile (escaping and defusing)."""
    d = tmp_path_factory.mktemp("tiny")
    gdf = grid_layer(5)
    gdf.loc[0, "name"] = EVIL
    gdf.loc[1, "name"] = FORMULA
    gdf.to_file(d / "units.gpkg", driver="GPKG")
    rng = np.random.default_rng(1)
    rows = []
    for i, u in enumerate(gdf["unit_id"]):
        level = 5 + (i % 5) * 2
        for y in range(2015, 2023):
            rows.append(
                {
                    "unit_id": u,
                    "year": y,
                    "rate": round(level + rng.normal(0, 0.8) + (4 if i < 6 and y > 2019 else 0), 2),
                }
            )
    pd.DataFrame(rows).to_csv(d / "values.csv", index=False)
    (d / "run.toml").write_text(
        '[inputs]\ngeometry = "units.gpkg"\ntable = "values.csv"\nid = "unit_id"\nname = "name"\n'
        'period = "year"\nvalue = "rate"\nvariable = "Vacancy rate"\nunit_label = "per 100 homes"\n'
        "[classes]\nk = 4\n[clusters]\npermutations = 199\n"
        '[brief]\ntitle = "Vacancy in the test grid"\nauthor = "Test team"\n'
    )
    return run(load_config(d / "run.toml"), out=d / "out")


class _Sections(html.parser.HTMLParser):
    def __init__(self):
        super().__init__()
        self.ids: list[str] = []
        self.images = 0

    def handle_starttag(self, tag, attrs):
        a = dict(attrs)
        if tag == "section" and "id" in a:
            self.ids.append(a["id"])
        if tag == "img" and a.get("src", "").startswith("data:image/"):
            self.images += 1


def test_report_sections_and_escaping(tiny_run):
    text = (tiny_run.out / "report.html").read_text()
    p = _Sections()
    p.feed(text)
    for key in (
        "answer",
        "maps",
        "change",
        "transitions",
        "clusters",
        "trends",
        "data-quality",
        "method",
        "cautions",
    ):
        assert key in p.ids, key
    assert p.images >= 8  # every figure embedded
    assert EVIL not in text and "&lt;script&gt;alert(1)&lt;/script&gt;" in text
    assert "fair-housing" in text  # cautions carried
    md = (tiny_run.out / "report.md").read_text()
    assert "## Cautions" in md and EVIL not in md


def test_units_csv_defused_and_complete(tiny_run):
    df = pd.read_csv(tiny_run.out / "units.csv", dtype={"unit": str})
    assert len(df) == 25
    assert df.loc[1, "name"] == "'" + FORMULA
    for col in (
        "class_2015",
        "value_2022",
        "trajectory",
        "n_jumps",
        "change_flags",
        "cluster_2022",
        "trend",
    ):
        assert col in df.columns, col


def _overflows(shape) -> bool:
    """Re-measure a text frame: wrapped lines x line height must fit the shape's height."""
    tf = shape.text_frame
    w_px, h_px = shape.width / 6350, shape.height / 6350
    total = 0.0
    for p in tf.paragraphs:
        runs = [r for r in p.runs if r.font.size is not None]
        if not runs:
            continue
        size_px = runs[0].font.size.pt * 2
        bold = bool(runs[0].font.bold)
        for line in p.text.split("\v"):
            total += len(wrap(line, w_px, size_px, bold)) * line_height(size_px)
    return total > h_px + 1


def test_deck_movie_pictures_notes_and_no_overflow(tiny_run):
    from pptx import Presentation
    from pptx.enum.shapes import MSO_SHAPE_TYPE

    prs = Presentation(str(tiny_run.out / "brief.pptx"))
    pngs = sorted((tiny_run.out / "slides").glob("*.png"))
    assert len(prs.slides) == len(pngs) >= 9
    assert prs.slide_width * 9 == prs.slide_height * 16
    kinds = [s.shape_type for sl in prs.slides for s in sl.shapes]
    assert MSO_SHAPE_TYPE.MEDIA in kinds  # the MP4 as a movie
    assert kinds.count(MSO_SHAPE_TYPE.PICTURE) >= 8
    for sl in prs.slides:
        assert "Cautions:" in sl.notes_slide.notes_text_frame.text
        for shape in sl.shapes:
            if shape.has_text_frame:
                assert not _overflows(shape), shape.text_frame.text[:60]
            assert shape.left >= 0 and shape.top >= 0
            assert (
                shape.left + shape.width <= prs.slide_width
                and shape.top + shape.height <= prs.slide_height
            )


def test_slide_pngs_are_16_9_and_text_stays_inside(tiny_run):
    from PIL import Image

    for p in sorted((tiny_run.out / "slides").glob("*.png")):
        with Image.open(p) as im:
            assert im.size == (W, H) == (1920, 1080)
    long = "A very long sentence about suppressed cells and sentinel zeros " * 6
    slide = Slide(
        "notes",
        "Data notes with a title that goes on for quite a while " * 2,
        bullets=(long,) * 8,
        notice="Classes differ by period; frames are not comparable.",
    )
    _, boxes = draw_slide(slide, 1, 1)
    for x0, y0, x1, y1 in boxes:
        assert 0 <= x0 <= x1 <= W and 0 <= y0 <= y1 <= H


def test_markdown_and_html_escape_tables():
    brief = Brief(
        title="T <b>",
        sections=(Section("s", "S", tables=(Table(pd.DataFrame({"name": [EVIL]}), "c"),)),),
    )
    assert EVIL not in render_html(brief)
    assert "<b>" not in render_html(brief).split("<title>")[1].split("</title>")[0]
    assert EVIL not in render_markdown(brief, Path("."))


_PROBE = """<script>
window.__errors = [];
window.addEventListener('error', function (e) {
  window.__errors.push(String(e.message || (e.target && (e.target.src || '').slice(0, 40)) || 'error'));
}, true);
var _ce = console.error; console.error = function () { window.__errors.push([].join.call(arguments, ' ')); _ce.apply(console, arguments); };
window.addEventListener('load', function () {
  var imgs = [].slice.call(document.images);
  var bad = imgs.filter(function (i) { return !(i.complete && i.naturalWidth > 0); }).length;
  var pre = document.createElement('pre'); pre.id = 'probe';
  pre.textContent = JSON.stringify({images: imgs.length, undecoded: bad, errors: window.__errors});
  document.body.appendChild(pre);
});
</script>"""


def test_report_in_headless_browser(tiny_run, tmp_path):
    # A real browser: Debian's chromium (installed by .ci/run when missing).
    import json
    import re
    import shutil
    import subprocess

    exe = shutil.which("chromium") or shutil.which("chromium-browser")
    if exe is None:
        pytest.skip("chromium is not installed (`apt-get install chromium`); browser check skipped")
    page = tmp_path / "report.html"
    text = (tiny_run.out / "report.html").read_text()
    page.write_text(text.replace("<head>", "<head>" + _PROBE, 1))
    cmd = [
        exe, "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
        "--disable-background-networking", "--disable-component-update", "--disable-sync",
        f"--user-data-dir={tmp_path / 'profile'}", "--enable-logging=stderr", "--v=0",
        "--virtual-time-budget=10000", "--dump-dom", page.as_uri(),
    ]  # fmt: skip
    proc = subprocess.run(cmd, capture_output=True, text=True, timeout=120)
    m = re.search(r'<pre id="probe">(.*?)</pre>', proc.stdout, re.S)
    assert m, f"page did not load: {proc.stderr[-500:]}"
    probe = json.loads(m.group(1).replace("&quot;", '"').replace("&amp;", "&"))
    assert probe["images"] >= 8 and probe["undecoded"] == 0
    assert probe["errors"] == []
    console = [
        line for line in proc.stderr.splitlines() if "CONSOLE" in line and "probe" not in line
    ]
    assert console == [], console
