"""The steps after the solve: uncertainty (bootstrap and sensitivity), current use and the
trend of the counts."""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pandas as pd

from nutricap.errors import TableError
from nutricap.inputs.counts import TOTAL_LABEL, select_series
from nutricap.inputs.project import Project
from nutricap.landscape.grid.supply import GridResult
from nutricap.landscape.plots import StratumSupply, plot_biomass_matrix
from nutricap.landscape.vectors import StratumAreas
from nutricap.model.estimate import Uncertainty
from nutricap.model.problem import CapacityProblem
from nutricap.model.requirements import DietTarget, herd_requirement
from nutricap.model.sensitivity import input_groups
from nutricap.model.trend import analyse_series, capacity_comparison, capacity_table
from nutricap.model.uncertainty import bootstrap_capacity, one_at_a_time
from nutricap.model.use import assess_use, current_animals_from_counts
from nutricap.science import energetics
from nutricap.science.population import logistic_trajectory
from nutricap.workflow.reading import Inputs, Progress
from nutricap.workflow.solving import solve


def assess_uncertainty(
    project: Project,
    inputs: Inputs,
    supply: StratumSupply,
    problem: CapacityProblem,
    herd: energetics.HerdRequirement,
    target: DietTarget,
    say: Progress,
    grid: GridResult | None = None,
) -> Uncertainty:
    """Stratified bootstrap over plots (and over the calibration plots of the grid's
    calibrated groups) and the one-at-a-time sensitivity of total NCC."""
    settings = project.config.uncertainty
    bootstrap = None
    if settings.bootstrap_replicates > 0:
        calibrated = grid.calibrated_sums if grid is not None else []
        models = " and calibration models" if calibrated else ""
        say(f"bootstrap over plots{models}: {settings.bootstrap_replicates} replicates")
        classes = plot_sampled_classes(project, supply.classes)
        wide = plot_biomass_matrix(inputs.plots, classes)
        plot_stratum = pd.Index(supply.strata).get_indexer(wide["stratum"])
        on_map = plot_stratum >= 0
        bootstrap = bootstrap_capacity(
            problem,
            wide.loc[on_map, classes].to_numpy(),
            plot_stratum[on_map],
            (supply.strata, classes),
            lambda rows: solve(rows, herd, target, project, inputs.other_herds),
            replicates=settings.bootstrap_replicates,
            level=settings.interval_level,
            seed=settings.seed,
            calibrated=calibrated,
        )
    sensitivity = None
    if settings.sensitivity_change > 0:
        say(f"sensitivity of total NCC to ±{settings.sensitivity_change:.0%} changes")
        sensitivity = sensitivity_table(project, inputs, problem, herd, target)
    return Uncertainty(bootstrap, sensitivity, settings.sensitivity_change)


def plot_sampled_classes(project: Project, classes: list[str]) -> list[str]:
    """The forage classes whose supply comes from clip plots (not from rasters)."""
    rasters = project.config.rasters
    if rasters is None:
        return list(classes)
    on_rasters = set(rasters.biomass)
    if rasters.calibrated is not None:
        on_rasters |= set(rasters.calibrated.classes())
    return [name for name in classes if name not in on_rasters]


def sensitivity_table(
    project: Project,
    inputs: Inputs,
    problem: CapacityProblem,
    herd: energetics.HerdRequirement,
    target: DietTarget,
) -> pd.DataFrame:
    """Tornado table of total NCC [animals] for ± the configured change of each input group."""
    days = project.config.project.days

    def total_for(
        problem=problem,
        herd=herd,
        de_factor=1.0,
        dp_factor=1.0,
        others_factor=1.0,
        diet_factor=1.0,
    ) -> float:
        composition = target.composition
        moved = replace(
            target,
            de_min_kcal_per_g=target.de_min_kcal_per_g * de_factor,
            dp_min_pct=None if target.dp_min_pct is None else target.dp_min_pct * dp_factor,
            composition=None if composition is None else composition.scaled(diet_factor),
        )
        others = tuple(other.scaled(others_factor) for other in inputs.other_herds)
        return float(solve(problem, herd, moved, project, others).ncc.animal_days.sum() / days)

    def herd_for_mass(factor: float) -> energetics.HerdRequirement:
        animals = inputs.animals
        heavier = animals.assign(body_mass_kg=animals["body_mass_kg"] * factor)
        return herd_requirement(heavier, project, inputs.requirement_table)

    groups = input_groups(
        problem,
        total_for,
        herd_for_mass,
        protein=target.dp_min_pct is not None,
        other_herds=bool(inputs.other_herds),
        diet_groups=target.composition is not None and bool(target.composition.groups),
    )
    change = project.config.uncertainty.sensitivity_change
    return one_at_a_time(total_for(), groups, change)


