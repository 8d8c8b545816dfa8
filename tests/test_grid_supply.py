"""Tests of nutricap.landscape.grid.supply: the streamed raster path end to end.

Every number in the small landscapes below is invented for the example; the checks compare
the streamed sums with independent computations (a whole-array numpy pass, exactextract's
coverage-weighted zonal sums, shapely areas) and with conservation identities.
"""

from __future__ import annotations

import json
import re
import shutil
from dataclasses import replace
from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd
import pytest
import rasterio
import shapely
from affine import Affine
from rasterio.transform import from_origin
from shapely.geometry import Polygon, box

from nutricap.errors import InputError, SpatialError
from nutricap.inputs.project import load_project
from nutricap.landscape import calibration
from nutricap.landscape.calibration import INDEX_BINS, ModelFits, margin_bounds
from nutricap.workflow import estimate, run_estimate

CRS = "EPSG:32612"
CELL_M = 30.0
WEST, NORTH = 500_000.0, 4_800_000.0
ROWS, COLS = 200, 300
CELL_HA = CELL_M * CELL_M / 10_000.0  # 0.09 ha (SI definitions)
TRANSFORM = from_origin(WEST, NORTH, CELL_M, CELL_M)
SOUTH, EAST = NORTH - ROWS * CELL_M, WEST + COLS * CELL_M

# Forage classes, invented for the example: sage and shrub from biomass rasters, grass from the
# strata plots, forb from the index raster (calibrated).
FORAGE_CLASSES = """forage_class,growth_form,de_kcal_per_g,cp_pct,allowable_use,key,height_cm
forb,forb,2.6,10,0.5,false,10
grass,grass,2.0,5,0.5,false,30
sage,browse,2.7,10,0.5,true,60
shrub,browse,2.4,8,0.5,false,150
"""
ANIMALS = "animal_class,body_mass_kg,share,state\ndoe,65,1.0,maintenance\n"
PLOTS = """plot_id,stratum,forage_class,biomass_kg_per_ha
A1,upland,grass,120
A2,upland,grass,80
A3,upland,sage,400
B1,lowland,grass,300
B2,lowland,grass,260
"""


def _write_raster(path: Path, values: np.ndarray, nodata=None, transform=TRANSFORM, crs=CRS):
    profile = {
        "driver": "GTiff",
        "height": values.shape[0],
        "width": values.shape[1],
        "count": 1,
        "dtype": values.dtype.name,
        "crs": crs,
        "transform": transform,
        "tiled": True,
        "blockxsize": 32,
        "blockysize": 32,
        "compress": "deflate",
        "nodata": nodata,
    }
    with rasterio.open(path, "w", **profile) as dst:
        dst.write(values, 1)


def _fields():
    """Smooth invented fields on the grid (row, column)."""
    row, col = np.mgrid[0:ROWS, 0:COLS].astype(np.float32)
    sage = 200 + 150 * np.sin(col / 37.0) * np.cos(row / 23.0)
    shrub = 80 + 0.5 * col
    index = 0.2 + 0.6 * (row / ROWS)
    snow = np.where(col < 100, 0.0, np.where(col < 200, 40.0, 200.0)).astype(np.float32)
    return sage.astype(np.float32), shrub.astype(np.float32), index.astype(np.float32), snow


def _units() -> gpd.GeoDataFrame:
    """Four units whose edges cut through cells (invented for the example)."""
    x_mid, y_mid = WEST + 4_507.0, NORTH - 2_993.0
    shapes = [
        box(WEST + 10.0, y_mid, x_mid, NORTH - 17.0),
        box(x_mid, y_mid, EAST - 7.0, NORTH - 17.0),
        Polygon([(WEST + 10.0, SOUTH + 22.0), (x_mid, SOUTH + 22.0), (x_mid, y_mid),
                 (WEST + 10.0, y_mid - 777.0)]),
        box(x_mid, SOUTH + 22.0, EAST - 7.0, y_mid),
    ]  # fmt: skip
    return gpd.GeoDataFrame({"unit_id": ["Ashgrove", "Bleakmere", "Cobbleford", "Duskvale"]},
                            geometry=shapes, crs=CRS)  # fmt: skip


def _strata(cover_all: bool) -> gpd.GeoDataFrame:
    y_cut = NORTH - 3_321.0
    north = box(WEST - 100, y_cut, EAST + 100, NORTH + 100)
    south = box(WEST - 100, SOUTH - 100, EAST + 100, y_cut)
    if not cover_all:
        south = south.difference(box(WEST + 6_000, SOUTH + 300, WEST + 7_500, SOUTH + 1_800))
    return gpd.GeoDataFrame({"stratum": ["upland", "lowland"]}, geometry=[north, south], crs=CRS)


