"""Label raster, frame pixels, legend counts, scale bar, sub-pixel units.

References: shapely's point-in-polygon predicate (``within``) at pixel centres for which unit
each pixel shows; pyproj for CRS units; the class codes of :mod:`mapdrift.breaks` for counts.
"""

from __future__ import annotations

import subprocess
import sys

import numpy as np
import pytest
import shapely
from shapely.geometry import box

from mapdrift.colour import hex_to_rgb8
from mapdrift.palettes import NODATA, NODATA_HATCH, sequential
from mapdrift.render.frames import FrameRenderer
from mapdrift.render.raster import LabelRaster, fit_transform, metres_per_unit, scanline_fill


def _grid(nx=10, ny=6, size=2000.0):
    import geopandas as gpd

    geoms = [
        box(c * size, r * size, (c + 1) * size, (r + 1) * size)
        for r in range(ny)
        for c in range(nx)
    ]
    return gpd.GeoSeries(geoms, crs="EPSG:3857")


def _voronoi(n=400, seed=3):
    rng = np.random.default_rng(seed)
    pts = rng.uniform(0, 50_000, (n, 2))
    frame = box(0, 0, 50_000, 40_000)
    cells = shapely.get_parts(shapely.voronoi_polygons(shapely.multipoints(pts), extend_to=frame))
    cells = shapely.intersection(cells, frame)
    return cells[~shapely.is_empty(cells)]


def _pixel_centres(tr):
    cols, rows = np.meshgrid(np.arange(tr.width) + 0.5, np.arange(tr.height) + 0.5)
    return shapely.points((tr.x0 + cols * tr.res).ravel(), (tr.y1 - rows * tr.res).ravel())


def _reference_labels(geoms, tr):
    pts = _pixel_centres(tr)
    pi, gi = shapely.STRtree(geoms).query(pts, predicate="within")
    ref = np.full(pts.size, -1)
    ref[pi] = gi
    return ref.reshape(tr.height, tr.width)


def test_scanline_fill_matches_point_in_polygon_with_holes_and_multipolygons():
    cells = list(_voronoi(300))
    ring = box(-20_000, 0, -2_000, 18_000).difference(box(-15_000, 5_000, -7_000, 13_000))
    enclave = box(-14_000, 6_000, -8_000, 12_000)  # sits inside the ring's hole
    multi = shapely.MultiPolygon(
        [box(-20_000, 20_000, -15_000, 25_000), box(-10_000, 20_000, -5_000, 25_000)]
    )
    geoms = np.array(cells + [ring, enclave, multi], dtype=object)
    tr = fit_transform(shapely.total_bounds(geoms), 500, 330)
    got = scanline_fill(geoms, tr, 1)
    ref = _reference_labels(geoms, tr)
    assert (got == ref).mean() == 1.0
    assert (got == len(cells) + 1).any() and (got == len(cells) + 2).any()


def test_frame_pixel_at_interior_point_has_exact_class_colour_and_nodata_is_grey():
    g = _grid()
    n = len(g)
    colours = sequential(5)
    codes = (np.arange(n) % 5).astype(np.int16)[:, None].repeat(2, axis=1)
    codes[7, 0] = -1
    codes[33, :] = -1
    r = FrameRenderer(g, codes, colours, ["a", "b", "c", "d", "e"], ["2020", "2021"], title="t")
    tr = r.layout.transform
    f = r.frame(0)
    pts = shapely.point_on_surface(g.values)
    xy = shapely.get_coordinates(pts)
    col = np.floor((xy[:, 0] - tr.x0) / tr.res).astype(int) + tr.left
    row = np.floor((tr.y1 - xy[:, 1]) / tr.res).astype(int) + tr.top
    for i in range(n):
        px = tuple(int(v) for v in f[row[i], col[i]])
        if codes[i, 0] >= 0:
            assert px == hex_to_rgb8(colours[codes[i, 0]]), i
    # no-data unit 7: every pixel well inside is on the grey-to-hatch line, most exactly NODATA
    inner = g.values[7].buffer(-3 * tr.res)
    rows, cols = np.nonzero(np.ones((tr.height, tr.width), bool))
    pts = _pixel_centres(tr)
    inside = shapely.within(pts, inner)
    pix = (
        f[tr.top : tr.top + tr.height, tr.left : tr.left + tr.width]
        .reshape(-1, 3)[inside]
        .astype(float)
    )
    a, b = np.array(hex_to_rgb8(NODATA), float), np.array(hex_to_rgb8(NODATA_HATCH), float)
    t = ((pix - a) @ (b - a)) / ((b - a) @ (b - a))
    assert np.abs(pix - (a + np.clip(t, 0, 1)[:, None] * (b - a))).max() <= 1.0
    assert (np.abs(pix - a).max(axis=1) == 0).mean() > 0.4
    assert (t > 0.9).any()  # the hatching is drawn
    # period 2: unit 7 has data again and takes its class colour
    f1 = r.frame(1)
    assert tuple(int(v) for v in f1[row[7], col[7]]) == hex_to_rgb8(colours[codes[7, 1]])
    r.close()


