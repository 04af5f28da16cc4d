"""The explorer page: its data block and its security, then the page itself in a real browser.

The browser checks drive Debian's chromium over the DevTools protocol (playwright, pointed at the
system browser; no browser is downloaded). They skip, saying why, only when chromium or the
playwright package is missing. Expected classes and colours come from ``mapdrift.breaks`` and
``mapdrift.palettes`` and from the ``mapdrift breaks`` command, never from the page's own data;
interior points come from shapely (each square's centre).
"""

from __future__ import annotations

import base64
import hashlib
import json
import re
import shutil
import zlib
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from conftest import grid_layer
from mapdrift.brief.explorer import _json_for_script, pack_array, render_page

XSS = "<img src=x onerror=alert(1)>"
CLOSER = "</script><script>alert(2)</script>"
PLACEHOLDER = "{{SCRIPT}}"
SIDE = 6
YEARS = list(range(2015, 2023))


def _unpack(p: dict) -> np.ndarray:
    """The page's decoder, in numpy: base64 -> zlib -> (unshuffle bytes)."""
    dt = np.dtype(
        {"int8": "i1", "uint8": "u1", "int32": "<i4", "uint32": "<u4", "float64": "<f8"}[p["dtype"]]
    )
    raw = np.frombuffer(zlib.decompress(base64.b64decode(p["b64"])), dtype=np.uint8)
    if p["shuffle"]:
        raw = raw.reshape(dt.itemsize, p["n"]).T.copy()
    return raw.view(dt).ravel()


def test_pack_array_round_trip():
    rng = np.random.default_rng(0)
    lab = np.repeat(rng.integers(-1, 90_000, 500), rng.integers(1, 40, 500)).astype(np.int32)
    assert np.array_equal(_unpack(pack_array(lab, "int32", shuffle=False)), lab)
    assert np.array_equal(_unpack(pack_array(lab, "int32")), lab)
    vals = rng.normal(10, 3, 1000)
    vals[::7] = np.nan
    back = _unpack(pack_array(vals, "float64"))
    assert np.array_equal(back, vals, equal_nan=True)  # bit-exact: classes depend on it
    codes = rng.integers(-1, 5, 300).astype(np.int8)
    assert np.array_equal(_unpack(pack_array(codes, "int8")), codes)


def test_data_block_cannot_close_the_script():
    # HTML Living Standard, "restrictions for contents of script elements": the text must not
    # contain "</script"; escaping every "<" (and ">", "&") as \u003c keeps JSON valid and inert.
    text = _json_for_script({"names": [XSS, CLOSER, "a & b", "\u2028"]})
    assert "<" not in text and ">" not in text and "&" not in text and "\u2028" not in text
    assert json.loads(text)["names"] == [XSS, CLOSER, "a & b", "\u2028"]


def _tiny_payload(names):
    return {
        "title": PLACEHOLDER + XSS,
        "names": names,
        "arrays": {},
    }


def test_page_is_single_pass_and_pinned_by_hashes():
    page = render_page(_tiny_payload([PLACEHOLDER, CLOSER]))
    # the placeholder text in the data stays data: the script appears exactly once
    assert page.count("'use strict'") == 1
    assert "</script><script>alert(2)" not in page
    assert XSS not in page  # the title is escaped in <title>
    csp = re.search(r'http-equiv="Content-Security-Policy" content="([^"]+)"', page).group(1)
    csp = csp.replace("&#x27;", "'").replace("&quot;", '"')
    assert "default-src 'none'" in csp and "img-src data: blob:" in csp
    assert "unsafe-inline" not in csp and "unsafe-eval" not in csp
    script = re.search(r"<script>(.*?)</script>\s*</body>", page, re.S).group(1)
    style = re.search(r"<style>(.*?)</style>", page, re.S).group(1)
    for body in (script, style):
        digest = base64.b64encode(hashlib.sha256(body.encode()).digest()).decode()
        assert f"'sha256-{digest}'" in csp


def test_cluster_labels_match_the_cluster_module():
    from mapdrift.brief import explorer
    from mapdrift.clusters.labels import LABELS

    assert explorer.ExplorerExtras().cluster_labels == LABELS


