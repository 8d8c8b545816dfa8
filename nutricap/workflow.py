"""The estimate pipeline, in one straight line.

supply (plots × strata map) → availability (accessible hectares) → pool by
unit → solve (NCC, ECC, allowable use) → assemble the per-unit table.
Writing files is left to :mod:`nutricap.report.tables`.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import asdict, dataclass, field, replace
from pathlib import Path
from typing import TYPE_CHECKING

import geopandas as gpd
import numpy as np
import pandas as pd

from nutricap.assess import assess_use, current_animals_from_counts
from nutricap.errors import InputError, ProjectFileError, TableError
from nutricap.inputs import read_animal_classes, read_forage_classes, read_plots
from nutricap.landscape.density import piece_density, write_piece_density
from nutricap.landscape.grid_supply import GridResult, grid_outputs_alongside, grid_problem
from nutricap.landscape.plots import StratumSupply, plot_biomass_matrix, stratum_supply
from nutricap.landscape.vectors import (
    StratumAreas,
    overlay_strata_on_units,
    read_strata,
    read_units,
)
from nutricap.manifest import build_manifest
from nutricap.outputs import check_output_folder, staged_folder
from nutricap.problem import (
    CapacityProblem,
    Solution,
    build_forage_items,
    build_problem,
    solve_problem,
)
from nutricap.project import Project
from nutricap.report.tables import markdown_table, write_csv, write_geopackage, write_json
from nutricap.scenarios import (
    Scenario,
    load_scenario,
    scenario_problem,
    years_since_latest_treatment,
)
from nutricap.science import energetics
from nutricap.science.forage_quality import mixed_diet_quality
from nutricap.sensitivity import input_groups
from nutricap.tables import spreadsheet_row
from nutricap.uncertainty import (
    BootstrapResult,
    add_intervals,
    bootstrap_capacity,
    one_at_a_time,
)

if TYPE_CHECKING:
    from nutricap.report.html import ReportExtras

# Matplotlib (the report) and scipy.stats (the trend) take about a second to import; they are
# imported in the functions that need them, so a run that needs neither does not pay for them.

Progress = Callable[[str], None]
HA_PER_KM2 = 100.0


@dataclass(frozen=True)
class DietTarget:
    """The minimum diet quality of the target nutritional state.

    Attributes
    ----------
    de_min_kcal_per_g : float
        Minimum digestible energy of the diet [kcal/g DM].
    dp_min_pct : float or None
        Minimum digestible protein of the diet [% DM], None when protein is not required.
    derivation : str
        How the thresholds were obtained, in words (for the report and manifest).
    """

    de_min_kcal_per_g: float
    dp_min_pct: float | None
    derivation: str


@dataclass(frozen=True)
class Estimate:
    """Everything the estimate computed; reporting only formats it."""

    by_unit: pd.DataFrame
    use_by_class: pd.DataFrame | None
    by_unit_class: pd.DataFrame
    units: gpd.GeoDataFrame
    supply: StratumSupply
    areas: StratumAreas
    problem: CapacityProblem
    solution: Solution
    herd: energetics.HerdRequirement
    target: DietTarget
    season_days: float
    uncertainty: Uncertainty = field(default_factory=lambda: Uncertainty())
    trend: dict | None = None
    notes: list[str] = field(default_factory=list)
    grid: GridResult | None = None


@dataclass(frozen=True)
class Inputs:
    """The project's tables and layers, read and checked."""

    forage_classes: pd.DataFrame
    plots: pd.DataFrame
    animals: pd.DataFrame
    units: gpd.GeoDataFrame
    strata: gpd.GeoDataFrame


