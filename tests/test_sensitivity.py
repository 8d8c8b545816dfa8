"""Tests of nutricap.model.sensitivity: the input groups of the one-at-a-time sensitivity."""

import numpy as np
import pytest

from nutricap.inputs.project import load_project
from nutricap.model.sensitivity import scaled_crude_protein
from nutricap.workflow import estimate


@pytest.fixture(scope="module")
def example_problem(example_project):
    return estimate(load_project(example_project)).problem


def test_crude_protein_moves_and_dp_follows_the_linear_equation(example_problem):
    # Robbins et al. 1987 line (DP = -3.87 + 0.9283 CP - 11.82 BSA; CP terms read in a
    # secondary table, BSA slope from memory): 10 % more CP raises DP by 0.9283 x 0.1 x CP,
    # whatever the sign of DP (by hand), and leaves the unmasked items alone.
    items = example_problem.items
    mask = np.zeros(items.size, dtype=bool)
    mask[:3] = True
    moved = scaled_crude_protein(example_problem, mask, 1.1).items
    np.testing.assert_allclose(moved.cp_pct[:3], items.cp_pct[:3] * 1.1, rtol=1e-12)
    np.testing.assert_allclose(
        moved.dp_pct[:3] - items.dp_pct[:3], 0.9283 * 0.1 * items.cp_pct[:3], rtol=1e-9
    )
    np.testing.assert_array_equal(moved.dp_pct[3:], items.dp_pct[3:])


def test_crude_protein_factor_one_changes_nothing(example_problem):
    everything = np.ones(example_problem.items.size, dtype=bool)
    moved = scaled_crude_protein(example_problem, everything, 1.0).items
    np.testing.assert_allclose(moved.dp_pct, example_problem.items.dp_pct, rtol=0, atol=1e-12)


def test_diet_limit_group_moves_the_class_caps_and_the_groups(example_problem):
    # A class cap of 0.5 and one of 0.95 (invented for the test) × 1.1: 0.55 and 1 (capped
    # by hand); uncapped classes stay at 1; the groups are moved by the same factor.
    from dataclasses import replace

    from nutricap.model.sensitivity import input_groups

    shares = np.ones(example_problem.items.size)
    shares[0], shares[1] = 0.5, 0.95
    problem = replace(example_problem, items=replace(example_problem.items, max_diet_share=shares))
    calls = []
    groups = input_groups(
        problem, lambda **given: calls.append(given) or 0.0, lambda f: None, protein=False
    )
    groups["diet-composition limits (every share bound)"](1.1)
    moved = calls[-1]["problem"].items.max_diet_share
    np.testing.assert_allclose(moved, [0.55, 1.0, *shares[2:]], rtol=1e-12)
    assert calls[-1]["diet_factor"] == 1.1
    plain = input_groups(example_problem, lambda **given: 0.0, lambda f: None, protein=False)
    assert "diet-composition limits (every share bound)" not in plain
