"""GIF, MP4 and PNG outputs read back with Pillow and imageio-ffmpeg; size budget; overwrites."""

from __future__ import annotations

import numpy as np
import pytest
import shapely
from shapely.geometry import box

from mapdrift.colour import hex_to_rgb8
from mapdrift.errors import ConfigError, OutputExistsError
from mapdrift.palettes import sequential
from mapdrift.render.animation import AnimateOptions, animate, parse_size
from mapdrift.render.encode import write_gif, write_mp4, write_png_frames
from mapdrift.render.frames import FrameRenderer

SIZE = (640, 360)


def _layer(nx=8, ny=5, size=1000.0):
    import geopandas as gpd

    return gpd.GeoSeries(
        [
            box(c * size, r * size, (c + 1) * size, (r + 1) * size)
            for r in range(ny)
            for c in range(nx)
        ],
        crs="EPSG:3857",
    )


def _codes(n, p, seed=0):
    rng = np.random.default_rng(seed)
    c = rng.integers(0, 4, size=(n, p)).astype(np.int16)
    c[rng.random((n, p)) < 0.08] = -1
    return c


def _renderer(p=4, size=SIZE):
    g = _layer()
    labels = ["<= 1", "1 - 2", "2 - 3", "> 3"]
    periods = [str(2016 + j) for j in range(p)]
    return g, FrameRenderer(
        g, _codes(len(g), p), sequential(4), labels, periods, title="Test map", size=size
    )


def _interior_pixels(g, tr):
    xy = shapely.get_coordinates(shapely.point_on_surface(g.values))
    col = np.floor((xy[:, 0] - tr.x0) / tr.res).astype(int) + tr.left
    row = np.floor((tr.y1 - xy[:, 1]) / tr.res).astype(int) + tr.top
    return row, col


def test_gif_frames_durations_loop_and_exact_class_colours(tmp_path):
    from PIL import Image, ImageSequence

    g, r = _renderer(4)
    path = write_gif(
        r, tmp_path / "a.gif", seconds_per_period=0.8, hold_last=2.5, exact_colours=r.exact_colours
    )
    im = Image.open(path)
    assert im.n_frames == 4
    # GIF89a stores delays in 1/100 s (GIF89a specification, Graphic Control Extension)
    assert [f.info["duration"] for f in ImageSequence.Iterator(im)] == [800, 800, 800, 2500]
    assert im.info["loop"] == 0
    row, col = _interior_pixels(g, r.layout.transform)
    allowed = {hex_to_rgb8(c) for c in r.colours}
    for j in range(4):
        im.seek(j)
        rgb = np.asarray(im.convert("RGB"))
        for i in range(len(g)):
            code = r.codes[i, j]
            if code >= 0:
                px = tuple(int(v) for v in rgb[row[i], col[i]])
                assert px == hex_to_rgb8(r.colours[code]) and px in allowed
        # the decoded frame equals the rendered frame wherever the frame has a palette colour
        ref = r.frame(j)
        tr = r.layout.transform
        box_ = (slice(tr.top, tr.top + tr.height), slice(tr.left, tr.left + tr.width))
        inside = np.isin(
            ref[box_].reshape(-1, 3).view([("", np.uint8)] * 3).ravel(),
            np.array(sorted(allowed), dtype=np.uint8).view([("", np.uint8)] * 3).ravel(),
        )
        assert (rgb[box_].reshape(-1, 3)[inside] == ref[box_].reshape(-1, 3)[inside]).all()
    r.close()


def test_mp4_has_expected_frames_and_even_size(tmp_path):
    imageio_ffmpeg = pytest.importorskip("imageio_ffmpeg")
    g, r = _renderer(3, size=(641, 361))  # odd on purpose: padded, never resized
    path = write_mp4(r, tmp_path / "a.mp4", fps=5, seconds_per_period=1.0, hold_last=2.0, tween=2)
    reader = imageio_ffmpeg.read_frames(str(path))
    meta = reader.__next__()
    frames = sum(1 for _ in reader)
    assert tuple(meta["size"]) == (642, 362)
    # 3 periods at 5 fps: 2 x (5 - 2 held + 2 cross-fade) + the last held 2 s = 10 frames
    assert frames == 2 * 5 + 10
    r.close()


def test_mp4_tween_longer_than_a_period_is_refused(tmp_path):
    g, r = _renderer(2)
    with pytest.raises(ConfigError, match="--tween 9"):
        write_mp4(r, tmp_path / "a.mp4", fps=5, tween=9)
    r.close()


def test_png_frames_folder_and_no_silent_overwrite(tmp_path):
    from PIL import Image

    g, r = _renderer(3)
    paths = write_png_frames(r, tmp_path / "frames", r.chrome.period_labels)
    assert [p.name for p in paths] == [
        "frame_000_2016.png",
        "frame_001_2017.png",
        "frame_002_2018.png",
    ]
    assert Image.open(paths[0]).size == SIZE
    with pytest.raises(OutputExistsError, match="--force"):
        write_png_frames(r, tmp_path / "frames", r.chrome.period_labels)
    write_png_frames(r, tmp_path / "frames", r.chrome.period_labels, force=True)
    r.close()


