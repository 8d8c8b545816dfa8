"""Raster layers on one grid: checks, windows, windowed reads and polygons burnt per window.

The grid is defined by one raster (the first layer of the project). Every other layer must share
its CRS and cell size and be aligned with it (cell edges on the same lines; the extent may
differ, cells off a layer's extent have no data). A layer that is not aligned is refused, or
resampled onto the grid when the project asks for it (``resample = "nearest" | "bilinear" |
"average"``, by GDAL's warper).

Rasters are read in windows aligned to the grid layer's blocks, so that memory does not grow
with the raster. Nodata is honoured everywhere: a band's nodata value, NaN, and a GDAL
per-dataset mask all mark cells without data. Polygons (units, strata, exclusion masks) are
burnt per window by GDAL's rasteriser: a cell belongs to a polygon when its centre lies in it.
"""

from __future__ import annotations

import math
import threading
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
from rasterio.enums import MaskFlags, Resampling
from rasterio.errors import NotGeoreferencedWarning, RasterioIOError
from rasterio.vrt import WarpedVRT
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
RESAMPLING = {
    "nearest": Resampling.nearest,
    "bilinear": Resampling.bilinear,
    "average": Resampling.average,
}


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
        crs = _raster_crs(src, path, key)
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
            f"cannot read raster: {exc}", source=path, location=f"key {key!r}"
        ) from None


def _raster_crs(src, path: Path, key: str):
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


class GridLayer:
    """One raster read on the grid, window by window (not thread-safe: one per thread).

    An aligned raster is read directly (with its offset from the grid); with ``resample`` not
    ``"none"`` a misaligned raster is warped onto the grid by GDAL with that method.
    """

    def __init__(self, spec: LayerSpec, grid: Grid, resample: str) -> None:
        self.spec = spec
        self.src = open_raster(spec.path, spec.key)
        _raster_crs(self.src, spec.path, spec.key)
        self.resampled_by: str | None = None
        problem = alignment_problem(grid, self.src)
        self.offset = (0, 0)
        if problem is None:
            t = self.src.transform
            self.offset = (
                round((t.f - grid.transform.f) / grid.transform.e),
                round((t.c - grid.transform.c) / grid.transform.a),
            )
            self.dataset = self.src
        elif resample == "none":
            self.src.close()
            expected, found = problem
            raise SpatialError(
                "raster is not on the grid of the first raster layer",
                source=spec.path,
                location=f"key {spec.key!r}",
                expected=expected + "; or set resample in [rasters] to resample it",
                found=found,
            )
        else:
            method = "nearest" if spec.categorical else resample
            self.dataset = WarpedVRT(
                self.src,
                crs=grid.crs,
                transform=grid.transform,
                width=grid.width,
                height=grid.height,
                resampling=RESAMPLING[method],
            )
            self.resampled_by = method
        self._check_bands_and_type()
        if spec.categorical and np.dtype(self.src.dtypes[0]).kind not in "ui":
            self.close()
            raise SpatialError(
                "raster of codes holds non-integer values",
                source=spec.path,
                location=f"key {spec.key!r}",
                expected=f"an integer raster ({spec.meaning})",
                found=f"data type {self.src.dtypes[0]}",
            )
        self.nodata = self.dataset.nodata
        flags = self.dataset.mask_flag_enums[0]
        self.per_dataset_mask = MaskFlags.per_dataset in flags or MaskFlags.alpha in flags
        self.is_float = np.dtype(self.dataset.dtypes[0]).kind == "f"

    def _check_bands_and_type(self) -> None:
        """Refuse rasters whose values cannot be one number per cell."""
        path, key = self.spec.path, self.spec.key
        if self.src.count != 1:
            self.close()
            raise SpatialError(
                f"raster has {self.src.count} bands",
                source=path,
                location=f"key {key!r}",
                expected="a single-band raster (one value per cell)",
                found=f"{self.src.count} bands; save the band you mean as its own GeoTIFF",
            )
        kind = np.dtype(self.src.dtypes[0]).kind
        if kind not in "uif":
            self.close()
            raise SpatialError(
                "raster values are not real numbers",
                source=path,
                location=f"key {key!r}",
                expected="an integer or floating-point raster",
                found=f"data type {self.src.dtypes[0]}",
            )

    def read(self, window: Window, scratch: Scratch | None = None) -> tuple[np.ndarray, np.ndarray]:
        """Values (float32) and validity (bool) of the grid cells in ``window``.

        With ``scratch``, a window inside the layer's extent is read into its buffers
        (valid until this layer reads again in the same thread).
        """
        shape = (int(window.height), int(window.width))
        inner, target = self._intersection(window)
        if inner is None:
            return np.zeros(shape, dtype=np.float32), np.zeros(shape, dtype=bool)
        try:
            if scratch is not None and (int(inner.height), int(inner.width)) == shape:
                part = scratch.take(f"values {self.spec.key}", shape, np.float32)
                self.dataset.read(1, window=inner, out=part)
            else:
                part = self.dataset.read(1, window=inner, out_dtype=np.float32)
                scratch = None
            ok = self._valid(part, inner, scratch)
        except RasterioIOError as exc:
            raise self._unreadable(inner, exc) from None
        self._check_range(part, ok, inner)
        if part.shape == shape:
            return part, ok
        values = np.zeros(shape, dtype=np.float32)
        valid = np.zeros(shape, dtype=bool)
        values[target] = part
        valid[target] = ok
        return values, valid

    def _unreadable(self, inner: Window, exc: RasterioIOError) -> SpatialError:
        """The error of a window GDAL cannot read: a truncated or corrupt file."""
        detail = str(exc.__cause__ or exc)
        return SpatialError(
            "cannot read the raster's cells: the file is truncated or corrupt",
            source=self.spec.path,
            location=f"key {self.spec.key!r}, cells from row {int(inner.row_off)}, "
            f"column {int(inner.col_off)}",
            expected="a complete GeoTIFF (copy or export it again)",
            found=f"GDAL: {detail.removeprefix(self.spec.path.name + ', ')}",
        )

    def _check_range(self, part: np.ndarray, ok: np.ndarray, inner: Window) -> None:
        """Refuse a value outside the layer's possible range, naming the first such cell."""
        spec = self.spec
        if spec.minimum is None or part.size == 0:
            return
        if part.min() >= spec.minimum and part.max() <= spec.maximum:
            return  # every value in range, nodata included (no masked pass needed)
        low, high = part.min(initial=np.inf, where=ok), part.max(initial=-np.inf, where=ok)
        if low >= spec.minimum and high <= spec.maximum:
            return
        bad = ok & ((part < spec.minimum) | (part > spec.maximum))
        row, col = (int(i) for i in np.argwhere(bad)[0])
        raise SpatialError(
            "raster value out of range",
            source=spec.path,
            location=(
                f"key {spec.key!r}, cell row {int(inner.row_off) + row}, "
                f"column {int(inner.col_off) + col}"
            ),
            expected=f"{spec.meaning} between {spec.minimum:g} and {spec.maximum:g}",
            found=f"{float(part[row, col]):g}",
        )

    def _valid(self, part: np.ndarray, inner: Window, scratch: Scratch | None) -> np.ndarray:
        """Cells with data: not the nodata value, not NaN, not masked."""
        if scratch is None:
            ok = np.ones(part.shape, dtype=bool)
        else:
            ok = scratch.take(f"valid {self.spec.key}", part.shape, bool)
            ok.fill(True)
        if self.nodata is not None and not np.isnan(self.nodata):
            np.not_equal(part, np.float32(self.nodata), out=ok)
        if self.is_float and np.isnan(np.add.reduce(part, axis=None)):  # a NaN somewhere
            ok &= ~np.isnan(part)
        if self.per_dataset_mask:
            ok &= self.dataset.read_masks(1, window=inner) > 0
        return ok

    def _intersection(self, window: Window):
        """The part of ``window`` this layer covers: (layer window, slices into the window)."""
        row_off, col_off = self.offset
        r0, c0 = int(window.row_off) - row_off, int(window.col_off) - col_off
        r1, c1 = r0 + int(window.height), c0 + int(window.width)
        rr0, cc0 = max(r0, 0), max(c0, 0)
        rr1, cc1 = min(r1, self.dataset.height), min(c1, self.dataset.width)
        if rr0 >= rr1 or cc0 >= cc1:
            return None, None
        inner = Window(cc0, rr0, cc1 - cc0, rr1 - rr0)
        target = (slice(rr0 - r0, rr1 - r0), slice(cc0 - c0, cc1 - c0))
        return inner, target

    def close(self) -> None:
        if self.dataset is not self.src:
            self.dataset.close()
        self.src.close()


