"""Tests of nutricap.workflow on the invented example landscape and on small projects.

The example's numbers are invented for the example: these tests check
consistency (every unit present, NCC ≤ ECC, density arithmetic, conservation),
never the values themselves.
"""

import hashlib
import json

import geopandas as gpd
import numpy as np
import pandas as pd
import pytest

from nutricap.inputs.project import load_project
from nutricap.workflow import estimate, run_estimate


def test_every_unit_present(example_estimate, example_project):
    units = gpd.read_file(example_project.parent / "units.gpkg")
    assert sorted(example_estimate.by_unit["unit_id"]) == sorted(units["unit_id"])


def test_ncc_never_exceeds_ecc(example_estimate):
    table = example_estimate.by_unit
    assert (table["ncc_animals"] <= table["ecc_animals"] + 1e-9).all()
    assert (table["ncc_animals"] > 0).all()


def test_density_consistent_with_animals_and_area(example_estimate):
    table = example_estimate.by_unit
    # 1 km² = 100 ha (SI definitions).
    np.testing.assert_allclose(
        table["ncc_per_km2"], table["ncc_animals"] / (table["area_ha"] / 100)
    )
    days = example_estimate.season_days
    np.testing.assert_allclose(table["ncc_animals"] * days, table["ncc_animal_days"])


def test_available_forage_conserved(example_estimate):
    # Σ over units of available forage = Σ over (unit, stratum) pieces of accessible ha × mean.
    supply = example_estimate.supply.table().groupby("stratum")["mean_kg_per_ha"].sum()
    pieces = example_estimate.areas.by_unit_stratum
    expected = (pieces["accessible_ha"] * pieces["stratum"].map(supply)).sum()
    assert example_estimate.by_unit["available_forage_kg"].sum() == pytest.approx(
        expected, rel=1e-12
    )
    by_class = example_estimate.by_unit_class["available_kg"].sum()
    assert by_class == pytest.approx(expected, rel=1e-12)


def test_eaten_respects_allowable_use(example_estimate):
    table = example_estimate.by_unit_class
    # With cap_at_allowable_use the NCC diet never takes more than allowable use × available.
    # (Per class, the cap applies per stratum item, so the sum obeys it too.)
    assert (table["ncc_eaten_kg"] <= table["available_kg"] + 1e-6).all()


def test_patch_pooling_never_exceeds_unit_pooling(project):
    project_file = project
    unit = estimate(load_project(project_file)).by_unit.set_index("unit_id")
    text = project_file.read_text().replace('mode = "unit"', 'mode = "patch"')
    project_file.write_text(text)
    patch = estimate(load_project(project_file)).by_unit.set_index("unit_id")
    # Each patch meeting the diet alone is a restriction of the pooled problem (Hobbs & Swift
    # 1985 LP: the patch solutions together are feasible for the pooled LP).
    assert (patch["ncc_animal_days"] <= unit["ncc_animal_days"] * (1 + 1e-9)).all()
    pd.testing.assert_series_equal(patch["ecc_animal_days"], unit["ecc_animal_days"], rtol=1e-9)


def test_row_order_of_plots_does_not_matter(project):
    project_file = project
    before = estimate(load_project(project_file)).by_unit
    plots = pd.read_csv(project_file.parent / "plots.csv")
    plots.sample(frac=1.0, random_state=3).to_csv(project_file.parent / "plots.csv", index=False)
    after = estimate(load_project(project_file)).by_unit
    pd.testing.assert_frame_equal(before, after, rtol=1e-10)


def test_outputs_written_and_manifest_hashes_inputs(example_project, tmp_path):
    out = tmp_path / "results"
    run_estimate(load_project(example_project), out)
    names = {p.name for p in out.iterdir()}
    assert {
        "capacity_by_unit.csv",
        "capacity_by_unit.gpkg",
        "capacity_by_unit.md",
        "run.json",
    } <= names
    manifest = json.loads((out / "run.json").read_text())
    plots = example_project.parent / "plots.csv"
    # Independent hash of the same bytes with hashlib.
    assert (
        manifest["inputs"][str(plots)]["sha256"] == hashlib.sha256(plots.read_bytes()).hexdigest()
    )
    table = pd.read_csv(out / "capacity_by_unit.csv")
    contract = [
        "unit_id",
        "area_ha",
        "available_forage_kg",
        "ncc_animal_days",
        "ncc_animals",
        "ecc_animal_days",
        "ecc_animals",
        "allowable_use_animals",
        "limiting_factor",
        "ncc_per_km2",
    ]
    assert set(contract) <= set(table.columns)
    layer = gpd.read_file(out / "capacity_by_unit.gpkg", layer="capacity_by_unit")
    assert len(layer) == len(table)
    assert "Caution" in (out / "capacity_by_unit.md").read_text()
    leftovers = [p.name for p in tmp_path.iterdir() if p.name.startswith(".")]
    assert leftovers == []


