"""Sections of the HTML report drawn from the estimate itself.

Header, inputs, diet and herd, capacity chart, per-unit table, use and overuse, and
supply by stratum; each function returns the template context of its section.
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
    ONE_DECIMAL,
    THREE_DECIMALS,
    TWO_DECIMALS,
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
    text = f"Current numbers ({total} animals over all units) come from {origin}"
    if estimate.trend is not None and "current_animals" in estimate.units.columns:
        latest = estimate.trend.get("latest_count")
        year = estimate.trend.get("latest_year")
        if latest is not None:
            text += (
                f"; the population-trend section uses the counts instead (latest counted total "
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


# --- 3. diet and herd -------------------------------------------------------------------------


def diet(estimate: Estimate) -> dict:
    """The diet section: the minimum diet quality and the herd's requirements."""
    target, herd = estimate.target, estimate.herd
    return {
        "de_min": f"{target.de_min_kcal_per_g:.3f}",
        "dp_min": None if target.dp_min_pct is None else f"{target.dp_min_pct:.2f}",
        "derivation": target.derivation,
        "herd": {
            "Dry-matter intake [kg DM/day] (one NCC or allowable-use animal-day eats this)": (
                TWO_DECIMALS(herd.intake_kg_per_day)
            ),
            "Same animal at maintenance [kcal DE/day] (one ECC animal-day needs this)": ANIMALS(
                herd.maintenance_de_kcal_per_day
            ),
            "Digestible-energy requirement, each class in its state [kcal/day]": ANIMALS(
                herd.de_kcal_per_day
            ),
            "Digestible-protein requirement, each class in its state [g/day]": ONE_DECIMAL(
                herd.dp_g_per_day
            ),
            "Animal-unit equivalent [AU/animal]": THREE_DECIMALS(herd.animal_unit_equivalent),
        },
        "limits": diet_limits(estimate),
    }


AT_LIMIT_TOL = 1e-6
"""A diet share within this of a limit [share, 0–1] counts as at the limit."""


def diet_limits(estimate: Estimate) -> dict | None:
    """The diet-composition limits (each [diet] group: classes, minimum, maximum; each class's
    max_diet_share below 1) and the units where each binds; None without limits.

    A group binds in a unit whose limiting factor names diet_group; when there are several
    groups, only where the unit's diet at NCC sits at this one. A max_diet_share bounds the
    whole class (a class grown in several strata is solved as one more group over its items),
    so it binds where the class's share of the diet sits at the cap and the limiting factor
    names a composition limit.
    """
    items = estimate.problem.items
    composition = estimate.target.composition
    groups = composition.groups if composition is not None else ()
    capped = (
        {} if items.max_diet_share is None else dict(zip(items.forage_class, items.max_diet_share))
    )
    caps = {name: share for name, share in capped.items() if share < 1}
    if not groups and not caps:
        return None
    eaten = estimate.by_unit_class.pivot_table(
        index="unit_id", columns="forage_class", values="ncc_eaten_kg", aggfunc="sum"
    ).reindex(estimate.by_unit["unit_id"])
    shares = eaten.div(eaten.sum(axis=1).where(lambda total: total > 0), axis=0)
    factor = estimate.by_unit.set_index("unit_id")["limiting_factor"].astype(str).str.split("+")

    def binding(families: set, share: pd.Series, low: float, high: float, alone: bool) -> str:
        named = factor.apply(lambda parts: bool(families & set(parts)))
        at_limit = ((share - low).abs() <= AT_LIMIT_TOL) & (low > 0)
        at_limit |= ((share - high).abs() <= AT_LIMIT_TOL) & (high < 1)
        units = share.index[named & (at_limit | alone)].tolist()
        return ", ".join(map(str, units)) if units else "none"

    member = composition.membership(items) if groups else np.zeros((0, items.size), bool)
    group_rows = []
    for group, inside in zip(groups, member):
        classes = list(dict.fromkeys(items.forage_class[inside]))
        share = shares.reindex(columns=classes).sum(axis=1, min_count=1)
        group_rows.append(
            {
                "Group": group.name,
                "Forage classes": ", ".join(classes) or "none in the table",
                "Minimum share": _share(group.min_share),
                "Maximum share": _share(group.max_share),
                "Binds in": binding(
                    {"diet_group"}, share, group.min_share, group.max_share, len(groups) == 1
                ),
            }
        )
    cap_rows = [
        {
            "Forage class": name,
            "Maximum share (max_diet_share)": _share(cap),
            "Binds in": binding(
                {"diet_share", "diet_group"},
                shares.reindex(columns=[name]).iloc[:, 0],
                0,
                cap,
                False,
            ),
        }
        for name, cap in caps.items()
    ]
    bound = factor[factor.apply(lambda parts: bool({"diet_group", "diet_share"} & set(parts)))]
    return {
        "groups": _rows_table(group_rows),
        "caps": _rows_table(cap_rows),
        "binding": [f"{unit} ({limiting_label('+'.join(parts))})" for unit, parts in bound.items()],
    }


def _share(value: float) -> str:
    return f"{100 * value:.4g} %"


def _rows_table(rows: list[dict]) -> dict | None:
    """A table of text cells from rows of {header: text}; None when there are no rows."""
    if not rows:
        return None
    frame = pd.DataFrame(rows)
    return table(frame, [Column(name, name) for name in frame.columns])


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
    Column("unit_id", "Unit"),
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
}
"""Report labels of ``limiting_factor`` values whose CSV word alone would mislead."""
COMPOSITION_WORDS = {
    "diet_share": "one class's diet-share cap",
    "diet_group": "a diet group's share",
}
"""Words for the diet-composition parts of a binding ``limiting_factor`` ("protein+diet_group")."""


