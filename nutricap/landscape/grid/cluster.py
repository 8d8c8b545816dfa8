"""Spreading the raster windows over a Dask cluster (``[rasters] dask_scheduler``).

When one machine is not enough, the grid path's two passes can run on the workers of a
running Dask cluster instead of this machine's threads. Each worker reads its windows from
the rasters itself, so the files must be reachable at the same absolute paths from every
worker (a shared file system) and from this machine (which checks the layers first).

- **First pass**: one task per window computes the window's run sums
  (:func:`~nutricap.landscape.grid.window_pass.window_sums`, kilobytes); this machine adds them in
  window order, so the totals are those of a local run to the last bit. The worker keeps the
  window's cells (key and forage left per class) in a :class:`CellCache` of its own, a
  temporary file on its local disk (``TMPDIR``: 4 + 4 × classes bytes per cell of the windows
  it computed), and tells this machine its address.
- **Density pass**: each window's task is sent to the worker that computed it (a preference,
  not a rule), which reads the window's cells from its file and returns the window's density
  (4 bytes per cell); a worker without the window's cells (it was not there, its file could
  not be written, it restarted) reads and computes the window again, with the same result.
  This machine writes ``capacity_density.tif``. A few windows per worker are in flight at
  once, so memory stays flat here as on the workers.

Needs the optional package ``distributed`` (``pip install 'nutricap[dask]'``).
"""

from __future__ import annotations

import sys
import threading
import uuid
import weakref
from collections import deque
from collections.abc import Callable, Iterator
from dataclasses import dataclass, field

import numpy as np
from rasterio.windows import Window
from tqdm import tqdm

from nutricap.errors import ProjectFileError
from nutricap.landscape.grid.cell_cache import CellCache, KeepCells
from nutricap.landscape.grid.layers import LayerStack
from nutricap.landscape.grid.outputs import chunks_density, window_density
from nutricap.landscape.grid.rasters import Grid, LayerSpec, Scratch, ShapeBurner, streaming_env
from nutricap.landscape.grid.sums import GridSetup, Totals, WindowSums
from nutricap.landscape.grid.window_pass import WindowReader, chunk_rows, window_sums

IN_FLIGHT_PER_WORKER = 2
"""Density windows computed ahead per worker (bounds memory while results stream back)."""


@dataclass(frozen=True)
class WindowJob:
    """Everything a worker needs to read and compute any window of a run (pickled once)."""

    token: str
    setup: GridSetup
    specs: list[LayerSpec]
    grid: Grid
    resample: str
    windows: list[Window]
    burners: dict[str, ShapeBurner]
    strata_lookup: np.ndarray | None


# --- on the workers -------------------------------------------------------------------------


@dataclass
class _WorkerRun:
    """What a worker process holds for one job: its open rasters and its cell file."""

    reader: WindowReader
    stack: LayerStack
    cache: CellCache | None  # None: no temporary file could be made on this worker
    kept: set[int] = field(default_factory=set)  # windows whose cells are in the file

    def keeper(self, number: int) -> tuple[KeepCells | None, list[bool]]:
        """What keeps window ``number``'s cells in the file, and a flag list that is
        ``[True]`` once writing failed (the window is then not counted as kept)."""
        if self.cache is None:
            return None, [True]
        write, failed = self.cache.writer(number), [False]

        def keep(first: int, keys: np.ndarray, kg_per_ha: np.ndarray) -> None:
            if failed[0]:
                return
            try:
                write(first, keys, kg_per_ha)
            except OSError:  # a full or failing disk: this window is computed again later
                failed[0] = True

        return keep, failed

    def close(self) -> None:
        self.stack.close()
        if self.cache is not None:
            self.cache.remove()


_WORKER_RUNS: dict[str, _WorkerRun] = {}
_RUNS_LOCK = threading.Lock()


def _worker_run(job: WindowJob) -> _WorkerRun:
    """The worker process's state for ``job`` (its rasters opened once per process)."""
    with _RUNS_LOCK:
        found = _WORKER_RUNS.get(job.token)
        if found is None:
            stack = LayerStack(job.specs, job.grid, job.resample)
            reader = WindowReader(stack, job.grid, job.burners, job.strata_lookup)
            found = _WORKER_RUNS[job.token] = _WorkerRun(reader, stack, _new_cache(job))
    return found


def _new_cache(job: WindowJob) -> CellCache | None:
    try:
        return CellCache(job.windows, job.setup.n_classes, chunk_rows)
    except OSError:
        return None


def _release(token: str) -> None:
    """Close the rasters and remove the cell file of the job ``token`` (run on every worker)."""
    with _RUNS_LOCK:
        found = _WORKER_RUNS.pop(token, None)
    if found is not None:
        found.close()


def sums_task(number: int, job: WindowJob) -> tuple[WindowSums, str]:
    """First pass on a worker: the run sums of window ``number`` (its cells kept in the
    worker's file), and the worker's address."""
    run = _worker_run(job)
    keep, failed = run.keeper(number)
    with streaming_env():
        sums = window_sums(job.setup, run.reader(job.windows[number]), keep)
    if not failed[0]:
        run.kept.add(number)
    from distributed import get_worker  # present wherever the task runs: on a Dask worker

    return sums, get_worker().address


