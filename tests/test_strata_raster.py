"""Strata from a categorical raster ([rasters.strata]) instead of strata polygons.

The small raster landscape of tests/test_grid_supply.py (numbers invented for the example) is
run twice: with its strata polygons, and with the same strata painted into a raster of codes
by shapely's point-in-polygon test of each cell centre (independent of GDAL's rasteriser).
Both must give the same capacity problem; mapped areas are also checked against cell counts
made with numpy from the painted raster.
"""

from __future__ import annotations

import re
from pathlib import Path

import geopandas as gpd
import numpy as np
import pytest
from rasterio.transform import from_origin
from test_grid_supply import (
    CELL_HA,
    CELL_M,
    COLS,
    NORTH,
    RASTERS,
    ROWS,
    SNOW,
    WEST,
    _membership,
    _project,
    _strata,
    _units,
    _write_raster,
    project_text,
    write_landscape,
)

from nutricap.landscape.strata_raster import StrataCodes, polygons_from_codes
from nutricap.workflow import estimate

CODES = {"upland": 11, "lowland": 42}  # invented for the example
UNLISTED = 99  # a code the codes table does not name
STRATA_RASTER = """
[rasters.strata]
raster = "strata_codes.tif"
codes = "strata_codes.csv"
"""


def _painted_codes(cover_all: bool) -> np.ndarray:
    """The strata polygons as codes, by shapely membership of each cell centre."""
    frame = _strata(cover_all)
    owner = _membership(frame)
    codes = np.full((ROWS, COLS), UNLISTED, dtype=np.int32)  # the hole, if any
    for number, name in enumerate(frame["stratum"]):
        codes[owner == number] = CODES[name]
    return codes


def _raster_project_text(rasters: str = RASTERS, availability: str = SNOW) -> str:
    text = project_text(rasters + STRATA_RASTER, availability)
    return text.replace('strata = "strata.gpkg"\n', "")


def _write_codes(folder, codes, table="code,stratum\n11,upland\n42,lowland\n", **kwargs):
    _write_raster(folder / "strata_codes.tif", codes, **kwargs)
    (folder / "strata_codes.csv").write_text(table)


@pytest.fixture()
def folder(tmp_path):
    folder = tmp_path / "inputs"
    write_landscape(folder, cover_all=False)  # strata polygons with a hole
    _write_codes(folder, _painted_codes(cover_all=False))
    return folder


def test_strata_raster_gives_the_same_problem_as_the_polygons(folder):
    polygons = estimate(_project(folder, project_text(RASTERS, SNOW)))
    raster = estimate(_project(folder, _raster_project_text(), "raster.toml"))
    np.testing.assert_allclose(
        raster.problem.available_kg, polygons.problem.available_kg, rtol=1e-6
    )
    for column in ("ncc_animals", "ecc_animals", "allowable_use_animals", "area_ha"):
        np.testing.assert_allclose(raster.by_unit[column], polygons.by_unit[column], rtol=1e-6)
    assert list(raster.supply.strata) == ["lowland", "upland"]


def test_mapped_area_is_the_count_of_listed_cells(folder):
    """Mapped hectares per unit × stratum = numpy count of painted cells × cell area."""
    result = estimate(_project(folder, _raster_project_text(), "raster.toml"))
    codes = _painted_codes(cover_all=False)
    units = _membership(_units())
    area_ha = result.areas.by_unit_stratum.set_index(["unit_id", "stratum"])["area_ha"]
    for number, unit_id in enumerate(_units()["unit_id"]):
        for name, code in CODES.items():
            count = np.count_nonzero((units == number) & (codes == code))
            assert area_ha.get((unit_id, name), 0.0) == pytest.approx(count * CELL_HA)
    unlisted = np.count_nonzero((units >= 0) & (codes == UNLISTED))
    assert unlisted > 0  # the unlisted code lies in units and is left unmapped, with a note
    note = next(
        note
        for note in result.notes
        if note.startswith(f"{unlisted * CELL_HA:,.1f} ha of unit area on the grid lies in no")
    )
    for number, unit_id in enumerate(_units()["unit_id"]):  # each unit named with its share
        count = np.count_nonzero((units == number) & (codes == UNLISTED))
        assert (f"{unit_id} {count * CELL_HA:,.1f} ha" in note) == (count > 0)


def test_several_codes_may_name_one_stratum(folder):
    codes = _painted_codes(cover_all=False)
    split = codes.copy()
    split[(codes == CODES["upland"]) & (np.arange(COLS)[None, :] % 2 == 1)] = 12
    one = estimate(_project(folder, _raster_project_text(), "one.toml"))
    _write_codes(folder, split, "code,stratum\n11,upland\n12,upland\n42,lowland\n")
    two = estimate(_project(folder, _raster_project_text(), "two.toml"))
    np.testing.assert_allclose(two.problem.available_kg, one.problem.available_kg, rtol=1e-6)


