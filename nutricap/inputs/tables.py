"""The three CSV tables of a project: forage classes, clip plots, animal classes.

Each reader declares its columns (see :mod:`nutricap.inputs.columns`) and checks the
relations inside the table (unique ids, one of two alternative columns).
Relations between tables (a plot's forage class must be in the forage-class
table) are checked in :mod:`nutricap.landscape.plots`.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from nutricap.errors import TableError
from nutricap.inputs.columns import Column, Source, check_unique, read_csv_table
from nutricap.inputs.table_source import first_index, row_error
from nutricap.science.forage_quality import (
    GROSS_ENERGY_KCAL_PER_G_DEFAULT,
    digestible_energy_kcal_per_g,
    digestible_protein_pct,
)
from nutricap.science.supply import biomass_kg_per_ha

FORAGE_CLASS_COLUMNS = [
    Column("forage_class", "text", meaning="name of the forage class"),
    Column.optional("growth_form", "text"),
    Column.optional(
        "de_kcal_per_g", above=0, maximum=5, meaning="digestible energy, kcal per g dry matter"
    ),
    Column.optional("dmd_pct", above=0, maximum=100, meaning="dry-matter digestibility, percent"),
    Column.optional(
        "gross_energy_kcal_per_g", above=3, maximum=6, meaning="gross energy, kcal per g dry matter"
    ),
    Column(
        "cp_pct",
        minimum=0,
        maximum=60,
        allow_blank=True,
        meaning="crude protein, percent of dry matter",
    ),
    Column(
        "allowable_use",
        minimum=0,
        maximum=1,
        meaning="fraction of current growth that may be used, 0 to 1",
    ),
    Column.optional("key", "flag"),
    Column.optional("height_cm", above=0, maximum=3000, meaning="forage height, cm, above 0"),
    Column.optional(
        "tannin", minimum=0, maximum=1, meaning="tannin protein precipitation, mg BSA per mg forage"
    ),
    Column.optional(
        "preference",
        above=0,
        maximum=1000,
        meaning="relative preference weight for allocating current use, > 0 (default 1)",
    ),
    Column.optional("stratum", "text"),
    Column.optional(
        "max_diet_share",
        minimum=0,
        maximum=1,
        meaning="largest share of the diet the class may make up, 0 to 1 (default 1)",
    ),
]

PLOT_COLUMNS = [
    Column("plot_id", "text", meaning="plot identifier"),
    Column("stratum", "text", meaning="vegetation stratum of the plot"),
    Column(
        "forage_class",
        "text",
        allow_blank=True,
        meaning="forage class clipped (empty on the one row of a bare plot)",
    ),
    Column.optional(
        "dry_mass_g", minimum=0, maximum=100_000, meaning="oven-dry mass in the frame, g"
    ),
    Column.optional("frame_area_m2", above=0, maximum=10_000, meaning="frame area, m²"),
    Column.optional("biomass_kg_per_ha", minimum=0, maximum=100_000, meaning="dry biomass, kg/ha"),
]

ANIMAL_CLASS_COLUMNS = [
    Column("animal_class", "text", meaning="name of the animal class"),
    Column("body_mass_kg", minimum=1, maximum=2000, meaning="live body mass, kg"),
    Column("share", minimum=0, maximum=1, meaning="share of the herd, 0 to 1"),
    Column("state", "text", meaning="reproductive state, e.g. maintenance, gestation, lactation"),
    Column.optional(
        "intake_kg_per_day",
        above=0,
        maximum=60,
        meaning="dry-matter intake override, kg per animal per day",
    ),
]


def read_forage_classes(path: Source) -> pd.DataFrame:
    """Read the forage-class table and derive DE [kcal/g] and DP [%] for every row.

    Rows with a blank ``stratum`` hold a class's values; rows with a stratum
    override them for that stratum. ``de_kcal_per_g`` is taken as given, or
    computed from ``dmd_pct`` × gross energy when only ``dmd_pct`` is given.
    """
    table = read_csv_table(path, FORAGE_CLASS_COLUMNS, what="forage-class table")
    optional = ("de_kcal_per_g", "dmd_pct", "tannin", "height_cm", "gross_energy_kcal_per_g")
    for name in (*optional, "max_diet_share"):
        if name not in table.columns:
            table[name] = np.nan
    table["preference"] = table.get("preference", pd.Series(np.nan, index=table.index)).fillna(1.0)
    for name in ("stratum", "growth_form"):
        if name not in table.columns:
            table[name] = ""
    if "key" not in table.columns:
        table["key"] = False
    check_unique(table, ["forage_class", "stratum"], path)
    _refuse_fractions_as_percent(table, ("dmd_pct", "cp_pct"), path)
    _require_energy(table, path)
    derive = table["de_kcal_per_g"].isna()
    if derive.any():
        gross = table.loc[derive, "gross_energy_kcal_per_g"].fillna(GROSS_ENERGY_KCAL_PER_G_DEFAULT)
        table.loc[derive, "de_kcal_per_g"] = digestible_energy_kcal_per_g(
            table.loc[derive, "dmd_pct"].to_numpy(), gross.to_numpy()
        )
    table["dp_pct"] = digestible_protein_pct(
        table["cp_pct"].fillna(0.0).to_numpy(), table["tannin"].fillna(0.0).to_numpy()
    )
    _require_class_rows(table, path)
    return table


def _refuse_fractions_as_percent(table: pd.DataFrame, names: tuple[str, ...], path: Path) -> None:
    """Refuse a percent value above 0 and at most 1: a fraction typed as percent.

    Forage dry-matter digestibility and crude protein lie well above 1 % (cured grasses and
    browse in winter keep a few percent of crude protein and a digestibility above 20 %; from
    memory), so 0.48 almost surely means 48 %. An explicit 0 stays allowed.
    """
    for name in names:
        values = table[name].to_numpy(dtype=float)
        index = first_index((values > 0) & (values <= 1))
        if index is not None:
            raise row_error(
                "a value of 1 % or less: a fraction given instead of percent?",
                path,
                index,
                name,
                expected="percent of dry matter (48 for 48 %)",
                found=f"{values[index]:g}",
            )


def _require_energy(table: pd.DataFrame, path: Path) -> None:
    index = first_index(table["de_kcal_per_g"].isna() & table["dmd_pct"].isna())
    if index is not None:
        raise row_error(
            "no energy value",
            path,
            index,
            ("de_kcal_per_g", "dmd_pct"),
            expected="de_kcal_per_g, or dmd_pct to compute it from",
            found="both empty",
        )


def _require_class_rows(table: pd.DataFrame, path: Path) -> None:
    classes = set(table.loc[table["stratum"] == "", "forage_class"])
    overrides = table[table["stratum"] != ""]
    orphans = ~overrides["forage_class"].isin(classes)
    if orphans.any():
        index = overrides.index[orphans.to_numpy()][0]
        raise row_error(
            "stratum-specific row for a class without a general row",
            path,
            index,
            "forage_class",
            expected="a row with the same forage_class and an empty stratum",
            found=repr(table.at[index, "forage_class"]),
        )


def header_problem(message: str, path: Path, table: pd.DataFrame, expected: str) -> TableError:
    """The error of a header that lacks the columns ``expected`` (found: the columns it has)."""
    return TableError(
        message,
        source=path,
        location="row 1 (header)",
        expected=expected,
        found="columns " + ", ".join(repr(name) for name in table.columns),
    )


def read_plots(path: Source) -> pd.DataFrame:
    """Read the clip-plot table; return it with a ``biomass_kg_per_ha`` column.

    Each row gives its biomass one way: ``dry_mass_g`` with ``frame_area_m2``, or
    ``biomass_kg_per_ha``. A row that fills both is refused, even when the two agree: which one
    is meant cannot be told, and a tolerance for agreement would be a guess at how the values
    were rounded (:func:`refuse_two_biomasses`). Rows may differ in the way they use.
    """
    table = read_csv_table(path, PLOT_COLUMNS, what="plots table")
    has_frame = {"dry_mass_g", "frame_area_m2"} <= set(table.columns)
    has_direct = "biomass_kg_per_ha" in table.columns
    if not has_frame and not has_direct:
        raise header_problem(
            "no biomass columns", path, table, "dry_mass_g and frame_area_m2, or biomass_kg_per_ha"
        )
    direct = table["biomass_kg_per_ha"] if has_direct else pd.Series(np.nan, index=table.index)
    if has_frame:
        _require_pairs(table, path)
        framed = biomass_kg_per_ha(
            table["dry_mass_g"].to_numpy(), table["frame_area_m2"].to_numpy()
        )
        refuse_two_biomasses(direct, framed, path)
        _require_plausible_framed_biomass(table, framed, path)
        direct = direct.fillna(pd.Series(framed, index=table.index))
    require_biomass(direct, path)
    table["biomass_kg_per_ha"] = direct
    check_unique(table, ["plot_id", "forage_class"], path)
    _require_one_stratum_per_plot(table, path)
    _require_bare_rows_bare(table, path)
    return table


def require_biomass(biomass_kg_per_ha: pd.Series, path: Source) -> None:
    """Every row has a biomass: given directly, or from mass and frame area (NaN: neither)."""
    index = first_index(biomass_kg_per_ha.isna())
    if index is not None:
        raise row_error(
            "no biomass value",
            path,
            index,
            expected="dry_mass_g with frame_area_m2, or biomass_kg_per_ha",
            found="empty cells",
        )


def refuse_two_biomasses(
    direct_kg_per_ha: pd.Series, framed_kg_per_ha: np.ndarray, path: Source
) -> None:
    """Refuse a row with a biomass both given directly and from mass and frame area.

    Parameters
    ----------
    direct_kg_per_ha : pandas.Series
        ``biomass_kg_per_ha`` of each row [kg/ha]; NaN where blank.
    framed_kg_per_ha : numpy.ndarray
        ``10 × dry_mass_g / frame_area_m2`` of each row [kg/ha]; NaN where blank.
    path : Source
        The table, named in the message.

    Notes
    -----
    Any row with both is refused, whether or not the two values agree (the simplest rule a
    user can predict; leaving one of the two cells blank fixes it).
    """
    both = direct_kg_per_ha.notna().to_numpy() & ~np.isnan(framed_kg_per_ha)
    index = first_index(both)
    if index is not None:
        raise row_error(
            "biomass given twice",
            path,
            index,
            ("dry_mass_g", "frame_area_m2", "biomass_kg_per_ha"),
            expected="dry_mass_g with frame_area_m2, or biomass_kg_per_ha, not both",
            found=(
                f"{framed_kg_per_ha[index]:g} kg/ha from mass and frame area and "
                f"{direct_kg_per_ha.iloc[index]:g} kg/ha given directly"
            ),
        )


def _require_bare_rows_bare(table: pd.DataFrame, path: Path) -> None:
    """A row with an empty ``forage_class`` records a bare plot: mass 0, the plot's only row.

    Such a plot counts as zero of every class in its stratum (docs/inputs.md).
    """
    bare = (table["forage_class"] == "").to_numpy()
    if not bare.any():
        return
    index = first_index(bare & (table["biomass_kg_per_ha"].to_numpy() > 0))
    if index is not None:
        raise row_error(
            "forage without a forage class",
            path,
            index,
            "forage_class",
            expected="a forage class, or mass 0 on the one row of a bare plot",
            found=f"an empty cell with {table['biomass_kg_per_ha'].iloc[index]:g} kg/ha",
        )
    bare_plots = set(table.loc[bare, "plot_id"])
    index = first_index(~bare & table["plot_id"].isin(bare_plots))
    if index is not None:
        raise row_error(
            "plot recorded both as bare and with a forage class",
            path,
            index,
            "forage_class",
            expected="one row with an empty forage_class for a bare plot, or rows with classes",
            found=f"plot {table['plot_id'].iloc[index]!r} also on a row with an empty forage_class",
        )


def _require_pairs(table: pd.DataFrame, path: Path) -> None:
    mass, area = table["dry_mass_g"], table["frame_area_m2"]
    index = first_index(mass.notna() & area.isna())
    if index is not None:
        raise row_error(
            "dry mass without a frame area",
            path,
            index,
            "frame_area_m2",
            expected="the frame area in m² (greater than 0)",
            found="an empty cell",
        )


def _require_plausible_framed_biomass(
    table: pd.DataFrame, framed_kg_per_ha: np.ndarray, path: Path
) -> None:
    """Biomass from mass and frame obeys the range of ``biomass_kg_per_ha`` (units mixed up?)."""
    limit = next(c.maximum for c in PLOT_COLUMNS if c.name == "biomass_kg_per_ha")
    index = first_index(framed_kg_per_ha > limit)
    if index is not None:
        mass, area = table["dry_mass_g"].iloc[index], table["frame_area_m2"].iloc[index]
        raise row_error(
            "biomass out of range; is the mass in grams and the frame area in m²?",
            path,
            index,
            ("dry_mass_g", "frame_area_m2"),
            expected=f"at most {limit:g} kg/ha (10 × dry_mass_g / frame_area_m2)",
            found=f"{framed_kg_per_ha[index]:g} kg/ha from {mass:g} g in {area:g} m²",
        )


def _require_one_stratum_per_plot(table: pd.DataFrame, path: Path) -> None:
    first = table.groupby("plot_id")["stratum"].transform("first")
    index = first_index(table["stratum"] != first)
    if index is not None:
        raise row_error(
            "plot recorded in two strata",
            path,
            index,
            "stratum",
            expected=f"stratum {first.iloc[index]!r} as in the plot's first row",
            found=repr(table["stratum"].iloc[index]),
        )


def read_animal_classes(path: Source) -> pd.DataFrame:
    """Read the animal-class table (herd composition)."""
    table = read_csv_table(path, ANIMAL_CLASS_COLUMNS, what="animal-class table")
    if "intake_kg_per_day" not in table.columns:
        table["intake_kg_per_day"] = np.nan
    check_unique(table, ["animal_class"], path)
    if table.empty or table["share"].sum() <= 0:
        raise TableError(
            "herd shares add up to zero",
            source=path,
            location="column 'share'",
            expected="shares of the herd that add up to 1",
            found=f"sum {table['share'].sum():g}",
        )
    total = table["share"].sum()
    if abs(total - 1.0) > 0.01:
        raise TableError(
            "herd shares do not add up to 1",
            source=path,
            location="column 'share'",
            expected="a sum of 1 (within 0.01)",
            found=f"sum {total:g}",
        )
    return table


HERD_NUMBER_COLUMNS = [
    Column("unit_id", "text", meaning="management unit the herd uses"),
    Column(
        "animals",
        required=False,
        minimum=0,
        maximum=1e7,
        meaning="animals of the other herd in the unit",
    ),
    Column("aums", required=False, minimum=0, maximum=1e8, meaning="animal-unit months"),
]


def read_herd_numbers(path: Path) -> tuple[pd.DataFrame, str]:
    """Read a table of another herd's numbers per unit: ``unit_id`` and ``animals`` or ``aums``.

    Returns
    -------
    table : DataFrame
        ``unit_id`` and the numbers column (each unit at most once).
    kind : {"animals", "aums"}
        Which numbers the table holds.
    """
    table = read_csv_table(path, HERD_NUMBER_COLUMNS, what="herd numbers table")
    kinds = [name for name in ("animals", "aums") if name in table.columns]
    if len(kinds) != 1:
        raise header_problem(
            "a herd numbers table needs one numbers column",
            path,
            table,
            "a column 'animals' (head per unit) or 'aums' (animal-unit months), not both",
        )
    check_unique(table, ["unit_id"], path)
    return table[["unit_id", kinds[0]]], kinds[0]
