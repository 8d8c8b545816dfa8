"""The herd's requirements and the target diet of a project.

The target diet is the minimum diet quality at which the target animal class,
in the target state, meets its requirement within its intake (Hobbs & Swift
1985): requirement ÷ intake, unless the project file gives the thresholds.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from nutricap.errors import InputError, ProjectFileError, TableError
from nutricap.inputs.columns import Column, read_csv_table, spreadsheet_row
from nutricap.inputs.project import Project
from nutricap.model.problem import DietGroup, DietLimits
from nutricap.science import energetics

#: Columns of a user's own requirement table (``[inputs] nutritional_states``), as in
#: ``nutricap/data/nutritional_states.csv``; ``scope`` and ``description`` are optional.
STATE_TABLE_COLUMNS = [
    Column("state", "text", meaning="nutritional state, e.g. maintenance, lactation"),
    Column("season", "text", meaning="any, winter, spring, summer, autumn (or fall)"),
    Column("bmr_multiplier", above=0.0, maximum=20.0, meaning="ME as a multiple of 70 W^0.75"),
    Column("intake_g_per_kg075_per_day", above=0.0, maximum=500.0, meaning="g DM/kg^0.75/day"),
    Column("dp_g_per_kg075_per_day", minimum=0.0, maximum=100.0, meaning="g DP/kg^0.75/day"),
    Column.optional("scope", "text"),
    Column.optional("description", "text"),
    Column("source", "text", meaning="where each row's values come from"),
]


def requirement_table(project: Project) -> tuple[pd.DataFrame, list[str]]:
    """The nutritional-state table of the run, and notes on it.

    The packaged cervid default, or the user's own table of ``[inputs] nutritional_states``,
    read and checked like every other table. A user's table under which NCC could exceed ECC
    (a state asking less than maintenance of its season) is used as given, with a note.
    """
    if project.config.inputs.nutritional_states is None:
        return energetics.NUTRITIONAL_STATES, []
    path = project.source("nutritional_states")
    frame = read_csv_table(path, STATE_TABLE_COLUMNS, what="nutritional-state table")
    for optional in ("scope", "description"):
        if optional not in frame.columns:
            frame[optional] = ""
    table = energetics.check_nutritional_states(frame, source=path)
    problems = energetics.capacity_ordering_problems(table)
    notes = [f"{path.name}: {problem}: NCC can exceed ECC" for problem in problems]
    return table, notes


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
    composition : DietLimits or None
        The diet-composition limits of ``[diet]`` (see :func:`diet_limits`).
    """

    de_min_kcal_per_g: float
    dp_min_pct: float | None
    derivation: str
    composition: DietLimits | None = None


DIET_DE_CEILING_KCAL_PER_G = 5.0
"""The richest diet any forage gives [kcal DE/g DM]: gross energy of plant dry matter is about
4.4 kcal/g (from memory), and the project file's ``diet_de_min_kcal_per_g`` has the same bound."""
DIET_DP_CEILING_PCT = 40.0
"""The richest protein diet any forage gives [% DP of DM] (common practice: browse and forbs
stay well below it); the bound of the project file's ``diet_dp_min_pct``."""


def _check_states(animals: pd.DataFrame, project: Project, table: pd.DataFrame) -> None:
    season = project.config.project.season
    for index, state in animals["state"].items():
        try:
            energetics.state_parameters(state, season, table=table)
        except InputError as exc:
            raise TableError(
                exc.message,
                source=project.source("animal_classes"),
                location=f"row {spreadsheet_row(index)}, column 'state'",
                expected=exc.expected,
                found=repr(state),
            ) from None