# ------------------------------------------------------------------------------------------
# a small run with hostile names
# ------------------------------------------------------------------------------------------
@pytest.fixture(scope="module")
def grid_run(tmp_path_factory):
    """A 6 x 6 grid of 1 km squares over 8 years with counts, gaps, a jump and hostile names."""
    d = tmp_path_factory.mktemp("explore")
    gdf = grid_layer(SIDE)
    gdf.loc[0, "name"] = XSS
    gdf.loc[1, "name"] = CLOSER
    gdf.loc[2, "name"] = PLACEHOLDER
    gdf.to_file(d / "units.gpkg", driver="GPKG")
    rng = np.random.default_rng(7)
    rows = []
    for i, u in enumerate(gdf["unit_id"]):
        r, c = divmod(i, SIDE)
        homes = int(rng.integers(300, 3000))
        for y in YEARS:
            rate = 4 + 3 * c + r + 0.6 * (y - 2015) * (c > 3) + rng.normal(0, 0.5)
            if i == 14 and y >= 2019:
                rate += 25  # a planted jump
            ev = max(int(round(rate * homes / 1000)), 0)
            if i == 20 and y in (2016, 2017):
                continue  # no data two years
            rows.append({"unit_id": u, "year": y, "events": ev, "homes": homes})
    pd.DataFrame(rows).to_csv(d / "values.csv", index=False)
    (d / "run.toml").write_text(
        '[inputs]\ngeometry = "units.gpkg"\ntable = "values.csv"\nid = "unit_id"\nname = "name"\n'
        'period = "year"\nnumerator = "events"\ndenominator = "homes"\nper = 1000\n'
        'variable = "Event rate"\nunit_label = "per 1,000 homes"\n'
        "[classes]\nk = 4\n[clusters]\npermutations = 99\n"
    )
    return d


@pytest.fixture(scope="module")
def explored(grid_run):
    """``mapdrift explore CONFIG`` on the grid, and the reference panel and classes."""
    from typer.testing import CliRunner

    from mapdrift.breaks import classify_spec
    from mapdrift.cli import app
    from mapdrift.config import ClassSpec, load_config, merge
    from mapdrift.panel import InputSpec, load_panel

    out = grid_run / "page" / "explorer.html"
    res = CliRunner().invoke(
        app, ["explore", str(grid_run / "run.toml"), "--out", str(out), "--raster-px", "600"]
    )
    assert res.exit_code == 0, res.output
    cfg = load_config(grid_run / "run.toml")
    panel = load_panel(merge(InputSpec, cfg.section("inputs"), {}))
    classes = classify_spec(panel, merge(ClassSpec, cfg.section("classes"), {}))
    return out, panel, classes


def test_explore_cli_refuses_to_overwrite(explored, grid_run):
    from typer.testing import CliRunner

    from mapdrift.cli import app

    out, _, _ = explored
    res = CliRunner().invoke(app, ["explore", str(grid_run / "run.toml"), "--out", str(out)])
    assert res.exit_code == 3 and "--force" in res.output
    res = CliRunner().invoke(app, ["explore", str(grid_run / "nope.toml")])
    assert res.exit_code == 1 and "nope.toml" in res.output


def test_demo_page_size_and_data(explored):
    out, panel, classes = explored
    text = out.read_text()
    assert len(text.encode()) < 1_000_000
    data = json.loads(re.search(r'id="md-data">(.*?)</script>', text, re.S).group(1))
    assert data["units"] == list(panel.units)
    vals = _unpack(data["arrays"]["values"]).reshape(panel.n_periods, panel.n_units).T
    assert np.array_equal(vals, panel.values, equal_nan=True)
    codes = _unpack(data["arrays"]["classes"]).reshape(panel.n_periods, panel.n_units).T
    assert np.array_equal(codes, classes.codes)


# ------------------------------------------------------------------------------------------
# in a real browser
# ------------------------------------------------------------------------------------------
ARGS = [
    "--headless",
    "--no-sandbox",
    "--disable-gpu",
    "--disable-background-networking",
    "--disable-component-update",
    "--no-first-run",
]


