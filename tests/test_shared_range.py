"""Tests of other herbivores on the shared range: nutricap.science.use.allocate_within_caps_kg
and nutricap.model.shared_range.

Check values: hand computations from the stated allocation rule (docs/methods.md) and the
Hobbs & Swift (1985) diet constraint; the allocation against an independent direct loop and
against scipy.optimize.minimize; the AUM against the 30-day AUM of 26 lb/day = 780 lb
(SRM 1998 glossary, read; 26 lb/day read in secondary sources, see
nutricap.science.energetics). The example landscape's numbers are invented for the example
and only used for consistency checks.
"""

import numpy as np
import pandas as pd
import pytest
from hypothesis import given
from hypothesis import strategies as st
from scipy.optimize import minimize

from nutricap.example import OTHER_HERBIVORES_TOML
from nutricap.inputs.project import OtherHerbivoreSection, load_project
from nutricap.model.problem import CapacityProblem, ForageItems, solve_problem
from nutricap.model.shared_range import OtherHerd, seasonal_demand, share_range
from nutricap.science.use import allocate_within_caps_kg
from nutricap.workflow import estimate

KG_PER_LB = 0.45359237  # exact (international pound, 1959)


# --- the allocation ------------------------------------------------------------------------


def test_allocation_hand_computed():
    # Headroom 100 and 300 kg, preference 3 : 1 (hand computed):
    # demand 200: weights 300 : 300 → 100 and 100 (item 0 just full, λ = 1/3);
    # demand 300: proportional would give 150 > 100, so item 0 is filled to 100 and the
    #   other 200 go to item 1 (λ = 2/3: 300 × 2/3 = 200);
    # demand 500: both full (400 kg), 100 kg unmet.
    taken, unmet = allocate_within_caps_kg(
        np.array([200.0, 300.0, 500.0]), np.array([[100.0, 300.0]] * 3), np.array([3.0, 1.0])
    )
    np.testing.assert_allclose(taken, [[100, 100], [100, 200], [100, 300]])
    np.testing.assert_allclose(unmet, [0, 0, 100])


def test_allocation_without_caps_binding_is_the_proportional_rule():
    # Demand 60 over headroom 100 and 300 at equal preference: 15 and 45 (hand computed,
    # 60 × 100/400 and 60 × 300/400).
    taken, unmet = allocate_within_caps_kg(np.array([60.0]), np.array([[100.0, 300.0]]))
    np.testing.assert_allclose(taken, [[15.0, 45.0]])
    assert unmet[0] == 0.0


def direct_loop(demand, headroom, weight):
    """Water-filling by repeated proportional shares: cap the items that overflow, share the
    rest among the others (an independent algorithm, one unit at a time)."""
    taken = np.zeros_like(headroom)
    open_ = (weight > 0) & (headroom > 0)
    rest = demand
    while rest > 1e-12 * max(demand, 1.0) and open_.any():
        w = weight * headroom * open_
        offer = rest * w / w.sum()
        room = headroom - taken
        over = open_ & (offer >= room)
        if not over.any():
            taken += offer
            break
        rest -= room[over].sum()
        taken[over] = headroom[over]
        open_ &= ~over
    return taken


problems = st.integers(1, 6).flatmap(
    lambda n: st.tuples(
        st.floats(0, 5000),
        st.lists(st.floats(0, 1000), min_size=n, max_size=n),
        st.lists(st.sampled_from([0.0, 0.05, 0.3, 1.0, 2.0, 7.0]), min_size=n, max_size=n),
    )
)


@given(problems)
def test_allocation_equals_a_direct_loop(problem):
    demand, headroom, weight = problem
    headroom, weight = np.array(headroom), np.array(weight)
    taken, unmet = allocate_within_caps_kg(np.array([demand]), headroom[None, :], weight)
    expected = direct_loop(demand, headroom, weight)
    np.testing.assert_allclose(taken[0], expected, rtol=1e-9, atol=1e-9 * max(demand, 1.0))
    assert (taken[0] <= headroom * (1 + 1e-12)).all()
    assert (taken[0][weight == 0] == 0).all()
    assert unmet[0] == pytest.approx(max(demand - expected.sum(), 0.0), abs=1e-6)


