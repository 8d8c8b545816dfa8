"""Uncertainty of the capacity figures: stratified bootstrap and one-at-a-time sensitivity.

Bootstrap (Efron & Tibshirani 1993, *An Introduction to the Bootstrap*, ch. 13
percentile intervals; stratified resampling as in their ch. 8, from memory):
plots are resampled with replacement *within each stratum*, the stratum means
are recomputed, and every replicate's capacity problem is solved. In the
calibrated-raster mode each group's calibration plots are resampled too (pairs
bootstrap, ch. 9) and its index → biomass model refitted. The spatial work
(overlay, hectares, raster pass) is done once; the replicates are stacked into
one problem and solved in vectorised calls, as many replicates at a time as a
memory budget allows (:data:`BOOTSTRAP_MEMORY_BYTES`), so that memory does not
grow with units × replicates beyond the per-unit results.

Sensitivity: each input group is moved down and up by a stated fraction, one
at a time, and the change in total NCC is recorded (a tornado table). This is
deterministic one-at-a-time perturbation, not sampling, so no sampling library
is needed.
"""

from __future__ import annotations

from collections.abc import Callable, Iterator, Sequence
from dataclasses import dataclass, replace
from typing import Any, Protocol

import numpy as np
import pandas as pd

from nutricap.model.problem import CapacityProblem, Solution

FIGURES = ("ncc", "ecc", "allowable_use")
SolveRows = Callable[[CapacityProblem], Solution]

BOOTSTRAP_MEMORY_BYTES = 256 * 2**20
"""Memory budget of one chunk of stacked replicates [bytes]: the replicate forage and the
solver's temporaries (the per-unit results of every replicate are kept besides)."""
SOLVE_BYTES_PER_ENTRY = 128
"""Peak memory of a stacked solve per (replicate, row, item) entry [bytes]: the float64
forage (8 B) and the solver's temporaries. Measured: (peak RSS − RSS before) ÷ entries
of one block of 1,000 replicates × 1,000 units × 66 items, about 13 × 8 B (see
benchmarks/README.md); rounded up to 16 × 8 B."""


class ResampledForage(Protocol):
    """Forage of some (row, item) entries of a problem under a resampled model, e.g. a
    calibrated group (:class:`nutricap.landscape.grid.calibration.CalibratedSums`)."""

    rows: np.ndarray  # (entries,) problem rows
    items: np.ndarray  # (entries,) problem items

    def resampled_fits(self, replicates: int, rng: np.random.Generator) -> Any:
        """Every replicate's resampled model, drawn from ``rng`` (compact: parameters per
        replicate, no per-entry arrays); indexing it by a slice of replicates gives theirs."""

    def forage_kg(self, fits: Any) -> np.ndarray:
        """Forage of each entry under the models ``fits`` [kg], (replicates of fits, entries)."""


@dataclass(frozen=True)
class BootstrapResult:
    """Replicate capacities and their percentile intervals.

    Attributes
    ----------
    replicate_animal_days : dict of str → array, shape (replicates, units)
        Per figure (``ncc``, ``ecc``, ``allowable_use``) [animal-days].
    level : float
        Interval level, e.g. 0.9.
    """

    replicate_animal_days: dict[str, np.ndarray]
    level: float

    def unit_intervals(self, season_days: float) -> dict[str, tuple[np.ndarray, np.ndarray]]:
        """``figure → (lo, hi)`` per unit [animals]."""
        return {
            name: percentile_interval(days / season_days, self.level)
            for name, days in self.replicate_animal_days.items()
        }

    def total_intervals(self, season_days: float) -> dict[str, tuple[float, float]]:
        """``figure → (lo, hi)`` of the total over units [animals]."""
        result = {}
        for name, days in self.replicate_animal_days.items():
            lo, hi = percentile_interval(days.sum(axis=1)[:, None] / season_days, self.level)
            result[name] = (float(lo[0]), float(hi[0]))
        return result


def percentile_interval(replicates: np.ndarray, level: float) -> tuple[np.ndarray, np.ndarray]:
    """Percentile interval over axis 0 at ``level`` (e.g. 0.9 → 5th and 95th percentiles)."""
    tail = (1.0 - level) / 2.0 * 100.0
    lo, hi = np.percentile(replicates, [tail, 100.0 - tail], axis=0)
    return lo, hi


