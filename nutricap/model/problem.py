"""The capacity problem: rows (units or patches) × forage items, and its solution.

An item is one forage class in one stratum, so that quality may differ by
stratum (rows of the forage-class table with a ``stratum`` override). Rows of
the problem are units (animals mix forage across the unit) or unit × stratum
patches (each patch must meet the diet on its own). Every later step
(uncertainty, treatments, raster supply) changes the problem and solves it
again with :func:`solve_problem`.
"""

from __future__ import annotations

import difflib
from dataclasses import dataclass, replace

import numpy as np
import pandas as pd

from nutricap.inputs.columns import Source
from nutricap.inputs.table_source import first_index, row_error
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
    """Per-item attributes, each an array of shape (items,).

    ``variant`` is ``""`` for forage as sampled, or the label of a treatment
    response (e.g. ``"thinning 2027"``) for forage of a treated patch.
    """

    stratum: np.ndarray
    forage_class: np.ndarray
    de_kcal_per_g: np.ndarray
    dp_pct: np.ndarray
    allowable_use: np.ndarray
    key: np.ndarray
    biomass_kg_per_ha: np.ndarray
    preference: np.ndarray
    growth_form: np.ndarray
    cp_pct: np.ndarray
    tannin: np.ndarray
    variant: np.ndarray
    #: Largest share of the diet each item may make up [0–1] (1: no limit).
    max_diet_share: np.ndarray | None = None

    @property
    def size(self) -> int:
        return int(self.stratum.size)

    @property
    def patch_type(self) -> np.ndarray:
        """The patch type each item grows in: the stratum, with the variant when there is one."""
        return patch_type_labels(self.stratum, self.variant)

    def subset(self, mask: np.ndarray) -> ForageItems:
        """The items where ``mask`` is true."""
        return ForageItems(
            **{name: None if v is None else v[mask] for name, v in vars(self).items()}
        )

    @staticmethod
    def concatenate(parts: list[ForageItems]) -> ForageItems:
        """The items of ``parts`` one after another."""
        names = vars(parts[0]).keys()
        values = {n: [vars(p)[n] for p in parts] for n in names}
        return ForageItems(
            **{
                n: None if any(x is None for x in v) else np.concatenate(v)
                for n, v in values.items()
            }
        )


ITEM_COLUMNS = [
    "de_kcal_per_g",
    "dp_pct",
    "allowable_use",
    "key",
    "preference",
    "cp_pct",
    "tannin",
    "max_diet_share",
]


def patch_type_labels(stratum: np.ndarray, variant: np.ndarray) -> np.ndarray:
    """``stratum`` where ``variant`` is empty, else ``"stratum | variant"``."""
    stratum = np.asarray(stratum, dtype=object)
    variant = np.asarray(variant, dtype=object)
    joined = stratum + " | " + variant
    return np.where(variant == "", stratum, joined).astype(object)


def build_forage_items(
    supply: StratumSupply, forage_classes: pd.DataFrame, source: Source | None = None
) -> ForageItems:
    """One item per stratum × forage class, with stratum-specific quality where given.

    A row of ``forage_classes`` whose ``stratum`` override names no stratum of
    ``supply.strata`` (the strata map) is refused (:func:`require_override_strata`); it would
    apply nowhere. ``source``: the forage-class table, named in that message.
    """
    require_override_strata(forage_classes, supply.strata, source)
    strata = np.repeat(supply.strata, len(supply.classes)).astype(object)
    classes = np.tile(supply.classes, len(supply.strata)).astype(object)
    general = forage_classes[forage_classes["stratum"] == ""].set_index("forage_class")
    if "max_diet_share" not in general.columns:
        general = general.assign(max_diet_share=np.nan)
    specific = forage_classes[forage_classes["stratum"] != ""].set_index(
        ["forage_class", "stratum"]
    )
    attributes = general.loc[classes, [*ITEM_COLUMNS, "growth_form"]].reset_index(drop=True)
    pairs = pd.MultiIndex.from_arrays([classes, strata])
    overridden = pairs.isin(specific.index)
    if overridden.any():
        columns = ["de_kcal_per_g", "dp_pct", "allowable_use", "cp_pct", "tannin"]
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
        growth_form=attributes["growth_form"].fillna("").to_numpy(dtype=object),
        cp_pct=attributes["cp_pct"].fillna(0.0).to_numpy(dtype=float),
        tannin=attributes["tannin"].fillna(0.0).to_numpy(dtype=float),
        variant=np.full(classes.size, "", dtype=object),
        max_diet_share=attributes["max_diet_share"].fillna(1.0).to_numpy(dtype=float),
    )


FORAGE_CLASS_TABLE = "the forage-class table"
"""How a message names the forage-class table when its file is not given."""


