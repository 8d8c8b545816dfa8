"""The temporary cell file between the grid's two passes, and the density computed from it."""

from __future__ import annotations

import numpy as np
import pytest
from rasterio.windows import Window

from nutricap.landscape.grid import outputs
from nutricap.landscape.grid.cell_cache import PAGE_BYTES, CellCache, aligned_bytes
from nutricap.landscape.grid.rasters import Scratch

# Window sizes whose records do not fill whole pages (4 B × cells × (1 + classes)).
WINDOWS = [Window(0, 0, 37, 11), Window(37, 0, 5, 11), Window(0, 11, 42, 3)]


def _halves(height: int, width: int) -> list[tuple[int, int]]:
    """Two chunks of rows per window (the first pass's chunks are larger)."""
    return [(0, height // 2), (height // 2, height)]


def _filled_cache(rng, n_classes=3):
    cache = CellCache(WINDOWS, n_classes, _halves)
    written = []
    for number, window in enumerate(WINDOWS):
        width, height = int(window.width), int(window.height)
        cells = width * height
        keys = rng.integers(0, 50, cells).astype(np.int32)
        kg = rng.uniform(0, 500, (n_classes, cells)).astype(np.float32)
        keep = cache.writer(number)
        half = (height // 2) * width  # the two chunks written in reverse order
        keep(half, keys[half:], kg[:, half:])
        keep(0, keys[:half], kg[:, :half])
        written.append((keys, kg))
    cache.finish()
    return cache, written


def _window_cells(chunks, n_classes):
    """A window's keys and forage left, put together from its chunks."""
    chunks = sorted(chunks, key=lambda chunk: chunk[0])
    keys = np.concatenate([chunk_keys for _, chunk_keys, _ in chunks])
    kg = np.concatenate([chunk_kg for _, _, chunk_kg in chunks], axis=1)
    assert kg.shape[0] == n_classes
    return keys, kg


def test_records_give_back_every_window_as_written():
    cache, written = _filled_cache(np.random.default_rng(7))
    try:
        seen = []
        for (window, chunks), (keys_in, kg_in) in zip(cache.records(), written, strict=True):
            keys, kg = _window_cells(chunks, 3)  # before the next window: buffers are reused
            seen.append(window)
            assert np.array_equal(keys, keys_in)
            assert np.array_equal(kg, kg_in)
        assert seen == WINDOWS
    finally:
        cache.remove()


def test_records_are_page_aligned_so_the_page_cache_can_be_bypassed():
    # Linux open(2), "O_DIRECT": the buffer, the offset and the length of each transfer must
    # be multiples of the file system's logical block size (PAGE_BYTES covers the usual ones).
    cache, _ = _filled_cache(np.random.default_rng(10))
    try:
        assert cache.size % PAGE_BYTES == 0
        assert cache.path.stat().st_size == cache.size
        for number in range(len(WINDOWS)):
            offset, size = cache._span(number)
            assert offset % PAGE_BYTES == 0 and size % PAGE_BYTES == 0
        assert aligned_bytes(10).ctypes.data % PAGE_BYTES == 0
    finally:
        cache.remove()


def test_a_chunk_of_other_cells_is_refused():
    cache = CellCache(WINDOWS, 2, _halves)
    try:
        with pytest.raises(ValueError, match="other cells"):
            cache.writer(0)(0, np.zeros(3, np.int32), np.zeros((2, 3), np.float32))
    finally:
        cache.finish()
        cache.remove()


def test_a_truncated_cell_file_is_an_os_error():
    cache, _ = _filled_cache(np.random.default_rng(8))
    try:
        size = cache.path.stat().st_size
        with open(cache.path, "r+b") as stream:
            stream.truncate(size - PAGE_BYTES)
        with pytest.raises(OSError, match="shorter than expected"):
            list(cache.records())
    finally:
        cache.remove()


def test_window_density_in_chunks_is_the_sum_over_classes(monkeypatch):
    # Definition (docstring of write_capacity_density): Σ_c kg_c × coefficient[key, c], in
    # float32 and in class order; nodata at the dump key. Chunks smaller than the window.
    monkeypatch.setattr(outputs, "DENSITY_CHUNK_CELLS", 1000)
    rng = np.random.default_rng(9)
    cells, n_classes, dump = 4321, 4, 30
    keys = rng.integers(0, dump + 1, cells).astype(np.int32)
    kg = rng.uniform(0, 400, (n_classes, cells)).astype(np.float32)
    per_class = rng.uniform(0, 0.01, (n_classes, dump + 1)).astype(np.float32)
    expected = np.zeros(cells, dtype=np.float32)
    for column in range(n_classes):
        expected += per_class[column][keys] * kg[column]
    expected[keys == dump] = outputs.DENSITY_NODATA
    out = np.empty(cells, dtype=np.float32)
    outputs.window_density(keys, kg, per_class, dump, out, Scratch())
    assert np.array_equal(out, expected)
    assert (keys == dump).any() and (out == outputs.DENSITY_NODATA).sum() == (keys == dump).sum()
