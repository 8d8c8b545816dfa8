"""The temporary cell file of the grid path, between its two passes.

The first pass (:func:`nutricap.landscape.grid.window_pass.stream_windows`) keeps each cell's key
and the forage the availability rules left in it [kg/ha] in a :class:`CellCache`; the density
pass (:func:`nutricap.landscape.grid.outputs.write_capacity_density`) reads them back window
by window, so the input rasters are read only once and the cells are never all in memory.
The worker threads write their own chunks at offsets known in advance (``os.pwrite``).
"""

from __future__ import annotations

import mmap
import os
import shutil
import tempfile
import weakref
from collections.abc import Callable, Iterator
from pathlib import Path

import numpy as np
from rasterio.windows import Window

KeepCells = Callable[[int, np.ndarray, np.ndarray], None]
"""Called with (first cell of the chunk in the window, keys, forage left (classes, cells))."""


class CellCache:
    """Per-cell results of the first pass, kept in a temporary file for the density pass.

    One record per window, in the order of the windows: the key of every cell (int32), then
    the forage left of each class in every cell (float32, class by class), cells in the
    window's row-major order. Records sit at offsets known in advance, so the worker threads
    write their chunks themselves, in any order. The file is removed by :meth:`remove`, or
    when the object is garbage-collected, or at exit.
    """

    def __init__(self, windows: list[Window], n_classes: int) -> None:
        self.windows = windows
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

    def records(self) -> Iterator[tuple[Window, np.ndarray, np.ndarray]]:
        """Yield each window with its cells' keys (cells,) and forage left (classes, cells).

        The arrays are views of the file mapped into memory (no copy), one window at a time:
        a window's mapping is released when its arrays are no longer referenced, so memory
        does not grow with the raster.
        """
        n_classes = self.n_classes
        with open(self.path, "rb", buffering=0) as stream:
            size = os.fstat(stream.fileno()).st_size
            for window, offset, n in zip(self.windows, self.offsets, self.cells):
                start = int(offset) - int(offset) % mmap.ALLOCATIONGRANULARITY
                end = int(offset) + 4 * int(n) * (1 + n_classes)
                if end > size:
                    raise OSError(f"temporary cell file {self.path} is shorter than expected")
                mapped = mmap.mmap(
                    stream.fileno(), end - start, offset=start, access=mmap.ACCESS_READ
                )
                at = int(offset) - start
                keys = np.frombuffer(mapped, dtype=np.int32, count=int(n), offset=at)
                kg = np.frombuffer(
                    mapped, dtype=np.float32, count=int(n) * n_classes, offset=at + 4 * int(n)
                )
                del mapped  # unmapped with the last array that views it
                yield window, keys, kg.reshape(n_classes, int(n))

    def remove(self) -> None:
        self._finalizer()


def _write_at(fd: int, array: np.ndarray, offset: int) -> None:
    """Write a contiguous array's bytes at ``offset`` of file ``fd`` (all of them)."""
    data = memoryview(np.ascontiguousarray(array)).cast("B")
    while data:
        written = os.pwrite(fd, data, offset)
        data, offset = data[written:], offset + written
