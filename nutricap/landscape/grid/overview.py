"""Coarse maps of a raster run for the report: the interface between the grid passes and the
report's figures.

A raster run's inputs may hold 1e8–1e9 cells; a printed map shows at most a few hundred blocks
across. The grid passes therefore sum what a map needs over blocks of whole cells (a *coarse
grid* aligned to the raster grid) and hand the report one :class:`OverviewMap` per layer: the
capacity density and what each availability rule removed. The report draws them; it computes
nothing from them.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from affine import Affine
from pyproj import CRS


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
