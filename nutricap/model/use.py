"""Assess current use: demand of the animals there now, utilization, overuse flags.

Builds on a solved :class:`~nutricap.model.problem.CapacityProblem`. Current numbers
come from the units layer's ``current_animals`` column or, when it is absent,
from the latest year of the counts table for each unit.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from nutricap.model.problem import CapacityProblem
from nutricap.science.use import (
    allocate_demand_kg,
    animals_at_use_limit,
    seasonal_demand_kg,
    utilization_fraction,
)

USE_TOLERANCE = 1e-9
"""Use may exceed allowable use by this much (rounding) before a flag is raised [-]."""
TIE_TOLERANCE = 1e-12
"""Relative difference of use ÷ allowable use below which two key classes are tied [-]."""


def current_animals_from_counts(counts: pd.DataFrame, unit_ids: np.ndarray) -> np.ndarray:
    """Latest year's count for each unit (NaN where a unit has no count)."""
    if "unit_id" not in counts.columns:
        return np.full(unit_ids.size, np.nan)
    latest = counts.sort_values("year").groupby("unit_id")["count"].last()
    return latest.reindex(unit_ids).to_numpy(dtype=float)


def unmatched_counts_notes(counts: pd.DataFrame | None, unit_ids: np.ndarray) -> list[str]:
    """Count series whose unit id matches no unit: in the trend of the total, in no unit."""
    if counts is None or "unit_id" not in counts.columns:
        return []
    named = counts.loc[counts["unit_id"] != "", "unit_id"]
    unmatched = sorted(set(named) - set(unit_ids.tolist()))
    if not unmatched:
        return []
    rows = int(named.isin(unmatched).sum())
    shown = ", ".join(map(repr, unmatched[:10])) + (" …" if len(unmatched) > 10 else "")
    return [
        f"counts for {len(unmatched)} unit id(s) that match no unit of the units layer "
        f"({rows} rows): {shown}; they are in the trend of the counts' total, but in no "
        "unit's current use (a spelling difference, or a unit missing from the layer?)"
    ]


