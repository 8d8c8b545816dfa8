"""The temporary cell file between the grid's two passes, and the density computed from it."""

from __future__ import annotations

import numpy as np
import pytest
from rasterio.windows import Window

from nutricap.landscape.grid import outputs
from nutricap.landscape.grid.cell_cache import CellCache
from nutricap.landscape.grid.rasters import Scratch

# Window sizes whose records do not start on page boundaries (4 B × cells × (1 + classes)).
WINDOWS = [Window(0, 0, 37, 11), Window(37, 0, 5, 11), Window(0, 11, 42, 3)]


def _filled_cache(rng, n_classes=3):
    cache = CellCache(WINDOWS, n_classes)
    written = []
    for number, window in enumerate(WINDOWS):
        cells = int(window.width * window.height)
        keys = rng.integers(0, 50, cells).astype(np.int32)
        kg = rng.uniform(0, 500, (n_classes, cells)).astype(np.float32)
        keep = cache.writer(number)
        half = cells // 2  # two chunks, written in reverse order (offsets known in advance)
        keep(half, keys[half:], kg[:, half:])
        keep(0, keys[:half], kg[:, :half])
        written.append((keys, kg))
    cache.finish()
    return cache, written


def test_records_give_back_every_window_as_written():
    cache, written = _filled_cache(np.random.default_rng(7))
    try:
        records = list(cache.records())
        assert [window for window, _, _ in records] == WINDOWS
        for (_, keys, kg), (keys_in, kg_in) in zip(records, written):
            assert np.array_equal(keys, keys_in)
            assert np.array_equal(kg, kg_in)
    finally:
        cache.remove()


def test_a_truncated_cell_file_is_an_os_error():
    cache, _ = _filled_cache(np.random.default_rng(8))
    try:
        size = cache.path.stat().st_size
        with open(cache.path, "r+b") as stream:
            stream.truncate(size - 4)
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