def estimate(project: Project, progress: Progress | None = None) -> Estimate:
    """Run the whole estimate for ``project`` and return the results (nothing is written).

    supply → availability → pool by unit → solve → uncertainty → current use.
    """
    say = progress or (lambda message: None)
    days = project.config.project.days
    inputs = read_inputs(project, say)
    grid = None
    if project.config.rasters is not None or project.config.availability is not None:
        grid = grid_problem(
            project,
            inputs.units,
            inputs.strata,
            inputs.plots,
            inputs.forage_classes,
            project.config.pooling.mode,
            progress,
        )
        areas, supply, problem = grid.areas, grid.supply, grid.problem
    else:
        areas, supply, problem = build_supply(project, inputs, say)
    say("computing the herd's requirements")
    herd = herd_requirement(inputs.animals, project)
    target = diet_target(inputs.animals, project)
    if target.dp_min_pct is not None:
        _require_protein_values(inputs.forage_classes, project)
    say("solving capacity per unit")
    solution = solve(problem, herd, target, project)
    by_unit = unit_table(problem, solution, areas, herd, days)
    uncertainty = assess_uncertainty(project, inputs, supply, problem, herd, target, say)
    if uncertainty.bootstrap is not None:
        by_unit = add_intervals(by_unit, uncertainty.bootstrap, days)
    by_unit, use_by_class = assess_current_use(project, areas, problem, by_unit, herd, say)
    trend = counts_trend(project, say)
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
        notes=_supply_notes(supply, inputs.plots)
        + _unreachable_notes(by_unit)
        + (grid.notes if grid is not None else []),
        grid=grid,
    )


def read_inputs(project: Project, say: Progress) -> Inputs:
    """Read and check every table and layer of the project."""
    config = project.config
    say("reading tables")
    forage_classes = read_forage_classes(project.input_path("forage_classes"))
    plots = read_plots(project.input_path("plots"))
    animals = read_animal_classes(project.input_path("animal_classes"))
    say("reading layers")
    units = read_units(project.input_path("units"), config.inputs.units_layer)
    strata = read_strata(project.input_path("strata"), config.inputs.strata_layer)
    return Inputs(forage_classes, plots, animals, units, strata)


def build_supply(
    project: Project, inputs: Inputs, say: Progress
) -> tuple[StratumAreas, StratumSupply, CapacityProblem]:
    """Overlay strata on units, summarise plots by stratum, pool into the capacity problem."""
    config = project.config
    say("overlaying strata on units")
    areas = overlay_strata_on_units(
        inputs.units,
        inputs.strata,
        units_path=project.input_path("units"),
        strata_path=project.input_path("strata"),
    )
    _require_units_on_map(areas, project)
    say("summarising clip plots by stratum")
    supply = stratum_supply(
        inputs.plots,
        _general_classes(inputs.forage_classes),
        sorted(inputs.strata["stratum"].unique()),
        plots_path=project.input_path("plots"),
        strata_path=project.input_path("strata"),
        strata_without_forage=config.supply.strata_without_forage,
    )
    items = build_forage_items(supply, inputs.forage_classes)
    return areas, supply, build_problem(areas, supply, items, config.pooling.mode)


def _general_classes(forage_classes: pd.DataFrame) -> list[str]:
    return sorted(forage_classes.loc[forage_classes["stratum"] == "", "forage_class"])


@dataclass(frozen=True)
class Uncertainty:
    """Bootstrap replicates (None when not asked for) and the sensitivity table."""

    bootstrap: BootstrapResult | None = None
    sensitivity: pd.DataFrame | None = None
    change: float = 0.0


def assess_uncertainty(
    project: Project,
    inputs: Inputs,
    supply: StratumSupply,
    problem: CapacityProblem,
    herd: energetics.HerdRequirement,
    target: DietTarget,
    say: Progress,
) -> Uncertainty:
    """Stratified bootstrap over plots and the one-at-a-time sensitivity of total NCC."""
    settings = project.config.uncertainty
    bootstrap = None
    if settings.bootstrap_replicates > 0 and problem.row_stratum_ha is not None:
        say(f"bootstrap over plots: {settings.bootstrap_replicates} replicates")
        wide = plot_biomass_matrix(inputs.plots, supply.classes)
        bootstrap = bootstrap_capacity(
            problem,
            wide[supply.classes].to_numpy(),
            pd.Index(supply.strata).get_indexer(wide["stratum"]),
            lambda rows: solve(rows, herd, target, project),
            replicates=settings.bootstrap_replicates,
            level=settings.interval_level,
            seed=settings.seed,
        )
    sensitivity = None
    if settings.sensitivity_change > 0:
        say(f"sensitivity of total NCC to ±{settings.sensitivity_change:.0%} changes")
        sensitivity = sensitivity_table(project, inputs.animals, problem, herd, target)
    return Uncertainty(bootstrap, sensitivity, settings.sensitivity_change)


