"""The raster windows on a Dask cluster ([rasters] dask_scheduler) give the local run's results.

The small invented landscape of tests/test_grid_supply.py is estimated twice, with this
machine's threads and on an in-process Dask cluster; the tables must be equal to the last bit
(the run sums are added in the same window order) and the density rasters identical. One run
on a cluster of worker *processes* checks that everything sent to the workers pickles.
"""

from __future__ import annotations

import json
import sys

import numpy as np
import pandas as pd
import pytest
import rasterio
from test_grid_supply import RASTERS, SNOW, _project, project_text, write_landscape

from nutricap.workflow import estimate, run_estimate

distributed = pytest.importorskip("distributed")

BOOTSTRAP = "[uncertainty]\nbootstrap_replicates = 40\n\n[pooling]"


def _text(address: str | None = None, timeout_s: float = 10.0) -> str:
    rasters = RASTERS
    if address is not None:
        rasters = rasters.replace(
            "window_size = 64",
            f'window_size = 64\ndask_scheduler = "{address}"\ndask_connect_timeout_s = {timeout_s}',
        )
    return project_text(rasters, SNOW).replace("[pooling]", BOOTSTRAP)


@pytest.fixture(scope="module")
def folder(tmp_path_factory):
    folder = tmp_path_factory.mktemp("cluster") / "inputs"
    write_landscape(folder)
    return folder


@pytest.fixture(scope="module")
def threads_cluster():
    with distributed.LocalCluster(
        n_workers=2, threads_per_worker=1, processes=False, dashboard_address=None
    ) as cluster:
        yield cluster.scheduler_address


def test_cluster_run_equals_the_local_run(folder, tmp_path, threads_cluster):
    local = run_estimate(_project(folder, _text(), "local.toml"), tmp_path / "local")
    remote = run_estimate(
        _project(folder, _text(threads_cluster), "cluster.toml"), tmp_path / "cluster"
    )
    np.testing.assert_array_equal(remote.problem.available_kg, local.problem.available_kg)
    pd.testing.assert_frame_equal(remote.by_unit, local.by_unit)
    for name in ("capacity_by_unit.csv", "availability_rules.csv", "calibration.csv"):
        assert (tmp_path / "cluster" / name).read_bytes() == (
            tmp_path / "local" / name
        ).read_bytes()
    with (
        rasterio.open(tmp_path / "local" / "capacity_density.tif") as a,
        rasterio.open(tmp_path / "cluster" / "capacity_density.tif") as b,
    ):
        np.testing.assert_array_equal(b.read(1), a.read(1))
        assert b.profile == a.profile
    assert remote.grid.cache is None  # no per-cell file on this machine
    # The report's coarse maps: the same sums by block, so the same maps to the last bit.
    assert [m.key for m in remote.grid.overview_maps] == [m.key for m in local.grid.overview_maps]
    for ours, theirs in zip(local.grid.overview_maps, remote.grid.overview_maps):
        np.testing.assert_array_equal(theirs.values, ours.values)
        assert theirs.transform == ours.transform
    manifest = json.loads((tmp_path / "cluster" / "run.json").read_text())
    computed_on = manifest["derived"]["raster_path"]["computed_on"]
    assert computed_on == f"Dask cluster at {threads_cluster}"


@pytest.mark.parametrize("cell_file", [True, False], ids=["cell file", "no cell file"])
def test_density_pass_reads_the_cells_the_workers_kept(
    folder, tmp_path, threads_cluster, monkeypatch, cell_file
):
    # With its cell file a worker computes each window once (the density pass reads the
    # cells back); without one (no temporary file could be made) the density pass computes
    # the windows again. The density raster is the local run's either way, and the workers'
    # files are gone after the run.
    from nutricap.landscape.grid import cluster

    local = tmp_path / "local"
    run_estimate(_project(folder, _text(), "local.toml"), local)
    computed, caches = [], []
    window_sums, new_cache = cluster.window_sums, cluster._new_cache

    def counted(setup, data, keep=None):
        computed.append((data.window.row_off, data.window.col_off))
        return window_sums(setup, data, keep)

    def recorded(job):
        cache = new_cache(job) if cell_file else None
        caches.append(cache)
        return cache

    monkeypatch.setattr(cluster, "window_sums", counted)
    monkeypatch.setattr(cluster, "_new_cache", recorded)
    remote = tmp_path / "cluster"
    run_estimate(_project(folder, _text(threads_cluster), "cluster.toml"), remote)
    windows = len(set(computed))
    assert windows > 1 and len(computed) == (1 if cell_file else 2) * windows
    with (
        rasterio.open(local / "capacity_density.tif") as a,
        rasterio.open(remote / "capacity_density.tif") as b,
    ):
        np.testing.assert_array_equal(b.read(1), a.read(1))
    assert caches and all(cache is None or not cache.path.exists() for cache in caches)
    assert cell_file == any(cache is not None for cache in caches)


def test_worker_processes_get_everything_pickled(folder):
    local = estimate(_project(folder, _text(), "local.toml"))
    with distributed.LocalCluster(
        n_workers=1, threads_per_worker=2, processes=True, dashboard_address=None
    ) as cluster:
        remote = estimate(_project(folder, _text(cluster.scheduler_address), "processes.toml"))
        remote.grid.cluster.close()
    np.testing.assert_array_equal(remote.problem.available_kg, local.problem.available_kg)


def test_an_unreachable_scheduler_is_one_message(folder, estimate_error):
    error = estimate_error(folder, _text("tcp://127.0.0.1:9", timeout_s=1))
    assert "cli.toml: key 'rasters.dask_scheduler': cannot reach the Dask scheduler" in error
    assert "tcp://127.0.0.1:9" in error


def test_without_distributed_installed_the_message_says_what_to_install(
    folder, estimate_error, monkeypatch
):
    monkeypatch.setitem(sys.modules, "distributed", None)  # import distributed → ImportError
    error = estimate_error(folder, _text("tcp://127.0.0.1:9"))
    assert "needs the optional package 'distributed'" in error
    assert "pip install 'nutricap[dask]'" in error
