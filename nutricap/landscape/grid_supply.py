"""Forage supply on a raster grid, streamed window by window (capabilities 1b, 1c, 3, 5, 11).

For each window of the grid: the biomass of every forage class in every cell [kg/ha] (strata
classes from the plot means of the cell's stratum, direct classes from their rasters,
calibrated classes from the index raster and the group models) → the availability rules
(:func:`nutricap.landscape.availability.apply_rules`) → sums by (unit, stratum) key. Sums are
taken over runs of equal key along each row (``numpy.add.reduceat``) and the run sums are
added into the keys (``numpy.bincount``). A cell belongs to a unit or stratum polygon when its
centre lies in it (GDAL's rasteriser); cells outside the strata map carry no forage.

The result is a :class:`~nutricap.problem.CapacityProblem` (one row per unit, or per unit ×
stratum patch) like the vector path's, so the same solver and tables follow. A second streamed
pass writes ``capacity_density.tif``: animal-days per hectare from each cell's share of the
forage eaten in its row of the solution. The per-cell forage left by the rules is kept between
the two passes in a temporary file (not in memory), so the inputs are read only once.

Precision: per-cell arithmetic and the sums along one row of a window are float32 (relative
error below 1e-5, far below the sampling error of the inputs); everything summed across runs
and windows is float64.
"""

from __future__ import annotations

import os
import shutil
import sys
import tempfile
import threading
import weakref
from collections import deque
from collections.abc import Callable, Iterator
from concurrent.futures import ThreadPoolExecutor, wait
from contextlib import contextmanager
from dataclasses import dataclass, field
from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd
import rasterio
from rasterio.windows import Window
from tqdm import tqdm

from nutricap.errors import ProjectFileError, SpatialError
from nutricap.landscape import availability as rules_mod
from nutricap.landscape.calibration import (
    INDEX_BINS,
    BiomassModel,
    ModelFits,
    binned_loglinear_forage,
    fit_groups,
    linear_forage,
    margin_bounds,
    pairs_bootstrap,
)
from nutricap.landscape.plots import StratumSupply, stratum_supply
from nutricap.landscape.rasters import (
    Grid,
    LayerSpec,
    LayerStack,
    Scratch,
    ShapeBurner,
    grid_windows,
    read_grid,
    streaming_env,
)
from nutricap.landscape.strata_raster import StrataCodes, polygons_from_codes, read_strata_codes
from nutricap.landscape.vectors import (
    M2_PER_HA,
    StratumAreas,
    _extra_unit_columns,
    check_no_overlaps,
    choose_area_crs,
    read_layer,
)
from nutricap.problem import CapacityProblem, build_forage_items
from nutricap.report.tables import write_csv

Progress = Callable[[str], None]
DENSITY_NODATA = -9999.0
COMPRESSION_LEVEL = {"zstd": {"zstd_level": 1}, "deflate": {"zlevel": 1}}
"""Fast levels for capacity_density.tif: float noise compresses little better at high levels."""
STRATA_RASTER_KEY = "rasters.strata.raster"
GIL_TURN_S = 0.0002
"""Longest wait of a thread for the GIL while the density pass runs beside the report [s]."""
WORKERS = 2  # threads that read and compute windows (the machines in view have 2 cores)
CHUNK_CELLS = 131_072
"""Cells computed at a time within a window: the arrays of a chunk stay in the CPU cache."""


def chunk_rows(height: int, width: int) -> list[tuple[int, int]]:
    """Row ranges of the chunks of a window (whole rows, about CHUNK_CELLS cells each)."""
    step = max(1, CHUNK_CELLS // max(width, 1))
    return [(row, min(row + step, height)) for row in range(0, height, step)]


@dataclass(frozen=True)
class CalibratedGroup:
    """A forage group predicted from the index raster."""

    model: BiomassModel
    class_index: np.ndarray  # columns of the group's classes
    shares: np.ndarray  # share of each class in the group [0-1]
    low: float  # index range used as fitted (plots' range ± margin)
    high: float
    clamp: bool  # clamp the index beyond [low, high] (else extrapolate)

    @property
    def class_terms(self) -> int:
        """Rows of re-prediction sums per class (see :func:`_reprediction_terms`)."""
        return 2 if self.model.kind == "linear" else 2 * INDEX_BINS

    @property
    def terms(self) -> int:
        return self.class_index.size * self.class_terms


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

    @property
    def n_classes(self) -> int:
        return len(self.classes)


@dataclass
class WindowData:
    """What the reader threads hand over for one window."""

    window: Window
    layers: dict[str, tuple[np.ndarray, np.ndarray]]
    units: np.ndarray  # unit code, 0 = none
    polygons: np.ndarray  # strata polygon code, 0 = none
    excluded: np.ndarray | None
    scratch: Scratch | None = None  # the reading thread's reusable memory

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
        )


@dataclass
class WindowSums:
    """What one window (or a chunk of it) adds to the totals."""

    run_keys: np.ndarray
    run_cells: np.ndarray
    run_sums: np.ndarray  # (rows of the layout, runs) float32
    calibration_cells: np.ndarray  # (groups, 3): beyond range, beyond margin, negative

    @staticmethod
    def concatenate(parts: list[WindowSums]) -> WindowSums:
        return WindowSums(
            np.concatenate([part.run_keys for part in parts]),
            np.concatenate([part.run_cells for part in parts]),
            np.concatenate([part.run_sums for part in parts], axis=1),
            sum(part.calibration_cells for part in parts),
        )


KeepCells = Callable[[int, np.ndarray, np.ndarray], None]
"""Called with (first cell of the chunk in the window, keys, forage left (classes, cells))."""


@dataclass
class Totals:
    """Sums over every window, by key (unit × (strata + "no stratum") + dump)."""

    cells: np.ndarray
    sums: np.ndarray
    calibration_cells: np.ndarray

    def add(self, part: WindowSums) -> None:
        self.cells += np.bincount(part.run_keys, weights=part.run_cells, minlength=self.cells.size)
        for row, values in enumerate(part.run_sums):
            self.sums[:, row] += np.bincount(
                part.run_keys, weights=values, minlength=self.cells.size
            )
        self.calibration_cells += part.calibration_cells


