"""Tests of treatment scenarios: nutricap.science.treatment, nutricap.model.scenarios, `compare`.

Checks are identities of the method (no effect in, no effect out), shapely
areas as the independent measure of moved land, and hand-computed
interpolation. The example's responses are invented for the example and are
never used as check values.
"""

import geopandas as gpd
import numpy as np
import pandas as pd
import pytest
from shapely.affinity import translate
from shapely.geometry import box

from nutricap.cli import main
from nutricap.inputs.project import load_project
from nutricap.model.scenarios import load_scenario, pieces_in_year
from nutricap.science.treatment import response_at
from nutricap.workflow import compare, estimate


def test_response_interpolation_hand_computed():
    years, values = [1, 5, 10], [2.0, 1.2, 1.1]
    # Halfway between years 1 and 5: (2.0 + 1.2) / 2 = 1.6 (linear interpolation).
    assert float(response_at(years, values, 3, untreated=1.0)) == pytest.approx(1.6)
    assert float(response_at(years, values, 0, untreated=1.0)) == pytest.approx(2.0)
    assert float(response_at(years, values, 11, untreated=1.0)) == 1.0  # after the last year
    assert float(response_at(years, values, -1, untreated=1.0)) == 1.0  # not yet treated


def _ncc_change(project_file, scenario):
    _, table = compare(load_project(project_file), scenario)
    return table


def test_neutral_response_changes_nothing(project):
    responses = pd.read_csv(project.parent / "treatment_responses.csv")
    responses["biomass_multiplier"] = 1.0
    responses["de_shift_kcal_per_g"] = 0.0
    responses["cp_shift_pct"] = 0.0
    responses.to_csv(project.parent / "treatment_responses.csv", index=False)
    table = _ncc_change(project, "juniper_thinning")
    np.testing.assert_allclose(
        table["ncc_animals_scenario"], table["ncc_animals_baseline"], rtol=1e-9
    )
    np.testing.assert_allclose(
        table["ecc_animals_scenario"], table["ecc_animals_baseline"], rtol=1e-9
    )


def test_treatment_outside_every_unit_changes_nothing(project):
    path = project.parent / "treatments_thinning.gpkg"
    layer = gpd.read_file(path)
    layer["geometry"] = layer.geometry.apply(lambda g: translate(g, xoff=200_000))
    layer.to_file(path, layer="treatments_thinning", driver="GPKG")
    table = _ncc_change(project, "juniper_thinning")
    assert table["change_animals"].abs().max() == pytest.approx(0.0, abs=1e-9)
    assert table["years_since_treatment"].isna().all()


def test_effect_ends_after_the_last_listed_year(project):
    table = _ncc_change(project, "juniper_thinning")
    treated_units = table.loc[table["change_animals"].abs() > 1e-6, "unit_id"].unique()
    assert len(treated_units) > 0
    # The thinning responses end 15 years after 2027; juniper's row ends there too.
    after = table[table["year"] > 2027 + 15]
    assert after.empty or np.allclose(after["change_animals"], 0.0, atol=1e-9)
    before = table[table["year"] < 2027]
    np.testing.assert_allclose(before["change_animals"], 0.0, atol=1e-9)


def test_stratum_change_moves_the_treated_area(project):
    estimate_units = gpd.read_file(project.parent / "units.gpkg")
    strata = gpd.read_file(project.parent / "strata.gpkg")
    unit = estimate_units.geometry.iloc[0]
    x0, y0, _, _ = unit.bounds
    square = box(x0, y0, x0 + 3000, y0 + 3000).intersection(unit)
    burn = gpd.GeoDataFrame(
        {"treatment": ["prescribed_burn"], "year": [2028], "new_stratum": ["burned_shrub"]},
        geometry=[square],
        crs=strata.crs,
    )
    burn.to_file(project.parent / "treatments_burn.gpkg", layer="treatments_burn", driver="GPKG")
    loaded = load_project(project)
    result = estimate(loaded)
    scenario = load_scenario(loaded, "prescribed_burn", result.areas, result.supply.strata)
    pieces = pieces_in_year(result.areas.by_unit_stratum, scenario.treated, 2030)
    moved = pieces[pieces["variant"] != ""]
    # Independent: shapely area of (square ∩ each stratum polygon) × its accessible fraction.
    expected_ha = (
        sum(
            square.intersection(g).area * f
            for g, f in zip(strata.geometry, strata["accessible_fraction"])
        )
        / 1e4
    )
    assert moved["accessible_ha"].sum() == pytest.approx(expected_ha, rel=1e-6)
    assert set(moved["stratum"]) == {"burned_shrub"}
    # Land is conserved: what left the old strata arrived in the new one.
    total_before = result.areas.by_unit_stratum["accessible_ha"].sum()
    assert pieces["accessible_ha"].sum() == pytest.approx(total_before, rel=1e-9)


