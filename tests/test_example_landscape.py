"""Tests of the example-landscape generator (:mod:`nutricap.example`).

The landscape's numbers are invented for the example and are never used as a check of
correctness. These tests check the generator's promises: determinism, the input contract
of SPEC.md (file names, columns, layer names), and sound geometry, with shapely as the
independent reference for validity, areas and overlaps.
"""

from __future__ import annotations

import tomllib
from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd
import pyogrio
import pytest
import rasterio
import shapely

from nutricap import example
from nutricap.inputs.project import load_project

CSV_FILES = (
    "forage_classes.csv",
    "plots.csv",
    "animal_classes.csv",
    "counts.csv",
    "treatment_responses.csv",
    "cattle_permit.csv",
)
LAYERS = {
    "units.gpkg": "units",
    "strata.gpkg": "strata",
    "treatments_thinning.gpkg": "treatments_thinning",
    "treatments_burn.gpkg": "treatments_burn",
}
RASTERS = ("snow_depth_cm.tif", "slope_pct.tif")
ALL_FILES = {*CSV_FILES, *LAYERS, *RASTERS, "project.toml", "project_rasters.toml", "README.md"}
# Column contract of SPEC.md ("Inputs"); the energy pair de_kcal_per_g | dmd_pct is
# checked separately.
CONTRACT_COLUMNS = {
    "forage_classes.csv": {
        "forage_class",
        "growth_form",
        "cp_pct",
        "allowable_use",
        "key",
        "height_cm",
    },
    "plots.csv": {"plot_id", "stratum", "forage_class", "dry_mass_g", "frame_area_m2"},
    "animal_classes.csv": {"animal_class", "body_mass_kg", "share", "state"},
    "counts.csv": {"unit_id", "year", "count"},
}
COMMITTED = Path(__file__).resolve().parents[1] / "example_landscape"
OVERLAP_TOLERANCE_M2 = 1e-3


@pytest.fixture(scope="module")
def first(tmp_path_factory: pytest.TempPathFactory) -> Path:
    return example.write_example_landscape(tmp_path_factory.mktemp("first")).parent


@pytest.fixture(scope="module")
def second(tmp_path_factory: pytest.TempPathFactory) -> Path:
    return example.write_example_landscape(tmp_path_factory.mktemp("second")).parent


def read_layer(folder: Path, file: str) -> gpd.GeoDataFrame:
    return gpd.read_file(folder / file, layer=LAYERS[file])


def assert_same_landscape(a: Path, b: Path) -> None:
    """Identical CSV, TOML and README bytes, identical attributes and geometries."""
    for name in (*CSV_FILES, "project.toml", "project_rasters.toml", "README.md"):
        assert (a / name).read_bytes() == (b / name).read_bytes(), name
    for name in RASTERS:
        with rasterio.open(a / name) as left, rasterio.open(b / name) as right:
            assert left.profile == right.profile, name
            np.testing.assert_array_equal(left.read(1), right.read(1), err_msg=name)
    for file in LAYERS:
        left, right = read_layer(a, file), read_layer(b, file)
        pd.testing.assert_frame_equal(left.drop(columns="geometry"), right.drop(columns="geometry"))
        assert left.crs == right.crs
        assert left.geometry.geom_equals_exact(right.geometry, tolerance=0.0).all(), file


def overlapping_pairs(geometries: gpd.GeoSeries) -> list[tuple[int, int, float]]:
    """Pairs of geometries sharing more than the tolerance [m2], found with shapely."""
    tree = shapely.STRtree(geometries.to_numpy())
    left, right = tree.query(geometries.to_numpy(), predicate="intersects")
    pairs = []
    for i, j in zip(left, right, strict=True):
        if i < j:
            shared = geometries.iloc[i].intersection(geometries.iloc[j]).area
            if shared > OVERLAP_TOLERANCE_M2:
                pairs.append((int(i), int(j), shared))
    return pairs


def test_all_files_written(first: Path) -> None:
    assert {p.name for p in first.iterdir()} == ALL_FILES


def test_two_runs_are_identical(first: Path, second: Path) -> None:
    assert_same_landscape(first, second)