class CellCache:
    """Per-cell results of the first pass, kept in a temporary file for the density pass.

    One record per window, in the order of the windows: the key of every cell (int32), then
    the forage left of each class in every cell (float32, class by class), cells in the
    window's row-major order. Records sit at offsets known in advance, so the worker threads
    write their chunks themselves, in any order. The file is removed by :meth:`remove`, or
    when the object is garbage-collected, or at exit.
    """

    def __init__(self, windows: list[Window], n_classes: int) -> None:
        self.windows_list = windows
        self.n_classes = n_classes
        cells = np.array([int(w.height) * int(w.width) for w in windows], dtype=np.int64)
        self.cells = cells
        self.offsets = np.concatenate([[0], np.cumsum(4 * cells * (1 + n_classes))[:-1]])
        self.folder = Path(tempfile.mkdtemp(prefix="nutricap-cells-"))
        self.path = self.folder / "cells.bin"
        self._finalizer = weakref.finalize(self, shutil.rmtree, self.folder, True)
        self._fd = os.open(self.path, os.O_WRONLY | os.O_CREAT | os.O_TRUNC, 0o600)

    def writer(self, number: int) -> KeepCells:
        """What keeps the cells of window ``number`` (see :data:`KeepCells`)."""
        record, cells = int(self.offsets[number]), int(self.cells[number])

        def keep(first: int, keys: np.ndarray, kg_per_ha: np.ndarray) -> None:
            _write_at(self._fd, keys.astype(np.int32, copy=False), record + 4 * first)
            for column in range(self.n_classes):
                at = record + 4 * cells * (1 + column) + 4 * first
                _write_at(self._fd, kg_per_ha[column].astype(np.float32, copy=False), at)

        return keep

    def finish(self) -> None:
        os.close(self._fd)

    def windows(
        self, windows: list[Window], n_classes: int
    ) -> Iterator[tuple[Window, np.ndarray, np.ndarray]]:
        """Yield each window with its cells' keys (cells,) and forage left (classes, cells).

        The arrays share one buffer: they are valid until the next window is yielded.
        """
        buffer = bytearray(int(4 * self.cells.max(initial=0) * (1 + n_classes)))
        with open(self.path, "rb", buffering=0) as stream:
            for window in windows:
                n = int(window.height) * int(window.width)
                record = memoryview(buffer)[: 4 * n * (1 + n_classes)]
                _read_into(stream, record, self.path)
                keys = np.frombuffer(record, dtype=np.int32, count=n)
                kg = np.frombuffer(record, dtype=np.float32, offset=4 * n)
                yield window, keys, kg.reshape(n_classes, n)

    def remove(self) -> None:
        self._finalizer()


def _read_into(stream, record: memoryview, path: Path) -> None:
    """Fill ``record`` from an unbuffered binary stream (a read may return fewer bytes)."""
    filled = 0
    while filled < len(record):
        count = stream.readinto(record[filled:])
        if not count:
            raise OSError(f"temporary cell file {path} is shorter than expected")
        filled += count


def _write_at(fd: int, array: np.ndarray, offset: int) -> None:
    """Write a contiguous array's bytes at ``offset`` of file ``fd`` (all of them)."""
    data = memoryview(np.ascontiguousarray(array)).cast("B")
    while data:
        written = os.pwrite(fd, data, offset)
        data, offset = data[written:], offset + written


@dataclass(frozen=True)
class CalibratedSums:
    """A calibrated group's forage left, by problem row and item, as sums from which a refitted
    model's forage follows without another pass over the rasters (the model bootstrap).

    Attributes
    ----------
    model : BiomassModel
        The point estimate, with its calibration plots.
    rows, items : int arrays (entries,)
        Row and item of the capacity problem of each entry (one key × one class of the group).
    terms : array (entries, 2) or (entries, INDEX_BINS)
        Linear model: S0 [ha] and S1 [ha · index units] of
        :func:`~nutricap.landscape.calibration.linear_forage`. Log-linear model: the forage
        left in the cells of each index bin [kg].
    mean_index : array (entries, INDEX_BINS) or None
        Log-linear model: the forage-weighted mean index of each bin.
    """

    model: BiomassModel
    rows: np.ndarray
    items: np.ndarray
    terms: np.ndarray
    mean_index: np.ndarray | None = None

    def forage_kg(self, fits: ModelFits) -> np.ndarray:
        """Forage left of each entry under each set of parameters [kg], (replicates, entries).

        Exact for a linear model whose line stays ≥ 0 on the cells and without the
        minimum-density rule; the log-linear bins fall short by less than the bound of
        :func:`~nutricap.landscape.calibration.binned_loglinear_forage`.
        """
        if self.mean_index is None:
            return linear_forage(fits, self.terms[:, 0], self.terms[:, 1])
        return binned_loglinear_forage(self.model, fits, self.terms, self.mean_index)

    def resampled_forage_kg(self, replicates: int, rng: np.random.Generator) -> np.ndarray:
        """:meth:`forage_kg` of ``replicates`` pairs-bootstrap refits of the model (the draws
        from ``rng`` are those of :func:`~nutricap.landscape.calibration.pairs_bootstrap`)."""
        return self.forage_kg(pairs_bootstrap(self.model, replicates, rng))


@dataclass
class GridResult:
    """The grid path's result: the capacity problem and what the rules and models did.

    Attributes
    ----------
    problem : CapacityProblem
    areas : StratumAreas
        Units with their polygon ``area_ha``; ``by_unit_stratum`` with ``area_ha`` and
        ``accessible_ha`` from the cells.
    supply : StratumSupply
        Plot statistics of the strata-based forage classes (may have no class).
    rules_report : DataFrame
        Area and forage each availability rule removed, per unit (see
        :func:`nutricap.landscape.availability.rules_report`).
    calibration_report : DataFrame or None
        One row per calibrated forage group.
    notes : list of str
    grid : Grid
    resampled : dict
        Layer key → resampling method (None when the layer was on the grid).
    calibrated_sums : list of CalibratedSums
        One per calibrated group, for the model bootstrap (empty without calibrated groups).
    """

    problem: CapacityProblem
    areas: StratumAreas
    supply: StratumSupply
    rules_report: pd.DataFrame
    calibration_report: pd.DataFrame | None
    notes: list[str]
    grid: Grid
    resampled: dict[str, str | None]
    windows: list[Window] = field(repr=False)
    cache: CellCache = field(repr=False)
    row_of_key: np.ndarray = field(repr=False)
    stratum_of_key: np.ndarray = field(repr=False)
    classes: list[str] = field(default_factory=list)
    compression: str = "zstd"
    show_progress: bool = False
    calibrated_sums: list[CalibratedSums] = field(default_factory=list, repr=False)

    def describe(self) -> dict:
        """Grid, resampling and rules in plain values, for the run manifest."""
        return {
            "grid": self.grid.describe(),
            "resampled_layers": {k: v for k, v in self.resampled.items() if v is not None},
            "rules_applied": sorted(set(self.rules_report["rule"]), key=rules_mod.RULES.index),
            "cell_membership": "a cell belongs to a polygon when its centre lies in it",
        }