def test_compare_command_writes_table_and_chart(project, tmp_path, capsys):
    out = tmp_path / "compare"
    argv = ["compare", str(project), "--scenario", "prescribed_burn", "--out", str(out)]
    code = main([*argv, "--no-figures"])
    assert code == 0
    table = pd.read_csv(out / "scenario_by_unit.csv")
    required = [
        "unit_id",
        "scenario",
        "year",
        "years_since_treatment",
        "ncc_animals_baseline",
        "ncc_animals_scenario",
        "change_animals",
    ]
    assert set(required) <= set(table.columns)
    chart = (out / "scenario_by_unit.png").read_bytes()
    assert chart.startswith(b"\x89PNG\r\n\x1a\n") and len(chart) > 10_000
    assert "CAUTION" in capsys.readouterr().out


def test_unknown_scenario_is_one_clear_message(project, tmp_path, capsys):
    code = main(
        ["compare", str(project), "--scenario", "clearcut", "--out", str(tmp_path / "x"), "--quiet"]
    )
    err = capsys.readouterr().err
    assert code == 2 and "no scenario named 'clearcut'" in err and "juniper_thinning" in err
    assert not (tmp_path / "x").exists()


def test_an_unknown_scenario_is_refused_before_the_estimate(project, tmp_path, monkeypatch):
    # Even after a known one: the estimate (bootstrap included) must not run first.
    import nutricap.workflow.comparison as comparison

    def no_estimate(*_args, **_kwargs):
        raise AssertionError("the estimate ran before the scenario names were checked")

    monkeypatch.setattr(comparison, "estimate", no_estimate)
    arguments = ["compare", str(project), "--scenario", "juniper_thinning"]
    arguments += ["--scenario", "clearcut", "--out", str(tmp_path / "x"), "--quiet"]
    assert main(arguments) == 2


@pytest.mark.parametrize("year", [1e20, float("inf"), 1750, 2027.5])
def test_treatment_year_outside_the_calendar_is_refused(project, year):
    # A year of 1e20 was once cast to a negative integer and the treatment silently dropped.
    from nutricap.errors import SpatialError
    from nutricap.model.scenarios import read_treatments

    path = project.parent / "treatments_thinning.gpkg"
    layer = gpd.read_file(path)
    layer["year"] = layer["year"].astype(float)
    layer.loc[0, "year"] = year
    layer.to_file(path, layer="treatments_thinning", driver="GPKG")
    with pytest.raises(SpatialError, match=r"feature 1 .*attribute 'year'.*from 1800 to 2200"):
        read_treatments(path, None, [])


@pytest.mark.parametrize("column", ["treatment", "year"])
def test_a_null_treatment_attribute_is_named_as_empty(project, column):
    # A NULL attribute read as NaN: the message once said "treatment nan has no rows".
    from nutricap.errors import SpatialError
    from nutricap.model.scenarios import read_treatments

    path = project.parent / "treatments_thinning.gpkg"
    layer = gpd.read_file(path)
    layer[column] = layer[column].astype(object)
    layer.loc[0, column] = None
    layer.to_file(path, layer="treatments_thinning", driver="GPKG")
    with pytest.raises(SpatialError, match=rf"feature 1 .*'{column}'.*found an empty \(NULL\)"):
        read_treatments(path, None, [])


