"""Treatment scenarios: capacity over the years after thinning, burning or seeding.

A scenario (``[scenarios.NAME]`` in the project file) names a layer of
treatment polygons (``treatment``, ``year``, optional ``new_stratum``) and a
response table (by treatment, forage class or growth form, and years since
treatment: biomass multiplier, DE shift, CP shift). For each year of the span,
the treated part of every stratum piece becomes a patch of its own — in its new
stratum when the treatment changes it — whose forage is the stratum's plot
mean × the multiplier, with shifted quality; the problem is solved again and
set beside the baseline.
"""

from __future__ import annotations

import difflib
from collections.abc import Sequence
from dataclasses import dataclass, replace

import geopandas as gpd
import numpy as np
import pandas as pd

from nutricap.errors import InputError, SpatialError
from nutricap.inputs.columns import (
    FIRST_YEAR,
    LAST_YEAR,
    Column,
    Source,
    check_unique,
    read_csv_table,
    shown_value,
)
from nutricap.inputs.project import Project
from nutricap.inputs.project_schema import ScenarioSection
from nutricap.inputs.table_source import first_index, row_error
from nutricap.inputs.tables import read_forage_classes
from nutricap.landscape.layer_files import feature_error
from nutricap.landscape.vectors import (
    M2_PER_HA,
    StratumAreas,
    check_no_overlaps,
    read_layer,
    to_area_crs,
)
from nutricap.model.problem import ForageItems, problem_from_pieces
from nutricap.science.forage_quality import digestible_protein_pct
from nutricap.science.treatment import response_at

RESPONSE_COLUMNS = [
    Column("treatment", "text", meaning="treatment type, as in the treatments layer"),
    Column.optional("forage_class", "text"),
    Column.optional("growth_form", "text"),
    Column("years_since", minimum=0, maximum=200, meaning="years since treatment, >= 0"),
    Column("biomass_multiplier", minimum=0, maximum=50, meaning="biomass × this, >= 0"),
    Column.optional(
        "de_shift_kcal_per_g", minimum=-3, maximum=3, meaning="change of digestible energy, kcal/g"
    ),
    Column.optional(
        "cp_shift_pct",
        minimum=-30,
        maximum=30,
        meaning="change of crude protein, percentage points",
    ),
]
MAX_DE_KCAL_PER_G = 5.0


@dataclass(frozen=True)
class Scenario:
    """A scenario read and overlaid on the units' stratum pieces.

    Attributes
    ----------
    name : str
    section : ScenarioSection
    treated : DataFrame
        ``unit_id, stratum, new_stratum, treatment, year, accessible_ha`` of every
        treated piece.
    responses : DataFrame
        The response table.
    treatments : GeoDataFrame, optional
        The treatment polygons (``treatment``, ``year``), for the report's map.
    """

    name: str
    section: ScenarioSection
    treated: pd.DataFrame
    responses: pd.DataFrame
    treatments: gpd.GeoDataFrame | None = None


def load_scenario(project: Project, name: str, areas: StratumAreas, strata: list[str]) -> Scenario:
    """Read a scenario's layer and table, check them, and overlay the treatments."""
    return treated_scenario(name, *read_scenario(project, name, strata), areas)


def treated_scenario(
    name: str,
    section: ScenarioSection,
    treatments: gpd.GeoDataFrame,
    responses: pd.DataFrame,
    areas: StratumAreas,
) -> Scenario:
    """The scenario ``name`` (read by :func:`read_scenario`) with its treatments overlaid on
    the units × strata of ``areas``."""
    treatments = to_area_crs(treatments, areas.area_crs)
    treated = overlay_treatments(areas, treatments)
    return Scenario(name, section, treated, responses, treatments)