def class_matrix(problem: CapacityProblem, values: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Sum per-row, per-item ``values`` into (units, classes); return (classes, matrix)."""
    classes, item_class = np.unique(problem.items.forage_class, return_inverse=True)
    by_unit = problem.sum_by_unit(values)
    matrix = np.zeros((by_unit.shape[0], classes.size))
    np.add.at(matrix.T, item_class, by_unit.T)
    return classes, matrix


def assess_use(
    problem: CapacityProblem,
    by_unit: pd.DataFrame,
    current_animals: np.ndarray,
    *,
    intake_kg_per_day: float,
    season_days: float,
    preference: np.ndarray | None = None,
    others_taken_kg: np.ndarray | None = None,
) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Add current use and overuse columns to ``by_unit``; return it and the per-class use.

    Parameters
    ----------
    problem : CapacityProblem
        The forage before any herbivore eats (available forage, allowable use).
    preference : array, shape (items,), optional
        Relative preference of each item's class (default equal).
    others_taken_kg : array, shape (rows, items), optional
        Forage the other herbivores take [kg DM] (``[[other_herbivores]]``). The herd's
        demand then falls on the allowable forage they leave (on the forage left, in
        proportion to allowable use, where they leave none), and use is that of all the
        herbivores together, against each class's own allowable use.

    Returns
    -------
    by_unit : DataFrame
        With ``current_animals, demand_kg, key_use_fraction, key_class,
        key_allowable_use, overuse, above_ncc, reduction_for_key_use_animals,
        reduction_for_ncc_animals``.
    use_by_class : DataFrame
        ``unit_id, forage_class, key, use_fraction, allowable_use``.
    """
    items = problem.items
    taken = np.zeros_like(problem.available_kg)  # the memory layout of the forage's: the same
    if others_taken_kg is not None:  # order of summation, whether other herbivores take any
        taken[...] = others_taken_kg
    room = _room_left(problem, taken)
    row_current = current_animals[problem.row_unit] * _row_share(problem, room)
    demand = seasonal_demand_kg(row_current, intake_kg_per_day, season_days)
    eaten = allocate_demand_kg(demand, room, 1.0, preference)
    classes, available = class_matrix(problem, problem.available_kg)
    _, eaten_by_class = class_matrix(problem, eaten)
    _, taken_by_class = class_matrix(problem, taken)
    _, usable = class_matrix(problem, problem.available_kg * problem.allowable_fraction)
    herd_use = utilization_fraction(eaten_by_class, available)
    others_use = utilization_fraction(taken_by_class, available)
    allowable = utilization_fraction(usable, available)
    key = _class_flags(items.forage_class, items.key, classes)
    watched = key if key.any() else np.ones_like(key)
    table = by_unit.copy()
    table["current_animals"] = current_animals
    table["demand_kg"] = seasonal_demand_kg(current_animals, intake_kg_per_day, season_days)
    use = herd_use + others_use
    _add_key_columns(table, classes, use, allowable, watched)
    watched_use = np.where(watched[None, :], herd_use, 0.0)
    limit = animals_at_use_limit(current_animals, watched_use, allowable - others_use)
    table["reduction_for_key_use_animals"] = np.maximum(current_animals - limit, 0.0)
    table["above_ncc"] = current_animals > table["ncc_animals"].to_numpy()
    table["reduction_for_ncc_animals"] = np.maximum(current_animals - table["ncc_animals"], 0.0)
    return table, _use_table(problem.unit_ids, classes, key, use, allowable)


def _room_left(problem: CapacityProblem, taken_kg: np.ndarray) -> np.ndarray:
    """The forage the herd's demand falls on, by row and item [kg DM]: the allowable forage
    the other herbivores leave; in a unit where they leave none, the forage they leave in
    proportion to allowable use (the demand is then all beyond allowable use)."""
    usable = problem.available_kg * problem.allowable_fraction
    headroom = np.maximum(usable - taken_kg, 0.0)
    left = np.maximum(problem.available_kg - taken_kg, 0.0) * problem.allowable_fraction
    has_room = problem.sum_by_unit(headroom.sum(axis=1)) > 0.0
    return np.where(has_room[problem.row_unit, None], headroom, left)


def _row_share(problem: CapacityProblem, room: np.ndarray) -> np.ndarray:
    """Share of its unit's animals each row holds: its share of the unit's ``room``."""
    row_room = room.sum(axis=1)
    unit_total = problem.sum_by_unit(row_room)[problem.row_unit]
    return np.divide(row_room, unit_total, out=np.zeros_like(row_room), where=unit_total > 0)


def _class_flags(item_class: np.ndarray, item_key: np.ndarray, classes: np.ndarray) -> np.ndarray:
    keyed = set(item_class[item_key])
    return np.array([name in keyed for name in classes])


def _add_key_columns(
    table: pd.DataFrame,
    classes: np.ndarray,
    use: np.ndarray,
    allowable: np.ndarray,
    watched: np.ndarray,
) -> None:
    pressure = np.divide(use, allowable, out=np.zeros_like(use), where=allowable > 0)
    pressure[:, ~watched] = -1.0
    # Ties (equal preference uses every class to the same fraction of its allowable use) go
    # to the first class by name, not to the last bit of rounding.
    top = pressure.max(axis=1, keepdims=True)
    worst = np.argmax(pressure >= top - TIE_TOLERANCE * np.abs(top), axis=1)
    rows = np.arange(use.shape[0])
    table["key_class"] = classes[worst]
    table["key_use_fraction"] = use[rows, worst]
    table["key_allowable_use"] = allowable[rows, worst]
    table["overuse"] = table["key_use_fraction"] > table["key_allowable_use"] + USE_TOLERANCE


def _use_table(
    unit_ids: np.ndarray,
    classes: np.ndarray,
    key: np.ndarray,
    use: np.ndarray,
    allowable: np.ndarray,
) -> pd.DataFrame:
    return pd.DataFrame(
        {
            "unit_id": np.repeat(unit_ids, classes.size),
            "forage_class": np.tile(classes, unit_ids.size),
            "key": np.tile(key, unit_ids.size),
            "use_fraction": use.ravel(),
            "allowable_use": allowable.ravel(),
        }
    )