def test_animate_max_mb_shrinks_and_says_so(tmp_path):
    g = _layer(16, 10, 500.0)
    codes = _codes(len(g), 4, seed=2)
    labels = ["a", "b", "c", "d"]
    opts = AnimateOptions(size=(960, 540), max_mb=0.06)
    res = animate(
        g,
        codes,
        sequential(4),
        labels,
        ["1", "2", "3", "4"],
        tmp_path / "a.gif",
        options=opts,
        title="t",
    )
    assert res.path.stat().st_size == res.bytes
    codes_found = {f.code for f in res.findings}
    assert "animation-shrunk" in codes_found or "animation-over-size" in codes_found
    if res.bytes <= 0.06e6:
        assert "animation-shrunk" in codes_found
    assert res.size[0] < 960
    with pytest.raises(OutputExistsError):
        animate(
            g, codes, sequential(4), labels, ["1", "2", "3", "4"], tmp_path / "a.gif", title="t"
        )


def test_animate_rejects_unknown_suffix_and_bad_size(tmp_path):
    g = _layer()
    with pytest.raises(ConfigError, match=".gif, .mp4"):
        animate(g, _codes(len(g), 2), sequential(4), list("abcd"), ["1", "2"], tmp_path / "a.avi")
    with pytest.raises(ConfigError, match="WIDTHxHEIGHT"):
        parse_size("1280by720")
    assert parse_size("800x450") == (800, 450)


def test_gif_from_packed_frames_equals_gif_from_rgb_frames(tmp_path):
    # write_gif reads a FrameRenderer as packed pixels; the file must be the same as from the
    # plain RGB frames (the generic path)
    g, r = _renderer(4)
    a = write_gif(r, tmp_path / "packed.gif", exact_colours=r.exact_colours)
    b = write_gif(
        (r.frame(j) for j in range(r.n_frames)), tmp_path / "rgb.gif", exact_colours=r.exact_colours
    )
    assert a.read_bytes() == b.read_bytes()
    r.close()


def test_fixed_palette_matches_kdtree_nearest_and_keeps_exact_colours():
    # reference: scipy's cKDTree nearest neighbour on the 5-bit cell centres
    from scipy.spatial import cKDTree

    from mapdrift.render.encode import FixedPalette
    from mapdrift.render.frames import pack_rgb, unpack_rgb

    rng = np.random.default_rng(4)
    pal = FixedPalette(rng.integers(0, 256, (120, 3)))
    img = rng.integers(0, 256, (64, 80, 3)).astype(np.uint8)
    img[:8] = pal.colours[7]  # an exact palette colour maps to itself
    idx = pal.index(img)
    assert (idx[:8] == 7).all()
    assert (pal.index_packed(pack_rgb(img)) == idx).all()
    assert (unpack_rgb(pack_rgb(img)) == img).all()
    flat = img.reshape(-1, 3)
    exact = (flat[:, None, :] == pal.colours[None]).all(axis=2).any(axis=1)
    centre = (flat[~exact] // 8 * 8 + 3.5).astype(float)
    dist, _ = cKDTree(pal.colours.astype(float)).query(centre)
    got = np.sqrt(((centre - pal.colours[idx.ravel()[~exact]].astype(float)) ** 2).sum(axis=1))
    assert np.allclose(got, dist)  # same distance (ties may pick either entry)


def test_mp4_without_tween_encodes_one_frame_per_period_and_keeps_the_timing(tmp_path):
    # Timing from ffprobe-style metadata read back by imageio-ffmpeg (an outside reader):
    # 3 periods at 1 s each, the last held 3 s -> 2 + 3 encoded frames at 1 fps, 5 s long.
    imageio_ffmpeg = pytest.importorskip("imageio_ffmpeg")
    g, r = _renderer(3)
    path = write_mp4(r, tmp_path / "a.mp4", seconds_per_period=1.0, hold_last=3.0)
    reader = imageio_ffmpeg.read_frames(str(path))
    meta = reader.__next__()
    frames = sum(1 for _ in reader)
    assert frames == 5
    assert meta["duration"] == pytest.approx(5.0, abs=0.05)
    # half a second per period, hold 2 s: tick 0.5 s -> 1 frame per period, 4 for the hold
    path = write_mp4(r, tmp_path / "b.mp4", seconds_per_period=0.5, hold_last=2.0)
    reader = imageio_ffmpeg.read_frames(str(path))
    meta = reader.__next__()
    assert sum(1 for _ in reader) == 2 + 4
    assert meta["duration"] == pytest.approx(3.0, abs=0.05)
    r.close()


def test_renderers_of_one_geometry_share_the_label_raster():
    from mapdrift.render.raster import LabelRaster, fit_transform

    g = _layer()
    a = FrameRenderer(g, _codes(len(g), 2), sequential(4), list("abcd"), ["1", "2"], size=SIZE)
    b = FrameRenderer(g, _codes(len(g), 2, 1), sequential(4), list("abcd"), ["1", "2"], size=SIZE)
    assert a.raster.label is b.raster.label  # built once, shared
    assert not np.array_equal(a.frame(0), b.frame(0))  # each renderer keeps its own codes
    # another geometry object (even with equal shapes) is rasterised anew
    c = FrameRenderer(
        _layer(), _codes(len(g), 2), sequential(4), list("abcd"), ["1", "2"], size=SIZE
    )
    assert c.raster.label is not a.raster.label
    np.testing.assert_array_equal(c.raster.label, a.raster.label)
    tr = fit_transform(tuple(g.total_bounds), 100, 60)
    assert LabelRaster.build(g, tr, cache=False).label is not LabelRaster.build(g, tr).label
