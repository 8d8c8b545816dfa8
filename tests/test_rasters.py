"""Tests of nutricap.landscape.grid.rasters and .layers: grid checks, windows, windowed reads,
burning polygons.

Check values come from SI definitions (cell areas), pyproj (unit of a CRS), numpy (nearest
resampling of a 2× coarser grid is a repeat), and shapely's point-in-polygon test on cell
centres (GDAL's rasteriser must agree with it). Raster values are invented for the example.
"""

from __future__ import annotations

import numpy as np
import pytest
import rasterio
import shapely
from rasterio.transform import Affine, from_origin
from shapely.geometry import Polygon

from nutricap.errors import SpatialError
from nutricap.landscape.grid.layers import GridLayer, LayerStack
from nutricap.landscape.grid.rasters import LayerSpec, ShapeBurner, grid_windows, read_grid

WEST, NORTH, CELL = 300_000.0, 5_000_000.0, 30.0


def write(path, values, *, transform=None, crs="EPSG:32612", nodata=None, tiled=True, mask=None):
    transform = transform or from_origin(WEST, NORTH, CELL, CELL)
    profile = {"driver": "GTiff", "height": values.shape[0], "width": values.shape[1],
               "count": 1, "dtype": values.dtype.name, "crs": crs, "transform": transform,
               "nodata": nodata}  # fmt: skip
    if tiled:
        profile.update(tiled=True, blockxsize=16, blockysize=16)
    with rasterio.open(path, "w", **profile) as dst:
        dst.write(values, 1)
        if mask is not None:
            dst.write_mask(mask)
    return path


def field(rows=40, cols=60):
    return np.arange(rows * cols, dtype=np.float32).reshape(rows, cols)


def test_grid_cell_area(tmp_path):
    grid = read_grid(write(tmp_path / "a.tif", field()), "rasters.biomass.a")
    # 30 m × 30 m = 900 m² = 0.09 ha (SI definitions).
    assert grid.cell_area_ha == pytest.approx(0.09)
    assert (grid.width, grid.height, grid.block_shape) == (60, 40, (16, 16))


def test_grid_in_feet(tmp_path):
    # EPSG:2227 (California zone 3) is in US survey feet: 1200/3937 m each (pyproj).
    path = write(tmp_path / "ft.tif", field(), crs="EPSG:2227",
                 transform=from_origin(6_000_000, 2_000_000, 100, 100))  # fmt: skip
    grid = read_grid(path, "k")
    assert grid.cell_area_ha == pytest.approx((100 * 1200 / 3937) ** 2 / 10_000, rel=1e-9)


def test_geographic_grid_is_refused(tmp_path):
    path = write(tmp_path / "geo.tif", field(), crs="EPSG:4326",
                 transform=from_origin(-110, 45, 0.001, 0.001))  # fmt: skip
    with pytest.raises(SpatialError, match="geographic CRS.*projected CRS"):
        read_grid(path, "rasters.biomass.a")


def test_rotated_grid_is_refused(tmp_path):
    path = write(tmp_path / "rot.tif", field(), transform=Affine(30, 5, WEST, 5, -30, NORTH))
    with pytest.raises(SpatialError, match="rotated"):
        read_grid(path, "k")


def _layer(tmp_path, grid_path, other_path, resample="none"):
    grid = read_grid(grid_path, "grid")
    return grid, GridLayer(LayerSpec("availability.snow_depth", other_path), grid, resample)


def test_misaligned_layer_is_refused_with_its_key(tmp_path):
    grid_path = write(tmp_path / "grid.tif", field())
    shifted = write(
        tmp_path / "shift.tif", field(), transform=from_origin(WEST + 15, NORTH, 30, 30)
    )
    with pytest.raises(SpatialError, match=r"key 'availability.snow_depth'.*not on the grid.*"
                                           r"shifted by 0.500"):  # fmt: skip
        _layer(tmp_path, grid_path, shifted)