# --- project → layers, classes and rules ------------------------------------------------------


def layer_specs(project) -> list[LayerSpec]:
    """Every raster of the project in grid order: the first defines the grid."""
    paths = project.input_paths()
    keys = [key for key in paths if key.startswith(("rasters.", "availability."))]
    rasters = [
        key
        for key in keys
        if not key.endswith((".plots", "_table", ".codes")) and ".exclusions." not in key
    ]
    return [LayerSpec.for_key(key, paths[key]) for key in rasters]


def _general_classes(forage_classes: pd.DataFrame) -> pd.DataFrame:
    return forage_classes[forage_classes["stratum"] == ""].set_index("forage_class")


def _check_class_names(project, names: list[str], key: str, known: list[str]) -> None:
    unknown = [name for name in names if name not in known]
    if unknown:
        raise ProjectFileError(
            f"forage class {unknown[0]!r} is not in the forage-class table",
            source=project.path,
            location=f"key {key!r}",
            expected="one of " + ", ".join(map(repr, known)),
            found=repr(unknown[0]),
        )


def cell_rules(project, forage_classes: pd.DataFrame, classes: list[str], partial: bool):
    """The availability rules of the project, with the class heights the snow rule needs."""
    section = project.config.availability
    if section is None:
        return rules_mod.CellRules(partial_access=partial)
    heights = None
    if section.snow_depth is not None:
        heights = _general_classes(forage_classes).loc[classes, "height_cm"].to_numpy(float)
        missing = [name for name, h in zip(classes, heights) if np.isnan(h)]
        if missing:
            raise ProjectFileError(
                f"forage class {missing[0]!r} has no height_cm, which the snow rule needs",
                source=project.input_path("forage_classes"),
                location="column 'height_cm'",
                expected="a height for every forage class when [availability] snow_depth is set",
                found=f"{len(missing)} class(es) without: " + ", ".join(map(repr, missing)),
            )
    folder = project.folder
    return rules_mod.CellRules(
        height_cm=heights,
        snow_method=section.snow_burial,
        min_forage_kg_per_ha=section.min_forage_kg_per_ha,
        slope_table=_table(section.slope, section.slope_table, "slope", folder),
        water_table=_table(
            section.distance_to_water, section.water_table, "distance_to_water", folder
        ),
        slope_in_degrees=section.slope_units == "degrees",
        partial_access=partial,
        exclusions=bool(section.exclusions),
    )


def _table(layer, table, factor: str, folder: Path):
    if layer is None:
        return None
    path = (folder / table).resolve() if table is not None else None
    return rules_mod.load_reduction_table(path, factor)


@dataclass(frozen=True)
class StrataMap:
    """The strata of the grid path: polygons burnt per window, or a raster of codes.

    ``names`` holds the stratum of each polygon code 1, 2, … (strata polygons in their order,
    or rows of the codes table).
    """

    names: list[str]
    accessible_fraction: np.ndarray | None  # per polygon code 1, 2, …; None: all 1
    path: Path  # the strata file named in messages
    polygons: gpd.GeoDataFrame | None = None
    codes: StrataCodes | None = None

    @property
    def strata(self) -> list[str]:
        """The strata of the map, sorted."""
        return sorted(set(self.names))


def strata_map(project, strata: gpd.GeoDataFrame | None) -> StrataMap:
    """The project's strata map: the polygons read, or the codes table of its strata raster."""
    if strata is not None:
        fraction = strata["accessible_fraction"].to_numpy(dtype=np.float32)
        return StrataMap(
            list(strata["stratum"]),
            fraction if (fraction < 1).any() else None,
            project.input_path("strata"),
            polygons=strata,
        )
    paths = project.input_paths()
    codes = read_strata_codes(paths["rasters.strata.codes"])
    return StrataMap(codes.strata, None, paths[STRATA_RASTER_KEY], codes=codes)


def strata_supply(plots, strata: StrataMap, strata_classes, all_classes, project) -> StratumSupply:
    """Plot statistics of the strata-based classes (every plot counts, with its zeros)."""
    map_strata = strata.strata
    if not strata_classes:
        n_plots = plots.groupby("stratum")["plot_id"].nunique().reindex(map_strata, fill_value=0)
        empty = np.zeros((len(map_strata), 0))
        return StratumSupply(map_strata, [], empty, empty.copy(), n_plots.to_numpy(int))
    full = stratum_supply(
        plots,
        all_classes,
        map_strata,
        plots_path=project.input_path("plots"),
        strata_path=strata.path if strata.codes is None else strata.codes.path,
        strata_without_forage=project.config.supply.strata_without_forage,
    )
    columns = [all_classes.index(name) for name in strata_classes]
    return StratumSupply(
        full.strata,
        list(strata_classes),
        full.mean_kg_per_ha[:, columns],
        full.se_kg_per_ha[:, columns],
        full.n_plots,
    )


# --- the per-window computation -------------------------------------------------------------