def test_committed_files_match_the_generator(first: Path) -> None:
    """example_landscape/ holds exactly what generate.py writes (regenerate when this fails)."""
    assert_same_landscape(first, COMMITTED)


def test_readme_names_every_file_and_scenario(first: Path) -> None:
    # The README written beside the files (also in the demo's folder) lists each of them and
    # the scenarios of the project files.
    text = (first / "README.md").read_text(encoding="utf-8")
    for name in ALL_FILES - {"README.md"}:
        assert f"`{name}`" in text, name
    for scenario in ("juniper_thinning", "prescribed_burn"):
        assert f"[scenarios.{scenario}]" in (first / "project.toml").read_text()
        assert f"`{scenario}`" in text, scenario


def test_total_size_under_two_mebibytes(first: Path) -> None:
    assert sum(p.stat().st_size for p in first.iterdir()) < 2 * 1024**2


def test_contract_columns_present(first: Path) -> None:
    for name, columns in CONTRACT_COLUMNS.items():
        assert columns <= set(pd.read_csv(first / name).columns), name
    assert "unit_id" in read_layer(first, "units.gpkg").columns
    assert "current_animals" in read_layer(first, "units.gpkg").columns
    assert "stratum" in read_layer(first, "strata.gpkg").columns


def test_rasters_cover_the_study_area_on_one_grid(first: Path) -> None:
    """Both rasters share one 50 m grid whose bounds are the study area's (shapely bounds)."""
    area = example.study_area()
    for name in RASTERS:
        with rasterio.open(first / name) as src:
            assert src.crs.to_epsg() == 32612
            assert src.res == (example.RASTER_CELL_M, example.RASTER_CELL_M)
            assert tuple(src.bounds) == pytest.approx(area.bounds)
            values = src.read(1)
            assert np.isfinite(values).all() and values.min() >= 0.0


def test_layer_names_and_crs(first: Path) -> None:
    for file, layer in LAYERS.items():
        assert list(pyogrio.list_layers(first / file)[:, 0]) == [layer]
        assert read_layer(first, file).crs.to_epsg() == 32612


def test_project_file_follows_the_schema(first: Path) -> None:
    raw = tomllib.loads((first / "project.toml").read_text(encoding="utf-8"))
    assert set(raw) == {
        "project",
        "inputs",
        "target",
        "forage_use",
        "pooling",
        "uncertainty",
        "scenarios",
        "other_herbivores",
        "diet",
    }
    assert raw["project"]["season"] == "winter"
    assert raw["project"]["season_days"] == example.SEASON_DAYS
    scenario_files = {
        name
        for section in raw["scenarios"].values()
        for name in (section["treatments"], section["responses"])
    } | {herd["numbers_table"] for herd in raw["other_herbivores"]}
    raster_variant = {"project_rasters.toml", *RASTERS}
    assert (
        set(raw["inputs"].values()) | scenario_files
        == ALL_FILES - {"project.toml", "README.md"} - raster_variant
    )


def test_raster_project_is_the_project_plus_rasters(first: Path) -> None:
    """project_rasters.toml: the same inputs, target and settings, plus the two rasters."""
    base = tomllib.loads((first / "project.toml").read_text(encoding="utf-8"))
    grid = tomllib.loads((first / "project_rasters.toml").read_text(encoding="utf-8"))
    for section in ("inputs", "target", "forage_use", "pooling", "uncertainty", "diet"):
        assert grid[section] == base[section], section
    assert set(grid["availability"].values()) >= set(RASTERS)
    project = load_project(first / "project.toml")  # the package's own validation
    assert project.config.target.animal_class == "adult_female"


def test_every_class_has_exactly_one_energy_value(first: Path) -> None:
    forage = pd.read_csv(first / "forage_classes.csv")
    has_de, has_dmd = forage["de_kcal_per_g"].notna(), forage["dmd_pct"].notna()
    assert (has_de ^ has_dmd).all()
    assert has_dmd.sum() in (1, 2)
    assert forage["forage_class"].is_unique
    assert 10 <= len(forage) <= 12
    assert forage["key"].sum() in (2, 3)
    assert forage["allowable_use"].between(0, 1).all()


