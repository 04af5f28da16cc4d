"""The optional Dask executor gives the same cluster tables as the default, byte for byte."""

from __future__ import annotations

import numpy as np
import pytest
from shapely.geometry import box

from mapdrift.clusters import ClusterOptions, analyse_clusters, write_clusters
from mapdrift.compute import ComputeSpec, SerialExecutor, executor_for
from mapdrift.errors import ConfigError
from mapdrift.panel import Panel


def _panel(n=12, T=6, seed=3):
    # Synthetic scaffolding (not reference data): a grid with a raised block and a few
    # cells missing in different periods.
    geoms = [
        box(c * 100, r * 100, c * 100 + 100, r * 100 + 100) for r in range(n) for c in range(n)
    ]
    rng = np.random.default_rng(seed)
    v = rng.normal(size=(n * n, T))
    rows, cols = np.divmod(np.arange(n * n), n)
    v[(rows < 4) & (cols < 4), T // 2 :] += 4
    v[rng.integers(0, n * n, 5), rng.integers(0, T, 5)] = np.nan
    return Panel.from_arrays(v, geoms, crs="EPSG:3857", periods=list(range(2015, 2015 + T)))


def test_compute_section_is_checked(tmp_path):
    from mapdrift.config import load_config

    cfg = tmp_path / "run.toml"
    cfg.write_text('[compute]\nscheduler = "dask"\nworkers = 3\n')
    assert load_config(cfg).section("compute") == {"scheduler": "dask", "workers": 3}
    assert isinstance(executor_for(None), SerialExecutor)
    assert isinstance(executor_for(ComputeSpec()), SerialExecutor)
    with pytest.raises(ConfigError, match="serial, dask"):
        ComputeSpec(scheduler="spark")


def test_dask_local_cluster_gives_identical_tables(tmp_path):
    pytest.importorskip("distributed", reason="dask[distributed] not installed (extra 'dask')")
    from mapdrift.compute import DaskExecutor

    p = _panel()
    with DaskExecutor(workers=2) as ex:  # a dask.distributed.LocalCluster of 2 processes
        assert len(ex.client.scheduler_info()["workers"]) == 2
        for stat in ("local-moran", "gi-star"):
            opt = ClusterOptions(permutations=199, seed=7, statistic=stat)
            write_clusters(analyse_clusters(p, None, opt), tmp_path / f"serial-{stat}")
            write_clusters(analyse_clusters(p, None, opt, executor=ex), tmp_path / f"dask-{stat}")
    for stat in ("local-moran", "gi-star"):
        names = sorted(f.name for f in (tmp_path / f"serial-{stat}").iterdir())
        assert "clusters.csv" in names and "trends.csv" in names
        for name in names:
            a = (tmp_path / f"serial-{stat}" / name).read_bytes()
            b = (tmp_path / f"dask-{stat}" / name).read_bytes()
            assert a == b, name