def test_legend_counts_equal_class_counts_per_period():
    from mapdrift.breaks import classify
    from mapdrift.panel import Panel

    g = _grid()
    rng = np.random.default_rng(0)
    vals = rng.gamma(2.0, 3.0, size=(len(g), 3))
    vals[rng.random(vals.shape) < 0.1] = np.nan
    panel = Panel.from_arrays(vals, g, periods=[2019, 2020, 2021])
    cls = classify(panel, "quantile", 4)
    r = FrameRenderer(
        g, cls.codes, sequential(4), cls.breaks[0].labels, panel.period_labels, title="t"
    )
    expected = cls.counts()
    for j in range(3):
        r.frame(j)
        shown = [int(t.get_text().replace(",", "")) for t in r._dyn.counts]
        assert shown[:-1] == list(expected[j])
        assert shown[-1] == int(np.isnan(vals[:, j]).sum())  # "no data (n)"
    r.close()


def test_scale_bar_spans_stated_distance_within_one_pixel():
    size = 2000.0
    g = _grid(10, 6, size)  # 20 km x 12 km in EPSG:3857 metres
    codes = np.zeros((len(g), 1), dtype=np.int16)
    r = FrameRenderer(g, codes, ["#2166ac"], ["all"], ["2020"], title="t", timeline=False)
    f = r.frame(0).astype(int)
    # measure pixels per metre from the image: the grid's 20 km width in the fill colour
    tr = r.layout.transform
    mid = tr.top + tr.height // 2 + tr.height // 12  # the middle of a row of cells
    # the mapped area: fill and its grey edge (everything in the map box that is not paper)
    band = f[mid, tr.left : tr.left + tr.width]
    blue = np.flatnonzero(np.abs(band - 255).sum(axis=1) > 0)
    px_per_m = (blue[-1] - blue[0] + 1) / (10 * size)
    sb = r.layout.scale_bar
    row = f[sb.y - 1]
    dark = np.flatnonzero(row.sum(axis=1) < 150)
    dark = dark[dark >= r.layout.panel_x]
    bar_px = dark[-1] - dark[0] + 1
    value, unit = sb.label.split()
    metres = float(value) * {"km": 1000.0, "m": 1.0}[unit]
    assert abs(bar_px - metres * px_per_m) <= 1.0
    r.close()


def test_metres_per_unit_follows_the_crs():
    # EPSG:2263 (New York Long Island, US survey feet): 1 ft = 1200/3937 m (US survey foot).
    assert metres_per_unit("EPSG:2263") == pytest.approx(1200 / 3937, rel=1e-9)
    assert metres_per_unit("EPSG:3857") == 1.0
    from mapdrift.errors import InputError

    with pytest.raises(InputError, match="geographic CRS"):
        metres_per_unit("EPSG:4326")