def sensitivity_table(
    project: Project,
    animals: pd.DataFrame,
    problem: CapacityProblem,
    herd: energetics.HerdRequirement,
    target: DietTarget,
) -> pd.DataFrame:
    """Tornado table of total NCC [animals] for ± the configured change of each input group."""
    days = project.config.project.days

    def total_for(problem=problem, herd=herd, de_factor=1.0, dp_factor=1.0) -> float:
        moved = replace(
            target,
            de_min_kcal_per_g=target.de_min_kcal_per_g * de_factor,
            dp_min_pct=None if target.dp_min_pct is None else target.dp_min_pct * dp_factor,
        )
        return float(solve(problem, herd, moved, project).ncc.animal_days.sum() / days)

    def herd_for_mass(factor: float) -> energetics.HerdRequirement:
        heavier = animals.assign(body_mass_kg=animals["body_mass_kg"] * factor)
        return herd_requirement(heavier, project)

    groups = input_groups(problem, total_for, herd_for_mass, protein=target.dp_min_pct is not None)
    change = project.config.uncertainty.sensitivity_change
    return one_at_a_time(total_for(), groups, change)


def assess_current_use(
    project: Project,
    areas: StratumAreas,
    problem: CapacityProblem,
    by_unit: pd.DataFrame,
    herd: energetics.HerdRequirement,
    say: Progress,
) -> tuple[pd.DataFrame, pd.DataFrame | None]:
    """Overuse columns when current numbers are known; the table unchanged otherwise."""
    current = current_animals(project, areas)
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


TREND_LEVEL = 0.95
"""Confidence level of the trend figures shown beside the capacity (as `nutricap trend`)."""


def counts_trend(project: Project, say: Progress) -> dict | None:
    """Trend figures of the project's counts (the total over units), with the fitted curve."""
    from nutricap.science.population import logistic_trajectory
    from nutricap.trend import TOTAL_LABEL, analyse_series, read_counts, select_series

    path = project.input_path("counts")
    if path is None:
        return None
    say("population trend of the counts")
    series = select_series(read_counts(path), path, None)
    name = TOTAL_LABEL if TOTAL_LABEL in series else next(iter(series))
    frame = series[name]
    figures = analyse_series(frame, TREND_LEVEL)
    figures["series"] = name
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


def current_animals(project: Project, areas: StratumAreas) -> np.ndarray | None:
    """Current animals per unit: the units layer's column, else the latest count, else None."""
    if "current_animals" in areas.units.columns:
        return areas.units["current_animals"].to_numpy(dtype=float)
    from nutricap.trend import read_counts

    counts_path = project.input_path("counts")
    if counts_path is None:
        return None
    latest = current_animals_from_counts(
        read_counts(counts_path), areas.units["unit_id"].to_numpy()
    )
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
) -> Solution:
    """Solve ``problem`` for this herd, target and project settings."""
    return solve_problem(
        problem,
        intake_kg_per_day=herd.intake_kg_per_day,
        maintenance_de_kcal_per_day=herd.maintenance_de_kcal_per_day,
        de_min_kcal_per_g=target.de_min_kcal_per_g,
        dp_min_pct=target.dp_min_pct,
        cap_at_allowable_use=project.config.forage_use.cap_at_allowable_use,
    )


def _require_units_on_map(areas: StratumAreas, project: Project) -> None:
    mapped = set(areas.by_unit_stratum["unit_id"])
    unmapped = [unit for unit in areas.units["unit_id"] if unit not in mapped]
    if unmapped:
        raise InputError(
            f"unit {unmapped[0]!r} does not overlap any vegetation stratum",
            source=project.input_path("units"),
            location="attribute 'unit_id'",
            expected="every unit at least partly covered by the strata layer "
            f"({project.input_path('strata')})",
            found=f"{len(unmapped)} unit(s) outside the map: " + ", ".join(map(repr, unmapped)),
        )


def _check_states(animals: pd.DataFrame, project: Project) -> None:
    season = project.config.project.season
    for index, state in animals["state"].items():
        try:
            energetics.state_parameters(state, season)
        except InputError as exc:
            raise TableError(
                exc.message,
                source=project.input_path("animal_classes"),
                location=f"row {spreadsheet_row(index)}, column 'state'",
                expected=exc.expected,
                found=repr(state),
            ) from None