def off_unit_notes(scenarios: Sequence[Scenario], units: gpd.GeoDataFrame) -> list[str]:
    """Notes on treatment polygons that touch no management unit: they change nothing, which
    usually means a mix-up of CRS or of files."""
    notes = []
    for scenario in scenarios:
        layer = scenario.treatments
        if layer is None or layer.empty:
            continue
        if units.crs is not None and layer.crs is not None and layer.crs != units.crs:
            layer = layer.to_crs(units.crs)
        touched = set(units.sindex.query(layer.geometry, predicate="intersects")[0].tolist())
        off = [number + 1 for number in range(len(layer)) if number not in touched]
        if off:
            shown = ", ".join(map(str, off[:10])) + (" …" if len(off) > 10 else "")
            notes.append(
                f"scenario {scenario.name!r}: {len(off)} of {len(layer)} treatment polygon(s) "
                f"lie on no management unit (feature(s) {shown}) and change nothing (a mix-up "
                "of CRS or of files?)"
            )
    return notes


def read_scenario(
    project: Project,
    name: str,
    strata: list[str],
    forage_classes: pd.DataFrame | None = None,
) -> tuple[ScenarioSection, gpd.GeoDataFrame, pd.DataFrame]:
    """A scenario's section, treatment polygons and response table, read and checked
    (every treatment type has responses; every response's forage class or growth form is in
    the project's forage-class table, ``forage_classes`` as read already, or read here when
    None; ``new_stratum`` is empty or one of ``strata``)."""
    section = scenario_section(project, name)
    treatments_path = (project.folder / section.treatments).resolve()
    responses_path = (project.folder / section.responses).resolve()
    if forage_classes is None:
        forage_classes = read_forage_classes(project.source("forage_classes"))
    responses = read_responses(
        project.source("treatment_responses", responses_path),
        known={
            "forage_class": set(forage_classes["forage_class"]),
            "growth_form": set(forage_classes["growth_form"]) - {""},
        },
    )
    treatments_path = project.source("treatments", treatments_path)
    treatments = read_treatments(treatments_path, section.treatments_layer, strata)
    known = set(responses["treatment"])
    missing = sorted(set(treatments["treatment"]) - known)
    if missing:
        raise SpatialError(
            f"treatment {missing[0]!r} has no rows in the response table {responses_path}",
            source=treatments_path,
            location="attribute 'treatment'",
            expected="one of " + ", ".join(map(repr, sorted(known))),
            found=repr(missing[0]),
        )
    return section, treatments, responses


def scenario_section(project: Project, name: str) -> ScenarioSection:
    """The ``[scenarios.NAME]`` section of ``name``; one message when there is none."""
    scenarios = project.config.scenarios
    if name not in scenarios:
        known = ", ".join(map(repr, sorted(scenarios))) or "none"
        raise InputError(
            f"no scenario named {name!r}",
            source=project.path,
            location=f"key 'scenarios.{name}'",
            expected=f"one of the scenarios in the project file ({known})",
            found=repr(name),
        )
    return scenarios[name]


def read_responses(path: Source, known: dict[str, set[str]] | None = None) -> pd.DataFrame:
    """Read the response table; each row names a forage class or a growth form, not both.

    ``known``: the names each of ``forage_class`` and ``growth_form`` may take (those of the
    forage-class table); a row naming another is refused, since it would match no forage and
    its response would silently not apply. Not checked when None.
    """
    table = read_csv_table(path, RESPONSE_COLUMNS, what="treatment-response table")
    for name in ("forage_class", "growth_form"):
        if name not in table.columns:
            table[name] = ""
    for name in ("de_shift_kcal_per_g", "cp_shift_pct"):
        table[name] = table.get(name, pd.Series(0.0, index=table.index)).fillna(0.0)
    index = first_index((table["forage_class"] != "") == (table["growth_form"] != ""))
    if index is not None:
        raise row_error(
            "a response row must name a forage class or a growth form",
            path,
            index,
            ("forage_class", "growth_form"),
            expected="exactly one of the two filled",
            found="both" if table["forage_class"].iloc[index] else "neither",
        )
    for column, names in (known or {}).items():
        _require_known_names(table, column, names, path)
    keys = ["treatment", "forage_class", "growth_form", "years_since"]
    check_unique(table, keys, path)
    return table.sort_values(keys, kind="stable").reset_index(drop=True)


