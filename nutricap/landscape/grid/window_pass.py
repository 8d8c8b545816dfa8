"""The grid path's first pass: the per-window computation and the streaming of windows.

For each window of the grid: the biomass of every forage class in every cell [kg/ha] (strata
classes from the plot means of the cell's stratum, direct classes from their rasters,
calibrated classes from the index raster and the group models, see
:mod:`nutricap.landscape.grid.calibration`) → the availability rules
(:func:`nutricap.landscape.rules_on_cells.apply_rules`) → sums by (unit, stratum) key. Sums are
taken over runs of equal key along each row (``numpy.add.reduceat``) and the run sums are
added into the keys (``numpy.bincount``). The rows the report's maps need (forage left by
class, removed by each rule) are summed over runs that also end where a block of the maps'
coarse grid begins (:mod:`nutricap.landscape.grid.overview`), added by (block, key) pair in
each window, and the pairs into the keys and the blocks. A cell belongs to a unit or stratum
polygon when its centre lies in it (GDAL's rasteriser); cells outside the strata map carry no
forage.

The setup of the pass, the layout of the rows it sums and the sums themselves (by run, by
window, the totals) are in :mod:`nutricap.landscape.grid.sums`.

Worker threads read and compute the windows (:class:`WindowReader`, :func:`stream_windows`),
each in its own reusable memory (:class:`~nutricap.landscape.grid.rasters.Scratch`), and write
each chunk's cells to the :class:`~nutricap.landscape.grid.cell_cache.CellCache`; the main thread
adds the run sums to the :class:`Totals` in window order.

Precision: per-cell arithmetic and the sums along one row of a window are float32 (relative
error below 1e-5, far below the sampling error of the inputs); everything summed across runs
and windows is float64.
"""

from __future__ import annotations

import sys
import threading
from collections import deque
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass

import numpy as np
from rasterio.windows import Window
from tqdm import tqdm

from nutricap.landscape.grid.calibration import predict_group, reprediction_terms
from nutricap.landscape.grid.cell_cache import CellCache, KeepCells
from nutricap.landscape.grid.layers import LayerStack
from nutricap.landscape.grid.rasters import Grid, Scratch, ShapeBurner
from nutricap.landscape.grid.sums import (
    ChunkRuns,
    GridSetup,
    Totals,
    TreatedRuns,
    WindowSums,
    layout_of,
)
from nutricap.landscape.rules_on_cells import apply_rules, snow_available_fraction
from nutricap.landscape.strata_raster import polygons_from_codes

STRATA_RASTER_KEY = "rasters.strata.raster"
WORKERS = 2  # threads that read and compute windows (the machines in view have 2 cores)
CHUNK_CELLS = 131_072
"""Cells computed at a time within a window: the arrays of a chunk stay in the CPU cache."""


