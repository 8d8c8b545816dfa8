"""Tests of nutricap.model.uncertainty and the sensitivity table.

External checks: the bootstrap variance of a sample mean is (n−1)/n · s²/n
(Efron & Tibshirani 1993, An Introduction to the Bootstrap, §5.2, from memory);
percentile-interval width of a mean shrinks as 1/√n (standard sampling theory).
Chunked replicates are checked against the same bootstrap in one block, bit for bit (the
contract of the memory budget), and their memory with tracemalloc.
"""

import tracemalloc
from dataclasses import replace

import numpy as np
import pytest

import nutricap.model.uncertainty as uncertainty
from nutricap.inputs.project import load_project
from nutricap.landscape.calibration import fit_linear, fit_loglinear
from nutricap.landscape.grid.calibration import CalibratedSums
from nutricap.model.problem import CapacityProblem, ForageItems, solve_problem
from nutricap.model.results import totals_table
from nutricap.model.uncertainty import (
    SOLVE_BYTES_PER_ENTRY,
    bootstrap_capacity,
    means_of_plots,
    one_at_a_time,
    percentile_interval,
    replicate_chunks,
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

    def resampled_fits(self, replicates, rng):
        return rng.uniform(0.0, 5000.0, size=(replicates, self.rows.size))

    def forage_kg(self, fits):
        return fits


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


def test_replicate_chunks_follow_the_budget():
    # 8 entries per replicate, a budget of 3 replicates: 10 replicates in 3 + 3 + 3 + 1
    # (hand computed); a budget below one replicate still moves one at a time.
    chunks = list(replicate_chunks(10, 8, 3 * 8 * SOLVE_BYTES_PER_ENTRY + 5))
    assert [(c.start, c.stop) for c in chunks] == [(0, 3), (3, 6), (6, 9), (9, 10)]
    assert len(list(replicate_chunks(4, 8, 1))) == 4


def _patch_problem(rng, n_units):
    """Patch mode: one row per unit × stratum, forage = hectares × the plots' means. In
    stratum b energy favours the grass and protein the browse (qualities invented)."""
    values, stratum = _plots(rng, 8)
    means = means_of_plots(values, stratum, 2)
    hectares = rng.uniform(0.0, 300.0, size=(n_units, 2))
    row_unit = np.repeat(np.arange(n_units), 2)
    row_ha = np.zeros((2 * n_units, 2))
    row_ha[np.arange(2 * n_units), np.tile([0, 1], n_units)] = hectares.ravel()
    problem = CapacityProblem(
        unit_ids=np.array([f"u{k}" for k in range(n_units)]),
        row_unit=row_unit,
        items=replace(
            _items(STRATA, CLASSES),
            de_kcal_per_g=np.array([2.9, 2.0, 2.2, 2.7]),
            dp_pct=np.array([6.0, 3.0, 9.0, 3.5]),
        ),
        available_kg=row_ha[:, [0, 0, 1, 1]] * means.ravel()[None, :],
        row_stratum_ha=row_ha,
        strata=STRATA,
    )
    return problem, values, stratum


def _calibrated_groups(rng, problem):
    """A linear and a log-linear group on the browse items (numbers invented for the test)."""
    index = rng.uniform(0.1, 0.9, size=15)
    biomass = 40.0 + 500.0 * index + rng.normal(0.0, 25.0, size=15)
    browse_rows = np.flatnonzero(problem.available_kg[:, 0] > 0)
    linear = CalibratedSums(
        fit_linear("shrubs", index, biomass),
        rows=browse_rows,
        items=np.zeros(browse_rows.size, dtype=int),
        terms=np.column_stack([np.full(browse_rows.size, 50.0), np.full(browse_rows.size, 20.0)]),
    )
    other_rows = np.flatnonzero(problem.available_kg[:, 2] > 0)
    bins = 8
    loglinear = CalibratedSums(
        fit_loglinear("trees", index, biomass),
        rows=other_rows,
        items=np.full(other_rows.size, 2),
        terms=rng.uniform(0.0, 4000.0, size=(other_rows.size, bins)),
        mean_index=np.tile(np.linspace(0.15, 0.85, bins), (other_rows.size, 1)),
    )
    return [linear, loglinear]


def _counted(solve):
    calls = []

    def solve_rows(rows):
        calls.append(rows.row_unit.size)
        return solve(rows)

    return solve_rows, calls


def _solve_protein(rows):
    """Energy and protein: some rows need the two-constraint stage."""
    return solve_problem(
        rows,
        intake_kg_per_day=1.5,
        maintenance_de_kcal_per_day=3000.0,
        de_min_kcal_per_g=2.4,
        dp_min_pct=4.5,
        cap_at_allowable_use=True,
    )


@pytest.mark.parametrize("budget_replicates", [1, 7])
def test_chunked_replicates_equal_one_block_bit_for_bit(budget_replicates):
    rng = np.random.default_rng(21)
    problem, values, stratum = _patch_problem(rng, 9)
    groups = _calibrated_groups(rng, problem)
    runs = {}
    for name, budget in (("block", 10**12), ("chunks", budget_replicates)):
        solve_rows, calls = _counted(_solve_protein)
        runs[name] = bootstrap_capacity(
            problem, values[:, 1:], stratum, (STRATA, ["grass"]), solve_rows,
            replicates=61, level=0.9, seed=13, calibrated=groups,
            memory_bytes=budget * problem.available_kg.size * SOLVE_BYTES_PER_ENTRY,
        )  # fmt: skip
        runs[name + " calls"] = calls
    # One solve of all 61 replicates × 18 rows, against 61 ÷ budget solves (rounded up).
    assert runs["block calls"] == [61 * 18]
    assert len(runs["chunks calls"]) == -(-61 // budget_replicates)
    block, chunks = runs["block"], runs["chunks"]
    assert list(block.replicate_animal_days) == list(chunks.replicate_animal_days)
    for name, days in block.replicate_animal_days.items():
        np.testing.assert_array_equal(chunks.replicate_animal_days[name], days)
        assert np.ptp(days, axis=0).min() > 0  # every unit varies between replicates
    for a, b in zip(block.unit_intervals(120.0).values(), chunks.unit_intervals(120.0).values()):
        np.testing.assert_array_equal(a, b)
    assert block.total_intervals(120.0) == chunks.total_intervals(120.0)


def test_memory_of_the_bootstrap_is_bounded_by_the_budget():
    rng = np.random.default_rng(22)
    problem, values, stratum = _patch_problem(rng, 400)  # 800 rows × 4 items
    replicates, budget = 300, 2 * 2**20
    results_bytes = 3 * replicates * problem.unit_ids.size * 8  # kept: every replicate, unit
    peaks = {}
    for name, memory_bytes in (("block", 10**12), ("chunks", budget)):
        tracemalloc.start()
        bootstrap_capacity(
            problem, values, stratum, (STRATA, CLASSES), _solve_protein,
            replicates=replicates, level=0.9, seed=3, memory_bytes=memory_bytes,
        )  # fmt: skip
        peaks[name] = tracemalloc.get_traced_memory()[1]
        tracemalloc.stop()
    # One block stacks 300 × 800 × 4 float64 entries (7.7 MB) and the solver's temporaries;
    # in chunks, the traced peak stays within the results kept, the budget and 1 MB for the
    # draws and small arrays (hand computed: means 300 × 2 × 2 and ratios 300 × 4 float64).
    assert peaks["chunks"] < results_bytes + budget + 2**20
    assert peaks["block"] > 3 * peaks["chunks"]


def test_example_bootstrap_in_chunks_equals_one_block(project, monkeypatch):
    text = project.read_text().replace("bootstrap_replicates = 1000", "bootstrap_replicates = 40")
    project.write_text(text.replace("sensitivity_change = 0.1", "sensitivity_change = 0"))
    tables = {}
    for name, budget in (("block", 10**12), ("one replicate at a time", 1)):
        monkeypatch.setattr(uncertainty, "BOOTSTRAP_MEMORY_BYTES", budget)
        tables[name] = estimate(load_project(project)).by_unit
    columns = [name for name in tables["block"] if name.endswith(("_lo", "_hi"))]
    assert len(columns) == 6
    np.testing.assert_array_equal(
        tables["one replicate at a time"][columns].to_numpy(), tables["block"][columns].to_numpy()
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
