"""Tests of the raster run's coarse maps (nutricap.landscape.grid.overview and the sums the
first pass takes for them).

The landscape is the small invented one of tests/test_grid_supply.py (300 × 200 cells of
30 m, four units, two strata). The maps are checked against what they summarise, computed
independently: capacity_density.tif read with rasterio and block-averaged with numpy, the
availability report's totals, and the snow rule over whole arrays in float64 with shapely's
cell membership. Block geometry is checked against its definition (blocks of b × b cells from
the grid's origin) written out with numpy.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import rasterio
from affine import Affine
from rasterio.transform import array_bounds
from rasterio.windows import Window
from test_grid_supply import (
    CELL_HA,
    COLS,
    RASTERS,
    ROWS,
    RULES_TEXT,
    SNOW,
    _landscape_with_rule_layers,
    _membership,
    _project,
    _read,
    _strata,
    _units,
    project_text,
)

from nutricap.landscape.grid import overview
from nutricap.landscape.grid.overview import CoarseGrid, block_map
from nutricap.workflow import estimate, run_estimate

# Blocks of 7 cells (a side of at most 43 blocks): they straddle the 64-cell windows of
# RASTERS, and the last column of blocks holds 300 − 42 × 7 = 6 cells.
SIDE = 43
BLOCK = 7


@pytest.fixture(scope="module")
def rules_folder(tmp_path_factory):
    return _landscape_with_rule_layers(tmp_path_factory.mktemp("overview") / "inputs")


@pytest.fixture()
def coarse_7(monkeypatch):
    monkeypatch.setattr(overview, "MAX_BLOCKS_PER_SIDE", SIDE)


def _block_sum(values: np.ndarray, block: int) -> np.ndarray:
    """Σ of a (rows, cols) array over blocks of block × block cells from the origin (numpy)."""
    rows, cols = -(-values.shape[0] // block), -(-values.shape[1] // block)
    padded = np.zeros((rows * block, cols * block))
    padded[: values.shape[0], : values.shape[1]] = values
    return padded.reshape(rows, block, cols, block).sum(axis=(1, 3))


def _maps(result) -> dict:
    return {m.key: m for m in result.grid.overview_maps}


def test_the_coarse_grid_is_the_smallest_block_within_the_side():
    # 10,001 columns: 26 cells a block gives 385 blocks (ceil(10,001 / 26)), 25 would give
    # 401 > 400 (arithmetic of the definition).
    coarse = CoarseGrid.for_shape(9_000, 10_001)
    assert (coarse.block, coarse.rows, coarse.cols) == (26, 347, 385)
    assert CoarseGrid.for_shape(ROWS, COLS) == CoarseGrid(1, ROWS, COLS)  # mapped cell by cell
    assert CoarseGrid.for_shape(1, 1) == CoarseGrid(1, 1, 1)


def test_blocks_of_a_window_follow_the_grid_origin():
    coarse = CoarseGrid.for_shape(200, 300, max_side=SIDE)
    window = Window(64, 128, 64, 40)  # columns 64-127, rows 128-167
    rows, cols = np.divmod(np.arange(40 * 64), 64)
    # Definition: the block of grid cell (r, c) is (r // 7, c // 7).
    block_row, block_col = (rows + 128) // BLOCK, (cols + 64) // BLOCK
    first_row, first_col, n_rows, n_cols = coarse.span(window)
    assert (first_row, first_col) == (block_row.min(), block_col.min())
    assert (n_rows, n_cols) == (block_row.max() - first_row + 1, block_col.max() - first_col + 1)
    local = coarse.local_blocks(window, np.arange(40 * 64))
    np.testing.assert_array_equal(local, (block_row - first_row) * n_cols + block_col - first_col)
    starts = np.arange(64)[coarse.column_starts(window)]
    np.testing.assert_array_equal(starts, np.flatnonzero(np.diff(block_col[:64]) != 0) + 1)


def test_a_south_up_grid_is_mapped_north_up():
    # Rows from south to north (e > 0): the map's first row must be the northern one, over
    # the same ground (bounds from rasterio's array_bounds of the grid).
    grid_transform = Affine(30.0, 0.0, 500_000.0, 0.0, 30.0, 4_790_000.0)
    coarse = CoarseGrid.for_shape(20, 10, max_side=5)  # blocks of 4 cells: 5 × 3
    values = np.arange(15.0).reshape(5, 3)
    drawn = block_map("k", "t", "u", values, coarse, grid_transform, rasterio.CRS.from_epsg(32612))
    np.testing.assert_array_equal(drawn.values, values[::-1])
    assert drawn.transform.e < 0
    south_up = coarse.transform(grid_transform)
    west, south, east, north = array_bounds(5, 3, south_up)
    assert drawn.bounds() == pytest.approx((west, min(south, north), east, max(south, north)))
    assert drawn.crs.to_epsg() == 32612


@pytest.mark.parametrize("blocks", ["cells", "blocks of 7"])
def test_removed_kg_by_block_adds_up_to_the_rules_report(rules_folder, request, blocks):
    """Σ over blocks of each rule's kg per ha × the block's unit area (cells whose centre is
    in a unit, counted with shapely) = availability_rules.csv's 'all units' total."""
    if blocks != "cells":
        request.getfixturevalue("coarse_7")
    block = BLOCK if blocks != "cells" else 1
    result = estimate(_project(rules_folder, project_text(RASTERS, RULES_TEXT)))
    maps = _maps(result)
    report = result.grid.rules_report
    totals = report[report["unit_id"] == "all units"].set_index("rule")["forage_removed_kg"]
    assert set(maps) == {"capacity_density", "standing_forage"} | {
        f"removed_{rule}" for rule in totals.index if rule != "nodata"
    }
    unit_ha = _block_sum((_membership(_units()) >= 0).astype(float), block) * CELL_HA
    for rule, kg in totals.drop("nodata").items():
        layer = maps[f"removed_{rule}"]
        assert layer.units == "kg DM per ha" and layer.values.shape == unit_ha.shape
        np.testing.assert_array_equal(np.isnan(layer.values), unit_ha == 0)
        assert np.nansum(layer.values * unit_ha) == pytest.approx(kg, rel=1e-9)
        assert kg > 0
    gross = maps["standing_forage"].values
    left = result.problem.available_kg.sum()
    # Forage left + Σ removed = standing forage (float32 cells: 1e-5 relative).
    assert np.nansum(gross * unit_ha) == pytest.approx(left + totals.sum(), rel=1e-5)


