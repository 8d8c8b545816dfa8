"""The estimate pipeline, in one straight line.

supply (plots × strata map) → availability (accessible hectares) → pool by
unit → solve (NCC, ECC, allowable use) → assemble the per-unit table.
Writing files is left to :mod:`nutricap.report.tables`.
"""

from __future__ import annotations

from collections.abc import Callable, Iterator, Sequence
from contextlib import contextmanager
from dataclasses import dataclass, field, replace
from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd

from nutricap.errors import InputError, TableError
from nutricap.inputs.counts import TOTAL_LABEL, read_counts, select_series
from nutricap.inputs.project import Project
from nutricap.inputs.tables import read_animal_classes, read_forage_classes, read_plots
from nutricap.landscape.grid.supply import GridResult, grid_problem
from nutricap.landscape.plots import StratumSupply, plot_biomass_matrix, stratum_supply
from nutricap.landscape.strata_raster import read_strata_codes
from nutricap.landscape.vectors import (
    StratumAreas,
    overlay_strata_on_units,
    read_strata,
    read_units,
)
from nutricap.model.estimate import Estimate, Uncertainty
from nutricap.model.grid_scenarios import GridScenario, grid_scenario_year, treated_pieces
from nutricap.model.problem import (
    CapacityProblem,
    Solution,
    build_forage_items,
    build_problem,
    solve_problem,
)
from nutricap.model.requirements import (
    DietTarget,
    diet_limits,
    diet_target,
    herd_requirement,
    require_protein_values,
    requirement_table,
)
from nutricap.model.results import (
    declared_bare_notes,
    ordering_notes,
    supply_notes,
    unit_class_table,
    unit_table,
    unmapped_notes,
    unreachable_notes,
)
from nutricap.model.scenarios import (
    Scenario,
    load_scenario,
    read_scenario,
    scenario_problem,
    treatment_years,
    years_since_latest_treatment,
)
from nutricap.model.sensitivity import input_groups
from nutricap.model.shared_range import (
    OtherHerd,
    load_other_herds,
    share_range,
    shared_range_outputs,
)
from nutricap.model.trend import analyse_series, capacity_comparison, capacity_table
from nutricap.model.uncertainty import (
    add_intervals,
    bootstrap_capacity,
    one_at_a_time,
)
from nutricap.model.use import assess_use, current_animals_from_counts, unmatched_counts_notes
from nutricap.report.bundle import ReportPreload, write_estimate
from nutricap.report.manifest import BackgroundChecksums
from nutricap.report.output_folder import check_output_folder, staged_folder
from nutricap.report.tables import write_csv
from nutricap.science import energetics
from nutricap.science.population import logistic_trajectory

# Matplotlib (the report) takes about half a second to import; it is imported where a report
# or chart is written (SciPy likewise, inside the science functions that need it).

Progress = Callable[[str], None]


@dataclass(frozen=True)
class Inputs:
    """The project's tables and layers, read and checked."""

    forage_classes: pd.DataFrame
    plots: pd.DataFrame
    animals: pd.DataFrame
    units: gpd.GeoDataFrame
    strata: gpd.GeoDataFrame | None  # None when the strata are a raster ([rasters.strata])
    counts: pd.DataFrame | None = None
    requirement_table: pd.DataFrame = field(default_factory=lambda: energetics.NUTRITIONAL_STATES)
    requirement_notes: list[str] = field(default_factory=list)
    other_herds: tuple[OtherHerd, ...] = ()


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
    by_unit, use_by_class = assess_current_use(
        project, inputs.counts, areas, left, by_unit, herd, say
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
        + ordering_notes(by_unit)
        + (grid.notes if grid is not None else []),
        grid=grid,
        other_herds=others,
        shared_range=shared,
    )


def on_grid(project: Project) -> bool:
    """Whether ``project`` is estimated on a raster grid ([rasters] or [availability])."""
    return project.config.rasters is not None or project.config.availability is not None


def read_inputs(project: Project, say: Progress) -> Inputs:
    """Read and check every table and layer of the project."""
    config = project.config
    say("reading tables")
    forage_classes = read_forage_classes(project.source("forage_classes"))
    plots = read_plots(project.source("plots"))
    animals = read_animal_classes(project.source("animal_classes"))
    say("reading layers")
    herd_columns = [
        column
        for herd in config.other_herbivores
        for column in (herd.animals_column, herd.aums_column)
        if column is not None
    ]
    units = read_units(project.source("units"), config.inputs.units_layer, herd_columns)
    strata = None  # a strata raster is read window by window on the grid path
    if not config.strata_as_raster:
        strata = read_strata(project.source("strata"), config.inputs.strata_layer)
    given = config.inputs.counts is not None
    counts = read_counts(project.source("counts")) if given else None
    states, state_notes = requirement_table(project)
    others = load_other_herds(project, units, forage_classes)
    return Inputs(
        forage_classes, plots, animals, units, strata, counts, states, state_notes, others
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
    items = build_forage_items(supply, inputs.forage_classes)
    return areas, supply, build_problem(areas, supply, items, config.pooling.mode)


def _general_classes(forage_classes: pd.DataFrame) -> list[str]:
    return sorted(forage_classes.loc[forage_classes["stratum"] == "", "forage_class"])


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
) -> tuple[pd.DataFrame, pd.DataFrame | None]:
    """Overuse columns when current numbers are known; the table unchanged otherwise."""
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