@pytest.fixture(scope="module")
def browser():
    exe = shutil.which("chromium") or shutil.which("chromium-browser")
    if exe is None:
        pytest.skip(
            "chromium is not installed (`apt-get install chromium`); browser checks skipped"
        )
    sync_api = pytest.importorskip(
        "playwright.sync_api", reason="playwright is not installed (pip install -e '.[test]')"
    )
    with sync_api.sync_playwright() as p:
        b = p.chromium.launch(executable_path=exe, args=ARGS)
        yield b
        b.close()


class Page:
    """One loaded explorer page with its console messages, errors, requests and dialogs."""

    def __init__(self, browser, path: Path):
        self.pg = browser.new_page(viewport={"width": 1300, "height": 900}, accept_downloads=True)
        self.console, self.requests, self.dialogs = [], [], []
        # console errors only: the test's own pixel reads make Chromium suggest willReadFrequently
        self.pg.on(
            "console",
            lambda m: self.console.append(m.text) if m.type in ("error", "assert") else None,
        )
        self.pg.on("pageerror", lambda e: self.console.append(f"pageerror: {e}"))
        self.pg.on("request", lambda r: self.requests.append(r.url))
        self.pg.on("dialog", lambda d: (self.dialogs.append(d.message), d.dismiss()))
        self.url = path.resolve().as_uri()
        self.pg.goto(self.url)
        self.pg.wait_for_selector("body[data-ready='1']", timeout=30_000)
        self.data = json.loads(self.pg.evaluate("document.getElementById('md-data').textContent"))
        self.W, self.H = self.data["raster"]["width"], self.data["raster"]["height"]

    def raster_xy(self, geom):
        """Raster pixel of a polygon's centre (shapely), in the page's map box."""
        r = self.data["raster"]
        c = geom.centroid
        return int((c.x - r["x0"]) / r["res"]), int((r["y1"] - c.y) / r["res"])

    def pixels(self, points):
        return self.pg.evaluate(
            """pts => { const ctx = document.getElementById('md-map').getContext('2d');
                return pts.map(([x, y]) => Array.from(ctx.getImageData(x, y, 1, 1).data)); }""",
            [list(p) for p in points],
        )

    def client_xy(self, raster_point):
        box = self.pg.locator("#md-map").bounding_box()
        x, y = raster_point
        return (
            box["x"] + (x + 0.5) / self.W * box["width"],
            box["y"] + (y + 0.5) / self.H * box["height"],
        )

    def period(self) -> str:
        return self.pg.get_attribute("#md-map", "data-period")


def _rgb(hex_colour: str) -> list[int]:
    h = hex_colour.lstrip("#")
    return [int(h[i : i + 2], 16) for i in (0, 2, 4)]


def _faded(rgb: list[int]) -> list[int]:
    return [round(c + (255 - c) * 0.72) for c in rgb]


@pytest.fixture(scope="module")
def page(browser, explored):
    out, _, _ = explored
    return Page(browser, out)


def test_loads_clean_and_offline(page):
    assert page.console == []
    assert page.requests == [page.url]  # the page itself and nothing else
    assert page.dialogs == []


def test_period_steps_recolour_units_with_their_classes(page, explored):
    from mapdrift import palettes

    _, panel, classes = explored
    colours = [_rgb(c) for c in palettes.colours_for(classes.k)]
    nodata = [_rgb(palettes.NODATA), _rgb(palettes.NODATA_HATCH)]
    pts = [page.raster_xy(g) for g in panel.geometry]
    page.pg.locator("#md-strip").focus()
    page.pg.keyboard.press("Home")
    seen = []
    for j, label in enumerate(panel.period_labels):
        if j:
            page.pg.keyboard.press("ArrowRight")
        assert page.period() == label
        got = page.pixels(pts)
        for u, px in enumerate(got):
            c = int(classes.codes[u, j])
            if c < 0:
                assert px[:3] in nodata, (label, panel.units[u], px)
            else:
                assert px == colours[c] + [255], (label, panel.units[u], px, c)
        seen.append(tuple(map(tuple, got)))
    assert len(set(seen)) > 1  # the picture changed with the period


def test_hover_names_the_unit_and_keeps_hostile_names_as_text(page, explored):
    _, panel, _ = explored
    for u in (0, 1, 2, 14, 35):
        x, y = page.client_xy(page.raster_xy(panel.geometry.iloc[u]))
        page.pg.mouse.move(x, y)
        tip = page.pg.locator("#md-tip")
        assert tip.get_attribute("data-unit") == panel.units[u]
        assert panel.names[u] in tip.inner_text()
    assert page.pg.evaluate("document.images.length") == 0
    assert page.pg.evaluate("document.scripts.length") == 2
    assert page.dialogs == [] and page.requests == [page.url] and page.console == []