@dataclass(frozen=True)
class Layout:
    """Rows of the per-cell array summed by key: what the rules left and removed, the standing
    forage before the rules, the cells without data and, only when there are calibrated
    groups, the terms from which a refitted model's forage follows.

    ``available`` (classes) | ``access`` | (removed, affected) per rule after ``nodata`` |
    ``gross`` (classes) | ``nodata`` | ``calibration`` (``n_calibration`` rows).
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
    def available(self) -> slice:
        return slice(0, self.n_classes)

    @property
    def access(self) -> int:
        return self.n_classes

    def removed(self, number: int) -> int:
        return self.n_classes + 1 + 2 * number

    def affected(self, number: int) -> int:
        return self.removed(number) + 1

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
        parts.append(part)
    return WindowSums.concatenate(parts)


def chunk_sums(setup: GridSetup, data: WindowData) -> tuple[WindowSums, np.ndarray, np.ndarray]:
    """:func:`window_sums` of a few rows; also each cell's key (the dump key where the cell
    has no data) and forage left (classes, cells) [kg/ha]."""
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
        _reprediction_terms(setup.calibrated, predictions, available, stacked[layout.calibration])
    run_keys, run_cells, run_sums = _run_sums(key, stacked, data.units.shape)
    cell_keys = np.where(valid, key, setup.dump_key).astype(np.int32)
    sums = WindowSums(run_keys, run_cells, run_sums, calibration_cells)
    return sums, cell_keys, outcome.available_kg_per_ha


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
            predicted, used, counts[number] = _predict_group(group, index, valid)
            gross[group.class_index] = group.shares[:, None] * predicted[None, :]
            predictions.append((predicted, used))
    if lacking.any():
        gross[:, lacking] = np.float32(0.0)
    return counts, predictions


def _predict_group(group: CalibratedGroup, index: np.ndarray, valid: np.ndarray):
    """Group biomass [kg/ha] from the index, the index as used, and cells beyond range /
    beyond margin / negative."""
    model = group.model
    beyond_range = valid & ((index < model.index_min) | (index > model.index_max))
    beyond_margin = valid & ((index < group.low) | (index > group.high))
    used = np.clip(index, np.float32(group.low), np.float32(group.high)) if group.clamp else index
    fitted = np.float32(model.intercept) + np.float32(model.slope) * used
    negative = valid & (fitted < 0) if model.kind == "linear" else np.zeros(1, bool)
    counts = [np.count_nonzero(beyond_range), np.count_nonzero(beyond_margin)]
    counts.append(np.count_nonzero(negative))
    return model.predict_kg_per_ha(used), used, counts


def _reprediction_terms(groups: list[CalibratedGroup], predictions, available, out) -> None:
    """Per-cell terms of the calibrated classes into the rows of ``out``, group by group,
    class by class (``group.class_terms`` rows each); x is the index as used.

    Linear model: ``available / predicted`` and ``available · x / predicted`` where the
    prediction is above 0, else 0; summed, the S0 and S1 of
    :func:`~nutricap.landscape.calibration.linear_forage`. Log-linear model: ``available``
    in the row of the cell's index bin, then ``available · x`` likewise; summed, each bin's
    forage and (÷ that forage) its weighted mean index for
    :func:`~nutricap.landscape.calibration.binned_loglinear_forage`.
    """
    row = 0
    for group, (predicted, used) in zip(groups, predictions):
        linear = group.model.kind == "linear"
        positive = predicted > 0 if linear else None
        positions = None if linear else _bin_positions(group, used)
        for column in group.class_index:
            block = out[row : row + group.class_terms]
            row += group.class_terms
            if linear:
                _linear_terms(available[column], predicted, used, positive, block)
            else:
                _binned_terms(available[column], used, positions, block)


def _linear_terms(available, predicted, used, positive, out) -> None:
    """available / predicted (where positive) and × used, into the two rows of ``out``."""
    out[0].fill(np.float32(0.0))
    np.divide(available, predicted, out=out[0], where=positive)
    np.multiply(out[0], used, out=out[1])


def _binned_terms(available, used, positions, out) -> None:
    """available, then available × used, into the row of each cell's bin (others 0); ``out``
    is C-contiguous (whole rows), ``positions`` from :func:`_bin_positions`."""
    out.fill(np.float32(0.0))
    flat = out.reshape(-1)
    flat[positions] = available
    flat[positions + INDEX_BINS * used.size] = available * used


def _bin_positions(group: CalibratedGroup, used: np.ndarray) -> np.ndarray:
    """Flat position of each cell in an (INDEX_BINS, cells) block: bin × cells + cell, with
    INDEX_BINS equal bins of [low, high] (cells beyond fall in the end bins)."""
    width = np.float32((group.high - group.low) / INDEX_BINS)
    bins = np.clip(np.floor((used - np.float32(group.low)) / width), 0, INDEX_BINS - 1)
    return bins.astype(np.intp) * used.size + np.arange(used.size)


def _run_sums(key: np.ndarray, stacked: np.ndarray, shape: tuple[int, int]):
    """Sums of ``stacked`` rows over runs of equal key; runs break at row ends of the window."""
    key2d = key.reshape(shape)
    start = np.empty(shape, dtype=bool)
    start[:, 0] = True
    np.not_equal(key2d[:, 1:], key2d[:, :-1], out=start[:, 1:])
    starts = np.flatnonzero(start)
    run_cells = np.diff(np.append(starts, key.size))
    return key[starts], run_cells, np.add.reduceat(stacked, starts, axis=1)


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


# --- setup from the project -----------------------------------------------------------------


def _class_sources(project, forage_classes):
    config = project.config
    classes = sorted(_general_classes(forage_classes).index)
    rasters = config.rasters
    direct = dict(rasters.biomass) if rasters is not None else {}
    calibrated = rasters.calibrated if rasters is not None else None
    _check_class_names(project, list(direct), "rasters.biomass", classes)
    if calibrated is not None:
        _check_class_names(project, calibrated.classes(), "rasters.calibrated.groups", classes)
    on_rasters = set(direct) | set(calibrated.classes() if calibrated else [])
    return classes, direct, calibrated, [c for c in classes if c not in on_rasters]


def _calibrated_groups(project, calibrated, classes):
    if calibrated is None:
        return [], None
    models, shares, report = fit_groups(
        project.input_paths()["rasters.calibrated.plots"],
        project.input_paths()["rasters.calibrated.index"],
        calibrated.groups,
        calibrated.model,
        calibrated.plots_crs,
        set(classes),
    )
    groups = []
    for model, members in zip(models, calibrated.groups.values()):
        low, high = margin_bounds(model, calibrated.extrapolation_margin)
        groups.append(
            CalibratedGroup(
                model=model,
                class_index=np.array([classes.index(m) for m in members]),
                shares=np.array([shares[m] for m in members], dtype=np.float32),
                low=low,
                high=high,
                clamp=calibrated.beyond_margin == "clamp",
            )
        )
    return groups, report


def _strata_polygons(strata: StrataMap, supply: StratumSupply, classes: list[str]):
    """Per polygon code (0 = none): stratum code, plot-mean biomass, accessible fraction."""
    names = supply.strata
    stratum = np.concatenate(([len(names)], pd.Index(names).get_indexer(strata.names)))
    biomass = np.zeros((len(names) + 1, len(classes)), dtype=np.float32)  # last row: none
    for column, name in enumerate(supply.classes):
        biomass[:-1, classes.index(name)] = np.nan_to_num(supply.mean_kg_per_ha[:, column])
    polygon_biomass = biomass[stratum]
    fraction = strata.accessible_fraction
    access = None if fraction is None else np.concatenate(([1.0], fraction)).astype(np.float32)
    return stratum.astype(np.int64), polygon_biomass, access


def _unit_areas(units, strata: StrataMap, project) -> tuple[gpd.GeoDataFrame, object, str]:
    """Units with their polygon area [ha] in the area CRS (as in the vector path)."""
    area_crs, reason = choose_area_crs(units)
    in_area_crs = units.to_crs(area_crs)
    check_no_overlaps(in_area_crs, "unit_id", project.input_path("units"), "units")
    if strata.polygons is not None:
        check_no_overlaps(
            strata.polygons.to_crs(area_crs), "stratum", strata.path, "strata polygons"
        )
    table = in_area_crs[["unit_id", *_extra_unit_columns(in_area_crs), "geometry"]].copy()
    table["area_ha"] = table.geometry.area / M2_PER_HA
    return table, area_crs, reason


def _burners(units, strata: StrataMap, project, grid: Grid) -> dict[str, ShapeBurner]:
    burners = {
        "units": ShapeBurner(
            units.to_crs(grid.crs).geometry.to_numpy(), np.arange(1, len(units) + 1), "int32"
        ),
    }
    if strata.polygons is not None:
        geometries = strata.polygons.to_crs(grid.crs).geometry.to_numpy()
        burners["strata"] = ShapeBurner(geometries, np.arange(1, len(geometries) + 1), "int32")
    section = project.config.availability
    if section is not None and section.exclusions:
        shapes = []
        for number in range(1, len(section.exclusions) + 1):
            key = f"availability.exclusions.{number}"
            layer = read_layer(project.input_paths()[key], layer=None, columns=[], what=key)
            shapes.extend(layer.to_crs(grid.crs).geometry.to_numpy())
        burners["exclusions"] = ShapeBurner(shapes, np.ones(len(shapes), dtype=np.uint8), "uint8")
    return burners


def _key_of(specs: list[LayerSpec], name: str) -> str | None:
    return next((spec.key for spec in specs if spec.key == name), None)


# --- the grid problem -----------------------------------------------------------------------


def grid_problem(
    project,
    units: gpd.GeoDataFrame,
    strata: gpd.GeoDataFrame,
    plots: pd.DataFrame,
    forage_classes: pd.DataFrame,
    mode: str,
    progress: Progress | None = None,
) -> GridResult:
    """Build the capacity problem from the rasters and availability rules of ``project``.

    Parameters
    ----------
    project : Project
        With a ``[rasters]`` and/or ``[availability]`` section.
    units, strata : GeoDataFrame
        As read by :func:`nutricap.landscape.vectors.read_units` / ``read_strata``.
    plots : DataFrame
        The clip-plot table (strata-based supply).
    forage_classes : DataFrame
        The forage-class table.
    mode : str
        Pooling mode, ``"unit"`` or ``"patch"``.
    progress : callable, optional
        Called with a message per step; a progress bar over windows is shown when given
        (and not quiet).
    """
    say = progress or (lambda message: None)
    specs = layer_specs(project)
    if not specs:
        raise ProjectFileError(
            "the raster path needs at least one raster layer to define the grid",
            source=project.path,
            location="sections [rasters] / [availability]",
            expected="a biomass, index, snow_depth, slope or distance_to_water raster",
            found="none",
        )
    grid = read_grid(specs[0].path, specs[0].key)
    classes, direct, calibrated, strata_classes = _class_sources(project, forage_classes)
    say("fitting index → biomass models" if calibrated else "summarising clip plots by stratum")
    groups, calibration_report = _calibrated_groups(project, calibrated, classes)
    strata_source = strata_map(project, strata)
    supply = strata_supply(plots, strata_source, strata_classes, classes, project)
    polygon_stratum, polygon_biomass, access = _strata_polygons(strata_source, supply, classes)
    rules = cell_rules(project, forage_classes, classes, access is not None)
    units_table, area_crs, reason = _unit_areas(units, strata_source, project)
    n_keys = (len(units) + 1) * (len(supply.strata) + 1)  # the last "unit": outside every unit
    unit_base = np.arange(-1, len(units)) * (len(supply.strata) + 1)
    unit_base[0] = len(units) * (len(supply.strata) + 1)
    setup = GridSetup(
        classes=classes,
        n_strata=len(supply.strata),
        polygon_stratum=polygon_stratum,
        unit_base=unit_base,
        polygon_biomass=polygon_biomass,
        strata_columns=[classes.index(name) for name in strata_classes],
        polygon_access=access,
        direct={classes.index(name): f"rasters.biomass.{name}" for name in direct},
        calibrated=groups,
        index_key="rasters.calibrated.index" if groups else None,
        rules=rules,
        snow_key=_key_of(specs, "availability.snow_depth"),
        slope_key=_key_of(specs, "availability.slope"),
        water_key=_key_of(specs, "availability.distance_to_water"),
        dump_key=n_keys,
    )
    config = project.config
    resample = config.rasters.resample if config.rasters is not None else "none"
    window_size = config.rasters.window_size if config.rasters is not None else None
    windows = grid_windows(grid, window_size)
    n_rows = layout_of(setup).rows
    totals = Totals(
        np.zeros(n_keys), np.zeros((n_keys, n_rows)), np.zeros((len(groups), 3), np.int64)
    )
    cache = CellCache(windows, len(classes))
    show = progress is not None and not getattr(progress, "quiet", False)
    say(f"streaming {grid.cells:,} cells in {len(windows)} windows")
    with streaming_env(), LayerStack(specs, grid, resample) as stack:
        burners = _burners(units, strata_source, project, grid)
        lookup = None if strata_source.codes is None else strata_source.codes.polygon_lookup()
        reader = WindowReader(stack, grid, burners, lookup)
        stream_windows(setup, reader, windows, totals, cache, show)
        resampled = stack.resampled
    cache.finish()
    return _assemble(
        project, setup, totals, grid, supply, units_table, (area_crs, reason), mode,
        forage_classes, calibration_report, specs, resampled, windows, cache, show,
    )  # fmt: skip


def _assemble(
    project, setup, totals, grid, supply, units_table, crs_reason, mode,
    forage_classes, calibration_report, specs, resampled, windows, cache, show,
) -> GridResult:  # fmt: skip
    """Totals by key → checks, capacity problem, areas, reports."""
    n_units, n_strata = len(units_table), setup.n_strata
    cell_ha = grid.cell_area_ha
    inside = n_units * (n_strata + 1)  # keys of the last "unit" hold cells outside every unit
    cells = totals.cells[:inside].reshape(n_units, n_strata + 1)
    sums = totals.sums[:inside].reshape(n_units, n_strata + 1, -1)
    layout = layout_of(setup)
    available_kg = sums[:, :n_strata, layout.available] * cell_ha
    gross_kg = sums[:, :n_strata, layout.gross] * cell_ha
    accessible_ha = sums[:, :n_strata, layout.access] * cell_ha
    without_data = sums[:, :n_strata, layout.nodata]
    _check_units(project, units_table, cells, without_data, specs, grid)
    mapped_ha = cells[:, :n_strata] * cell_ha
    full_supply = _full_supply(supply, setup.classes, gross_kg, mapped_ha - without_data * cell_ha)
    items = build_forage_items(full_supply, forage_classes)
    problem, row_of_key = _problem(units_table, available_kg, mapped_ha, items, mode)
    areas = _areas(units_table, full_supply.strata, mapped_ha, accessible_ha, crs_reason)
    report = _rules_report(units_table, setup.rules, sums[:, :n_strata], layout, cell_ha)
    calibration = _calibration_report(
        calibration_report, totals.calibration_cells, cell_ha, project
    )
    notes = _notes(units_table, cells, without_data, cell_ha, resampled, calibration)
    stratum_of_key = np.append(np.tile(np.arange(n_strata + 1), n_units + 1), n_strata)
    calibrated = _calibrated_sums(setup, totals.sums, cell_ha, row_of_key, stratum_of_key)
    compression = project.config.rasters.density_compression if project.config.rasters else "zstd"
    return GridResult(
        problem, areas, supply, report, calibration, notes, grid, resampled, windows, cache,
        row_of_key, stratum_of_key, setup.classes, compression, show, calibrated,
    )  # fmt: skip


def _check_units(project, units_table, cells, without_data, specs, grid) -> None:
    """Refuse units with no cell on the grid, no mapped cell, or no cell with data."""
    units_path = project.input_path("units")
    ids = units_table["unit_id"].to_numpy()
    on_grid = cells.sum(axis=1)
    mapped = cells[:, :-1].sum(axis=1)
    with_data = mapped - without_data.sum(axis=1)
    checks = [
        (
            on_grid == 0,
            "holds no cell centre of the raster grid",
            f"every unit on the grid of {grid.source.name} and larger than a cell",
        ),
        (
            (on_grid > 0) & (mapped == 0),
            "does not overlap any vegetation stratum on the grid",
            f"every unit at least partly covered by the strata layer ({project.strata_file()})",
        ),
        (
            (mapped > 0) & (with_data == 0),
            "has no cell with data in every raster layer",
            "at least one cell with data in every layer ("
            + ", ".join(spec.key for spec in specs)
            + ")",
        ),
    ]
    for number, (bad, message, expected) in enumerate(checks):
        if bad.any():
            found = f"{int(bad.sum())} unit(s): " + ", ".join(map(repr, ids[bad][:10]))
            if number == 2:
                first = units_table.geometry.to_crs(grid.crs).iloc[int(np.flatnonzero(bad)[0])]
                found += "; " + "; ".join(_layers_without_data(first, specs, grid, project))
            raise SpatialError(
                f"unit {ids[bad][0]!r} {message}",
                source=units_path,
                location="attribute 'unit_id'",
                expected=expected,
                found=found,
            )


def _layers_without_data(shape, specs: list[LayerSpec], grid: Grid, project) -> list[str]:
    """Which layers have no data over a unit (the cells whose centre lies in ``shape``)."""
    rasters = project.config.rasters
    resample = rasters.resample if rasters is not None else "none"
    burner = ShapeBurner([shape], [1], "uint8")
    west, south, east, north = shape.bounds
    inside = np.zeros(len(specs))
    cells = 0
    with streaming_env(), LayerStack(specs, grid, resample) as stack:
        for window in grid_windows(grid):
            w_west, w_south, w_east, w_north = rasterio.windows.bounds(window, grid.transform)
            if w_east < west or w_west > east or w_north < south or w_south > north:
                continue
            unit = burner.burn(window, grid) > 0
            cells += int(unit.sum())
            layers = stack.read(window)
            inside += [np.count_nonzero(layers[spec.key][1] & unit) for spec in specs]
    return [
        f"layer {spec.key} ({spec.path.name}) has data on {100 * count / max(cells, 1):.0f} % "
        "of its cells"
        for spec, count in zip(specs, inside)
        if count < cells
    ]


def _full_supply(supply: StratumSupply, classes, gross_kg, with_data_ha) -> StratumSupply:
    """Biomass per stratum of every class: plot means, or raster means over cells with data."""
    area = with_data_ha.sum(axis=0)
    with np.errstate(invalid="ignore", divide="ignore"):
        raster_mean = np.where(area[:, None] > 0, gross_kg.sum(axis=0) / area[:, None], 0.0)
    mean = raster_mean.copy()
    se = np.full_like(mean, np.nan)
    for column, name in enumerate(supply.classes):
        mean[:, classes.index(name)] = supply.mean_kg_per_ha[:, column]
        se[:, classes.index(name)] = supply.se_kg_per_ha[:, column]
    return StratumSupply(supply.strata, list(classes), mean, se, supply.n_plots)


def _problem(units_table, available_kg, mapped_ha, items, mode):
    """Rows (units, or unit × stratum patches with cells) × items, and each key's row."""
    n_units, n_strata, n_classes = available_kg.shape
    unit_ids = units_table["unit_id"].to_numpy()
    row_of_key = np.full((n_units, n_strata + 1), -1)
    if mode == "unit":
        available = available_kg.reshape(n_units, n_strata * n_classes)
        row_unit = np.arange(n_units)
        row_of_key[:, :n_strata] = row_unit[:, None]
    else:
        unit_index, stratum_index = np.nonzero(mapped_ha > 0)
        available = np.zeros((unit_index.size, n_strata * n_classes))
        columns = stratum_index[:, None] * n_classes + np.arange(n_classes)[None, :]
        available[np.arange(unit_index.size)[:, None], columns] = available_kg[
            unit_index, stratum_index
        ]
        row_unit = unit_index
        row_of_key[unit_index, stratum_index] = np.arange(unit_index.size)
    problem = CapacityProblem(unit_ids, row_unit, items, available)
    outside = np.full(n_strata + 2, -1)  # keys outside every unit, and the no-data key
    return problem, np.append(row_of_key.ravel(), outside)