def test_allocation_minimises_the_weighted_squares_as_scipy_finds():
    # KKT: the rule minimises Σ x²/(p h) subject to Σ x = D, 0 <= x <= h
    # (scipy.optimize.minimize, SLSQP, as the independent solver).
    rng = np.random.default_rng(7)
    for _ in range(5):
        headroom = rng.uniform(10, 500, 5)
        weight = rng.choice([0.2, 1.0, 3.0, 8.0], 5)
        demand = 0.7 * headroom.sum()
        taken, _ = allocate_within_caps_kg(np.array([demand]), headroom[None, :], weight)
        found = minimize(
            lambda x, w=weight * headroom: np.sum(x**2 / w),
            headroom * demand / headroom.sum(),
            method="SLSQP",
            bounds=list(zip(np.zeros(5), headroom)),
            constraints=[{"type": "eq", "fun": lambda x, d=demand: x.sum() - d}],
            options={"ftol": 1e-14, "maxiter": 500},
        )
        np.testing.assert_allclose(taken[0], found.x, rtol=1e-5, atol=1e-4)


# --- the capacity problem after the other herds --------------------------------------------


def items(de, allowable, classes=("browse", "grass")) -> ForageItems:
    n = len(de)
    return ForageItems(
        stratum=np.array(["s"] * n, dtype=object),
        forage_class=np.array(classes, dtype=object),
        de_kcal_per_g=np.array(de, dtype=float),
        dp_pct=np.zeros(n),
        allowable_use=np.array(allowable, dtype=float),
        key=np.zeros(n, dtype=bool),
        biomass_kg_per_ha=np.ones(n),
        preference=np.ones(n),
        growth_form=np.array(classes, dtype=object),
        cp_pct=np.zeros(n),
        tannin=np.zeros(n),
        variant=np.array([""] * n, dtype=object),
    )


def problem_of(available, de, allowable, classes=("browse", "grass")) -> CapacityProblem:
    available = np.atleast_2d(np.asarray(available, dtype=float))
    units = np.array([f"u{i}" for i in range(available.shape[0])], dtype=object)
    return CapacityProblem(units, np.arange(units.size), items(de, allowable, classes), available)


def herd(demand_kg, weights, units=1, timing="before", name="cattle") -> OtherHerd:
    ids = np.array([f"u{i}" for i in range(units)], dtype=object)
    return OtherHerd(
        name, timing, ids, np.broadcast_to(demand_kg, units).astype(float), None, weights
    )


def ncc_days(problem, intake=2.0, de_min=2.4):
    solution = solve_problem(
        problem,
        intake_kg_per_day=intake,
        maintenance_de_kcal_per_day=3000.0,
        de_min_kcal_per_g=de_min,
        dp_min_pct=None,
        cap_at_allowable_use=True,
    )
    return solution.ncc.animal_days


def test_hand_computed_cattle_before_deer():
    # One unit: browse 1000 kg (DE 2.8 kcal/g), grass 2000 kg (DE 2.0), allowable use 0.5;
    # deer eat 2 kg/day and need a diet DE of 2.4 (Hobbs & Swift 1985 form; numbers invented).
    # Without cattle: browse share s with 2.8 s + 2.0 (1 - s) >= 2.4, so s >= 0.5; browse is
    #   capped at 500 kg, so the diet is 500 browse + 500 grass = 1000 kg = 500 deer-days.
    # Cattle take 600 kg of grass first (grass only, within its 1000 kg allowable use):
    #   grass left 1400 kg of which 400 kg may still be used, so the diet is 500 browse +
    #   400 grass = 900 kg = 450 deer-days; 50 deer-days lost.
    # Cattle asking 1200 kg take the 1000 kg allowable (200 kg unmet); the deer then eat
    #   browse alone (DE 2.8 >= 2.4): 500 kg = 250 deer-days.
    base = problem_of([[1000.0, 2000.0]], [2.8, 2.0], [0.5, 0.5])
    cattle = {"browse": 0.0, "grass": 1.0}
    assert ncc_days(base)[0] == pytest.approx(500.0)
    shared = share_range(base, (herd(600.0, cattle),))
    np.testing.assert_allclose(shared.taken_kg["cattle"], [[0.0, 600.0]])
    np.testing.assert_allclose(shared.problem.available_kg, [[1000.0, 1400.0]])
    assert ncc_days(shared.problem)[0] == pytest.approx(450.0)
    heavy = share_range(base, (herd(1200.0, cattle),))
    assert heavy.unmet_kg["cattle"][0] == pytest.approx(200.0)
    assert ncc_days(heavy.problem)[0] == pytest.approx(250.0)


def test_timing_before_goes_first():
    # Two herds ask for the whole grass allowable use (1000 kg): the herd grazing before the
    # season is allocated first and gets it, the same-season herd goes without (hand).
    base = problem_of([[1000.0, 2000.0]], [2.8, 2.0], [0.5, 0.5])
    grass = {"browse": 0.0, "grass": 1.0}
    herds = (
        herd(1000.0, grass, timing="same_season", name="sheep"),
        herd(1000.0, grass, timing="before", name="cattle"),
    )
    shared = share_range(base, herds)
    assert shared.taken_kg["cattle"][0, 1] == pytest.approx(1000.0)
    assert shared.taken_kg["sheep"][0, 1] == pytest.approx(0.0)
    assert shared.unmet_kg["sheep"][0] == pytest.approx(1000.0)


