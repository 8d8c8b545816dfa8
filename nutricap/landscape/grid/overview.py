"""Coarse maps of a raster run for the report: the interface between the grid passes and the
report's figures.

A raster run's inputs may hold 1e8–1e9 cells; a printed map shows at most a few hundred blocks
across. The grid passes therefore sum what a map needs over blocks of whole cells (a *coarse
grid* aligned to the raster grid, :class:`CoarseGrid`) and hand the report one
:class:`OverviewMap` per layer: the capacity density and what each availability rule removed.
The report draws them; it computes nothing from them.

How the sums are taken (the first pass, :mod:`nutricap.landscape.grid.window_pass`): the
per-cell rows the maps need (forage left by class, forage removed by each rule) are summed over
runs of equal key along each row that also end where a block begins, so that every run lies in
one block and one key; each window's runs are added by (block, key) pair (:func:`pair_sums`),
and the main thread adds the pairs into the totals by key and into :class:`BlockSums`. The
per-unit tables and the maps are thus sums of the same pair sums (they agree to float64
rounding). The per-cell rows the maps do not need are summed over the longer runs of equal key
only (a numpy call per run and row is what the maps cost).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
from affine import Affine
from pyproj import CRS
from rasterio.windows import Window

MAX_BLOCKS_PER_SIDE = 400
"""Longest side of the coarse grid [blocks]: the resolution of a printed map."""


@dataclass(frozen=True)
class OverviewMap:
    """One map of a raster run on a coarse grid of whole-cell blocks.

    Attributes
    ----------
    key : str
        File-safe name, e.g. ``"capacity_density"`` or ``"removed_snow"``.
    title : str
        What the map shows, for the figure's title.
    units : str
        Units of ``values`` for the legend, e.g. ``"animal-days per ha"``, ``"kg per ha"``.
    values : ndarray
        2-D float64 (rows × columns of the coarse grid), NaN where no cell of the block lies in
        a unit.
    transform : Affine
        Of the coarse grid (upper-left corner, block width and height in CRS units).
    crs : CRS
        Of the raster grid.
    """

    key: str
    title: str
    units: str
    values: np.ndarray
    transform: Affine
    crs: CRS

    def bounds(self) -> tuple[float, float, float, float]:
        """(west, south, east, north) of the coarse grid [CRS units]."""
        rows, cols = self.values.shape
        west, north = self.transform * (0, 0)
        east, south = self.transform * (cols, rows)
        return min(west, east), min(south, north), max(west, east), max(south, north)


@dataclass(frozen=True)
class CoarseGrid:
    """Blocks of ``block`` × ``block`` whole cells of the raster grid, counted from its origin
    (cell row 0, column 0); the last row and column of blocks may hold fewer cells.

    Attributes
    ----------
    block : int
        Cells along each side of a block (≥ 1).
    rows, cols : int
        Blocks along the grid's rows and columns.
    """

    block: int
    rows: int
    cols: int

    @staticmethod
    def for_shape(height: int, width: int, max_side: int | None = None) -> CoarseGrid:
        """The smallest block size that keeps the coarse grid within ``max_side`` blocks
        (default :data:`MAX_BLOCKS_PER_SIDE`) along its longer side; a grid of at most that
        many cells a side is mapped cell by cell."""
        limit = MAX_BLOCKS_PER_SIDE if max_side is None else max_side
        block = max(1, math.ceil(max(height, width) / limit))
        return CoarseGrid(block, math.ceil(height / block), math.ceil(width / block))

    @property
    def size(self) -> int:
        return self.rows * self.cols

    def span(self, window: Window) -> tuple[int, int, int, int]:
        """(first block row, first block column, block rows, block columns) of a window."""
        b = self.block
        row, col = int(window.row_off), int(window.col_off)
        first_row, first_col = row // b, col // b
        last_row = (row + int(window.height) - 1) // b
        last_col = (col + int(window.width) - 1) // b
        return first_row, first_col, last_row - first_row + 1, last_col - first_col + 1

    def column_starts(self, window: Window) -> slice:
        """Columns of the window (after its first) where a block begins."""
        first = -int(window.col_off) % self.block
        return slice(first or self.block, int(window.width), self.block)

    def local_blocks(self, window: Window, cells: np.ndarray) -> np.ndarray:
        """Block of each cell (flat index into the window, row-major) within the window's
        :meth:`span`, row-major (int64)."""
        b, width = self.block, int(window.width)
        first_row, first_col, _, n_cols = self.span(window)
        rows = (cells // width + int(window.row_off)) // b - first_row
        cols = (cells % width + int(window.col_off)) // b - first_col
        return rows * n_cols + cols

    def transform(self, grid_transform: Affine) -> Affine:
        """Of the coarse grid: the grid's, with cells ``block`` times larger."""
        return grid_transform * Affine.scale(self.block, self.block)