def test_a_treatment_polygon_on_no_unit_is_noted(project):
    # One thinning polygon moved 100 km east (off the invented basin): it changes nothing, and
    # the run says so instead of comparing a scenario that silently lost a treatment.
    from shapely.affinity import translate

    from nutricap.inputs.project import load_project
    from nutricap.workflow.comparison import compare_scenarios

    path = project.parent / "treatments_thinning.gpkg"
    layer = gpd.read_file(path)
    layer.loc[1, "geometry"] = translate(layer.geometry.iloc[1], xoff=100_000.0)
    layer.to_file(path, layer="treatments_thinning", driver="GPKG")
    result, _table, _ = compare_scenarios(load_project(project), "juniper_thinning")
    notes = [note for note in result.notes if "lie on no management unit" in note]
    assert notes == [
        "scenario 'juniper_thinning': 1 of 3 treatment polygon(s) lie on no management unit "
        "(feature(s) 2) and change nothing (a mix-up of CRS or of files?)"
    ]


def test_compare_report_of_several_scenarios(project, tmp_path, capsys):
    import json
    import re

    out = tmp_path / "both"
    argv = ["compare", str(project), "--scenario", "juniper_thinning"]
    argv += ["--scenario", "prescribed_burn", "--out", str(out), "--no-figures", "--quiet"]
    assert main(argv) == 0
    manifest = json.loads((out / "run.json").read_text())
    assert manifest["command"] == "compare"
    assert manifest["derived"]["scenarios"] == ["juniper_thinning", "prescribed_burn"]
    table = pd.read_csv(out / "scenario_by_unit.csv")
    assert set(table["scenario"]) == {"juniper_thinning", "prescribed_burn"}
    html = (out / "report.html").read_text(encoding="utf-8")
    section = re.search(r'<section id="scenario">(.*?)</section>', html, re.DOTALL).group(1)
    config = load_project(project).config
    for name in ("juniper_thinning", "prescribed_burn"):
        assert f"Scenario {name}" in section
        assert config.scenarios[name].description.replace("'", "&#39;") in section
    for words in ("Treated land by scenario", "Responses applied", "How the scenarios are"):
        assert words in section
    # The interpolation at the treatment year and after the last listed year, as
    # response_at does (tests above): first value from year 0, untreated after the last.
    assert "(0 years since)" in section and "returns to its untreated forage" in section
    # Treatment years of the layers, in the treated-land table.
    for path in ("treatments_thinning.gpkg", "treatments_burn.gpkg"):
        for year in gpd.read_file(project.parent / path)["year"]:
            assert f"<td>{int(year)}</td>" in section


def _misspell_response(project, column, good, bad):
    """Replace the first response row's ``good`` in ``column`` by ``bad``; its spreadsheet row."""
    path = project.parent / "treatment_responses.csv"
    table = pd.read_csv(path, dtype=str, keep_default_na=False)
    index = int(np.flatnonzero(table[column] == good)[0])
    table.loc[index, column] = bad
    table.to_csv(path, index=False)
    return index + 2  # the header is row 1


@pytest.mark.parametrize(
    ("column", "good", "bad"),
    [("forage_class", "juniper", "junipr"), ("growth_form", "browse", "brouse")],
)
def test_response_naming_an_unknown_class_or_growth_form_is_refused(project, column, good, bad):
    # A misspelt name matched no forage: the response silently did not apply.
    from nutricap.errors import TableError
    from nutricap.model.scenarios import read_scenario

    row = _misspell_response(project, column, good, bad)
    words = column.replace("_", " ")
    pattern = (
        rf"treatment_responses\.csv: row {row}, column '{column}': unknown {words} '{bad}'; "
        rf"did you mean '{good}'\? \(expected a {words} of the forage-class table "
        rf"\(.*'{good}'.*\); found '{bad}'\)"
    )
    with pytest.raises(TableError, match=pattern):
        read_scenario(load_project(project), "juniper_thinning", [])


def test_compare_with_an_unknown_response_class_exits_2(project, tmp_path, capsys):
    row = _misspell_response(project, "forage_class", "juniper", "junipr")
    out = tmp_path / "x"
    argv = ["compare", str(project), "--scenario", "juniper_thinning", "--out", str(out)]
    assert main([*argv, "--quiet", "--no-figures"]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and f"row {row}, column 'forage_class'" in err[0]
    assert "Traceback" not in err[0] and not out.exists()