def test_pin_shows_trajectory_and_neighbours(page, explored):
    _, panel, _ = explored
    x, y = page.client_xy(page.raster_xy(panel.geometry.iloc[0]))  # a corner square
    page.pg.mouse.click(x, y)
    card = page.pg.locator("#md-inspect")
    assert card.get_attribute("data-unit") == panel.units[0]
    assert page.pg.get_attribute("#md-traj", "data-unit") == panel.units[0]
    # queen contiguity on a grid: a corner cell has 3 neighbours (rook 2 + 1 diagonal)
    assert "3 (outlined" in card.inner_text()
    page.pg.mouse.click(x, y)  # unpin
    assert card.get_attribute("data-unit") == ""


def test_brush_highlights_exactly_the_units_in_range(page, explored):
    _, panel, classes = explored
    from mapdrift import palettes

    page.pg.locator("#md-strip").focus()
    page.pg.keyboard.press("End")
    j = panel.n_periods - 1
    box = page.pg.locator("#md-hist").bounding_box()
    page.pg.mouse.move(box["x"] + box["width"] * 0.3, box["y"] + 60)
    page.pg.mouse.down()
    page.pg.mouse.move(box["x"] + box["width"] * 0.6, box["y"] + 60, steps=4)
    page.pg.mouse.up()
    lo = float(page.pg.get_attribute("#md-brush", "data-lo"))
    hi = float(page.pg.get_attribute("#md-brush", "data-hi"))
    v = panel.values[:, j]
    expected = {u for u, x in zip(panel.units, v) if lo <= x <= hi}
    assert 0 < len(expected) < panel.n_units
    listed = set(page.pg.eval_on_selector_all("#md-list li", "els => els.map(e => e.dataset.unit)"))
    assert listed == expected
    colours = [_rgb(c) for c in palettes.colours_for(classes.k)]
    got = page.pixels([page.raster_xy(g) for g in panel.geometry])
    for u, px in enumerate(got):
        c = int(classes.codes[u, j])
        if c < 0:
            continue
        want = colours[c] if panel.units[u] in expected else _faded(colours[c])
        assert px[:3] == want, (panel.units[u], px, want)
    page.pg.click("#md-clear")
    assert page.pg.get_attribute("#md-list", "data-count") == "0"


def test_natural_breaks_match_the_breaks_command(page, explored, grid_run):
    from typer.testing import CliRunner

    from mapdrift.cli import app

    _, panel, _ = explored
    k = 3
    res = CliRunner().invoke(
        app,
        [
            "breaks",
            "--config",
            str(grid_run / "run.toml"),
            "--scheme",
            "natural-breaks",
            "-k",
            str(k),
        ],
    )
    assert res.exit_code == 0, res.output
    lines = res.output.splitlines()
    head = next(i for i, line in enumerate(lines) if line.startswith("natural-breaks,"))
    cli_labels = lines[head + 1].strip().split(" | ")
    page.pg.select_option("#md-scheme", "natural-breaks")
    page.pg.select_option("#md-k", str(k))
    assert page.pg.get_attribute("#md-map", "data-scheme") == f"natural-breaks:{k}"
    page.pg.locator("#md-strip").focus()
    for label in (panel.period_labels[0], panel.period_labels[-1]):
        page.pg.keyboard.press("Home" if label == panel.period_labels[0] else "End")
        items = page.pg.eval_on_selector_all(
            "#md-legend li", "els => els.map(e => Array.from(e.children).map(c => c.textContent))"
        )
        assert [i[1] for i in items[:-1]] == cli_labels
        row = next(line for line in lines if line.strip().startswith(label + " "))
        cli_counts = [int(x) for x in row.split()[1:]]
        assert [int(i[2]) for i in items] == cli_counts  # k classes + no data, same period
    changed = page.pg.locator("#md-compare").inner_text()
    assert "change class" in changed and "One set of breaks" in changed
    page.pg.select_option("#md-scheme", "run")