def chunk_rows(height: int, width: int) -> list[tuple[int, int]]:
    """Row ranges of the chunks of a window (whole rows, about CHUNK_CELLS cells each)."""
    step = max(1, CHUNK_CELLS // max(width, 1))
    return [(row, min(row + step, height)) for row in range(0, height, step)]


@dataclass
class WindowData:
    """What the reader threads hand over for one window."""

    window: Window
    layers: dict[str, tuple[np.ndarray, np.ndarray]]
    units: np.ndarray  # unit code, 0 = none
    polygons: np.ndarray  # strata polygon code, 0 = none
    excluded: np.ndarray | None
    scratch: Scratch | None = None  # the reading thread's reusable memory
    treatments: np.ndarray | None = None  # treatment polygon code, 0 = none (scenarios only)

    def rows(self, first: int, last: int) -> WindowData:
        """Rows ``first:last`` of the window (views, no copy)."""
        part = slice(first, last)
        return WindowData(
            self.window,
            {key: (values[part], ok[part]) for key, (values, ok) in self.layers.items()},
            self.units[part],
            self.polygons[part],
            None if self.excluded is None else self.excluded[part],
            self.scratch,
            None if self.treatments is None else self.treatments[part],
        )


def window_sums(setup: GridSetup, data: WindowData, keep: KeepCells | None = None) -> WindowSums:
    """Per-cell biomass → availability rules → run sums of one window.

    The window is computed in chunks of whole rows (:func:`chunk_rows`); ``keep`` (when given)
    receives each chunk's cells before the next chunk reuses their memory.
    """
    height, width = data.units.shape
    parts = []
    for first, last in chunk_rows(height, width):
        part, keys, kg_per_ha = chunk_sums(setup, data.rows(first, last))
        if keep is not None:
            keep(first * width, keys, kg_per_ha)
        parts.append((first * width, part))
    return WindowSums.of_chunks(setup, data.window, parts)


def chunk_sums(setup: GridSetup, data: WindowData) -> tuple[ChunkRuns, np.ndarray, np.ndarray]:
    """:func:`window_sums` of a few rows (their runs); also each cell's key (the dump key
    where the cell has no data) and forage left (classes, cells) [kg/ha]."""
    units = data.units.ravel().astype(np.intp)  # burnt as int32, GDAL's fast path
    polygons = data.polygons.ravel().astype(np.intp)
    key = setup.unit_base[units] + setup.polygon_stratum[polygons]
    mapped = (units > 0) & (polygons > 0)
    valid = _valid_cells(setup, data, mapped)
    layout = layout_of(setup)
    shape = (layout.rows, units.size)
    if data.scratch is None:
        stacked = np.empty(shape, dtype=np.float32)
    else:
        stacked = data.scratch.take("chunk rows", shape, np.float32)
    lacking = stacked[layout.nodata]
    np.greater(mapped, valid, out=lacking)  # mapped without data in some layer
    gross = stacked[layout.gross]
    calibration_cells, predictions = _gross_biomass(
        setup, data, polygons, valid, lacking > 0, gross
    )
    outcome = apply_rules(
        gross,
        setup.rules,
        valid,
        excluded=None if data.excluded is None else data.excluded.ravel(),
        accessible_fraction=None
        if setup.polygon_access is None
        else setup.polygon_access[polygons],
        snow_depth_cm=_layer(data, setup.snow_key),
        slope=_layer(data, setup.slope_key),
        distance_to_water_m=_layer(data, setup.water_key),
        out=stacked[: layout.rules_end],
    )
    if setup.calibrated:
        available = outcome.available_kg_per_ha
        reprediction_terms(setup.calibrated, predictions, available, stacked[layout.calibration])
    breaks = None if setup.coarse is None else setup.coarse.column_starts(data.window)
    runs = _run_sums(key, stacked, data.units.shape, layout.map_rows, breaks)
    cell_keys = np.where(valid, key, setup.dump_key).astype(np.int32)
    sums = ChunkRuns(*runs, calibration_cells)
    if setup.treatment_pair is not None:
        sums.treated = _treated_runs(setup, data, units, polygons, outcome)
    return sums, cell_keys, outcome.available_kg_per_ha


def _treated_runs(setup: GridSetup, data: WindowData, units, polygons, outcome) -> TreatedRuns:
    """Sums of the treated cells (in a unit, a stratum and a treatment polygon) by treated
    key = pair × strata + stratum: forage left per class, and per class the share the rules
    keep (snow share × area share; 0 without data)."""
    pair = setup.treatment_pair[units, data.treatments.ravel().astype(np.intp)]
    stratum = setup.polygon_stratum[polygons]
    cells = np.flatnonzero((pair >= 0) & (stratum < setup.n_strata))
    keys = pair[cells] * setup.n_strata + stratum[cells]
    n = setup.n_classes
    values = np.empty((2 * n, cells.size), dtype=np.float32)
    np.take(outcome.available_kg_per_ha, cells, axis=1, out=values[:n])
    keep = values[n:]
    keep[:] = outcome.access[cells][None, :]
    rules = setup.rules
    if rules.height_cm is not None and setup.snow_key is not None:
        depth = _layer(data, setup.snow_key)[cells]
        heights = np.asarray(rules.height_cm, dtype=np.float32)[:, None]
        keep *= snow_available_fraction(depth[None, :], heights, rules.snow_method)
    if cells.size == 0:
        return TreatedRuns(keys, np.zeros(0), values)
    starts = np.flatnonzero(np.diff(keys, prepend=-1) != 0)
    run_cells = np.diff(np.append(starts, keys.size))
    return TreatedRuns(keys[starts], run_cells, np.add.reduceat(values, starts, axis=1))


def _valid_cells(setup: GridSetup, data: WindowData, mapped: np.ndarray) -> np.ndarray:
    """Mapped cells with data in every layer used; layers' values set to 0 where they have none."""
    valid = mapped.copy()
    for name in _used_layers(setup):
        values, ok = data.layers[name]
        if not ok.all():
            np.putmask(values, ~ok, np.float32(0.0))
            valid &= ok.ravel()
    return valid


def _used_layers(setup: GridSetup) -> list[str]:
    keys = [*setup.direct.values(), setup.index_key, setup.snow_key]
    keys += [setup.slope_key, setup.water_key]
    return [key for key in keys if key is not None]


def _layer(data: WindowData, key: str | None) -> np.ndarray | None:
    return None if key is None else data.layers[key][0].ravel()


def _gross_biomass(setup: GridSetup, data: WindowData, polygons, valid, lacking, gross):
    """Standing biomass of every class in every cell into ``gross`` [kg/ha].

    Layer values are finite everywhere (see :func:`_valid_cells`). Mapped cells without data
    in some layer (``lacking``) get 0; cells outside the units or strata keep their values,
    since their keys are left out of every total and of the density map. Returns the
    calibration counts (beyond range, beyond margin, predicted below zero) per calibrated
    group, and each group's prediction [kg/ha] and index as used (clamped or not).
    """
    for column in setup.strata_columns:
        np.take(setup.polygon_biomass[:, column], polygons, out=gross[column])
    for column, key in setup.direct.items():
        np.copyto(gross[column], data.layers[key][0].ravel())
    counts = np.zeros((len(setup.calibrated), 3), dtype=np.int64)
    predictions = []
    if setup.calibrated:
        index = data.layers[setup.index_key][0].ravel()
        for number, group in enumerate(setup.calibrated):
            predicted, used, counts[number] = predict_group(group, index, valid)
            gross[group.class_index] = group.shares[:, None] * predicted[None, :]
            predictions.append((predicted, used))
    if lacking.any():
        gross[:, lacking] = np.float32(0.0)
    return counts, predictions


def _run_sums(key, stacked, shape: tuple[int, int], split: int, breaks: slice | None):
    """Sums of ``stacked`` rows over runs of equal key (runs break at row ends of the window):
    of the rows from ``split`` on by such runs, of the rows before it by runs that also break
    at the columns ``breaks`` (where a block of the maps begins; None: nowhere else).

    Returns (keys, cells, sums) of the runs, then (keys, first cells, cells, sums) of the
    block runs (:class:`ChunkRuns`' order).
    """
    key2d = key.reshape(shape)
    start = np.empty(shape, dtype=bool)
    start[:, 0] = True
    np.not_equal(key2d[:, 1:], key2d[:, :-1], out=start[:, 1:])
    starts = np.flatnonzero(start)
    runs = (key[starts], np.diff(np.append(starts, key.size)))
    runs += (np.add.reduceat(stacked[split:], starts, axis=1),)
    if breaks is not None:
        start[:, breaks] = True
        starts = np.flatnonzero(start)
    cells = np.diff(np.append(starts, key.size))
    return *runs, key[starts], starts, cells, np.add.reduceat(stacked[:split], starts, axis=1)


# --- streaming ------------------------------------------------------------------------------


class WindowReader:
    """Reads a window's layers and burns its polygons (runs in background threads)."""

    def __init__(
        self,
        stack: LayerStack,
        grid: Grid,
        burners: dict[str, ShapeBurner],
        strata_lookup: np.ndarray | None = None,
    ) -> None:
        self.stack = stack
        self.grid = grid
        self.burners = burners
        self.strata_lookup = strata_lookup  # code → polygon code, with a strata raster
        self._local = threading.local()

    def __call__(self, window: Window) -> WindowData:
        """The window's data, in memory of the calling thread's :class:`Scratch` (valid until
        the thread reads its next window)."""
        scratch = getattr(self._local, "scratch", None)
        if scratch is None:
            scratch = self._local.scratch = Scratch()
        shape = (int(window.height), int(window.width))
        burnt = {
            name: burner.burn(window, self.grid, scratch.take(f"burnt {name}", shape, np.int32))
            for name, burner in self.burners.items()
        }
        excluded = burnt.get("exclusions")
        layers = self.stack.read(window, scratch)
        if self.strata_lookup is None:
            polygons = burnt["strata"]
        else:
            codes, with_data = layers[STRATA_RASTER_KEY]
            polygons = scratch.take("strata codes", shape, np.int32)
            polygons_from_codes(codes, with_data, self.strata_lookup, polygons)
        return WindowData(
            window=window,
            layers=layers,
            units=burnt["units"],
            polygons=polygons,
            excluded=None if excluded is None else excluded > 0,
            scratch=scratch,
            treatments=burnt.get("treatments"),
        )


def stream_windows(
    setup: GridSetup,
    reader: WindowReader,
    windows: list[Window],
    totals: Totals,
    cache: CellCache | None,
    show_progress: bool,
) -> None:
    """First pass: windows read, computed and cached by worker threads, added in order.

    Reading (GDAL), the numpy arithmetic and writing the cell cache all release the GIL, so
    the workers use the cores; each worker reuses its own memory from window to window.
    """
    bar = tqdm(
        total=len(windows),
        desc="raster windows",
        unit="window",
        file=sys.stderr,
        disable=not show_progress,
    )

    def work(number: int) -> WindowSums:
        keep = None if cache is None else cache.writer(number)
        return window_sums(setup, reader(windows[number]), keep)

    with ThreadPoolExecutor(max_workers=WORKERS) as pool:
        queue = deque(pool.submit(work, number) for number in range(min(WORKERS, len(windows))))
        upcoming = iter(range(WORKERS, len(windows)))
        while queue:
            part = queue.popleft().result()
            following = next(upcoming, None)
            if following is not None:
                queue.append(pool.submit(work, following))
            totals.add(part)
            bar.update()
    bar.close()
