"""Tests of nutricap.science.capacity.

Sources of the check values:
- ``scipy.optimize.linprog`` with HiGHS, an independent general-purpose LP solver, solving the
  linear programme of Hobbs & Swift (1985, J. Wildl. Manage. 49:814-822) and, with protein,
  Hanley & Rogers (1989, USDA FS Res. Note PNW-RN-485) written out term by term in ``_lp``;
- hand arithmetic shown in comments, applying the published equations to inputs invented for
  the example (the inputs are invented, the expected values follow from the equations);
- properties every correct solver must have (monotonicity, scaling, relaxation), derived in
  docs/methods.md.
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from hypothesis.extra import numpy as hnp
from scipy.optimize import linprog

from nutricap.errors import InputError
from nutricap.science import capacity
from nutricap.science import energetics as energetics_module
from nutricap.science.capacity import (
    allowable_use_capacity,
    ecological_capacity,
    nutritional_capacity,
)

REL = 1e-9  # relative agreement required with the reference LP


# --- reference: an independent general-purpose LP solver ------------------------------------


def _lp(allowed_kg: np.ndarray, surpluses: list[np.ndarray]) -> np.ndarray:
    """Optimal eaten amounts from HiGHS for: max sum x, 0 <= x <= A, sum s_k x >= 0 for each k.

    The problem is scaled by max(A) so that HiGHS's absolute tolerances act on numbers of
    order 1, then scaled back.
    """
    scale = max(allowed_kg.max(initial=0.0), 1e-300)
    res = linprog(
        -np.ones(allowed_kg.size),
        A_ub=-np.vstack(surpluses),
        b_ub=np.zeros(len(surpluses)),
        bounds=np.column_stack([np.zeros(allowed_kg.size), allowed_kg / scale]),
        method="highs",
    )
    assert res.status == 0, res.message
    return res.x * scale


def _random_problems(rng: np.random.Generator, n_units: int, n_items: int) -> dict:
    """Random unit x item problems; about 10 % of items absent, half the units use-capped."""
    available = rng.lognormal(6.0, 1.5, (n_units, n_items)) * (rng.random((n_units, n_items)) > 0.1)
    cap = np.where(rng.random((n_units, 1)) < 0.5, 1.0, rng.uniform(0.2, 1.0, (n_units, n_items)))
    return {
        "available_kg": available,
        "de_kcal_per_g": rng.uniform(1.4, 3.8, (n_units, n_items)),
        "intake_kg_per_day": rng.uniform(1.0, 4.0, n_units),
        "de_min_kcal_per_g": rng.uniform(2.0, 3.2, n_units),
        "use_cap": cap,
    }


def _expected_label(allowed: np.ndarray, eaten: np.ndarray, active: list[bool]) -> str:
    """Limiting factor read off an LP solution from its active constraints."""
    if allowed.sum() == 0.0:
        return "no_forage"
    if eaten.sum() <= 1e-9 * allowed.sum():
        return "intake"
    if np.all(eaten >= allowed * (1.0 - 1e-9)):
        return "quantity"
    names = [name for name, on in zip(["energy", "protein"], active, strict=False) if on]
    return "+".join(names)


def _is_active(eaten: np.ndarray, surplus: np.ndarray) -> bool:
    """A quality constraint is active when the diet quality is within 1e-6 of its threshold."""
    return abs(eaten @ surplus) <= 1e-6 * eaten.sum()


# --- comparison with the LP -------------------------------------------------------------------


@pytest.mark.parametrize("n_items", [1, 2, 3, 5, 8, 13, 20])
def test_one_nutrient_equals_linprog(n_items: int) -> None:
    # Source: scipy.optimize.linprog (HiGHS) on the Hobbs & Swift (1985) LP; 7 x 40 = 280
    # random problems (seeded).
    rng = np.random.default_rng(1985 + n_items)
    problem = _random_problems(rng, 40, n_items)
    result = nutritional_capacity(**problem)
    allowed = problem["available_kg"] * problem["use_cap"]
    surplus = problem["de_kcal_per_g"] - problem["de_min_kcal_per_g"][:, None]
    for u in range(40):
        x = _lp(allowed[u], [surplus[u]])
        expected = x.sum() / problem["intake_kg_per_day"][u]
        assert result.animal_days[u] == pytest.approx(expected, rel=REL, abs=1e-12)
        assert result.limiting_factor[u] == _expected_label(allowed[u], x, [True])
    binds = result.limiting_factor == "energy"
    assert np.allclose(
        result.diet_de_kcal_per_g[binds], problem["de_min_kcal_per_g"][binds], rtol=0, atol=1e-9
    )
    assert np.all((result.eaten_kg >= 0) & (result.eaten_kg <= allowed))


def _spy(monkeypatch: pytest.MonkeyPatch, name: str) -> list[int]:
    """Record how many units each call of capacity.<name> receives."""
    real, sizes = getattr(capacity, name), []

    def spy(allowed, *args):
        sizes.append(len(allowed))
        return real(allowed, *args)

    monkeypatch.setattr(capacity, name, spy)
    return sizes


@pytest.mark.parametrize("n_items", [2, 3, 5, 8, 13, 20])
def test_two_nutrients_equal_linprog_and_limiting_factor(
    n_items: int, monkeypatch: pytest.MonkeyPatch
) -> None:
    # Source: scipy.optimize.linprog (HiGHS) on the Hanley & Rogers (1989) two-constraint LP;
    # 6 x 40 = 240 random problems (seeded). The expected limiting factor is read from the
    # constraints active at the HiGHS solution.
    rng = np.random.default_rng(1989 + n_items)
    problem = _random_problems(rng, 40, n_items)
    problem["dp_pct"] = rng.uniform(-2.0, 16.0, (40, n_items))
    problem["dp_min_pct"] = rng.uniform(3.0, 9.0, 40)
    fallback = _spy(monkeypatch, "_linprog_solution")
    result = nutritional_capacity(**problem)
    # Generic (non-degenerate) problems are all certified by the vertex solution, so the
    # comparison below is with a solver the module did not use.
    assert sum(fallback) == 0
    allowed = problem["available_kg"] * problem["use_cap"]
    de_surplus = problem["de_kcal_per_g"] - problem["de_min_kcal_per_g"][:, None]
    dp_surplus = problem["dp_pct"] - problem["dp_min_pct"][:, None]
    labels = []
    for u in range(40):
        x = _lp(allowed[u], [de_surplus[u], dp_surplus[u]])
        expected = x.sum() / problem["intake_kg_per_day"][u]
        assert result.animal_days[u] == pytest.approx(expected, rel=REL, abs=1e-12)
        active = [_is_active(x, de_surplus[u]), _is_active(x, dp_surplus[u])]
        labels.append(_expected_label(allowed[u], x, active))
    assert list(result.limiting_factor) == labels
    eaten = result.eaten_kg.sum(axis=1) > 0
    assert np.all(result.diet_de_kcal_per_g[eaten] >= problem["de_min_kcal_per_g"][eaten] - 1e-9)
    assert np.all(result.diet_dp_pct[eaten] >= problem["dp_min_pct"][eaten] - 1e-9)


def test_two_nutrient_sample_covers_every_limiting_factor(monkeypatch: pytest.MonkeyPatch) -> None:
    # Guards the two tests above against a sample that never exercises a branch, and checks
    # that only units where neither single-nutrient optimum meets the other constraint (so
    # both constraints bind, or nothing can be eaten) reach the two-constraint stage.
    rng = np.random.default_rng(7)
    problem = _random_problems(rng, 400, 8)
    problem["dp_pct"] = rng.uniform(-2.0, 16.0, (400, 8))
    problem["dp_min_pct"] = rng.uniform(3.0, 9.0, 400)
    sent = _spy(monkeypatch, "_solve_both")
    labels = nutritional_capacity(**problem).limiting_factor
    assert {"energy", "protein", "energy+protein", "quantity", "intake"} <= set(labels)
    n_both = np.sum(labels == "energy+protein")
    assert n_both <= sum(sent) <= n_both + np.sum(labels == "intake")


def _force_linprog(monkeypatch: pytest.MonkeyPatch) -> None:
    """Make the vertex solution certify nothing, so every two-constraint unit goes to HiGHS."""

    def never_certified(allowed, d, e):
        n = len(allowed)
        return np.zeros_like(allowed), np.zeros(n, bool), np.zeros(n), np.zeros(n)

    monkeypatch.setattr(capacity, "_vertex_solution", never_certified)


def test_linprog_fallback_agrees_with_vertex_solution(monkeypatch: pytest.MonkeyPatch) -> None:
    # Source: the two exact methods inside the solver must agree: the dual-vertex solution
    # (default) and HiGHS (used when the vertex solution is not certified; forced here).
    rng = np.random.default_rng(11)
    problem = _random_problems(rng, 60, 6)
    problem["dp_pct"] = rng.uniform(-2.0, 16.0, (60, 6))
    problem["dp_min_pct"] = rng.uniform(3.0, 9.0, 60)
    vertex = nutritional_capacity(**problem)
    _force_linprog(monkeypatch)
    fallback = nutritional_capacity(**problem)
    assert "energy+protein" in set(vertex.limiting_factor)
    np.testing.assert_allclose(fallback.animal_days, vertex.animal_days, rtol=REL, atol=1e-12)
    assert list(fallback.limiting_factor) == list(vertex.limiting_factor)
    np.testing.assert_array_equal(fallback.marginal_item, vertex.marginal_item)


def test_two_nutrients_with_tied_items_equals_linprog() -> None:
    # Source: scipy.optimize.linprog (HiGHS). Duplicated items make the dual degenerate
    # (parallel lines), the case the vertex solution may not certify.
    rng = np.random.default_rng(5)
    problem = _random_problems(rng, 30, 4)
    for key in ("available_kg", "de_kcal_per_g", "use_cap"):
        problem[key] = np.concatenate([problem[key], problem[key]], axis=1)
    dp = rng.uniform(-2.0, 16.0, (30, 4))
    problem["dp_pct"] = np.concatenate([dp, dp], axis=1)
    problem["dp_min_pct"] = rng.uniform(3.0, 9.0, 30)
    result = nutritional_capacity(**problem)
    allowed = problem["available_kg"] * problem["use_cap"]
    de_surplus = problem["de_kcal_per_g"] - problem["de_min_kcal_per_g"][:, None]
    dp_surplus = problem["dp_pct"] - problem["dp_min_pct"][:, None]
    for u in range(30):
        x = _lp(allowed[u], [de_surplus[u], dp_surplus[u]])
        expected = x.sum() / problem["intake_kg_per_day"][u]
        assert result.animal_days[u] == pytest.approx(expected, rel=REL, abs=1e-12)
        active = [_is_active(x, de_surplus[u]), _is_active(x, dp_surplus[u])]
        assert result.limiting_factor[u] == _expected_label(allowed[u], x, active)


# --- hand-worked examples --------------------------------------------------------------------


def test_hobbs_swift_three_forages_by_hand() -> None:
    # Inputs invented for the example; expected values by hand with the sort-and-accumulate
    # solution of Hobbs & Swift (1985), threshold T = 2.6 kcal/g, intake 2 kg/day:
    #   forb   100 kg at 3.0 kcal/g: above T, eaten in full; surplus (3.0-2.6)*100 = +40
    #   browse 200 kg at 2.5 kcal/g: deficit (2.6-2.5)*200 = 20 <= 40, eaten in full; left 20
    #   grass  300 kg at 2.2 kcal/g: deficit 0.4 per kg; 20 / 0.4 = 50 kg, fraction 50/300
    #   eaten = 100 + 200 + 50 = 350 kg; animal-days = 350 / 2 = 175
    #   diet DE = (100*3.0 + 200*2.5 + 50*2.2) / 350 = 910 / 350 = 2.6 kcal/g
    result = nutritional_capacity([100.0, 200.0, 300.0], [3.0, 2.5, 2.2], 2.0, 2.6)
    assert result.animal_days == pytest.approx([175.0], rel=1e-12)
    np.testing.assert_allclose(result.eaten_kg, [[100.0, 200.0, 50.0]], rtol=1e-12)
    assert result.diet_de_kcal_per_g == pytest.approx([2.6], rel=1e-12)
    assert result.limiting_factor.tolist() == ["energy"]
    assert result.marginal_item.tolist() == [2]
    assert result.eaten_kg.shape == (1, 3) and result.diet_dp_pct is None


def test_energy_and_protein_both_binding_by_hand() -> None:
    # Inputs invented for the example; expected values by hand from the two-constraint LP
    # (Hanley & Rogers 1989) with T = 2.5 kcal/g, P = 5 %, intake 2 kg/day:
    #   A 100 kg, DE 3.0, DP 2  -> surpluses d = +0.5, e = -3
    #   B 300 kg, DE 2.0, DP 10 -> d = -0.5, e = +5
    #   C 1000 kg, DE 2.2, DP 3 -> d = -0.3, e = -2
    # Energy alone: A (+50), then C 50/0.3 = 166.7 kg; protein -300 - 333.3 < 0: fails.
    # Protein alone: B (+1500), then C 1500/2 = 750 kg; energy -150 - 225 < 0: fails.
    # Both binding, A eaten in full, B and C partial:
    #   0.5*100 - 0.5 xB - 0.3 xC = 0 and -3*100 + 5 xB - 2 xC = 0  ->  xC = 40, xB = 76
    # Optimality certificate: multipliers from 1 - 0.5 lam + 5 mu = 0, 1 - 0.3 lam - 2 mu = 0
    #   -> mu = 0.08, lam = 2.8 (both > 0); A's reduced value 1 + 1.4 - 0.24 = 2.16 > 0
    #   -> dual value 100 * 2.16 = 216 = 100 + 76 + 40 = primal value.
    # animal-days = 216 / 2 = 108; diet DE = 540/216 = 2.5; DP = 1080/216 = 5.
    result = nutritional_capacity(
        [100.0, 300.0, 1000.0], [3.0, 2.0, 2.2], 2.0, 2.5, dp_pct=[2.0, 10.0, 3.0], dp_min_pct=5.0
    )
    assert result.animal_days == pytest.approx([108.0], rel=1e-12)
    np.testing.assert_allclose(result.eaten_kg, [[100.0, 76.0, 40.0]], rtol=1e-12)
    assert result.diet_de_kcal_per_g == pytest.approx([2.5], rel=1e-12)
    assert result.diet_dp_pct == pytest.approx([5.0], rel=1e-12)
    assert result.limiting_factor.tolist() == ["energy+protein"]
    assert result.marginal_item.tolist() == [1]  # B and C partial; B has the lower DE


@pytest.mark.parametrize("via_linprog", [False, True])
def test_tied_energy_items_label_follows_multipliers(
    via_linprog: bool, monkeypatch: pytest.MonkeyPatch
) -> None:
    # Inputs invented for the example; T = 2.5 kcal/g, P = 5 %, intake 1 kg/day.
    #   X 100 kg, DE 3.0, DP 10 -> d = +0.5, e = +5
    #   Y 100 kg, DE 2.0, DP -2 -> d = -0.5, e = -7
    #   Z 100 kg, DE 2.0, DP 8  -> d = -0.5, e = +3
    # Y and Z tie on DE. Energy alone allows 50 / 0.5 = 100 kg of Y and Z together: 200 kg in
    # all, e.g. X + Z with DP surplus 500 + 300 > 0, so protein does not bind and 200 is the
    # two-nutrient optimum too. Taking Y first instead (500 - 700 < 0) misses protein, so the
    # unit may reach the two-constraint stage; there the multipliers are lam = 2, mu = 0
    # (from 1 - 0.5 lam - 7 mu = 0 = 1 - 0.5 lam + 3 mu), dual value 100 * (1 + 0.5 * 2) = 200.
    # mu = 0: relaxing protein would not raise capacity, so the limiting factor is energy.
    if via_linprog:
        _force_linprog(monkeypatch)
    result = nutritional_capacity(
        [100.0, 100.0, 100.0], [3.0, 2.0, 2.0], 1.0, 2.5, dp_pct=[10.0, -2.0, 8.0], dp_min_pct=5
    )
    assert result.animal_days == pytest.approx([200.0], rel=1e-12)
    assert result.limiting_factor.tolist() == ["energy"]
    assert result.diet_de_kcal_per_g == pytest.approx([2.5], rel=1e-12)
    assert result.diet_dp_pct[0] >= 5.0 - 1e-9


def test_ecological_capacity_by_hand() -> None:
    # Hand computation of ECC = 1000 * sum(c a q) / R (inputs invented for the example):
    #   unit 0: (100*3.0 + 200*2.5) kg*kcal/g * 1000 g/kg = 800 000 kcal / 4000 = 200
    #   unit 1, cap (0.5, 1): (0.5*100*3.0 + 200*2.5) * 1000 = 650 000 kcal / 5000 = 130
    available = [[100.0, 200.0], [100.0, 200.0]]
    result = ecological_capacity(
        available, [3.0, 2.5], [4000.0, 5000.0], use_cap=[[1.0, 1.0], [0.5, 1.0]]
    )
    np.testing.assert_allclose(result, [200.0, 130.0], rtol=1e-12)


def test_allowable_use_capacity_by_hand() -> None:
    # Hand computation of sum(u a) / intake (Holechek 1988, from memory; inputs invented):
    #   (0.5*1000 + 0.3*500) kg / 2.5 kg/day = 650 / 2.5 = 260 animal-days
    #   second unit, intake 2.0, uniform use 0.4: 0.4*(400 + 600) / 2.0 = 200
    np.testing.assert_allclose(allowable_use_capacity([1000.0, 500.0], [0.5, 0.3], 2.5), [260.0])
    result = allowable_use_capacity([[1000.0, 500.0], [400.0, 600.0]], 0.4, [2.5, 2.0])
    np.testing.assert_allclose(result, [600.0 / 2.5, 200.0], rtol=1e-12)


# --- properties (hypothesis) -----------------------------------------------------------------

_units = st.integers(1, 4)
_items = st.integers(1, 6)


@st.composite
def _problems(draw: st.DrawFn) -> dict:
    shape = (draw(_units), draw(_items))
    floats = {"allow_nan": False, "allow_infinity": False}
    return {
        "available_kg": draw(hnp.arrays(float, shape, elements=st.floats(0.0, 1e4, **floats))),
        "de_kcal_per_g": draw(hnp.arrays(float, shape, elements=st.floats(0.5, 4.5, **floats))),
        "intake_kg_per_day": draw(st.floats(0.5, 5.0)),
        "de_min_kcal_per_g": draw(st.floats(1.0, 4.0)),
    }


def _tol(problem: dict) -> np.ndarray:
    """Absolute tolerance on animal-days: 1e-9 of all forage over intake."""
    return 1e-9 * np.sum(problem["available_kg"], axis=1) / problem["intake_kg_per_day"] + 1e-12


def _ncc(problem: dict, **changes) -> np.ndarray:
    return nutritional_capacity(**{**problem, **changes}).animal_days


@settings(max_examples=150, deadline=None)
@given(_problems(), st.floats(0.01, 1.0))
def test_ncc_at_most_ecc_when_target_at_least_maintenance(problem: dict, share: float) -> None:
    # Derivation (docs/methods.md): each NCC animal-day eats intake kg at DE >= T, so
    # NCC * T * intake * 1000 <= eaten DE <= available DE = ECC * R when R <= T * intake * 1000.
    requirement = share * problem["de_min_kcal_per_g"] * problem["intake_kg_per_day"] * 1000.0
    ecc = ecological_capacity(problem["available_kg"], problem["de_kcal_per_g"], requirement)
    assert np.all(_ncc(problem) <= ecc * (1 + 1e-9) + _tol(problem))


@settings(max_examples=150, deadline=None)
@given(_problems(), st.floats(0.0, 1.0))
def test_ncc_does_not_rise_with_threshold(problem: dict, rise: float) -> None:
    # A higher T shrinks the feasible set of the LP.
    higher = _ncc(problem, de_min_kcal_per_g=problem["de_min_kcal_per_g"] + rise)
    assert np.all(higher <= _ncc(problem) + _tol(problem))


@settings(max_examples=150, deadline=None)
@given(_problems(), st.data())
def test_ncc_does_not_fall_when_forage_added(problem: dict, data: st.DataObject) -> None:
    # More forage enlarges the box 0 <= x <= a; the old optimum stays feasible.
    shape = problem["available_kg"].shape
    extra = data.draw(hnp.arrays(float, shape, elements=st.floats(0.0, 1e4, allow_nan=False)))
    larger = {**problem, "available_kg": problem["available_kg"] + extra}
    assert np.all(_ncc(larger) >= _ncc(problem) - _tol(larger))


@settings(max_examples=150, deadline=None)
@given(_problems(), st.floats(0.01, 100.0))
def test_scaling_forage_scales_ncc(problem: dict, factor: float) -> None:
    # The LP is homogeneous in a: x* scales with a.
    scaled = _ncc(problem, available_kg=problem["available_kg"] * factor)
    assert np.allclose(scaled, factor * _ncc(problem), rtol=0, atol=max(factor, 1) * _tol(problem))


@settings(max_examples=150, deadline=None)
@given(_problems(), st.data())
def test_use_caps_never_raise_ncc(problem: dict, data: st.DataObject) -> None:
    # A cap c <= 1 shrinks the box to 0 <= x <= c a.
    shape = problem["available_kg"].shape
    cap = data.draw(hnp.arrays(float, shape, elements=st.floats(0.0, 1.0)))
    assert np.all(_ncc(problem, use_cap=cap) <= _ncc(problem) + _tol(problem))


@settings(max_examples=150, deadline=None)
@given(_problems(), st.data())
def test_two_nutrient_ncc_at_most_each_single_nutrient(problem: dict, data: st.DataObject) -> None:
    # Each single-nutrient problem is a relaxation of the two-nutrient one.
    shape = problem["available_kg"].shape
    dp = data.draw(hnp.arrays(float, shape, elements=st.floats(-3.0, 20.0)))
    dp_min = data.draw(st.floats(0.0, 12.0))
    both = _ncc(problem, dp_pct=dp, dp_min_pct=dp_min)
    protein_only = _ncc(problem, de_min_kcal_per_g=0.0, dp_pct=dp, dp_min_pct=dp_min)
    assert np.all(both <= _ncc(problem) + _tol(problem))
    assert np.all(both <= protein_only + _tol(problem))


# --- edge cases ------------------------------------------------------------------------------
# Expected values: the defined answers of the module's contract (docs/methods.md,
# "Input checks and edge cases"), with the arithmetic in a comment where there is any.
# Inputs invented for the example.


def test_no_forage() -> None:
    # Unit 0 has no forage; unit 1 has forage but a use cap of 0: nothing may be eaten.
    result = nutritional_capacity(
        [[0.0, 0.0], [5.0, 5.0]], [3.0, 2.0], 2.0, 2.5, use_cap=[[1.0, 1.0], [0.0, 0.0]]
    )
    assert result.animal_days.tolist() == [0.0, 0.0]
    assert result.limiting_factor.tolist() == ["no_forage", "no_forage"]
    assert result.diet_de_kcal_per_g.tolist() == [0.0, 0.0]
    assert result.marginal_item.tolist() == [-1, -1]


def test_no_item_reaches_threshold_gives_intake() -> None:
    # Both items below T = 2.5 kcal/g: no surplus to spend on them, capacity 0.
    result = nutritional_capacity([10.0, 20.0], [2.0, 2.4], 2.0, 2.5, dp_pct=[8, 9], dp_min_pct=5)
    assert result.animal_days.tolist() == [0.0]
    assert result.limiting_factor.tolist() == ["intake"]
    assert result.diet_de_kcal_per_g.tolist() == [0.0] and result.diet_dp_pct.tolist() == [0.0]
    assert result.marginal_item.tolist() == [-1]


def test_no_mix_meets_both_nutrients_gives_intake() -> None:
    # One item rich in energy only, one in protein only, each too poor in the other for any
    # mix: 0.5 x1 - 1.0 x2 >= 0 and -6 x1 + 2 x2 >= 0 force x2 <= x1/2 and x2 >= 3 x1,
    # so x1 = x2 = 0 (hand arithmetic).
    result = nutritional_capacity([10.0, 10.0], [3.0, 1.5], 1.0, 2.5, dp_pct=[0, 8], dp_min_pct=6)
    assert result.animal_days.tolist() == [0.0]
    assert result.limiting_factor.tolist() == ["intake"]


def test_every_item_above_threshold_is_eaten() -> None:
    # Both items above T; capped amounts 0.5 * 10 = 5 and 20 kg; (5 + 20) / 2 = 12.5 days.
    result = nutritional_capacity([10.0, 20.0], [3.0, 2.8], 2.0, 2.5, use_cap=[0.5, 1.0])
    np.testing.assert_array_equal(result.eaten_kg, [[5.0, 20.0]])
    assert result.animal_days.tolist() == [12.5]
    assert result.limiting_factor.tolist() == ["quantity"]
    assert result.marginal_item.tolist() == [-1]


def test_quality_within_tolerance_of_threshold_meets_it() -> None:
    # 1e-13 below T counts as meeting T (tolerance 1e-12): the item is eaten in full.
    result = nutritional_capacity([10.0], [2.5 - 1e-13], 1.0, 2.5)
    assert result.animal_days.tolist() == [10.0]
    assert result.limiting_factor.tolist() == ["quantity"]
    below = nutritional_capacity([10.0], [2.5 - 1e-9], 1.0, 2.5)
    assert below.limiting_factor.tolist() == ["intake"]
    # The same for DP: an energy-rich item 1e-13 % below P is eaten, 1e-6 % below is not.
    for gap, eaten in [(1e-13, 10.0), (1e-6, 0.0)]:
        result = nutritional_capacity([10.0], [3.0], 1.0, 2.5, dp_pct=[5 - gap], dp_min_pct=5)
        assert result.animal_days.tolist() == [eaten]


def test_item_exactly_at_threshold_with_poorer_items() -> None:
    # No surplus to spend: the item at T is eaten, nothing below T is; energy binds.
    result = nutritional_capacity([10.0, 30.0], [2.5, 2.0], 1.0, 2.5)
    np.testing.assert_array_equal(result.eaten_kg, [[10.0, 0.0]])
    assert result.limiting_factor.tolist() == ["energy"]
    assert result.diet_de_kcal_per_g.tolist() == [2.5]


def test_one_dimensional_input_is_one_unit_and_empty_input_is_empty() -> None:
    single = nutritional_capacity([10.0, 30.0], [3.0, 2.0], [1.0], [2.5])
    assert single.animal_days.shape == (1,) and single.eaten_kg.shape == (1, 2)
    empty = nutritional_capacity(np.zeros((0, 3)), [3.0, 2.0, 1.0], 1.0, 2.5)
    assert empty.animal_days.shape == (0,) and empty.eaten_kg.shape == (0, 3)
    no_items = nutritional_capacity(np.zeros((2, 0)), np.zeros(0), 1.0, 2.5)
    assert no_items.limiting_factor.tolist() == ["no_forage", "no_forage"]


@pytest.mark.parametrize(
    ("changes", "source", "location"),
    [
        ({"available_kg": [[10.0, -1.0]]}, "available_kg", "unit 0, item 1"),
        ({"available_kg": [[10.0, np.nan]]}, "available_kg", "unit 0, item 1"),
        ({"available_kg": [[[10.0, 1.0]]]}, "available_kg", None),
        ({"available_kg": [["a", "b"]]}, "available_kg", None),
        ({"de_kcal_per_g": [3.0, np.inf]}, "de_kcal_per_g", "item 1"),
        ({"de_kcal_per_g": [3.0, 2.0, 1.0]}, "de_kcal_per_g", None),
        ({"intake_kg_per_day": 0.0}, "intake_kg_per_day", None),
        ({"intake_kg_per_day": [-1.0]}, "intake_kg_per_day", "unit 0"),
        ({"de_min_kcal_per_g": [2.5, 2.5]}, "de_min_kcal_per_g", None),
        ({"use_cap": [0.5, 1.5]}, "use_cap", "item 1"),
        ({"use_cap": -0.1}, "use_cap", None),
        ({"dp_pct": [5.0, 6.0]}, "dp_min_pct", None),
        ({"dp_min_pct": 5.0}, "dp_pct", None),
        ({"dp_pct": [5.0, np.nan], "dp_min_pct": 5.0}, "dp_pct", "item 1"),
    ],
)
def test_bad_input_raises_input_error(changes: dict, source: str, location: str | None) -> None:
    good = {
        "available_kg": [[10.0, 30.0]],
        "de_kcal_per_g": [3.0, 2.0],
        "intake_kg_per_day": 2.0,
        "de_min_kcal_per_g": 2.5,
    }
    with pytest.raises(InputError) as info:
        nutritional_capacity(**{**good, **changes})
    assert info.value.source == source
    assert info.value.location == location


def test_bad_input_to_ecc_and_allowable_use() -> None:
    with pytest.raises(InputError, match="de_requirement_kcal_per_day"):
        ecological_capacity([10.0], [3.0], 0.0)
    with pytest.raises(InputError, match="allowable_use"):
        allowable_use_capacity([10.0], [1.2], 2.0)
    with pytest.raises(InputError, match="intake_kg_per_day"):
        allowable_use_capacity([10.0], [0.5], np.nan)


def test_low_protein_forage_hand_example_and_linprog():
    # Hand example (worked for this test from the Robbins et al. 1987 DP line): 1,000 kg at
    # 2 % CP (DP = -3.87 + 0.9283 x 2 = -2.0134 %) and 1,000 kg at 10 % CP (DP 5.413 %), diet DP
    # at least 2.94 %, energy not limiting. All of the 10 % forage is eaten; the 2 % forage
    # until 1000 x (5.413 - 2.94) = x (2.94 + 2.0134), x = 499.25 kg: 1,499.25 kg in all.
    # Clipping the 2 % forage's DP at 0 would give 1000 + 2473 / 2.94 = 1,841 kg (23 % high).
    from nutricap.science.forage_quality import digestible_protein_pct

    dp = digestible_protein_pct([2.0, 10.0])
    result = nutritional_capacity(
        [1000.0, 1000.0], [2.6, 2.6], 1.0, 2.0, dp_pct=dp, dp_min_pct=2.94
    )
    expected_kg = 1000.0 + 1000.0 * (5.413 - 2.94) / (2.94 + 2.0134)
    assert expected_kg == pytest.approx(1499.25, abs=0.01)
    assert result.animal_days[0] == pytest.approx(expected_kg, rel=1e-12)
    assert result.limiting_factor[0] == "protein"
    # Independent solver: scipy.optimize.linprog (HiGHS) on the same LP with the linear DP.
    lp = linprog(
        c=[-1.0, -1.0],
        A_ub=[-(np.asarray(dp) - 2.94), -(np.array([2.6, 2.6]) - 2.0)],
        b_ub=[0.0, 0.0],
        bounds=[(0, 1000.0), (0, 1000.0)],
        method="highs",
    )
    assert -lp.fun == pytest.approx(result.animal_days[0], rel=1e-9)


_STATES = sorted(set(energetics_module.NUTRITIONAL_STATES["state"]))
_SEASONS = list(energetics_module.SEASONS)


@settings(max_examples=200, deadline=None)
@given(
    target=st.sampled_from(_STATES),
    season=st.sampled_from(_SEASONS),
    herd_states=st.lists(st.sampled_from(_STATES), min_size=1, max_size=4),
    data=st.data(),
)
def test_ncc_never_exceeds_ecc_for_any_packaged_state_season_and_herd(
    target, season, herd_states, data
):
    # Property of the method (docs/methods.md): with the packaged requirement table, for every
    # target state, season and herd of packaged states, NCC (herd's average animal eating its
    # intake of a diet at the target state's threshold) <= ECC (the same animal at
    # maintenance), with and without a DP constraint. No use caps on ECC.
    en = energetics_module
    n = len(herd_states)
    masses = data.draw(hnp.arrays(float, n, elements=st.floats(20.0, 400.0)))
    shares = data.draw(hnp.arrays(float, n, elements=st.floats(0.05, 1.0)))
    herd = en.herd_requirement(masses, shares, herd_states, season)
    t_mass = data.draw(st.floats(20.0, 400.0))
    de_min = en.required_diet_de_kcal_per_g(
        en.daily_de_requirement_kcal_per_day(t_mass, target, season),
        en.max_dry_matter_intake_kg_per_day(t_mass, target, season),
    )
    items = data.draw(st.integers(1, 6))
    available = data.draw(hnp.arrays(float, (3, items), elements=st.floats(0.0, 1e6)))
    # DE near the threshold, where a requirement table that asks too little shows.
    de = de_min * data.draw(hnp.arrays(float, items, elements=st.floats(0.8, 1.3)))
    dp = data.draw(hnp.arrays(float, items, elements=st.floats(-3.0, 20.0)))
    ecc = ecological_capacity(available, de, herd.maintenance_de_kcal_per_day)
    for protein in ({}, {"dp_pct": dp, "dp_min_pct": 3.0}):
        ncc = nutritional_capacity(available, de, herd.intake_kg_per_day, de_min, **protein)
        assert np.all(ncc.animal_days <= ecc * (1 + 1e-9) + 1e-9)


@pytest.mark.parametrize("season", _SEASONS)
@pytest.mark.parametrize("target", _STATES)
@pytest.mark.parametrize("herd_state", _STATES)
def test_ncc_never_exceeds_ecc_at_the_threshold_for_every_state_pair(season, target, herd_state):
    # The hardest case of the property above, exhaustively: a one-class herd (a mix of classes
    # is a share-weighted combination of these) and forage whose DE equals the target
    # threshold, where NCC eats everything and ECC counts its DE. A table whose state asks
    # less than maintenance of the season fails here (e.g. summer gestation falling back to an
    # "any" row, the fault of an earlier table).
    en = energetics_module
    herd = en.herd_requirement([65.0], [1.0], [herd_state], season)
    de_min = en.required_diet_de_kcal_per_g(
        en.daily_de_requirement_kcal_per_day(65.0, target, season),
        en.max_dry_matter_intake_kg_per_day(65.0, target, season),
    )
    available = np.array([[1000.0, 2000.0]])
    de = np.full(2, de_min)
    ncc = nutritional_capacity(available, de, herd.intake_kg_per_day, de_min)
    ecc = ecological_capacity(available, de, herd.maintenance_de_kcal_per_day)
    assert ncc.animal_days[0] == pytest.approx(3000.0 / herd.intake_kg_per_day, rel=1e-9)
    assert ncc.animal_days[0] <= ecc[0] * (1 + 1e-12)


# --- diet-composition limits (science core of issue 16) -------------------------------------
# Reference: scipy.optimize.linprog (HiGHS) on the NCC LP with the composition rows written
# out term by term in _composition_lp (x_i - s_i sum x <= 0; sum_g x - M_g sum x <= 0;
# m_g sum x - sum_g x <= 0), independent of nutricap.science.diet_lp.


def _composition_problems(rng: np.random.Generator, n_units: int, n_items: int) -> dict:
    """Two-nutrient random problems with use caps, per-unit share caps and two groups."""
    problem = _random_problems(rng, n_units, n_items)
    groups = np.zeros((2, n_items), dtype=bool)
    groups[0, : max(1, n_items // 3)] = True
    groups[1, n_items // 3 : max(n_items // 3 + 1, 2 * n_items // 3)] = True
    problem.update(
        dp_pct=rng.uniform(-2.0, 16.0, (n_units, n_items)),
        dp_min_pct=rng.uniform(3.0, 9.0, n_units),
        max_diet_share=np.where(
            rng.random((n_units, n_items)) < 0.6, rng.uniform(0.1, 0.8, (n_units, n_items)), 1.0
        ),
        diet_groups=groups,
        min_group_share=rng.uniform(0.0, 0.3, 2),
        max_group_share=rng.uniform(0.5, 1.0, 2),
    )
    return problem


def _composition_lp(problem: dict, u: int) -> tuple[np.ndarray, np.ndarray, list[str]]:
    """HiGHS optimum x [kg], the row multipliers and the row families for unit u."""
    allowed = problem["available_kg"][u] * problem["use_cap"][u]
    n = allowed.size
    total = np.ones(n)
    rows = [problem["de_min_kcal_per_g"][u] - problem["de_kcal_per_g"][u]]
    rows.append(problem["dp_min_pct"][u] - problem["dp_pct"][u])
    families = ["energy", "protein"]
    for i in range(n):
        rows.append(np.eye(n)[i] - problem["max_diet_share"][u, i] * total)
        families.append("diet_share")
    for g, members in enumerate(problem["diet_groups"].astype(float)):
        rows.append(members - problem["max_group_share"][g] * total)
        rows.append(problem["min_group_share"][g] * total - members)
        families += ["diet_group", "diet_group"]
    scale = max(allowed.max(initial=0.0), 1e-300)
    res = linprog(
        -np.ones(n),
        A_ub=np.array(rows),
        b_ub=np.zeros(len(rows)),
        bounds=np.column_stack([np.zeros(n), allowed / scale]),
        method="highs",
    )
    assert res.status == 0, res.message
    return res.x * scale, -res.ineqlin.marginals, families


def _expected_composition_label(x, allowed, marginals, families, relaxed_days) -> str:
    """Label read off the HiGHS solution: families with a multiplier clearly above 0."""
    if allowed.sum() == 0.0:
        return "no_forage"
    if relaxed_days == 0.0:
        return "intake"
    if x.sum() <= 1e-9 * allowed.sum():
        return "diet_mix"
    if np.all(x >= allowed * (1.0 - 1e-9)):
        return "quantity"
    order = ["energy", "protein", "diet_share", "diet_group"]
    binding = {f for f, y in zip(families, marginals, strict=True) if y > 1e-7}
    return "+".join(f for f in order if f in binding)


@pytest.mark.parametrize("n_items", [2, 3, 5, 8, 13, 20])
def test_composition_limits_equal_linprog_and_label(n_items: int) -> None:
    # Source: scipy.optimize.linprog (HiGHS); 6 x 60 = 360 seeded random problems with DE, DP,
    # use caps, share caps and two groups with minimum and maximum shares.
    rng = np.random.default_rng(1616 + n_items)
    problem = _composition_problems(rng, 60, n_items)
    result = nutritional_capacity(**problem)
    relaxed = nutritional_capacity(
        **{k: v for k, v in problem.items() if "share" not in k and k != "diet_groups"}
    )
    allowed = problem["available_kg"] * problem["use_cap"]
    for u in range(60):
        x, marginals, families = _composition_lp(problem, u)
        expected = x.sum() / problem["intake_kg_per_day"][u]
        assert result.animal_days[u] == pytest.approx(expected, rel=REL, abs=1e-12)
        label = _expected_composition_label(
            x, allowed[u], marginals, families, relaxed.animal_days[u]
        )
        assert result.limiting_factor[u] == label
    # The diet eaten meets every limit.
    eaten, total = result.eaten_kg, result.eaten_kg.sum(axis=1)
    assert np.all((eaten >= 0.0) & (eaten <= allowed))
    assert np.all(eaten <= problem["max_diet_share"] * total[:, None] * (1 + 1e-9) + 1e-9)
    group_kg = eaten @ problem["diet_groups"].T
    assert np.all(group_kg <= problem["max_group_share"] * total[:, None] * (1 + 1e-9) + 1e-9)
    assert np.all(group_kg >= problem["min_group_share"] * total[:, None] * (1 - 1e-9) - 1e-9)


def test_composition_sample_covers_the_new_labels() -> None:
    # Guards the test above against a sample that never reaches a branch.
    rng = np.random.default_rng(16)
    labels = set(nutritional_capacity(**_composition_problems(rng, 400, 8)).limiting_factor)
    assert {"diet_mix", "quantity", "intake"} <= labels
    assert any("diet_share" in label for label in labels)
    assert any("diet_group" in label for label in labels)
    assert any(label.startswith("energy+") and "diet" in label for label in labels)


def test_composition_highs_fallback_agrees_with_simplex(monkeypatch: pytest.MonkeyPatch) -> None:
    # The two exact methods inside the solver must agree: the batched simplex (default) and
    # the block-diagonal HiGHS LP (used for units the simplex does not certify; forced here).
    from nutricap.science import diet_lp

    problem = _composition_problems(np.random.default_rng(17), 80, 6)
    simplex = nutritional_capacity(**problem)
    monkeypatch.setattr(
        diet_lp, "_certified", lambda allowed, rows, x, y: (x, np.zeros(len(x), dtype=bool))
    )
    highs = nutritional_capacity(**problem)
    np.testing.assert_allclose(highs.animal_days, simplex.animal_days, rtol=REL, atol=1e-12)
    assert list(highs.limiting_factor) == list(simplex.limiting_factor)


def test_two_classes_with_a_half_share_cap_by_hand() -> None:
    # Inputs invented for the example; hand arithmetic on the LP. Class 0: 100 kg at DE 3.0;
    # class 1: 300 kg at DE 2.4; T = 2.6 kcal/g; intake 2 kg/day.
    # Energy: 0.4 x0 - 0.2 x1 >= 0, i.e. x1 <= 2 x0.
    # Without limits: x0 = 100, x1 = 200 (energy binds): 300 kg / 2 = 150 animal-days.
    # Class 1 at most 50 % of the diet: x1 <= 0.5 (x0 + x1), i.e. x1 <= x0 <= 100, so
    # x0 = x1 = 100: 200 kg / 2 = 100 animal-days; diet DE (300 + 240) / 200 = 2.7 > 2.6, so
    # energy does not bind, the share cap does.
    args = ([100.0, 300.0], [3.0, 2.4], 2.0, 2.6)
    free = nutritional_capacity(*args)
    np.testing.assert_allclose(free.animal_days, [150.0], rtol=1e-12)
    assert free.limiting_factor.tolist() == ["energy"]
    capped = nutritional_capacity(*args, max_diet_share=[1.0, 0.5])
    np.testing.assert_allclose(capped.eaten_kg, [[100.0, 100.0]], rtol=1e-12)
    np.testing.assert_allclose(capped.animal_days, [100.0], rtol=1e-12)
    np.testing.assert_allclose(capped.diet_de_kcal_per_g, [2.7], rtol=1e-12)
    assert capped.limiting_factor.tolist() == ["diet_share"]
    # Class 0 at most 50 % instead: x0 <= x1; the unlimited diet (x0 share 100/300 = 1/3)
    # already meets it: 150 animal-days, unchanged.
    other = nutritional_capacity(*args, max_diet_share=[0.5, 1.0])
    np.testing.assert_array_equal(other.animal_days, free.animal_days)
    assert other.limiting_factor.tolist() == ["energy"]


def test_min_shares_that_cannot_be_met_give_diet_mix() -> None:
    # Inputs invented for the example; hand arithmetic on the LP. Two classes, each its own
    # group; T = 2.6 kcal/g; intake 2 kg/day.
    # Unit 0: no forage of group 0, which must be at least 30 % of the diet: only x = 0
    #   meets it, although class 1 alone (DE 2.8 >= T) would feed 50 / 2 = 25 animal-days.
    # Unit 1: x0 >= 0.3 (x0 + x1) with x0 <= 10 gives x1 <= (0.7 / 0.3) x0 = 23.333 kg;
    #   energy 0.4 x0 - 0.1 x1 >= 0 allows x1 <= 40 kg: x = (10, 23.333), 16.667 days, and
    #   the group limit binds (diet DE (30 + 58.333) / 33.333 = 2.65 > 2.6).
    # Unit 2: minimum shares 0.6 + 0.5 > 1: no diet meets both.
    groups = np.array([[True, False], [False, True]])
    result = nutritional_capacity(
        [[0.0, 50.0], [10.0, 50.0], [10.0, 50.0]],
        [[3.0, 2.8], [3.0, 2.5], [3.0, 2.8]],
        2.0,
        2.6,
        diet_groups=groups,
        min_group_share=[0.3, 0.0],
    )
    assert result.animal_days[0] == 0.0
    np.testing.assert_allclose(result.animal_days[1], (10.0 + 70.0 / 3.0) / 2.0, rtol=1e-12)
    np.testing.assert_allclose(result.diet_de_kcal_per_g[1], 2.65, rtol=1e-12)
    assert result.limiting_factor[:2].tolist() == ["diet_mix", "diet_group"]
    assert result.marginal_item[0] == -1
    both = nutritional_capacity(
        [10.0, 50.0], [3.0, 2.8], 2.0, 2.6, diet_groups=groups, min_group_share=[0.6, 0.5]
    )
    assert both.animal_days.tolist() == [0.0]
    assert both.limiting_factor.tolist() == ["diet_mix"]


def test_no_quality_mix_stays_intake_with_composition_limits() -> None:
    # Both items below T (as in test_no_item_reaches_threshold_gives_intake): capacity 0 with
    # or without composition limits, and the reason is the diet quality.
    result = nutritional_capacity([10.0, 20.0], [2.0, 2.4], 2.0, 2.5, max_diet_share=[0.5, 0.5])
    assert result.animal_days.tolist() == [0.0]
    assert result.limiting_factor.tolist() == ["intake"]


# Properties (hypothesis), each following from the LP (docs/methods.md): a looser bound
# enlarges the feasible set; a share of 1 or a group bound of [0, 1] holds for every diet.


@st.composite
def _shared_problems(draw: st.DrawFn) -> tuple[dict, dict]:
    problem = draw(_problems())
    n_items = problem["available_kg"].shape[1]
    share = st.floats(0.0, 1.0)
    groups = draw(hnp.arrays(bool, (2, n_items)))
    low = draw(hnp.arrays(float, 2, elements=st.floats(0.0, 0.5)))
    limits = {
        "max_diet_share": draw(hnp.arrays(float, n_items, elements=share)),
        "diet_groups": groups,
        "min_group_share": low,
        "max_group_share": low + draw(hnp.arrays(float, 2, elements=st.floats(0.0, 0.5))),
    }
    return problem, limits


@settings(max_examples=150, deadline=None)
@given(_shared_problems(), st.data())
def test_loosening_a_share_bound_never_lowers_ncc(drawn, data: st.DataObject) -> None:
    problem, limits = drawn
    n_items = len(limits["max_diet_share"])
    item = data.draw(st.integers(0, n_items - 1))
    looser = dict(limits, max_diet_share=limits["max_diet_share"].copy())
    looser["max_diet_share"][item] = data.draw(st.floats(looser["max_diet_share"][item], 1.0))
    group = data.draw(st.integers(0, 1))
    looser["min_group_share"] = limits["min_group_share"].copy()
    looser["min_group_share"][group] *= data.draw(st.floats(0.0, 1.0))
    before, after = _ncc(problem, **limits), _ncc(problem, **looser)
    assert np.all(after >= before - _tol(problem))
    assert np.all(after <= _ncc(problem) + _tol(problem))  # never above the unlimited NCC


@settings(max_examples=100, deadline=None)
@given(_problems(), st.data())
def test_share_of_one_and_group_bounds_of_zero_to_one_change_nothing(problem, data) -> None:
    n_items = problem["available_kg"].shape[1]
    groups = data.draw(hnp.arrays(bool, (3, n_items)))
    free = nutritional_capacity(**problem)
    for limits in (
        {"max_diet_share": np.ones(n_items)},
        {"diet_groups": groups, "min_group_share": np.zeros(3), "max_group_share": np.ones(3)},
    ):
        limited = nutritional_capacity(**problem, **limits)
        np.testing.assert_array_equal(limited.animal_days, free.animal_days)
        np.testing.assert_array_equal(limited.eaten_kg, free.eaten_kg)
        assert list(limited.limiting_factor) == list(free.limiting_factor)


@pytest.mark.parametrize(
    ("limits", "source", "location"),
    [
        ({"max_diet_share": [0.5, 1.5]}, "max_diet_share", "item 1"),
        ({"max_diet_share": [[0.5, np.nan]]}, "max_diet_share", "unit 0, item 1"),
        ({"max_diet_share": [0.5, 0.5, 0.5]}, "max_diet_share", None),
        ({"diet_groups": [[1, 0]]}, "diet_groups", None),
        ({"min_group_share": [0.2]}, "min_group_share", None),
        ({"diet_groups": [[True, False]], "min_group_share": [-0.1]}, "min_group_share", "group 0"),
        (
            {"diet_groups": [[True, False]], "min_group_share": [0.6], "max_group_share": [0.5]},
            "min_group_share",
            "group 0",
        ),
    ],
)
def test_bad_composition_limits_raise_input_error(limits, source, location) -> None:
    with pytest.raises(InputError) as info:
        nutritional_capacity([[10.0, 30.0]], [3.0, 2.0], 2.0, 2.5, **limits)
    assert info.value.source == source
    assert info.value.location == location