def test_zero_numbers_change_nothing_bit_for_bit():
    base = problem_of([[1000.0, 2000.0], [300.0, 50.0]], [2.8, 2.0], [0.5, 0.4])
    shared = share_range(base, (herd(0.0, {"browse": 1.0, "grass": 1.0}, units=2),))
    assert shared.problem is base
    np.testing.assert_array_equal(ncc_days(shared.problem), ncc_days(base))


def test_a_unit_without_the_herd_keeps_its_ncc_bit_for_bit():
    base = problem_of([[1000.0, 2000.0], [300.0, 50.0]], [2.8, 2.0], [0.5, 0.4])
    some = OtherHerd(
        "cattle",
        "before",
        base.unit_ids,
        np.array([700.0, 0.0]),
        None,
        {"browse": 0.1, "grass": 1.0},
    )
    shared = share_range(base, (some,))
    assert ncc_days(shared.problem)[1] == ncc_days(base)[1]
    assert ncc_days(shared.problem)[0] < ncc_days(base)[0]


def test_demand_beyond_the_headroom_fills_every_preferred_item_exactly():
    # Demand twice the preferred headroom: by the rule every item eaten at all is filled to
    # its headroom, so it must lose exactly that, to the last bit (a fill level an ulp short
    # of 1 left 1e-16 of the headroom, which the target species then counted as forage).
    rng = np.random.default_rng(3)
    headroom = rng.uniform(10.0, 5000.0, (200, 8))
    weight = rng.choice([0.0, 0.05, 0.3, 1.0], (200, 8))
    demand = 2.0 * (headroom * (weight > 0)).sum(axis=1)
    taken, unmet = allocate_within_caps_kg(demand, headroom, weight)
    np.testing.assert_array_equal(taken, np.where(weight > 0, headroom, 0.0))
    np.testing.assert_array_equal(unmet, demand - taken.sum(axis=1))


def test_a_herd_taking_all_allowable_use_leaves_exactly_zero_ncc():
    # One unit of three patches (rows), three items eaten by cattle at preferences 1, 0.3 and
    # 0.05 (as the example's permit); the cattle ask more than the allowable use of all of
    # them, so none is left to the deer: each patch loses exactly its allowable use, the use
    # cap is exactly 0 and NCC exactly 0 (not 1e-13), whatever the amounts (20 draws).
    weights = {"browse": 0.05, "forb": 0.3, "grass": 1.0}
    for seed in range(20):
        available = np.random.default_rng(seed).uniform(100.0, 40_000.0, (3, 3))
        base = CapacityProblem(
            np.array(["u0"], dtype=object),
            np.array([0, 0, 0]),
            items([2.8, 2.6, 2.0], [0.5, 0.5, 0.4], ("browse", "forb", "grass")),
            available,
        )
        shared = share_range(base, (herd(1e6, weights),))
        usable = available * base.items.allowable_use
        np.testing.assert_array_equal(shared.taken_kg["cattle"], usable)
        np.testing.assert_array_equal(shared.problem.use_cap, 0.0)
        np.testing.assert_array_equal(ncc_days(shared.problem), 0.0)


def use_with_cattle(cattle_demand_kg, cattle_weights, deer):
    """assess_use on one unit (browse 1000 kg, the key class, and grass 2000 kg, allowable
    use 0.5 each) after cattle, for ``deer`` deer eating 2 kg/day for one day."""
    from dataclasses import replace

    from nutricap.model.use import assess_use

    base = problem_of([[1000.0, 2000.0]], [2.8, 2.0], [0.5, 0.5])
    base = replace(base, items=replace(base.items, key=np.array([True, False])))
    shared = share_range(base, (herd(cattle_demand_kg, cattle_weights),))
    by_unit = pd.DataFrame({"unit_id": base.unit_ids, "ncc_animals": [0.0]})
    table, by_class = assess_use(
        base,
        by_unit,
        np.array([float(deer)]),
        intake_kg_per_day=2.0,
        season_days=1.0,
        others_taken_kg=shared.taken_kg["cattle"],
    )
    return table.iloc[0], by_class