def resample_stratum_means(
    plot_biomass_kg_per_ha: np.ndarray,
    plot_stratum: np.ndarray,
    n_strata: int,
    replicates: int,
    rng: np.random.Generator,
) -> np.ndarray:
    """Bootstrap means per stratum and class.

    Parameters
    ----------
    plot_biomass_kg_per_ha : array, shape (plots, classes) [kg/ha]
    plot_stratum : int array, shape (plots,)
        Stratum index of each plot.
    n_strata : int
    replicates : int
    rng : numpy Generator

    Returns
    -------
    array, shape (replicates, strata, classes) [kg/ha]
        Each stratum's plots drawn with replacement, as many as it has; zero
        for strata without plots.
    """
    classes = plot_biomass_kg_per_ha.shape[1]
    means = np.zeros((replicates, n_strata, classes))
    for stratum in range(n_strata):
        values = plot_biomass_kg_per_ha[plot_stratum == stratum]
        if len(values) == 0:
            continue
        draws = rng.integers(0, len(values), size=(replicates, len(values)))
        means[:, stratum, :] = values[draws].mean(axis=1)
    return means


def means_of_plots(
    plot_biomass_kg_per_ha: np.ndarray, plot_stratum: np.ndarray, n_strata: int
) -> np.ndarray:
    """Sample mean per stratum and class [kg/ha]; 0 for strata without plots."""
    sums = np.zeros((n_strata, plot_biomass_kg_per_ha.shape[1]))
    np.add.at(sums, plot_stratum, plot_biomass_kg_per_ha)
    counts = np.bincount(plot_stratum, minlength=n_strata)[:, None]
    return np.divide(sums, counts, out=np.zeros_like(sums), where=counts > 0)


def bootstrap_capacity(
    problem: CapacityProblem,
    plot_biomass_kg_per_ha: np.ndarray,
    plot_stratum: np.ndarray,
    labels: tuple[list[str], list[str]],
    solve_rows: SolveRows,
    *,
    replicates: int,
    level: float,
    seed: int,
    calibrated: Sequence[ResampledForage] = (),
    memory_bytes: int | None = None,
) -> BootstrapResult:
    """Stratified bootstrap of NCC, ECC and allowable-use capacity per unit.

    Parameters
    ----------
    problem : CapacityProblem
        The problem as estimated from the plot means.
    plot_biomass_kg_per_ha : array, shape (plots, classes) [kg/ha]
        Biomass of each plot-sampled class on each plot (0 where not found).
    plot_stratum : int array, shape (plots,)
        Index of each plot's stratum in ``labels[0]``.
    labels : (strata, classes)
        Names of the strata and of the columns of ``plot_biomass_kg_per_ha``.
    solve_rows : callable
        Solves a problem (a chunk of replicates is stacked into one).
    calibrated : sequence of ResampledForage, optional
        The calibrated groups of the grid path (``GridResult.calibrated_sums``): their
        entries take the forage of each replicate's refitted model.
    memory_bytes : int, optional
        Budget of one chunk of stacked replicates [bytes]; default
        :data:`BOOTSTRAP_MEMORY_BYTES`. At least one replicate is solved at a time.

    Notes
    -----
    The available forage of an item grown on stratum s and sampled by plots is
    proportional to the stratum's plot mean (hectares × mean, or on the grid the
    sum over cells of the mean × each cell's availability), so a replicate's
    forage is the estimate's × (replicate mean ÷ sample mean). Items of calibrated
    groups take the forage of the group's model refitted to its resampled
    calibration plots (pairs bootstrap); direct raster classes keep their forage.

    One generator, ``numpy.random.default_rng(seed)``, draws in this order: the
    strata plots, stratum by stratum (:func:`resample_stratum_means`), then each
    calibrated group's plots in the order of ``calibrated``
    (:func:`nutricap.landscape.calibration.pairs_bootstrap`). Without calibrated
    groups only the strata plots are drawn. Every draw is made before the first solve
    and kept compactly (stratum means per replicate, model parameters per replicate);
    the replicates are then built and solved in chunks (:func:`replicate_chunks`). Each
    unit is solved on its own and the per-replicate forage is elementwise, so the
    result does not depend on the chunk size, bit for bit.

    On the grid both rescalings are approximations where the minimum-density rule
    acts (it is evaluated at the point estimate); a refitted linear model is exact
    otherwise except in cells the point estimate or the refit predicts below zero,
    a refitted log-linear model is evaluated on index bins (error bound in
    :func:`nutricap.landscape.calibration.binned_loglinear_forage`; see
    docs/methods.md).
    """
    strata, classes = labels
    rng = np.random.default_rng(seed)
    means = resample_stratum_means(
        plot_biomass_kg_per_ha, plot_stratum, len(strata), replicates, rng
    )
    base = means_of_plots(plot_biomass_kg_per_ha, plot_stratum, len(strata))
    ratio = np.divide(means, base, out=np.ones_like(means), where=base > 0)
    s = pd.Index(strata).get_indexer(problem.items.stratum)
    c = pd.Index(classes).get_indexer(problem.items.forage_class)
    sampled = (s >= 0) & (c >= 0) & (problem.items.variant == "")
    item_ratio = np.where(sampled, ratio[:, np.maximum(s, 0), np.maximum(c, 0)], 1.0)
    fits = [group.resampled_fits(replicates, rng) for group in calibrated]
    days = {name: np.empty((replicates, problem.unit_ids.size)) for name in FIGURES}
    entries = problem.available_kg.size
    for chunk in replicate_chunks(replicates, entries, memory_bytes or BOOTSTRAP_MEMORY_BYTES):
        available = problem.available_kg[None, :, :] * item_ratio[chunk, None, :]
        for group, group_fits in zip(calibrated, fits):
            available[:, group.rows, group.items] = group.forage_kg(group_fits[chunk])
        for name, values in solve_stacked(problem, available, solve_rows).items():
            days[name][chunk] = values
    return BootstrapResult(days, level)


