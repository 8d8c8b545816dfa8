"""Provenance sections of the HTML report: every parameter with its source, and the run manifest.

The parameter tables list the nutritional-state, animal-class and forage-class values as
the estimate read them, and the thresholds and constants behind the equations; the
manifest section shows the command, seed, versions and the manifest JSON.
"""

from __future__ import annotations

import json
from collections.abc import Mapping
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd

from nutricap.report.formatting import (
    FORAGE_CLASS,
    ONE_DECIMAL,
    PROVENANCE,
    SOURCE,
    STATE,
    STRATUM,
    THREE_DECIMALS,
    TWO_DECIMALS,
    Column,
    format_text,
    numeric_column,
    table,
)
from nutricap.report.references import short_citation
from nutricap.science import energetics, forage_quality, supply

if TYPE_CHECKING:
    from nutricap.inputs.project import Project
    from nutricap.model.estimate import Estimate


# --- 12. parameters ---------------------------------------------------------------------------


def parameter_tables(
    estimate: Estimate, project: Project, animals: pd.DataFrame, forage: pd.DataFrame
) -> dict:
    """The parameters section: every parameter of the run with its provenance."""
    season = project.config.project.season
    inputs = project.config.inputs
    own_states = getattr(inputs, "nutritional_states", None)
    return {
        "states": _state_rows(estimate.requirement_table, animals, season, project),
        "states_file": (
            f"the project's own table {own_states.name}"
            if own_states is not None
            else "the packaged table nutritional_states.csv"
        ),
        "animals": _animal_rows(animals, project),
        "forage": _forage_rows(forage, project),
        "settings": _threshold_rows(estimate, project),
    }


def source_texts(estimate: Estimate, project: Project) -> list[str]:
    """Every source text the parameter tables of the run cite (for the reference list)."""
    texts = [str(text) for text in estimate.requirement_table["source"]]
    return texts + [row[2] for row in _threshold_values(estimate, project)]


STATE_COLUMNS = [
    STATE,
    Column("season", "Season"),
    numeric_column("bmr_multiplier", "m [× BMR]", TWO_DECIMALS),
    numeric_column("intake_g_per_kg075_per_day", "Intake i [g DM/kg^0.75/day]", ONE_DECIMAL),
    numeric_column("dp_g_per_kg075_per_day", "DP p [g/kg^0.75/day]", ONE_DECIMAL),
    Column("used_by", "Used by"),
    Column("scope", "Scope"),
    SOURCE,
]


def _state_rows(states: pd.DataFrame, animals: pd.DataFrame, season: str, project: Project) -> dict:
    """The run's nutritional-state table (packaged or the user's), rows in use flagged."""
    table_used = states
    states = states.copy()
    users: dict[tuple[str, str], list[str]] = {}
    target = project.config.target
    pairs = [(name, state) for name, state in zip(animals["animal_class"], animals["state"])]
    if target.state is not None:
        pairs.append((f"target ({target.animal_class})", target.state))
    for name, state in pairs:
        row = energetics.state_parameters(state, season, table=table_used)
        users.setdefault((row["state"], row["season"]), []).append(str(name))
    states["used_by"] = [
        ", ".join(users.get((s, z), [])) for s, z in zip(states["state"], states["season"])
    ]
    states["source"] = states["source"].map(short_citation)
    scopes = states["scope"].dropna().unique() if "scope" in states.columns else []
    columns = STATE_COLUMNS
    if len(scopes) == 1:  # one scope for every row: said once, in the caption
        columns = [column for column in STATE_COLUMNS if column.name != "scope"]
    rows = table(states, columns, flag=states["used_by"] != "")
    return {**rows, "scope": str(scopes[0]) if len(scopes) == 1 else None}


def _animal_rows(animals: pd.DataFrame, project: Project) -> dict:
    frame = animals.copy()
    frame["provenance"] = f"project input: {project.input_path('animal_classes').name}"
    columns = [
        Column("animal_class", "Animal class"),
        numeric_column("body_mass_kg", "Body mass [kg]", ONE_DECIMAL),
        numeric_column("share", "Share of herd", TWO_DECIMALS),
        STATE,
        numeric_column("intake_kg_per_day", "Intake override [kg DM/day]", TWO_DECIMALS),
        PROVENANCE,
    ]
    return table(frame, columns)


def _forage_rows(forage: pd.DataFrame, project: Project) -> dict:
    frame = forage.copy()
    given = f"project input: {project.input_path('forage_classes').name}"
    derived_de = _de_from_dmd(frame)
    frame["provenance"] = [
        given + ("; DE = GE × DMD / 100" if derived else "") for derived in derived_de
    ]
    frame["stratum"] = frame["stratum"].replace("", "all strata")
    columns = [
        FORAGE_CLASS,
        STRATUM,
        numeric_column("de_kcal_per_g", "DE [kcal/g DM]", THREE_DECIMALS),
        numeric_column("dmd_pct", "DMD [%]", ONE_DECIMAL),
        numeric_column("cp_pct", "CP [% DM]", ONE_DECIMAL),
        numeric_column("tannin", "Tannin [mg BSA/mg]", THREE_DECIMALS),
        numeric_column(
            "dp_pct", "DP from CP [% DM; below 0: costs more protein than it gives]", TWO_DECIMALS
        ),
        numeric_column("allowable_use", "Allowable use [fraction]", TWO_DECIMALS),
        Column("key", "Key"),
        PROVENANCE,
    ]
    return table(frame, columns)


