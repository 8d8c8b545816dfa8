"""Tests of treatment scenarios on the raster grid (nutricap.model.grid_scenarios and the
treated keys of the first pass).

The landscape is the small invented one of tests/test_grid_supply.py (30-m cells, four units,
two strata); the treatment polygons and responses below are invented for the example. The
checks compare the grid with the polygon path through shapely's areas (the rasterisation
error), with a whole-array numpy computation of the snow rule over shapely's cell membership,
and with the baseline itself (an identity response changes nothing).
"""

from __future__ import annotations

import geopandas as gpd
import numpy as np
import pandas as pd
import pytest
import rasterio
from shapely.geometry import Polygon, box
from test_grid_supply import (
    CELL_HA,
    CRS,
    NORTH,
    RASTERS,
    SNOW,
    WEST,
    _membership,
    _project,
    _read,
    _rewrite,
    _strata,
    _units,
    project_text,
    write_landscape,
)

from nutricap.cli import main
from nutricap.workflow import compare, estimate

M2_PER_HA = 10_000.0
HEADER = (
    "treatment,forage_class,growth_form,years_since,biomass_multiplier,de_shift_kcal_per_g,"
    "cp_shift_pct\n"
)
RESPONSES = (
    HEADER
    + """thin,grass,,0,0.5,0.1,0
thin,grass,,5,1.8,0,0
thin,sage,,0,0.2,0,0
thin,sage,,10,1.0,0,0
burn,grass,,0,2.0,0,1.5
burn,grass,,6,1.2,0,0
"""
)
IDENTITY = (
    HEADER
    + """thin,grass,,0,1,0,0
thin,,browse,0,1,0,0
burn,sage,,3,1,0,0
"""
)
SCENARIO = """
[scenarios.work]
treatments = "treatments.gpkg"
responses = "{responses}"
first_year = 2026
last_year = 2040
"""


def _treatments() -> gpd.GeoDataFrame:
    """Two treatments (invented): a thinning across two units and both strata, and a burn
    inside the upland that turns it into lowland; their edges cut through cells."""
    thin = box(WEST + 2_011.0, NORTH - 4_507.0, WEST + 6_013.0, NORTH - 1_203.0)
    burn = Polygon(
        [(WEST + 6_517.0, NORTH - 2_901.0), (WEST + 8_603.0, NORTH - 2_711.0),
         (WEST + 8_311.0, NORTH - 407.0), (WEST + 6_803.0, NORTH - 611.0)]
    )  # fmt: skip
    return gpd.GeoDataFrame(
        {"treatment": ["thin", "burn"], "year": [2027, 2029], "new_stratum": ["", "lowland"]},
        geometry=[thin, burn],
        crs=CRS,
    )


def _write_scenario(folder, responses: str = RESPONSES, name: str = "responses.csv") -> str:
    _treatments().to_file(folder / "treatments.gpkg", driver="GPKG")
    (folder / name).write_text(responses)
    return SCENARIO.format(responses=name)


@pytest.fixture(scope="module")
def bare(tmp_path_factory):
    """The landscape with snow depth 0 everywhere: the grid's only layer then removes nothing
    (exposed share clip(1 − 0/h, 0, 1) = 1 for every class), as without availability rules."""
    folder = tmp_path_factory.mktemp("grid_scenarios") / "inputs"
    fields = write_landscape(folder, nodata_patch=False)
    _rewrite(folder, "snow", np.zeros_like(fields["snow"]), nodata=-1.0)
    return folder


def _piece_areas_ha(pooled: bool = False):
    """(units, strata, treatment polygons + 1 for untreated) areas [ha]: shapely's polygon
    areas, and the cells whose centres shapely puts in each piece × cell area."""
    units, strata, treatments = _units(), _strata(True), _treatments()
    strata_names = sorted(strata["stratum"])
    polygon = np.zeros((4, 2, 3))
    for u, unit in enumerate(units.geometry):
        for name, stratum in zip(strata["stratum"], strata.geometry):
            s = strata_names.index(name)
            piece = unit.intersection(stratum)
            for t, treated in enumerate(treatments.geometry):
                polygon[u, s, t] = piece.intersection(treated).area / M2_PER_HA
            polygon[u, s, 2] = piece.difference(treatments.union_all()).area / M2_PER_HA
    unit_of, treated_of = _membership(units), _membership(treatments)
    strata_lookup = np.array([strata_names.index(n) for n in strata["stratum"]])
    stratum_of = strata_lookup[_membership(strata)]
    cells = np.zeros((4, 2, 3))
    for u in range(4):
        for s in range(2):
            for t, code in enumerate([0, 1, -1]):
                cells[u, s, t] = np.sum((unit_of == u) & (stratum_of == s) & (treated_of == code))
    return polygon, cells * CELL_HA


