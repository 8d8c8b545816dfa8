"""Tests of nutricap.landscape.availability and .rules_on_cells: the per-cell availability rules.

Check values come from the definitions of the rules (stated beside each), from the packaged
Holechek (1988) table (slope middle classes from memory; the rest read in a secondary source,
as its source column says), from trigonometry, and
from conservation identities (forage left + forage removed = standing forage).
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from nutricap.errors import TableError
from nutricap.landscape.availability import (
    RULES,
    CellRules,
    load_reduction_table,
    reduction_fraction,
    rules_report,
)
from nutricap.landscape.rules_on_cells import (
    apply_rules,
    available_all_or_none,
    exposed_fraction_above_snow,
    slope_percent_from_degrees,
)

MILE_M = 1609.344  # international mile, exact (1959 agreement)


def test_snow_removes_all_of_a_class_shorter_than_the_snow_and_none_on_bare_ground():
    # Definition of the exposed-fraction rule: share above the snow = clip(1 - d/h, 0, 1).
    depth = np.array([0.0, 0.0, 61.0, 200.0, 60.0], dtype=np.float32)
    assert exposed_fraction_above_snow(depth, 60.0).tolist() == [1.0, 1.0, 0.0, 0.0, 0.0]
    assert available_all_or_none(depth, 60.0).tolist() == [1.0, 1.0, 0.0, 0.0, 0.0]


def test_exposed_fraction_is_the_share_above_the_snow():
    # Forage spread evenly over 0..h: the part above depth d is (h - d)/h by definition.
    assert exposed_fraction_above_snow(15.0, 60.0) == pytest.approx(0.75)
    assert exposed_fraction_above_snow(-5.0, 60.0) == 1.0  # negative depth counts as bare
    assert exposed_fraction_above_snow([0.0, 1.0], 0.0).tolist() == [1.0, 0.0]  # height 0


def test_snow_through_apply_rules():
    # Two classes, 10 cm and 100 cm tall, three cells: bare, 50 cm, 150 cm of snow.
    gross = np.array([[100, 100, 100], [200, 200, 200]], dtype=np.float32)
    rules = CellRules(height_cm=np.array([10.0, 100.0]))
    valid = np.ones(3, dtype=bool)
    depth = np.array([0.0, 50.0, 150.0], dtype=np.float32)
    outcome = apply_rules(gross, rules, valid, snow_depth_cm=depth)
    # Bare ground: nothing removed; 50 cm: short class gone, tall class half (definition);
    # 150 cm: everything buried.
    np.testing.assert_allclose(outcome.available_kg_per_ha, [[100, 0, 0], [200, 100, 0]])
    np.testing.assert_allclose(outcome.removed_kg_per_ha["snow"], [0, 200, 300])
    assert outcome.affected["snow"].tolist() == [0.0, 1.0, 1.0]


def test_packaged_holechek_slope_table():
    table = load_reduction_table(None, "slope")
    assert "Holechek 1988" in table.source
    # Holechek 1988, Rangelands 10:10-14: 0-10 % slope no reduction and over 60 % ungrazeable
    # (100 %) read in Oberlie 2008 capstone slides (slideplayer.com/slide/8233399, slide 8);
    # 11-30 % 30 % and 31-60 % 60 % from memory.
    slopes = [0.0, 5.0, 10.0, 25.0, 30.0, 45.0, 60.0, 61.0, 120.0]
    expected = [0.0, 0.0, 0.0, 0.3, 0.3, 0.6, 0.6, 1.0, 1.0]
    np.testing.assert_allclose(table.reduction_of(slopes), expected, rtol=1e-6)


def test_packaged_holechek_water_table():
    table = load_reduction_table(None, "distance_to_water")
    # Holechek 1988 as read in Oberlie 2008 capstone slides (slideplayer.com/slide/8233399,
    # slide 9): under 1 mile from water no reduction, 1-2 miles 50 %, over 2 miles 100 %;
    # miles in metres by the international mile.
    distances = [0.0, 0.5 * MILE_M, 1.0 * MILE_M, 1.5 * MILE_M, 2.0 * MILE_M, 2.5 * MILE_M]
    expected = [0.0, 0.0, 0.0, 0.5, 0.5, 1.0]
    np.testing.assert_allclose(table.reduction_of(distances), expected, rtol=1e-6)


def test_slope_and_water_reductions_multiply():
    # One cell at 25 % slope, 1.5 miles from water: 30 % (Holechek 1988, from memory) then
    # 50 % (Holechek 1988 as read in Oberlie 2008 slide 9) applied one after the other leave
    # 0.7 × 0.5 = 0.35 of the forage.
    rules = CellRules(
        slope_table=load_reduction_table(None, "slope"),
        water_table=load_reduction_table(None, "distance_to_water"),
    )
    gross = np.array([[1000.0]], dtype=np.float32)
    outcome = apply_rules(
        gross,
        rules,
        np.ones(1, bool),
        slope=np.array([25.0], np.float32),
        distance_to_water_m=np.array([1.5 * MILE_M], np.float32),
    )
    assert outcome.available_kg_per_ha[0, 0] == pytest.approx(350.0)
    assert outcome.removed_kg_per_ha["slope"][0] == pytest.approx(300.0)
    assert outcome.removed_kg_per_ha["distance_to_water"][0] == pytest.approx(350.0)
    assert outcome.access[0] == pytest.approx(0.35)


def test_slope_in_degrees():
    # tan 45° = 1 → 100 %; tan 30° = 1/√3 (trigonometry).
    assert slope_percent_from_degrees(45.0) == pytest.approx(100.0, rel=1e-6)
    assert slope_percent_from_degrees(30.0) == pytest.approx(100 / math.sqrt(3), rel=1e-6)


def test_reduction_class_bounds_are_inclusive_upper():
    # Definition used for the table: a value belongs to the first class with value <= upper.
    got = reduction_fraction([10.0, 10.0001, 30.0], [10.0, 30.0, np.inf], [0.0, 0.3, 1.0])
    np.testing.assert_allclose(got, [0.0, 0.3, 0.3], rtol=1e-6)


def test_user_table_with_a_gap_is_refused(tmp_path):
    path = tmp_path / "slope.csv"
    path.write_text("lower,upper,reduction\n0,10,0\n15,40,0.5\n40,,1\n")
    with pytest.raises(TableError, match=r"row 3.*lower = upper of the previous class"):
        load_reduction_table(path, "slope")


def test_user_table_without_an_open_last_class_is_refused(tmp_path):
    path = tmp_path / "slope.csv"
    path.write_text("lower,upper,reduction\n0,10,0\n10,40,0.5\n")
    with pytest.raises(TableError, match="last class open"):
        load_reduction_table(path, "slope")


def test_user_table_keeps_its_own_factor_rows(tmp_path):
    path = tmp_path / "edited.csv"
    path.write_text(
        "factor,lower,upper,reduction,source\n"
        "slope,0,20,0,edited for deer\nslope,20,,0.5,edited for deer\n"
        "distance_to_water,0,,0,edited for deer\n"
    )
    table = load_reduction_table(path, "slope")
    assert table.source == "edited for deer"
    np.testing.assert_allclose(table.reduction_of([15.0, 25.0]), [0.0, 0.5])


def test_exclusions_and_minimum_forage():
    gross = np.array([[50.0, 50.0, 5.0, 50.0]], dtype=np.float32)
    rules = CellRules(exclusions=True, min_forage_kg_per_ha=10.0)
    valid = np.array([True, True, True, False])
    outcome = apply_rules(
        gross * valid, rules, valid, excluded=np.array([False, True, False, False])
    )
    # Excluded cell and the cell below 10 kg/ha lose everything; the cell without data keeps
    # nothing and counts for no rule (definitions of the rules).
    np.testing.assert_allclose(outcome.available_kg_per_ha, [[50.0, 0.0, 0.0, 0.0]])
    assert outcome.affected["exclusions"].tolist() == [0.0, 1.0, 0.0, 0.0]
    assert outcome.affected["min_forage"].tolist() == [0.0, 0.0, 1.0, 0.0]
    assert outcome.access.tolist() == [1.0, 0.0, 0.0, 0.0]


def test_a_rule_counts_no_area_where_it_removed_nothing():
    # A cell with no forage is below any minimum density, yet the rule removes nothing there:
    # it must not count its area (the report once showed 172 ha "acted on" with 0 kg removed).
    gross = np.array([[0.0, 5.0, 50.0]], dtype=np.float32)
    rules = CellRules(min_forage_kg_per_ha=10.0)
    valid = np.ones(3, dtype=bool)
    outcome = apply_rules(gross, rules, valid)
    assert outcome.affected["min_forage"].tolist() == [0.0, 1.0, 0.0]
    np.testing.assert_allclose(outcome.removed_kg_per_ha["min_forage"], [0.0, 5.0, 0.0])


@settings(max_examples=60, deadline=None)
@given(
    st.lists(st.floats(0, 5000), min_size=6, max_size=6),
    st.floats(0, 300),
    st.floats(0, 100),
    st.floats(0, 6000),
    st.floats(0, 1),
    st.booleans(),
    st.floats(0, 500),
)
def test_removed_and_left_add_up_to_standing_forage(
    biomass, depth, slope, water, fraction, excluded, minimum
):
    # Conservation: forage left + Σ forage removed by each rule = standing forage.
    gross = np.array(biomass, dtype=np.float32).reshape(3, 2)
    rules = CellRules(
        height_cm=np.array([10.0, 60.0, 150.0]),
        min_forage_kg_per_ha=minimum,
        slope_table=load_reduction_table(None, "slope"),
        water_table=load_reduction_table(None, "distance_to_water"),
        partial_access=True,
        exclusions=True,
    )
    outcome = apply_rules(
        gross,
        rules,
        np.ones(2, bool),
        excluded=np.array([excluded, False]),
        accessible_fraction=np.full(2, fraction, np.float32),
        snow_depth_cm=np.full(2, depth, np.float32),
        slope=np.full(2, slope, np.float32),
        distance_to_water_m=np.full(2, water, np.float32),
    )
    removed = sum(outcome.removed_kg_per_ha.values())
    left = outcome.available_kg_per_ha.sum(axis=0)
    np.testing.assert_allclose(left + removed, gross.sum(axis=0), rtol=1e-5, atol=1e-2)
    assert (outcome.available_kg_per_ha <= gross + 1e-3).all()


def test_rules_report_totals():
    table = rules_report(
        np.array(["north", "south"]),
        ["nodata", "snow"],
        area_ha=np.array([[1.0, 10.0], [2.0, 20.0]]),
        removed_kg=np.array([[np.nan, 100.0], [np.nan, 300.0]]),
        gross_kg=np.array([1000.0, 1000.0]),
    )
    total = table[(table["unit_id"] == "all units") & (table["rule"] == "snow")].iloc[0]
    # Sums of the two units; 400 of 2000 kg is 20 % (arithmetic).
    assert total["area_ha"] == 30.0
    assert total["forage_removed_pct"] == pytest.approx(20.0)
    nodata = table[(table["unit_id"] == "all units") & (table["rule"] == "nodata")].iloc[0]
    assert pd.isna(nodata["forage_removed_kg"])
    assert set(table["rule"]) <= set(RULES)