def _de_from_dmd(frame: pd.DataFrame) -> pd.Series:
    """Rows whose DE equals GE × DMD / 100: computed by the reader (it keeps a given DE)."""
    gross = frame["gross_energy_kcal_per_g"].fillna(forage_quality.GROSS_ENERGY_KCAL_PER_G_DEFAULT)
    computed = forage_quality.digestible_energy_kcal_per_g(
        frame["dmd_pct"].fillna(0.0).to_numpy(), gross.to_numpy()
    )
    return frame["dmd_pct"].notna() & np.isclose(frame["de_kcal_per_g"], computed)


def _threshold_rows(estimate: Estimate, project: Project) -> dict:
    rows = _threshold_values(estimate, project)
    frame = pd.DataFrame(rows, columns=["name", "value", "provenance"])
    frame["provenance"] = frame["provenance"].map(short_citation)
    columns = [
        Column("name", "Parameter"),
        Column("value", "Value", numeric=True),
        PROVENANCE,
    ]
    return table(frame, columns)


def _threshold_values(estimate: Estimate, project: Project) -> list[tuple[str, str, str]]:
    """(parameter, value, provenance) of the thresholds, settings and constants."""
    target = estimate.target
    config = project.config
    project_file = f"project file: {project.path.name}"
    coefficients = forage_quality.ROBBINS_1987_DP_COEFFICIENTS
    rows = [
        ("Minimum diet DE, T [kcal/g DM]", f"{target.de_min_kcal_per_g:.3f}", target.derivation),
        (
            "Minimum diet DP, P [% DM]",
            "not constrained" if target.dp_min_pct is None else f"{target.dp_min_pct:.2f}",
            target.derivation,
        ),
        ("Season length, D [days]", f"{estimate.season_days:g}", project_file),
        (
            "NCC capped at allowable use",
            format_text(config.forage_use.cap_at_allowable_use),
            project_file,
        ),
        (
            "Kleiber constant [kcal/kg^0.75/day]",
            f"{energetics.KLEIBER_KCAL_PER_KG075_PER_DAY:g}",
            "Kleiber 1961",
        ),
        (
            "ME / DE [–]",
            f"{energetics.ME_PER_DE:g}",
            "NRC 1996, Nutrient Requirements of Beef Cattle, p. 126",
        ),
        (
            "Default gross energy of forage [kcal/g DM]",
            f"{forage_quality.GROSS_ENERGY_KCAL_PER_G_DEFAULT:g}",
            "Robbins 1993 (from memory)",
        ),
        (
            "Digestible-protein equation: intercept [%], CP slope, BSA slope [%/(mg/mg)]",
            f"{coefficients['intercept_pct']:g}, {coefficients['cp_slope']:g}, "
            f"{coefficients['bsa_slope_pct_per_mg_per_mg']:g}",
            str(coefficients["source"]),
        ),
        (
            "Animal-unit body mass [kg]",
            f"{energetics.ANIMAL_UNIT_BODY_MASS_KG:.1f}",
            "NRCS National Range and Pasture Handbook (1000 lb; attribution from memory)",
        ),
        (
            "Days per animal-unit month",
            f"{energetics.DAYS_PER_ANIMAL_UNIT_MONTH:g}",
            "Society for Range Management 1998 glossary",
        ),
        (
            "Plot conversion [kg/ha per g/m²]",
            f"{supply.KG_PER_HA_PER_G_PER_M2:g}",
            "SI unit definitions",
        ),
    ]
    return rows


# --- 13. manifest -----------------------------------------------------------------------------


def manifest_summary(manifest: dict) -> dict:
    """The manifest section: command, seed, versions and the manifest as JSON."""
    settings = manifest.get("settings", {})
    seed = _find_key(settings, "seed")
    return {
        "command": str(manifest.get("command", "–")),
        "project_file": str(manifest.get("project_file", "–")),
        "started": str(manifest.get("started_utc", "–")),
        "seed": "–" if seed is None else str(seed),
        "versions": {str(k): str(v) for k, v in manifest.get("versions", {}).items()},
        "json": json.dumps(manifest, indent=2, ensure_ascii=False, default=str),
    }


def _find_key(data: Any, key: str) -> Any:
    """The first value stored under ``key`` anywhere in nested dictionaries, else None."""
    if not isinstance(data, Mapping):
        return None
    if key in data:
        return data[key]
    for value in data.values():
        found = _find_key(value, key)
        if found is not None:
            return found
    return None
