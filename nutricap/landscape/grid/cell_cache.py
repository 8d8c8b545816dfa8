"""The temporary cell file of the grid path, between its two passes.

The first pass (:func:`nutricap.landscape.grid.window_pass.stream_windows`) keeps each cell's key
and the forage the availability rules left in it [kg/ha] in a :class:`CellCache`; the density
pass (:func:`nutricap.landscape.grid.outputs.write_capacity_density`) reads them back window
by window, so the input rasters are read only once and the cells are never all in memory.
The worker threads write their own chunks at offsets known in advance (``os.pwrite``).
"""

from __future__ import annotations

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

        The arrays share one buffer: they are valid until the next window is yielded.
        """
        n_classes = self.n_classes
        buffer = bytearray(int(4 * self.cells.max(initial=0) * (1 + n_classes)))
        with open(self.path, "rb", buffering=0) as stream:
            for window in self.windows:
                n = int(window.height) * int(window.width)
                record = memoryview(buffer)[: 4 * n * (1 + n_classes)]
                _read_into(stream, record, self.path)
                keys = np.frombuffer(record, dtype=np.int32, count=n)
                kg = np.frombuffer(record, dtype=np.float32, offset=4 * n)
                yield window, keys, kg.reshape(n_classes, n)

    def remove(self) -> None:
        self._finalizer()


def _read_into(stream, record: memoryview, path: Path) -> None:
    """Fill ``record`` from an unbuffered binary stream (a read may return fewer bytes)."""
    filled = 0
    while filled < len(record):
        count = stream.readinto(record[filled:])
        if not count:
            raise OSError(f"temporary cell file {path} is shorter than expected")
        filled += count


def _write_at(fd: int, array: np.ndarray, offset: int) -> None:
    """Write a contiguous array's bytes at ``offset`` of file ``fd`` (all of them)."""
    data = memoryview(np.ascontiguousarray(array)).cast("B")
    while data:
        written = os.pwrite(fd, data, offset)
        data, offset = data[written:], offset + written