def herd_requirement(animals: pd.DataFrame, project: Project) -> energetics.HerdRequirement:
    """The average animal of the herd; a class's ``intake_kg_per_day`` overrides the model."""
    _check_states(animals, project)
    season = project.config.project.season
    mass = animals["body_mass_kg"].to_numpy()
    herd = energetics.herd_requirement(
        mass, animals["share"].to_numpy(), animals["state"].tolist(), season
    )
    override = animals["intake_kg_per_day"].to_numpy(dtype=float)
    if np.isnan(override).all():
        return herd
    modelled = np.array(
        [
            energetics.max_dry_matter_intake_kg_per_day(m, s, season)
            for m, s in zip(mass, animals["state"])
        ]
    )
    intake = np.where(np.isnan(override), modelled, override)
    shares = animals["share"].to_numpy() / animals["share"].sum()
    return energetics.HerdRequirement(
        de_kcal_per_day=herd.de_kcal_per_day,
        maintenance_de_kcal_per_day=herd.maintenance_de_kcal_per_day,
        intake_kg_per_day=float(np.sum(shares * intake)),
        dp_g_per_day=herd.dp_g_per_day,
        animal_unit_equivalent=herd.animal_unit_equivalent,
    )


def diet_target(animals: pd.DataFrame, project: Project) -> DietTarget:
    """Minimum diet DE (and DP) of the target state: given, or requirement ÷ intake.

    Hobbs & Swift (1985): the diet must supply the daily requirement within
    the daily dry-matter intake, so its minimum quality is requirement ÷ intake.
    """
    target = project.config.target
    given_de, given_dp = target.diet_de_min_kcal_per_g, target.diet_dp_min_pct
    derive_dp = target.protein and given_dp is None
    if given_de is not None and not derive_dp:
        return DietTarget(given_de, given_dp, "diet thresholds given in the project file")
    if target.animal_class is None or target.state is None:
        raise ProjectFileError(
            "protein = true needs animal_class and state, or an explicit diet_dp_min_pct",
            source=project.path,
            location="section [target]",
        )
    row = _target_class(animals, project)
    season = project.config.project.season
    mass = float(row["body_mass_kg"])
    intake = float(row["intake_kg_per_day"])
    if np.isnan(intake):
        intake = float(energetics.max_dry_matter_intake_kg_per_day(mass, target.state, season))
    de_requirement = float(energetics.daily_de_requirement_kcal_per_day(mass, target.state, season))
    de_min = given_de or float(energetics.required_diet_de_kcal_per_g(de_requirement, intake))
    dp_min = given_dp
    if derive_dp:
        dp_requirement = energetics.daily_dp_requirement_g_per_day(mass, target.state, season)
        dp_min = float(energetics.required_diet_dp_pct(dp_requirement, intake))
    derivation = (
        f"{target.animal_class} ({mass:g} kg) in state {target.state!r}, season {season!r}: "
        f"DE requirement {de_requirement:,.0f} kcal/day over intake {intake:.3g} kg DM/day"
    )
    return DietTarget(de_min, dp_min, derivation)


def _target_class(animals: pd.DataFrame, project: Project) -> pd.Series:
    name = project.config.target.animal_class
    matches = animals[animals["animal_class"] == name]
    if matches.empty:
        raise ProjectFileError(
            f"target animal class {name!r} is not in the animal-class table",
            source=project.path,
            location="key 'target.animal_class'",
            expected="one of " + ", ".join(map(repr, animals["animal_class"])),
            found=repr(name),
        )
    return matches.iloc[0]


