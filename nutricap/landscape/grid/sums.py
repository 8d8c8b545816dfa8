"""What the grid's first pass computes with and sums into: its setup (:class:`GridSetup`), the
rows of the per-cell array it sums (:class:`Layout`), the run sums of a chunk and of a window,
and the totals over every window (:class:`Totals`).

Sums are taken over runs of equal (unit, stratum) key along each row and added into the keys
(``numpy.bincount``); the rows the report's maps need are summed over runs that also end where
a block of the maps' coarse grid begins, and added by (block, key) pair
(:mod:`nutricap.landscape.grid.overview`). The computation that produces them is in
:mod:`nutricap.landscape.grid.window_pass`. Everything summed across runs and windows is
float64.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from rasterio.windows import Window

from nutricap.landscape import availability as rules_mod
from nutricap.landscape.grid.calibration import CalibratedGroup
from nutricap.landscape.grid.overview import BlockSums, CoarseGrid, PairSums, pair_sums


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
