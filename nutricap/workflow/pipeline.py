"""The estimate pipeline, in one straight line.

supply (plots × strata map) → availability (accessible hectares) → pool by
unit → solve (NCC, ECC, allowable use) → assemble the per-unit table.
Writing files is left to :mod:`nutricap.report.tables`.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import replace

import geopandas as gpd
import pandas as pd

from nutricap.errors import InputError
from nutricap.inputs.project import Project
from nutricap.landscape.grid.supply import grid_problem
from nutricap.landscape.plots import StratumSupply, stratum_supply
from nutricap.landscape.vectors import StratumAreas, overlay_strata_on_units
from nutricap.model.estimate import Estimate
from nutricap.model.problem import CapacityProblem, build_forage_items, build_problem
from nutricap.model.requirements import (
    diet_limits,
    diet_target,
    herd_requirement,
    require_protein_values,
)
from nutricap.model.results import (
    declared_bare_notes,
    ordering_notes,
    shared_range_notes,
    supply_notes,
    unit_class_table,
    unit_table,
    unmapped_notes,
    unreachable_notes,
)
from nutricap.model.shared_range import shared_range_outputs
from nutricap.model.uncertainty import add_intervals
from nutricap.model.use import unmatched_counts_notes
from nutricap.workflow.assess import assess_current_use, assess_uncertainty, counts_trend
from nutricap.workflow.reading import Inputs, Progress, on_grid, read_inputs
from nutricap.workflow.solving import solve


def estimate(
    project: Project,
    progress: Progress | None = None,
    *,
    inputs: Inputs | None = None,
    treatments: gpd.GeoDataFrame | None = None,
    streaming_started: Callable[[], None] | None = None,
) -> Estimate:
    """Run the whole estimate for ``project`` and return the results (nothing is written).

    supply → availability → pool by unit → solve → uncertainty → current use. ``inputs``
    may be read already; ``treatments`` (raster projects only) are a scenario's polygons,
    whose cells' sums the grid pass then also gives (``result.grid.treated``);
    ``streaming_started`` (raster projects only) is called as the grid's first pass starts.
    """
    say = progress or (lambda message: None)
    days = project.config.project.days
    inputs = inputs or read_inputs(project, say)
    grid = None
    if on_grid(project):
        grid = grid_problem(
            project,
            inputs.units,
            inputs.strata,
            inputs.plots,
            inputs.forage_classes,
            project.config.pooling.mode,
            progress,
            treatments,
            streaming_started,
        )
        areas, supply, problem = grid.areas, grid.supply, grid.problem
    else:
        areas, supply, problem = build_supply(project, inputs, say)
    say("computing the herd's requirements")
    herd = herd_requirement(inputs.animals, project, inputs.requirement_table)
    target = diet_target(inputs.animals, project, inputs.requirement_table)
    target = replace(target, composition=diet_limits(project, inputs.forage_classes))
    if target.dp_min_pct is not None:
        require_protein_values(inputs.forage_classes, project)
    say("solving capacity per unit")
    others = inputs.other_herds
    solution = solve(problem, herd, target, project, others)
    if grid is not None:  # the report's coarse map of capacity_density.tif (issue 15)
        grid.add_density_map(problem.available_kg, solution.ncc.eaten_kg, herd.intake_kg_per_day)
    shared = None
    if others:
        say("other herbivores: NCC with and without them")
        shared = shared_range_outputs(
            problem, others, lambda rows: solve(rows, herd, target, project), days
        )
    left = problem if shared is None else shared.left
    by_unit = unit_table(left, solution, areas, days)
    if shared is not None:
        by_unit["available_forage_kg"] = problem.sum_by_unit(problem.available_kg.sum(axis=1))
        by_unit = by_unit.merge(shared.by_unit, on="unit_id", how="left", sort=False)
    uncertainty = assess_uncertainty(project, inputs, supply, problem, herd, target, say, grid)
    if uncertainty.bootstrap is not None:
        by_unit = add_intervals(by_unit, uncertainty.bootstrap, days)
    taken = None if shared is None else shared.taken_kg
    by_unit, use_by_class = assess_current_use(
        project, inputs.counts, areas, problem, by_unit, herd, say, taken
    )
    trend = counts_trend(project, inputs.counts, say, by_unit)
    return Estimate(
        by_unit=by_unit,
        use_by_class=use_by_class,
        by_unit_class=unit_class_table(problem, solution),
        units=areas.units,
        supply=supply,
        areas=areas,
        problem=problem,
        solution=solution,
        herd=herd,
        target=target,
        season_days=days,
        uncertainty=uncertainty,
        trend=trend,
        forage_classes=inputs.forage_classes,
        animals=inputs.animals,
        requirement_table=inputs.requirement_table,
        notes=inputs.requirement_notes
        + areas.notes
        + (unmapped_notes(by_unit) if grid is None else [])
        + supply_notes(supply, inputs.plots)
        + declared_bare_notes(supply, project.config.supply.strata_without_forage)
        + unmatched_counts_notes(inputs.counts, areas.units["unit_id"].to_numpy())
        + unreachable_notes(by_unit)
        + shared_range_notes(by_unit)
        + ordering_notes(by_unit)
        + (grid.notes if grid is not None else []),
        grid=grid,
        other_herds=others,
        shared_range=shared,
    )


def build_supply(
    project: Project, inputs: Inputs, say: Progress
) -> tuple[StratumAreas, StratumSupply, CapacityProblem]:
    """Overlay strata on units, summarise plots by stratum, pool into the capacity problem."""
    config = project.config
    say("overlaying strata on units")
    areas = overlay_strata_on_units(
        inputs.units,
        inputs.strata,
        units_path=project.source("units"),
        strata_path=project.source("strata"),
    )
    _require_units_on_map(areas, project)
    say("summarising clip plots by stratum")
    supply = stratum_supply(
        inputs.plots,
        _general_classes(inputs.forage_classes),
        sorted(inputs.strata["stratum"].unique()),
        plots_path=project.source("plots"),
        strata_path=project.source("strata"),
        strata_without_forage=config.supply.strata_without_forage,
    )
    items = build_forage_items(supply, inputs.forage_classes, project.source("forage_classes"))
    return areas, supply, build_problem(areas, supply, items, config.pooling.mode)


def _general_classes(forage_classes: pd.DataFrame) -> list[str]:
    return sorted(forage_classes.loc[forage_classes["stratum"] == "", "forage_class"])


def _require_units_on_map(areas: StratumAreas, project: Project) -> None:
    mapped = set(areas.by_unit_stratum["unit_id"])
    unmapped = [unit for unit in areas.units["unit_id"] if unit not in mapped]
    if unmapped:
        raise InputError(
            f"unit {unmapped[0]!r} does not overlap any vegetation stratum",
            source=project.source("units"),
            location="attribute 'unit_id'",
            expected="every unit at least partly covered by the strata layer "
            f"({project.input_path('strata')})",
            found=f"{len(unmapped)} unit(s) outside the map: " + ", ".join(map(repr, unmapped)),
        )
