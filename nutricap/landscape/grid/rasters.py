"""The grid every raster layer is read on: its checks, windows, and polygons burnt per window.

The grid is defined by one raster (the first layer of the project). Every other layer must share
its CRS and cell size and be aligned with it (cell edges on the same lines; the extent may
differ, cells off a layer's extent have no data): :func:`alignment_problem` says why one is not
(the reading of the layers, aligned or resampled, is in :mod:`nutricap.landscape.grid.layers`).

Rasters are read in windows aligned to the grid layer's blocks, so that memory does not grow
with the raster. Polygons (units, strata, exclusion masks) are burnt per window by GDAL's
rasteriser: a cell belongs to a polygon when its centre lies in it.
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import rasterio
import rasterio.features
import rasterio.windows
import shapely
from affine import Affine
from pyproj import CRS
from rasterio.errors import NotGeoreferencedWarning, RasterioIOError
from rasterio.warp import calculate_default_transform
from rasterio.windows import Window

from nutricap.errors import SpatialError

M2_PER_HA = 10_000.0
DEFAULT_WINDOW_CELLS = 1024 * 1024
"""Cells per window when the project does not set window_size (about 4 MB per float32 layer)."""
GDAL_CACHE_MB = 64
"""GDAL's block cache while streaming [MB]; small and fixed so memory does not grow."""
ALIGNMENT_TOLERANCE_CELLS = 1e-3
"""Largest misfit of two grids' cell edges, in cells, that still counts as aligned."""
# rasterio (1.4) warns once per thread, on the first rasterize outside the main thread, that
# its in-memory dataset "has no geotransform"; the burnt cells are right (checked against the
# main thread and against shapely in tests/test_rasters.py), so this one message is silenced.
warnings.filterwarnings(
    "ignore",
    message="Dataset has no geotransform",
    category=NotGeoreferencedWarning,
    module="rasterio.features",
)


class Scratch:
    """Reusable memory of one thread for a stream of windows.

    Each window of a pass needs the same arrays (layers read, polygons burnt, per-cell
    results). Taking them from here instead of allocating them afresh saves the operating
    system from mapping and zeroing new pages for every window (about a tenth of a pass's
    time on two cores). An array taken under a name is valid until the same name is taken
    again: one thread, one window at a time.
    """

    def __init__(self) -> None:
        self._buffers: dict[tuple[str, str], np.ndarray] = {}

    def take(self, name: str, shape: tuple[int, ...], dtype) -> np.ndarray:
        """A C-contiguous array of ``shape`` and ``dtype`` (contents left from earlier use)."""
        dtype = np.dtype(dtype)
        size = math.prod(shape)
        buffer = self._buffers.get((name, dtype.str))
        if buffer is None or buffer.size < size:
            buffer = np.empty(size, dtype=dtype)
            self._buffers[(name, dtype.str)] = buffer
        return buffer[:size].reshape(shape)


@dataclass(frozen=True)
class Grid:
    """The grid every layer is read on.

    Attributes
    ----------
    crs : rasterio.crs.CRS
    transform : Affine
        Grid → map coordinates (north-up, no rotation).
    width, height : int
        Columns and rows.
    block_shape : (int, int)
        Rows and columns of the grid raster's internal blocks.
    metres_per_unit : float
        Length of one CRS unit [m].
    source : Path
        The raster that defines the grid.
    warped_from : str, optional
        The CRS of that raster when the grid is one nutricap defined for it (a raster in a
        geographic CRS warped onto an equal-area grid).
    """

    crs: rasterio.crs.CRS
    transform: Affine
    width: int
    height: int
    block_shape: tuple[int, int]
    metres_per_unit: float
    source: Path
    warped_from: str | None = None  # the source's CRS when nutricap defined the grid

    @property
    def cell_area_ha(self) -> float:
        """Area of one cell [ha] = |a·e| × (m per unit)² / 10,000 (planar, in the grid's CRS)."""
        return abs(self.transform.a * self.transform.e) * self.metres_per_unit**2 / M2_PER_HA

    @property
    def cells(self) -> int:
        return self.width * self.height

    def window_transform(self, window: Window) -> Affine:
        return rasterio.windows.transform(window, self.transform)

    def window_bounds(self, window: Window) -> tuple[float, float, float, float]:
        """West, south, east, north of ``window`` [CRS units], whichever way the rows run
        (north to south, or south to north in a south-up grid)."""
        left, bottom, right, top = rasterio.windows.bounds(window, self.transform)
        return min(left, right), min(bottom, top), max(left, right), max(bottom, top)

    def describe(self) -> dict:
        """The grid in words and numbers, for the run manifest."""
        return {
            "defined_by": str(self.source),
            "crs": self.crs.to_string(),
            "cell_size": [self.transform.a, -self.transform.e],
            "cell_area_ha": self.cell_area_ha,
            "width": self.width,
            "height": self.height,
            "origin": [self.transform.c, self.transform.f],
        }