def _require_known_names(table: pd.DataFrame, column: str, names: set[str], path: Source) -> None:
    """Refuse the first non-blank ``column`` value of a response row that is not in ``names``."""
    values = table[column]
    index = first_index((values != "") & ~values.isin(names))
    if index is None:
        return
    value = values.iloc[index]
    close = difflib.get_close_matches(str(value), sorted(names), n=1)
    hint = f"; did you mean {close[0]!r}?" if close else ""
    what = column.replace("_", " ")
    listed = ", ".join(map(repr, sorted(names))) or "none given"
    raise row_error(
        f"unknown {what} {value!r}{hint}",
        path,
        index,
        column,
        expected=f"a {what} of the forage-class table ({listed})",
        found=repr(value),
    )


def read_treatments(path: Source, layer: str | None, strata: list[str]) -> gpd.GeoDataFrame:
    """Read the treatment polygons.

    Attributes: ``treatment`` (type), whole-number ``year``, optional ``new_stratum``.
    """
    frame = read_layer(
        path,
        layer=layer,
        columns=["treatment", "year"],
        optional=("new_stratum",),
        what="treatments layer",
    )
    empty = frame["treatment"].isna().to_numpy()
    if empty.any():
        raise feature_error(
            "treatment polygon without a treatment type",
            path,
            frame,
            empty,
            "treatment",
            expected="the treatment's type, as named in the response table",
            found="an empty (NULL) value",
        )
    frame["treatment"] = frame["treatment"].astype(str).str.strip()
    years = pd.to_numeric(frame["year"], errors="coerce").to_numpy(dtype=float)
    with np.errstate(invalid="ignore"):
        bad = ~np.isfinite(years) | (years != np.round(years))
        bad |= (years < FIRST_YEAR) | (years > LAST_YEAR)
    if bad.any():
        raise feature_error(
            "treatment year is not a calendar year",
            path,
            frame,
            bad,
            "year",
            expected=f"a whole year from {FIRST_YEAR} to {LAST_YEAR}, such as 2027",
            found=shown_value(frame["year"][bad].iloc[0]),
        )
    frame["year"] = years.astype(int)
    if "new_stratum" not in frame.columns:
        frame["new_stratum"] = ""
    frame["new_stratum"] = frame["new_stratum"].fillna("").astype(str).str.strip()
    unknown = ~frame["new_stratum"].isin(["", *strata]).to_numpy()
    if unknown.any():
        raise feature_error(
            "new_stratum is not a stratum with plots",
            path,
            frame,
            unknown,
            "new_stratum",
            expected="empty, or one of " + ", ".join(map(repr, strata)),
            found=repr(frame["new_stratum"][unknown].iloc[0]),
        )
    check_no_overlaps(frame.assign(_id=np.arange(1, len(frame) + 1)), "_id", path, "treatments")
    return frame


def overlay_treatments(areas: StratumAreas, treatments: gpd.GeoDataFrame) -> pd.DataFrame:
    """Accessible hectares of every stratum piece under every treatment polygon."""
    pieces = areas.pieces[["unit_id", "stratum", "accessible_fraction", "geometry"]]
    treated = gpd.overlay(
        pieces,
        treatments[["treatment", "year", "new_stratum", "geometry"]],
        how="intersection",
        keep_geom_type=True,
    )
    treated["accessible_ha"] = treated.geometry.area / M2_PER_HA * treated["accessible_fraction"]
    columns = ["unit_id", "stratum", "new_stratum", "treatment", "year"]
    return treated.groupby(columns, as_index=False)["accessible_ha"].sum()


def pieces_in_year(base: pd.DataFrame, treated: pd.DataFrame, year: int) -> pd.DataFrame:
    """Land by unit, patch type and variant in ``year``: treated parts moved to their own patches.

    Returns ``unit_id, stratum, variant, accessible_ha, treatment, years_since``.
    """
    done = treated[treated["year"] <= year]
    untreated = base[["unit_id", "stratum", "accessible_ha"]].copy()
    removed = done.groupby(["unit_id", "stratum"])["accessible_ha"].sum()
    keys = pd.MultiIndex.from_frame(untreated[["unit_id", "stratum"]])
    untreated["accessible_ha"] = np.maximum(
        untreated["accessible_ha"].to_numpy() - removed.reindex(keys).fillna(0.0).to_numpy(), 0.0
    )
    untreated = untreated.assign(variant="", treatment="", years_since=np.nan)
    moved = pd.DataFrame(
        {
            "unit_id": done["unit_id"],
            "stratum": np.where(done["new_stratum"] != "", done["new_stratum"], done["stratum"]),
            "variant": done["treatment"] + " " + done["year"].astype(str),
            "accessible_ha": done["accessible_ha"],
            "treatment": done["treatment"],
            "years_since": year - done["year"],
        }
    )
    return pd.concat([untreated, moved], ignore_index=True)


