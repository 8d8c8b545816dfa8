"""Input groups for the one-at-a-time sensitivity of total NCC.

Each group is a function of a multiplier that rebuilds the part of the problem
it touches and returns total NCC [animals]; :func:`nutricap.model.uncertainty.one_at_a_time`
turns them into a tornado table.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import replace

import numpy as np

from nutricap.model.problem import CapacityProblem
from nutricap.science.energetics import HerdRequirement
from nutricap.science.forage_quality import digestible_protein_pct

TotalFor = Callable[..., float]


def scaled_class_biomass(
    problem: CapacityProblem, mask: np.ndarray, factor: float
) -> CapacityProblem:
    """``problem`` with the available forage of the masked items multiplied by ``factor``."""
    available = problem.available_kg * np.where(mask, factor, 1.0)[None, :]
    return replace(problem, available_kg=available)


def scaled_item_attribute(
    problem: CapacityProblem, attribute: str, mask: np.ndarray, factor: float, upper: float
) -> CapacityProblem:
    """``problem`` with an item attribute (e.g. DE) of the masked items × ``factor``, capped."""
    values = getattr(problem.items, attribute)
    changed = np.where(mask, np.minimum(values * factor, upper), values)
    return replace(problem, items=replace(problem.items, **{attribute: changed}))


def scaled_crude_protein(
    problem: CapacityProblem, mask: np.ndarray, factor: float
) -> CapacityProblem:
    """``problem`` with the crude protein of the masked items × ``factor`` (at most 100 %) and
    their digestible protein recomputed from it (Robbins et al. 1987, linear).

    The laboratory value moves, not DP itself: scaling a negative DP would make a poorer
    forage of a "richer" one.
    """
    items = problem.items
    crude = np.where(mask, np.minimum(items.cp_pct * factor, 100.0), items.cp_pct)
    recomputed = digestible_protein_pct(np.nan_to_num(crude), items.tannin)
    digestible = np.where(mask, recomputed, items.dp_pct)
    return replace(problem, items=replace(items, cp_pct=crude, dp_pct=digestible))


def input_groups(
    problem: CapacityProblem,
    total_for: TotalFor,
    herd_for_mass: Callable[[float], HerdRequirement],
    *,
    protein: bool,
    other_herds: bool = False,
    diet_groups: bool = False,
) -> dict[str, Callable[[float], float]]:
    """The input groups: biomass, DE (and DP) by class, body mass, thresholds, allowable use.

    ``total_for(problem=..., herd=..., de_factor=..., dp_factor=...)`` returns total
    NCC [animals] with any of those replaced or scaled; ``herd_for_mass(f)`` is the
    herd's requirement with every body mass × f. With ``other_herds``, the other herbivores'
    numbers (every herd × f) are a group too (``total_for(others_factor=f)``). With
    diet-composition limits (``diet_groups``: the [diet] groups; or a class's
    ``max_diet_share`` below 1), every share bound × f, at most 1, is one group
    (``total_for(diet_factor=f)`` moves the groups' bounds).
    """
    groups: dict[str, Callable[[float], float]] = {}
    for name in np.unique(problem.items.forage_class):
        mask = problem.items.forage_class == name
        groups[f"biomass of {name}"] = _bind(
            lambda f, m: total_for(problem=scaled_class_biomass(problem, m, f)), mask
        )
        groups[f"DE of {name}"] = _bind(
            lambda f, m: total_for(
                problem=scaled_item_attribute(problem, "de_kcal_per_g", m, f, upper=5.0)
            ),
            mask,
        )
        if protein:
            groups[f"crude protein of {name}"] = _bind(
                lambda f, m: total_for(problem=scaled_crude_protein(problem, m, f)), mask
            )
    everything = np.ones(problem.items.size, dtype=bool)
    groups["allowable use (all classes)"] = lambda f: total_for(
        problem=scaled_item_attribute(problem, "allowable_use", everything, f, upper=1.0)
    )
    groups["body mass (all animal classes)"] = lambda f: total_for(herd=herd_for_mass(f))
    groups["diet DE threshold (energy requirement)"] = lambda f: total_for(de_factor=f)
    if protein:
        groups["diet DP threshold (protein requirement)"] = lambda f: total_for(dp_factor=f)
    if other_herds:
        groups["other herbivores' numbers"] = lambda f: total_for(others_factor=f)
    shares = problem.items.max_diet_share
    capped = shares is not None and bool((shares < 1).any())
    if diet_groups or capped:
        groups["diet-composition limits (every share bound)"] = lambda f: total_for(
            problem=(
                scaled_item_attribute(problem, "max_diet_share", everything, f, upper=1.0)
                if capped
                else problem
            ),
            diet_factor=f,
        )
    return groups


def _bind(function: Callable[[float, np.ndarray], float], mask: np.ndarray):
    return lambda factor: function(factor, mask)