WARPED_BLOCK_SHAPE = (256, 256)
"""Blocks [rows, columns] of a grid that nutricap defines (a raster warped onto it has none)."""


def read_grid(path: Path, key: str, *, resample: str = "none", area_crs=None) -> Grid:
    """The grid of raster ``path`` (project key ``key``); refuse grids areas cannot be taken on.

    A raster in a geographic CRS defines no grid of its own (cells are not of equal area); with
    ``resample`` set it is warped onto a grid in ``area_crs`` (a pyproj CRS in metres) covering
    it at about its resolution (GDAL's default for the warp), refused otherwise.
    """
    with open_raster(path, key) as src:
        crs = raster_crs(src, path, key)
        t = src.transform
        if t.b != 0 or t.d != 0:
            raise SpatialError(
                "the raster grid is rotated or sheared",
                source=path,
                location=f"key {key!r}",
                expected="a north-up grid (no rotation terms in the geotransform)",
                found=f"rotation terms {t.b:g}, {t.d:g}",
            )
        projected = CRS.from_wkt(crs.to_wkt())
        if not projected.is_projected:
            if resample != "none" and area_crs is not None:
                return _equal_area_grid(src, area_crs, path)
            raise SpatialError(
                "the raster that defines the grid has a geographic CRS",
                source=path,
                location=f"key {key!r}",
                expected="a projected CRS in metres or feet (cell areas are planar); "
                "reproject it, e.g. to the local UTM zone, or set resample in [rasters] to "
                "warp it onto an equal-area grid",
                found=crs.to_string(),
            )
        factor = projected.axis_info[0].unit_conversion_factor
        return Grid(crs, t, src.width, src.height, src.block_shapes[0], factor, path)


def _equal_area_grid(src, area_crs, path: Path) -> Grid:
    """A north-up grid in ``area_crs`` covering ``src`` with square cells of about its
    resolution (rasterio's ``calculate_default_transform``, GDAL's suggested warp output)."""
    crs = rasterio.crs.CRS.from_wkt(area_crs.to_wkt())
    transform, width, height = calculate_default_transform(
        src.crs, crs, src.width, src.height, *src.bounds
    )
    factor = CRS.from_wkt(area_crs.to_wkt()).axis_info[0].unit_conversion_factor
    source_crs = CRS.from_wkt(src.crs.to_wkt()).name
    return Grid(crs, transform, width, height, WARPED_BLOCK_SHAPE, factor, path, source_crs)


def open_raster(path: Path, key: str):
    """Open a raster for reading; an unreadable file is a :class:`SpatialError`."""
    try:
        return rasterio.open(path)
    except RasterioIOError as exc:
        raise SpatialError(
            "cannot read raster",
            source=path,
            location=f"key {key!r}",
            expected="a raster GDAL reads (GeoTIFF preferred), complete"
            + (", its XML well formed" if path.suffix.lower() == ".vrt" else ""),
            found=_gdal_words(exc, path),
        ) from None