def test_crs_mismatch_is_refused(tmp_path):
    grid_path = write(tmp_path / "grid.tif", field())
    other = write(tmp_path / "other.tif", field(), crs="EPSG:32613")
    with pytest.raises(SpatialError, match=r"expected CRS EPSG:32612.*found CRS EPSG:32613"):
        _layer(tmp_path, grid_path, other)


def test_different_cell_size_is_refused(tmp_path):
    grid_path = write(tmp_path / "grid.tif", field())
    coarse = write(
        tmp_path / "coarse.tif", field(20, 30), transform=from_origin(WEST, NORTH, 60, 60)
    )
    with pytest.raises(SpatialError, match="cells of 30 × 30.*found cells of 60 × 60"):
        _layer(tmp_path, grid_path, coarse)


def test_nearest_resampling_of_a_coarser_layer(tmp_path):
    grid_path = write(tmp_path / "grid.tif", field())
    coarse_values = field(20, 30)
    coarse = write(
        tmp_path / "coarse.tif", coarse_values, transform=from_origin(WEST, NORTH, 60, 60)
    )
    grid, layer = _layer(tmp_path, grid_path, coarse, resample="nearest")
    values, valid = layer.read(grid_windows(grid, 64)[0])
    # Each 60 m cell covers 2 × 2 cells of 30 m: nearest resampling repeats it (numpy).
    np.testing.assert_array_equal(values, np.repeat(np.repeat(coarse_values, 2, 0), 2, 1))
    assert valid.all() and layer.resampled_by == "nearest"
    layer.close()


def test_aligned_layer_with_a_smaller_extent(tmp_path):
    grid_path = write(tmp_path / "grid.tif", field())
    part = field(10, 20) + 1000
    # Starts 5 rows down and 7 columns right of the grid's corner, on the same cell edges.
    small = write(
        tmp_path / "small.tif", part, transform=from_origin(WEST + 7 * 30, NORTH - 5 * 30, 30, 30)
    )
    grid, layer = _layer(tmp_path, grid_path, small)
    values, valid = layer.read(grid_windows(grid, 64)[0])
    assert valid.sum() == part.size
    np.testing.assert_array_equal(values[5:15, 7:27], part)
    assert not valid[:5].any() and not valid[:, :7].any()
    layer.close()


def test_nodata_value_nan_and_mask_are_all_honoured(tmp_path):
    grid_path = write(tmp_path / "grid.tif", field())
    values = field()
    values[0, 0] = -9999.0
    values[1, 1] = np.nan
    mask = np.full(values.shape, 255, dtype=np.uint8)
    mask[2, 2] = 0
    with_nodata = write(tmp_path / "nd.tif", values, nodata=-9999.0)
    with_mask = write(tmp_path / "mask.tif", field(), mask=mask)
    grid = read_grid(grid_path, "grid")
    window = grid_windows(grid, 64)[0]
    read_nd, ok_nd = GridLayer(LayerSpec("a", with_nodata), grid, "none").read(window)
    assert not ok_nd[0, 0] and not ok_nd[1, 1] and ok_nd.sum() == values.size - 2
    _, ok_mask = GridLayer(LayerSpec("b", with_mask), grid, "none").read(window)
    assert not ok_mask[2, 2] and ok_mask.sum() == values.size - 1


@pytest.mark.parametrize("size", [16, 32, 50, 1000])
def test_windows_cover_every_cell_once(tmp_path, size):
    grid = read_grid(write(tmp_path / "grid.tif", field(37, 53)), "grid")
    seen = np.zeros((37, 53), dtype=int)
    for window in grid_windows(grid, size):
        seen[window.toslices()] += 1
        assert window.row_off % 16 == 0 and window.col_off % 16 == 0  # block-aligned
    assert (seen == 1).all()


