"""Sections of the HTML report drawn from the estimate itself.

Header, inputs, capacity chart, per-unit table and supply by stratum (the diet and the use
sections are :mod:`nutricap.report.diet_section` and :mod:`nutricap.report.use_section`);
each function returns the template context of its section.
"""

from __future__ import annotations

import datetime as dt
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd

from nutricap.model.results import totals_table
from nutricap.report import figures
from nutricap.report.formatting import (
    ANIMALS,
    FORAGE_CLASS,
    ONE_DECIMAL,
    STRATUM,
    UNIT,
    Column,
    crs_label,
    decimals,
    embedded_figure,
    is_missing,
    numeric_column,
    table,
)
from nutricap.report.tables import DISPLAY_DECIMALS

if TYPE_CHECKING:
    from nutricap.inputs.project import Project
    from nutricap.model.estimate import Estimate


# --- 1. header --------------------------------------------------------------------------------


def header(estimate: Estimate, project: Project, manifest: dict) -> dict:
    """The header: project, species, the question answered, run date, totals."""
    config = project.config
    by_unit = estimate.by_unit
    target = estimate.target
    protein = (
        f" and at least {target.dp_min_pct:.2f} % digestible protein"
        if target.dp_min_pct is not None
        else ""
    )
    question = (
        f"How many {config.project.species} can the {len(by_unit)} management units of "
        f"{config.project.name} carry through a {estimate.season_days:g}-day "
        f"{_season_name(config.project.season)}season while every animal can still eat a diet "
        f"of at least {target.de_min_kcal_per_g:.3f} kcal digestible energy per g dry "
        f"matter{protein}?"
    )
    return {
        "project": config.project.name,
        "species": config.project.species,
        "question": question,
        "run_date": _run_date(manifest),
        "totals": _headline_totals(estimate),
        "interval": interval_statement(estimate),
        "current": current_source(estimate),
        "units": len(by_unit),
    }


def _headline_totals(estimate: Estimate) -> dict[str, dict[str, str]]:
    """Each total over units [animals] with its interval when one was computed."""
    names = {"ncc": "ncc_animals", "ecc": "ecc_animals", "allowable_use": "allowable_use_animals"}
    shown = {}
    for row in totals_table(estimate).to_dict("records"):
        interval = ""
        if not is_missing(row.get("total_animals_lo")):
            interval = (
                f"{100 * row['interval_level']:g} % interval "
                f"{ANIMALS(row['total_animals_lo'])}–{ANIMALS(row['total_animals_hi'])}"
            )
        shown[names[row["figure"]]] = {"value": ANIMALS(row["total_animals"]), "interval": interval}
    return shown


def interval_statement(estimate: Estimate) -> str | None:
    """What the bootstrap intervals cover and what they hold fixed, or None without them."""
    bootstrap = estimate.uncertainty.bootstrap
    if bootstrap is None:
        return None
    replicates = next(iter(bootstrap.replicate_animal_days.values())).shape[0]
    calibrated = estimate.grid is not None and estimate.grid.calibration_report is not None
    models = (
        ", refitting the index-to-biomass models to the resampled calibration plots"
        if calibrated
        else ""
    )
    errors = (
        "the sampling error of the clip plots and the calibration models' error"
        if calibrated
        else "the sampling error of the clip plots only"
    )
    return (
        f"Every interval in this report is a {100 * bootstrap.level:g} % percentile interval of "
        f"{replicates:,} bootstrap replicates that resample the clip plots within each "
        f"stratum{models}. It covers {errors}. Forage quality (DE, DP), the animals' "
        "requirements and intake, the allowable-use fractions, the availability rules and the "
        "maps are held fixed at their values, so the whole uncertainty is wider; the "
        "sensitivity section shows how far NCC moves with those inputs."
    )