def test_use_after_cattle_is_measured_against_each_class_own_allowable_use():
    # Hand computed (allocation rule of docs/methods.md): cattle ask 1200 kg of grass and take
    # its 1000 kg allowable use; 100 deer (200 kg) then eat from the browse headroom (500 kg):
    # browse use 200/1000 = 0.2 within 0.5, grass use 1000/2000 = 0.5 by the cattle alone.
    # The deer at the browse limit: 500 kg / 2 kg = 250, so no reduction.
    row, by_class = use_with_cattle(1200.0, {"browse": 0.0, "grass": 1.0}, 100)
    assert row["key_class"] == "browse"
    assert row["key_use_fraction"] == pytest.approx(0.2)
    assert row["key_allowable_use"] == 0.5 and not row["overuse"]
    assert row["reduction_for_key_use_animals"] == 0.0
    grass = by_class.set_index("forage_class").loc["grass"]
    assert grass["use_fraction"] == pytest.approx(0.5) and grass["allowable_use"] == 0.5
    # 400 deer (800 kg) go beyond it: browse use 0.8; 250 deer keep it at 0.5, so 150 fewer.
    row, _ = use_with_cattle(1200.0, {"browse": 0.0, "grass": 1.0}, 400)
    assert row["key_use_fraction"] == pytest.approx(0.8) and row["overuse"]
    assert row["reduction_for_key_use_animals"] == pytest.approx(150.0)


def test_deer_beyond_cattle_that_took_all_allowable_use_are_overuse():
    # Cattle eating both classes ask 2000 kg and take all 1500 kg within allowable use. 100
    # deer (200 kg) then find no allowable forage left: their demand falls on the forage
    # left in proportion to allowable use × forage left (browse 500 × 0.5 = 250, grass
    # 1000 × 0.5 = 500): browse gets 200 × 250/750 = 66.67 kg, so browse use is
    # (500 + 66.67)/1000 = 0.5667 > 0.5: overuse, which no number of deer above 0 clears
    # (hand computed). The use was once measured against the allowable use the cattle left
    # (0), which showed 0 use and no flag.
    row, _ = use_with_cattle(2000.0, {"browse": 1.0, "grass": 1.0}, 100)
    assert row["key_use_fraction"] == pytest.approx(0.5 + 200.0 / 3000.0)
    assert row["key_allowable_use"] == 0.5 and row["overuse"]
    assert row["reduction_for_key_use_animals"] == 100.0


forage = st.lists(st.floats(0, 5000), min_size=3, max_size=3)


@given(
    st.lists(forage, min_size=1, max_size=4),
    st.floats(0, 4000),
    st.floats(0, 4000),
    st.sampled_from(["before", "same_season"]),
)
def test_more_other_herbivores_never_raise_ncc(available, demand, extra, timing):
    base = problem_of(available, [2.9, 2.3, 1.9], [0.5, 0.6, 0.3], ("a", "b", "c"))
    weights = {"a": 0.2, "b": 1.0, "c": 3.0}
    units = len(available)
    fewer = share_range(base, (herd(demand, weights, units, timing),)).problem
    more = share_range(base, (herd(demand + extra, weights, units, timing),)).problem
    none = ncc_days(base)
    assert (ncc_days(fewer) <= none * (1 + 1e-9) + 1e-9).all()
    assert (ncc_days(more) <= ncc_days(fewer) * (1 + 1e-9) + 1e-9).all()


@given(st.lists(forage, min_size=1, max_size=4), st.floats(0, 8000))
def test_all_herbivores_together_within_allowable_use(available, demand):
    base = problem_of(available, [2.9, 2.3, 1.9], [0.5, 0.6, 0.3], ("a", "b", "c"))
    shared = share_range(base, (herd(demand, {"a": 1.0, "b": 1.0, "c": 1.0}, len(available)),))
    solution = solve_problem(
        shared.problem,
        intake_kg_per_day=2.0,
        maintenance_de_kcal_per_day=3000.0,
        de_min_kcal_per_g=2.2,
        dp_min_pct=None,
        cap_at_allowable_use=True,
    )
    used = shared.taken_kg["cattle"] + solution.ncc.eaten_kg
    limit = base.available_kg * base.items.allowable_use
    assert (used <= limit * (1 + 1e-9) + 1e-6).all()


# --- AUM bookkeeping ---------------------------------------------------------------------


def section(**keys) -> OtherHerbivoreSection:
    return OtherHerbivoreSection(name="cattle", timing="before", animals_column="x", **keys)