def test_accessible_fraction_by_code_equals_that_of_the_polygons(folder):
    """Half of the lowland reachable: the same problem from polygons and from codes, and
    the lowland's forage exactly half of what it is with all of it reachable."""
    whole = estimate(_project(folder, _raster_project_text(), "whole.toml"))
    strata = gpd.read_file(folder / "strata.gpkg")
    strata["accessible_fraction"] = np.where(strata["stratum"] == "lowland", 0.5, 1.0)
    strata.to_file(folder / "strata.gpkg", driver="GPKG")
    polygons = estimate(_project(folder, project_text(RASTERS, SNOW)))
    table = "code,stratum,accessible_fraction\n11,upland,\n42,lowland,0.5\n"
    _write_codes(folder, _painted_codes(cover_all=False), table)
    raster = estimate(_project(folder, _raster_project_text(), "raster.toml"))
    np.testing.assert_allclose(
        raster.problem.available_kg, polygons.problem.available_kg, rtol=1e-6
    )
    lowland = np.asarray(raster.problem.items.stratum) == "lowland"
    np.testing.assert_allclose(
        raster.problem.available_kg[:, lowland],
        0.5 * whole.problem.available_kg[:, lowland],
        rtol=1e-6,
    )


def test_cells_without_data_belong_to_no_stratum(folder):
    codes = _painted_codes(cover_all=False)
    with_gap = codes.copy()
    with_gap[20:60, 30:120] = 0
    _write_codes(folder, with_gap, nodata=0)
    result = estimate(_project(folder, _raster_project_text(), "gap.toml"))
    units = _membership(_units())
    listed = np.isin(with_gap, list(CODES.values()))
    mapped_cells = np.count_nonzero((units >= 0) & listed)
    assert result.areas.by_unit_stratum["area_ha"].sum() == pytest.approx(mapped_cells * CELL_HA)


def test_a_misaligned_strata_raster_is_resampled_by_the_nearest_cell(folder):
    """Even when bilinear resampling is asked for, codes take the nearest source cell.

    The raster is shifted 10 m east; the expected codes come from numpy: each grid cell
    takes the code of the shifted raster's cell holding its centre.
    """
    codes = _painted_codes(cover_all=False)
    shifted = from_origin(WEST + 10.0, NORTH, CELL_M, CELL_M)
    _write_codes(folder, codes, transform=shifted)
    rasters = RASTERS.replace("window_size = 64", 'window_size = 64\nresample = "bilinear"')
    result = estimate(_project(folder, _raster_project_text(rasters), "shifted.toml"))
    assert any(
        "rasters.strata.raster resampled onto the grid by nearest" in note for note in result.notes
    )
    centre_x = WEST + (np.arange(COLS) + 0.5) * CELL_M
    source_col = np.floor((centre_x - (WEST + 10.0)) / CELL_M).astype(int)
    expected = np.where(source_col >= 0, codes[:, np.clip(source_col, 0, None)], 0)
    units = _membership(_units())
    table = result.areas.by_unit_stratum.groupby("stratum")["area_ha"].sum()
    for name, code in CODES.items():
        count = np.count_nonzero((units >= 0) & (expected == code))
        assert table[name] == pytest.approx(count * CELL_HA)


def test_code_lookup():
    """Listed codes map to their row + 1; unlisted, negative, too large or no data → 0."""
    table = StrataCodes(np.array([11, 42, 12]), ["upland", "lowland", "upland"], Path("t.csv"))
    values = np.array([11, 42, 12, 99, -3, 1e6, 42, 0], dtype=np.float32)
    valid = np.array([True] * 6 + [False, True])
    out = np.empty(values.shape, dtype=np.int32)
    polygons_from_codes(values, valid, table.polygon_lookup(), out)
    assert out.tolist() == [1, 2, 3, 0, 0, 0, 0, 0]


@pytest.mark.parametrize(
    ("table", "message"),
    [
        ("code,stratum\n11,upland\n11,lowland\n", r"strata_codes.csv: row 3.*duplicate entry"),
        ("code,stratum\n11.5,upland\n42,lowland\n", r"strata_codes.csv: row 2.*whole number"),
        ("code,stratum\n-1,upland\n42,lowland\n", r"strata_codes.csv: row 2.*out of range"),
        ("code,name\n11,upland\n", r"strata_codes.csv.*stratum"),
        (
            "code,stratum\n11,upland\n42,meadow\n",
            r"plots.csv.*'lowland'.*strata map .*strata_codes.csv",
        ),
    ],
)
def test_bad_codes_table_exit_2(folder, estimate_error, table, message):
    (folder / "strata_codes.csv").write_text(table)
    error = estimate_error(folder, _raster_project_text())
    assert re.search(message, error), error


def test_a_strata_raster_of_real_numbers_is_refused(folder, estimate_error):
    _write_codes(folder, _painted_codes(cover_all=False).astype(np.float32))
    error = estimate_error(folder, _raster_project_text())
    assert re.search(r"strata_codes.tif.*rasters.strata.raster.*non-integer.*float32", error)


def test_strata_given_twice_is_refused(folder, estimate_error):
    error = estimate_error(folder, project_text(RASTERS + STRATA_RASTER, SNOW))
    assert "the strata are given twice" in error
