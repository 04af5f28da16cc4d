"""Benchmark: naive per-frame matplotlib loop vs mapdrift's label-raster renderer, to GIF.

Builds synthetic Voronoi layers (1,000 / 10,000 / 50,000 polygons, 20 periods, 5 classes,
3% no data) in a metric CRS and times, in the same run and at the same frame size:

- naive: what an analyst writes by hand, GeoDataFrame.plot + savefig per frame, frames
  collected and written with imageio; every period by default, the same frame count as
  mapdrift (``--naive-frames N`` times only N frames and scales up, for quick looks);
- mapdrift: rasterise + furniture + every frame + GIF encode, end to end, through the same
  path as ``animate()`` (the renderer handed to ``write_gif``).

Imports are outside the timing on both sides (geopandas, pyplot, imageio for the naive loop;
matplotlib's figure and Agg canvas, Pillow's GIF plugin and pyproj for mapdrift).

Prints seconds, the ratio naive/mapdrift, the share of mapdrift's time spent encoding, and the
peak RSS of each (each measured in its own subprocess). Usage::

    python benchmarks/bench_render.py            # 1,000, 10,000, 50,000
    python benchmarks/bench_render.py --quick    # 1,000 and 10,000 at 640x360
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import subprocess
import sys
import tempfile
import time

os.environ.setdefault("MPLBACKEND", "Agg")


def layer(n: int, seed: int = 7):
    import geopandas as gpd
    import numpy as np
    import shapely
    from shapely.geometry import box

    rng = np.random.default_rng(seed)
    frame = box(0, 0, 160_000, 90_000)
    pts = rng.uniform((0, 0), (160_000, 90_000), (n, 2))
    cells = shapely.get_parts(shapely.voronoi_polygons(shapely.multipoints(pts), extend_to=frame))
    cells = shapely.intersection(cells, frame)
    return gpd.GeoSeries(cells[~shapely.is_empty(cells)], crs="EPSG:3857")


def codes_for(n: int, periods: int, seed: int = 7):
    import numpy as np

    rng = np.random.default_rng(seed)
    c = rng.integers(0, 5, size=(n, periods)).astype(np.int16)
    c[rng.random((n, periods)) < 0.03] = -1
    return c


def run_mapdrift(n: int, periods: int, size: tuple[int, int]) -> dict:
    import matplotlib.backends.backend_agg  # noqa: F401  imports are not part of the timing
    import matplotlib.figure  # noqa: F401  (the naive side imports pyplot before timing)
    import PIL.GifImagePlugin  # noqa: F401
    import pyproj  # noqa: F401

    from mapdrift.palettes import sequential
    from mapdrift.render import encode
    from mapdrift.render.frames import FrameRenderer

    g = layer(n)
    codes = codes_for(len(g), periods)
    labels = ["<= 2", "2 - 4", "4 - 6", "6 - 8", "> 8"]
    t0 = time.perf_counter()
    r = FrameRenderer(
        g,
        codes,
        sequential(5),
        labels,
        [str(2000 + j) for j in range(periods)],
        title="Benchmark",
        subtitle="synthetic layer",
        caption="mapdrift benchmark",
        size=size,
    )
    t_prep = time.perf_counter() - t0
    t_frames = 0.0
    t_encode = 0.0

    class Timed:
        """The renderer as write_gif sees it (packed frames), timing frame production."""

        def packed_frames(self):
            nonlocal t_frames
            for j in range(r.n_frames):
                a = time.perf_counter()
                f = r.packed_frame(j)
                t_frames += time.perf_counter() - a
                yield f

        def __iter__(self):
            return iter(r)

    with tempfile.TemporaryDirectory() as d:
        a = time.perf_counter()
        path = encode.write_gif(Timed(), os.path.join(d, "a.gif"), exact_colours=r.exact_colours)
        total_write = time.perf_counter() - a
        t_encode = total_write - t_frames
        mb = path.stat().st_size / 1e6
    total = time.perf_counter() - t0
    return {
        "units": len(g),
        "prep_s": t_prep,
        "frames_s": t_frames,
        "encode_s": t_encode,
        "total_s": total,
        "per_frame_ms": 1000 * t_frames / periods,
        "gif_mb": mb,
        "rss_mb": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024,
    }


def run_naive(n: int, periods: int, size: tuple[int, int], frames: int) -> dict:
    import geopandas as gpd
    import imageio.v2 as imageio
    import matplotlib.pyplot as plt
    import numpy as np

    from mapdrift.palettes import sequential

    g = layer(n)
    codes = codes_for(len(g), periods)
    cols = np.array(sequential(5) + ["#cfcfcf"])
    gdf = gpd.GeoDataFrame(geometry=g)
    frames = min(frames, periods) if frames > 0 else periods
    t0 = time.perf_counter()
    images = []
    with tempfile.TemporaryDirectory() as d:
        for j in range(frames):
            fig, ax = plt.subplots(figsize=(size[0] / 100, size[1] / 100), dpi=100)
            gdf.plot(ax=ax, color=cols[codes[:, j]], edgecolor="white", linewidth=0.2)
            ax.set_axis_off()
            ax.set_title(f"Benchmark {2000 + j}")
            p = os.path.join(d, f"f{j}.png")
            fig.savefig(p, dpi=100)
            plt.close(fig)
            images.append(imageio.imread(p))
        imageio.mimsave(os.path.join(d, "a.gif"), images, duration=1000)
    t = time.perf_counter() - t0
    return {
        "units": len(g),
        "frames_timed": frames,
        "timed_s": t,
        "total_s": t * periods / frames,
        "rss_mb": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024,
    }


def _child(args: list[str]) -> dict:
    out = subprocess.run(
        [sys.executable, __file__, *args], capture_output=True, text=True, check=True
    )
    return json.loads(out.stdout.strip().splitlines()[-1])


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="1,000 and 10,000 polygons at 640x360")
    ap.add_argument("--sizes", default=None, help="polygon counts, e.g. 1000,10000,50000")
    ap.add_argument("--periods", type=int, default=20)
    ap.add_argument(
        "--naive-frames",
        type=int,
        default=0,
        help="naive frames actually timed and scaled up [0 = every period, same as mapdrift]",
    )
    ap.add_argument("--size", default=None, help="frame size [1280x720; --quick 640x360]")
    ap.add_argument("--child", choices=["naive", "mapdrift"], help=argparse.SUPPRESS)
    ap.add_argument("--n", type=int, help=argparse.SUPPRESS)
    a = ap.parse_args()
    size_txt = a.size or ("640x360" if a.quick else "1280x720")
    size = tuple(int(v) for v in size_txt.split("x"))
    if a.child:
        res = (
            run_naive(a.n, a.periods, size, a.naive_frames)
            if a.child == "naive"
            else run_mapdrift(a.n, a.periods, size)
        )
        print(json.dumps(res))
        return
    counts = [
        int(v) for v in (a.sizes or ("1000,10000" if a.quick else "1000,10000,50000")).split(",")
    ]
    timed = f"{a.naive_frames} frames, scaled" if 0 < a.naive_frames < a.periods else "every frame"
    print(f"frame {size_txt}, {a.periods} periods, 5 classes; naive timed on {timed}")
    head = (
        f"{'polygons':>9} {'naive s':>9} {'mapdrift s':>10} {'ratio':>7} {'prep s':>7} {'ms/frame':>9} "
        f"{'encode':>7} {'GIF MB':>7} {'RSS naive':>10} {'RSS md':>8}"
    )
    print(head)
    for n in counts:
        common = [
            "--n",
            str(n),
            "--periods",
            str(a.periods),
            "--size",
            size_txt,
            "--naive-frames",
            str(a.naive_frames),
        ]
        md = _child(["--child", "mapdrift", *common])
        nv = _child(["--child", "naive", *common])
        share = md["encode_s"] / md["total_s"]
        print(
            f"{md['units']:>9,} {nv['total_s']:>9.1f} {md['total_s']:>10.2f} {nv['total_s'] / md['total_s']:>6.0f}x "
            f"{md['prep_s']:>7.2f} {md['per_frame_ms']:>9.1f} {share:>6.0%} {md['gif_mb']:>7.2f} "
            f"{nv['rss_mb']:>8.0f}MB {md['rss_mb']:>6.0f}MB",
            flush=True,
        )


if __name__ == "__main__":
    main()
