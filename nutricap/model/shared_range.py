"""Other herbivores on the same range: their forage use, removed before the target's capacity.

Each ``[[other_herbivores]]`` entry of the project file is a herd (a grazing permit, another
wild species) with numbers per unit, an intake, days on the range and a diet preference. Its
seasonal demand is allocated to the problem's items by
:func:`nutricap.science.use.allocate_within_caps_kg` (preference × headroom, no item beyond
what its allowable use leaves), herds with ``timing = "before"`` first, then those of the same
season, each in the order of the file. The target species then gets the forage left and the
allowable use left: every herbivore together uses at most a class's allowable use of its
forage (the allowable use is of the year's forage, whoever eats it).
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, replace

import geopandas as gpd
import numpy as np
import pandas as pd

from nutricap.errors import ProjectFileError, TableError
from nutricap.inputs.columns import spreadsheet_row
from nutricap.inputs.project import OtherHerbivoreSection, Project
from nutricap.inputs.tables import read_herd_numbers
from nutricap.model.problem import CapacityProblem, ForageItems, Solution
from nutricap.model.use import class_matrix
from nutricap.science import energetics
from nutricap.science.use import allocate_within_caps_kg

TIMING_ORDER = ("before", "same_season")
"""The order in which herds are allocated: those that graze before the season first."""


@dataclass(frozen=True)
class OtherHerd:
    """One other herd, ready to allocate.

    Attributes
    ----------
    name, timing : str
    unit_ids : array, shape (units,)
    demand_kg : array, shape (units,)
        Seasonal forage demand in each unit [kg DM].
    animals : array, shape (units,), optional
        Head per unit (None when the numbers were given as AUMs).
    class_weight : dict of str → float
        Preference weight of each forage class [-] (0: not eaten).
    """

    name: str
    timing: str
    unit_ids: np.ndarray
    demand_kg: np.ndarray
    animals: np.ndarray | None
    class_weight: dict[str, float]

    def demand_for(self, unit_ids: np.ndarray) -> np.ndarray:
        """Demand [kg] for each of ``unit_ids`` (repeated ids allowed, e.g. stacked)."""
        return self.demand_kg[pd.Index(self.unit_ids).get_indexer(unit_ids)]

    def weights(self, items: ForageItems) -> np.ndarray:
        """Preference weight of each item [-], (items,)."""
        return pd.Series(items.forage_class).map(self.class_weight).to_numpy(dtype=float)

    def scaled(self, factor: float) -> OtherHerd:
        """The herd with its numbers × ``factor``."""
        animals = None if self.animals is None else self.animals * factor
        return replace(self, demand_kg=self.demand_kg * factor, animals=animals)


@dataclass(frozen=True)
class SharedRange:
    """The forage other herds take and what is left for the target species.

    Attributes
    ----------
    problem : CapacityProblem
        The forage left (``available_kg``) and the allowable use left (``use_cap``).
    taken_kg : dict of str → array, shape (rows, items)
        Forage each herd takes [kg DM].
    unmet_kg : dict of str → array, shape (units,)
        Demand of each herd its preferred forage could not meet within allowable use [kg DM].
    """

    problem: CapacityProblem
    taken_kg: dict[str, np.ndarray]
    unmet_kg: dict[str, np.ndarray]


def share_range(problem: CapacityProblem, herds: tuple[OtherHerd, ...]) -> SharedRange:
    """Remove the forage of ``herds`` from ``problem`` (whose ``use_cap`` is not yet set).

    Each herd's demand in a unit is allocated over the unit's items from what the herds
    before it left within allowable use (:func:`allocate_within_caps_kg`); an item's take is
    shared among the unit's rows (patches) in proportion to their headroom. The target
    species then gets ``available − taken`` with the use cap ``(a · available − taken) /
    (available − taken)``: all herbivores together within allowable use ``a``.
    """
    usable = problem.available_kg * problem.items.allowable_use
    taken_total = np.zeros_like(usable)
    taken, unmet = {}, {}
    for herd in sorted(herds, key=lambda h: TIMING_ORDER.index(h.timing)):
        headroom = np.maximum(usable - taken_total, 0.0)
        unit_headroom = problem.sum_by_unit(headroom)
        unit_taken, unmet[herd.name] = allocate_within_caps_kg(
            herd.demand_for(problem.unit_ids), unit_headroom, herd.weights(problem.items)
        )
        of_unit = unit_headroom[problem.row_unit]
        share = np.divide(headroom, of_unit, out=np.zeros_like(headroom), where=of_unit > 0)
        full = (unit_taken >= unit_headroom)[problem.row_unit]  # each row's share exactly
        taken[herd.name] = np.where(full, headroom, unit_taken[problem.row_unit] * share)
        taken_total = taken_total + taken[herd.name]
    if not taken_total.any():
        return SharedRange(problem, taken, unmet)
    left = problem.available_kg - taken_total
    cap_left = np.divide(
        np.maximum(usable - taken_total, 0.0), left, out=np.zeros_like(left), where=left > 0
    )
    cap = np.where(taken_total > 0, np.minimum(cap_left, 1.0), problem.items.allowable_use)
    return SharedRange(replace(problem, available_kg=left, use_cap=cap), taken, unmet)


def load_other_herds(
    project: Project, units: gpd.GeoDataFrame, forage_classes: pd.DataFrame
) -> tuple[OtherHerd, ...]:
    """The project's ``[[other_herbivores]]``, their numbers read and their demand computed."""
    general = forage_classes[forage_classes["stratum"] == ""]
    herds = []
    for index, section in enumerate(project.config.other_herbivores):
        numbers, kind = herd_numbers(project, index, section, units)
        demand = seasonal_demand(project, index, section, numbers, kind)
        herds.append(
            OtherHerd(
                name=section.name,
                timing=section.timing,
                unit_ids=units["unit_id"].to_numpy(),
                demand_kg=demand,
                animals=numbers if kind == "animals" else None,
                class_weight=class_weights(project, index, section, general),
            )
        )
    return tuple(herds)


