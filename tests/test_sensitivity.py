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
