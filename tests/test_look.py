"""Image tests of the look: text size floors, no overlapping text, outline contrast, the cluster
marks, the period strip, slide pictures that fill their box, and a deck without hard breaks."""

from __future__ import annotations

import itertools

import numpy as np
import pytest
import shapely
from shapely.geometry import box

from mapdrift import palettes
from mapdrift.colour import delta_e, hex_to_rgb8
from mapdrift.render import furniture as fur
from mapdrift.render import layout as lay
from mapdrift.render.frames import FrameRenderer

#: Smallest CIEDE2000 difference between an outline (halo or line, whichever differs more) and
#: any class colour. Common practice, no source: about ten just-noticeable differences.
OUTLINE_MIN_DE = 20.0


def _grid(nx=8, ny=5, size=2000.0):
    import geopandas as gpd

    geoms = [
        box(c * size, r * size, (c + 1) * size, (r + 1) * size)
        for r in range(ny)
        for c in range(nx)
    ]
    return gpd.GeoSeries(geoms, crs="EPSG:3857")


def _all_class_colours() -> list[str]:
    cols: list[str] = []
    for k in range(2, 10):
        cols += palettes.sequential(k) + palettes.diverging(k)
    cols += list(palettes.FLAG_COLOURS) + list(palettes.CLUSTER_COLOURS.values())
    return sorted(set(cols))


def test_outline_contrasts_with_every_class_colour():
    # CIEDE2000 with the project's colour.py; the halo carries the dark classes, the line the
    # light ones
    cols = _all_class_colours()
    halo = delta_e(cols, [lay.HALO] * len(cols))
    line = delta_e(cols, [lay.OUTLINE] * len(cols))
    best = np.maximum(halo, line)
    worst = int(np.argmin(best))
    assert best[worst] >= OUTLINE_MIN_DE, (cols[worst], best[worst])


def test_drawn_outline_has_halo_and_dark_line_on_the_darkest_class():
    g = _grid()
    dark = palettes.sequential(5)[-1]
    codes = np.full((len(g), 1), 4, dtype=np.int16)
    r = FrameRenderer(
        g, codes, palettes.sequential(5), list("abcde"), ["x"], outlines=[[12]],
        outline_label="jumped", timeline=False, title="t",
    )  # fmt: skip
    f = r.frame(0).astype(int)
    tr = r.layout.transform
    ring = r._rings[12]
    x0, y0 = ring.min(axis=0).astype(int)
    x1, y1 = ring.max(axis=0).astype(int)
    patch = f[y0 - 4 : y1 + 5, x0 - 4 : x1 + 5].reshape(-1, 3)
    lum = patch.sum(axis=1)
    assert (lum > 700).any()  # the light halo
    assert (np.abs(patch - hex_to_rgb8(lay.OUTLINE)).sum(axis=1) < 30).any()  # the dark line
    assert tr.width > 0 and dark
    r.close()


def _texts_of_a_frame(size, min_text_px=0.0, n_p=13, **kw):
    """Draw a frame's furniture (static and per-period) on one figure; return layout, texts."""
    g = _grid()
    rng = np.random.default_rng(1)
    codes = rng.integers(-1, 5, (len(g), n_p)).astype(np.int16)
    labels = ["<= 5.9", "5.9 - 10.3", "10.3 - 20.4", "20.4 - 40.7", "> 40.7"]
    text = lay.MapText(
        title="Foreclosure filing rate per census tract in a long title",
        subtitle="filings per 1,000 mortgaged parcels",
        caption="Source: an invented county, long source line " * 4,
        legend_title="filings per 1,000 mortgaged parcels",
        outline_label="credibly jumped 2+ classes since the previous period",
        unit_noun="tracts",
        min_text_px=min_text_px,
    )
    r = FrameRenderer(
        g, codes, palettes.sequential(5), labels, [str(1985 + j) for j in range(n_p)],
        text=text, outlines=[[1, 2]] * n_p, names=[f"u{i}" for i in range(len(g))], size=size,
        **kw,
    )  # fmt: skip
    fig, ax = lay.new_figure(r.layout, transparent=False)
    fur.draw_static(ax, r.layout, r.chrome)
    d = fur.DynamicArtists(ax, r.layout, r.chrome)
    counts, nodata = r.class_counts(n_p - 1)
    d.update(n_p - 1, counts, nodata, callouts=["u1", "u2"], n_outlined=2)
    fig.canvas.draw()
    rend = fig.canvas.get_renderer()
    texts = [t for t in ax.texts if t.get_text() and t.get_visible()]
    boxes = []
    for t in texts:
        bb = t.get_window_extent(rend)
        # figure pixels with y up -> frame pixels with y down
        boxes.append((bb.x0, r.layout.height - bb.y1, bb.x1, r.layout.height - bb.y0))
    r.close()
    return r.layout, texts, boxes