def _calibrated_sums(setup: GridSetup, sums_by_key, cell_ha, row_of_key, stratum_of_key):
    """One :class:`CalibratedSums` per calibrated group from the sums by key [per-cell values ×
    cells] and the cell area [ha].

    Keys map to the problem's (row, item) as in :func:`density_coefficients`: the key's row,
    and item ``stratum × classes + class``; keys without a row are left out.
    """
    keys = np.flatnonzero(row_of_key[: sums_by_key.shape[0]] >= 0)
    terms = sums_by_key[keys, layout_of(setup).calibration] * cell_ha
    result, start = [], 0
    for group in setup.calibrated:
        block = terms[:, start : start + group.terms]
        start += group.terms
        items = stratum_of_key[keys][:, None] * setup.n_classes + group.class_index[None, :]
        rows = np.broadcast_to(row_of_key[keys][:, None], items.shape)
        per_entry = block.reshape(items.size, group.class_terms)  # keys × classes, row-major
        result.append(_group_sums(group.model, rows.ravel(), items.ravel(), per_entry))
    return result


def _group_sums(model: BiomassModel, rows, items, terms) -> CalibratedSums:
    if model.kind == "linear":
        return CalibratedSums(model, rows, items, terms)
    forage, weighted = terms[:, :INDEX_BINS], terms[:, INDEX_BINS:]
    mean_index = np.divide(weighted, forage, out=np.zeros_like(forage), where=forage > 0)
    return CalibratedSums(model, rows, items, forage, mean_index)