def herd_numbers(
    project: Project, index: int, section: OtherHerbivoreSection, units: gpd.GeoDataFrame
) -> tuple[np.ndarray, str]:
    """Numbers per unit (in the units layer's order) and their kind, ``animals`` or ``aums``.

    A units-layer column has been checked by :func:`nutricap.landscape.vectors.read_units`;
    a table may leave units out (0 there) but may not name a unit the layer lacks.
    """
    if section.animals_column is not None:
        return units[section.animals_column].to_numpy(dtype=float), "animals"
    if section.aums_column is not None:
        return units[section.aums_column].to_numpy(dtype=float), "aums"
    path = (project.folder / section.numbers_table).resolve()
    table, kind = read_herd_numbers(path)
    known = pd.Index(units["unit_id"])
    unknown = ~table["unit_id"].isin(known).to_numpy()
    if unknown.any():
        row = int(np.flatnonzero(unknown)[0])
        raise TableError(
            f"unit {table['unit_id'].iloc[row]!r} is not in the units layer",
            source=path,
            location=f"row {spreadsheet_row(row)}, column 'unit_id'",
            expected=f"a unit_id of {project.input_path('units')}",
            found=repr(table["unit_id"].iloc[row]),
        )
    numbers = table.set_index("unit_id")[kind].reindex(known).fillna(0.0)
    return numbers.to_numpy(dtype=float), kind


def seasonal_demand(
    project: Project,
    index: int,
    section: OtherHerbivoreSection,
    numbers: np.ndarray,
    kind: str,
) -> np.ndarray:
    """Seasonal demand per unit [kg DM].

    AUMs: ``AUM × 353.8 kg`` (780 lb, :data:`~nutricap.science.energetics.AUM_FORAGE_KG`).
    Animals: ``animals × intake × days``, intake given or ``AUE(W) × 26 lb/day`` from the body
    mass W (the animal unit's forage scaled by metabolic weight).
    """
    has_intake = section.intake_kg_per_day is not None
    has_mass = section.body_mass_kg is not None
    if kind == "aums":
        extra = [k for k in ("body_mass_kg", "intake_kg_per_day", "days") if getattr(section, k)]
        if extra:
            _herd_key_error(
                project,
                index,
                extra[0],
                "numbers in AUMs are forage already (780 lb each)",
                "no body_mass_kg, intake_kg_per_day or days with AUMs",
                ", ".join(extra),
            )
        return numbers * energetics.AUM_FORAGE_KG
    if section.days is None:
        _herd_key_error(project, index, "days", "missing days", "days on the range", "none")
    if has_intake == has_mass:
        _herd_key_error(
            project,
            index,
            "body_mass_kg",
            "give body_mass_kg or intake_kg_per_day",
            "exactly one of them with numbers of animals",
            "both" if has_intake else "neither",
        )
    intake = section.intake_kg_per_day
    if intake is None:
        aue = energetics.animal_unit_equivalent(section.body_mass_kg)
        intake = aue * energetics.ANIMAL_UNIT_FORAGE_KG_PER_DAY
    return numbers * intake * section.days


def class_weights(
    project: Project, index: int, section: OtherHerbivoreSection, general: pd.DataFrame
) -> dict[str, float]:
    """Weight of each forage class: its own entry, else its growth form's, else 0; all 1
    when no preference is given."""
    classes = general["forage_class"].tolist()
    forms = dict(zip(general["forage_class"], general["growth_form"].fillna(""), strict=True))
    if not section.preference:
        return dict.fromkeys(classes, 1.0)
    names = set(classes) | {form for form in forms.values() if form}
    for key in section.preference:
        if key not in names:
            _herd_key_error(
                project,
                index,
                f"preference.{key}",
                f"unknown forage class or growth form {key!r}",
                "a forage_class or growth_form of "
                f"{project.input_path('forage_classes')}: " + ", ".join(sorted(names)),
                repr(key),
            )
    weights = section.preference
    return {c: weights.get(c, weights.get(forms[c], 0.0)) for c in classes}