def _gdal_words(exc: Exception, path: Path) -> str:
    """GDAL's reason for not opening ``path``, in fewer words (its own path left out)."""
    if path.exists() and path.is_file() and path.stat().st_size == 0:
        return "an empty file (0 bytes)"
    text = str(exc).replace(f"'{path}' ", "").replace(f"{path.name}: ", "")
    if "not recognized as being in a supported file format" in text:
        return "a file in no raster format GDAL knows (a vector layer, or another kind of file?)"
    return f"GDAL: {text}"


def raster_crs(src, path: Path, key: str):
    """The CRS of raster ``src``; a raster without one, or with a local (engineering) CRS not
    tied to the Earth, is a :class:`SpatialError`."""
    if src.crs is None:
        raise SpatialError(
            "raster has no coordinate reference system",
            source=path,
            location=f"key {key!r}",
            expected="a GeoTIFF with a CRS",
            found="none",
        )
    if CRS.from_wkt(src.crs.to_wkt()).geodetic_crs is None:
        raise SpatialError(
            "raster has a local (engineering) coordinate reference system, not tied to the Earth",
            source=path,
            location=f"key {key!r}",
            expected="a projected CRS (e.g. the local UTM zone); georeference a site grid "
            "before use",
            found=f"CRS {CRS.from_wkt(src.crs.to_wkt()).name!r}",
        )
    return src.crs


def alignment_problem(grid: Grid, src) -> tuple[str, str] | None:
    """Why raster ``src`` is not aligned with ``grid`` (expected, found), or None when it is."""
    if CRS.from_wkt(src.crs.to_wkt()) != CRS.from_wkt(grid.crs.to_wkt()):
        return f"CRS {grid.crs.to_string()} (as {grid.source.name})", f"CRS {src.crs.to_string()}"
    t, g = src.transform, grid.transform
    if t.b != 0 or t.d != 0:
        return (
            f"a grid without rotation or shear, as {grid.source.name}",
            f"a rotated or sheared grid (rotation terms {t.b:g}, {t.d:g} in the geotransform)",
        )
    if (t.e > 0) != (g.e > 0) or (t.a > 0) != (g.a > 0):
        return f"{_orientation(g)}, as {grid.source.name}", _orientation(t)
    same_size = math.isclose(t.a, g.a, rel_tol=1e-9) and math.isclose(t.e, g.e, rel_tol=1e-9)
    if not same_size:
        return (
            f"cells of {g.a:g} × {-g.e:g} (as {grid.source.name})",
            f"cells of {t.a:g} × {-t.e:g}",
        )
    col, row = (t.c - g.c) / g.a, (t.f - g.f) / g.e
    if abs(col - round(col)) > ALIGNMENT_TOLERANCE_CELLS or (
        abs(row - round(row)) > ALIGNMENT_TOLERANCE_CELLS
    ):
        return (
            f"cell edges on those of {grid.source.name} (origin {g.c:.10g}, {g.f:.10g})",
            f"origin {t.c:.10g}, {t.f:.10g}: shifted by {col % 1:.3f} × {row % 1:.3f} of a cell",
        )
    return None


def _orientation(transform: Affine) -> str:
    """Which way the rows and columns of a grid without rotation run, in words."""
    up = "north-up" if transform.e < 0 else "south-up"
    rows = "north to south" if transform.e < 0 else "south to north"
    columns = "west to east" if transform.a > 0 else "east to west"
    return f"a {up} grid (rows from {rows}, columns from {columns})"


@dataclass(frozen=True)
class LayerSpec:
    """A raster layer of the project: its project key and file, and its valid range.

    Values outside ``minimum``–``maximum`` (where given) in cells with data are refused
    with the file, key and cell named; ``meaning`` says what the values are.
    """

    key: str
    path: Path
    minimum: float | None = None
    maximum: float | None = None
    meaning: str = ""
    categorical: bool = False  # codes, not quantities: only ever resampled by nearest cell

    @classmethod
    def for_key(cls, key: str, path: Path) -> LayerSpec:
        """The spec of project key ``key`` with the valid range of its kind of layer."""
        if key in CATEGORICAL_KEYS:
            return cls(key, path, meaning=CATEGORICAL_KEYS[key], categorical=True)
        for prefix, (low, high, meaning) in VALUE_RANGES.items():
            if key.startswith(prefix):
                return cls(key, path, low, high, meaning)
        return cls(key, path)