def _areas(units_table, strata_names, mapped_ha, accessible_ha, crs_reason) -> StratumAreas:
    unit_index, stratum_index = np.nonzero(mapped_ha > 0)
    table = pd.DataFrame(
        {
            "unit_id": units_table["unit_id"].to_numpy()[unit_index],
            "stratum": np.asarray(strata_names, dtype=object)[stratum_index],
            "area_ha": mapped_ha[unit_index, stratum_index],
            "accessible_ha": accessible_ha[unit_index, stratum_index],
        }
    )
    area_crs, reason = crs_reason
    return StratumAreas(units_table, table, area_crs, reason)


def _rules_report(units_table, rules, sums, layout: Layout, cell_ha) -> pd.DataFrame:
    per_unit = sums.sum(axis=1)
    active = rules.active()
    area = [per_unit[:, layout.nodata] * cell_ha]
    removed = [np.full(len(units_table), np.nan)]
    for number in range(layout.n_rules):
        removed.append(per_unit[:, layout.removed(number)] * cell_ha)
        area.append(per_unit[:, layout.affected(number)] * cell_ha)
    gross = per_unit[:, layout.gross].sum(axis=1) * cell_ha
    return rules_mod.rules_report(
        units_table["unit_id"].to_numpy(), active, np.column_stack(area),
        np.column_stack(removed), gross,
    )  # fmt: skip