#: The example's diet group (its project file, invented for the example): big sagebrush at
#: most 28 % of the diet.
EXAMPLE_SAGEBRUSH_MAX_SHARE = 0.28


def linear_dp_pct(items) -> np.ndarray:
    """Item DP by the linear Robbins et al. (1987) equation (DP = -3.87 + 0.9283 CP - 11.82
    BSA; CP terms read in a secondary table citing Hanley et al. 1992, BSA slope from memory),
    never clipped at 0 [% DM]."""
    return -3.87 + 0.9283 * items.cp_pct - 11.82 * items.tannin


def sagebrush_rows(items, max_share: float = EXAMPLE_SAGEBRUSH_MAX_SHARE) -> np.ndarray:
    """The row of x_sage <= M Σx as K x <= 0: K = 1[big_sagebrush] - M."""
    return (items.forage_class == "big_sagebrush").astype(float)[np.newaxis] - max_share


def linprog_ncc_animal_days(result, composition_rows: np.ndarray) -> np.ndarray:
    """NCC per unit by scipy.optimize.linprog (HiGHS): the largest Σx / intake with
    0 <= x <= allowable use × available (after the example's cattle permit), the diet DE and
    DP mixes (DP by :func:`linear_dp_pct`) and the rows K x <= 0 [animal-days]."""
    from scipy.optimize import linprog

    items, problem = result.problem.items, result.solved_problem
    caps = np.broadcast_to(problem.allowable_fraction, problem.available_kg.shape)
    de_min, dp_min = result.target.de_min_kcal_per_g, result.target.dp_min_pct
    rows = np.vstack(
        [-(items.de_kcal_per_g - de_min), -(linear_dp_pct(items) - dp_min), composition_rows]
    )
    limits = []
    for row in range(problem.available_kg.shape[0]):
        lp = linprog(
            c=-np.ones(items.size),
            A_ub=rows,
            b_ub=np.zeros(len(rows)),
            bounds=list(zip(np.zeros(items.size), problem.available_kg[row] * caps[row])),
            method="highs",
        )
        limits.append(-lp.fun)
    return problem.sum_by_unit(np.array(limits)) / result.herd.intake_kg_per_day


def test_protein_limited_ncc_equals_an_lp_with_the_linear_dp_equation(project):
    # Independent check of the whole pipeline's NCC: for every unit, scipy.optimize.linprog
    # (HiGHS) maximises forage eaten under the diet DE and DP thresholds, the example's diet
    # group and the allowable-use caps, with item DP recomputed by the linear equation.
    # The example with a lower diet DE threshold, so that protein limits (the DP threshold
    # is still derived from the target state).
    text = project.read_text(encoding="utf-8")
    project.write_text(
        text.replace("[target]\n", "[target]\ndiet_de_min_kcal_per_g = 2.0\n"), encoding="utf-8"
    )
    result = estimate(load_project(project))
    assert (linear_dp_pct(result.problem.items) < 0).any(), (
        "the example should hold forage below 4.2 % CP"
    )
    lp_days = linprog_ncc_animal_days(result, sagebrush_rows(result.problem.items))
    np.testing.assert_allclose(result.by_unit["ncc_animal_days"], lp_days, rtol=1e-8)
    assert (result.by_unit["limiting_factor"] == "protein").all()


def test_ncc_with_the_example_diet_group_equals_an_lp_with_the_share_row(example_estimate):
    # The example as it is (energy limits; the sagebrush cap binds in some units): the whole
    # pipeline's NCC against scipy.optimize.linprog with the extra row x_sage <= 0.28 Σx.
    items = example_estimate.problem.items
    lp_days = linprog_ncc_animal_days(example_estimate, sagebrush_rows(items))
    by_unit = example_estimate.by_unit
    np.testing.assert_allclose(by_unit["ncc_animal_days"], lp_days, rtol=1e-8)
    # Where the limiting factor names the group, the cap binds: without its row the LP gives
    # more, and the eaten diet holds exactly 28 % sagebrush; elsewhere the row changes nothing.
    free_days = linprog_ncc_animal_days(example_estimate, np.zeros((0, items.size)))
    binds = by_unit["limiting_factor"].str.contains("diet_group").to_numpy()
    assert binds.any() and not binds.all()
    assert (free_days[binds] > lp_days[binds] * (1 + 1e-6)).all()
    np.testing.assert_allclose(free_days[~binds], lp_days[~binds], rtol=1e-8)
    eaten = example_estimate.by_unit_class.pivot_table(
        index="unit_id", columns="forage_class", values="ncc_eaten_kg", aggfunc="sum"
    ).loc[by_unit["unit_id"]]
    sage_share = (eaten["big_sagebrush"] / eaten.sum(axis=1)).to_numpy()
    np.testing.assert_allclose(sage_share[binds], EXAMPLE_SAGEBRUSH_MAX_SHARE, rtol=1e-9)