def test_one_animal_unit_for_thirty_days_is_one_aum_of_780_lb():
    # A 1000-lb cow is one animal unit and eats 26 lb/day; 30 days = one AUM = 780 lb
    # (SRM 1998 glossary, 30-day AUM, read; 26 lb/day in secondary sources, read).
    cows = section(body_mass_kg=1000 * KG_PER_LB, days=30.0)
    demand = seasonal_demand(None, 0, cows, np.array([10.0]), "animals")
    assert demand[0] == pytest.approx(10 * 780 * KG_PER_LB)


def test_aums_are_780_lb_of_forage_each():
    # 2 AUM = 1560 lb = 707.60 kg (780 lb per AUM, SRM 1998 glossary, read).
    demand = seasonal_demand(None, 0, section(), np.array([2.0]), "aums")
    assert demand[0] == pytest.approx(1560 * KG_PER_LB)
    assert demand[0] == pytest.approx(707.60, abs=0.01)


def test_intake_given_replaces_body_mass():
    # 12 head × 11 kg/day × 45 days = 5940 kg (hand computed).
    demand = seasonal_demand(
        None, 0, section(intake_kg_per_day=11.0, days=45.0), np.array([12.0]), "animals"
    )
    assert demand[0] == pytest.approx(5940.0)


# --- the example (a cattle permit invented for the example) --------------------------------


@pytest.fixture()
def with_cattle(example_estimate):
    return example_estimate


def quick_estimate(folder, *, cattle: bool):
    """Estimate the copy in ``folder`` with 20 bootstrap replicates, with or without the
    example's ``[[other_herbivores]]`` entry."""
    text = (folder / "project.toml").read_text()
    text = text.replace("bootstrap_replicates = 1000", "bootstrap_replicates = 20")
    if not cattle:
        assert OTHER_HERBIVORES_TOML in text
        text = text.replace(OTHER_HERBIVORES_TOML, "")
    (folder / "project.toml").write_text(text)
    return estimate(load_project(folder / "project.toml"))


def test_example_ncc_with_and_without_the_permit(with_cattle, project):
    table = with_cattle.by_unit.set_index("unit_id")
    plain = quick_estimate(project.parent, cattle=False).by_unit.set_index("unit_id")
    np.testing.assert_array_equal(table["ncc_animals_without_others"], plain["ncc_animals"])
    permit = pd.read_csv(project.parent / "cattle_permit.csv").set_index("unit_id")["aums"]
    grazed = table.index.isin(permit.index)
    # Units without cattle keep their NCC bit for bit; grazed units lose some.
    np.testing.assert_array_equal(
        table.loc[~grazed, "ncc_animals"], plain.loc[~grazed, "ncc_animals"]
    )
    assert (table.loc[grazed, "ncc_animals"] < plain.loc[grazed, "ncc_animals"]).all()
    lost = plain["ncc_animals"] - table["ncc_animals"]
    taken = table["other_herbivores_taken_aum"]
    np.testing.assert_allclose(table.loc[grazed, "ncc_lost_per_other_aum"], (lost / taken)[grazed])
    assert table.loc[~grazed, "ncc_lost_per_other_aum"].isna().all()


def test_example_permit_taken_per_class_within_allowable_use(with_cattle, project):
    shared = with_cattle.shared_range
    classes = shared.by_unit_class
    herd_rows = shared.by_herd.set_index("unit_id")
    per_unit = classes.groupby("unit_id")["taken_kg"].sum()
    np.testing.assert_allclose(per_unit.reindex(herd_rows.index), herd_rows["taken_kg"])
    allowable = with_cattle.forage_classes.set_index("forage_class")["allowable_use"]
    limit = classes["available_kg"] * classes["forage_class"].map(allowable)
    assert (classes["taken_kg"] <= limit * (1 + 1e-9)).all()
    # Met demand: AUMs taken = AUMs permitted (780 lb each, SRM 1998 glossary, read).
    met = herd_rows["unmet_kg"] == 0
    np.testing.assert_allclose(herd_rows.loc[met, "taken_aum"], herd_rows.loc[met, "demand_aum"])


def test_example_sensitivity_moves_the_permit(with_cattle):
    table = with_cattle.uncertainty.sensitivity.set_index("input")
    row = table.loc["other herbivores' numbers"]
    assert row["low_change_animals"] >= 0 >= row["high_change_animals"]
    assert row["range_animals"] > 0


def test_zero_permit_is_the_same_as_no_permit(project):
    folder = project.parent
    pd.DataFrame({"unit_id": ["Coldmarrow"], "aums": [0.0]}).to_csv(
        folder / "cattle_permit.csv", index=False
    )
    zero = quick_estimate(folder, cattle=True).by_unit
    plain = quick_estimate(folder, cattle=False).by_unit
    pd.testing.assert_frame_equal(zero[plain.columns], plain, check_exact=True)