class LayerStack:
    """Every raster layer of a run, opened once per reading thread.

    Opening in the constructor checks every layer against the grid at once (errors are
    raised there, in the calling thread).
    """

    def __init__(self, specs: list[LayerSpec], grid: Grid, resample: str) -> None:
        self.specs = specs
        self.grid = grid
        self.resample = resample
        self._local = threading.local()
        self._opened: list[GridLayer] = []
        self._lock = threading.Lock()
        self.resampled = {layer.spec.key: layer.resampled_by for layer in self._layers()}

    def _layers(self) -> list[GridLayer]:
        layers = getattr(self._local, "layers", None)
        if layers is None:
            layers = []
            try:
                for spec in self.specs:
                    layers.append(GridLayer(spec, self.grid, self.resample))
            except BaseException:
                for layer in layers:
                    layer.close()
                raise
            self._local.layers = layers
            with self._lock:
                self._opened.extend(layers)
        return layers

    def read(
        self, window: Window, scratch: Scratch | None = None
    ) -> dict[str, tuple[np.ndarray, np.ndarray]]:
        """Values and validity of every layer in ``window``, by key (see :meth:`GridLayer.read`)."""
        return {layer.spec.key: layer.read(window, scratch) for layer in self._layers()}

    def close(self) -> None:
        with self._lock:
            for layer in self._opened:
                layer.close()
            self._opened.clear()

    def __enter__(self) -> LayerStack:
        return self

    def __exit__(self, *exc) -> None:
        self.close()


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
