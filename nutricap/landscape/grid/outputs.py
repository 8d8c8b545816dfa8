"""The grid path's raster output: capacity_density.tif (its tables are written by the report).

The density raster is the grid path's second pass: it reads back the per-cell forage kept in the
:class:`~nutricap.landscape.grid.cell_cache.CellCache` window by window (or, on a Dask cluster,
takes each window's density from the workers, :mod:`nutricap.landscape.grid.cluster`) and writes
animal-days per hectare from each cell's share of the forage eaten in its row of the solution.
It runs in a background thread beside the HTML report (:func:`grid_outputs_alongside`), with
short GIL turns so that the report's Python code does not starve it.
"""

from __future__ import annotations

import sys
from collections.abc import Iterator
from concurrent.futures import ThreadPoolExecutor, wait
from contextlib import contextmanager
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np
import rasterio
from rasterio.windows import Window
from tqdm import tqdm

from nutricap.landscape.grid.cell_cache import Chunk
from nutricap.landscape.grid.overview import OverviewMap, block_map
from nutricap.landscape.grid.rasters import Scratch, streaming_env

if TYPE_CHECKING:
    from nutricap.landscape.grid.supply import GridResult

DENSITY_NODATA = -9999.0
COMPRESSION_LEVEL = {"zstd": {"zstd_level": 1}, "deflate": {"zlevel": 1}}
"""Fast levels for capacity_density.tif: float noise compresses little better at high levels."""
DENSITY_CHUNK_CELLS = 65_536
"""Cells computed at a time in the density pass (its arrays stay in the CPU cache)."""
GIL_TURN_S = 0.0002
"""Longest wait of a thread for the GIL while the density pass runs beside the report [s]."""


def density_coefficients(
    result: GridResult, available_kg: np.ndarray, eaten_kg: np.ndarray, intake_kg_per_day: float
) -> np.ndarray:
    """Animal-days per kg of each class's forage left in a cell, by key: (keys, classes),
    float32 (:func:`key_coefficients`, as the density pass uses them)."""
    coefficients = key_coefficients(result, available_kg, eaten_kg, intake_kg_per_day)
    return coefficients.astype(np.float32)


def key_coefficients(
    result: GridResult, available_kg: np.ndarray, eaten_kg: np.ndarray, intake_kg_per_day: float
) -> np.ndarray:
    """Animal-days per kg of each class's forage left in a cell, by key: (keys, classes).

    ``eaten_kg[row, item] / available_kg[row, item] / intake`` of the key's row and the
    items of the key's stratum (both (rows, items) arrays of the capacity problem [kg]); 0
    where nothing is available.
    """
    n_classes = len(result.classes)
    with np.errstate(invalid="ignore", divide="ignore"):
        ratio = np.where(available_kg > 0, eaten_kg / available_kg, 0.0)
    coefficients = np.zeros((result.row_of_key.size, n_classes), dtype=np.float64)
    has_row = result.row_of_key >= 0
    rows = result.row_of_key[has_row]
    columns = result.stratum_of_key[has_row][:, None] * n_classes + np.arange(n_classes)
    coefficients[has_row] = ratio[rows[:, None], columns]
    return coefficients / intake_kg_per_day


def capacity_density_map(
    result: GridResult, available_kg: np.ndarray, eaten_kg: np.ndarray, intake_kg_per_day: float
) -> OverviewMap:
    """The coarse map of capacity_density.tif: each block's NCC [animal-days per ha] over
    its unit area, i.e. the mean of the file's cells in the block that lie in a unit, those
    without a density (no stratum, no data) counting 0.

    Notes
    -----
    A cell's density is linear in its forage left per class, ``Σ_c kg_c · k[key, c]`` with
    the coefficients ``k`` of :func:`key_coefficients` (animal-days per kg). The block's
    value is therefore ``Σ_(key, c) k[key, c] · S[block, key, c] / n[block]``, with S the
    first pass's sums of forage left [kg/ha] by (block, key) pair and n the block's cells in
    a unit (:class:`~nutricap.landscape.grid.overview.BlockSums`); the file is not read back
    (the report is drawn while it is written). Σ value × n × cell area over the blocks is
    the units' NCC [animal-days]. NaN where no cell of the block lies in a unit. The file's
    cells are float32 arithmetic, so the two agree to about 1e-7 relative, not to the bit.
    """
    blocks = result.blocks
    coefficients = key_coefficients(result, available_kg, eaten_kg, intake_kg_per_day)
    block, key, forage = blocks.available_pairs()
    pair_days = np.einsum("pc,cp->p", coefficients[key], forage)
    total = np.bincount(block, weights=pair_days, minlength=blocks.coarse.size)
    cells = blocks.unit_cells
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = np.where(cells > 0, total.reshape(cells.shape) / cells, np.nan)
    grid = result.grid
    return block_map(
        "capacity_density", "Capacity density (NCC)", "animal-days per ha", mean, blocks.coarse,
        grid.transform, grid.crs,
    )  # fmt: skip


