"""Tests of current use: nutricap.science.use and nutricap.model.use.

Check values are hand computations from the stated allocation rule (documented
in docs/methods.md) and the definition of allowable use (Holechek 1988); the
example landscape's numbers are invented for the example and only used for
consistency checks.
"""

import warnings

import numpy as np
import pandas as pd
import pytest
from hypothesis import given
from hypothesis import strategies as st

from nutricap.model.use import assess_use
from nutricap.science.use import (
    allocate_demand_kg,
    animals_at_use_limit,
    seasonal_demand_kg,
    utilization_fraction,
)


def test_demand_is_animals_times_intake_times_days():
    # 100 animals × 1.5 kg/day × 120 days = 18,000 kg (hand computed).
    assert seasonal_demand_kg(100, 1.5, 120) == pytest.approx(18_000)


def test_allocation_by_usable_forage_hand_computed():
    # Usable: 0.5 × 1000 = 500 and 0.25 × 2000 = 500 → half each of 600 kg (hand computed).
    eaten = allocate_demand_kg(
        np.array([600.0]), np.array([[1000.0, 2000.0]]), np.array([0.5, 0.25])
    )
    np.testing.assert_allclose(eaten, [[300.0, 300.0]])
    np.testing.assert_allclose(utilization_fraction(eaten, [[1000.0, 2000.0]]), [[0.3, 0.15]])


def test_preference_shifts_demand():
    eaten = allocate_demand_kg(
        np.array([600.0]), np.array([[1000.0, 2000.0]]), np.array([0.5, 0.25]), np.array([2.0, 1.0])
    )
    # Weights 2 × 500 and 1 × 500 → 400 and 200 (hand computed).
    np.testing.assert_allclose(eaten, [[400.0, 200.0]])


@given(
    available=st.lists(st.floats(1.0, 1e6), min_size=2, max_size=6),
    uses=st.lists(st.floats(0.05, 1.0), min_size=6, max_size=6),
)
def test_at_allowable_use_capacity_every_class_is_used_to_its_allowable_level(available, uses):
    available = np.array([available])
    allowable = np.array(uses[: available.shape[1]])
    capacity_kg = (allowable * available).sum()  # allowable-use capacity × intake × days
    eaten = allocate_demand_kg(np.array([capacity_kg]), available, allowable)
    np.testing.assert_allclose(utilization_fraction(eaten, available)[0], allowable, rtol=1e-9)


def test_reduction_clears_the_flag():
    available = np.array([[1000.0, 3000.0]])
    allowable = np.array([0.4, 0.6])
    current = np.array([50.0])

    def use_of(animals):
        eaten = allocate_demand_kg(seasonal_demand_kg(animals, 2.0, 100), available, allowable)
        return utilization_fraction(eaten, available)

    use = use_of(current)
    assert (use > allowable).any()  # 10,000 kg demand > 2,200 kg usable: over-used
    limit = animals_at_use_limit(current, use, allowable)
    after = use_of(limit)
    assert (after <= allowable + 1e-12).all()
    assert np.isclose(after / allowable, 1.0).any()  # the most used class sits at its limit


def test_no_animals_means_no_limit_reached_without_a_warning():
    # Zero animals use nothing (0 × anything): no class reaches its limit (inf); with 100
    # animals using 0.25 of a class whose allowable use is 0.5 the limit is 200 (hand computed).
    use = np.array([[0.0, 0.0], [0.25, 0.1]])
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        limit = animals_at_use_limit(np.array([0.0, 100.0]), use, np.array([0.5, 0.5]))
    np.testing.assert_array_equal(limit, [np.inf, 200.0])


def test_assess_with_a_unit_without_animals(example_estimate):
    # A unit with no animals needs no reduction (0, not blank) and uses no forage.
    estimate = example_estimate
    by_unit = estimate.by_unit[list(_capacity_columns())]
    current = np.where(np.arange(len(by_unit)) == 2, 0.0, by_unit["ncc_animals"] * 2)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        table, by_class = assess_use(
            estimate.problem,
            by_unit,
            current,
            intake_kg_per_day=estimate.herd.intake_kg_per_day,
            season_days=estimate.season_days,
        )
    empty = table.iloc[2]
    assert empty["reduction_for_key_use_animals"] == 0.0
    assert empty["reduction_for_ncc_animals"] == 0.0
    assert empty["key_use_fraction"] == 0.0 and not empty["overuse"] and not empty["above_ncc"]
    reductions = table[["reduction_for_key_use_animals", "reduction_for_ncc_animals"]]
    assert reductions.notna().all().all()
    assert (table.drop(index=2)["reduction_for_ncc_animals"] > 0).all()


def test_assess_on_example_at_allowable_use_capacity(example_estimate):
    estimate = example_estimate
    by_unit = estimate.by_unit.drop(
        columns=[c for c in estimate.by_unit.columns if c not in _capacity_columns()]
    )
    at_capacity = by_unit["allowable_use_animals"].to_numpy()
    table, by_class = assess_use(
        estimate.solved_problem,
        by_unit,
        at_capacity,
        intake_kg_per_day=estimate.herd.intake_kg_per_day,
        season_days=estimate.season_days,
    )
    # Equal preference, numbers at the allowable-use capacity: key use = allowable use.
    np.testing.assert_allclose(table["key_use_fraction"], table["key_allowable_use"], rtol=1e-9)
    used = by_class[by_class["use_fraction"] > 0]
    np.testing.assert_allclose(used["use_fraction"], used["allowable_use"], rtol=1e-9)
    assert not table["overuse"].any()
    over, _ = assess_use(
        estimate.solved_problem,
        by_unit,
        at_capacity * 1.2,
        intake_kg_per_day=estimate.herd.intake_kg_per_day,
        season_days=estimate.season_days,
    )
    assert over["overuse"].all()
    # The reduction that clears the flag brings the herd back to the capacity.
    np.testing.assert_allclose(
        at_capacity * 1.2 - over["reduction_for_key_use_animals"], at_capacity, rtol=1e-9
    )


def _capacity_columns():
    return {"unit_id", "area_ha", "ncc_animals", "allowable_use_animals", "available_forage_kg"}


def test_example_flags_the_overstocked_unit(example_estimate):
    table = example_estimate.by_unit.set_index("unit_id")
    assert isinstance(table, pd.DataFrame)
    over = table[table["current_animals"] > table["ncc_animals"]]
    assert over["above_ncc"].all()
    np.testing.assert_allclose(
        over["reduction_for_ncc_animals"], over["current_animals"] - over["ncc_animals"]
    )