def test_sub_pixel_units_are_reported_and_drawn_as_dots():
    import geopandas as gpd

    g = list(_grid(10, 6).values)
    tiny = box(9_000, 5_000, 9_010, 5_010)  # 10 m square: far below a pixel here
    g[24] = g[24].difference(tiny.buffer(1))
    geo = gpd.GeoSeries(g + [tiny], crs="EPSG:3857")
    codes = np.zeros((len(geo), 1), dtype=np.int16)
    codes[-1] = 1
    ids = [f"u{i}" for i in range(len(geo))]
    r = FrameRenderer(
        geo, codes, ["#dddddd", "#13266f"], ["a", "b"], ["x"], units=ids, title="t", min_unit_px=0
    )
    assert [f.code for f in r.findings] == ["units-below-pixel"]
    assert r.findings[0].units == ("u60",) and "--min-unit-px" in r.findings[0].message
    # the flag exists on `animate` only; `run` reads the config key (test_config checks keys)
    assert "mapdrift animate --min-unit-px 3" in r.findings[0].message
    assert "[animate] min_unit_px = 3" in r.findings[0].message
    r.close()
    r = FrameRenderer(
        geo, codes, ["#dddddd", "#13266f"], ["a", "b"], ["x"], units=ids, title="t", min_unit_px=5
    )
    tr = r.layout.transform
    c = int((9_005 - tr.x0) / tr.res) + tr.left
    rr = int((tr.y1 - 5_005) / tr.res) + tr.top
    assert tuple(r.frame(0)[rr, c]) == hex_to_rgb8("#13266f")
    assert r.raster.dots.tolist() == [60]
    r.close()


def test_per_frame_work_does_not_touch_polygons():
    # the per-frame path is a lookup on the label raster: same raster arrays for any layer
    lr = LabelRaster.build(_voronoi(200), fit_transform((0, 0, 50_000, 40_000), 200, 160), ss=2)
    unit_rgb = np.zeros((len(lr.area_px), 3), dtype=np.uint8)
    unit_rgb[:, 0] = 255
    img = lr.colourise(unit_rgb, np.array([0, 0, 255], np.uint8))
    assert img.shape == (160, 200, 3)
    inside = lr.label >= 0
    pure = np.ones(inside.size, bool)
    pure[lr.mixed] = False
    assert (img.reshape(-1, 3)[pure & inside.ravel()] == [255, 0, 0]).all()


def test_bad_arguments_give_clear_errors():
    from mapdrift.errors import ConfigError

    g = _grid(3, 2)
    with pytest.raises(ConfigError, match="only 2 colours"):
        FrameRenderer(g, np.full((6, 1), 3), ["#000000", "#ffffff"], ["a", "b"], ["x"])
    with pytest.raises(ConfigError, match="period labels"):
        FrameRenderer(g, np.zeros((6, 2)), ["#000000"], ["a"], ["x"])
    with pytest.raises(ConfigError, match="legend labels"):
        FrameRenderer(g, np.zeros((6, 1)), ["#000000", "#ffffff"], ["a"], ["x"])