def herd_requirement(
    animals: pd.DataFrame, project: Project, table: pd.DataFrame
) -> energetics.HerdRequirement:
    """The average animal of the herd; a class's ``intake_kg_per_day`` overrides the model.

    ``table`` is the run's nutritional-state table (:func:`requirement_table`).
    """
    _check_states(animals, project, table)
    season = project.config.project.season
    for index, row in animals[animals["intake_kg_per_day"].notna()].iterrows():
        requirement = energetics.daily_de_requirement_kcal_per_day(
            row["body_mass_kg"], row["state"], season, table=table
        )
        de_min = float(
            energetics.required_diet_de_kcal_per_g(requirement, row["intake_kg_per_day"])
        )
        _refuse_impossible_diet(animals, index, row["state"], de_min, None, project)
    mass = animals["body_mass_kg"].to_numpy()
    herd = energetics.herd_requirement(
        mass, animals["share"].to_numpy(), animals["state"].tolist(), season, table=table
    )
    override = animals["intake_kg_per_day"].to_numpy(dtype=float)
    if np.isnan(override).all():
        return herd
    modelled = np.array(
        [
            energetics.max_dry_matter_intake_kg_per_day(m, s, season, table=table)
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


def diet_target(animals: pd.DataFrame, project: Project, table: pd.DataFrame) -> DietTarget:
    """Minimum diet DE (and DP) of the target state: given, or requirement ÷ intake.

    Hobbs & Swift (1985): the diet must supply the daily requirement within
    the daily dry-matter intake, so its minimum quality is requirement ÷ intake.
    The requirement and intake are those of the target animal class in the target
    state (not of the herd's average animal), so that the diet keeps the target
    animals in the chosen condition; ``table`` is the run's nutritional-state table.
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
    _check_target_state(project, table)
    mass = float(row["body_mass_kg"])
    intake = float(row["intake_kg_per_day"])
    if np.isnan(intake):
        intake = float(
            energetics.max_dry_matter_intake_kg_per_day(mass, target.state, season, table=table)
        )
    de_requirement = float(
        energetics.daily_de_requirement_kcal_per_day(mass, target.state, season, table=table)
    )
    de_min = given_de or float(energetics.required_diet_de_kcal_per_g(de_requirement, intake))
    dp_min = given_dp
    if derive_dp:
        dp_requirement = energetics.daily_dp_requirement_g_per_day(
            mass, target.state, season, table=table
        )
        dp_min = float(energetics.required_diet_dp_pct(dp_requirement, intake))
    _refuse_impossible_diet(
        animals, row.name, target.state, None if given_de else de_min, dp_min, project
    )
    derivation = (
        f"{target.animal_class} ({mass:g} kg) in state {target.state!r}, season {season!r}: "
        f"DE requirement {de_requirement:,.0f} kcal/day over intake {intake:.3g} kg DM/day"
    )
    return DietTarget(de_min, dp_min, derivation)


def _check_target_state(project: Project, table: pd.DataFrame) -> None:
    """The target state is one of the nutritional-state table's (else the key is named)."""
    target = project.config.target
    try:
        energetics.state_parameters(target.state, project.config.project.season, table=table)
    except InputError as exc:
        raise ProjectFileError(
            exc.message,
            source=project.path,
            location="key 'target.state'",
            expected=exc.expected,
            found=repr(target.state),
        ) from None


def _refuse_impossible_diet(
    animals: pd.DataFrame,
    index: int,
    state: str,
    de_min_kcal_per_g: float | None,
    dp_min_pct: float | None,
    project: Project,
) -> None:
    """Refuse an intake at which the diet would have to be richer than any forage.

    ``de_min_kcal_per_g`` [kcal/g DM] and ``dp_min_pct`` [% DM] are the diet the animal class of
    row ``index`` needs in ``state`` (None when not derived from the intake); above
    :data:`DIET_DE_CEILING_KCAL_PER_G` or :data:`DIET_DP_CEILING_PCT` the intake (or, without an
    override, the body mass) is taken for a typing or unit error.
    """
    too_rich = []
    if de_min_kcal_per_g is not None and de_min_kcal_per_g > DIET_DE_CEILING_KCAL_PER_G:
        too_rich.append(f"{de_min_kcal_per_g:.3g} kcal DE/g")
    if dp_min_pct is not None and dp_min_pct > DIET_DP_CEILING_PCT:
        too_rich.append(f"{dp_min_pct:.3g} % digestible protein")
    if not too_rich:
        return
    row = animals.loc[index]
    intake = float(row["intake_kg_per_day"])
    given = not np.isnan(intake)
    raise TableError(
        f"intake too small for the requirement of {row['animal_class']!r} in state {state!r}: "
        f"its diet would need {' and '.join(too_rich)}",
        source=project.source("animal_classes"),
        location=f"row {spreadsheet_row(index)}, column "
        + ("'intake_kg_per_day'" if given else "'body_mass_kg'"),
        expected=f"an intake in kg of dry matter per animal per day at which the diet needs at "
        f"most {DIET_DE_CEILING_KCAL_PER_G:g} kcal DE/g and {DIET_DP_CEILING_PCT:g} % DP",
        found=f"{intake:g} kg/day" if given else f"{float(row['body_mass_kg']):g} kg",
    )


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


def require_protein_values(forage_classes: pd.DataFrame, project: Project) -> None:
    """With a protein target, every forage class needs its crude protein."""
    blank = forage_classes["cp_pct"].isna().to_numpy()
    if blank.any():
        index = int(np.flatnonzero(blank)[0])
        raise TableError(
            "crude protein missing while the target requires digestible protein",
            source=project.source("forage_classes"),
            location=f"row {spreadsheet_row(index)}, column 'cp_pct'",
            expected="crude protein in percent of dry matter (or protein = false in [target])",
            found="an empty cell",
        )


def diet_limits(project: Project, forage_classes: pd.DataFrame) -> DietLimits | None:
    """The ``[diet]`` groups, their classes and growth forms checked against the forage-class
    table; None when there are none."""
    groups = project.config.diet.groups
    if not groups:
        return None
    general = forage_classes[forage_classes["stratum"] == ""]
    known = {
        "classes": set(general["forage_class"]),
        "growth_form": set(general["growth_form"].fillna("")) - {""},
    }
    built = []
    for name, group in groups.items():
        given = group.classes if group.classes is not None else [group.growth_form]
        key = "classes" if group.classes is not None else "growth_form"
        unknown = [value for value in given if value not in known[key]]
        if unknown:
            raise ProjectFileError(
                f"diet group {name!r}: unknown {key.replace('_', ' ')} {unknown[0]!r}",
                source=project.path,
                location=f"key 'diet.groups.{name}.{key}'",
                expected=f"a {'forage_class' if key == 'classes' else key} of "
                f"{project.input_path('forage_classes')}: " + ", ".join(sorted(known[key])),
                found=repr(unknown[0]),
            )
        built.append(
            DietGroup(
                name,
                frozenset(group.classes or ()),
                group.growth_form,
                group.min_share,
                group.max_share,
            )
        )
    return DietLimits(tuple(built))