def test_striped_rasters_are_read_in_full_width_strips(tmp_path):
    grid = read_grid(write(tmp_path / "strips.tif", field(100, 60), tiled=False), "grid")
    windows = grid_windows(grid, 30)
    assert all(window.width == 60 for window in windows)
    assert sum(window.height for window in windows) == 100


def test_burnt_polygon_agrees_with_cell_centres(tmp_path):
    grid = read_grid(write(tmp_path / "grid.tif", field()), "grid")
    # A polygon whose edges cut through cells (invented for the example).
    polygon = Polygon([(WEST + 37, NORTH - 11), (WEST + 1411, NORTH - 95),
                       (WEST + 1203, NORTH - 1150), (WEST + 88, NORTH - 777)])  # fmt: skip
    burner = ShapeBurner([polygon], [7], "int64")
    burnt = np.zeros((40, 60), dtype=np.int64)
    for window in grid_windows(grid, 16):
        burnt[window.toslices()] = burner.burn(window, grid)
    rows, cols = np.mgrid[0:40, 0:60]
    x, y = WEST + (cols + 0.5) * CELL, NORTH - (rows + 0.5) * CELL
    inside = shapely.contains_xy(polygon, x, y)  # independent point-in-polygon (shapely/GEOS)
    np.testing.assert_array_equal(burnt == 7, inside)
    assert inside.sum() > 100


def test_burnt_polygon_on_a_south_up_grid_agrees_with_cell_centres(tmp_path):
    # Rows from south to north (positive row step): GEOS once refused the window's clip box.
    south = NORTH - 40 * CELL
    grid = read_grid(
        write(tmp_path / "up.tif", field(), transform=Affine(CELL, 0, WEST, 0, CELL, south)), "grid"
    )
    polygon = Polygon([(WEST + 37, south + 11), (WEST + 1411, south + 95),
                       (WEST + 1203, south + 1150), (WEST + 88, south + 777)])  # fmt: skip
    burner = ShapeBurner([polygon], [7], "int64")
    burnt = np.zeros((40, 60), dtype=np.int64)
    for window in grid_windows(grid, 16):
        burnt[window.toslices()] = burner.burn(window, grid)
    rows, cols = np.mgrid[0:40, 0:60]
    x, y = WEST + (cols + 0.5) * CELL, south + (rows + 0.5) * CELL
    inside = shapely.contains_xy(polygon, x, y)  # independent point-in-polygon (shapely/GEOS)
    np.testing.assert_array_equal(burnt == 7, inside)
    assert inside.sum() > 100


def test_layer_stack_reads_every_layer(tmp_path):
    grid_path = write(tmp_path / "grid.tif", field())
    other = write(tmp_path / "other.tif", field() * 2)
    grid = read_grid(grid_path, "grid")
    specs = [LayerSpec("a", grid_path), LayerSpec("b", other)]
    with LayerStack(specs, grid, "none") as stack:
        layers = stack.read(grid_windows(grid, 16)[1])
    np.testing.assert_array_equal(layers["b"][0], 2 * layers["a"][0])
    assert stack.resampled == {"a": None, "b": None}


def test_burning_in_worker_threads_agrees_with_the_main_thread(tmp_path):
    from concurrent.futures import ThreadPoolExecutor

    grid = read_grid(write(tmp_path / "grid.tif", field()), "grid")
    shapes = [
        shapely.box(WEST + 40 * i, NORTH - 900, WEST + 40 * i + 333, NORTH - 20) for i in range(5)
    ]
    burner = ShapeBurner(shapes, [1, 2, 3, 4, 5], "int32")
    windows = grid_windows(grid, 16)
    alone = [burner.burn(window, grid) for window in windows]
    with ThreadPoolExecutor(max_workers=2) as pool:
        threaded = list(pool.map(lambda window: burner.burn(window, grid), windows))
    for one, other in zip(alone, threaded):
        np.testing.assert_array_equal(one, other)