def _calibration_report(report, counts, cell_ha, project):
    if report is None:
        return None
    report = report.copy()
    report["area_beyond_plot_range_ha"] = counts[:, 0] * cell_ha
    report["area_beyond_margin_ha"] = counts[:, 1] * cell_ha
    report["area_predicted_below_zero_ha"] = counts[:, 2] * cell_ha
    calibrated = project.config.rasters.calibrated
    report["extrapolation_margin"] = calibrated.extrapolation_margin
    report["beyond_margin"] = (
        "index clamped to the margin"
        if calibrated.beyond_margin == "clamp"
        else "model extrapolated"
    )
    return report


def _notes(units_table, cells, without_data, cell_ha, resampled, calibration) -> list[str]:
    notes = [
        f"raster layer {key} resampled onto the grid by {method} resampling"
        for key, method in resampled.items()
        if method is not None
    ]
    lost = without_data.sum() * cell_ha
    if lost > 0:
        notes.append(
            f"{lost:,.1f} ha of mapped unit area has no data in at least one raster layer; no "
            "forage is counted there (availability_rules.csv, rule 'nodata')"
        )
    unmapped_ha = cells[:, -1].sum() * cell_ha
    if unmapped_ha > 0:
        notes.append(
            f"{unmapped_ha:,.1f} ha of unit area on the grid lies in no stratum (outside the "
            "strata polygons, or a raster code the codes table does not list, or no data in "
            "the strata raster); no forage is counted there"
        )
    on_grid_ha = cells.sum(axis=1) * cell_ha
    share = on_grid_ha / units_table["area_ha"].to_numpy()
    partial = units_table["unit_id"].to_numpy()[share < 0.99]
    if partial.size:
        notes.append(
            "units with less than 99 % of their area on the raster grid (forage off the grid "
            "is not counted): " + ", ".join(map(str, partial))
        )
    if calibration is not None:
        for row in calibration.itertuples():
            if row.area_beyond_margin_ha > 0:
                notes.append(
                    f"WARNING: calibrated forage group {row.forage_group!r}: "
                    f"{row.area_beyond_margin_ha:,.1f} ha has an index beyond the plots' range "
                    f"[{row.index_min:.4g}, {row.index_max:.4g}] by more than the margin "
                    f"({row.extrapolation_margin:g} of the range); {row.beyond_margin}"
                )
    return notes


