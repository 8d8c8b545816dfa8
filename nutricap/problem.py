"""The capacity problem: rows (units or patches) × forage items, and its solution.

An item is one forage class in one stratum, so that quality may differ by
stratum (rows of the forage-class table with a ``stratum`` override). Rows of
the problem are units (animals mix forage across the unit) or unit × stratum
patches (each patch must meet the diet on its own). Every later step
(uncertainty, treatments, raster supply) changes the problem and solves it
again with :func:`solve_problem`.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from nutricap.landscape.plots import StratumSupply
from nutricap.landscape.vectors import StratumAreas
from nutricap.science.capacity import (
    NutritionalCapacity,
    allowable_use_capacity,
    ecological_capacity,
    nutritional_capacity,
)


@dataclass(frozen=True)
class ForageItems:
    """Per-item attributes, each an array of shape (items,)."""

    stratum: np.ndarray
    forage_class: np.ndarray
    de_kcal_per_g: np.ndarray
    dp_pct: np.ndarray
    allowable_use: np.ndarray
    key: np.ndarray
    biomass_kg_per_ha: np.ndarray
    preference: np.ndarray

    @property
    def size(self) -> int:
        return int(self.stratum.size)


def build_forage_items(supply: StratumSupply, forage_classes: pd.DataFrame) -> ForageItems:
    """One item per stratum × forage class, with stratum-specific quality where given."""
    strata = np.repeat(supply.strata, len(supply.classes))
    classes = np.tile(supply.classes, len(supply.strata))
    general = forage_classes[forage_classes["stratum"] == ""].set_index("forage_class")
    specific = forage_classes[forage_classes["stratum"] != ""].set_index(
        ["forage_class", "stratum"]
    )
    attributes = general.loc[
        classes, ["de_kcal_per_g", "dp_pct", "allowable_use", "key", "preference"]
    ]
    attributes = attributes.reset_index(drop=True)
    pairs = pd.MultiIndex.from_arrays([classes, strata])
    overridden = pairs.isin(specific.index)
    if overridden.any():
        columns = ["de_kcal_per_g", "dp_pct", "allowable_use"]
        attributes.loc[overridden, columns] = specific.loc[pairs[overridden], columns].to_numpy()
    return ForageItems(
        stratum=strata,
        forage_class=classes,
        de_kcal_per_g=attributes["de_kcal_per_g"].to_numpy(dtype=float),
        dp_pct=attributes["dp_pct"].to_numpy(dtype=float),
        allowable_use=attributes["allowable_use"].to_numpy(dtype=float),
        key=attributes["key"].to_numpy(dtype=bool),
        biomass_kg_per_ha=supply.mean_kg_per_ha.ravel(),
        preference=attributes["preference"].to_numpy(dtype=float),
    )


@dataclass(frozen=True)
class CapacityProblem:
    """Available forage by problem row and item.

    Attributes
    ----------
    unit_ids : array, shape (units,)
    row_unit : int array, shape (rows,)
        The unit each row belongs to (index into ``unit_ids``).
    items : ForageItems
    available_kg : array, shape (rows, items) [kg DM]
    row_stratum_ha : array, shape (rows, strata) [ha], optional
        Accessible hectares of each stratum in each row, when the supply is
        stratum means × hectares (lets the supply be re-drawn, e.g. by the bootstrap).
    strata : list of str, optional
        Column labels of ``row_stratum_ha``.
    """

    unit_ids: np.ndarray
    row_unit: np.ndarray
    items: ForageItems
    available_kg: np.ndarray
    row_stratum_ha: np.ndarray | None = None
    strata: list[str] | None = None

    def sum_by_unit(self, values: np.ndarray) -> np.ndarray:
        """Sum per-row ``values`` (rows, ...) into units (units, ...)."""
        totals = np.zeros((self.unit_ids.size, *values.shape[1:]))
        np.add.at(totals, self.row_unit, values)
        return totals


@dataclass(frozen=True)
class Solution:
    """Capacity of every problem row [animal-days]."""

    ncc: NutritionalCapacity
    ecc_animal_days: np.ndarray
    allowable_use_animal_days: np.ndarray


def build_problem(
    areas: StratumAreas, supply: StratumSupply, items: ForageItems, mode: str
) -> CapacityProblem:
    """Rows of the capacity problem from the overlay and the plot supply.

    ``mode="unit"``: one row per unit. ``mode="patch"``: one row per unit × stratum.
    """
    unit_ids = areas.units["unit_id"].to_numpy()
    table = areas.by_unit_stratum
    unit_index = pd.Index(unit_ids).get_indexer(table["unit_id"])
    stratum_index = pd.Index(supply.strata).get_indexer(table["stratum"])
    accessible = table["accessible_ha"].to_numpy()
    if mode == "unit":
        row_unit = np.arange(unit_ids.size)
        hectares = np.zeros((unit_ids.size, len(supply.strata)))
        np.add.at(hectares, (unit_index, stratum_index), accessible)
    else:
        row_unit = unit_index
        hectares = np.zeros((len(table), len(supply.strata)))
        hectares[np.arange(len(table)), stratum_index] = accessible
    available = available_forage_kg(items, hectares, supply.strata)
    return CapacityProblem(unit_ids, row_unit, items, available, hectares, list(supply.strata))


def solve_problem(
    problem: CapacityProblem,
    *,
    intake_kg_per_day: float,
    maintenance_de_kcal_per_day: float,
    de_min_kcal_per_g: float,
    dp_min_pct: float | None,
    cap_at_allowable_use: bool,
) -> Solution:
    """NCC, ECC and allowable-use capacity of every row of ``problem``."""
    items = problem.items
    ncc = nutritional_capacity(
        problem.available_kg,
        items.de_kcal_per_g,
        intake_kg_per_day,
        de_min_kcal_per_g,
        dp_pct=items.dp_pct if dp_min_pct is not None else None,
        dp_min_pct=dp_min_pct,
        use_cap=items.allowable_use if cap_at_allowable_use else None,
    )
    ecc = ecological_capacity(
        problem.available_kg, items.de_kcal_per_g, maintenance_de_kcal_per_day
    )
    allowable = allowable_use_capacity(problem.available_kg, items.allowable_use, intake_kg_per_day)
    return Solution(ncc, ecc, allowable)


def available_forage_kg(
    items: ForageItems, row_stratum_hectares: np.ndarray, strata: list[str]
) -> np.ndarray:
    """Available dry forage of every item in every row [kg].

    Parameters
    ----------
    items : ForageItems
    row_stratum_hectares : array, shape (rows, strata)
        Accessible hectares of each stratum in each row (unit or patch) [ha].
    strata : list of str
        Column labels of ``row_stratum_hectares``.

    Returns
    -------
    array, shape (rows, items) [kg]
        ``hectares[row, stratum(item)] × biomass[item]`` (kg/ha × ha = kg).
    """
    column = pd.Index(strata).get_indexer(items.stratum)
    return row_stratum_hectares[:, column] * items.biomass_kg_per_ha[None, :]