@pytest.mark.parametrize("pooling", ["unit", "patch"])
def test_grid_scenario_agrees_with_the_polygon_path_within_the_rasterisation_error(bare, pooling):
    scenario = _write_scenario(bare)
    vector_text = project_text(pooling=pooling) + scenario
    grid_text = project_text("", SNOW, pooling=pooling) + scenario
    vector = compare(_project(bare, vector_text, f"vector_{pooling}.toml"), "work")[1]
    result, grid = compare(_project(bare, grid_text, f"grid_{pooling}.toml"), "work")
    # The treated cells the pass counted are those whose centres shapely puts in each piece.
    polygon_ha, shapely_cells_ha = _piece_areas_ha()
    treated = result.grid.treated
    burnt = np.zeros((4, 2, 2))
    for p in range(treated.pair_unit.size):
        burnt[treated.pair_unit[p], :, treated.pair_polygon[p]] += treated.cells[p] * CELL_HA
    np.testing.assert_allclose(burnt, shapely_cells_ha[:, :, :2], rtol=0, atol=1e-9)
    # Rasterisation error: relative difference of burnt and polygon area of each piece (unit ×
    # stratum × treated or not); NCC, ECC and allowable use are monotone and of degree 1 in the
    # forage of every item (linear programme: scaling every available amount scales the
    # feasible set), so each unit's figures differ by at most its largest piece error.
    untreated_ha = result.grid.mapped_ha[:, :, None] - burnt.sum(axis=2, keepdims=True)
    grid_ha = np.concatenate([burnt, untreated_ha], axis=2)
    present = polygon_ha > 0
    error = np.where(present, np.abs(grid_ha - polygon_ha) / np.where(present, polygon_ha, 1), 0)
    per_unit = error.reshape(4, -1).max(axis=1)

    assert per_unit.max() < 0.05  # measured on this landscape (0.4-4.9 %): docs/rasters.md
    assert per_unit.min() > 0  # the pieces' edges cut cells: the bound is not trivially 0
    slack = np.tile(per_unit, 15) + 1e-5  # float32 cell arithmetic (rasters.md)
    for figure in ("ncc", "ecc", "allowable_use"):
        for column in (f"{figure}_animals_baseline", f"{figure}_animals_scenario"):
            expected = vector[column].to_numpy()
            assert np.all(np.abs(grid[column].to_numpy() - expected) <= slack * expected + 1e-9)
    # The treatments do change the capacity (else the comparison would show nothing).
    assert (grid["ncc_change_animals"].abs() > 1).any()
    pd.testing.assert_series_equal(grid["years_since_treatment"], vector["years_since_treatment"])


def test_an_identity_treatment_changes_nothing_to_the_last_bit(tmp_path):
    folder = tmp_path / "inputs"
    write_landscape(folder)
    text = project_text(RASTERS, SNOW + "min_forage_kg_per_ha = 30\n")
    project = _project(folder, text + _write_scenario(folder, IDENTITY))
    result, table = compare(project, "work")
    assert result.grid.treated.cells.sum() > 1000  # the polygons were burnt
    for figure in ("ncc", "ecc", "allowable_use"):
        np.testing.assert_array_equal(
            table[f"{figure}_animals_scenario"], table[f"{figure}_animals_baseline"]
        )
        assert (table[f"{figure}_change_animals"] == 0).all()
    # And the baseline of compare is the estimate's, to the last bit: the treated keys are
    # sums beside the unit × stratum sums, which stay as they are.
    alone = estimate(project)
    pd.testing.assert_frame_equal(result.by_unit, alone.by_unit, check_exact=True)
    # The report's coarse maps are the baseline's, the estimate's to the last bit.
    maps = result.grid.overview_maps
    assert [m.key for m in maps] == [m.key for m in alone.grid.overview_maps]
    assert {"capacity_density", "removed_snow", "removed_min_forage"} <= {m.key for m in maps}
    for ours, theirs in zip(maps, alone.grid.overview_maps):
        np.testing.assert_array_equal(ours.values, theirs.values)


def test_rules_act_on_the_treated_forage(tmp_path):
    """The share of each class the rules keep in the treated cells (snow), against numpy over
    whole arrays with shapely's cell membership; and the treated forage is the multiplier ×
    what the rules leave (the snow share is proportional to the biomass)."""
    folder = tmp_path / "inputs"
    write_landscape(folder, nodata_patch=False)
    project = _project(folder, project_text(RASTERS, SNOW) + _write_scenario(folder))
    result, _ = compare(project, "work")
    treated = result.grid.treated
    snow = _read(folder, "snow")
    heights = {"forb": 10.0, "grass": 30.0, "sage": 60.0, "shrub": 150.0}  # FORAGE_CLASSES
    unit_of, treated_of = _membership(_units()), _membership(_treatments())
    strata = _strata(True)
    names = sorted(strata["stratum"])
    stratum_of = np.array([names.index(n) for n in strata["stratum"]])[_membership(strata)]
    for p in range(treated.pair_unit.size):
        for s in range(2):
            cells = (unit_of == treated.pair_unit[p]) & (treated_of == treated.pair_polygon[p])
            cells &= stratum_of == s
            for c, name in enumerate(sorted(heights)):
                kept = np.clip(1.0 - snow[cells] / heights[name], 0, 1).sum() * CELL_HA
                np.testing.assert_allclose(treated.kept_ha[p, s, c], kept, rtol=1e-5, atol=1e-6)
    # The forage the rules leave in treated cells is part of the unit × stratum sums.
    by_key = np.zeros_like(result.grid.key_available_kg)
    np.add.at(by_key, treated.pair_unit, treated.left_kg)
    assert (by_key <= result.grid.key_available_kg * (1 + 1e-6) + 1e-6).all()


def test_compare_writes_its_outputs_for_a_raster_project(tmp_path, capsys):
    folder = tmp_path / "inputs"
    write_landscape(folder)
    (folder / "project.toml").write_text(project_text(RASTERS, SNOW) + _write_scenario(folder))
    out = tmp_path / "out"
    argv = ["compare", str(folder / "project.toml"), "--scenario", "work", "--out", str(out)]
    code = main([*argv, "--no-figures"])
    assert code == 0, capsys.readouterr().err
    table = pd.read_csv(out / "scenario_by_unit.csv")
    assert len(table) == 4 * 15  # units × years 2026–2040
    assert (out / "scenario_by_unit.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    with rasterio.open(out / "capacity_density.tif") as src:
        assert src.read(1).shape == (200, 300)
    assert "Scenario 'work'" in capsys.readouterr().out