def unit_table(
    problem: CapacityProblem,
    solution: Solution,
    areas: StratumAreas,
    herd: energetics.HerdRequirement,
    season_days: float,
) -> pd.DataFrame:
    """The per-unit capacity table (the contract columns first)."""
    ncc = solution.ncc
    unit_ids = problem.unit_ids
    area_ha = areas.units["area_ha"].to_numpy()
    stratum_ha = areas.by_unit_stratum.groupby("unit_id")[["area_ha", "accessible_ha"]].sum()
    row_forage_kg = problem.available_kg.sum(axis=1)
    ncc_days = problem.sum_by_unit(ncc.animal_days)
    ecc_days = problem.sum_by_unit(solution.ecc_animal_days)
    eaten = problem.sum_by_unit(ncc.eaten_kg)
    deciding = _deciding_rows(row_forage_kg, problem.row_unit, unit_ids.size)
    marginal = ncc.marginal_item[deciding]
    table = pd.DataFrame(
        {
            "unit_id": unit_ids,
            "area_ha": area_ha,
            "available_forage_kg": problem.sum_by_unit(row_forage_kg),
            "ncc_animal_days": ncc_days,
            "ncc_animals": ncc_days / season_days,
            "ecc_animal_days": ecc_days,
            "ecc_animals": ecc_days / season_days,
            "allowable_use_animals": problem.sum_by_unit(solution.allowable_use_animal_days)
            / season_days,
            "limiting_factor": ncc.limiting_factor[deciding],
            "ncc_per_km2": ncc_days / season_days / (area_ha / HA_PER_KM2),
            "mapped_ha": stratum_ha["area_ha"].reindex(unit_ids).to_numpy(),
            "accessible_ha": stratum_ha["accessible_ha"].reindex(unit_ids).to_numpy(),
            "marginal_forage_class": np.where(
                marginal >= 0, problem.items.forage_class[np.maximum(marginal, 0)], ""
            ),
            "diet_de_kcal_per_g": mixed_diet_quality(eaten, problem.items.de_kcal_per_g),
            "diet_dp_pct": mixed_diet_quality(eaten, problem.items.dp_pct),
            "ecc_per_km2": ecc_days / season_days / (area_ha / HA_PER_KM2),
            "ncc_aum": energetics.animal_unit_months(ncc_days, herd.animal_unit_equivalent),
        }
    )
    return table


def _deciding_rows(row_forage_kg: np.ndarray, row_unit: np.ndarray, n_units: int) -> np.ndarray:
    """For each unit, the problem row holding most of its forage (the row itself in unit mode)."""
    order = np.lexsort((-row_forage_kg, row_unit))
    first = np.unique(row_unit[order], return_index=True)[1]
    deciding = np.zeros(n_units, dtype=int)
    deciding[row_unit[order][first]] = order[first]
    return deciding


def unit_class_table(problem: CapacityProblem, solution: Solution) -> pd.DataFrame:
    """Available and NCC-eaten forage per unit and forage class [kg]."""
    n_items = problem.items.size
    frame = pd.DataFrame(
        {
            "unit_id": np.repeat(problem.unit_ids, n_items),
            "forage_class": np.tile(problem.items.forage_class, problem.unit_ids.size),
            "available_kg": problem.sum_by_unit(problem.available_kg).ravel(),
            "ncc_eaten_kg": problem.sum_by_unit(solution.ncc.eaten_kg).ravel(),
        }
    )
    return frame.groupby(["unit_id", "forage_class"], as_index=False, sort=False).sum()


def _require_protein_values(forage_classes: pd.DataFrame, project: Project) -> None:
    """With a protein target, every forage class needs its crude protein."""
    blank = forage_classes["cp_pct"].isna().to_numpy()
    if blank.any():
        index = int(np.flatnonzero(blank)[0])
        raise TableError(
            "crude protein missing while the target requires digestible protein",
            source=project.input_path("forage_classes"),
            location=f"row {spreadsheet_row(index)}, column 'cp_pct'",
            expected="crude protein in percent of dry matter (or protein = false in [target])",
            found="an empty cell",
        )


def _unreachable_notes(by_unit: pd.DataFrame) -> list[str]:
    """Units whose NCC is zero because no mix of their forage reaches the target diet."""
    unreachable = by_unit.loc[by_unit["limiting_factor"] == "intake", "unit_id"].tolist()
    if not unreachable:
        return []
    return [
        "no mix of the available forage reaches the target diet in unit(s) "
        + ", ".join(map(str, unreachable))
        + ": their NCC is 0 (limiting factor 'intake')"
    ]


def _supply_notes(supply: StratumSupply, plots: pd.DataFrame) -> list[str]:
    """Things the user should know that are not errors."""
    notes = []
    never = sorted(set(supply.classes) - set(plots["forage_class"]))
    if never:
        notes.append(
            "forage classes in the forage-class table never recorded on a plot (supply 0): "
            + ", ".join(never)
        )
    single = [s for s, n in zip(supply.strata, supply.n_plots) if n == 1]
    if single:
        notes.append("strata with a single plot (no standard error): " + ", ".join(single))
    return notes


