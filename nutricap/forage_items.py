"""Forage items: the columns of the capacity problem.

An item is one forage class in one stratum, so that quality may differ by
stratum (rows of the forage-class table with a ``stratum`` override). Rows of
the problem are units (animals mix forage across the unit) or unit × stratum
patches (each patch must meet the diet on its own).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from nutricap.landscape.plots import StratumSupply


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
    attributes = general.loc[classes, ["de_kcal_per_g", "dp_pct", "allowable_use", "key"]]
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
    )


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
