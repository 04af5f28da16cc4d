"""Benchmark: the whole job on files, step by step, against plain baselines measured in the same run.

For each size N it writes, into a scratch folder (our own synthetic generator, no real place):

- ``tracts.gpkg``: N Voronoi tracts in a metric CRS (EPSG:5070) with 11-digit IDs (state +
  county + tract, a third of them starting with ``0``) and a name column;
- ``counts.csv``: a long table ``unit_id, year, filings, mortgaged_parcels`` with the IDs
  written as integers (leading zeros lost, as a spreadsheet does) and about 0.1% of the
  filings suppressed (``(D)``, ``*``, blank);
- ``run.toml``: a run config over both (quantile k=5 pooled, 999 permutations, fixed seed).

It then times, each in its own subprocess (peak RSS from ``wait4``):

- ``mapdrift run`` end to end, with the run's own step timings read from ``manifest.json``
  (at ``--skip-clusters-from`` units and above the cluster step is skipped: check + animate +
  changes only, through :func:`mapdrift.pipeline.run` with a reduced step list);
- ``mapdrift animate --out animation.gif`` from the same files (the end-to-end animation);
- plain baselines: ``geopandas.read_file`` + ``pandas.read_csv`` of the same files (the floor
  for loading), and the naive loop an analyst writes (read, pivot, quantile, then
  ``GeoDataFrame.plot`` + ``savefig`` per period, imageio GIF). The naive loop is timed on
  ``--naive-frames`` frames and extrapolated to every period; the script says so.
- the floor: a process that starts Python, imports numpy, pandas, geopandas, matplotlib's Agg
  canvas and Pillow and reads both files, nothing else. No Python tool built on these
  libraries can animate the files faster; the ratio naive/floor bounds naive/mapdrift.

Prints seconds, ratios and peak RSS. The machine is shared: run it a few times and read the
spread. Usage::

    python benchmarks/bench_run.py                          # 10,000, 85,000, 240,000 x 15
    python benchmarks/bench_run.py --sizes 10000 --periods 20 --animate-only   # "done when"
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

os.environ.setdefault("MPLBACKEND", "Agg")

LAST_CPU = 0.0
STATES = [1, 4, 5, 6, 8, 9, 12, 13, 17, 26, 36, 39, 42, 48, 53]


def make_files(n: int, periods: int, folder: Path, seed: int = 11) -> dict[str, Path]:
    """Write tracts.gpkg, counts.csv and run.toml for ``n`` tracts x ``periods`` years."""
    import geopandas as gpd
    import numpy as np
    import pandas as pd
    import shapely
    from shapely.geometry import box

    rng = np.random.default_rng(seed)
    # ~ 4 km2 per tract on average, a 16:9 extent
    area = 4e6 * n
    w = float(np.sqrt(area * 16 / 9))
    h = area / w
    frame = box(0, 0, w, h)
    pts = rng.uniform((0, 0), (w, h), (n, 2))
    cells = shapely.get_parts(shapely.voronoi_polygons(shapely.multipoints(pts), extend_to=frame))
    cells = shapely.intersection(cells, frame)
    cells = cells[~shapely.is_empty(cells)]
    n = len(cells)
    i = np.arange(n)
    state = np.array(STATES)[i * len(STATES) // n]
    county = (i // 500) % 400 * 2 + 1
    tract = (i % 500) * 100 + 100
    id_int = state.astype(np.int64) * 10**9 + county * 10**6 + tract
    ids = np.char.zfill(id_int.astype(str), 11)
    names = np.char.add("Tract ", np.char.zfill((i + 1).astype(str), 6))
    gdf = gpd.GeoDataFrame({"unit_id": ids, "name": names}, geometry=cells, crs="EPSG:5070")
    gpkg = folder / "tracts.gpkg"
    gdf.to_file(gpkg, layer="tracts", driver="GPKG", engine="pyogrio")
    # rates with a smooth spatial field, a trend and noise (so clusters and jumps exist)
    c = shapely.get_coordinates(shapely.centroid(cells))
    field = np.sin(c[:, 0] / w * 9) + np.cos(c[:, 1] / h * 7)
    years = np.arange(2010, 2010 + periods)
    base = np.exp(1.2 + 0.5 * field)[:, None] * (1 + 0.03 * (years - years[0]))[None, :]
    parcels = rng.integers(150, 2500, size=(n, 1)).repeat(periods, axis=1)
    filings = rng.poisson(base * parcels / 1000.0).astype(np.int64)
    table = pd.DataFrame(
        {
            "unit_id": np.repeat(id_int, periods),
            "year": np.tile(years, n),
            "filings": filings.ravel().astype(object),
            "mortgaged_parcels": parcels.ravel(),
        }
    )
    hide = rng.random(len(table)) < 0.001
    table.loc[hide, "filings"] = rng.choice(["(D)", "*", ""], size=int(hide.sum()))
    csv = folder / "counts.csv"
    table.to_csv(csv, index=False)
    cfg = folder / "run.toml"
    cfg.write_text(
        f"""[inputs]