def write_landscape(
    folder: Path, *, cover_all: bool = True, nodata_patch: bool = True, noise: float = 15.0
) -> dict:
    """Write the small invented raster landscape; return paths and arrays.

    The calibration plots lie ± ``noise`` [kg/ha] off the line 50 + 400 · index.
    """
    folder.mkdir(parents=True, exist_ok=True)
    sage, shrub, index, snow = _fields()
    if nodata_patch:
        sage[150:170, 40:60] = -9999.0
    _write_raster(folder / "sage.tif", sage, nodata=-9999.0)
    _write_raster(folder / "shrub.tif", shrub)
    _write_raster(folder / "index.tif", index, nodata=-1.0)
    _write_raster(folder / "snow.tif", snow, nodata=-1.0)
    _units().to_file(folder / "units.gpkg", driver="GPKG")
    _strata(cover_all).to_file(folder / "strata.gpkg", driver="GPKG")
    (folder / "forage_classes.csv").write_text(FORAGE_CLASSES)
    (folder / "animals.csv").write_text(ANIMALS)
    (folder / "plots.csv").write_text(PLOTS)
    rows = np.arange(12)
    # Calibration plots (invented): forb biomass rising with the index, with scatter.
    plot_rows = 10 + rows * 15
    x = WEST + (20 + rows * 20) * CELL_M + CELL_M / 2
    y = NORTH - plot_rows * CELL_M - CELL_M / 2
    forb = 50 + 400 * index[plot_rows, 20 + rows * 20].astype(float)
    forb += np.where(rows % 2, noise, -noise)
    pd.DataFrame(
        {"plot_id": [f"C{i}" for i in rows], "x": x, "y": y, "forage_class": "forb",
         "biomass_kg_per_ha": forb}
    ).to_csv(folder / "calibration_plots.csv", index=False)  # fmt: skip
    return {"sage": sage, "shrub": shrub, "index": index, "snow": snow}


def project_text(rasters: str = "", availability: str = "", pooling: str = "unit") -> str:
    return f"""
[project]
name = "Test range (invented)"
species = "mule deer"
season = "winter"
season_days = 100

[inputs]
forage_classes = "forage_classes.csv"
plots = "plots.csv"
animal_classes = "animals.csv"
units = "units.gpkg"
strata = "strata.gpkg"

[target]
diet_de_min_kcal_per_g = 2.3

[pooling]
mode = "{pooling}"

{rasters}

{availability}
"""


RASTERS = """[rasters]
biomass = { sage = "sage.tif", shrub = "shrub.tif" }
window_size = 64

[rasters.calibrated]
index = "index.tif"
plots = "calibration_plots.csv"
groups = { forbs = ["forb"] }
model = "linear"
"""
SNOW = """[availability]
snow_depth = "snow.tif"
"""


@pytest.fixture(scope="module")
def landscape(tmp_path_factory) -> Path:
    folder = tmp_path_factory.mktemp("grid") / "inputs"
    write_landscape(folder)
    return folder


def _project(folder: Path, text: str, name: str = "project.toml"):
    path = folder / name
    path.write_text(text)
    return load_project(path)


def _grid_run(folder: Path, rasters: str, availability: str = "", pooling: str = "unit"):
    return estimate(_project(folder, project_text(rasters, availability, pooling)))


def _cell_centres():
    rows, cols = np.mgrid[0:ROWS, 0:COLS]
    return WEST + (cols + 0.5) * CELL_M, NORTH - (rows + 0.5) * CELL_M


def _membership(frame: gpd.GeoDataFrame) -> np.ndarray:
    """Index of the polygon holding each cell centre, -1 for none (shapely point-in-polygon)."""
    x, y = _cell_centres()
    owner = np.full((ROWS, COLS), -1)
    for number, shape in enumerate(frame.geometry):
        owner[shapely.contains_xy(shape, x, y)] = number
    return owner


def _read(folder: Path, name: str):
    with rasterio.open(folder / f"{name}.tif") as src:
        values = src.read(1, masked=True)
    return values.filled(np.nan).astype(float)


def _whole_array_available(folder: Path, result) -> np.ndarray:
    """(units, strata, classes) forage left by the snow rule [kg], computed in one numpy pass
    over whole arrays in float64, with cell membership from shapely instead of GDAL."""
    units = _membership(gpd.read_file(folder / "units.gpkg"))
    strata_frame = gpd.read_file(folder / "strata.gpkg")
    names = sorted(strata_frame["stratum"])  # ["lowland", "upland"]
    lookup = np.array([names.index(name) for name in strata_frame["stratum"]] + [-1])
    stratum = lookup[_membership(strata_frame)]
    sage, shrub, index, snow = (_read(folder, n) for n in ("sage", "shrub", "index", "snow"))
    model = result.grid.calibration_report.iloc[0]
    low, high = (
        model.index_min - 0.1 * (model.index_max - model.index_min),
        model.index_max + 0.1 * (model.index_max - model.index_min),
    )
    fitted = model.intercept + model.slope * np.clip(index, low, high)
    if model.model == "linear":
        forb = np.maximum(fitted, 0.0)
    else:  # Duan (1983) back-transformation
        forb = np.exp(fitted) * model.smearing_factor
    # Plot means (PLOTS above, zeros for classes a plot did not record): upland grass
    # (120 + 80 + 0) / 3, lowland grass (300 + 260) / 2.
    grass = np.where(stratum == names.index("upland"), 200.0 / 3.0, 280.0)
    heights = {"forb": 10.0, "grass": 30.0, "sage": 60.0, "shrub": 150.0}
    gross = {"forb": forb, "grass": grass, "sage": sage, "shrub": shrub}
    valid = (
        (units >= 0) & (stratum >= 0) & np.isfinite(sage) & np.isfinite(index) & np.isfinite(snow)
    )
    expected = np.zeros((4, 2, 4))
    for column, name in enumerate(sorted(gross)):
        kg = gross[name] * np.clip(1.0 - snow / heights[name], 0.0, 1.0) * CELL_HA
        for u in range(4):
            for s in range(2):
                cells = valid & (units == u) & (stratum == s)
                expected[u, s, column] = kg[cells].sum()
    return expected


@pytest.mark.parametrize("window_size", [16, 32, 96, 16384])
def test_streaming_equals_one_whole_array_pass(landscape, window_size):
    rasters = RASTERS.replace("window_size = 64", f"window_size = {window_size}")
    result = _grid_run(landscape, rasters, SNOW)
    available = result.problem.available_kg.reshape(4, 2, 4)
    assert list(result.problem.items.forage_class[:4]) == ["forb", "grass", "sage", "shrub"]
    expected = _whole_array_available(landscape, result)
    # float32 per-cell arithmetic in the streamed pass: agreement to 1e-5 relative.
    np.testing.assert_allclose(available, expected, rtol=1e-5, atol=1e-3)
    assert expected.sum() > 1e5


