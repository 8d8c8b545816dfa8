"""Treatment scenarios beside the baseline estimate, year by year (``compare``)."""

from __future__ import annotations

from collections.abc import Callable, Sequence

import numpy as np
import pandas as pd

from nutricap.inputs.project import Project
from nutricap.landscape.strata_raster import read_strata_codes
from nutricap.model.estimate import Estimate
from nutricap.model.grid_scenarios import GridScenario, grid_scenario_year, treated_pieces
from nutricap.model.problem import CapacityProblem
from nutricap.model.scenarios import (
    Scenario,
    off_unit_notes,
    read_scenario,
    scenario_problem,
    scenario_section,
    treated_scenario,
    years_since_latest_treatment,
)
from nutricap.workflow.pipeline import estimate
from nutricap.workflow.reading import Progress, on_grid, read_inputs
from nutricap.workflow.solving import solve


def compare(
    project: Project,
    scenario_name: str | Sequence[str],
    progress: Progress | None = None,
    streaming_started: Callable[[], None] | None = None,
):
    """Baseline estimate and one or more treatment scenarios over their years
    (``streaming_started`` as in :func:`estimate`).

    Returns ``(estimate, scenario_table)``; the table has ``unit_id, scenario, year,
    years_since_treatment, ncc_animals_baseline, ncc_animals_scenario, change_animals``
    and the same pair for ECC and allowable-use capacity (see :func:`compare_scenarios`).
    """
    result, table, _scenarios = compare_scenarios(
        project, scenario_name, progress, streaming_started
    )
    return result, table


def compare_scenarios(
    project: Project,
    names: str | Sequence[str],
    progress: Progress | None = None,
    streaming_started: Callable[[], None] | None = None,
) -> tuple[Estimate, pd.DataFrame, list[Scenario]]:
    """:func:`compare` for each named scenario, with the scenarios read (for the report)."""
    say = progress or (lambda message: None)
    names = [names] if isinstance(names, str) else list(dict.fromkeys(names))
    for name in names:  # an unknown name is refused before any work
        scenario_section(project, name)
    if on_grid(project):
        result, table, scenarios = _compare_on_grid(
            project, names, say, progress, streaming_started
        )
        result.notes.extend(off_unit_notes(scenarios, result.units))
        return result, table, scenarios
    inputs = read_inputs(project, say)
    strata = sorted(inputs.strata["stratum"].unique())
    classes = inputs.forage_classes
    read = [read_scenario(project, name, strata, classes) for name in names]  # before the estimate
    result = estimate(project, progress, inputs=inputs)
    scenarios = [treated_scenario(name, *parts, result.areas) for name, parts in zip(names, read)]
    mode = project.config.pooling.mode
    base_items = result.problem.items.subset(result.problem.items.variant == "")
    frames = []
    for scenario in scenarios:
        section = scenario.section
        say(f"scenario {scenario.name!r}: {section.first_year}–{section.last_year}")
        for year in range(section.first_year, section.last_year + 1):
            problem, pieces = scenario_problem(scenario, result.areas, base_items, year, mode)
            since = years_since_latest_treatment(pieces, problem.unit_ids)
            frames.append(_scenario_year(project, result, scenario.name, year, problem, since))
    result.notes.extend(off_unit_notes(scenarios, result.units))
    return result, pd.concat(frames, ignore_index=True), scenarios


def _compare_on_grid(project: Project, names: list[str], say: Progress, progress, started):
    """:func:`compare_scenarios` on a raster project: each scenario's treatment polygons burnt
    in one streamed pass (the baseline of every pass is the same estimate); ``started`` is
    called when the first pass starts streaming."""
    inputs = read_inputs(project, say)
    if inputs.strata is not None:
        strata = sorted(inputs.strata["stratum"].unique())
    else:
        strata = read_strata_codes(project.input_paths()["rasters.strata.codes"]).strata
    mode = project.config.pooling.mode
    frames, scenarios, result = [], [], None
    for name in names:
        section, treatments, responses = read_scenario(project, name, strata, inputs.forage_classes)
        first = result is None
        run = estimate(
            project,
            progress,
            inputs=inputs,
            treatments=treatments,
            streaming_started=started if first else None,
        )
        result = run if first else result
        scenario = GridScenario(name, section, treatments, responses)
        say(f"scenario {name!r} on the grid: {section.first_year}–{section.last_year}")
        for year in range(section.first_year, section.last_year + 1):
            problem, since = grid_scenario_year(run.grid, scenario, year, mode)
            frames.append(_scenario_year(project, result, name, year, problem, since))
        treated = treated_pieces(run.grid, scenario)
        scenarios.append(Scenario(name, section, treated, responses, treatments))
    return result, pd.concat(frames, ignore_index=True), scenarios


def _scenario_year(
    project: Project,
    result: Estimate,
    name: str,
    year: int,
    problem: CapacityProblem,
    years_since: np.ndarray,
) -> pd.DataFrame:
    """One year's rows of the scenario table: the problem solved, beside the baseline."""
    days = project.config.project.days
    solution = solve(problem, result.herd, result.target, project, result.other_herds)
    table = pd.DataFrame(
        {
            "unit_id": problem.unit_ids,
            "scenario": name,
            "year": year,
            "years_since_treatment": years_since,
        }
    )
    figures = {
        "ncc": solution.ncc.animal_days,
        "ecc": solution.ecc_animal_days,
        "allowable_use": solution.allowable_use_animal_days,
    }
    for figure, animal_days in figures.items():
        baseline = result.by_unit[f"{figure}_animals"].to_numpy()
        changed = problem.sum_by_unit(animal_days) / days
        table[f"{figure}_animals_baseline"] = baseline
        table[f"{figure}_animals_scenario"] = changed
        table[f"{figure}_change_animals"] = changed - baseline
    table["change_animals"] = table["ncc_change_animals"]
    return table