def test_outputs_of_lon_lat_units_carry_the_named_equal_area_crs(project, tmp_path):
    import rasterio
    from pyproj import CRS

    units_path = project.parent / "units.gpkg"
    gpd.read_file(units_path).to_crs("EPSG:4326").to_file(units_path, driver="GPKG")
    text = project.read_text().replace("bootstrap_replicates = 1000", "bootstrap_replicates = 0")
    project.write_text(text)
    out = tmp_path / "results"
    run_estimate(load_project(project), out, report=False)
    layer_crs = CRS.from_user_input(gpd.read_file(out / "capacity_by_unit.gpkg").crs)
    with rasterio.open(out / "capacity_density.tif") as raster:
        raster_crs = CRS.from_wkt(raster.crs.to_wkt())
    manifest = json.loads((out / "run.json").read_text())
    for crs in (layer_crs, raster_crs):
        # Read back with pyproj from the files' own WKT: named, and a Lambert azimuthal
        # equal-area projection (PROJ method name).
        assert crs.name.startswith("Lambert azimuthal equal-area centred on the units")
        assert crs.coordinate_operation.method_name == "Lambert Azimuthal Equal Area"
    assert manifest["derived"]["area_crs"] == layer_crs.name


def test_unit_partly_off_the_strata_map_is_noted(example_estimate, example_project):
    from shapely.ops import unary_union

    folder = example_project.parent
    units = gpd.read_file(folder / "units.gpkg")
    strata = unary_union(gpd.read_file(folder / "strata.gpkg").geometry)
    # Reference: shapely's intersection of each unit with the union of the strata.
    share = units.geometry.intersection(strata).area / units.geometry.area
    partial = units.loc[share < 1 - 1e-4, "unit_id"].tolist()
    assert partial  # the example leaves ground unmapped (invented for the example)
    note = next(n for n in example_estimate.notes if "only partly covered" in n)
    for unit_id, fraction in zip(units["unit_id"], share):
        if unit_id in partial:
            assert f"{unit_id} ({fraction:.1%} of its" in note
        else:
            assert f"{unit_id} (" not in note


def test_counts_of_unknown_units_and_sampled_bare_strata_are_noted(project):
    with (project.parent / "counts.csv").open("a") as stream:
        stream.write("Nowhere Flat,2022,30\nNowhere Flat,2023,35\nNowhere Flat,2024,40\n")
    text = project.read_text().replace(
        "[forage_use]",
        '[supply]\nstrata_without_forage = ["sagebrush_steppe", "glacier"]\n\n[forage_use]',
    )
    project.write_text(text.replace("bootstrap_replicates = 1000", "bootstrap_replicates = 0"))
    notes = estimate(load_project(project)).notes
    counts_note = next(n for n in notes if n.startswith("counts for 1 unit id(s)"))
    assert "'Nowhere Flat'" in counts_note and "(3 rows)" in counts_note  # invented rows
    plots = pd.read_csv(project.parent / "plots.csv")
    n_steppe = plots.loc[plots["stratum"] == "sagebrush_steppe", "plot_id"].nunique()  # pandas
    assert any(f"sagebrush_steppe ({n_steppe} plots)" in n for n in notes)
    assert any("not on the strata map" in n and "glacier" in n for n in notes)


def test_trend_compares_the_counts_with_the_units_they_cover(example_project, tmp_path):
    # Counts of two units and of one id that is no unit (values invented for the test).
    from nutricap.inputs.counts import read_counts
    from nutricap.workflow import counts_trend

    project = load_project(example_project)
    result = estimate(project)
    by_unit = result.by_unit
    two = by_unit["unit_id"].tolist()[:2]
    rows = [
        {"unit_id": unit, "year": year, "count": 100 + 10 * index + year - 2015}
        for index, unit in enumerate([*two, "Nowhere"])
        for year in range(2015, 2021)
    ]
    path = tmp_path / "counts.csv"
    pd.DataFrame(rows).to_csv(path, index=False)
    figures = counts_trend(project, read_counts(path), lambda message: None, by_unit)
    chosen = by_unit[by_unit["unit_id"].isin(two)]
    assert figures["capacity"]["units"] == two
    assert figures["capacity"]["ncc_animals"] == pytest.approx(chosen["ncc_animals"].sum())
    assert figures["capacity"]["ecc_animals"] == pytest.approx(chosen["ecc_animals"].sum())
    assert figures["unmatched_units"] == ["Nowhere"] and not figures["counted_all_units"]
    assert figures["level"] == project.config.uncertainty.interval_level