def test_filter_by_class_and_export_png(page, explored):
    _, panel, classes = explored
    page.pg.locator("#md-strip").focus()
    page.pg.keyboard.press("End")
    page.pg.select_option("#md-filter", "class:0")
    want = {u for u, c in zip(panel.units, classes.codes[:, -1]) if c == 0}
    listed = set(page.pg.eval_on_selector_all("#md-list li", "els => els.map(e => e.dataset.unit)"))
    assert listed == want
    with page.pg.expect_download() as dl:
        page.pg.click("#md-export")
    path = dl.value.path()
    head = Path(path).read_bytes()[:8]
    assert head == b"\x89PNG\r\n\x1a\n"
    assert page.console == [] and page.requests == [page.url]


def _data(path: Path) -> dict:
    return json.loads(re.search(r'id="md-data">(.*?)</script>', path.read_text(), re.S).group(1))


def test_run_writes_the_page_and_a_run_folder_rebuilds_it(grid_run, tmp_path, browser):
    from typer.testing import CliRunner

    from mapdrift.cli import app
    from mapdrift.config import load_config
    from mapdrift.pipeline import run

    cfg = load_config(grid_run / "run.toml").with_values("brief", {"formats": ["gpkg", "explorer"]})
    res = run(cfg, out=tmp_path / "run")
    assert (res.out / "explorer.html").exists()
    again = tmp_path / "again.html"
    cli = CliRunner().invoke(app, ["explore", str(res.out), "--out", str(again)])
    assert cli.exit_code == 0, cli.output
    a, b = _data(res.out / "explorer.html"), _data(again)
    assert a["units"] == b["units"] and a["names"] == b["names"] and a["periods"] == b["periods"]
    for key in ("values", "classes", "clusters", "jumps", "label", "nbrPtr", "nbrIdx"):
        assert np.array_equal(
            _unpack(a["arrays"][key]), _unpack(b["arrays"][key]), equal_nan=True
        ), key
    assert a["run"]["edges"] == b["run"]["edges"] and a["compare"] == b["compare"]
    assert "base" in a["arrays"] and "base" not in b["arrays"]  # counts are not in a run folder
    p = Page(browser, again)
    assert p.console == [] and p.requests == [p.url]


def test_natural_breaks_for_several_k_match_fresh_fits_and_mapclassify():
    # The explorer fits natural breaks for k = 2..9 on the same values; fisher_jenks keeps the
    # last input's DP layers, which must not change any result. Reference: mapclassify's
    # FisherJenks (the exact Fisher 1958 optimum) on a small sample.
    import mapclassify

    from mapdrift import breaks

    x = np.random.default_rng(1).gamma(2.0, 3.0, 300).round(2)
    fresh = {}
    for k in range(2, 10):
        breaks._FISHER_LAYERS.clear()
        fresh[k] = breaks.fisher_jenks(x, k)
    breaks._FISHER_LAYERS.clear()
    for k in (9, 3, 5, 2, 8, 4, 6, 7):
        assert breaks.fisher_jenks(x, k) == fresh[k]
    for k in (3, 5):
        assert np.allclose(mapclassify.FisherJenks(x, k).bins, fresh[k])


def test_jumps_with_and_without_a_credible_column():
    from mapdrift.brief.explorer import _jump_arrays

    units, periods = ["a", "b", "c"], ["2019", "2020", "2021"]
    jumps = pd.DataFrame({"unit": ["a", "c"], "to_period": ["2020", "2021"], "size": [2, -3]})
    size, cred, known = _jump_arrays(jumps, units, periods)
    assert not known and cred.sum() == 0
    assert size.tolist() == [[0, 2, 0], [0, 0, 0], [0, 0, -3]]
    size, cred, known = _jump_arrays(jumps.assign(credible=[True, False]), units, periods)
    assert known and cred.tolist() == [[0, 2, 0], [0, 0, 0], [0, 0, 1]]
    # as jumps.csv writes it: "true" / "false", blank when the move was not tested
    size, cred, known = _jump_arrays(jumps.assign(credible=["true", ""]), units, periods)
    assert known and cred.tolist() == [[0, 2, 0], [0, 0, 0], [0, 0, 0]]
    _, _, known = _jump_arrays(jumps.assign(credible=["", ""]), units, periods)
    assert not known