def run_estimate(
    project: Project,
    out: Path,
    *,
    overwrite: bool = False,
    report: bool = True,
    progress: Progress | None = None,
) -> Estimate:
    """Estimate ``project`` and write every output into ``out`` atomically."""
    say = progress or (lambda message: None)
    out = check_output_folder(
        out, [project.path, *project.input_paths().values()], overwrite=overwrite
    )
    result = estimate(project, progress)
    say(f"writing outputs to {out}")
    with staged_folder(out) as staging:
        write_estimate(result, project, staging, report=report)
    return result


def write_estimate(
    result: Estimate,
    project: Project,
    folder: Path,
    *,
    report: bool = True,
    scenario_table: pd.DataFrame | None = None,
) -> None:
    """Write the tables, the manifest and (unless ``report=False``) the HTML report."""
    config = project.config
    totals = totals_table(result)
    write_csv(result.by_unit, folder / "capacity_by_unit.csv")
    write_csv(totals, folder / "capacity_totals.csv")
    write_csv(result.by_unit_class, folder / "capacity_by_unit_class.csv")
    write_csv(result.supply.table(), folder / "supply_by_stratum.csv")
    if result.use_by_class is not None:
        write_csv(result.use_by_class, folder / "use_by_unit_class.csv")
    if result.trend is not None:
        write_json(result.trend, folder / "trend.json")
    if result.uncertainty.sensitivity is not None:
        write_csv(result.uncertainty.sensitivity, folder / "sensitivity.csv")
    write_geopackage(result.by_unit, result.units, folder / "capacity_by_unit.gpkg")
    eaten_kg, intake = result.solution.ncc.eaten_kg, result.herd.intake_kg_per_day
    if result.grid is None and result.areas.pieces is not None:
        density = piece_density(result.problem, eaten_kg, result.areas.pieces, intake)
        write_piece_density(
            result.areas.pieces, density, result.units, folder / "capacity_density.tif"
        )
    # Raster outputs (capacity_density.tif: a second streamed pass) are written alongside.
    with grid_outputs_alongside(result.grid, result.problem, eaten_kg, intake, folder):
        context = [
            f"{config.project.species}, {config.project.name}; "
            f"season of {result.season_days:g} days.",
            f"Target diet: {target_words(result.target)}.",
            *[_total_words(row) for row in totals.itertuples()],
        ]
        markdown = markdown_table(result.by_unit, title="Capacity by unit", context_lines=context)
        (folder / "capacity_by_unit.md").write_text(markdown, encoding="utf-8")
        manifest = build_manifest(
            command="estimate",
            project_path=project.path,
            input_paths=project.input_paths(),
            settings=config.model_dump(mode="json"),
            derived=_derived_values(result),
        )
        write_json(manifest, folder / "run.json")
        if report:
            from nutricap.report.html import write_report

            write_report(
                folder / "report.html",
                result,
                project=project,
                manifest=manifest,
                extras=report_extras(result, project, scenario_table),
            )


def report_extras(
    result: Estimate, project: Project, scenario_table: pd.DataFrame | None
) -> ReportExtras:
    """What the report shows beside the estimate: sensitivity, intervals, scenario."""
    uncertainty = result.uncertainty
    from nutricap.report.html import ReportExtras

    return ReportExtras(
        scenario_table=scenario_table,
        sensitivity_table=uncertainty.sensitivity,
        interval_level=uncertainty.bootstrap.level if uncertainty.bootstrap else None,
        trend=result.trend,
        sensitivity_change=uncertainty.change or None,
    )


def target_words(target: DietTarget) -> str:
    """The target diet in words: thresholds and how they were obtained."""
    protein = f", DP ≥ {target.dp_min_pct:.2f} %" if target.dp_min_pct is not None else ""
    return f"DE ≥ {target.de_min_kcal_per_g:.3f} kcal/g DM{protein} ({target.derivation})"


def totals_table(result: Estimate) -> pd.DataFrame:
    """Total NCC, ECC and allowable-use capacity over all units [animals], with intervals."""
    table = result.by_unit
    rows = pd.DataFrame(
        {
            "figure": ["ncc", "ecc", "allowable_use"],
            "total_animals": [
                table["ncc_animals"].sum(),
                table["ecc_animals"].sum(),
                table["allowable_use_animals"].sum(),
            ],
        }
    )
    bootstrap = result.uncertainty.bootstrap
    if bootstrap is not None:
        intervals = bootstrap.total_intervals(result.season_days)
        rows["total_animals_lo"] = [intervals[name][0] for name in rows["figure"]]
        rows["total_animals_hi"] = [intervals[name][1] for name in rows["figure"]]
        rows["interval_level"] = bootstrap.level
    return rows