def test_import_render_is_light():
    code = (
        "import sys, mapdrift.render, mapdrift.palettes, mapdrift.cli.animate; "
        "print([m for m in ('matplotlib', 'PIL', 'imageio', 'geopandas') if m in sys.modules])"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "[]"


def test_cached_sprites_equal_a_full_draw_of_the_per_period_figure():
    # reference: matplotlib drawing the whole transparent per-period figure at once, composited
    # with the straight-alpha "over" formula (the renderer's former per-frame path)
    g = _grid()
    n = len(g)
    rng = np.random.default_rng(5)
    codes = rng.integers(0, 3, (n, 3)).astype(np.int16)
    codes[rng.random(codes.shape) < 0.1] = -1
    labels = [["low", "mid", f"high {j}"] for j in range(3)]  # per-period labels
    outlines = [[1, 2], [], [5, 40, 41]]
    r = FrameRenderer(
        g,
        codes,
        sequential(3),
        labels,
        ["2019", "2020", "2021"],
        title="t",
        outlines=outlines,
        names=[f"unit {i}" for i in range(n)],
        outline_label="jumped",
        north_arrow=True,
    )
    for j in (0, 1, 2, 1):  # the repeat comes from the cache
        got = r.frame(j)
        want = r._base.copy()
        want[r._map_slice] = r.map_image(j)
        r._dynamic_sprites(j)  # sets the artists for period j
        r._fig.canvas.draw()
        dyn = np.asarray(r._fig.canvas.buffer_rgba()).astype(np.uint16)
        a = dyn[..., 3:4]
        want = ((dyn[..., :3] * a + want.astype(np.uint16) * (255 - a) + 127) // 255).astype(
            np.uint8
        )
        assert (got == want).all(), j
    assert len(r._sprites) > 0
    r.close()


def test_two_times_supersampling_still_antialiases_edges():
    # a square offset by half a pixel: its edge pixels are half covered, so they blend the
    # unit colour and the paper half and half (area weighting, common practice, no source)
    import geopandas as gpd

    g = gpd.GeoSeries([box(0, 0, 10_000, 10_000)], crs="EPSG:3857")
    tr = fit_transform((0, 0, 10_000, 10_000), 100, 100, pad=0.0)
    lr = LabelRaster.build(
        gpd.GeoSeries([box(0, 0, 10_000 - tr.res / 2, 10_000)], crs=g.crs).values, tr, ss=2
    )
    img = lr.colourise(np.array([[0, 0, 0]], np.uint8), np.array([255, 255, 255], np.uint8))
    assert (img[50, 10] == 0).all()
    assert abs(int(img[50, 99, 0]) - 128) <= 1


def test_units_below_the_outline_size_are_not_outlined():
    # Our own rule (common practice, no source): an outline on a unit a few pixels across
    # only smears its colour, so units under OUTLINE_MIN_PX pixels are not outlined.
    import geopandas as gpd
    from shapely.geometry import box

    from mapdrift.palettes import sequential
    from mapdrift.render.frames import OUTLINE_MIN_PX, FrameRenderer

    g = gpd.GeoSeries(
        [box(0, 0, 10_000, 10_000), box(10_000, 0, 10_050, 50), box(10_050, 0, 20_000, 10_000)],
        crs="EPSG:3857",
    )
    codes = np.array([[0], [1], [2]])

    def box_pixels(outlined):
        r = FrameRenderer(
            g, codes, sequential(3), list("abc"), ["2020"], outlines=[outlined],
            outline_label="jumped", size=(640, 360),
        )  # fmt: skip
        assert r.raster.area_px[1] < OUTLINE_MIN_PX <= r.raster.area_px[0]
        tr = r.layout.transform
        return r.frame(0)[tr.top : tr.top + tr.height, tr.left : tr.left + tr.width]

    none = box_pixels([])
    np.testing.assert_array_equal(box_pixels([1]), none)  # the tiny unit: no outline
    assert (box_pixels([0]) != none).any()  # the large one is outlined


def test_word_wrap_takes_as_many_words_as_fit_measured_by_the_frame_font():
    # the greedy rule (common practice, no source): each line is the longest run of words,
    # the first always, whose measured width fits; checked against measuring every prefix
    import random

    from mapdrift.render import layout as lay

    def prefix_greedy(text, size, width, weight):
        lines, cur = [], ""
        for word in text.split():
            trial = f"{cur} {word}".strip()
            if not cur or lay._text_width(trial, size, weight) <= width:
                cur = trial
            else:
                lines.append(cur)
                cur = word
        return [*lines, cur]

    rng = random.Random(4)
    vocab = ["rate", "per", "1,000", "parcels", "Tract", "000123", "fell;", "WWWW", "iiii", ","]
    vocab += ["2019-2023", "high-high", "rose", "in"]
    for _ in range(150):
        text = " ".join(rng.choice(vocab) for _ in range(rng.randint(0, 30)))
        size, width = rng.choice([10.5, 13.3, 22.0]), rng.choice([40, 150, 500])
        bold = rng.random() < 0.3
        got = lay._wrap_px(text, size, width, bold=bold)
        assert got == prefix_greedy(text, size, width, "bold" if bold else "normal")