def test_smoothed_run_carries_the_raw_rates(grid_run, tmp_path, browser):
    from typer.testing import CliRunner

    from mapdrift.cli import app
    from mapdrift.config import load_config, merge
    from mapdrift.panel import InputSpec, load_panel

    toml = (
        (grid_run / "run.toml").read_text().replace("[clusters]\n", '[clusters]\nsmooth = "eb"\n')
    )
    (grid_run / "smooth.toml").write_text(toml)
    out = tmp_path / "smooth.html"
    res = CliRunner().invoke(
        app, ["explore", str(grid_run / "smooth.toml"), "--out", str(out), "--raster-px", "500"]
    )
    assert res.exit_code == 0, res.output
    data = _data(out)
    panel = load_panel(
        merge(InputSpec, load_config(grid_run / "smooth.toml").section("inputs"), {})
    )
    raw = _unpack(data["arrays"]["raw"]).reshape(panel.n_periods, panel.n_units).T
    # the raw rates are the loaded (unsmoothed) values: events / homes x 1000
    assert np.allclose(raw, panel.values, equal_nan=True)
    smoothed = _unpack(data["arrays"]["values"]).reshape(panel.n_periods, panel.n_units).T
    assert not np.allclose(smoothed, panel.values, equal_nan=True)
    assert data["smoothing"] == "eb"
    p = Page(browser, out)
    x, y = p.client_xy(p.raster_xy(panel.geometry.iloc[7]))
    p.pg.mouse.click(x, y)
    assert "smoothed" in p.pg.locator("#md-traj-key").inner_text()
    assert "Raw rate" in p.pg.locator("#md-inspect").inner_text()
    # play steps through the periods by itself; zoom doubles the map's size on screen
    p.pg.locator("#md-strip").focus()
    p.pg.keyboard.press("Home")
    first = p.period()
    p.pg.click("#md-play")
    for _ in range(50):  # the CSP forbids eval, so no wait_for_function: poll from here
        if p.period() != first:
            break
        p.pg.wait_for_timeout(100)
    assert p.period() != first
    p.pg.click("#md-play")
    w1 = p.pg.locator("#md-map").bounding_box()["width"]
    p.pg.click("#md-zoom-in")
    assert p.pg.locator("#md-map").bounding_box()["width"] == pytest.approx(2 * w1, abs=2)
    assert p.console == [] and p.requests == [p.url]


def test_map_selection_reaches_list_histogram_and_history(page, explored):
    _, panel, _ = explored
    page.pg.click("#md-clear")
    a, b = (
        page.client_xy(page.raster_xy(panel.geometry.iloc[8])),
        page.client_xy(page.raster_xy(panel.geometry.iloc[27])),
    )
    page.pg.keyboard.down("Shift")
    page.pg.mouse.click(*a)
    page.pg.mouse.click(*b)
    page.pg.keyboard.up("Shift")
    listed = page.pg.eval_on_selector_all("#md-list li", "els => els.map(e => e.dataset.unit)")
    assert listed == [panel.units[8], panel.units[27]]
    page.pg.mouse.click(*a)  # pin one of them: the other is drawn in its history
    assert "1 selected unit in blue" in page.pg.locator("#md-traj-key").inner_text()
    page.pg.click("#md-clear")
    page.pg.mouse.click(*a)  # unpin


def test_per_period_breaks_say_so(grid_run, tmp_path, browser):
    from typer.testing import CliRunner

    from mapdrift.breaks import PER_PERIOD_WARNING
    from mapdrift.cli import app

    toml = (grid_run / "run.toml").read_text().replace("k = 4\n", 'k = 4\nbasis = "per-period"\n')
    (grid_run / "per_period.toml").write_text(toml)
    out = tmp_path / "pp.html"
    res = CliRunner().invoke(
        app, ["explore", str(grid_run / "per_period.toml"), "--out", str(out), "--raster-px", "400"]
    )
    assert res.exit_code == 0, res.output
    p = Page(browser, out)
    assert PER_PERIOD_WARNING in p.pg.locator("#md-notice").inner_text()
    assert "Breaks differ by period" in p.pg.locator("#md-compare").inner_text()
    p.pg.select_option("#md-scheme", "quantile")
    p.pg.locator("#md-strip").focus()
    p.pg.keyboard.press("Home")
    assert "Breaks differ by period" in p.pg.locator("#md-compare").inner_text()
    assert p.console == [] and p.requests == [p.url]