@pytest.mark.parametrize(
    "size,floor,n_p",
    [((1280, 720), 0.0, 13), ((1760, 860), 19.0, 13), ((960, 540), 0.0, 13), ((1280, 720), 0, 40)],
)
def test_frame_texts_do_not_overlap_stay_inside_and_respect_the_floor(size, floor, n_p):
    layout, texts, boxes = _texts_of_a_frame(size, floor, n_p)
    for t, b in zip(texts, boxes):
        assert b[0] >= -1 and b[1] >= -1, t.get_text()
        assert b[2] <= layout.width + 1 and b[3] <= layout.height + 1, t.get_text()
        if floor:  # font size in points = pixels (dpi 72)
            assert t.get_fontsize() >= floor - 1.01, (t.get_text(), t.get_fontsize())
    for (t1, a), (t2, b) in itertools.combinations(zip(texts, boxes), 2):
        ix = min(a[2], b[2]) - max(a[0], b[0])
        iy = min(a[3], b[3]) - max(a[1], b[1])
        assert ix <= 1 or iy <= 1, (t1.get_text(), t2.get_text())


def test_period_strip_replaces_the_big_number_and_shows_class_shares():
    layout, texts, _ = _texts_of_a_frame((1280, 720))
    assert layout.strip is not None and len(layout.strip.xs) == 13
    biggest = max(t.get_fontsize() for t in texts if t.get_text() == "1997")
    assert biggest < layout.title_size  # the period is not the largest thing on the frame
    assert any(t.get_text() == "tracts in 1997" for t in texts)  # the unit noun, not "units"


def test_cluster_outliers_are_marks_that_small_units_keep():
    # a 100 x 60 grid drawn small: each unit is a few pixels, yet its mark is 13 * t pixels
    g = _grid(100, 60, 500.0)
    from mapdrift.brief.pictures import cluster_look
    from mapdrift.clusters.labels import LABELS

    colours, marks, mark_colours = cluster_look(LABELS)
    codes = np.full((len(g), 1), 4, dtype=np.int16)
    codes[500, 0] = 2  # high-low outlier
    r = FrameRenderer(
        g, codes, colours, list(LABELS), ["x"], marks=marks, mark_colours=mark_colours,
        boundary=lay.GREY_BOUNDARY, timeline=False, size=(640, 360), title="t",
    )  # fmt: skip
    f = r.frame(0).astype(int)
    xy = r._mark_xy[500]
    x, y = int(xy[0]), int(xy[1])
    size = fur.mark_size(r.layout)
    patch = f[y - int(size) : y + int(size), x - int(size) : x + int(size)].reshape(-1, 3)
    near = np.abs(patch - hex_to_rgb8(mark_colours[2])).sum(axis=1) < 40
    assert near.sum() >= 0.15 * size**2  # the triangle is drawn at full size
    cell_px = r.layout.transform.width / 100
    assert size > 1.5 * cell_px  # larger than the unit itself
    r.close()