def window_density(keys, kg_per_ha, per_class, dump: int, out: np.ndarray, scratch: Scratch):
    """Animal-days per ha of each cell into ``out``: Σ_c kg_c × coefficient[key, c]; nodata
    at ``dump``.

    A whole chunk of the first pass at a time, so that the thread computing it seldom needs
    the GIL (the report is drawn in the main thread meanwhile); within it, in runs of
    :data:`DENSITY_CHUNK_CELLS` cells, so that each step's arrays stay in the CPU cache.
    """
    size = keys.size
    step = min(DENSITY_CHUNK_CELLS, size)
    index = scratch.take("key index", (step,), np.intp)
    term = scratch.take("term", (step,), np.float32)
    for first in range(0, size, step):
        part = slice(first, min(first + step, size))
        n = part.stop - first
        _chunk_density(
            keys[part], kg_per_ha[:, part], per_class, dump, out[part], index[:n], term[:n]
        )
    return out


def _chunk_density(keys, kg_per_ha, per_class, dump, out, index, term) -> None:
    np.copyto(index, keys, casting="safe")
    out.fill(np.float32(0.0))
    for column in range(per_class.shape[0]):
        np.take(per_class[column], index, out=term)
        term *= kg_per_ha[column]
        out += term
    out[keys == dump] = DENSITY_NODATA


def write_capacity_density(
    result: GridResult,
    available_kg: np.ndarray,
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
        density_coefficients(result, available_kg, eaten_kg, intake_kg_per_day).T
    )
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

    if result.cluster is not None:
        windows = result.cluster.density_windows(per_class, dump)
    else:
        windows = _cached_density(result, per_class, dump)
    with streaming_env(), rasterio.open(path, "w", **profile) as dst:
        dst.update_tags(units="animal-days per hectare (NCC)")
        with ThreadPoolExecutor(max_workers=1) as writer:  # compresses while the next is computed
            pending = None
            for window, density in windows:
                if pending is not None:
                    pending.result()
                pending = writer.submit(write, window, density)
            if pending is not None:
                pending.result()
    bar.close()


def _cached_density(
    result: GridResult, per_class: np.ndarray, dump: int
) -> Iterator[tuple[Window, np.ndarray]]:
    """Each window with its density, from the cell cache of the first pass.

    Two buffers in turn: the caller writes one while the next is filled (it waits for a
    write to finish before taking the next window, so a buffer is never filled while it is
    being written).
    """
    scratch = Scratch()
    for number, (window, chunks) in enumerate(result.cache.records()):
        shape = (int(window.height), int(window.width))
        density = scratch.take(f"density {number % 2}", shape, np.float32)
        cells = density.reshape(-1)
        chunks_density(chunks, per_class, dump, cells, scratch)
        yield window, density


def chunks_density(
    chunks: list[Chunk], per_class: np.ndarray, dump: int, cells: np.ndarray, scratch: Scratch
) -> None:
    """:func:`window_density` of each of a window's chunks (from a cell cache) into ``cells``
    (the window's cells, row-major)."""
    for first, keys, kg in chunks:
        window_density(keys, kg, per_class, dump, cells[first : first + keys.size], scratch)


@contextmanager
def grid_outputs_alongside(
    result: GridResult | None,
    available_kg: np.ndarray,
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
            write_grid_outputs, result, available_kg, eaten_kg, intake_kg_per_day, folder
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
    available_kg: np.ndarray,
    eaten_kg: np.ndarray,
    intake_kg_per_day: float,
    folder: Path,
) -> None:
    """Write capacity_density.tif into ``folder``, then close the cluster (if any)."""
    path = folder / "capacity_density.tif"
    try:
        write_capacity_density(result, available_kg, eaten_kg, intake_kg_per_day, path)
    finally:
        if result.cluster is not None:
            result.cluster.close()