def current_source(estimate: Estimate) -> str | None:
    """Where the current numbers used in the use assessment come from, or None."""
    if "current_animals" not in estimate.by_unit.columns:
        return None
    total = ANIMALS(estimate.by_unit["current_animals"].sum())
    if "current_animals" in estimate.units.columns:
        origin = "the units layer's current_animals column"
    else:
        origin = "the latest count of each unit in the counts table"
    text = (
        f"Current numbers ({total} animals over all units) come from {origin}; they are the "
        "current animals of the capacity chart (crosses), the use-and-overuse section and the "
        "per-unit table"
    )
    if estimate.trend is not None and "current_animals" in estimate.units.columns:
        latest = estimate.trend.get("latest_count")
        year = estimate.trend.get("latest_year")
        if latest is not None:
            text += (
                f". The population-trend section uses the counts instead (latest counted total "
                f"{ANIMALS(latest)} animals in {year})"
            )
    return text + "."


def _season_name(season: str) -> str:
    return "" if season == "any" else f"{season} "


def _run_date(manifest: dict) -> str:
    started = manifest.get("started_utc")
    if started:
        try:
            return dt.datetime.fromisoformat(started).strftime("%Y-%m-%d %H:%M UTC")
        except ValueError:
            return str(started)
    return dt.datetime.now(dt.UTC).strftime("%Y-%m-%d %H:%M UTC") + " (report written)"


# --- 2. inputs --------------------------------------------------------------------------------


def inputs(estimate: Estimate, project: Project, manifest: dict, *, n_animal_classes: int) -> dict:
    """The inputs section: input files with SHA-256, counts and the settings used."""
    config = project.config
    derived = manifest.get("derived", {})
    counts = {
        "Management units": len(estimate.by_unit),
        "Vegetation strata": len(estimate.supply.strata),
        "Clip plots": int(np.sum(estimate.supply.n_plots)),
        "Forage classes": len(estimate.supply.classes),
        "Animal classes": n_animal_classes,
    }
    settings = {
        "Season": f"{estimate.season_days:g} days ({config.project.season})",
        "Area CRS": str(derived.get("area_crs", crs_label(estimate.areas.area_crs))),
        "Why this CRS": str(derived.get("area_crs_reason", estimate.areas.area_crs_reason)),
        "Pooling": _POOLING[config.pooling.mode],
        "NCC capped at allowable use": "yes" if config.forage_use.cap_at_allowable_use else "no",
    }
    return {
        "files": _input_files(manifest, project),
        "column_names": _column_names(manifest, project),
        "counts": {key: f"{value:,}" for key, value in counts.items()},
        "settings": settings,
        "notes": list(estimate.notes),
    }


_POOLING = {
    "unit": "unit (animals mix forage across the whole unit)",
    "patch": "patch (each unit × stratum patch must meet the diet on its own; conservative)",
}


def _input_files(manifest: dict, project: Project) -> list[dict]:
    rows = []
    for path, info in manifest.get("inputs", {}).items():
        rows.append(
            {
                "name": _relative(Path(path), project.folder),
                "sha256": info.get("sha256", "–"),
                "bytes": f"{info['bytes']:,}" if "bytes" in info else "–",
            }
        )
    return rows


def _column_names(manifest: dict, project: Project) -> list[dict]:
    """One row per column read under another name: the file, its column, ours, and why."""
    rows = []
    for path, names in manifest.get("column_names", {}).items():
        file = _relative(Path(path), project.folder)
        key = names.get("input", "")
        for why, mapping in (
            (f"[columns.{key}] in the project file", names.get("mapped", {})),
            ("a shapefile's name cut to 10 characters", names.get("recognised", {})),
        ):
            rows += [
                {"file": file, "theirs": theirs, "ours": ours, "why": why}
                for ours, theirs in mapping.items()
            ]
    return rows


def _relative(path: Path, folder: Path) -> str:
    try:
        return str(path.relative_to(folder))
    except ValueError:
        return str(path)


# --- 5. capacity chart and per-unit table -----------------------------------------------------

INTERVAL_COLUMNS = {
    "ncc_animals": "NCC interval [animals]",
    "ecc_animals": "ECC interval [animals]",
    "allowable_use_animals": "Allowable-use interval [animals]",
}
INTERVAL_NAMES = {
    "ncc_animals": "NCC",
    "ecc_animals": "ECC",
    "allowable_use_animals": "allowable-use capacity",
}


