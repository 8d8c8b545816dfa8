"""Tests of the diet-composition limits' plumbing: the ``max_diet_share`` column, the
``[diet]`` groups of the project file, and what solve_problem hands to the solver.

The end-to-end tests need the composition-limited solver (nutricap.science.capacity, another
branch): they are skipped until ``nutritional_capacity`` accepts ``max_diet_share``. Their check
values are hand computations from the Hobbs & Swift (1985) diet constraint and
scipy.optimize.linprog (HiGHS) as the independent solver.
"""

import inspect

import numpy as np
import pytest
from scipy.optimize import linprog
from test_shared_range import items

from nutricap.errors import ProjectFileError
from nutricap.example import DIET_TOML
from nutricap.inputs.project import load_project
from nutricap.model.problem import (
    CapacityProblem,
    DietGroup,
    DietLimits,
    composition_limits,
    solve_problem,
)
from nutricap.model.requirements import diet_limits
from nutricap.science.capacity import nutritional_capacity
from nutricap.workflow import estimate

solver_has_composition_limits = (
    "max_diet_share" in inspect.signature(nutritional_capacity).parameters
)
needs_solver = pytest.mark.skipif(
    not solver_has_composition_limits,
    reason="nutritional_capacity does not take diet-composition limits yet (solver branch)",
)


def add_diet(project, text: str) -> None:
    with project.open("a", encoding="utf-8") as file:
        file.write("\n" + text)


def without_example_diet(project) -> None:
    text = project.read_text(encoding="utf-8")
    assert DIET_TOML in text
    project.write_text(text.replace(DIET_TOML, ""), encoding="utf-8")


def test_groups_by_growth_form_and_by_classes(project):
    without_example_diet(project)
    add_diet(
        project,
        '[diet.groups.grasses]\ngrowth_form = "grass"\nmin_share = 0.2\n'
        '[diet.groups.sage]\nclasses = ["big_sagebrush"]\nmax_share = 0.6\n',
    )
    loaded = load_project(project)
    from nutricap.inputs.tables import read_forage_classes

    limits = diet_limits(loaded, read_forage_classes(loaded.input_path("forage_classes")))
    example_items = items([2.0, 2.5, 2.6], [0.5] * 3, ("cheatgrass", "big_sagebrush", "x"))
    example_items = type(example_items)(
        **{**vars(example_items), "growth_form": np.array(["grass", "browse", "forb"], object)}
    )
    given = composition_limits(example_items, limits)
    np.testing.assert_array_equal(
        given["diet_groups"], [[True, False, False], [False, True, False]]
    )
    np.testing.assert_array_equal(given["min_group_share"], [0.2, 0.0])
    np.testing.assert_array_equal(given["max_group_share"], [1.0, 0.6])
    assert "max_diet_share" not in given


def test_no_limits_means_the_plain_solve():
    assert composition_limits(items([2.0, 2.5], [0.5, 0.5]), None) == {}
    shares = items([2.0, 2.5], [0.5, 0.5])
    shares = type(shares)(**{**vars(shares), "max_diet_share": np.array([1.0, 0.4])})
    np.testing.assert_array_equal(composition_limits(shares, None)["max_diet_share"], [1.0, 0.4])


@pytest.mark.parametrize(
    ("text", "message"),
    [
        (
            '[diet.groups.g]\nclasses = ["oak"]\n',
            r"key 'diet\.groups\.g\.classes'.*unknown classes 'oak'",
        ),
        (
            '[diet.groups.g]\ngrowth_form = "moss"\n',
            r"key 'diet\.groups\.g\.growth_form'.*unknown growth form 'moss'",
        ),
    ],
)
def test_unknown_names_refused(project, text, message):
    add_diet(project, text)
    with pytest.raises(ProjectFileError, match=message):
        estimate(load_project(project))