# ------------------------------------------------------------------------------------------
# the local-cluster view
# ------------------------------------------------------------------------------------------
@pytest.fixture(scope="module")
def cluster_run(grid_run, tmp_path_factory):
    """A full run of the grid (its clusters.csv is the reference) and its explorer page."""
    from mapdrift.config import load_config
    from mapdrift.pipeline import run

    cfg = load_config(grid_run / "run.toml").with_values("brief", {"formats": ["explorer"]})
    res = run(cfg, out=tmp_path_factory.mktemp("clusterrun") / "run")
    table = pd.read_csv(res.out / "clusters.csv", comment="#", dtype={"unit": str, "period": str})
    return res.out, table


def test_cluster_view_draws_the_palette_look_and_counts_the_csv(browser, cluster_run, explored):
    from mapdrift import palettes

    out, table = cluster_run
    _, panel, _ = explored
    p = Page(browser, out / "explorer.html")
    p.pg.click("#md-view-clusters")
    assert p.pg.get_attribute("#md-map", "data-view") == "clusters"
    pts = {u: p.raster_xy(g) for u, g in zip(panel.units, panel.geometry)}
    checked = {"high-high": 0, "not significant": 0}
    p.pg.locator("#md-strip").focus()
    p.pg.keyboard.press("Home")
    for j, label in enumerate(panel.period_labels):
        if j:
            p.pg.keyboard.press("ArrowRight")
        assert p.period() == label
        rows = table[table["period"] == str(label)]
        # legend counts per label equal the run's clusters.csv for this period
        items = p.pg.eval_on_selector_all(
            "#md-legend li",
            "els => els.map(e => [e.dataset.label, e.querySelector('.n').textContent])",
        )
        got = {lab: int(n) for lab, n in items}
        want = rows["label"].fillna("no data").value_counts().to_dict()
        assert {k: v for k, v in got.items() if v} == want, (label, got, want)
        # pixels at interiors: high-high filled with its palette colour, not significant blank
        units = rows.loc[rows["label"].isin(list(checked)), ["unit", "label"]].to_numpy()
        px = p.pixels([pts[u] for u, _ in units])
        for (u, lab), rgba in zip(units, px):
            assert rgba == _rgb(palettes.CLUSTER_LOOK[lab][0]) + [255], (label, u, lab, rgba)
            checked[lab] += 1
    assert checked["high-high"] > 0 and checked["not significant"] > 0, checked
    # a click on a legend entry keeps that label's units: the list is the CSV's high-high units
    hh_rows = table[table["label"] == "high-high"]
    busiest = hh_rows["period"].value_counts().idxmax()
    last = hh_rows[hh_rows["period"] == busiest]
    p.pg.keyboard.press("Home")
    for _ in range(list(map(str, panel.period_labels)).index(busiest)):
        p.pg.keyboard.press("ArrowRight")
    p.pg.click("#md-legend li[data-label='high-high']")
    listed = set(p.pg.eval_on_selector_all("#md-list li", "els => els.map(e => e.dataset.unit)"))
    assert len(last) > 0 and listed == set(last["unit"])
    p.pg.click("#md-legend li[data-label='high-high']")
    assert p.pg.get_attribute("#md-list", "data-count") == "0"
    # the words of palettes.CLUSTER_WORDS, in the legend and in the hover text
    words = palettes.CLUSTER_WORDS["high-high"].split("\n")
    legend = p.pg.locator("#md-legend").inner_text()
    assert words[0] in legend and words[1] in legend
    hh = table[table["label"] == "high-high"].iloc[-1]
    p.pg.keyboard.press("End")
    p.pg.keyboard.press("Home")
    j = list(map(str, panel.period_labels)).index(str(hh["period"]))
    for _ in range(j):
        p.pg.keyboard.press("ArrowRight")
    p.pg.mouse.move(*p.client_xy(pts[hh["unit"]]))
    assert words[0] in p.pg.locator("#md-tip").inner_text()
    with p.pg.expect_download() as dl:  # the saved view carries the cluster legend
        p.pg.click("#md-export")
    assert Path(dl.value.path()).read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    # back to classes: the run's class colours again
    p.pg.click("#md-view-classes")
    assert p.pg.get_attribute("#md-map", "data-view") == "classes"
    assert p.console == [] and p.requests == [p.url]


