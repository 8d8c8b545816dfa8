"""The grid path's first pass: the per-window computation and the streaming of windows.

For each window of the grid: the biomass of every forage class in every cell [kg/ha] (strata
classes from the plot means of the cell's stratum, direct classes from their rasters,
calibrated classes from the index raster and the group models, see
:mod:`nutricap.landscape.grid.calibration`) → the availability rules
(:func:`nutricap.landscape.availability.apply_rules`) → sums by (unit, stratum) key. Sums are
taken over runs of equal key along each row (``numpy.add.reduceat``) and the run sums are
added into the keys (``numpy.bincount``). The rows the report's maps need (forage left by
class, removed by each rule) are summed over runs that also end where a block of the maps'
coarse grid begins (:mod:`nutricap.landscape.grid.overview`), added by (block, key) pair in
each window, and the pairs into the keys and the blocks. A cell belongs to a unit or stratum
polygon when its centre lies in it (GDAL's rasteriser); cells outside the strata map carry no
forage.

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

from nutricap.landscape import availability as rules_mod
from nutricap.landscape.grid.calibration import (
    CalibratedGroup,
    predict_group,
    reprediction_terms,
)
from nutricap.landscape.grid.cell_cache import CellCache, KeepCells
from nutricap.landscape.grid.overview import BlockSums, CoarseGrid, PairSums, pair_sums
from nutricap.landscape.grid.rasters import Grid, LayerStack, Scratch, ShapeBurner
from nutricap.landscape.strata_raster import polygons_from_codes

STRATA_RASTER_KEY = "rasters.strata.raster"
WORKERS = 2  # threads that read and compute windows (the machines in view have 2 cores)
CHUNK_CELLS = 131_072
"""Cells computed at a time within a window: the arrays of a chunk stay in the CPU cache."""


def chunk_rows(height: int, width: int) -> list[tuple[int, int]]:
    """Row ranges of the chunks of a window (whole rows, about CHUNK_CELLS cells each)."""
    step = max(1, CHUNK_CELLS // max(width, 1))
    return [(row, min(row + step, height)) for row in range(0, height, step)]


@dataclass(frozen=True)
class GridSetup:
    """Constants of the per-window computation (everything but the window's data)."""

    classes: list[str]
    n_strata: int
    polygon_stratum: np.ndarray  # (polygons + 1,) stratum code of each burnt polygon code
    unit_base: np.ndarray  # (units + 1,) first key of each burnt unit code (0: outside, last)
    polygon_biomass: np.ndarray  # (polygons + 1, classes) plot-mean kg/ha, 0 for raster classes
    strata_columns: list[int]  # classes whose biomass comes from the plots of the stratum
    polygon_access: np.ndarray | None  # (polygons + 1,) accessible fraction
    direct: dict[int, str]  # class column → layer key
    calibrated: list[CalibratedGroup]
    index_key: str | None
    rules: rules_mod.CellRules
    snow_key: str | None
    slope_key: str | None
    water_key: str | None
    dump_key: int
    treatment_pair: np.ndarray | None = None
    """(units + 1, treatment polygons + 1) pair number of a burnt unit code × treatment
    polygon code, -1 where the two do not meet (or none); None without a scenario."""
    coarse: CoarseGrid | None = None
    """Blocks of the report's maps; None: one block per window (no maps)."""

    @property
    def n_classes(self) -> int:
        return len(self.classes)

    @property
    def n_treated_keys(self) -> int:
        """Keys of treated cells: (unit × treatment polygon pair) × stratum."""
        if self.treatment_pair is None:
            return 0
        return (int(self.treatment_pair.max(initial=-1)) + 1) * self.n_strata


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


@dataclass
class ChunkRuns:
    """A chunk's sums over runs of equal key along its rows: of the layout's rows after the
    map rows by such runs; of the map rows by runs that also end where a block of the report's
    maps begins (so that each lies in one block and one key)."""

    run_keys: np.ndarray
    run_cells: np.ndarray
    run_sums: np.ndarray  # (rows of the layout after the map rows, runs) float32
    block_keys: np.ndarray
    block_starts: np.ndarray  # first cell of each block run (flat index into the chunk)
    block_cells: np.ndarray
    block_sums: np.ndarray  # (map rows, block runs) float32
    calibration_cells: np.ndarray  # (groups, 3): beyond range, beyond margin, negative
    treated: TreatedRuns | None = None  # treated cells' sums (scenarios only)


@dataclass
class WindowSums:
    """What one window adds to the totals: its run sums by key (the layout's rows after the
    map rows) and its sums by (map block, key) pair (the map rows)."""

    run_keys: np.ndarray
    run_cells: np.ndarray
    run_sums: np.ndarray  # (rows of the layout after the map rows, runs) float32
    pairs: PairSums
    calibration_cells: np.ndarray  # (groups, 3): beyond range, beyond margin, negative
    treated: TreatedRuns | None = None  # treated cells' sums (scenarios only)

    @staticmethod
    def of_chunks(setup: GridSetup, window: Window, parts: list[tuple[int, ChunkRuns]]):
        """The window's sums from its chunks' runs (``(first cell, runs)`` of each chunk)."""
        chunks = [part for _, part in parts]
        starts = np.concatenate([first + part.block_starts for first, part in parts])
        coarse = setup.coarse
        if coarse is None:
            blocks, span = np.zeros_like(starts), (0, 0, 1, 1)
        else:
            blocks, span = coarse.local_blocks(window, starts), coarse.span(window)
        pairs = pair_sums(
            np.concatenate([part.block_keys for part in chunks]),
            blocks,
            np.concatenate([part.block_cells for part in chunks]),
            np.concatenate([part.block_sums for part in chunks], axis=1),
            setup.dump_key + 1,
            span,
        )
        treated = [part.treated for part in chunks if part.treated is not None]
        return WindowSums(
            np.concatenate([part.run_keys for part in chunks]),
            np.concatenate([part.run_cells for part in chunks]),
            np.concatenate([part.run_sums for part in chunks], axis=1),
            pairs,
            sum(part.calibration_cells for part in chunks),
            TreatedRuns.concatenate(treated) if treated else None,
        )


@dataclass
class TreatedRuns:
    """Sums over runs of treated cells of equal treated key (in the order of the cells).

    ``run_sums`` rows: forage left of each class [kg/ha summed over cells], then each class's
    share kept by the rules (Σ over cells of snow share × area share), for the forage of
    another stratum's plot means when a treatment changes the stratum.
    """

    run_keys: np.ndarray
    run_cells: np.ndarray
    run_sums: np.ndarray  # (2 × classes, runs) float32

    @staticmethod
    def concatenate(parts: list[TreatedRuns]) -> TreatedRuns:
        return TreatedRuns(
            np.concatenate([part.run_keys for part in parts]),
            np.concatenate([part.run_cells for part in parts]),
            np.concatenate([part.run_sums for part in parts], axis=1),
        )


@dataclass
class Totals:
    """Sums over every window, by key (unit × (strata + "no stratum") + dump), and by block
    of the report's maps."""

    cells: np.ndarray
    sums: np.ndarray
    calibration_cells: np.ndarray
    treated_cells: np.ndarray | None = None  # (treated keys,), scenarios only
    treated_sums: np.ndarray | None = None  # (treated keys, 2 × classes)
    blocks: BlockSums | None = None

    def add(self, part: WindowSums) -> None:
        pairs = part.pairs
        split = pairs.sums.shape[0]  # the map rows come from the pairs
        _add_runs(self.cells, self.sums[:, split:], part.run_keys, part.run_cells, part.run_sums)
        _add_runs(None, self.sums[:, :split], pairs.keys, pairs.cells, pairs.sums)
        if self.blocks is not None:
            self.blocks.add(pairs)
        self.calibration_cells += part.calibration_cells
        if part.treated is not None:
            runs = part.treated
            _add_runs(
                self.treated_cells, self.treated_sums, runs.run_keys, runs.run_cells, runs.run_sums
            )


def _add_runs(cells, sums, run_keys, run_cells, run_sums) -> None:
    """Add run (or pair) sums into the totals by key (float64); ``cells`` may be None."""
    if cells is not None:
        cells += np.bincount(run_keys, weights=run_cells, minlength=cells.size)
    for row, values in enumerate(run_sums):
        sums[:, row] += np.bincount(run_keys, weights=values, minlength=len(sums))


@dataclass(frozen=True)
class Layout:
    """Rows of the per-cell array summed by key: what the rules left and removed, the standing
    forage before the rules, the cells without data and, only when there are calibrated
    groups, the terms from which a refitted model's forage follows.

    ``available`` (classes) | ``removed`` per rule after ``nodata`` | ``access`` |
    ``affected`` per rule | ``gross`` (classes) | ``nodata`` | ``calibration``
    (``n_calibration`` rows). The first :attr:`map_rows` (forage left and removed) are also
    summed by block of the report's maps.
    """

    n_classes: int
    n_rules: int
    n_calibration: int = 0

    @property
    def rules_end(self) -> int:
        return self.n_classes + 1 + 2 * self.n_rules

    @property
    def rows(self) -> int:
        return self.nodata + 1 + self.n_calibration

    @property
    def map_rows(self) -> int:
        return self.n_classes + self.n_rules

    @property
    def available(self) -> slice:
        return slice(0, self.n_classes)

    @property
    def access(self) -> int:
        return self.map_rows

    def removed(self, number: int) -> int:
        return self.n_classes + number

    def affected(self, number: int) -> int:
        return self.map_rows + 1 + number

    @property
    def gross(self) -> slice:
        return slice(self.rules_end, self.rules_end + self.n_classes)

    @property
    def nodata(self) -> int:
        return self.rules_end + self.n_classes

    @property
    def calibration(self) -> slice:
        return slice(self.nodata + 1, self.rows)


def layout_of(setup: GridSetup) -> Layout:
    terms = sum(group.terms for group in setup.calibrated)
    return Layout(setup.n_classes, len(setup.rules.active()) - 1, terms)


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
    outcome = rules_mod.apply_rules(
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
        keep *= rules_mod.snow_available_fraction(depth[None, :], heights, rules.snow_method)
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