def has_interval(frame: pd.DataFrame, name: str) -> bool:
    """Whether ``frame`` has the ``<name>_lo`` and ``<name>_hi`` columns."""
    return {f"{name}_lo", f"{name}_hi"} <= set(frame.columns)


def _level_text(level: float | None) -> str:
    return f"{100 * level:g} %" if level else "(level not stated)"


def capacity(estimate: Estimate, level: float | None) -> dict:
    """The capacity section: the per-unit capacity chart and what it shows."""
    by_unit = estimate.by_unit
    intervals = [name for name in INTERVAL_COLUMNS if has_interval(by_unit, name)]
    chart = figures.capacity_figure(by_unit, season_days=estimate.season_days, interval_level=level)
    return {
        "figure": embedded_figure(
            chart,
            "Per-unit dot chart of NCC, allowable-use capacity and ECC in animals.",
            "capacity_by_unit",
        ),
        "intervals": [INTERVAL_NAMES[name] for name in intervals],
        "level": _level_text(level),
        "shown": min(len(by_unit), figures.MAX_UNITS_CHART),
        "units": len(by_unit),
        "current": "current_animals" in by_unit.columns,
    }


def _rounded(name: str, header: str) -> Column:
    """A per-unit column rounded as in the Markdown table (:data:`DISPLAY_DECIMALS`)."""
    return numeric_column(name, header, decimals(DISPLAY_DECIMALS[name]))


UNIT_COLUMNS = [
    UNIT,
    _rounded("area_ha", "Area [ha]"),
    _rounded("available_forage_kg", "Available forage [kg DM]"),
    _rounded("ncc_animals", "NCC [animals]"),
    _rounded("ecc_animals", "ECC [animals]"),
    _rounded("allowable_use_animals", "Allowable-use capacity [animals]"),
    _rounded("ncc_per_km2", "NCC [animals/km²]"),
    _rounded("ncc_aum", "NCC forage eaten [AUM]"),
    _rounded("allowable_use_aum", "Forage at allowable use [AUM]"),
    Column("limiting_factor", "Limiting factor", lambda value: limiting_label(value)),
    Column("marginal_forage_class", "Marginal forage class"),
    _rounded("diet_de_kcal_per_g", "Diet DE at NCC [kcal/g DM]"),
    _rounded("diet_dp_pct", "Diet DP at NCC [% DM]"),
    _rounded("current_animals", "Current animals [animals]"),
]

LIMITING_LABELS = {
    "intake": "target diet unreachable (no forage mix meets it within intake)",
    "diet_mix": "diet limits unreachable (no forage mix meets the target diet within the "
    "diet-composition limits)",
    "no_forage": "no forage left (after use caps and other herbivores)",
    "quantity": "forage quantity (all the forage allowed is eaten)",
}
"""Report labels of ``limiting_factor`` values whose CSV word alone would mislead."""
PART_WORDS = {
    "diet_share": "one class's diet-share cap",
    "diet_group": "a diet group's share",
}
"""Words for the parts of a binding ``limiting_factor`` ("protein+diet_group"); "energy" and
"protein" are words already."""


def limiting_label(value: Any) -> str:
    """The report's label of a ``limiting_factor`` value (the CSV keeps the value itself):
    its words, its parts joined by " + " ("energy+protein" → "energy + protein")."""
    if is_missing(value):
        return "–"
    text = str(value)
    if text in LIMITING_LABELS:
        return LIMITING_LABELS[text]
    return " + ".join(PART_WORDS.get(part, part) for part in text.split("+"))


#: The diet at NCC, per unit.
DIET_COLUMNS = ("diet_de_kcal_per_g", "diet_dp_pct")

#: Columns summed in the total row (additive over units; intervals and rates are not).
ADDITIVE_COLUMNS = (
    "area_ha",
    "available_forage_kg",
    "ncc_animals",
    "ecc_animals",
    "allowable_use_animals",
    "ncc_aum",
    "allowable_use_aum",
    "current_animals",
)