def assess_current_use(
    project: Project,
    counts: pd.DataFrame | None,
    areas: StratumAreas,
    problem: CapacityProblem,
    by_unit: pd.DataFrame,
    herd: energetics.HerdRequirement,
    say: Progress,
    others_taken_kg: np.ndarray | None = None,
) -> tuple[pd.DataFrame, pd.DataFrame | None]:
    """Overuse columns when current numbers are known; the table unchanged otherwise.

    ``problem`` is the forage before any herbivore eats; ``others_taken_kg`` what the other
    herbivores take of it (rows × items, kg DM; None: there are none)."""
    current = current_animals(project, counts, areas)
    if current is None:
        return by_unit, None
    say("assessing current use")
    return assess_use(
        problem,
        by_unit,
        current,
        intake_kg_per_day=herd.intake_kg_per_day,
        season_days=project.config.project.days,
        preference=problem.items.preference,
        others_taken_kg=others_taken_kg,
    )


def counts_trend(
    project: Project,
    counts: pd.DataFrame | None,
    say: Progress,
    by_unit: pd.DataFrame | None = None,
) -> dict | None:
    """Trend figures of the project's counts (the total over units), with the fitted curve.

    The intervals are at the project's ``[uncertainty] interval_level`` (the level of every
    interval of the report; the ``trend`` command's own default is 0.95). With ``by_unit``,
    ``capacity`` holds the NCC and ECC of the units the counts cover, and ``unmatched_units``
    the counts' unit ids that are no unit of the estimate.
    """
    if counts is None:
        return None
    path = project.source("counts")
    say("population trend of the counts")
    series = select_series(counts, path, None)
    name = TOTAL_LABEL if TOTAL_LABEL in series else next(iter(series))
    frame = series[name]
    level = project.config.uncertainty.interval_level
    figures = analyse_series(frame, level)
    figures["series"] = name
    figures["level"] = level
    if by_unit is not None:
        figures.update(_counted_capacity(figures, counts, by_unit))
    if figures.get("K") is not None:
        years = np.arange(int(frame["year"].min()), int(frame["year"].max()) + 1)
        removals = frame.set_index("year")["removals"].reindex(years).fillna(0.0).to_numpy()
        figures["fitted_years"] = years.tolist()
        figures["fitted_counts"] = logistic_trajectory(
            float(frame["count"].iloc[0]),
            figures["r_max"],
            figures["K"],
            years.size,
            removals[:-1],
        ).tolist()
    return figures


def _counted_capacity(figures: dict, counts: pd.DataFrame, by_unit: pd.DataFrame) -> dict:
    """NCC and ECC of the units the counts cover (every unit when the counts name none)."""
    capacity = capacity_table(by_unit)
    ids = counts["unit_id"].fillna("").astype(str) if "unit_id" in counts.columns else None
    named = ids is not None and bool((ids != "").any())
    counted = list(dict.fromkeys(ids[ids != ""])) if named else []
    matched = [unit for unit in counted if unit in capacity.index] if named else []
    units = matched if named else list(capacity.index)
    return {
        "capacity": capacity_comparison(figures, capacity.loc[units], units),
        "unmatched_units": [unit for unit in counted if unit not in capacity.index],
        "counted_all_units": set(units) == set(capacity.index),
    }


def current_animals(
    project: Project, counts: pd.DataFrame | None, areas: StratumAreas
) -> np.ndarray | None:
    """Current animals per unit: the units layer's column, else the latest count, else None."""
    if "current_animals" in areas.units.columns:
        return areas.units["current_animals"].to_numpy(dtype=float)
    if counts is None:
        return None
    counts_path = project.source("counts")
    latest = current_animals_from_counts(counts, areas.units["unit_id"].to_numpy())
    missing = np.isnan(latest)
    if missing.all():
        return None
    if missing.any():
        unit = areas.units["unit_id"].to_numpy()[missing][0]
        raise TableError(
            f"no count for unit {unit!r}",
            source=counts_path,
            location="column 'unit_id'",
            expected="counts for every unit, or a current_animals column in the units layer",
            found=f"{int(missing.sum())} unit(s) without counts",
        )
    return latest