def _exactextract_sums(folder: Path, name: str, units: gpd.GeoDataFrame):
    from exactextract import exact_extract

    table = exact_extract(str(folder / f"{name}.tif"), units, ["sum", "coverage", "values"],
                          include_cols=["unit_id"], output="pandas")  # fmt: skip
    partial = [np.sum(v[(c > 0) & (c < 1)]) for v, c in zip(table["values"], table["coverage"])]
    return table["sum"].to_numpy(), np.array(partial)


@pytest.mark.parametrize("aligned", [False, True])
def test_unit_class_sums_match_exactextract(tmp_path, aligned):
    folder = tmp_path / "inputs"
    write_landscape(folder, nodata_patch=False)
    units = _units()
    if aligned:  # edges on cell edges: every cell is wholly in or out of a unit
        edges = [(1, 90, 1, 150), (1, 90, 150, 299), (90, 199, 1, 150), (90, 199, 150, 299)]
        units.geometry = [
            box(WEST + 30 * c0, NORTH - 30 * r1, WEST + 30 * c1, NORTH - 30 * r0)
            for r0, r1, c0, c1 in edges
        ]
        units.to_file(folder / "units.gpkg", driver="GPKG")
    rasters = '[rasters]\nbiomass = { sage = "sage.tif", shrub = "shrub.tif" }\nwindow_size = 32\n'
    result = _grid_run(folder, rasters)
    by_unit = result.problem.available_kg.reshape(4, 2, 4).sum(axis=1)
    for column, name in [(2, "sage"), (3, "shrub")]:
        reference, partial = _exactextract_sums(folder, name, units)
        ours = by_unit[:, column] / CELL_HA
        # exactextract (an independent zonal library) weights each cell by the share of it
        # inside the unit; here a cell counts wholly when its centre is inside. The two can
        # differ by at most the values of the partly covered cells; with edges on cell edges
        # they must agree to float32 precision.
        tolerance = partial + 1e-6 * reference
        assert (np.abs(ours - reference) <= tolerance).all()
        if aligned:
            assert partial.sum() == 0
            np.testing.assert_allclose(ours, reference, rtol=1e-6)
        else:
            assert (partial < 0.05 * reference).all()  # the bound is tight enough to mean much


def _rewrite(folder: Path, name: str, values, **kwargs):
    _write_raster(folder / f"{name}.tif", values.astype(np.float32), **kwargs)


@pytest.mark.parametrize("cover_all", [True, False], ids=["strata cover all", "strata hole"])
def test_snow_removes_everything_when_deeper_than_every_class(tmp_path, cover_all):
    """Only mapped cells (in a unit and a stratum) count, also in the rules report."""
    folder = tmp_path / "inputs"
    write_landscape(folder, cover_all=cover_all)
    _rewrite(folder, "snow", np.full((ROWS, COLS), 0.0), nodata=-1.0)
    bare = _grid_run(folder, RASTERS, SNOW)
    without_rule = _grid_run(folder, RASTERS)
    # Bare ground: the snow rule removes nothing.
    np.testing.assert_allclose(
        bare.problem.available_kg, without_rule.problem.available_kg, rtol=1e-6
    )
    _rewrite(folder, "snow", np.full((ROWS, COLS), 151.0), nodata=-1.0)
    deep = _grid_run(folder, RASTERS, SNOW)
    # Snow deeper than the tallest class (150 cm): nothing is left.
    assert deep.problem.available_kg.sum() == 0.0
    report = deep.grid.rules_report.set_index(["unit_id", "rule"])
    removed = report.loc[("all units", "snow"), "forage_removed_kg"]
    assert removed == pytest.approx(without_rule.problem.available_kg.sum(), rel=1e-5)
    assert report.loc[("all units", "snow"), "forage_removed_pct"] == pytest.approx(100.0)


EXCLUDED = box(WEST + 1_000, NORTH - 2_000, WEST + 2_513, NORTH - 1_007)
RULES_TEXT = """[availability]
snow_depth = "snow.tif"
slope = "slope.tif"
distance_to_water = "water.tif"
min_forage_kg_per_ha = 150
exclusions = ["private.gpkg"]
"""


def _landscape_with_rule_layers(folder: Path) -> Path:
    """The landscape plus slope and distance-to-water rasters and an exclusion polygon."""
    write_landscape(folder)
    row, col = np.mgrid[0:ROWS, 0:COLS]
    _rewrite(folder, "slope", (row % 70).astype(float))  # 0-69 % (invented)
    _rewrite(folder, "water", col * 20.0)  # 0-5980 m from water (invented)
    gpd.GeoDataFrame({"name": ["ranch"]}, geometry=[EXCLUDED], crs=CRS).to_file(
        folder / "private.gpkg", driver="GPKG"
    )
    return folder