@pytest.mark.parametrize(
    ("text", "message"),
    [
        (
            '[diet.groups.g]\nclasses = ["juniper"]\ngrowth_form = "grass"\n',
            r"key 'diet\.groups\.g': give classes or growth_form \(one of them\)",
        ),
        (
            '[diet.groups.g]\ngrowth_form = "grass"\nmin_share = 0.7\nmax_share = 0.3\n',
            r"min_share 0\.7 is above max_share 0\.3",
        ),
        ('[diet.groups.g]\ngrowth_form = "grass"\nmax_share = 1.5\n', r"max_share"),
        ("[diet]\ngruops = {}\n", r"unknown key 'diet\.gruops'; did you mean 'groups'"),
    ],
)
def test_schema_refuses(project, text, message):
    add_diet(project, text)
    with pytest.raises(ProjectFileError, match=message):
        load_project(project)


# --- end to end, with the composition-limited solver --------------------------------------


def one_unit(available, de, allowable, max_share=None) -> CapacityProblem:
    forage = items(de, allowable)
    if max_share is not None:
        forage = type(forage)(**{**vars(forage), "max_diet_share": np.array(max_share, float)})
    available = np.atleast_2d(np.array(available, float))
    return CapacityProblem(np.array(["u0"], object), np.array([0]), forage, available)


def solve(problem, de_min, diet=None):
    return solve_problem(
        problem,
        intake_kg_per_day=2.0,
        maintenance_de_kcal_per_day=3000.0,
        de_min_kcal_per_g=de_min,
        dp_min_pct=None,
        cap_at_allowable_use=True,
        diet=diet,
    ).ncc


@needs_solver
def test_hand_computed_fifty_percent_share_cap():
    # Browse 1000 kg (DE 2.8), grass 2000 kg (DE 2.0), allowable use 1, target DE 2.0: any mix
    # will do, so the deer eat all 3000 kg = 1500 animal-days at 2 kg/day. With grass at most
    # 50 % of the diet (g <= 0.5 (b + g), i.e. g <= b): 1000 browse + 1000 grass = 2000 kg =
    # 1000 animal-days (hand computed).
    plain = one_unit([1000.0, 2000.0], [2.8, 2.0], [1.0, 1.0])
    capped = one_unit([1000.0, 2000.0], [2.8, 2.0], [1.0, 1.0], max_share=[1.0, 0.5])
    assert solve(plain, 2.0).animal_days[0] == pytest.approx(1500.0)
    assert solve(capped, 2.0).animal_days[0] == pytest.approx(1000.0)
    # The same limit as a group of one class.
    group = DietLimits((DietGroup("grass", frozenset({"grass"}), None, 0.0, 0.5),))
    assert solve(plain, 2.0, group).animal_days[0] == pytest.approx(1000.0)
    # A target DE of 2.6 needs browse >= 75 % (2.8 s + 2.0 (1 - s) >= 2.6); a browse cap of
    # 50 % makes the mix unreachable: no capacity.
    unreachable = one_unit([1000.0, 2000.0], [2.8, 2.0], [1.0, 1.0], max_share=[0.5, 1.0])
    assert solve(unreachable, 2.6).animal_days[0] == 0.0


def linprog_animal_days(problem, de_min, diet, intake=2.0):
    """Largest Σx / intake with 0 <= x <= cap·A, the DE mix, the item shares and the group
    shares, per row (scipy.optimize.linprog, HiGHS)."""
    result = []
    share = problem.items.max_diet_share
    member = diet.membership(problem.items).astype(float)
    for row in range(problem.available_kg.shape[0]):
        n = problem.items.size
        ones = np.ones(n)
        rows = [de_min - problem.items.de_kcal_per_g]
        rows += list(np.eye(n) - share[:, None] * ones[None, :])
        for g, group in enumerate(diet.groups):
            rows.append(group.min_share * ones - member[g])
            rows.append(member[g] - group.max_share * ones)
        bounds = list(zip(np.zeros(n), problem.available_kg[row] * problem.items.allowable_use))
        found = linprog(-ones, A_ub=np.array(rows), b_ub=np.zeros(len(rows)), bounds=bounds)
        result.append(-found.fun / intake)
    return np.array(result)