@dataclass
class PairSums:
    """A window's sums by (block, key) pair, over the pairs that hold a cell.

    Attributes
    ----------
    keys : int array (pairs,)
    blocks : int array (pairs,)
        Block within the window's ``span`` (row-major).
    span : (int, int, int, int)
        :meth:`CoarseGrid.span` of the window.
    cells : float array (pairs,)
    sums : float64 array (rows, pairs)
        The rows of the per-cell array summed (see ``sums.Layout``).
    """

    keys: np.ndarray
    blocks: np.ndarray
    span: tuple[int, int, int, int]
    cells: np.ndarray
    sums: np.ndarray


def pair_sums(run_keys, run_blocks, run_cells, run_sums, n_keys: int, span) -> PairSums:
    """Runs (each in one block and one key) → sums by (block, key) pair [float64].

    The pairs are numbered densely over the window's blocks × the keys present in the
    window (a few per block), so that ``numpy.bincount`` adds the runs without sorting.
    """
    present = np.bincount(run_keys, minlength=n_keys) > 0
    key_list = np.flatnonzero(present)
    rank = np.cumsum(present) - 1
    code = run_blocks * key_list.size + rank[run_keys]
    occupied = np.bincount(code) > 0
    pairs = np.flatnonzero(occupied)
    compact = (np.cumsum(occupied) - 1)[code]
    n = pairs.size
    sums = np.empty((run_sums.shape[0], n))
    for row, values in enumerate(run_sums):
        sums[row] = np.bincount(compact, weights=values, minlength=n)
    cells = np.bincount(compact, weights=run_cells, minlength=n)
    return PairSums(key_list[pairs % key_list.size], pairs // key_list.size, span, cells, sums)


@dataclass
class BlockSums:
    """Sums over every window by block of the coarse grid (main thread, window order).

    Attributes
    ----------
    coarse : CoarseGrid
    unit_key, stratum_key : bool arrays (keys,)
        Keys of cells in a unit; in a unit and a stratum (the keys of the problem).
    n_rows : int
        Rows of the per-cell array summed by block (the layout's map rows: forage left by
        class, then removed by each rule).
    available : slice
        Rows of the forage left per class, kept by (block, key) pair for the density map.
    unit_cells : float array (rows, cols)
        Cells of each block in a unit (in a stratum or not, with data or not).
    sums : float64 array (n_rows, rows, cols)
        The map rows summed over the block's cells in a unit and a stratum [kg/ha × cells].
    pairs : list of (blocks, keys, available sums)
        Per window: the coarse block (flat index), key and forage left of each class
        [kg/ha summed over cells] of every (block, key) pair of a unit and a stratum.
    """

    coarse: CoarseGrid
    unit_key: np.ndarray
    stratum_key: np.ndarray
    n_rows: int
    available: slice
    unit_cells: np.ndarray = field(init=False)
    sums: np.ndarray = field(init=False)
    pairs: list = field(init=False, default_factory=list)

    def __post_init__(self) -> None:
        shape = (self.coarse.rows, self.coarse.cols)
        self.unit_cells = np.zeros(shape)
        self.sums = np.zeros((self.n_rows, *shape))

    def add(self, part: PairSums) -> None:
        """Add a window's pair sums."""
        first_row, first_col, n_rows, n_cols = part.span
        place = (slice(first_row, first_row + n_rows), slice(first_col, first_col + n_cols))
        size = n_rows * n_cols

        def by_block(mask: np.ndarray, values: np.ndarray) -> np.ndarray:
            added = np.bincount(part.blocks[mask], weights=values[mask], minlength=size)
            return added.reshape(n_rows, n_cols)

        self.unit_cells[place] += by_block(self.unit_key[part.keys], part.cells)
        inside = self.stratum_key[part.keys]
        for row in range(self.n_rows):
            self.sums[(row, *place)] += by_block(inside, part.sums[row])
        local_row, local_col = np.divmod(part.blocks[inside], n_cols)
        blocks = (local_row + first_row) * self.coarse.cols + local_col + first_col
        self.pairs.append((blocks, part.keys[inside], part.sums[self.available][:, inside]))

    def available_pairs(self) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Every window's (block, key) pairs of a unit and a stratum: (coarse block (flat),
        key, forage left (classes, pairs) [kg/ha summed over cells]); a pair on the edge
        of two windows appears once for each."""
        if not self.pairs:
            n = self.available.stop - self.available.start
            return np.zeros(0, np.intp), np.zeros(0, np.intp), np.zeros((n, 0))
        blocks, keys, sums = zip(*self.pairs)
        return np.concatenate(blocks), np.concatenate(keys), np.concatenate(sums, axis=1)


def block_map(key, title, units, values, coarse: CoarseGrid, grid_transform, crs) -> OverviewMap:
    """An :class:`OverviewMap` of ``values`` (rows, cols) on the coarse grid, north-up (row 0
    to the north, as an image is drawn) whichever way the raster grid's rows run."""
    transform = coarse.transform(grid_transform)
    if transform.e > 0:  # a south-up grid: rows from south to north
        values = values[::-1]
        transform = transform * Affine.translation(0, values.shape[0]) * Affine.scale(1, -1)
    values = np.ascontiguousarray(values, dtype=np.float64)
    return OverviewMap(key, title, units, values, transform, CRS.from_user_input(crs.to_wkt()))