def test_every_rule_reported_and_forage_conserved(tmp_path):
    folder = _landscape_with_rule_layers(tmp_path / "inputs")
    no_rules = _grid_run(folder, RASTERS)
    ruled = _grid_run(folder, RASTERS, RULES_TEXT)
    report = ruled.grid.rules_report
    assert list(report["rule"].unique()) == [
        "nodata", "exclusions", "snow", "min_forage", "slope", "distance_to_water"
    ]  # fmt: skip
    per_unit = report[report["unit_id"] != "all units"].groupby("unit_id", sort=False)
    removed = per_unit["forage_removed_kg"].sum(min_count=1).to_numpy()
    left = ruled.problem.available_kg.sum(axis=1)
    # Conservation: forage left + forage removed by the rules = forage without the rules.
    np.testing.assert_allclose(left + removed, no_rules.problem.available_kg.sum(axis=1), rtol=1e-5)
    # The excluded area: cells whose centre is in the polygon and in a unit with data, counted
    # independently with shapely (cell-centre rule).
    x, y = _cell_centres()
    inside = shapely.contains_xy(EXCLUDED, x, y) & (_membership(_units()) >= 0)
    sage = _read(folder, "sage")
    excluded_ha = (inside & np.isfinite(sage)).sum() * CELL_HA
    got = report[(report["unit_id"] == "all units") & (report["rule"] == "exclusions")]
    assert got["area_ha"].iloc[0] == pytest.approx(excluded_ha)


def test_report_shows_the_grid_rules_models_and_tables(tmp_path):
    """report.html of a raster run: the rules table equals availability_rules.csv's
    'all units' rows, the packaged reduction tables appear with their source, and the
    methods list the raster steps used; a run without rasters has no such section."""
    folder = _landscape_with_rule_layers(tmp_path / "inputs")
    out = tmp_path / "results"
    run_estimate(_project(folder, project_text(RASTERS, RULES_TEXT)), out)
    page = (out / "report.html").read_text(encoding="utf-8")
    section = page[page.index('<section id="raster">') : page.index('<section id="methods">')]
    text = re.sub(r"\s+", " ", re.sub(r"<[^>]+>", " ", section))
    rules = pd.read_csv(out / "availability_rules.csv")
    for row in rules[rules["unit_id"] == "all units"].itertuples():
        assert f" {row.rule} {row.meaning} {row.area_ha:,.1f} " in text
    assert "300 × 200 cells of 30 × 30 m (0.09 ha)" in text
    # Packaged slope table, last class, with that row's short citation; its recalled value is
    # listed once among the values to verify (the research note stays in the CSV).
    assert "over 60 % 100 Holechek 1988 (partly recalled: see Values to verify)" in text
    whole = re.sub(r"\s+", " ", re.sub(r"<[^>]+>", " ", page))
    assert whole.count("Slope reductions of the 11–30 %, 31–60 % and over-60 % classes") == 1
    assert "forbs forb linear chosen in the project file 12" in text
    methods = page[page.index('<section id="methods">') :]
    for title in ("Biomass from an index raster", "Snow burial of forage",
                  "Slope and distance-to-water reductions", "Minimum forage density"):  # fmt: skip
        assert title in methods
    assert "Model error in the bootstrap" not in methods  # no bootstrap in this run
    assert "Available forage (raster path)" in methods
    assert "overlaying the strata on the units" not in methods  # the vector path's wording


def test_patch_pooling(landscape):
    unit = _grid_run(landscape, RASTERS, SNOW).by_unit.set_index("unit_id")
    patch_result = _grid_run(landscape, RASTERS, SNOW, pooling="patch")
    patch = patch_result.by_unit.set_index("unit_id")
    # Rows: the unit × stratum pairs that hold cell centres (counted with shapely).
    units, strata = _membership(_units()), _membership(_strata(True))
    pairs = sorted({(u, s) for u, s in zip(units.ravel(), strata.ravel()) if u >= 0 and s >= 0})
    assert patch_result.problem.row_unit.tolist() == [u for u, _ in pairs]
    # Each patch meeting the diet alone is a restriction of the pooled problem (Hobbs & Swift
    # 1985): patch NCC ≤ unit NCC; ECC does not depend on pooling.
    assert (patch["ncc_animal_days"] <= unit["ncc_animal_days"] * (1 + 1e-9)).all()
    np.testing.assert_allclose(patch["ecc_animal_days"], unit["ecc_animal_days"], rtol=1e-9)


def test_calibration_warning_says_how_much_area(landscape):
    result = _grid_run(landscape, RASTERS, SNOW)
    row = result.grid.calibration_report.iloc[0]
    index = _read(landscape, "index")
    low = row.index_min - 0.1 * (row.index_max - row.index_min)
    high = row.index_max + 0.1 * (row.index_max - row.index_min)
    mapped = (_membership(_units()) >= 0) & np.isfinite(_read(landscape, "sage"))
    beyond = mapped & ((index < low) | (index > high))
    # Cells counted independently with numpy; the note names the group and the area.
    assert row.area_beyond_margin_ha == pytest.approx(beyond.sum() * CELL_HA)
    assert row.area_beyond_margin_ha > 0
    assert any(
        note.startswith("WARNING: calibrated forage group 'forbs'")
        and f"{row.area_beyond_margin_ha:,.1f} ha" in note
        for note in result.notes
    )


def test_outputs_density_and_manifest(landscape, tmp_path):
    out = tmp_path / "results"
    project = _project(landscape, project_text(RASTERS, SNOW))
    result = run_estimate(project, out, report=False)
    assert {"availability_rules.csv", "calibration.csv", "capacity_density.tif"} <= {
        p.name for p in out.iterdir()
    }
    with rasterio.open(out / "capacity_density.tif") as src:
        assert src.profile["tiled"] and src.compression is not None
        density = src.read(1, masked=True)
    units = _membership(_units())
    assert density.mask[units < 0].all()  # nodata outside the units
    # Σ density × cell area over a unit's cells = the unit's NCC (definition of the map).
    table = result.by_unit
    for number, unit_id in enumerate(table["unit_id"]):
        total = density[units == number].sum() * CELL_HA
        expected = table.loc[table["unit_id"] == unit_id, "ncc_animal_days"].iloc[0]
        assert total == pytest.approx(expected, rel=1e-4)
    manifest = json.loads((out / "run.json").read_text())
    assert str((landscape / "sage.tif").resolve()) in manifest["inputs"]
    assert manifest["derived"]["raster_path"]["grid"]["cell_area_ha"] == pytest.approx(CELL_HA)
    rules = pd.read_csv(out / "availability_rules.csv")
    assert {"unit_id", "rule", "area_ha", "forage_removed_kg"} <= set(rules.columns)