VALUE_RANGES = {
    "rasters.biomass.": (0.0, 100_000.0, "dry biomass in kg/ha"),
    "availability.snow_depth": (0.0, 10_000.0, "snow depth in cm"),
    "availability.slope": (0.0, 10_000.0, "slope in percent"),
    "availability.distance_to_water": (0.0, 1e7, "distance to water in m"),
}
"""Physically possible values of each kind of layer (the same bounds as the plots table's
100,000 kg/ha for biomass; the others only catch wrong units or corrupt files)."""
CATEGORICAL_KEYS = {"rasters.strata.raster": "integer stratum codes"}
"""Layers of codes: read as they are and resampled (when asked) by the nearest cell only."""


def grid_windows(grid: Grid, window_size: int | None = None) -> list[Window]:
    """Windows covering the grid, aligned to its blocks, of about a fixed number of cells.

    Tiled rasters are read in squares of ``window_size`` cells a side (rounded to whole
    blocks); striped rasters (blocks as wide as the raster) in full-width strips of about
    ``window_size²`` cells. The number of cells per window, hence memory, does not depend on
    the raster's size.
    """
    cells = window_size**2 if window_size else DEFAULT_WINDOW_CELLS
    block_rows, block_cols = grid.block_shape
    if block_cols >= grid.width:
        rows = max(block_rows, (cells // grid.width) // block_rows * block_rows, 1)
        cols = grid.width
    else:
        side = max(1, int(math.sqrt(cells)))
        rows = max(block_rows, side // block_rows * block_rows)
        cols = max(block_cols, side // block_cols * block_cols)
    return [
        Window(c, r, min(cols, grid.width - c), min(rows, grid.height - r))
        for r in range(0, grid.height, rows)
        for c in range(0, grid.width, cols)
    ]


class ShapeBurner:
    """Burns polygons into windows of the grid: each cell takes the value of the polygon that
    holds its centre (``fill`` where none does).

    Polygons are selected per window with an STR-tree and clipped to the window (GEOS) before
    GDAL rasterises them, so each window handles only its own vertices.
    """

    def __init__(self, geometries, values, dtype, fill: int = 0) -> None:
        self.geometries = np.asarray(geometries, dtype=object)
        self.values = np.asarray(values)
        self.dtype = dtype
        self.fill = fill
        self.tree = shapely.STRtree(self.geometries)

    def burn(self, window: Window, grid: Grid, out: np.ndarray | None = None) -> np.ndarray:
        """The polygons' values in the cells of ``window`` (into ``out`` when given)."""
        shape = (int(window.height), int(window.width))
        if out is None:
            out = np.empty(shape, dtype=self.dtype)
        out.fill(self.fill)
        west, south, east, north = grid.window_bounds(window)
        pad_x, pad_y = abs(grid.transform.a), abs(grid.transform.e)
        clip = (west - pad_x, south - pad_y, east + pad_x, north + pad_y)
        hits = self.tree.query(shapely.box(*clip))
        if hits.size == 0:
            return out
        clipped = shapely.clip_by_rect(self.geometries[hits], *clip)
        parts, owner = shapely.get_parts(clipped, return_index=True)
        polygonal = shapely.get_type_id(parts) == 3
        if not polygonal.any():
            return out
        shapes = zip(parts[polygonal], self.values[hits][owner[polygonal]].tolist())
        return rasterio.features.rasterize(
            shapes,
            out=out,
            transform=grid.window_transform(window),
            all_touched=False,
        )


def streaming_env() -> rasterio.Env:
    """GDAL settings while streaming: a small fixed block cache."""
    return rasterio.Env(GDAL_CACHEMAX=GDAL_CACHE_MB)
