"""Raster layers read on the grid, window by window.

An aligned raster is read directly; a misaligned one is refused, or resampled onto the grid
when the project asks for it (``resample = "nearest" | "bilinear" | "average"``, by GDAL's
warper). Nodata is honoured everywhere: a band's nodata value, NaN, and a GDAL per-dataset mask
all mark cells without data; values with data are checked against the layer's possible range
(:class:`~nutricap.landscape.grid.rasters.LayerSpec`). The grid itself, its windows and the
polygons burnt into them are in :mod:`nutricap.landscape.grid.rasters`.
"""

from __future__ import annotations

import threading

import numpy as np
from rasterio.enums import MaskFlags, Resampling
from rasterio.errors import RasterioIOError
from rasterio.vrt import WarpedVRT
from rasterio.windows import Window

from nutricap.errors import SpatialError
from nutricap.landscape.grid.rasters import (
    Grid,
    LayerSpec,
    Scratch,
    alignment_problem,
    open_raster,
    raster_crs,
)

RESAMPLING = {
    "nearest": Resampling.nearest,
    "bilinear": Resampling.bilinear,
    "average": Resampling.average,
}


class GridLayer:
    """One raster read on the grid, window by window (not thread-safe: one per thread).

    An aligned raster is read directly (with its offset from the grid); with ``resample`` not
    ``"none"`` a misaligned raster is warped onto the grid by GDAL with that method.
    """

    def __init__(self, spec: LayerSpec, grid: Grid, resample: str) -> None:
        self.spec = spec
        self.src = open_raster(spec.path, spec.key)
        raster_crs(self.src, spec.path, spec.key)
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
        scale, offset = float(self.src.scales[0]), float(self.src.offsets[0])
        if (scale, offset) != (1.0, 0.0) and not self.spec.categorical:
            self.close()
            raise SpatialError(
                "raster stores its values scaled (GDAL scale/offset metadata), which is not read",
                source=path,
                location=f"key {key!r}",
                expected=f"the values themselves ({self.spec.meaning or 'unscaled'}), e.g. "
                "written out with gdal_translate -unscale -ot Float32",
                found=f"scale {scale:g}, offset {offset:g}",
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
        """The error of a window GDAL cannot read: a truncated or corrupt file, or a VRT
        whose source file is missing or unreadable (GDAL's words name the file)."""
        detail = str(exc.__cause__ or exc)
        if self.spec.path.suffix.lower() == ".vrt":
            problem = "a source file of the VRT is missing, unreadable or corrupt"
            expected = "every source file the VRT names, complete and readable"
        else:
            problem = "the file is truncated or corrupt"
            expected = "a complete GeoTIFF (copy or export it again)"
        return SpatialError(
            f"cannot read the raster's cells: {problem}",
            source=self.spec.path,
            location=f"key {self.spec.key!r}, cells from row {int(inner.row_off)}, "
            f"column {int(inner.col_off)}",
            expected=expected,
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