def test_resample_on_request(tmp_path):
    folder = tmp_path / "inputs"
    write_landscape(folder)
    _, _, _, snow = _fields()
    shifted = from_origin(WEST + 15.0, NORTH, CELL_M, CELL_M)
    _rewrite(folder, "snow", snow, nodata=-1.0, transform=shifted)
    with pytest.raises(SpatialError, match="availability.snow_depth"):
        _grid_run(folder, RASTERS, SNOW)
    result = _grid_run(
        folder, RASTERS.replace("[rasters]", '[rasters]\nresample = "nearest"'), SNOW
    )
    assert any("resampled onto the grid by nearest" in note for note in result.notes)
    assert result.grid.describe()["resampled_layers"] == {"availability.snow_depth": "nearest"}


def _misaligned(folder):
    _rewrite(folder, "snow", _fields()[3], nodata=-1.0,
             transform=from_origin(WEST + 10.0, NORTH, CELL_M, CELL_M))  # fmt: skip
    return project_text(RASTERS, SNOW)


def _crs_mismatch(folder):
    _rewrite(folder, "shrub", _fields()[1], crs="EPSG:32613")
    return project_text(RASTERS, SNOW)


def _all_nodata_unit(folder):
    sage = _fields()[0]
    sage[_membership(_units()) == 1] = -9999.0  # every cell of the second unit
    _rewrite(folder, "sage", sage, nodata=-9999.0)
    return project_text(RASTERS, SNOW)


def _plots_off_the_index(folder):
    plots = pd.read_csv(folder / "calibration_plots.csv")
    plots.loc[3, "x"] = WEST - 5_000.0
    plots.to_csv(folder / "calibration_plots.csv", index=False)
    return project_text(RASTERS, SNOW)


def _unknown_class(folder):
    return project_text(RASTERS.replace("shrub = ", "shrubs = "), SNOW)


def _snow_without_heights(folder):
    (folder / "forage_classes.csv").write_text(FORAGE_CLASSES.replace(",150\n", ",\n"))
    return project_text(RASTERS, SNOW)


@pytest.mark.parametrize(
    ("change", "message"),
    [
        (_misaligned, r"snow.tif: key 'availability.snow_depth': raster is not on the grid"),
        (_crs_mismatch, r"shrub.tif: key 'rasters.biomass.shrub'.*found CRS EPSG:32613"),
        (_all_nodata_unit, r"unit 'Bleakmere' has no cell with data.*sage.tif\) has data on 0 %"),
        (_plots_off_the_index, r"plot 'C3'.*does not cover 1 of 12 calibration plots"),
        (_unknown_class, r"key 'rasters.biomass': forage class 'shrubs' is not in the"),
        (_snow_without_heights, r"forage class 'shrub' has no height_cm"),
    ],
)
def test_bad_raster_inputs_exit_2_with_one_message(tmp_path, estimate_error, change, message):
    folder = tmp_path / "inputs"
    write_landscape(folder)
    error = estimate_error(folder, change(folder))  # exit 2, one line, nothing written
    assert re.search(message, error), error


def test_a_window_reader_failure_is_not_swallowed(landscape, monkeypatch):
    from nutricap.landscape.grid import window_pass

    def broken(self, window):
        raise InputError("broken reader (test)")

    monkeypatch.setattr(window_pass.WindowReader, "__call__", broken)
    with pytest.raises(InputError, match="broken reader"):
        _grid_run(landscape, RASTERS, SNOW)


def test_bootstrap_on_the_grid_agrees_with_the_vector_path(tmp_path):
    folder = tmp_path / "inputs"
    fields = write_landscape(folder, nodata_patch=False)
    _rewrite(folder, "snow", np.zeros_like(fields["snow"]), nodata=-1.0)  # bare ground
    uncertainty = "[uncertainty]\nbootstrap_replicates = 300\nseed = 7\nsensitivity_change = 0\n"
    vector = estimate(_project(folder, project_text() + uncertainty, name="vector.toml"))
    grid = estimate(_project(folder, project_text("", SNOW + "\n" + uncertainty)))
    columns = ["ncc_animals", "ncc_animals_lo", "ncc_animals_hi", "ecc_animals_lo"]
    # Same plots, same seed: the grid's replicates differ from the overlay's only by cells
    # standing for polygons (30-m cells burnt by centre): within 2 %, or 1 % of the largest
    # figure for the small pieces where whole cells matter most.
    expected = vector.by_unit[columns].to_numpy()
    np.testing.assert_allclose(
        grid.by_unit[columns].to_numpy(), expected, rtol=0.02, atol=0.01 * expected.max()
    )
    assert (grid.by_unit["ncc_animals_lo"] < grid.by_unit["ncc_animals_hi"]).all()


# --- the calibration model's error in the bootstrap -----------------------------------------

FORB = 0  # column of forb among the sorted classes