def test_tiny_units_get_a_dot_and_are_counted():
    import geopandas as gpd

    g = list(_grid(10, 6).values)
    tiny = box(9_000, 5_000, 9_060, 5_060)  # ~2.6 px across at this size
    g[24] = g[24].difference(tiny.buffer(1))
    geo = gpd.GeoSeries(g + [tiny], crs="EPSG:3857")
    codes = np.zeros((len(geo), 1), dtype=np.int16)
    r = FrameRenderer(
        geo, codes, ["#eef8b3"], ["a"], ["x"], title="t", units=[str(i) for i in range(len(geo))]
    )
    codes_found = {f.code: f for f in r.findings}
    assert "units-drawn-as-dots" in codes_found or "units-below-pixel" in codes_found
    assert 60 in r.raster.dots.tolist()
    r.close()


def test_first_class_and_no_data_stand_apart_from_paper():
    # CIEDE2000 against white paper (threshold: MIN_DELTA_E, common practice, no source)
    for k in range(2, 10):
        first = palettes.sequential(k)[0]
        assert delta_e([first], [lay.PAPER])[0] >= 2 * palettes.MIN_DELTA_E
    assert delta_e([palettes.NODATA], [lay.PAPER])[0] >= palettes.MIN_DELTA_E


def test_map_edge_is_drawn_so_pale_units_show_against_paper():
    g = _grid()
    codes = np.zeros((len(g), 1), dtype=np.int16)
    r = FrameRenderer(g, codes, ["#fbfbf5"], ["pale"], ["x"], timeline=False, title="t")
    f = r.frame(0).astype(int)
    tr = r.layout.transform
    ring = shapely.get_coordinates(shapely.unary_union(list(g)).exterior)
    xs, ys = tr.to_pixels(ring[:, 0], ring[:, 1])
    row = int(np.round((ys.min() + ys.max()) / 2)) + tr.top
    line = f[row, tr.left : tr.left + tr.width]
    dark = np.flatnonzero(line.sum(axis=1) < 3 * 200)
    assert dark.size >= 2  # left and right edges are grey, not paper-white
    r.close()


def test_class_flow_labels_never_overlap():
    from mapdrift.render.transition_charts import spread_labels

    want = [100.0, 101.0, 102.0, 300.0, 301.0, 599.0]
    ys = spread_labels(want, 20.0, 90.0, 600.0)
    assert all(b - a >= 20.0 - 1e-9 for a, b in zip(ys, ys[1:]))
    assert ys[0] >= 90.0 and ys[-1] <= 600.0
    assert abs(ys[3] - 300.0) < 1e-9  # labels with room stay beside their bar