def test_cluster_look_travels_from_palettes(cluster_run):
    from mapdrift import palettes
    from mapdrift.clusters.labels import LABELS

    out, _ = cluster_run
    data = _data(out / "explorer.html")
    look = data["clusterLook"]
    assert [x["label"] for x in look] == list(LABELS)
    for x in look:
        fill, mark, colour = palettes.CLUSTER_LOOK[x["label"]]
        assert (x["fill"], x["mark"], x["markColour"]) == (fill, mark, colour)
        assert (
            "\n".join(t for t in (x["words"], x["term"]) if t) == palettes.CLUSTER_WORDS[x["label"]]
        )
    # no cluster colour is written into the page's script: they come from the data block
    from mapdrift.brief.explorer import _asset

    script = _asset("explorer.js").lower()
    for fill, _, colour in palettes.CLUSTER_LOOK.values():
        assert fill.lower() not in script and colour.lower() not in script
    # interior points lie inside their unit on the label raster
    lab = _unpack(data["arrays"]["label"]).reshape(data["raster"]["height"], -1)
    x, y = _unpack(data["arrays"]["ptX"]), _unpack(data["arrays"]["ptY"])
    assert np.array_equal(lab[y, x], np.arange(len(data["units"])))


def test_outliers_and_isolated_units_are_marks_on_blank_units(browser, explored, tmp_path):
    # planted labels (our own test data): one unit of each outlier kind and one without
    # neighbours in the last period; their interiors carry the mark colour of palettes, a
    # corner of the same unit stays blank, and the legend counts the planted labels
    from mapdrift import palettes
    from mapdrift.brief.explorer import ExplorerExtras, build_payload, write_explorer
    from mapdrift.clusters.labels import LABELS

    _, panel, classes = explored
    codes = np.full((panel.n_units, panel.n_periods), LABELS.index("not significant"), np.int8)
    planted = {7: "high-low", 10: "low-high", 22: "isolated", 30: "low-low"}
    for u, lab in planted.items():
        codes[u, -1] = LABELS.index(lab)
    codes[3, -1] = -1
    payload = build_payload(
        panel, classes, ExplorerExtras(cluster_codes=codes, cluster_labels=LABELS), raster_px=600
    )
    path = write_explorer(payload, tmp_path / "planted.html")
    p = Page(browser, path)
    p.pg.click("#md-view-clusters")
    p.pg.locator("#md-strip").focus()
    p.pg.keyboard.press("End")
    r = p.data["raster"]
    for u, lab in planted.items():
        fill, mark, colour = palettes.CLUSTER_LOOK[lab]
        g = panel.geometry.iloc[u]
        x0, _, _, y1 = g.bounds
        corner = (int((x0 - r["x0"]) / r["res"]) + 3, int((r["y1"] - y1) / r["res"]) + 3)
        centre = p.raster_xy(g)
        if mark == "ring":  # an open ring: its line lies a few pixels off the centre
            centre_px, corner_px = p.pixels([centre, corner])
            assert centre_px[:3] == _rgb(fill) and corner_px[:3] == _rgb(fill), lab
            near = p.pixels([(centre[0] + dx, centre[1]) for dx in range(-8, 9)])
            assert min(sum(q[:3]) for q in near) < 3 * 150, near  # the ring's dark line
            continue
        centre_px, corner_px = p.pixels([centre, corner])
        assert centre_px[:3] == _rgb(colour), (lab, centre_px)
        assert corner_px[:3] == _rgb(fill), (lab, corner_px)
    items = p.pg.eval_on_selector_all(
        "#md-legend li",
        "els => els.map(e => [e.dataset.label, +e.querySelector('.n').textContent])",
    )
    got = dict(items)
    assert got["no data"] == 1 and got["not significant"] == panel.n_units - len(planted) - 1
    assert all(got[lab] == 1 for lab in planted.values())
    assert p.console == [] and p.requests == [p.url]