def _forb_by_unit_stratum(result, forage_kg: np.ndarray) -> np.ndarray:
    """(units, strata) sums [kg] of the calibrated entries' forage (one group: forbs)."""
    (group,) = result.grid.calibrated_sums
    n_classes = len(result.grid.classes)
    assert (group.items % n_classes == FORB).all()
    out = np.zeros((4, 2))
    np.add.at(out, (result.problem.row_unit[group.rows], group.items // n_classes), forage_kg)
    return out


def _point_forage(result) -> np.ndarray:
    (group,) = result.grid.calibrated_sums
    return _forb_by_unit_stratum(result, group.forage_kg(ModelFits.of(group.model))[0])


def _force_fit(monkeypatch, change) -> None:
    """Make every fit return the least-squares model changed by ``change``."""
    fitted = calibration.select_model

    def forced(*args):
        model, _ = fitted(*args)
        return change(model), "forced by the test"

    monkeypatch.setattr(calibration, "select_model", forced)


@pytest.mark.parametrize("pooling", ["unit", "patch"])
@pytest.mark.parametrize("kind", ["linear", "loglinear"])
def test_calibrated_sums_at_the_point_fit_give_the_point_forage(landscape, kind, pooling):
    result = _grid_run(landscape, RASTERS.replace('"linear"', f'"{kind}"'), SNOW, pooling)
    # Against the whole-array numpy pass (shapely membership, float64): the forb column.
    expected = _whole_array_available(landscape, result)[:, :, FORB]
    np.testing.assert_allclose(_point_forage(result), expected, rtol=1e-5, atol=1e-3)
    assert expected.sum() > 1e5


def test_linear_sums_equal_a_second_pass_with_the_refitted_line(landscape, monkeypatch):
    point = _grid_run(landscape, RASTERS, SNOW)
    (group,) = point.grid.calibrated_sums
    fits = ModelFits(np.array([80.0]), np.array([300.0]), np.array([1.0]))
    rebuilt = _forb_by_unit_stratum(point, group.forage_kg(fits)[0])
    _force_fit(monkeypatch, lambda model: replace(model, intercept=80.0, slope=300.0))
    rerun = _grid_run(landscape, RASTERS, SNOW).problem.available_kg.reshape(4, 2, 4)
    # 80 + 300·x > 0 on the whole index range, and no minimum-density rule: the sums S0, S1
    # give the second pass's forage up to float32 rounding.
    np.testing.assert_allclose(rebuilt, rerun[:, :, FORB], rtol=1e-5, atol=1e-3)
    assert np.abs(rebuilt - _point_forage(point)).max() > 0.02 * rebuilt.max()


def test_loglinear_bins_stay_within_the_hoeffding_bound(landscape, monkeypatch):
    rasters = RASTERS.replace('"linear"', '"loglinear"')
    point = _grid_run(landscape, rasters, SNOW)
    (group,) = point.grid.calibrated_sums
    model = group.model
    da, db, ds = -0.2, 3.0, 1.1  # a refit far from the point estimate (invented)
    changed = replace(
        model, intercept=model.intercept + da, slope=model.slope + db, smearing=model.smearing * ds
    )
    binned = _forb_by_unit_stratum(point, group.forage_kg(ModelFits.of(changed))[0])
    _force_fit(monkeypatch, lambda fitted: changed)  # the same plots, so the same model but a, b, s
    exact = _grid_run(landscape, rasters, SNOW).problem.available_kg.reshape(4, 2, 4)[:, :, FORB]
    low, high = margin_bounds(model, 0.1)
    # Jensen: binned ≤ exact; Hoeffding's lemma (Hoeffding 1963): exact ≤ binned·e^(Δb²h²/8).
    bound = np.exp((db * (high - low) / INDEX_BINS) ** 2 / 8)
    ratio = exact[exact > 0] / binned[exact > 0]
    assert ratio.size >= 2
    assert (ratio >= 1 - 1e-5).all() and (ratio <= bound * (1 + 1e-5)).all()
    assert ratio.max() > 1 + 1e-4  # the binning error is there to be bounded


UNCERTAINTY = "[uncertainty]\nbootstrap_replicates = 200\nseed = 5\nsensitivity_change = 0\n"
IDENTICAL_PLOTS = """plot_id,stratum,forage_class,biomass_kg_per_ha
A1,upland,grass,100
A2,upland,grass,100
B1,lowland,grass,280
B2,lowland,grass,280
"""
FIGURES = ("ncc", "ecc", "allowable_use")


def _bootstrap_run(folder: Path, noise: float, plots: str | None = None):
    write_landscape(folder, noise=noise)
    if plots is not None:
        (folder / "plots.csv").write_text(plots)
    return _grid_run(folder, RASTERS, SNOW + "\n" + UNCERTAINTY)


def test_noisier_calibration_plots_widen_the_intervals(tmp_path):
    quiet, noisy = (_bootstrap_run(tmp_path / str(noise), noise) for noise in (15.0, 60.0))
    with_forb = quiet.problem.available_kg.reshape(4, 2, 4)[:, :, FORB].sum(axis=1) > 0
    assert 0 < with_forb.sum() < 4
    for figure in FIGURES:
        width = [
            (run.by_unit[f"{figure}_animals_hi"] - run.by_unit[f"{figure}_animals_lo"]).to_numpy()
            for run in (quiet, noisy)
        ]
        # Same seed, same draws: the refits stray four times as far from the line.
        assert (width[1][with_forb] > 1.2 * width[0][with_forb]).all()
        np.testing.assert_allclose(width[1][~with_forb], width[0][~with_forb], rtol=1e-9)


@pytest.mark.filterwarnings("ignore:divide by zero encountered in log")  # AIC of a perfect fit
def test_exact_line_and_identical_plots_collapse_the_intervals(tmp_path):
    table = _bootstrap_run(tmp_path, 0.0, IDENTICAL_PLOTS).by_unit
    for figure in FIGURES:
        point = table[f"{figure}_animals"].to_numpy()
        lo, hi = (table[f"{figure}_animals_{end}"].to_numpy() for end in ("lo", "hi"))
        # Every refit is the same line and every replicate the same plots: lo = hi = point,
        # up to float32 rounding of the per-cell sums.
        np.testing.assert_allclose(hi - lo, 0.0, atol=1e-9 * point.max())
        np.testing.assert_allclose(lo, point, rtol=1e-5)
    assert table["ncc_animals"].max() > 100


def test_a_truncated_index_raster_is_named(landscape, tmp_path):
    folder = tmp_path / "inputs"
    shutil.copytree(landscape, folder)
    index = folder / "index.tif"
    index.write_bytes(index.read_bytes()[: index.stat().st_size // 2])
    expected = r"index\.tif: key 'rasters\.calibrated\.index': cannot read .*truncated or corrupt"
    with pytest.raises(SpatialError, match=expected):
        _grid_run(folder, RASTERS)


# --- GDAL virtual mosaics (VRT) -------------------------------------------------------------


def _vrt_mosaic(folder: Path, name: str, splits=(97, 151)) -> Path:
    """Cut ``name.tif`` into 4 GeoTIFF tiles at row/column ``splits`` and write ``name.vrt``,
    a GDAL VRTDataset with one SimpleSource per tile (GDAL's VRT format, gdal.org/drivers/
    raster/vrt.html), on the same grid, nodata and 32 × 32 blocks as the GeoTIFF."""
    with rasterio.open(folder / f"{name}.tif") as src:
        values, profile = src.read(1), src.profile
    row_cut, col_cut = splits
    sources = []
    for r0, r1 in ((0, row_cut), (row_cut, ROWS)):
        for c0, c1 in ((0, col_cut), (col_cut, COLS)):
            tile = f"{name}_tile_{r0}_{c0}.tif"
            transform = TRANSFORM * Affine.translation(c0, r0)
            _write_raster(folder / tile, values[r0:r1, c0:c1], profile["nodata"], transform)
            sources.append(
                f'<SimpleSource><SourceFilename relativeToVRT="1">{tile}</SourceFilename>'
                f"<SourceBand>1</SourceBand>"
                f'<SrcRect xOff="0" yOff="0" xSize="{c1 - c0}" ySize="{r1 - r0}"/>'
                f'<DstRect xOff="{c0}" yOff="{r0}" xSize="{c1 - c0}" ySize="{r1 - r0}"/>'
                "</SimpleSource>"
            )
    nodata = "" if profile["nodata"] is None else f"<NoDataValue>{profile['nodata']}</NoDataValue>"
    t = TRANSFORM
    text = (
        f'<VRTDataset rasterXSize="{COLS}" rasterYSize="{ROWS}">'
        f"<SRS>{rasterio.crs.CRS.from_string(CRS).to_wkt()}</SRS>"
        f"<GeoTransform>{t.c!r}, {t.a!r}, 0.0, {t.f!r}, 0.0, {t.e!r}</GeoTransform>"
        f'<VRTRasterBand dataType="Float32" band="1" blockXSize="32" blockYSize="32">'
        f"{nodata}{''.join(sources)}</VRTRasterBand></VRTDataset>"
    )
    path = folder / f"{name}.vrt"
    path.write_text(text)
    return path


def test_a_vrt_mosaic_gives_the_table_of_the_single_geotiff(tmp_path):
    folder = tmp_path / "inputs"
    write_landscape(folder)  # sage has a nodata patch, read through the mosaic too
    for name in ("sage", "snow"):
        _vrt_mosaic(folder, name)
    with rasterio.open(folder / "sage.vrt") as vrt, rasterio.open(folder / "sage.tif") as tif:
        assert vrt.driver == "VRT" and vrt.block_shapes == tif.block_shapes
        np.testing.assert_array_equal(vrt.read(1), tif.read(1))  # GDAL's own mosaic
    single = run_estimate(
        _project(folder, project_text(RASTERS, SNOW), "single.toml"), tmp_path / "single"
    )
    mosaic_rasters = RASTERS.replace('"sage.tif"', '"sage.vrt"')  # the grid's first layer
    mosaic = run_estimate(
        _project(folder, project_text(mosaic_rasters, SNOW.replace(".tif", ".vrt")), "vrt.toml"),
        tmp_path / "mosaic",
    )
    np.testing.assert_array_equal(mosaic.problem.available_kg, single.problem.available_kg)
    pd.testing.assert_frame_equal(mosaic.by_unit, single.by_unit, check_exact=True)
    for name in ("capacity_by_unit.csv", "availability_rules.csv", "calibration.csv"):
        assert (tmp_path / "mosaic" / name).read_bytes() == (
            tmp_path / "single" / name
        ).read_bytes()
    with (
        rasterio.open(tmp_path / "mosaic" / "capacity_density.tif") as a,
        rasterio.open(tmp_path / "single" / "capacity_density.tif") as b,
    ):
        np.testing.assert_array_equal(a.read(1), b.read(1))


LON0, LAT1, STEP_DEG, GEO_ROWS, GEO_COLS = -110.56, 44.08, 0.001, 100, 140


def _lon_lat_landscape(folder: Path) -> tuple[np.ndarray, list[Polygon]]:
    """A sage raster in lon/lat (0.001° cells, a smooth invented field) under two irregular
    lon/lat units sharing an edge (invented for the example); strata and plots as needed."""
    folder.mkdir(parents=True)
    row, col = np.mgrid[0:GEO_ROWS, 0:GEO_COLS]
    values = (150 + 2.0 * col + 1.0 * row).astype(np.float32)
    transform = from_origin(LON0, LAT1, STEP_DEG, STEP_DEG)
    _write_raster(folder / "sage.tif", values, transform=transform, crs="EPSG:4326")
    shared = [(-110.497, 44.004), (-110.489, 44.047)]
    units = [
        Polygon([(-110.548, 44.012), *shared, (-110.517, 44.071), (-110.551, 44.049)]),
        Polygon([shared[0], (-110.437, 44.009), (-110.431, 44.063), (-110.474, 44.068), shared[1]]),
    ]
    gpd.GeoDataFrame({"unit_id": ["Gorse", "Heron"]}, geometry=units, crs="EPSG:4326").to_file(
        folder / "units.gpkg"
    )
    gpd.GeoDataFrame(
        {"stratum": ["upland"]}, geometry=[box(-110.6, 43.95, -110.3, 44.1)], crs="EPSG:4326"
    ).to_file(folder / "strata.gpkg")
    (folder / "forage_classes.csv").write_text(
        "forage_class,de_kcal_per_g,cp_pct,allowable_use\ngrass,2.0,5,0.5\nsage,2.7,10,0.5\n"
    )
    (folder / "animals.csv").write_text(ANIMALS)
    (folder / "plots.csv").write_text(
        "plot_id,stratum,forage_class,biomass_kg_per_ha\nA1,upland,grass,100\nA2,upland,grass,50\n"
    )
    return values, units


def _geodesic_zonal_kg(values: np.ndarray, unit: Polygon) -> float:
    """Σ value × geodesic area of (cell ∩ unit) over the lon/lat cells [kg]: shapely for the
    pieces, pyproj.Geod for their areas on the WGS 84 ellipsoid."""
    from pyproj import Geod

    row, col = np.mgrid[0:GEO_ROWS, 0:GEO_COLS]
    west, north = LON0 + col.ravel() * STEP_DEG, LAT1 - row.ravel() * STEP_DEG
    cells = shapely.box(west, north - STEP_DEG, west + STEP_DEG, north)
    pieces = shapely.intersection(cells, unit)
    geod = Geod(ellps="WGS84")
    kept = np.flatnonzero(~shapely.is_empty(pieces))
    area_ha = [abs(geod.geometry_area_perimeter(pieces[i])[0]) / 1e4 for i in kept]
    return float(np.dot(values.ravel()[kept].astype(float), area_ha))


@pytest.mark.parametrize("method", ["bilinear", "average"])
def test_lon_lat_raster_is_warped_onto_an_equal_area_grid(tmp_path, method):
    folder = tmp_path / "inputs"
    values, units = _lon_lat_landscape(folder)
    rasters = f'[rasters]\nbiomass = {{ sage = "sage.tif" }}\nresample = "{method}"\n'
    result = _grid_run(folder, rasters)
    sage = np.asarray(result.problem.items.forage_class) == "sage"
    ours_kg = result.problem.available_kg[:, sage].sum(axis=1)
    reference_kg = [_geodesic_zonal_kg(values, unit) for unit in units]
    # Tolerance 0.5 %: cells of about 92 m count wholly by their centre on units of about
    # 2,700 ha with irregular edges (about 150 boundary cells each, whose errors mostly
    # cancel), and the warp interpolates a field that is linear in row and column.
    np.testing.assert_allclose(ours_kg, reference_kg, rtol=5e-3)
    assert any("is in a geographic CRS (WGS 84): the analysis grid" in n for n in result.notes)
    assert any(f"resampled onto the grid by {method} resampling" in n for n in result.notes)
    assert result.grid.grid.crs.to_wkt().startswith(
        'PROJCS["Lambert azimuthal equal-area centred on the units'
    )


def test_lon_lat_raster_without_resample_is_refused(tmp_path):
    folder = tmp_path / "inputs"
    _lon_lat_landscape(folder)
    with pytest.raises(SpatialError, match=r"sage\.tif: key 'rasters\.biomass\.sage': the raster "
                       r"that defines the grid has a geographic CRS.*set resample"):  # fmt: skip
        _grid_run(folder, '[rasters]\nbiomass = { sage = "sage.tif" }\n')


def test_a_unit_whose_allowable_use_the_cattle_take_has_exactly_zero_ncc(example_project):
    """The raster example's Rimgrass: snow leaves so little that the cattle permit (500 AUM,
    invented for the example) takes the whole allowable use of every class cattle eat, so
    the deer's NCC is exactly 0 (it read 1e-13 animals, 'quantity', from a rounding
    residue of the allocation)."""
    text = (example_project.parent / "project_rasters.toml").read_text(encoding="utf-8")
    text = text.replace("bootstrap_replicates = 1000", "bootstrap_replicates = 0")
    result = estimate(_project(example_project.parent, text, "rimgrass.toml"))
    unit = result.by_unit.set_index("unit_id").loc["Rimgrass"]
    rows = result.problem.row_unit == list(result.by_unit["unit_id"]).index("Rimgrass")
    items = result.problem.items
    eaten_by_cattle = pd.Series(items.growth_form).isin(["grass", "forb", "browse"]).to_numpy()
    usable_kg = (result.problem.available_kg[rows] * items.allowable_use)[:, eaten_by_cattle]
    # 500 AUM × 353.8 kg (780 lb, SRM 1998 glossary) beyond what the rules leave usable:
    assert 500 * 780 * 0.45359237 > usable_kg.sum()
    assert unit["ncc_animals"] == 0.0 and unit["allowable_use_animals"] == 0.0
    assert unit["limiting_factor"] == "no_forage"