def limiting_label(value: Any) -> str:
    """The report's label of a ``limiting_factor`` value (the CSV keeps the value itself)."""
    if is_missing(value):
        return "–"
    text = str(value)
    parts = text.split("+")
    if text in LIMITING_LABELS or not COMPOSITION_WORDS.keys() & set(parts):
        return LIMITING_LABELS.get(text, text)
    return " + ".join(COMPOSITION_WORDS.get(part, part) for part in parts)


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
    """The per-unit table: main columns, interval columns when present, a total row."""
    frame = by_unit.copy()
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


# --- 6. use and overuse -----------------------------------------------------------------------

USE_COLUMNS = ("current_animals", "overuse", "key_use_fraction")

#: Columns of the use table, shown when present (written by :mod:`nutricap.model.use`).
USE_TABLE_COLUMNS = [
    Column("unit_id", "Unit"),
    numeric_column("current_animals", "Current animals [animals]"),
    numeric_column("ncc_animals", "NCC [animals]"),
    numeric_column("allowable_use_animals", "Allowable-use capacity [animals]"),
    numeric_column("demand_kg", "Season demand of current animals [kg DM]"),
    Column("key_pressure", "Demand on the key forage classes [× their allowable use]"),
    Column("overuse", "Use above allowable"),
    numeric_column(
        "reduction_for_key_use_animals",
        "Fewer animals to bring use to allowable [animals, advisory]",
    ),
    Column("above_ncc", "Numbers above NCC"),
    numeric_column("reduction_for_ncc_animals", "Fewer animals to reach NCC [animals, advisory]"),
]

SAME_PRESSURE = 1e-6
"""Relative difference below which key classes' use ÷ allowable use are reported as one."""


def use(by_unit: pd.DataFrame, use_by_class: pd.DataFrame | None = None) -> dict:
    """The use section: demand against the key classes' allowable use, when assessed."""
    if not set(USE_COLUMNS) <= set(by_unit.columns):
        state = "current_only" if "current_animals" in by_unit.columns else "none"
        return {"state": state, "table": None, "flagged": 0, "key_classes": ""}
    flags = by_unit["overuse"].map(is_flag)
    if "above_ncc" in by_unit.columns:
        flags = flags | by_unit["above_ncc"].map(is_flag)
    frame = by_unit.copy()
    pressure, key_classes = key_pressure(frame, use_by_class)
    frame["key_pressure"] = pressure
    return {
        "state": "assessed",
        "table": table(frame, USE_TABLE_COLUMNS, flag=flags),
        "flagged": int(flags.sum()),
        "key_classes": key_classes,
    }


def key_pressure(by_unit: pd.DataFrame, use_by_class: pd.DataFrame | None) -> tuple[list, str]:
    """Per unit, the key classes' use ÷ allowable use as text ("2.30 ×"); the classes named.

    With equal preference every class is used to the same fraction of its allowable use, so
    the classes are reported together; a unit whose classes differ lists each one.
    """
    if use_by_class is None or "key" not in use_by_class.columns:
        ratio = by_unit["key_use_fraction"] / by_unit["key_allowable_use"]
        named = by_unit["key_class"] if "key_class" in by_unit.columns else pd.Series([], dtype=str)
        names = ", ".join(map(str, named.unique())) or "not named"
        return [_times(value) for value in ratio], names
    key = use_by_class[use_by_class["key"].map(is_flag) & (use_by_class["allowable_use"] > 0)]
    if key.empty:  # no key class: every class is watched (nutricap.model.use)
        key = use_by_class[use_by_class["allowable_use"] > 0]
    key = key.assign(ratio=key["use_fraction"] / key["allowable_use"])
    cells = []
    for unit in by_unit["unit_id"]:
        rows = key[key["unit_id"] == unit]
        ratios = rows["ratio"].to_numpy(dtype=float)
        if ratios.size == 0:
            cells.append("–")
        elif np.ptp(ratios) <= SAME_PRESSURE * max(float(ratios.max()), 1e-12):
            cells.append(_times(ratios.max()))
        else:
            cells.append(
                "; ".join(f"{name} {_times(r)}" for name, r in zip(rows["forage_class"], ratios))
            )
    return cells, ", ".join(map(str, dict.fromkeys(key["forage_class"])))


def _times(ratio: float) -> str:
    return "–" if is_missing(ratio) else f"{float(ratio):.2f} ×"


def is_flag(value: Any) -> bool:
    """Whether an ``overuse`` cell raises a flag: True, or a non-empty text other than no."""
    if is_missing(value):
        return False
    if isinstance(value, str):
        return value.strip().lower() not in ("", "no", "false", "none", "0", "ok")
    return bool(value)


# --- 10. supply by stratum --------------------------------------------------------------------

SUPPLY_COLUMNS = [
    Column("stratum", "Stratum"),
    Column("forage_class", "Forage class"),
    numeric_column("mean_kg_per_ha", "Mean [kg DM/ha]", ONE_DECIMAL),
    numeric_column("se_kg_per_ha", "Standard error [kg DM/ha]", ONE_DECIMAL),
    numeric_column("n_plots", "Plots (n)"),
]


def supply(estimate: Estimate) -> dict:
    """The supply section: forage per hectare by stratum and class (absent ones omitted)."""
    frame = estimate.supply.table()
    absent = (frame["mean_kg_per_ha"] == 0) & (frame["n_plots"] > 0)
    return {"table": table(frame[~absent], SUPPLY_COLUMNS), "omitted": int(absent.sum())}