def require_override_strata(
    forage_classes: pd.DataFrame, strata: list[str], source: Source | None = None
) -> None:
    """Refuse the first row whose ``stratum`` override is not a stratum of the map.

    Parameters
    ----------
    forage_classes : DataFrame
        The forage-class table as read (rows in file order); ``stratum`` empty on the rows
        of a class's own values.
    strata : list of str
        The strata of the strata map.
    source : Source, optional
        The table's file, named in the message (:data:`FORAGE_CLASS_TABLE` when None).
    """
    overrides = forage_classes["stratum"].astype(str)
    index = first_index((overrides != "") & ~overrides.isin(strata))
    if index is None:
        return
    value = overrides.iloc[index]
    close = difflib.get_close_matches(value, sorted(strata), n=1)
    hint = f"; did you mean {close[0]!r}?" if close else ""
    raise row_error(
        f"stratum override {value!r} is not a stratum of the strata map{hint}",
        FORAGE_CLASS_TABLE if source is None else source,
        index,
        "stratum",
        expected="a stratum of the strata map (" + ", ".join(map(repr, sorted(strata))) + ")",
        found=repr(value),
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
    row_stratum_ha : array, shape (rows, patch types) [ha], optional
        Accessible hectares of each patch type (a stratum, or a stratum under a
        treatment variant) in each row, when the supply is stratum means ×
        hectares (lets the supply be re-drawn, e.g. by the bootstrap).
    strata : list of str, optional
        Column labels of ``row_stratum_ha`` (see :func:`patch_type_labels`).
    use_cap : array, shape (rows, items), optional
        Fraction of ``available_kg`` that may be used, where it differs from the items'
        allowable use: after other herbivores have eaten (:mod:`nutricap.model.shared_range`)
        [-].
    """

    unit_ids: np.ndarray
    row_unit: np.ndarray
    items: ForageItems
    available_kg: np.ndarray
    row_stratum_ha: np.ndarray | None = None
    strata: list[str] | None = None
    use_cap: np.ndarray | None = None

    @property
    def allowable_fraction(self) -> np.ndarray:
        """Fraction of each row's available forage that may be used [-], (items,) or
        (rows, items)."""
        return self.items.allowable_use if self.use_cap is None else self.use_cap

    def usable_kg(self) -> np.ndarray:
        """Forage of each row that may be used, available × allowable fraction [kg],
        (rows,)."""
        if self.use_cap is None:
            return self.available_kg @ self.items.allowable_use
        return (self.available_kg * self.use_cap).sum(axis=1)

    def sum_by_unit(self, values: np.ndarray) -> np.ndarray:
        """Sum per-row ``values`` (rows, ...) into units (units, ...)."""
        totals = np.zeros((self.unit_ids.size, *values.shape[1:]))
        np.add.at(totals, self.row_unit, values)
        return totals


@dataclass(frozen=True)
class DietGroup:
    """A named group of forage classes (listed, or all of one growth form) and the share of
    the diet it must make up: ``min_share · Σx <= Σ_{i in group} x_i <= max_share · Σx``."""

    name: str
    classes: frozenset[str]
    growth_form: str | None
    min_share: float
    max_share: float


@dataclass(frozen=True)
class DietLimits:
    """The diet-composition limits of the project file's ``[diet]`` table."""

    groups: tuple[DietGroup, ...] = ()

    def scaled(self, factor: float) -> DietLimits:
        """Every group's minimum and maximum share × ``factor``, at most 1 (the sensitivity's
        move of the limits)."""
        return DietLimits(
            tuple(
                replace(
                    group,
                    min_share=min(group.min_share * factor, 1.0),
                    max_share=min(group.max_share * factor, 1.0),
                )
                for group in self.groups
            )
        )

    def membership(self, items: ForageItems) -> np.ndarray:
        """Which items belong to each group, bool (groups, items)."""
        return np.array(
            [
                np.isin(items.forage_class, list(group.classes))
                | (items.growth_form == group.growth_form)
                for group in self.groups
            ],
            dtype=bool,
        ).reshape(len(self.groups), items.size)


def composition_limits(items: ForageItems, diet: DietLimits | None) -> dict[str, np.ndarray]:
    """The keyword arguments of :func:`nutritional_capacity` for the diet-composition limits:
    none when no item has a share below 1 and no group is given (the plain solve).

    A forage class's ``max_diet_share`` bounds the whole class, x_c <= s_c Σx. A class that is
    one item keeps it as that item's share; a class grown in several strata (several items)
    becomes one more group over its items (maximum s_c), since capping each item at s_c would
    let the class as a whole exceed it.
    """
    shares = items.max_diet_share
    rows, lows, highs = [], [], []
    if diet is not None and diet.groups:
        rows.append(diet.membership(items))
        lows += [group.min_share for group in diet.groups]
        highs += [group.max_share for group in diet.groups]
    item_shares = None
    if shares is not None and (shares < 1).any():
        item_shares = shares.copy()
        for name in np.unique(items.forage_class[shares < 1]):
            members = items.forage_class == name
            if members.sum() > 1:
                rows.append(members[None, :])
                lows.append(0.0)
                highs.append(float(shares[members].min()))
                item_shares[members] = 1.0
    limits = {}
    if item_shares is not None and (item_shares < 1).any():
        limits["max_diet_share"] = item_shares
    if rows:
        limits["diet_groups"] = np.vstack(rows).astype(bool)
        limits["min_group_share"] = np.array(lows, dtype=float)
        limits["max_group_share"] = np.array(highs, dtype=float)
    return limits


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
    pieces = areas.by_unit_stratum.assign(variant="")
    return problem_from_pieces(areas.units["unit_id"].to_numpy(), pieces, items, mode)


def problem_from_pieces(
    unit_ids: np.ndarray, pieces: pd.DataFrame, items: ForageItems, mode: str
) -> CapacityProblem:
    """The capacity problem from pieces of land and the items that grow on them.

    Parameters
    ----------
    unit_ids : array, shape (units,)
    pieces : DataFrame
        ``unit_id, stratum, variant, accessible_ha``: accessible hectares of each
        patch type (stratum and treatment variant) in each unit.
    items : ForageItems
        Every item of every patch type that occurs in ``pieces``.
    mode : {"unit", "patch"}
        One row per unit, or one row per unit × patch type.
    """
    types = patch_type_labels(pieces["stratum"].to_numpy(), pieces["variant"].to_numpy())
    labels = sorted(set(types) | set(items.patch_type))
    type_index = pd.Index(labels).get_indexer(types)
    unit_index = pd.Index(unit_ids).get_indexer(pieces["unit_id"])
    accessible = pieces["accessible_ha"].to_numpy(dtype=float)
    if mode == "unit":
        row_unit = np.arange(unit_ids.size)
        row_of_piece = unit_index
    else:
        keys = pd.MultiIndex.from_arrays([unit_index, type_index])
        unique_keys, row_of_piece = np.unique(keys.to_numpy(), return_inverse=True)
        row_unit = np.array([key[0] for key in unique_keys], dtype=int)
    hectares = np.zeros((row_unit.size, len(labels)))
    np.add.at(hectares, (row_of_piece, type_index), accessible)
    available = available_forage_kg(items, hectares, labels)
    return CapacityProblem(unit_ids, row_unit, items, available, hectares, labels)


def solve_problem(
    problem: CapacityProblem,
    *,
    intake_kg_per_day: float,
    maintenance_de_kcal_per_day: float,
    de_min_kcal_per_g: float,
    dp_min_pct: float | None,
    cap_at_allowable_use: bool,
    diet: DietLimits | None = None,
) -> Solution:
    """NCC, ECC and allowable-use capacity of every row of ``problem``, NCC within the items'
    ``max_diet_share`` and the ``diet`` groups' shares when given."""
    items = problem.items
    ncc = nutritional_capacity(
        problem.available_kg,
        items.de_kcal_per_g,
        intake_kg_per_day,
        de_min_kcal_per_g,
        dp_pct=items.dp_pct if dp_min_pct is not None else None,
        dp_min_pct=dp_min_pct,
        use_cap=problem.allowable_fraction if cap_at_allowable_use else None,
        **composition_limits(items, diet),
    )
    ecc = ecological_capacity(
        problem.available_kg, items.de_kcal_per_g, maintenance_de_kcal_per_day
    )
    allowable = allowable_use_capacity(
        problem.available_kg, problem.allowable_fraction, intake_kg_per_day
    )
    return Solution(ncc, ecc, allowable)


def available_forage_kg(
    items: ForageItems, row_type_hectares: np.ndarray, patch_types: list[str]
) -> np.ndarray:
    """Available dry forage of every item in every row [kg].

    Parameters
    ----------
    items : ForageItems
    row_type_hectares : array, shape (rows, patch types)
        Accessible hectares of each patch type in each row (unit or patch) [ha].
    patch_types : list of str
        Column labels of ``row_type_hectares``.

    Returns
    -------
    array, shape (rows, items) [kg]
        ``hectares[row, patch type(item)] × biomass[item]`` (kg/ha × ha = kg).
    """
    column = pd.Index(patch_types).get_indexer(items.patch_type)
    return row_type_hectares[:, column] * items.biomass_kg_per_ha[None, :]