def _herd_key_error(
    project: Project, index: int, key: str, message: str, expected: str, found: str
) -> None:
    raise ProjectFileError(
        message,
        source=project.path,
        location=f"key 'other_herbivores.{index}.{key}'",
        expected=expected,
        found=found,
    )


# --- outputs -----------------------------------------------------------------------------


@dataclass(frozen=True)
class SharedRangeResult:
    """What the other herds did: per unit, per herd × unit, per herd × unit × class, and the
    forage they left (the problem the target's capacity was solved on)."""

    left: CapacityProblem
    by_unit: pd.DataFrame
    by_herd: pd.DataFrame
    by_unit_class: pd.DataFrame
    taken_kg: np.ndarray  # forage all the other herds take, shape (rows, items) [kg DM]


def shared_range_outputs(
    problem: CapacityProblem,
    herds: tuple[OtherHerd, ...],
    solve_as_given: Callable[[CapacityProblem], Solution],
    season_days: float,
) -> SharedRangeResult:
    """NCC with and without the other herds, each herd's cost in NCC, and its forage taken.

    ``solve_as_given`` solves a problem as it is (no herd removed). A herd's cost is its
    leave-one-out loss: NCC with every other herd minus NCC with all of them; the exchange
    rate is that loss per AUM of forage the herd takes (and per head when its numbers are
    animals).
    """

    def ncc_animals(group: tuple[OtherHerd, ...]) -> np.ndarray:
        left = share_range(problem, group).problem
        return problem.sum_by_unit(solve_as_given(left).ncc.animal_days) / season_days

    shared = share_range(problem, herds)
    with_all = ncc_animals(herds)
    without = ncc_animals(())
    taken_aum = sum(_unit_aum(problem, shared.taken_kg[h.name]) for h in herds)
    unmet_aum = sum(energetics.animal_unit_months(shared.unmet_kg[h.name]) for h in herds)
    by_unit = pd.DataFrame(
        {
            "unit_id": problem.unit_ids,
            "ncc_animals_without_others": without,
            "other_herbivores_taken_aum": taken_aum,
            "other_herbivores_unmet_aum": unmet_aum,
            "ncc_lost_per_other_aum": _per(without - with_all, taken_aum),
        }
    )
    frames, class_frames = [], []
    for herd in herds:
        rest = tuple(other for other in herds if other is not herd)
        lost = ncc_animals(rest) - with_all
        frames.append(_herd_frame(problem, shared, herd, lost))
        class_frames.append(_herd_class_frame(problem, shared.taken_kg[herd.name], herd))
    return SharedRangeResult(
        shared.problem,
        by_unit,
        pd.concat(frames, ignore_index=True),
        pd.concat(class_frames, ignore_index=True),
        sum(shared.taken_kg.values(), np.zeros_like(problem.available_kg)),
    )


def _unit_aum(problem: CapacityProblem, taken_kg: np.ndarray) -> np.ndarray:
    return energetics.animal_unit_months(problem.sum_by_unit(taken_kg.sum(axis=1)))


def _per(value: np.ndarray, per: np.ndarray | None) -> np.ndarray:
    """``value / per``, NaN where ``per`` is 0 (no rate where nothing was taken)."""
    if per is None:
        return np.full(np.shape(value), np.nan)
    per = np.broadcast_to(np.asarray(per, dtype=float), np.shape(value))
    return np.divide(value, per, out=np.full(np.shape(value), np.nan), where=per > 0)


def _herd_frame(
    problem: CapacityProblem, shared: SharedRange, herd: OtherHerd, lost: np.ndarray
) -> pd.DataFrame:
    taken_kg = problem.sum_by_unit(shared.taken_kg[herd.name].sum(axis=1))
    taken_aum = energetics.animal_unit_months(taken_kg)
    animals = herd.animals if herd.animals is not None else np.full(taken_kg.size, np.nan)
    return pd.DataFrame(
        {
            "herd": herd.name,
            "timing": herd.timing,
            "unit_id": problem.unit_ids,
            "animals": animals,
            "demand_aum": energetics.animal_unit_months(herd.demand_for(problem.unit_ids)),
            "taken_kg": taken_kg,
            "taken_aum": taken_aum,
            "unmet_kg": shared.unmet_kg[herd.name],
            "unmet_aum": energetics.animal_unit_months(shared.unmet_kg[herd.name]),
            "ncc_lost_animals": lost,
            "ncc_lost_per_aum": _per(lost, taken_aum),
            "ncc_lost_per_animal": _per(lost, herd.animals),
        }
    )


def _herd_class_frame(
    problem: CapacityProblem, taken_kg: np.ndarray, herd: OtherHerd
) -> pd.DataFrame:
    classes, available = class_matrix(problem, problem.available_kg)
    _, taken = class_matrix(problem, taken_kg)
    return pd.DataFrame(
        {
            "herd": herd.name,
            "unit_id": np.repeat(problem.unit_ids, classes.size),
            "forage_class": np.tile(classes, problem.unit_ids.size),
            "available_kg": available.ravel(),
            "taken_kg": taken.ravel(),
            "taken_fraction": np.divide(
                taken, available, out=np.zeros_like(taken), where=available > 0
            ).ravel(),
        }
    )
