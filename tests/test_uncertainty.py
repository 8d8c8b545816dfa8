"""Tests of nutricap.model.uncertainty and the sensitivity table.

External checks: the bootstrap variance of a sample mean is (n−1)/n · s²/n
(Efron & Tibshirani 1993, An Introduction to the Bootstrap, §5.2, from memory);
percentile-interval width of a mean shrinks as 1/√n (standard sampling theory).
"""

from dataclasses import replace

import numpy as np
import pytest

from nutricap.inputs.project import load_project
from nutricap.model.problem import CapacityProblem, ForageItems, solve_problem
from nutricap.model.results import totals_table
from nutricap.model.uncertainty import (
    bootstrap_capacity,
    means_of_plots,
    one_at_a_time,
    percentile_interval,
    resample_stratum_means,
)
from nutricap.workflow import estimate


def _items(strata, classes):
    n = len(strata) * len(classes)
    return ForageItems(
        stratum=np.repeat(strata, len(classes)),
        forage_class=np.tile(classes, len(strata)),
        de_kcal_per_g=np.tile([2.9, 2.0], len(strata))[:n],
        dp_pct=np.tile([6.0, 3.0], len(strata))[:n],
        allowable_use=np.full(n, 0.5),
        key=np.zeros(n, dtype=bool),
        biomass_kg_per_ha=np.zeros(n),
        preference=np.ones(n),
        growth_form=np.full(n, "", dtype=object),
        cp_pct=np.zeros(n),
        tannin=np.zeros(n),
        variant=np.full(n, "", dtype=object),
    )


STRATA, CLASSES = ["a", "b"], ["browse", "grass"]


def _problem(hectares, values, stratum):
    """The problem as estimated: hectares × the plots' stratum means."""
    means = means_of_plots(values, stratum, 2)
    hectares = np.asarray(hectares, dtype=float)
    return CapacityProblem(
        unit_ids=np.array(["u1", "u2"]),
        row_unit=np.array([0, 1]),
        items=_items(STRATA, CLASSES),
        available_kg=hectares[:, [0, 0, 1, 1]] * means.ravel()[None, :],
        row_stratum_ha=hectares,
        strata=STRATA,
    )


def _bootstrap(hectares, values, stratum, **options):
    return bootstrap_capacity(
        _problem(hectares, values, stratum), values, stratum, (STRATA, CLASSES), _solve, **options
    )


def _solve(rows):
    return solve_problem(
        rows,
        intake_kg_per_day=1.5,
        maintenance_de_kcal_per_day=3000.0,
        de_min_kcal_per_g=2.4,
        dp_min_pct=None,
        cap_at_allowable_use=True,
    )


def _plots(rng, per_stratum):
    values = np.vstack([rng.gamma(4.0, [50.0, 80.0], size=(per_stratum, 2)) for _ in range(2)])
    return values, np.repeat([0, 1], per_stratum)


def test_bootstrap_variance_of_a_mean_matches_theory():
    rng = np.random.default_rng(11)
    values = rng.gamma(3.0, 40.0, size=(25, 1))
    means = resample_stratum_means(values, np.zeros(25, dtype=int), 1, 20_000, rng)[:, 0, 0]
    n = 25
    expected = (n - 1) / n * values[:, 0].var(ddof=1) / n  # Efron & Tibshirani 1993
    assert means.var() == pytest.approx(expected, rel=0.05)
    assert means.mean() == pytest.approx(values.mean(), rel=0.01)


def test_identical_plots_collapse_the_interval():
    values = np.tile([[120.0, 300.0]], (10, 1))
    result = _bootstrap(
        [[100, 50], [0, 200]], values, np.repeat([0, 1], 5), replicates=200, level=0.9, seed=1
    )
    for days in result.replicate_animal_days.values():
        assert np.ptp(days, axis=0).max() == pytest.approx(0.0, abs=1e-9)


def test_one_plot_per_stratum_collapses_to_the_point_estimate():
    values, stratum = np.array([[120.0, 300.0], [80.0, 40.0]]), np.array([0, 1])
    result = _bootstrap([[100, 50], [0, 200]], values, stratum, replicates=100, level=0.9, seed=1)
    # The point estimate, built independently: hectares × the single plot of each stratum.
    hectares = np.array([[100.0, 50.0], [0.0, 200.0]])
    point = replace(
        _problem(hectares, values, stratum),
        available_kg=hectares[:, [0, 0, 1, 1]] * values.ravel()[None, :],
    )
    lo, hi = result.unit_intervals(1.0)["ncc"]
    np.testing.assert_allclose(lo, _solve(point).ncc.animal_days)
    np.testing.assert_allclose(hi, _solve(point).ncc.animal_days)