def replicate_chunks(replicates: int, entries: int, memory_bytes: int) -> Iterator[slice]:
    """Consecutive slices of ``range(replicates)``, each as long as ``memory_bytes`` allows a
    stacked solve of ``entries`` (rows × items) per replicate (at least one replicate)."""
    step = max(1, memory_bytes // max(1, entries * SOLVE_BYTES_PER_ENTRY))
    for start in range(0, replicates, step):
        yield slice(start, min(start + step, replicates))


def solve_stacked(
    problem: CapacityProblem, available_kg: np.ndarray, solve_rows: SolveRows
) -> dict[str, np.ndarray]:
    """Capacity per replicate and unit [animal-days], ``figure → (replicates, units)``, of
    ``problem`` with the forage ``available_kg`` (replicates, rows, items) [kg], all replicates
    stacked into one problem."""
    count, rows = available_kg.shape[:2]
    stacked = replace(
        problem,
        row_unit=np.tile(problem.row_unit, count)
        + np.repeat(np.arange(count) * problem.unit_ids.size, rows),
        unit_ids=np.tile(problem.unit_ids, count),
        available_kg=available_kg.reshape(count * rows, -1),
    )
    solution = solve_rows(stacked)
    per_figure = {
        "ncc": solution.ncc.animal_days,
        "ecc": solution.ecc_animal_days,
        "allowable_use": solution.allowable_use_animal_days,
    }
    return {name: stacked.sum_by_unit(d).reshape(count, -1) for name, d in per_figure.items()}


def add_intervals(table: pd.DataFrame, result: BootstrapResult, season_days: float) -> pd.DataFrame:
    """Add ``<figure>_animals_lo`` / ``_hi`` columns to the per-unit table."""
    table = table.copy()
    for name, (lo, hi) in result.unit_intervals(season_days).items():
        table[f"{name}_animals_lo"] = lo
        table[f"{name}_animals_hi"] = hi
    return table


TotalNcc = Callable[[float], float]


def one_at_a_time(
    baseline_total: float, perturbations: dict[str, TotalNcc], change: float
) -> pd.DataFrame:
    """Tornado table: change of total NCC when each input moves by ± ``change``.

    Parameters
    ----------
    baseline_total : float
        Total NCC at the inputs as given [animals].
    perturbations : dict of str → callable
        For each input group, a function of the multiplier (e.g. 0.9 or 1.1)
        returning the total NCC with that group so multiplied [animals].
    change : float
        The fractional change, e.g. 0.1 for ±10 %.

    Returns
    -------
    DataFrame
        ``input, low_change_animals, high_change_animals, range_animals``,
        largest range first.
    """
    rows = []
    for name, total_at in perturbations.items():
        low = total_at(1.0 - change) - baseline_total
        high = total_at(1.0 + change) - baseline_total
        rows.append((name, low, high, abs(high - low)))
    table = pd.DataFrame(
        rows, columns=["input", "low_change_animals", "high_change_animals", "range_animals"]
    )
    return table.sort_values("range_animals", ascending=False, kind="stable").reset_index(drop=True)