def test_snow_removal_by_block_equals_numpy_over_whole_arrays(landscape_plain, coarse_7):
    """The snow rule alone, per cell in float64 with shapely's membership (the grid's
    float32 cells: 1e-5 relative)."""
    result = estimate(_project(landscape_plain, project_text(RASTERS, SNOW)))
    units, strata = _membership(_units()), _membership(_strata(True))
    names = ("sage", "shrub", "index", "snow")
    sage, shrub, index, snow = (_read(landscape_plain, name) for name in names)
    model = result.grid.calibration_report.iloc[0]
    margin = 0.1 * (model.index_max - model.index_min)
    forb = np.maximum(
        model.intercept
        + model.slope * np.clip(index, model.index_min - margin, model.index_max + margin),
        0.0,
    )
    # Upland (strata polygon 0) grass (120 + 80 + 0) / 3, lowland (300 + 260) / 2 (PLOTS).
    grass = np.where(strata == 0, 200.0 / 3.0, 280.0)
    heights = {"forb": 10.0, "grass": 30.0, "sage": 60.0, "shrub": 150.0}
    gross = {"forb": forb, "grass": grass, "sage": sage, "shrub": shrub}
    valid = (units >= 0) & (strata >= 0) & np.isfinite(sage)
    removed = sum(
        gross[name] * (1.0 - np.clip(1.0 - snow / heights[name], 0.0, 1.0)) for name in heights
    )
    removed_kg = _block_sum(np.where(valid, removed, 0.0) * CELL_HA, BLOCK)
    unit_ha = _block_sum((units >= 0).astype(float), BLOCK) * CELL_HA
    with np.errstate(invalid="ignore"):
        expected = removed_kg / unit_ha
    got = _maps(result)["removed_snow"].values
    np.testing.assert_allclose(got, expected, rtol=1e-5, atol=1e-6)
    assert np.nanmax(got) > 10.0


def test_capacity_density_map_is_the_block_mean_of_the_written_raster(
    rules_folder, tmp_path, coarse_7
):
    """Block means of capacity_density.tif (rasterio, numpy) over the cells in a unit
    (shapely's cell-centre membership), cells without a density counting 0."""
    out = tmp_path / "results"
    result = run_estimate(_project(rules_folder, project_text(RASTERS, RULES_TEXT)), out)
    layer = _maps(result)["capacity_density"]
    assert layer.units == "animal-days per ha"
    with rasterio.open(out / "capacity_density.tif") as src:
        density = src.read(1, masked=True)
        assert src.tags()["units"] == "animal-days per hectare (NCC)"
    in_unit = _membership(_units()) >= 0
    assert np.ma.getmaskarray(density)[in_unit].any()  # cells without a density count 0
    cells = _block_sum(in_unit.astype(float), BLOCK)
    with np.errstate(invalid="ignore"):
        mean = _block_sum(np.where(in_unit, density.filled(0.0), 0.0), BLOCK) / cells
    np.testing.assert_array_equal(np.isnan(layer.values), cells == 0)
    # The raster's cells are float32 products and sums (about 1e-7 relative each).
    np.testing.assert_allclose(layer.values, mean, rtol=2e-6, atol=1e-9)
    assert np.nanmax(layer.values) > 0
    # Σ map × its unit cells × cell area = the units' NCC (animal-days, capacity_by_unit.csv).
    ncc = pd.read_csv(out / "capacity_by_unit.csv")["ncc_animal_days"].sum()
    assert np.nansum(layer.values * cells) * CELL_HA == pytest.approx(ncc, rel=1e-9)


@pytest.fixture(scope="module")
def landscape_plain(tmp_path_factory):
    from test_grid_supply import write_landscape

    folder = tmp_path_factory.mktemp("plain") / "inputs"
    write_landscape(folder)
    return folder