geometry = "{gpkg.name}"
layer = "tracts"
table = "{csv.name}"
id = "unit_id"
name = "name"
period = "year"
numerator = "filings"
denominator = "mortgaged_parcels"
per = 1000
variable = "Filing rate"
unit_label = "filings per 1,000 parcels"
source = "Synthetic benchmark tracts (mapdrift's own generator)"

[classes]
scheme = "quantile"
k = 5
basis = "pooled"

[clusters]
permutations = 999
seed = 12345
cache_dir = "{(folder / "cache").as_posix()}"
"""
    )
    return {"gpkg": gpkg, "csv": csv, "config": cfg}


# ---------------------------------------------------------------------------------------------
# children (each in its own process so peak RSS is its own)
# ---------------------------------------------------------------------------------------------
def child_plain(gpkg: str, csv: str) -> dict:
    import geopandas as gpd
    import pandas as pd

    t0 = time.perf_counter()
    c0 = time.process_time()
    g = gpd.read_file(gpkg, engine="pyogrio")
    t = pd.read_csv(csv, dtype={"unit_id": str})
    secs = time.perf_counter() - t0
    cpu = time.process_time() - c0
    return {"s": secs, "cpu_s": cpu, "rows": len(t), "units": len(g), "rss_mb": _rss()}


def child_floor(gpkg: str, csv: str) -> dict:
    """The floor of any Python tool here: import what drawing a map from these files needs
    (numpy, pandas, geopandas, matplotlib's Agg canvas, Pillow) and read both files; nothing
    else. Its wall time (interpreter start included) is measured by the parent."""
    import geopandas as gpd
    import matplotlib.figure  # noqa: F401
    import pandas as pd
    from matplotlib.backends import backend_agg  # noqa: F401
    from PIL import Image  # noqa: F401

    g = gpd.read_file(gpkg, engine="pyogrio")
    t = pd.read_csv(csv, dtype={"unit_id": str})
    return {"units": len(g), "rows": len(t)}


def child_naive(gpkg: str, csv: str, frames: int, size: tuple[int, int]) -> dict:
    """Read, rate, pooled quantiles, then plot + savefig per period and an imageio GIF."""
    import geopandas as gpd
    import imageio.v2 as imageio
    import matplotlib.pyplot as plt
    import numpy as np
    import pandas as pd

    t0 = time.perf_counter()
    c0 = time.process_time()
    g = gpd.read_file(gpkg, engine="pyogrio")
    t = pd.read_csv(csv, dtype={"unit_id": str})
    t["unit_id"] = t["unit_id"].str.zfill(11)
    t["rate"] = pd.to_numeric(t["filings"], errors="coerce") / t["mortgaged_parcels"] * 1000
    wide = t.pivot(index="unit_id", columns="year", values="rate")
    gdf = g.merge(wide, left_on="unit_id", right_index=True, how="left")
    years = list(wide.columns)
    edges = np.nanquantile(wide.to_numpy(), [0.2, 0.4, 0.6, 0.8])
    cols = np.array(["#fef0d9", "#fdcc8a", "#fc8d59", "#e34a33", "#b30000", "#cfcfcf"])
    t_prep = time.perf_counter() - t0
    c_prep = time.process_time() - c0
    n = min(frames, len(years)) if frames > 0 else len(years)
    t1 = time.perf_counter()
    c1 = time.process_time()
    images = []
    with tempfile.TemporaryDirectory() as d:
        for j in range(n):
            v = gdf[years[j]].to_numpy()
            code = np.where(np.isnan(v), 5, np.searchsorted(edges, v))
            fig, ax = plt.subplots(figsize=(size[0] / 100, size[1] / 100), dpi=100)
            gdf.plot(ax=ax, color=cols[code], edgecolor="white", linewidth=0.1)
            ax.set_axis_off()
            ax.set_title(f"Filing rate {years[j]}")
            p = os.path.join(d, f"f{j}.png")
            fig.savefig(p, dpi=100)
            plt.close(fig)
            images.append(imageio.imread(p))
        imageio.mimsave(os.path.join(d, "a.gif"), images, duration=1000)
    t_frames = time.perf_counter() - t1
    c_frames = time.process_time() - c1
    return {
        "cpu_total_s": c_prep + c_frames * len(years) / n,
        "prep_s": t_prep,
        "frames_timed": n,
        "frames_s": t_frames,
        "total_s": t_prep + t_frames * len(years) / n,
        "rss_mb": _rss(),
    }


def child_pipeline(config: str, out: str, skip: list[str]) -> dict:
    """``mapdrift run`` in this process (the function the command calls), CPU per step."""
    from mapdrift.config import load_config
    from mapdrift.pipeline import STEPS, run

    cpu: dict[str, float] = {}
    state = {"name": None, "t": 0.0}

    def start(name: str) -> None:
        state["name"], state["t"] = name, time.process_time()

    def done(_line: str) -> None:
        cpu[str(state["name"])] = round(time.process_time() - float(state["t"]), 2)

    steps = [(name, fn) for name, fn in STEPS if name not in skip]
    t0 = time.process_time()
    res = run(
        load_config(Path(config)), out=Path(out), force=True, steps=steps, on_start=start,
        progress=done,
    )  # fmt: skip
    return {"timings": res.timings, "cpu": cpu, "cpu_total": time.process_time() - t0}


def _rss() -> float:
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024


def _timed(cmd: list[str], cwd: Path | None = None) -> tuple[float, float, str]:
    """Run ``cmd``; wall seconds, peak RSS (MB, the process tree's largest) and stdout.

    The CPU seconds (user + system) of the last command are kept in ``LAST_CPU``: on a shared
    machine they vary much less than wall time.
    """
    global LAST_CPU
    t0 = time.perf_counter()
    with tempfile.TemporaryFile("w+") as so, tempfile.TemporaryFile("w+") as se:
        p = subprocess.Popen(cmd, stdout=so, stderr=se, cwd=cwd)
        _, status, ru = os.wait4(p.pid, 0)
        secs = time.perf_counter() - t0
        so.seek(0)
        se.seek(0)
        out, err = so.read(), se.read()
    p.returncode = os.waitstatus_to_exitcode(status)
    LAST_CPU = ru.ru_utime + ru.ru_stime
    if p.returncode != 0:
        raise SystemExit(f"{' '.join(cmd[:4])} ... failed ({p.returncode}):\n{err[-3000:]}")
    return secs, ru.ru_maxrss / 1024, out


def _child(kind: str, *args: str) -> tuple[dict, float]:
    secs, rss, out = _timed([sys.executable, __file__, "--child", kind, *args])
    res = json.loads(out.strip().splitlines()[-1])
    res["wall_s"] = secs
    res["tree_rss_mb"] = rss
    return res, secs


def _mapdrift(*args: str) -> list[str]:
    return [sys.executable, "-c", "from mapdrift.cli import console; console()", *args]


def bench_size(n: int, periods: int, a: argparse.Namespace, root: Path) -> None:
    folder = root / f"n{n}"
    folder.mkdir(parents=True, exist_ok=True)
    t0 = time.perf_counter()
    files = make_files(n, periods, folder)
    print(
        f"\n== {n:,} tracts x {periods} years (files written in {time.perf_counter() - t0:.0f} s: "
        f"gpkg {files['gpkg'].stat().st_size / 1e6:.0f} MB, csv {files['csv'].stat().st_size / 1e6:.0f} MB)",
        flush=True,
    )
    plain, _ = _child("plain", str(files["gpkg"]), str(files["csv"]))
    print(
        f"plain geopandas+pandas read: {plain['s']:.1f} s (CPU {plain['cpu_s']:.1f} s), "
        f"peak {plain['rss_mb']:.0f} MB",
        flush=True,
    )
    size = a.size
    naive, _ = _child(
        "naive",
        str(files["gpkg"]),
        str(files["csv"]),
        "--naive-frames",
        str(a.naive_frames),
        "--size",
        size,
    )
    print(
        f"naive plot loop: read+prep {naive['prep_s']:.1f} s, {naive['frames_timed']} frames in "
        f"{naive['frames_s']:.1f} s -> {naive['total_s']:.1f} s extrapolated to {periods} frames "
        f"(peak {naive['rss_mb']:.0f} MB)",
        flush=True,
    )
    floor, floor_s = _child("floor", str(files["gpkg"]), str(files["csv"]))
    # the naive script end to end: its process (interpreter, imports, reading) plus every frame
    naive_e2e = naive["wall_s"] - naive["frames_s"] + naive["total_s"] - naive["prep_s"]
    print(
        f"floor (start Python, import numpy/pandas/geopandas/matplotlib Agg/Pillow, read both "
        f"files, nothing else): {floor_s:.1f} s; the naive script end to end (its imports "
        f"included): {naive_e2e:.1f} s = {naive_e2e / floor_s:.1f}x the floor",
        flush=True,
    )
    # mapdrift animate from files to GIF, end to end through the CLI
    gif = folder / "animation.gif"
    secs, rss, _ = _timed(
        _mapdrift(
            "animate",
            "--config",
            str(files["config"]),
            "--out",
            str(gif),
            "--force",
            "--size",
            size,
        )
    )
    print(
        f"mapdrift animate -> GIF: {secs:.1f} s end to end (CLI, imports included; CPU "
        f"{LAST_CPU:.1f} s), peak {rss:.0f} MB, "
        f"{gif.stat().st_size / 1e6:.1f} MB; naive/mapdrift = {naive['total_s'] / secs:.1f}x wall, "
        f"{naive['cpu_total_s'] / LAST_CPU:.1f}x CPU (naive after its imports, mapdrift with them)",
        flush=True,
    )
    print(
        f"  end to end on both sides (imports included): naive/mapdrift = {naive_e2e / secs:.1f}x; "
        f"mapdrift = floor + {secs - floor_s:.1f} s",
        flush=True,
    )
    if a.animate_only:
        return
    out = folder / "run"
    skip = n >= a.skip_clusters_from
    what = "clusters" if skip else ""
    secs, rss, text = _timed(
        [sys.executable, __file__, "--child", "pipeline", str(files["config"]), str(out),
         "--skip", what]
    )  # fmt: skip
    child = json.loads(text.strip().splitlines()[-1])
    label = (
        "mapdrift run, every step but clusters (check + classify + changes + animate + units + brief)"
        if skip
        else "mapdrift run, every step"
    )
    man = json.loads((out / "manifest.json").read_text())
    timings = man.get("timings_s", {})
    steps = ", ".join(f"{k} {v:.1f}" for k, v in timings.items())
    print(
        f"{label}: {secs:.1f} s wall ({secs / 60:.2f} min; CPU {LAST_CPU:.1f} s with ffmpeg), "
        f"peak {rss:.0f} MB",
        flush=True,
    )
    print(f"  steps, wall s (manifest.json): {steps}")
    print(
        "  steps, CPU s (main process): "
        + ", ".join(f"{k} {v:.1f}" for k, v in child["cpu"].items())
    )
    load, cload = timings.get("load"), child["cpu"].get("load")
    if load and cload:
        print(
            f"  load / plain read = {load / plain['s']:.1f}x wall, "
            f"{cload / max(plain['cpu_s'], 1e-3):.1f}x CPU"
        )
    anim, canim = timings.get("animate"), child["cpu"].get("animate")
    if anim and canim:
        print(
            f"  naive render (extrapolated, {periods} frames) / animate step = "
            f"{naive['total_s'] / anim:.1f}x wall, {naive['cpu_total_s'] / canim:.1f}x CPU "
            "(the step also writes the MP4, the poster and the small multiples)"
        )
    big = sorted(((p.stat().st_size, p.name) for p in out.rglob("*") if p.is_file()), reverse=True)
    print("  largest outputs: " + ", ".join(f"{nm} {sz / 1e6:.1f} MB" for sz, nm in big[:6]))
    if not a.keep:
        shutil.rmtree(out, ignore_errors=True)


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sizes", default="10000,85000,240000", help="tract counts, comma-separated")
    ap.add_argument("--periods", type=int, default=15)
    ap.add_argument("--naive-frames", type=int, default=3, help="naive frames timed, extrapolated")
    ap.add_argument("--size", default="1280x720", help="frame size")
    ap.add_argument("--skip-clusters-from", type=int, default=200_000)
    ap.add_argument("--animate-only", action="store_true", help="only the animate comparison")
    ap.add_argument("--keep", action="store_true", help="keep the scratch folder")
    ap.add_argument("--child", help=argparse.SUPPRESS)
    ap.add_argument("--skip", default="", help=argparse.SUPPRESS)
    ap.add_argument("args", nargs="*", help=argparse.SUPPRESS)
    a = ap.parse_args()
    if a.child:
        size = tuple(int(v) for v in a.size.split("x"))
        if a.child == "plain":
            res = child_plain(*a.args)
        elif a.child == "floor":
            res = child_floor(*a.args)
        elif a.child == "naive":
            res = child_naive(*a.args, a.naive_frames, size)
        else:
            res = child_pipeline(*a.args, [s for s in a.skip.split(",") if s])
        print(json.dumps(res))
        return
    root = Path(tempfile.mkdtemp(prefix="mapdrift-bench-run-"))
    print(f"scratch: {root}; {os.cpu_count()} cores; shared machine, expect noise")
    try:
        for n in (int(v) for v in a.sizes.split(",")):
            bench_size(n, a.periods, a, root)
    finally:
        if not a.keep:
            shutil.rmtree(root, ignore_errors=True)


if __name__ == "__main__":
    main()