def test_small_multiples_pages_keep_maps_wide_enough(tmp_path):
    from mapdrift.brief.pictures import multiples_pages

    g = _grid()
    codes = np.zeros((len(g), 13), dtype=np.int16)
    pages = multiples_pages(
        g, codes, palettes.sequential(3), ["a", "b", "c"], [str(y) for y in range(2012, 2025)],
        tmp_path, size=(1760, 860), legend_title="rate",
    )  # fmt: skip
    shown = [p for _, periods in pages for p in periods]
    assert shown == [str(y) for y in range(2012, 2025)]
    from PIL import Image

    for path, periods in pages:
        with Image.open(path) as im:
            assert im.size == (1760, 860)
        assert len(periods) <= 6
    # map width: the grid's cells are at least 420 px (measured on the first page's first map)
    with Image.open(pages[0][0]) as im:
        a = np.asarray(im.convert("RGB")).astype(int)
    row = a[a.shape[0] // 4]
    ink = np.flatnonzero(np.abs(row - 255).sum(axis=1) > 0)
    runs = np.split(ink, np.flatnonzero(np.diff(ink) > 5) + 1)
    assert max(len(r_) for r_ in runs) >= 400


def test_layout_text_floor():
    s, t = lay.text_scale((1760, 860), 19.0)
    assert 10.5 * t >= 19.0 - 1e-9 and t >= s
    assert lay.fit_font("x" * 400, 30, 100, min_size=19) >= 19


def test_deck_text_has_no_hard_line_breaks_and_autofits(tmp_path):
    from pptx import Presentation

    from mapdrift.brief.deck import write_deck
    from mapdrift.brief.slides import Slide

    long = "A long sentence that must wrap inside its box on the slide " * 6
    slides = [
        Slide("title", "Title " * 12, subtitle=long),
        Slide("notes", long, bullets=(long, long)),
    ]
    path = write_deck(slides, tmp_path / "deck.pptx")
    prs = Presentation(str(path))
    for sl in prs.slides:
        for shape in sl.shapes:
            if shape.has_text_frame and shape.text_frame.text:
                assert "\v" not in shape.text_frame.text and "\x0b" not in shape.text_frame.text
                assert (
                    shape.text_frame._txBody.bodyPr.find(
                        "{http://schemas.openxmlformats.org/drawingml/2006/main}normAutofit"
                    )
                    is not None
                )


def test_units_layer_style_is_valid_sld_with_the_cluster_look(tmp_path):
    # OGC SLD 1.0 structure (namespaces from the OGC SLD 1.0.0 schema)
    import xml.etree.ElementTree as ET

    from mapdrift.brief.pictures import write_cluster_style

    path = write_cluster_style(tmp_path / "units_clusters.sld", "cluster_2024")
    ns = {"sld": "http://www.opengis.net/sld", "ogc": "http://www.opengis.net/ogc"}
    root = ET.parse(path).getroot()
    rules = root.findall(".//sld:Rule", ns)
    assert [r.find("sld:Name", ns).text for r in rules] == list(palettes.CLUSTER_LOOK)
    for rule in rules:
        label = rule.find("sld:Name", ns).text
        fill, mark, _ = palettes.CLUSTER_LOOK[label]
        assert rule.find(".//ogc:PropertyName", ns).text == "cluster_2024"
        assert rule.find(".//ogc:Literal", ns).text == label
        assert rule.find(".//sld:PolygonSymbolizer//sld:CssParameter", ns).text == fill
        assert (rule.find(".//sld:PointSymbolizer", ns) is not None) == bool(mark)


def test_slide_text_never_below_the_floor_and_pictures_fill_the_box(tmp_path, monkeypatch):
    import pandas as pd
    from PIL import Image

    from mapdrift.brief import slides as sl
    from mapdrift.brief import textfit

    sizes: list[int] = []
    real = textfit._font

    def spy(size_px, bold):
        sizes.append(size_px)
        return real(size_px, bold)

    monkeypatch.setattr(sl, "_font", spy)
    pic = tmp_path / "p.png"
    Image.new("RGB", sl.PICTURE_BOX, "white").save(pic)
    long = "A long sentence that must wrap inside its box on the slide; " * 12
    table = pd.DataFrame(
        {"unit": ["07038"] * 12, "name": ["Quorlan Landing"] * 12, "n": [1208] * 12}
    )
    for slide in (
        sl.Slide("title", long, subtitle=long, bullets=("a", "b")),
        sl.Slide("answer", "The answer " * 8, bullets=(long,) * 8),
        sl.Slide("movers", "Top", table=table, bullets=(long,)),
        sl.Slide("map", "A takeaway title", images=(pic,), notice="Classes differ by period"),
    ):
        sl.draw_slide(slide, 1, 4, footer="source")
    assert min(sizes) >= sl.MIN_TEXT_PX
    # a picture-only slide's box is the size its pictures are drawn at: they fill it
    r = sl.layout(sl.Slide("map", "t", images=(pic,)))
    x0, y0, x1, y1 = r.images[0]
    assert (x1 - x0, y1 - y0) == sl.PICTURE_BOX
    assert (x1 - x0) / sl.W >= 0.9


def test_rings_only_while_dots_are_few():
    # our own rule (common practice, no source): rings mark a few tiny units among larger ones;
    # when most units are dots (a nation of tracts at slide size) rings would cover the map
    from mapdrift.render.raster import RING_MAX_SHARE, rings_shown

    assert rings_shown(3, 150)
    assert not rings_shown(0, 150)
    assert not rings_shown(75_913, 85_000)
    assert rings_shown(int(RING_MAX_SHARE * 1000), 1000)
    assert not rings_shown(int(RING_MAX_SHARE * 1000) + 1, 1000)