def treated_items(base: ForageItems, pieces: pd.DataFrame, responses: pd.DataFrame) -> ForageItems:
    """The baseline items plus, for every treated patch type, its items under the response."""
    parts = [base]
    variants = pieces[pieces["variant"] != ""].drop_duplicates(["stratum", "variant"])
    for row in variants.itertuples():
        items = base.subset((base.stratum == row.stratum) & (base.variant == ""))
        parts.append(
            respond(
                items,
                responses[responses["treatment"] == row.treatment],
                row.years_since,
                row.variant,
            )
        )
    return ForageItems.concatenate(parts)


def respond(
    items: ForageItems, responses: pd.DataFrame, years_since: float, variant: str
) -> ForageItems:
    """``items`` of one stratum ``years_since`` years after a treatment."""
    multiplier, de_shift, cp_shift = response_factors(items, responses, years_since)
    cp = np.maximum(items.cp_pct + cp_shift, 0.0)
    return replace(
        items,
        biomass_kg_per_ha=items.biomass_kg_per_ha * multiplier,
        de_kcal_per_g=np.clip(items.de_kcal_per_g + de_shift, 0.0, MAX_DE_KCAL_PER_G),
        cp_pct=cp,
        dp_pct=np.where(cp_shift != 0, digestible_protein_pct(cp, items.tannin), items.dp_pct),
        variant=np.full(items.size, variant, dtype=object),
    )


def response_factors(
    items: ForageItems, responses: pd.DataFrame, years_since: float
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Biomass multiplier, DE shift [kcal/g] and CP shift [percentage points] of each item
    ``years_since`` years after the treatment of ``responses`` (1, 0, 0 without rows)."""
    multiplier = np.ones(items.size)
    de_shift = np.zeros(items.size)
    cp_shift = np.zeros(items.size)
    for index in range(items.size):
        rows = _response_rows(responses, items.forage_class[index], items.growth_form[index])
        if rows.empty:
            continue
        years = rows["years_since"].to_numpy()
        multiplier[index] = response_at(years, rows["biomass_multiplier"], years_since, 1.0)
        de_shift[index] = response_at(years, rows["de_shift_kcal_per_g"], years_since, 0.0)
        cp_shift[index] = response_at(years, rows["cp_shift_pct"], years_since, 0.0)
    return multiplier, de_shift, cp_shift


def _response_rows(responses: pd.DataFrame, forage_class: str, growth_form: str) -> pd.DataFrame:
    """Rows for the class if there are any, else rows for its growth form."""
    by_class = responses[responses["forage_class"] == forage_class]
    if not by_class.empty:
        return by_class
    if growth_form == "":
        return by_class
    return responses[responses["growth_form"] == growth_form]


def scenario_problem(
    scenario: Scenario, areas: StratumAreas, base: ForageItems, year: int, mode: str
):
    """The capacity problem of ``scenario`` in ``year``, and the pieces it was built from."""
    pieces = pieces_in_year(areas.by_unit_stratum, scenario.treated, year)
    items = treated_items(base, pieces, scenario.responses)
    problem = problem_from_pieces(areas.units["unit_id"].to_numpy(), pieces, items, mode)
    return problem, pieces


def years_since_latest_treatment(pieces: pd.DataFrame, unit_ids: np.ndarray) -> np.ndarray:
    """Per unit, years since its most recent treatment so far (NaN where none yet)."""
    treated = pieces[pieces["variant"] != ""]
    latest = treated.groupby("unit_id")["years_since"].min()
    return latest.reindex(unit_ids).to_numpy(dtype=float)


def treatment_years(scenarios: list[Scenario]) -> dict[str, list[int]]:
    """The calendar years in which each scenario treats land (of its treated pieces)."""
    return {
        scenario.name: sorted({int(year) for year in scenario.treated["year"]})
        for scenario in scenarios
    }