# --- outputs --------------------------------------------------------------------------------


def density_coefficients(
    result: GridResult, problem: CapacityProblem, eaten_kg: np.ndarray, intake_kg_per_day: float
) -> np.ndarray:
    """Animal-days per kg of each class's forage left in a cell, by key: (keys, classes).

    ``eaten_kg[row, item] / available_kg[row, item] / intake`` of the key's row and the
    items of the key's stratum; 0 where nothing is available.
    """
    n_classes = len(result.classes)
    with np.errstate(invalid="ignore", divide="ignore"):
        ratio = np.where(problem.available_kg > 0, eaten_kg / problem.available_kg, 0.0)
    coefficients = np.zeros((result.row_of_key.size, n_classes), dtype=np.float64)
    has_row = result.row_of_key >= 0
    rows = result.row_of_key[has_row]
    columns = result.stratum_of_key[has_row][:, None] * n_classes + np.arange(n_classes)
    coefficients[has_row] = ratio[rows[:, None], columns]
    return (coefficients / intake_kg_per_day).astype(np.float32)


def _density(keys, kg_per_ha, per_class, dump: int, out: np.ndarray, scratch: Scratch):
    """Animal-days per ha of each cell into ``out``: Σ_c kg_c × coefficient[key, c]; nodata
    at ``dump``.

    Whole windows at a time, so that the thread computing it seldom needs the GIL (the
    report is drawn in the main thread meanwhile).
    """
    index = scratch.take("key index", keys.shape, np.intp)
    np.copyto(index, keys, casting="safe")
    term = scratch.take("term", keys.shape, np.float32)
    out.fill(np.float32(0.0))
    for column in range(per_class.shape[0]):
        np.take(per_class[column], index, out=term)
        term *= kg_per_ha[column]
        out += term
    out[keys == dump] = DENSITY_NODATA
    return out


def write_capacity_density(
    result: GridResult,
    problem: CapacityProblem,
    eaten_kg: np.ndarray,
    intake_kg_per_day: float,
    path: Path,
) -> None:
    """Second pass: ``capacity_density.tif``, NCC animal-days per hectare of each cell.

    Notes
    -----
    ``density = Σ_c kg_c × eaten[row, item_c] / available[row, item_c] / intake / cell_ha``
    with kg_c the forage of class c left in the cell [kg]; since kg_c / cell_ha is the cell's
    forage per hectare, the cell area cancels. Σ density × cell_ha over the cells of a unit is
    the unit's NCC in animal-days. Nodata (−9999) outside units and strata and where a layer
    has no data.
    """
    per_class = np.ascontiguousarray(
        density_coefficients(result, problem, eaten_kg, intake_kg_per_day).T
    )
    n_classes = per_class.shape[0]
    grid = result.grid
    profile = {
        "driver": "GTiff",
        "width": grid.width,
        "height": grid.height,
        "count": 1,
        "dtype": "float32",
        "crs": grid.crs,
        "transform": grid.transform,
        "nodata": DENSITY_NODATA,
        "tiled": True,
        "blockxsize": 256,
        "blockysize": 256,
        "compress": result.compression,
        **COMPRESSION_LEVEL[result.compression],
        "bigtiff": "IF_SAFER",
        "num_threads": 2,
    }
    bar = tqdm(
        total=len(result.windows),
        desc="capacity density",
        unit="window",
        file=sys.stderr,
        disable=not result.show_progress,
    )
    dump = result.row_of_key.size - 1

    def write(window: Window, density: np.ndarray) -> None:
        dst.write(density, 1, window=window)
        bar.update()

    with streaming_env(), rasterio.open(path, "w", **profile) as dst:
        dst.update_tags(units="animal-days per hectare (NCC)")
        with ThreadPoolExecutor(max_workers=1) as writer:  # compresses while the next is computed
            pending = None
            scratch = Scratch()
            for number, (window, keys, kg) in enumerate(
                result.cache.windows(result.windows, n_classes)
            ):
                shape = (int(window.height), int(window.width))
                # Two buffers in turn: one is compressed and written while the other is filled.
                density = scratch.take(f"density {number % 2}", shape, np.float32)
                _density(keys, kg, per_class, dump, density.reshape(-1), scratch)
                if pending is not None:
                    pending.result()
                pending = writer.submit(write, window, density)
            if pending is not None:
                pending.result()
    bar.close()


@contextmanager
def grid_outputs_alongside(
    result: GridResult | None,
    problem: CapacityProblem,
    eaten_kg: np.ndarray,
    intake_kg_per_day: float,
    folder: Path,
) -> Iterator[None]:
    """Write the grid outputs (:func:`write_grid_outputs`) in a background thread while the
    body of the ``with`` block writes the others; wait for them on leaving the block.

    Nothing happens without a grid result. A failure of either side is raised after both
    have stopped, so the output folder is never removed while the grid outputs are written.
    """
    if result is None:
        yield
        return
    with _short_gil_turns(), ThreadPoolExecutor(max_workers=1) as pool:
        writing = pool.submit(
            write_grid_outputs, result, problem, eaten_kg, intake_kg_per_day, folder
        )
        try:
            yield
        except BaseException:
            wait([writing])
            raise
        writing.result()


@contextmanager
def _short_gil_turns(seconds: float = GIL_TURN_S) -> Iterator[None]:
    """Let a waiting thread take the GIL after ``seconds`` instead of Python's 5 ms default.

    The main thread draws the report (Python code that holds the GIL) while the density pass
    runs numpy calls that each need the GIL briefly; with 5 ms turns the density thread spends
    most of its time waiting for them.
    """
    before = sys.getswitchinterval()
    sys.setswitchinterval(seconds)
    try:
        yield
    finally:
        sys.setswitchinterval(before)


def write_grid_outputs(
    result: GridResult,
    problem: CapacityProblem,
    eaten_kg: np.ndarray,
    intake_kg_per_day: float,
    folder: Path,
) -> None:
    """Write availability_rules.csv, calibration.csv (when calibrated), capacity_density.tif."""
    write_csv(result.rules_report, folder / "availability_rules.csv")
    if result.calibration_report is not None:
        write_csv(result.calibration_report, folder / "calibration.csv")
    path = folder / "capacity_density.tif"
    write_capacity_density(result, problem, eaten_kg, intake_kg_per_day, path)
