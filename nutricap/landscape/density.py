"""Capacity density of the vector (strata-map) path: ``capacity_density.tif``.

Each piece of the strata × units overlay gets the NCC animal-days per hectare
that its forage contributes to its unit's (or patch's) solution; the pieces
are burnt onto a grid covering the units (``rasterio.features.rasterize``).
The raster path writes its own density from the cells (see grid/outputs.py).
"""

from __future__ import annotations

import math
from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd
import rasterio
from rasterio.features import rasterize
from rasterio.transform import from_origin

from nutricap.model.problem import CapacityProblem

DENSITY_NODATA = -9999.0
MAX_CELLS = 4_000_000
"""The density grid of the vector path has at most this many cells."""
MIN_CELL_M = 10.0
"""... and cells of at least this size [m]."""


def piece_density(
    problem: CapacityProblem,
    eaten_kg: np.ndarray,
    pieces: pd.DataFrame,
    intake_kg_per_day: float,
) -> np.ndarray:
    """NCC animal-days per hectare of polygon of each overlay piece.

    Parameters
    ----------
    problem : CapacityProblem
        Built from the overlay (its ``row_stratum_ha`` and ``strata`` are used).
    eaten_kg : array, shape (rows, items)
        Forage eaten in the NCC solution [kg DM].
    pieces : DataFrame
        ``unit_id, stratum, accessible_fraction`` per piece (variant-free pieces).
    intake_kg_per_day : float
        Dry-matter intake of the average animal [kg DM/animal/day].

    Returns
    -------
    array, shape (pieces,) [animal-days/ha]

    Notes
    -----
    ``density = φ · Σ_i b_i · eaten[r, i] / available[r, i] / I`` over the items i of the
    piece's stratum, with φ the accessible fraction, b_i the item's biomass [kg/ha] and r
    the problem row holding the piece. Summed over the pieces' hectares it returns the
    row's NCC animal-days (eaten kg ÷ intake).
    """
    available = problem.available_kg
    fraction = np.divide(eaten_kg, available, out=np.zeros_like(eaten_kg), where=available > 0)
    per_type = _row_type_density(problem, fraction, intake_kg_per_day)
    unit_index = pd.Index(problem.unit_ids).get_indexer(pieces["unit_id"])
    type_index = pd.Index(problem.strata).get_indexer(pieces["stratum"])
    row_of = _row_lookup(problem)
    rows = np.array([row_of.get((u, t), -1) for u, t in zip(unit_index, type_index)], dtype=int)
    density = per_type[np.maximum(rows, 0), type_index]
    fraction_reached = pieces["accessible_fraction"].to_numpy(dtype=float)
    return np.where(rows >= 0, fraction_reached * density, 0.0)


def _row_type_density(problem: CapacityProblem, fraction: np.ndarray, intake: float) -> np.ndarray:
    """Animal-days per accessible hectare of each patch type in each row."""
    item_type = pd.Index(problem.strata).get_indexer(problem.items.patch_type)
    kg_per_ha = fraction * problem.items.biomass_kg_per_ha[None, :]
    per_type = np.zeros((fraction.shape[0], len(problem.strata)))
    np.add.at(per_type.T, item_type, kg_per_ha.T)
    return per_type / intake


def _row_lookup(problem: CapacityProblem) -> dict[tuple[int, int], int]:
    """(unit index, patch-type index) → the problem row holding that land."""
    rows, types = np.nonzero(problem.row_stratum_ha > 0)
    return {(int(problem.row_unit[r]), int(t)): int(r) for r, t in zip(rows, types)}


def density_grid(units: gpd.GeoDataFrame) -> tuple[rasterio.Affine, int, int, float]:
    """A grid over the units: transform, width, height and cell size [m]."""
    west, south, east, north = units.total_bounds
    area = (east - west) * (north - south)
    cell = max(MIN_CELL_M, math.ceil(math.sqrt(area / MAX_CELLS)))
    width = max(1, math.ceil((east - west) / cell))
    height = max(1, math.ceil((north - south) / cell))
    return from_origin(west, north, cell, cell), width, height, float(cell)


def write_piece_density(
    pieces: gpd.GeoDataFrame, density: np.ndarray, units: gpd.GeoDataFrame, path: Path
) -> float:
    """Burn piece densities onto a grid over the units; return the cell size [m]."""
    transform, width, height, cell = density_grid(units)
    shapes = ((geometry, float(value)) for geometry, value in zip(pieces.geometry, density))
    raster = rasterize(
        shapes,
        out_shape=(height, width),
        transform=transform,
        fill=DENSITY_NODATA,
        dtype="float32",
    )
    profile = {
        "driver": "GTiff",
        "width": width,
        "height": height,
        "count": 1,
        "dtype": "float32",
        "crs": units.crs,
        "transform": transform,
        "nodata": DENSITY_NODATA,
        "tiled": True,
        "blockxsize": 256,
        "blockysize": 256,
        "compress": "deflate",
    }
    with rasterio.open(path, "w", **profile) as dataset:
        dataset.write(raster, 1)
        dataset.update_tags(units="animal-days per hectare (NCC)", cell_size_m=str(cell))
    return cell
