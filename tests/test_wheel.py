"""The package as a user gets it: a built wheel, installed outside the checkout, runs the demo.

Slow (builds a wheel, then a whole demo run, about 30 s): marked ``slow``; CI runs it, a quick
local loop can skip it with ``-m "not slow"``.
"""

from __future__ import annotations

import os
import subprocess
import sys
import sysconfig
import zipfile
from pathlib import Path

import pytest

from conftest import ROOT

pytestmark = pytest.mark.slow


@pytest.fixture(scope="module")
def wheel(tmp_path_factory) -> Path:
    dist = tmp_path_factory.mktemp("dist")
    subprocess.run(
        [sys.executable, "-m", "pip", "wheel", "--no-deps", "-q", "-w", str(dist), str(ROOT)],
        check=True,
        capture_output=True,
        timeout=600,
    )
    (whl,) = dist.glob("mapdrift-*.whl")
    return whl


def test_wheel_holds_the_package_and_licence_not_the_checkout(wheel):
    names = zipfile.ZipFile(wheel).namelist()
    assert "mapdrift/cli/demo.py" in names and "mapdrift/py.typed" in names
    assert any(n.endswith("licenses/LICENSE") for n in names)
    assert not any(n.startswith(("demo_data/", "tests/")) for n in names)
    meta = zipfile.ZipFile(wheel).read(next(n for n in names if n.endswith("METADATA"))).decode()
    assert "License-Expression: MIT" in meta and "Requires-Dist: rich" in meta
    assert "Requires-Dist: mapclassify" not in meta.split("Provides-Extra")[0]


def test_demo_runs_from_the_installed_wheel(wheel, tmp_path):
    venv = tmp_path / "venv"
    subprocess.run([sys.executable, "-m", "venv", str(venv)], check=True, timeout=120)
    py = venv / "bin" / "python"
    subprocess.run(
        [str(py), "-m", "pip", "install", "-q", "--no-deps", str(wheel)],
        check=True,
        capture_output=True,
        timeout=300,
    )
    # The dependencies come from this test run's environment (a plain path entry: its .pth
    # files, among them an editable install of the checkout, are not processed).
    site = Path(
        subprocess.check_output(
            [str(py), "-c", "import sysconfig; print(sysconfig.get_path('purelib'))"], text=True
        ).strip()
    )
    (site / "zz_test_deps.pth").write_text(sysconfig.get_path("purelib") + "\n")
    work = tmp_path / "elsewhere"  # not a checkout: the demo data must be generated
    work.mkdir()
    env = {k: v for k, v in os.environ.items() if k not in ("PYTHONPATH", "VIRTUAL_ENV")}
    where = subprocess.check_output(
        [str(py), "-c", "import mapdrift; print(mapdrift.__file__)"], cwd=work, env=env, text=True
    )
    assert where.startswith(str(site)), where
    proc = subprocess.run(
        [str(venv / "bin" / "mapdrift"), "demo"],
        cwd=work,
        env=env,
        capture_output=True,
        text=True,
        timeout=600,
    )
    assert proc.returncode == 0, proc.stdout[-2000:] + proc.stderr[-2000:]
    assert "generated in demo_data" in proc.stdout
    # the generator is deterministic: the files equal the checkout's committed demo data
    for name in ("filings.csv", "filings_2025.csv", "demo.toml"):
        assert (work / "demo_data" / name).read_bytes() == (ROOT / "demo_data" / name).read_bytes()
    out = work / "outputs" / "demo"
    for name in ("report.html", "animation.gif", "units.csv", "manifest.json", "brief.pptx"):
        assert (out / name).is_file(), name