def test_replicates_equal_hectares_times_resampled_means():
    rng = np.random.default_rng(3)
    values, stratum = _plots(rng, 7)
    hectares = np.array([[100.0, 50.0], [30.0, 200.0]])
    result = _bootstrap(hectares, values, stratum, replicates=20, level=0.9, seed=9)
    # Independent route: redraw with the same seed and build each replicate directly.
    means = resample_stratum_means(values, stratum, 2, 20, np.random.default_rng(9))
    for b in range(20):
        direct = replace(
            _problem(hectares, values, stratum),
            available_kg=hectares[:, [0, 0, 1, 1]] * means[b].ravel()[None, :],
        )
        np.testing.assert_allclose(
            result.replicate_animal_days["ncc"][b], _solve(direct).ncc.animal_days, rtol=1e-9
        )


class _DrawnForage:
    """A stand-in calibrated group: forage of its entries drawn from the generator handed."""

    def __init__(self, rows, items):
        self.rows, self.items = np.asarray(rows), np.asarray(items)

    def resampled_forage_kg(self, replicates, rng):
        return rng.uniform(0.0, 5000.0, size=(replicates, self.rows.size))


def test_calibrated_entries_take_their_forage_after_the_strata_draws():
    rng = np.random.default_rng(4)
    values, stratum = _plots(rng, 6)
    hectares = np.array([[100.0, 50.0], [30.0, 200.0]])
    # Browse (items 0 and 2) as if calibrated; grass (items 1 and 3) sampled by the plots.
    group = _DrawnForage(rows=[0, 0, 1, 1], items=[0, 2, 0, 2])
    result = bootstrap_capacity(
        _problem(hectares, values, stratum), values[:, 1:], stratum, (STRATA, ["grass"]),
        _solve, replicates=20, level=0.9, seed=6, calibrated=[group],
    )  # fmt: skip
    # Independent route, the documented order of draws: strata plots, then the groups.
    rng = np.random.default_rng(6)
    means = resample_stratum_means(values[:, 1:], stratum, 2, 20, rng)[:, :, 0]
    forage = rng.uniform(0.0, 5000.0, size=(20, 4))
    for b in range(20):
        available = np.zeros((2, 4))
        available[:, [1, 3]] = hectares * means[b][None, :]
        available[group.rows, group.items] = forage[b]
        direct = replace(_problem(hectares, values, stratum), available_kg=available)
        np.testing.assert_allclose(
            result.replicate_animal_days["ncc"][b], _solve(direct).ncc.animal_days, rtol=1e-9
        )


def test_interval_shrinks_as_one_over_root_n_when_plots_are_duplicated():
    rng = np.random.default_rng(5)
    values, stratum = _plots(rng, 12)
    width = {}
    for copies in (1, 4):
        result = _bootstrap(
            [[100, 50], [30, 200]],
            np.repeat(values, copies, axis=0),
            np.repeat(stratum, copies),
            replicates=4000,
            level=0.9,
            seed=2,
        )
        lo, hi = result.unit_intervals(1.0)["ecc"]
        width[copies] = hi - lo
    # 4-fold duplication: width × 1/√4 = 0.5 (sampling theory); ±15 % for Monte Carlo error.
    np.testing.assert_allclose(width[4] / width[1], 0.5, rtol=0.15)


def test_bootstrap_is_reproducible_with_its_seed():
    rng = np.random.default_rng(8)
    values, stratum = _plots(rng, 6)
    runs = [
        _bootstrap(
            [[10, 5], [3, 20]], values, stratum, replicates=50, level=0.9, seed=42
        ).replicate_animal_days["ncc"]
        for _ in range(2)
    ]
    np.testing.assert_array_equal(runs[0], runs[1])


def test_percentile_interval_against_numpy_quantile():
    data = np.arange(101, dtype=float)[:, None]
    lo, hi = percentile_interval(data, 0.9)
    assert lo[0] == pytest.approx(np.quantile(data, 0.05))
    assert hi[0] == pytest.approx(np.quantile(data, 0.95))


def test_tornado_table_sorted_by_range():
    table = one_at_a_time(100.0, {"small": lambda f: 100 * f**0.1, "large": lambda f: 100 * f}, 0.1)
    assert table["input"].tolist() == ["large", "small"]
    # A linear input moves ±10 % of the baseline: −10 and +10 animals (hand computed).
    assert table.loc[0, "low_change_animals"] == pytest.approx(-10.0)
    assert table.loc[0, "high_change_animals"] == pytest.approx(10.0)


def test_example_intervals_bracket_point_and_sensitivity_present(project):
    project_file = project
    text = project_file.read_text().replace(
        "bootstrap_replicates = 1000", "bootstrap_replicates = 300"
    )
    assert "bootstrap_replicates = 300" in text
    project_file.write_text(text)
    result = estimate(load_project(project_file))
    table = result.by_unit
    for figure in ("ncc", "ecc", "allowable_use"):
        assert (table[f"{figure}_animals_lo"] <= table[f"{figure}_animals_hi"]).all()
    totals = totals_table(result)
    assert (totals["total_animals_lo"] < totals["total_animals"]).all()
    assert (totals["total_animals"] < totals["total_animals_hi"]).all()
    sensitivity = result.uncertainty.sensitivity
    assert {"body mass (all animal classes)", "allowable use (all classes)"} <= set(
        sensitivity["input"]
    )