def unit_table(by_unit: pd.DataFrame, level: float | None = None) -> dict:
    """The per-unit table: main columns, interval columns when present, a total row. A unit
    whose NCC is 0 has no diet at NCC: its diet DE and DP show "–" (the CSV keeps 0)."""
    frame = by_unit.copy()
    no_diet = frame["ncc_animals"] <= 0.0
    for name in DIET_COLUMNS:
        if name in frame.columns:
            frame[name] = frame[name].mask(no_diet)
    columns = list(UNIT_COLUMNS)
    for name, header in INTERVAL_COLUMNS.items():
        if has_interval(frame, name):
            frame[f"{name}_interval"] = [
                f"{ANIMALS(low)}–{ANIMALS(high)}"
                for low, high in zip(frame[f"{name}_lo"], frame[f"{name}_hi"])
            ]
            position = next(i for i, c in enumerate(columns) if c.name == name) + 1
            columns.insert(
                position,
                Column(
                    f"{name}_interval",
                    header.replace("interval", f"{_level_text(level)} interval"),
                    numeric=True,
                ),
            )
    present = [column for column in columns if column.name in frame.columns]
    footer = [_total_cell(frame, column) for column in present]
    footer[0] = "Total"
    whole = table(frame, present, footer=footer)
    return {**whole, "groups": column_groups(whole, [c.name for c in present], UNIT_GROUPS)}


#: The per-unit table is shown as these column groups (each repeats the unit column), so that
#: it fits a 1280 px screen and a portrait page without sideways scrolling or cut columns.
UNIT_GROUPS = (
    (
        "capacity and its intervals",
        (
            "area_ha",
            "available_forage_kg",
            "ncc_animals",
            "ncc_animals_interval",
            "ecc_animals",
            "ecc_animals_interval",
            "allowable_use_animals",
            "allowable_use_animals_interval",
        ),
    ),
    (
        "density, forage in AUM, diet and current numbers",
        (
            "ncc_per_km2",
            "ncc_aum",
            "allowable_use_aum",
            "limiting_factor",
            "marginal_forage_class",
            "diet_de_kcal_per_g",
            "diet_dp_pct",
            "current_animals",
        ),
    ),
)


def column_groups(whole: dict, names: list[str], groups) -> list[dict]:
    """``whole`` (a :func:`table`) split into column groups, each led by the first column.

    ``groups`` is a sequence of (title, column names); names not present are skipped, and a
    column in no group joins the last group.
    """
    grouped = {name for _title, members in groups for name in members}
    parts = []
    for number, (title, members) in enumerate(groups):
        wanted = [i for i, name in enumerate(names) if name in members]
        if number == len(groups) - 1:
            wanted += [i for i, name in enumerate(names[1:], 1) if name not in grouped]
        if not wanted:
            continue
        keep = [0, *sorted(wanted)]
        parts.append(
            {
                "title": title,
                "headers": [whole["headers"][i] for i in keep],
                "numeric": [whole["numeric"][i] for i in keep],
                "rows": [
                    {"cells": [row["cells"][i] for i in keep], "flag": row["flag"]}
                    for row in whole["rows"]
                ],
                "footer": None if whole["footer"] is None else [whole["footer"][i] for i in keep],
            }
        )
    return parts


def _total_cell(frame: pd.DataFrame, column: Column) -> str:
    if column.name in ADDITIVE_COLUMNS:
        return column.format(frame[column.name].sum(min_count=1))
    return ""


# --- 10. supply by stratum --------------------------------------------------------------------

SUPPLY_COLUMNS = [
    STRATUM,
    FORAGE_CLASS,
    numeric_column("mean_kg_per_ha", "Mean [kg DM/ha]", ONE_DECIMAL),
    numeric_column("se_kg_per_ha", "Standard error [kg DM/ha]", ONE_DECIMAL),
    numeric_column("n_plots", "Plots (n)"),
]


def supply(estimate: Estimate) -> dict:
    """The supply section: forage per hectare by stratum and class (absent ones omitted)."""
    frame = estimate.supply.table()
    absent = (frame["mean_kg_per_ha"] == 0) & (frame["n_plots"] > 0)
    return {"table": table(frame[~absent], SUPPLY_COLUMNS), "omitted": int(absent.sum())}