def test_plots_reference_known_strata_and_classes(first: Path) -> None:
    plots = pd.read_csv(first / "plots.csv")
    strata = read_layer(first, "strata.gpkg")
    forage = pd.read_csv(first / "forage_classes.csv")
    assert set(plots["stratum"]) == set(strata["stratum"])  # every stratum has plots
    assert set(plots["forage_class"]) <= set(forage["forage_class"])
    assert not plots.duplicated(["plot_id", "forage_class"]).any()
    assert (plots.groupby("plot_id")["stratum"].nunique() == 1).all()
    assert 250 <= plots["plot_id"].nunique() <= 400
    assert (plots["dry_mass_g"] > 0).all() and (plots["frame_area_m2"] > 0).all()


def test_strata_have_different_forage_mixes(first: Path) -> None:
    plots = pd.read_csv(first / "plots.csv")
    mix = plots.groupby(["stratum", "forage_class"]).size().unstack(fill_value=0) > 0
    assert not mix.duplicated().any()


def test_strata_polygons_valid_and_not_overlapping(first: Path) -> None:
    strata = read_layer(first, "strata.gpkg")
    assert shapely.is_valid(strata.geometry.to_numpy()).all()
    assert 5 <= strata["stratum"].nunique() <= 6
    assert overlapping_pairs(strata.geometry) == []
    assert strata["accessible_fraction"].between(0, 1).all()
    assert (strata["accessible_fraction"] < 1).sum() >= 2


def test_strata_leave_a_small_part_unmapped(first: Path) -> None:
    area = example.study_area().area
    mapped = shapely.union_all(read_layer(first, "strata.gpkg").geometry.to_numpy()).area
    assert 0 < (area - mapped) / area < 0.05


def test_strata_cross_unit_boundaries(first: Path) -> None:
    units = read_layer(first, "units.gpkg")
    strata = read_layer(first, "strata.gpkg")
    units_touched = [
        sum(piece.intersection(unit).area > 1.0 for unit in units.geometry)
        for piece in strata.geometry
    ]
    assert max(units_touched) >= 2


def test_units_tile_the_study_area(first: Path) -> None:
    units = read_layer(first, "units.gpkg")
    assert 5 <= len(units) <= 7 and units["unit_id"].is_unique
    assert shapely.is_valid(units.geometry.to_numpy()).all()
    assert overlapping_pairs(units.geometry) == []
    area = example.study_area().area
    assert units.geometry.area.sum() == pytest.approx(area, rel=1e-9)
    assert shapely.union_all(units.geometry.to_numpy()).area == pytest.approx(area, rel=1e-9)


def test_current_animals_whole_and_one_unit_over_stocked(first: Path) -> None:
    """At least one unit holds more deer than its forage at allowable use could feed."""
    units = read_layer(first, "units.gpkg")
    strata = read_layer(first, "strata.gpkg")
    assert pd.api.types.is_integer_dtype(units["current_animals"])
    assert (units["current_animals"] > 0).all()
    usable_kg = example.usable_forage_kg(units, strata).to_numpy()
    need_kg = units["current_animals"].to_numpy() * (
        example.HERD_SIZING_INTAKE_KG_PER_DAY * example.SEASON_DAYS
    )
    assert (need_kg > usable_kg).any() and (need_kg < usable_kg).any()


def test_shares_sum_to_one(first: Path) -> None:
    animals = pd.read_csv(first / "animal_classes.csv")
    assert animals["share"].sum() == pytest.approx(1.0)
    assert animals["animal_class"].is_unique and (animals["body_mass_kg"] > 0).all()


def test_counts_cover_every_unit_and_year(first: Path) -> None:
    counts = pd.read_csv(first / "counts.csv")
    units = read_layer(first, "units.gpkg")
    assert set(counts["unit_id"]) == set(units["unit_id"])
    per_unit = counts.groupby("unit_id")["year"].agg(["nunique", "min", "max"])
    assert (per_unit["nunique"] == example.N_COUNT_YEARS).all()
    assert (per_unit["max"] - per_unit["min"] == example.N_COUNT_YEARS - 1).all()
    assert np.issubdtype(counts["count"].dtype, np.integer) and (counts["count"] > 0).all()