def _total_words(row) -> str:
    names = {"ncc": "NCC", "ecc": "ECC", "allowable_use": "Capacity at allowable use"}
    words = f"{names[row.figure]}, all units: {row.total_animals:,.0f} animals"
    if hasattr(row, "total_animals_lo"):
        words += (
            f" ({row.interval_level:.0%} bootstrap interval "
            f"{row.total_animals_lo:,.0f}–{row.total_animals_hi:,.0f})"
        )
    return words + "."


def _derived_values(result: Estimate) -> dict:
    return {
        "diet_de_min_kcal_per_g": result.target.de_min_kcal_per_g,
        "diet_dp_min_pct": result.target.dp_min_pct,
        "target_derivation": result.target.derivation,
        "herd": asdict(result.herd),
        "season_days": result.season_days,
        "area_crs": result.areas.area_crs.to_string(),
        "area_crs_reason": result.areas.area_crs_reason,
        "notes": result.notes,
        **({"raster_path": result.grid.describe()} if result.grid is not None else {}),
    }


def compare(project: Project, scenario_name: str, progress: Progress | None = None):
    """Baseline estimate and a treatment scenario over its years.

    Returns ``(estimate, scenario_table)``; the table has ``unit_id, scenario, year,
    years_since_treatment, ncc_animals_baseline, ncc_animals_scenario, change_animals``
    and the same pair for ECC and allowable-use capacity.
    """
    say = progress or (lambda message: None)
    result = estimate(project, progress)
    if result.areas.pieces is None:
        raise InputError(
            "treatment scenarios need the strata layer (vector supply)",
            source=project.path,
            location=f"key 'scenarios.{scenario_name}'",
        )
    scenario = load_scenario(project, scenario_name, result.areas, result.supply.strata)
    section = scenario.section
    say(f"scenario {scenario_name!r}: {section.first_year}–{section.last_year}")
    years = range(section.first_year, section.last_year + 1)
    frames = [_scenario_year(project, result, scenario, year) for year in years]
    return result, pd.concat(frames, ignore_index=True)


def _scenario_year(
    project: Project, result: Estimate, scenario: Scenario, year: int
) -> pd.DataFrame:
    days = project.config.project.days
    problem, pieces = scenario_problem(
        scenario,
        result.areas,
        result.problem.items.subset(result.problem.items.variant == ""),
        year,
        project.config.pooling.mode,
    )
    solution = solve(problem, result.herd, result.target, project)
    table = pd.DataFrame(
        {
            "unit_id": problem.unit_ids,
            "scenario": scenario.name,
            "year": year,
            "years_since_treatment": years_since_latest_treatment(pieces, problem.unit_ids),
        }
    )
    figures = {
        "ncc": solution.ncc.animal_days,
        "ecc": solution.ecc_animal_days,
        "allowable_use": solution.allowable_use_animal_days,
    }
    for name, animal_days in figures.items():
        baseline = result.by_unit[f"{name}_animals"].to_numpy()
        changed = problem.sum_by_unit(animal_days) / days
        table[f"{name}_animals_baseline"] = baseline
        table[f"{name}_animals_scenario"] = changed
        table[f"{name}_change_animals"] = changed - baseline
    table["change_animals"] = table["ncc_change_animals"]
    return table


def run_compare(
    project: Project,
    scenario_name: str,
    out: Path,
    *,
    overwrite: bool = False,
    report: bool = True,
    progress: Progress | None = None,
) -> tuple[Estimate, pd.DataFrame]:
    """Estimate, run the scenario, and write everything (plus the scenario table and chart)."""
    say = progress or (lambda message: None)
    out = check_output_folder(
        out, [project.path, *project.input_paths().values()], overwrite=overwrite
    )
    result, table = compare(project, scenario_name, progress)
    say(f"writing outputs to {out}")
    with staged_folder(out) as staging:
        write_estimate(result, project, staging, report=report, scenario_table=table)
        write_csv(table, staging / "scenario_by_unit.csv")
        from nutricap.report.figures import figure_png, scenario_figure

        chart = figure_png(scenario_figure(table, per_unit=True))
        (staging / "scenario_by_unit.png").write_bytes(chart)
    return result, table