@needs_solver
def test_random_problems_equal_linprog():
    rng = np.random.default_rng(16)
    diet = DietLimits(
        (
            DietGroup("browse", frozenset({"browse"}), None, 0.3, 0.9),
            DietGroup("grass", frozenset({"grass"}), None, 0.05, 0.6),
        )
    )
    for _ in range(20):
        problem = one_unit(
            rng.uniform(0, 2000, (1, 2)), [2.8, 2.1], rng.uniform(0.2, 1, 2), [0.9, 0.7]
        )
        found = solve(problem, 2.3, diet).animal_days
        np.testing.assert_allclose(found, linprog_animal_days(problem, 2.3, diet), rtol=1e-9)


@needs_solver
def test_example_with_limits_meets_them_and_never_gains(example_estimate, project):
    add_diet(
        project,
        '[diet.groups.grasses]\ngrowth_form = "grass"\nmin_share = 0.1\nmax_share = 0.4\n',
    )
    text = project.read_text().replace("bootstrap_replicates = 1000", "bootstrap_replicates = 0")
    project.write_text(text)
    limited = estimate(load_project(project))
    eaten = limited.by_unit_class.merge(
        limited.forage_classes[["forage_class", "growth_form"]], on="forage_class"
    )
    total = eaten.groupby("unit_id")["ncc_eaten_kg"].sum()
    grass = eaten[eaten["growth_form"] == "grass"].groupby("unit_id")["ncc_eaten_kg"].sum()
    share = (grass / total)[total > 0]
    assert ((share >= 0.1 - 1e-9) & (share <= 0.4 + 1e-9)).all()
    before = example_estimate.by_unit.set_index("unit_id")["ncc_animals"]
    after = limited.by_unit.set_index("unit_id")["ncc_animals"]
    assert (after <= before * (1 + 1e-9)).all()


@needs_solver
def test_unmeetable_mix_gives_zero_and_a_note(project):
    # Grass at least 90 % of the diet: the richest such diet is 0.9 × the best grass DE +
    # 0.1 × the best other DE, below the target DE (checked here), so no diet meets both the
    # threshold and the group (hand argument); without the group the example has capacity.
    add_diet(project, '[diet.groups.grasses]\ngrowth_form = "grass"\nmin_share = 0.9\n')
    text = project.read_text().replace("bootstrap_replicates = 1000", "bootstrap_replicates = 0")
    project.write_text(text)
    result = estimate(load_project(project))
    items = result.problem.items
    grass = items.growth_form == "grass"
    best_mix = 0.9 * items.de_kcal_per_g[grass].max() + 0.1 * items.de_kcal_per_g[~grass].max()
    assert best_mix < result.target.de_min_kcal_per_g
    assert (result.by_unit["ncc_animal_days"] == 0).all()
    assert (result.by_unit["limiting_factor"] == "diet_mix").all()
    units = ", ".join(result.by_unit["unit_id"])
    assert any(
        note.startswith("no mix of the available forage meets both the target diet and the ")
        and f"in unit(s) {units}: their NCC is 0 (limiting factor 'diet_mix')" in note
        for note in result.notes
    ), result.notes


@needs_solver
def test_sensitivity_moves_the_diet_limits_like_the_project_file(example_estimate, project):
    # The tornado's diet-limit group at ± the example's 10 % change equals total NCC of the
    # example re-run with the sagebrush cap written as 0.28 × 0.9 and 0.28 × 1.1 in the
    # project file (the example's cap, invented for the example); loosening never lowers NCC.
    row = example_estimate.uncertainty.sensitivity.set_index("input").loc[
        "diet-composition limits (every share bound)"
    ]
    base = example_estimate.by_unit["ncc_animals"].sum()
    text = project.read_text().replace("bootstrap_replicates = 1000", "bootstrap_replicates = 0")
    moved = {}
    for name, factor in (("low", 0.9), ("high", 1.1)):
        project.write_text(text.replace("max_share = 0.28", f"max_share = {0.28 * factor!r}"))
        moved[name] = estimate(load_project(project)).by_unit["ncc_animals"].sum() - base
    assert row["low_change_animals"] == pytest.approx(moved["low"], rel=1e-9)
    assert row["high_change_animals"] == pytest.approx(moved["high"], rel=1e-9)
    assert moved["low"] < 0 < moved["high"]
