"""The invented polygon landscape: study area, management units, vegetation strata (a rock
outcrop left unmapped) and treatment polygons, in UTM 12N coordinates [m].

Everything here is *invented for the example* (see :mod:`nutricap.example`).
"""

from __future__ import annotations

import geopandas as gpd
import numpy as np
import shapely
from shapely import affinity
from shapely.geometry import MultiPoint, Point, Polygon, box

from nutricap.example.tables import STRATA, STRATUM_PROBABILITY

CRS = "EPSG:32612"  # WGS 84 / UTM zone 12N
ORIGIN_X_M, ORIGIN_Y_M = 452_000.0, 4_281_000.0  # south-west corner [m]
WIDTH_M, HEIGHT_M = 15_000.0, 10_000.0
N_STRATA_CELLS = 70
# Unit ids, laid out west to east along the south row, then the north row.
UNIT_IDS = ("Flintwhistle", "Coldmarrow", "Petrelhollow", "Rimgrass", "Thistlemoss", "Wrenfall")


def study_area() -> Polygon:
    """Return the rectangular study area in UTM 12N coordinates [m]."""
    return box(ORIGIN_X_M, ORIGIN_Y_M, ORIGIN_X_M + WIDTH_M, ORIGIN_Y_M + HEIGHT_M)


def voronoi_cells(seeds_xy: np.ndarray, area: Polygon) -> list[Polygon]:
    """Tile ``area`` with the Voronoi cells of ``seeds_xy``, in the order of the seeds.

    Parameters
    ----------
    seeds_xy : ndarray of shape (n, 2)
        Seed coordinates inside ``area`` [m].
    area : Polygon
        Region to tile.

    Returns
    -------
    list of Polygon
        Cell ``i`` contains seed ``i``; the cells cover ``area`` without overlap.
    """
    cells = shapely.voronoi_polygons(MultiPoint(seeds_xy), extend_to=area).geoms
    seeds = [Point(xy) for xy in seeds_xy]
    ordered = [next(c for c in cells if c.intersects(seed)) for seed in seeds]
    return [cell.intersection(area) for cell in ordered]


def make_units(rng: np.random.Generator) -> gpd.GeoDataFrame:
    """Six management units from a jittered 3 x 2 grid of Voronoi seeds."""
    col, row = np.meshgrid(np.arange(3), np.arange(2))
    x = ORIGIN_X_M + (col.ravel() + 0.5) * WIDTH_M / 3
    y = ORIGIN_Y_M + (row.ravel() + 0.5) * HEIGHT_M / 2
    jitter = rng.uniform(-0.25, 0.25, size=(6, 2)) * [WIDTH_M / 3, HEIGHT_M / 2]
    cells = voronoi_cells(np.column_stack([x, y]) + jitter, study_area())
    return gpd.GeoDataFrame({"unit_id": list(UNIT_IDS)}, geometry=cells, crs=CRS)


def terrain_index(xy: np.ndarray, rng: np.random.Generator) -> np.ndarray:
    """Invented 0-1 index rising to the north-east (a stand-in for elevation)."""
    rel = (xy - [ORIGIN_X_M, ORIGIN_Y_M]) / [WIDTH_M, HEIGHT_M]
    index = 0.6 * rel[:, 1] + 0.4 * rel[:, 0] + rng.normal(0.0, 0.08, len(xy))
    return np.clip(index, 0.0, 1.0)


def rock_outcrop() -> Polygon:
    """An unmapped rock outcrop of about 1.2 km2 (invented for the example)."""
    centre = Point(ORIGIN_X_M + 9_800.0, ORIGIN_Y_M + 6_300.0)
    return affinity.rotate(affinity.scale(centre.buffer(500.0), 1.7, 0.9), 30.0)


def make_strata(rng: np.random.Generator) -> gpd.GeoDataFrame:
    """Vegetation polygons: Voronoi cells with strata drawn along the terrain index.

    A rock outcrop is cut out and left unmapped; a few steep high cells get an
    ``accessible_fraction`` below 1.
    """
    seeds = rng.uniform(
        [ORIGIN_X_M, ORIGIN_Y_M],
        [ORIGIN_X_M + WIDTH_M, ORIGIN_Y_M + HEIGHT_M],
        size=(N_STRATA_CELLS, 2),
    )
    index = terrain_index(seeds, rng)
    band = np.minimum((index * 3).astype(int), 2)
    strata = [STRATA[rng.choice(len(STRATA), p=STRATUM_PROBABILITY[b])] for b in band]
    missing = set(STRATA) - set(strata)
    if missing:
        raise ValueError(f"seed gives no polygon of strata {sorted(missing)}")
    steep = (index > 0.6) & (rng.uniform(size=len(seeds)) < 0.4)
    accessible = np.where(steep, rng.choice([0.4, 0.6, 0.8], size=len(seeds)), 1.0)
    outcrop = rock_outcrop()
    cells = [cell.difference(outcrop) for cell in voronoi_cells(seeds, study_area())]
    frame = gpd.GeoDataFrame(
        {"stratum": strata, "accessible_fraction": accessible}, geometry=cells, crs=CRS
    )
    return frame[~frame.geometry.is_empty].reset_index(drop=True)


def make_treatments(
    strata: gpd.GeoDataFrame, stratum: str, count: int, inset_m: float, treatment: str, year: int
) -> gpd.GeoDataFrame:
    """Treatment polygons: the ``count`` largest polygons of ``stratum``, inset by ``inset_m``."""
    stands = strata[strata["stratum"] == stratum]
    largest = stands.loc[stands.geometry.area.sort_values(ascending=False).index[:count]]
    shapes = largest.geometry.buffer(-inset_m).reset_index(drop=True)
    labels = {"treatment": [treatment] * len(shapes), "year": [year] * len(shapes)}
    return gpd.GeoDataFrame(labels, geometry=shapes, crs=CRS)
