"""The temporary cell file of the grid path, between its two passes.

The first pass (:func:`nutricap.landscape.grid.window_pass.stream_windows`) keeps each cell's key
and the forage the availability rules left in it [kg/ha] in a :class:`CellCache`; the density
pass (:func:`nutricap.landscape.grid.outputs.write_capacity_density`) reads them back window
by window, so the input rasters are read only once and the cells are never all in memory.
The worker threads write their own chunks at offsets known in advance (``os.pwrite``).

The file bypasses the operating system's page cache where the file system allows it (Linux
``O_DIRECT``): the cells go from a few reused buffers to the disk and back, instead of taking
as much fresh memory as the file is large (4 + 4 × classes bytes per cell). On the virtual
machines of the benchmarks memory touched for the first time costs 2–7 s of CPU per GB (the
hypervisor hands the pages over one by one), several times the cost of the disk transfer
(benchmarks/README.md); at 1e9 cells the file would not fit in memory at all. Elsewhere
(tmpfs, systems without ``O_DIRECT``) it is an ordinary file.
"""

from __future__ import annotations

import errno
import mmap
import os
import shutil
import tempfile
import threading
import weakref
from collections.abc import Callable, Iterator
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path

import numpy as np
from rasterio.windows import Window

KeepCells = Callable[[int, np.ndarray, np.ndarray], None]
"""Called with (first cell of the chunk in the window, keys, forage left (classes, cells))."""
ChunkRows = Callable[[int, int], list[tuple[int, int]]]
"""(window height, width) → the (first, last) row ranges of its chunks, as the first pass
computes them."""
Chunk = tuple[int, np.ndarray, np.ndarray]
"""(first cell of the chunk in the window, keys (cells,), forage left (classes, cells))."""
PAGE_BYTES = 4096
"""Alignment of every record, buffer and transfer: what direct I/O asks for (the logical block
size of the disk, at most 4096 bytes on the file systems in view)."""
DIRECT_IO = getattr(os, "O_DIRECT", 0)