def density_task(number: int, job: WindowJob, per_class: np.ndarray, dump: int) -> np.ndarray:
    """Density pass on a worker: window ``number``'s NCC animal-days per hectare (see
    :func:`~nutricap.landscape.grid.outputs.window_density`), from the cells this worker kept
    of it, or else with the window read and computed again."""
    run = _worker_run(job)
    window = job.windows[number]
    height, width = int(window.height), int(window.width)
    density = np.empty(height * width, dtype=np.float32)
    if number in run.kept:
        chunks_density(run.cache.window_cells(number), per_class, dump, density, Scratch())
        return density.reshape(height, width)
    keys = np.empty(height * width, dtype=np.int32)
    kg_per_ha = np.empty((job.setup.n_classes, height * width), dtype=np.float32)

    def keep(first: int, chunk_keys: np.ndarray, chunk_kg: np.ndarray) -> None:
        keys[first : first + chunk_keys.size] = chunk_keys
        kg_per_ha[:, first : first + chunk_keys.size] = chunk_kg

    with streaming_env():
        window_sums(job.setup, run.reader(window), keep)
    window_density(keys, kg_per_ha, per_class, dump, density, Scratch())
    return density.reshape(height, width)


# --- on this machine ------------------------------------------------------------------------


class ClusterRun:
    """A run's connection to a Dask scheduler and its job, sent to the workers once.

    Parameters
    ----------
    address : str
        The scheduler, e.g. ``"tcp://10.0.0.5:8786"``.
    timeout_s : float
        How long to try to reach it [s].
    job : WindowJob
    project_path : Path
        The project file (named in messages).
    """

    def __init__(self, address: str, timeout_s: float, job: WindowJob, project_path) -> None:
        client_class = _client_class(project_path)
        try:
            self.client = client_class(address, timeout=f"{timeout_s}s", set_as_default=False)
        except (OSError, TimeoutError) as error:
            raise ProjectFileError(
                "cannot reach the Dask scheduler",
                source=project_path,
                location="key 'rasters.dask_scheduler'",
                expected=f"a running Dask scheduler at {address} (within {timeout_s:g} s)",
                found=str(error) or type(error).__name__,
            ) from None
        self.address = address
        self.job = job
        self._job = self.client.scatter(job, broadcast=True)
        self._computed_on: dict[int, str] = {}  # window → address of the worker that has it
        self._closer = weakref.finalize(self, self.client.close)

    @property
    def workers(self) -> int:
        return max(1, len(self.client.scheduler_info().get("workers", {})))

    def first_pass(self, totals: Totals, show_progress: bool) -> None:
        """Every window's run sums computed on the workers, added here in window order."""
        futures = self.client.map(
            sums_task, range(len(self.job.windows)), job=self._job, pure=False
        )
        with _bar(len(futures), "raster windows (cluster)", show_progress) as bar:
            for number, future in enumerate(futures):
                sums, self._computed_on[number] = future.result()
                totals.add(sums)
                future.release()
                bar.update()

    def density_windows(
        self, per_class: np.ndarray, dump: int
    ) -> Iterator[tuple[Window, np.ndarray]]:
        """Each window with its density [animal-days/ha], computed on the workers, in order."""
        coefficients = self.client.scatter(per_class, broadcast=True)
        numbers = iter(range(len(self.job.windows)))

        def submit(number: int):
            worker = self._computed_on.get(number)
            future = self.client.submit(
                density_task,
                number,
                self._job,
                coefficients,
                dump,
                pure=False,
                workers=None if worker is None else [worker],
                allow_other_workers=True,
            )
            return number, future

        ahead = IN_FLIGHT_PER_WORKER * self.workers
        queue = deque(submit(number) for _, number in zip(range(ahead), numbers))
        while queue:
            number, future = queue.popleft()
            following = next(numbers, None)
            if following is not None:
                queue.append(submit(following))
            density = future.result()
            future.release()
            yield self.job.windows[number], density

    def close(self) -> None:
        """Close the workers' rasters and cell files of this run, and the connection."""
        if self._closer.alive:
            self.client.run(_release, self.job.token)
            self._closer()


def new_job(setup, specs, grid, resample, windows, burners, strata_lookup) -> WindowJob:
    """A :class:`WindowJob` with a fresh token (the workers' readers are keyed by it)."""
    token = uuid.uuid4().hex
    return WindowJob(token, setup, specs, grid, resample, windows, burners, strata_lookup)


def _client_class(project_path) -> Callable:
    try:
        from distributed import Client
    except ImportError:
        raise ProjectFileError(
            "dask_scheduler needs the optional package 'distributed'",
            source=project_path,
            location="key 'rasters.dask_scheduler'",
            expected="pip install 'nutricap[dask]'",
            found="distributed is not installed",
        ) from None
    return Client


def _bar(total: int, description: str, show: bool) -> tqdm:
    return tqdm(total=total, desc=description, unit="window", file=sys.stderr, disable=not show)