def solve(
    problem: CapacityProblem,
    herd: energetics.HerdRequirement,
    target: DietTarget,
    project: Project,
    others: tuple[OtherHerd, ...] = (),
) -> Solution:
    """Solve ``problem`` for this herd, target and project settings, after ``others`` (the
    other herbivores) have taken their forage."""
    if others:
        problem = share_range(problem, others).problem
    return solve_problem(
        problem,
        intake_kg_per_day=herd.intake_kg_per_day,
        maintenance_de_kcal_per_day=herd.maintenance_de_kcal_per_day,
        de_min_kcal_per_g=target.de_min_kcal_per_g,
        dp_min_pct=target.dp_min_pct,
        cap_at_allowable_use=project.config.forage_use.cap_at_allowable_use,
        diet=target.composition,
    )


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


def run_estimate(
    project: Project,
    out: Path,
    *,
    overwrite: bool = False,
    report: bool = True,
    progress: Progress | None = None,
    checksums: BackgroundChecksums | None = None,
    pdf_browser: Path | None = None,
    figure_files: bool = False,
) -> Estimate:
    """Estimate ``project`` and write every output into ``out`` atomically.

    ``checksums`` of :meth:`Project.files` for the manifest may be started by the caller
    (as early as possible); otherwise they start here, beside the estimate.
    ``pdf_browser``: also print the report to ``report.pdf`` with this browser;
    ``figure_files``: also write its figures as PNG and SVG files into ``figures/``.
    """
    say = progress or (lambda message: None)
    out = check_output_folder(out, project.files(), overwrite=overwrite)
    checksums = checksums or BackgroundChecksums(project.files())
    with _report_preload(project, report) as started:
        result = estimate(project, progress, streaming_started=started)
    say(f"writing outputs to {out}")
    with staged_folder(out, overwrite=overwrite) as staging:
        write_estimate(
            result,
            project,
            staging,
            report=report,
            checksums=checksums,
            pdf_browser=pdf_browser,
            figure_files=figure_files,
        )
    return result


@contextmanager
def _report_preload(project: Project, report: bool) -> Iterator[Callable[[], None] | None]:
    """What starts the import of the report's modules once the grid's first pass runs (its
    workers leave the GIL free most of the time); None for a run without report or grid."""
    if not (report and on_grid(project)):
        yield None
        return
    preload = ReportPreload()
    try:
        yield preload.start
    finally:
        preload.wait()


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
    if on_grid(project):
        return _compare_on_grid(project, names, say, progress, streaming_started)
    result = estimate(project, progress)
    scenarios = [load_scenario(project, name, result.areas, result.supply.strata) for name in names]
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
        section, treatments, responses = read_scenario(project, name, strata)
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


def run_compare(
    project: Project,
    scenario_name: str | Sequence[str],
    out: Path,
    *,
    overwrite: bool = False,
    report: bool = True,
    progress: Progress | None = None,
    checksums: BackgroundChecksums | None = None,
    pdf_browser: Path | None = None,
    figure_files: bool = False,
) -> tuple[Estimate, pd.DataFrame]:
    """Estimate, run the scenario, and write everything (plus the scenario table and chart).

    ``checksums``, ``pdf_browser`` and ``figure_files`` as in :func:`run_estimate`.
    """
    say = progress or (lambda message: None)
    out = check_output_folder(out, project.files(), overwrite=overwrite)
    checksums = checksums or BackgroundChecksums(project.files())
    with _report_preload(project, report) as started:
        result, table, scenarios = compare_scenarios(
            project, scenario_name, progress, streaming_started=started
        )
    say(f"writing outputs to {out}")
    with staged_folder(out, overwrite=overwrite) as staging:
        write_estimate(
            result,
            project,
            staging,
            report=report,
            scenario_table=table,
            scenarios=scenarios,
            checksums=checksums,
            pdf_browser=pdf_browser,
            figure_files=figure_files,
        )
        write_csv(table, staging / "scenario_by_unit.csv")
        from nutricap.report.figures import figure_png, scenario_figure

        chart = figure_png(
            scenario_figure(table, per_unit=True, treatment_years=treatment_years(scenarios))
        )
        (staging / "scenario_by_unit.png").write_bytes(chart)
    return result, table