class CellCache:
    """Per-cell results of the first pass, kept in a temporary file for the density pass.

    One record per chunk of each window (``chunk_rows``), windows in order and each window's
    chunks in row order: the key of every cell of the chunk (int32), then the forage left of
    each class in every cell (float32, class by class), cells in row-major order, padded to a
    multiple of :data:`PAGE_BYTES`. Records sit at offsets known in advance, so the worker
    threads write their chunks themselves, in any order. The file is removed by
    :meth:`remove`, or when the object is garbage-collected, or at exit.
    """

    def __init__(self, windows: list[Window], n_classes: int, chunk_rows: ChunkRows) -> None:
        self.windows = windows
        self.n_classes = n_classes
        self._chunks: list[dict[int, tuple[int, int]]] = []  # first cell → (offset, cells)
        offset = 0
        for window in windows:
            width = int(window.width)
            chunks = {}
            for first, last in chunk_rows(int(window.height), width):
                cells = (last - first) * width
                chunks[first * width] = (offset, cells)
                offset += self.record_bytes(cells)
            self._chunks.append(chunks)
        self.size = offset
        self.folder = Path(tempfile.mkdtemp(prefix="nutricap-cells-"))
        self.path = self.folder / "cells.bin"
        self._finalizer = weakref.finalize(self, shutil.rmtree, self.folder, True)
        self._fd, self.direct = _open_cells(self.path, os.O_WRONLY | os.O_CREAT | os.O_TRUNC)
        if self.direct and not _direct_write_works(self._fd):
            os.close(self._fd)
            self._fd, self.direct = _open_cells(self.path, os.O_WRONLY, direct=False)
        self._local = threading.local()
        self._read_lock = threading.Lock()
        self._read_fd = -1

    def record_bytes(self, cells: int) -> int:
        """Bytes of the record of a chunk of ``cells`` cells, padding included."""
        return _padded(4 * cells * (1 + self.n_classes))

    def writer(self, number: int) -> KeepCells:
        """What keeps the cells of window ``number`` (see :data:`KeepCells`)."""
        chunks = self._chunks[number]

        def keep(first: int, keys: np.ndarray, kg_per_ha: np.ndarray) -> None:
            offset, cells = chunks[first]
            if keys.shape != (cells,) or kg_per_ha.shape != (self.n_classes, cells):
                raise ValueError(f"chunk at cell {first} of window {number} has other cells")
            record = self._buffer(self.record_bytes(cells))
            np.copyto(record[: 4 * cells].view(np.int32), keys, casting="same_kind")
            values = record[4 * cells : 4 * cells * (1 + self.n_classes)].view(np.float32)
            np.copyto(values.reshape(self.n_classes, cells), kg_per_ha, casting="same_kind")
            _write_at(self._fd, record, offset)

        return keep

    def _buffer(self, size: int) -> np.ndarray:
        """The calling thread's page-aligned record buffer, at least ``size`` bytes."""
        buffer = getattr(self._local, "buffer", None)
        if buffer is None or buffer.size < size:
            buffer = self._local.buffer = aligned_bytes(size)
        return buffer[:size]

    def finish(self) -> None:
        """Close the file for writing (every record is written)."""
        if self._fd >= 0:
            os.close(self._fd)
            self._fd = -1

    def window_cells(self, number: int) -> list[Chunk]:
        """The chunks of window ``number`` (see :data:`Chunk`), read into the calling thread's
        reused buffer: valid until the same thread reads another window (for a reader that
        needs windows one at a time, in any order; :meth:`records` reads them all in order)."""
        span = self._span(number)
        buffer = getattr(self._local, "read_buffer", None)
        if buffer is None or buffer.size < span[1]:
            buffer = self._local.read_buffer = aligned_bytes(span[1])
        with self._read_lock:
            if self._read_fd < 0:
                self._read_fd, _ = _open_cells(self.path, os.O_RDONLY, direct=self.direct)
        return self._window_chunks(number, self._read(self._read_fd, span, buffer))

    def records(self) -> Iterator[tuple[Window, list[Chunk]]]:
        """Yield each window with its chunks' cells (see :data:`Chunk`), windows in order.

        A background thread reads the next window while the caller works on this one; the
        arrays are views of one of two reused buffers, valid until the caller asks for the
        window after next (memory does not grow with the raster).
        """
        if not self.windows:
            return
        spans = [self._span(number) for number in range(len(self.windows))]
        largest = max(size for _, size in spans)
        buffers = [aligned_bytes(largest), aligned_bytes(largest)]
        fd, _ = _open_cells(self.path, os.O_RDONLY, direct=self.direct)
        try:
            with ThreadPoolExecutor(max_workers=1, thread_name_prefix="cell-file") as reader:
                pending = reader.submit(self._read, fd, spans[0], buffers[0])
                for number, window in enumerate(self.windows):
                    data = pending.result()
                    if number + 1 < len(self.windows):
                        following = buffers[(number + 1) % 2]
                        pending = reader.submit(self._read, fd, spans[number + 1], following)
                    yield window, self._window_chunks(number, data)
        finally:
            os.close(fd)

    def _span(self, number: int) -> tuple[int, int]:
        """(offset, bytes) of window ``number``'s records in the file."""
        chunks = sorted(self._chunks[number].values())
        start = chunks[0][0]
        end = chunks[-1][0] + self.record_bytes(chunks[-1][1])
        return start, end - start

    def _read(self, fd: int, span: tuple[int, int], buffer: np.ndarray) -> np.ndarray:
        offset, size = span
        data = buffer[:size]
        done = 0
        while done < size:
            got = os.preadv(fd, [memoryview(data[done:])], offset + done)
            if got == 0:
                raise OSError(f"temporary cell file {self.path} is shorter than expected")
            done += got
        return data

    def _window_chunks(self, number: int, data: np.ndarray) -> list[Chunk]:
        chunks = self._chunks[number]
        start = min(offset for offset, _ in chunks.values())
        out = []
        for first, (offset, cells) in chunks.items():
            record = data[offset - start :]
            keys = record[: 4 * cells].view(np.int32)
            kg = record[4 * cells : 4 * cells * (1 + self.n_classes)].view(np.float32)
            out.append((first, keys, kg.reshape(self.n_classes, cells)))
        return out

    def remove(self) -> None:
        """Close the file and delete it."""
        self.finish()
        if self._read_fd >= 0:
            os.close(self._read_fd)
            self._read_fd = -1
        self._finalizer()


def aligned_bytes(size: int) -> np.ndarray:
    """``size`` bytes of anonymous memory starting on a page boundary (as direct I/O needs)."""
    memory = mmap.mmap(-1, _padded(max(size, 1)))
    return np.frombuffer(memory, dtype=np.uint8, count=size)


def _padded(size: int) -> int:
    return -(-size // PAGE_BYTES) * PAGE_BYTES


def _open_cells(path: Path, flags: int, direct: bool = True) -> tuple[int, bool]:
    """Open the cell file with direct I/O when asked and possible; returns (fd, direct)."""
    if direct and DIRECT_IO:
        try:
            return os.open(path, flags | DIRECT_IO, 0o600), True
        except OSError as error:  # tmpfs and some other file systems refuse O_DIRECT
            if error.errno != errno.EINVAL:
                raise
    return os.open(path, flags, 0o600), False


def _direct_write_works(fd: int) -> bool:
    """Whether an aligned page can be written through ``fd`` (some file systems accept the
    ``O_DIRECT`` flag and refuse the writes); the page is overwritten by the first record."""
    try:
        _write_at(fd, aligned_bytes(PAGE_BYTES), 0)
    except OSError as error:
        if error.errno != errno.EINVAL:
            raise
        return False
    return True


def _write_at(fd: int, data: np.ndarray, offset: int) -> None:
    """Write a contiguous byte array at ``offset`` of file ``fd`` (all of it)."""
    view = memoryview(data)
    while view:
        written = os.pwrite(fd, view, offset)
        view, offset = view[written:], offset + written
