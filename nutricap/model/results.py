"""Assembling results: the per-unit and per-class tables, totals and notes.

Turns a solved :class:`~nutricap.model.problem.CapacityProblem` into the tables of
the output contract; formats nothing and writes nothing.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

import numpy as np
import pandas as pd

from nutricap.landscape.plots import StratumSupply
from nutricap.landscape.vectors import StratumAreas
from nutricap.model.problem import CapacityProblem, Solution
from nutricap.science import energetics
from nutricap.science.forage_quality import mixed_diet_quality

if TYPE_CHECKING:
    from nutricap.model.estimate import Estimate

HA_PER_KM2 = 100.0


def unit_table(
    problem: CapacityProblem,
    solution: Solution,
    areas: StratumAreas,
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
    usable_kg = problem.sum_by_unit(problem.usable_kg())
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
            "ncc_aum": energetics.animal_unit_months(eaten.sum(axis=1)),
            "allowable_use_aum": energetics.animal_unit_months(usable_kg),
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


def unreachable_notes(by_unit: pd.DataFrame) -> list[str]:
    """Units whose NCC is zero because no mix of their forage reaches the target diet, or
    none that also keeps the diet-composition limits ([diet] groups, ``max_diet_share``)."""
    factor = by_unit["limiting_factor"]
    return _units_note(
        by_unit,
        factor == "intake",
        "no mix of the available forage reaches the target diet in unit(s) {units}: their NCC "
        "is 0 (limiting factor 'intake')",
    ) + _units_note(
        by_unit,
        factor == "diet_mix",
        "no mix of the available forage meets both the target diet and the diet-composition "
        "limits (the [diet] groups' shares, the forage classes' max_diet_share) in unit(s) "
        "{units}: their NCC is 0 (limiting factor 'diet_mix')",
    )


def shared_range_notes(by_unit: pd.DataFrame) -> list[str]:
    """Units where the other herbivores ([[other_herbivores]]) leave the herd no forage within
    allowable use, and units whose key forage no number of the herd keeps within it."""
    if "other_herbivores_taken_aum" not in by_unit.columns:
        return []
    taken_all = (by_unit["limiting_factor"] == "no_forage") & (
        by_unit["other_herbivores_taken_aum"] > 0
    )
    notes = _units_note(
        by_unit,
        taken_all,
        "the other herbivores take all the forage within allowable use in unit(s) {units}, "
        "so NCC there is 0 (limiting factor 'no_forage'); other_herbivores_unmet_aum is "
        "their demand that found no forage within allowable use",
    )
    if "reduction_for_key_use_animals" not in by_unit.columns:
        return notes
    current = by_unit["current_animals"]
    all_of_them = by_unit["reduction_for_key_use_animals"] >= current
    beyond = by_unit["overuse"] & (current > 0) & all_of_them
    return notes + _units_note(
        by_unit,
        beyond,
        "the other herbivores alone use a key forage class to its allowable use or beyond in "
        "unit(s) {units}: the overuse flag stays with any number of the herd, and "
        "reduction_for_key_use_animals is all of its animals there",
    )


def ordering_notes(by_unit: pd.DataFrame) -> list[str]:
    """Units where NCC exceeds ECC: the requirements or thresholds given ask too little.

    With the packaged requirement table NCC <= ECC always holds (docs/methods.md); a user's
    own table, explicit diet thresholds or intake overrides can break it, and the run says so.
    """
    ncc, ecc = by_unit["ncc_animal_days"], by_unit["ecc_animal_days"]
    return _units_note(
        by_unit,
        ncc > ecc * (1 + 1e-9) + 1e-9,
        "NCC exceeds ECC in unit(s) {units}: the target diet threshold times the herd's intake "
        "supplies less energy than the herd's maintenance requirement; check the requirement "
        "table, the diet thresholds given in [target] and any intake_kg_per_day overrides",
    )


def _units_note(by_unit: pd.DataFrame, where: pd.Series, text: str) -> list[str]:
    """``[text]`` with ``{units}`` naming the units where ``where`` holds; [] when none."""
    units = by_unit.loc[where, "unit_id"].tolist()
    return [text.format(units=", ".join(map(str, units)))] if units else []


UNMAPPED_SHARE_NOTED = 1e-4
"""A unit whose strata cover less than 1 − this share of its area is named in a note."""
SHOWN_IN_NOTE = 10
"""Names listed at most in one note (the rest are counted)."""


def _listed(names: list[str]) -> str:
    shown = ", ".join(map(str, names[:SHOWN_IN_NOTE]))
    more = len(names) - SHOWN_IN_NOTE
    return shown + (f" and {more} more" if more > 0 else "")


def unmapped_notes(by_unit: pd.DataFrame) -> list[str]:
    """Units whose mapped (strata) area is smaller than their area: the unmapped ground is
    counted as ground without forage."""
    share = by_unit["mapped_ha"] / by_unit["area_ha"]
    partial = by_unit[share < 1.0 - UNMAPPED_SHARE_NOTED]
    if partial.empty:
        return []
    named = [
        f"{unit} ({mapped:.1%} of its {area:,.1f} ha mapped)"
        for unit, mapped, area in zip(
            partial["unit_id"], partial["mapped_ha"] / partial["area_ha"], partial["area_ha"]
        )
    ]
    unmapped_ha = float((partial["area_ha"] - partial["mapped_ha"]).sum())
    return [
        f"{len(partial)} unit(s) only partly covered by the strata map: {_listed(named)}; "
        f"their {unmapped_ha:,.1f} ha outside the map are counted as ground without forage "
        "(map them, or check the layers' extents)"
    ]


def declared_bare_notes(supply: StratumSupply, strata_without_forage: list[str]) -> list[str]:
    """``[supply] strata_without_forage`` entries that have plots (their plots are used) or
    that are not on the map (the entry does nothing)."""
    n_plots = dict(zip(supply.strata, supply.n_plots))
    sampled = [name for name in strata_without_forage if n_plots.get(name, 0) > 0]
    absent = [name for name in strata_without_forage if name not in n_plots]
    notes = []
    if sampled:
        notes.append(
            "strata listed in [supply] strata_without_forage have clip plots, and their plots "
            "are used (the stratum carries the plots' forage): "
            + _listed([f"{name} ({n_plots[name]} plots)" for name in sampled])
        )
    if absent:
        notes.append(
            "strata listed in [supply] strata_without_forage are not on the strata map (a "
            "spelling difference?): " + _listed(absent)
        )
    return notes


def supply_notes(supply: StratumSupply, plots: pd.DataFrame) -> list[str]:
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
