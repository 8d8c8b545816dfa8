"""The self-contained HTML report of an estimate.

:func:`render_report` formats an :class:`~nutricap.workflow.Estimate` (and optional
scenario, sensitivity and trend results) into one HTML file: figures are
embedded as base64 ``data:image/png`` URIs and the style sheet is inline, so the
file opens anywhere with no network and no other file. The template is
``nutricap/report/templates/report.html.j2`` (Jinja2, autoescaping on).

Nothing here computes capacity: the module arranges and formats the numbers it
is handed, including the forage-class and animal-class tables as the estimate read
them (to list every parameter with its provenance).
"""

from __future__ import annotations

import base64
import dataclasses
import datetime as dt
import json
import math
from collections.abc import Callable, Mapping
from dataclasses import dataclass
from importlib.resources import files
from pathlib import Path
from typing import TYPE_CHECKING, Any

import jinja2
import numpy as np
import pandas as pd

from nutricap.cautions import CAUTION
from nutricap.report import figures
from nutricap.science import energetics, forage_quality, population, supply
from nutricap.trend import TREND_CAUTIONS

if TYPE_CHECKING:
    from matplotlib.figure import Figure

    from nutricap.project import Project
    from nutricap.workflow import Estimate

TEMPLATE = "report.html.j2"

#: Units drawn as small multiples in the scenario chart at most (more: total panel only).
MAX_SCENARIO_PANELS = 12


@dataclass(frozen=True)
class ReportExtras:
    """Optional results shown in the report when given.

    Attributes
    ----------
    scenario_table : pandas.DataFrame, optional
        ``unit_id, scenario, year, years_since_treatment, ncc_animals_baseline,
        ncc_animals_scenario, change_animals`` [animals].
    sensitivity_table : pandas.DataFrame, optional
        ``input, low_change_animals, high_change_animals`` [animals] (more columns are shown).
    trend : mapping or dataclass, optional
        ``years`` and ``counts`` [animals]; optional ``fitted_years``, ``fitted_counts``, ``K``,
        ``K_ci``, ``r_mean``, ``r_ci``, ``lambda_mean``, ``lambda_ci``, ``r_max``, ``r_max_ci``,
        ``msy_level``, ``msy_yield``, ``phase``, ``ceiling_reason``, ``series``, and the forage
        capacity of the counted area as ``ncc_animals``/``ecc_animals`` or under ``capacity``
        (the output of :func:`nutricap.trend.analyse_series` fits).
    interval_level : float, optional
        Level of the ``*_lo``/``*_hi`` intervals in the per-unit table, e.g. 0.9.
    sensitivity_change : float, optional
        The fractional change behind ``sensitivity_table`` (0.1 for ±10 %).
    """

    scenario_table: pd.DataFrame | None = None
    sensitivity_table: pd.DataFrame | None = None
    trend: Any = None
    interval_level: float | None = None
    sensitivity_change: float | None = None


def render_report(
    estimate: Estimate,
    *,
    project: Project,
    manifest: dict,
    extras: ReportExtras | None = None,
) -> str:
    """The HTML report of ``estimate`` as one self-contained document.

    Parameters
    ----------
    estimate : nutricap.workflow.Estimate
        The results to report.
    project : nutricap.project.Project
        The project that was estimated (names, settings, input tables).
    manifest : dict
        The run manifest (:func:`nutricap.manifest.build_manifest`), shown and used for the
        input files' SHA-256, the area CRS and the run date.
    extras : ReportExtras, optional
        Scenario, sensitivity and trend results; each section appears only when given.

    Returns
    -------
    str
        The HTML text.
    """
    extras = extras or ReportExtras()
    animals, forage = estimate.animals, estimate.forage_classes
    context = {
        "caution": CAUTION,
        "header": _header(estimate, project, manifest),
        "inputs": _inputs(estimate, project, manifest, n_animal_classes=len(animals)),
        "diet": _diet(estimate),
        "map": _figure(
            figures.ncc_density_map(estimate.units, estimate.by_unit),
            "Map of the management units shaded by NCC per square kilometre.",
        ),
        "capacity": _capacity(estimate, extras.interval_level),
        "sensitivity": _sensitivity(extras.sensitivity_table, extras.sensitivity_change),
        "use": _use(estimate.by_unit),
        "scenario": _scenario(extras.scenario_table),
        "trend": _trend(extras.trend, estimate.by_unit),
        "unit_table": unit_table(estimate.by_unit, extras.interval_level),
        "supply": _supply(estimate),
        "methods": methods(
            intervals=any(_has_interval(estimate.by_unit, n) for n in INTERVAL_COLUMNS),
            sensitivity=extras.sensitivity_table is not None,
            trend=extras.trend is not None,
        ),
        "parameters": _parameters(estimate, project, animals, forage),
        "manifest": _manifest(manifest),
    }
    return _template().render(**context)


def write_report(
    path: Path,
    estimate: Estimate,
    *,
    project: Project,
    manifest: dict,
    extras: ReportExtras | None = None,
) -> None:
    """Write :func:`render_report` to ``path`` as UTF-8 (into a staging folder, normally)."""
    html = render_report(estimate, project=project, manifest=manifest, extras=extras)
    Path(path).write_text(html, encoding="utf-8")


def _template() -> jinja2.Template:
    text = (files("nutricap.report") / "templates" / TEMPLATE).read_text(encoding="utf-8")
    environment = jinja2.Environment(
        autoescape=True, undefined=jinja2.StrictUndefined, trim_blocks=True, lstrip_blocks=True
    )
    return environment.from_string(text)


# --- formatting helpers -----------------------------------------------------------------------


def _missing(value: Any) -> bool:
    if value is None:
        return True
    try:
        return bool(pd.isna(value))
    except (TypeError, ValueError):
        return False


def _number(digits: int, *, percent: bool = False) -> Callable[[Any], str]:
    """Formatter with thousands separators and ``digits`` decimals; '–' for a missing value."""

    def format_value(value: Any) -> str:
        if _missing(value):
            return "–"
        number = float(value) * (100.0 if percent else 1.0)
        return f"{number:,.{digits}f}" + (" %" if percent else "")

    return format_value


def _text(value: Any) -> str:
    if _missing(value) or value == "":
        return "–"
    if isinstance(value, bool | np.bool_):
        return "yes" if value else "no"
    return str(value)


def _auto(value: Any) -> str:
    """Whole numbers as counts, other numbers to three significant digits, text as text."""
    if isinstance(value, bool | np.bool_ | str) or _missing(value):
        return _text(value)
    if isinstance(value, int | float | np.number):
        number = float(value)
        return f"{number:,.0f}" if abs(number) >= 100 or number.is_integer() else f"{number:.3g}"
    return str(value)


ANIMALS = _number(0)
ONE_DECIMAL = _number(1)
TWO_DECIMALS = _number(2)
THREE_DECIMALS = _number(3)
PERCENT = _number(0, percent=True)


@dataclass(frozen=True)
class Column:
    """A column of a rendered table: source column, header with unit, formatter."""

    name: str
    header: str
    format: Callable[[Any], str] = _text
    numeric: bool = False


def _numeric(name: str, header: str, format_value: Callable[[Any], str] = ANIMALS) -> Column:
    return Column(name, header, format_value, numeric=True)


def table(
    frame: pd.DataFrame,
    columns: list[Column],
    *,
    flag: pd.Series | None = None,
    footer: list[str] | None = None,
) -> dict:
    """A table as plain strings for the template: headers, rows (with a flag), alignment."""
    present = [column for column in columns if column.name in frame.columns]
    flags = [False] * len(frame) if flag is None else [bool(value) for value in flag]
    rows = [
        {"cells": [column.format(value) for column, value in zip(present, row)], "flag": marked}
        for row, marked in zip(frame[[c.name for c in present]].itertuples(index=False), flags)
    ]
    return {
        "headers": [column.header for column in present],
        "numeric": [column.numeric for column in present],
        "rows": rows,
        "footer": footer,
    }


def _figure(figure: Figure, alt: str) -> dict:
    png = figures.figure_png(figure)
    return {"src": "data:image/png;base64," + base64.b64encode(png).decode("ascii"), "alt": alt}


# --- 1. header --------------------------------------------------------------------------------


def _header(estimate: Estimate, project: Project, manifest: dict) -> dict:
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
    totals = {
        name: ANIMALS(by_unit[name].sum())
        for name in ("ncc_animals", "ecc_animals", "allowable_use_animals")
    }
    return {
        "project": config.project.name,
        "species": config.project.species,
        "question": question,
        "run_date": _run_date(manifest),
        "totals": totals,
        "units": len(by_unit),
    }


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


def _inputs(estimate: Estimate, project: Project, manifest: dict, *, n_animal_classes: int) -> dict:
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
        "Area CRS": str(derived.get("area_crs", estimate.areas.area_crs.to_string())),
        "Why this CRS": str(derived.get("area_crs_reason", estimate.areas.area_crs_reason)),
        "Pooling": _POOLING[config.pooling.mode],
        "NCC capped at allowable use": "yes" if config.forage_use.cap_at_allowable_use else "no",
    }
    return {
        "files": _input_files(manifest, project),
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


def _relative(path: Path, folder: Path) -> str:
    try:
        return str(path.relative_to(folder))
    except ValueError:
        return str(path)


# --- 3. diet and herd -------------------------------------------------------------------------


def _diet(estimate: Estimate) -> dict:
    target, herd = estimate.target, estimate.herd
    return {
        "de_min": f"{target.de_min_kcal_per_g:.3f}",
        "dp_min": None if target.dp_min_pct is None else f"{target.dp_min_pct:.2f}",
        "derivation": target.derivation,
        "herd": {
            "Digestible-energy requirement [kcal/day]": ANIMALS(herd.de_kcal_per_day),
            "Same herd at maintenance [kcal/day] (used for ECC)": ANIMALS(
                herd.maintenance_de_kcal_per_day
            ),
            "Dry-matter intake [kg DM/day]": TWO_DECIMALS(herd.intake_kg_per_day),
            "Digestible-protein requirement [g/day]": ONE_DECIMAL(herd.dp_g_per_day),
            "Diet DE the average animal needs [kcal/g DM]": THREE_DECIMALS(herd.diet_de_kcal_per_g),
            "Diet DP the average animal needs [% DM]": TWO_DECIMALS(herd.diet_dp_pct),
            "Animal-unit equivalent [AU/animal]": THREE_DECIMALS(herd.animal_unit_equivalent),
        },
    }


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


def _has_interval(frame: pd.DataFrame, name: str) -> bool:
    return {f"{name}_lo", f"{name}_hi"} <= set(frame.columns)


def _level_text(level: float | None) -> str:
    return f"{100 * level:g} %" if level else "(level not stated)"


def _capacity(estimate: Estimate, level: float | None) -> dict:
    by_unit = estimate.by_unit
    intervals = [name for name in INTERVAL_COLUMNS if _has_interval(by_unit, name)]
    chart = figures.capacity_figure(by_unit, season_days=estimate.season_days, interval_level=level)
    return {
        "figure": _figure(
            chart, "Per-unit dot chart of NCC, allowable-use capacity and ECC in animals."
        ),
        "intervals": [INTERVAL_NAMES[name] for name in intervals],
        "level": _level_text(level),
        "shown": min(len(by_unit), figures.MAX_UNITS_CHART),
        "units": len(by_unit),
        "current": "current_animals" in by_unit.columns,
    }


UNIT_COLUMNS = [
    Column("unit_id", "Unit"),
    _numeric("area_ha", "Area [ha]", ONE_DECIMAL),
    _numeric("available_forage_kg", "Available forage [kg DM]"),
    _numeric("ncc_animals", "NCC [animals]"),
    _numeric("ecc_animals", "ECC [animals]"),
    _numeric("allowable_use_animals", "Allowable-use capacity [animals]"),
    _numeric("ncc_per_km2", "NCC [animals/km²]", ONE_DECIMAL),
    _numeric("ncc_aum", "NCC [AUM]"),
    Column("limiting_factor", "Limiting factor"),
    Column("marginal_forage_class", "Marginal forage class"),
    _numeric("diet_de_kcal_per_g", "Diet DE at NCC [kcal/g DM]", THREE_DECIMALS),
    _numeric("diet_dp_pct", "Diet DP at NCC [% DM]", TWO_DECIMALS),
    _numeric("current_animals", "Current animals [animals]"),
]

#: Columns summed in the total row (additive over units; intervals and rates are not).
ADDITIVE_COLUMNS = (
    "area_ha",
    "available_forage_kg",
    "ncc_animals",
    "ecc_animals",
    "allowable_use_animals",
    "ncc_aum",
    "current_animals",
)


def unit_table(by_unit: pd.DataFrame, level: float | None = None) -> dict:
    """The per-unit table: main columns, interval columns when present, a total row."""
    frame = by_unit.copy()
    columns = list(UNIT_COLUMNS)
    for name, header in INTERVAL_COLUMNS.items():
        if _has_interval(frame, name):
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
    return table(frame, present, footer=footer)


def _total_cell(frame: pd.DataFrame, column: Column) -> str:
    if column.name in ADDITIVE_COLUMNS:
        return column.format(frame[column.name].sum(min_count=1))
    return ""


# --- sensitivity ------------------------------------------------------------------------------


def _sensitivity(sensitivity_table: pd.DataFrame | None, change: float | None) -> dict | None:
    if sensitivity_table is None:
        return None
    ordered = figures.sort_by_range(sensitivity_table).copy()
    ordered["range_animals"] = (
        ordered["high_change_animals"] - ordered["low_change_animals"]
    ).abs()
    known = ["input", "low_change_animals", "high_change_animals", "range_animals"]
    columns = [
        Column("input", "Input"),
        _numeric("low_change_animals", "Change with input low [animals]", _signed),
        _numeric("high_change_animals", "Change with input high [animals]", _signed),
        _numeric("range_animals", "Range [animals]"),
    ] + [
        Column(name, name.replace("_", " "), _auto, numeric=True)
        for name in ordered.columns
        if name not in known
    ]
    return {
        "figure": _figure(
            figures.tornado_figure(sensitivity_table, change=change),
            "Tornado chart of the change in total NCC for each input.",
        ),
        "table": table(ordered, columns),
        "change": f"±{100 * change:g} %" if change else "its low and its high value",
    }


def _signed(value: Any) -> str:
    return "–" if _missing(value) else figures.signed_animals(float(value))


# --- 6. use and overuse -----------------------------------------------------------------------

USE_COLUMNS = ("current_animals", "overuse", "key_use_fraction")

#: Columns of the use table, shown when present (written by :mod:`nutricap.assess`).
USE_TABLE_COLUMNS = [
    Column("unit_id", "Unit"),
    _numeric("current_animals", "Current animals [animals]"),
    _numeric("ncc_animals", "NCC [animals]"),
    _numeric("allowable_use_animals", "Allowable-use capacity [animals]"),
    _numeric("demand_kg", "Season demand of current animals [kg DM]"),
    Column("key_class", "Most-used key forage class"),
    _numeric("key_use_fraction", "Expected use of that class [% of available]", PERCENT),
    _numeric("key_allowable_use", "Its allowable use [%]", PERCENT),
    Column("overuse", "Use above allowable"),
    _numeric(
        "reduction_for_key_use_animals",
        "Fewer animals to bring use to allowable [animals, advisory]",
    ),
    Column("above_ncc", "Numbers above NCC"),
    _numeric("reduction_for_ncc_animals", "Fewer animals to reach NCC [animals, advisory]"),
]


def _use(by_unit: pd.DataFrame) -> dict:
    if not set(USE_COLUMNS) <= set(by_unit.columns):
        state = "current_only" if "current_animals" in by_unit.columns else "none"
        return {"state": state, "table": None, "flagged": 0}
    flags = by_unit["overuse"].map(is_flag)
    if "above_ncc" in by_unit.columns:
        flags = flags | by_unit["above_ncc"].map(is_flag)
    return {
        "state": "assessed",
        "table": table(by_unit, USE_TABLE_COLUMNS, flag=flags),
        "flagged": int(flags.sum()),
    }


def is_flag(value: Any) -> bool:
    """Whether an ``overuse`` cell raises a flag: True, or a non-empty text other than no."""
    if _missing(value):
        return False
    if isinstance(value, str):
        return value.strip().lower() not in ("", "no", "false", "none", "0", "ok")
    return bool(value)


# --- 7. treatment scenarios -------------------------------------------------------------------

SCENARIO_TOTAL_COLUMNS = [
    Column("scenario", "Scenario"),
    Column("year", "Year"),
    _numeric("ncc_animals_baseline", "Baseline NCC [animals]"),
    _numeric("ncc_animals_scenario", "Scenario NCC [animals]"),
    _numeric("change_animals", "Change [animals]", _signed),
]

SCENARIO_UNIT_COLUMNS = [
    Column("unit_id", "Unit"),
    *SCENARIO_TOTAL_COLUMNS[:2],
    Column("years_since_treatment", "Years since treatment", _auto, numeric=True),
    *SCENARIO_TOTAL_COLUMNS[2:],
]


def _scenario(scenario_table: pd.DataFrame | None) -> dict | None:
    if scenario_table is None:
        return None
    units = scenario_table["unit_id"].nunique()
    chart = figures.scenario_figure(scenario_table, per_unit=units <= MAX_SCENARIO_PANELS)
    totals = scenario_table.groupby(["scenario", "year"], as_index=False, sort=True)[
        ["ncc_animals_baseline", "ncc_animals_scenario"]
    ].sum()
    totals["change_animals"] = totals["ncc_animals_scenario"] - totals["ncc_animals_baseline"]
    return {
        "figure": _figure(
            chart, "Line chart of NCC over the years, baseline against each treatment scenario."
        ),
        "per_unit_panels": units <= MAX_SCENARIO_PANELS,
        "totals": table(totals, SCENARIO_TOTAL_COLUMNS),
        "by_unit": table(scenario_table, SCENARIO_UNIT_COLUMNS),
    }


# --- 8. population trend ----------------------------------------------------------------------


def _as_mapping(trend: Any) -> dict:
    if dataclasses.is_dataclass(trend) and not isinstance(trend, type):
        return dataclasses.asdict(trend)
    return dict(trend)


def _trend(trend: Any, by_unit: pd.DataFrame) -> dict | None:
    if trend is None:
        return None
    data = _as_mapping(trend)
    ncc, ecc, area = _trend_capacity(data, by_unit)
    K = _finite_or_none(data.get("K"))
    chart = figures.population_trend_figure(
        data["years"],
        data["counts"],
        data.get("fitted_years"),
        data.get("fitted_counts"),
        K,
        ncc,
        ecc,
    )
    return {
        "figure": _figure(
            chart,
            "Counts over time with the fitted curve and the reference lines K, K/2, NCC and ECC.",
        ),
        "series": _text(data.get("series")),
        "area": area,
        "fitted": data.get("fitted_counts") is not None,
        "ceiling": K is not None,
        "figures": _trend_figures(data),
        "cautions": [caution for caution in TREND_CAUTIONS if caution != CAUTION],
    }


def _finite_or_none(value: Any) -> float | None:
    if _missing(value):
        return None
    number = float(value)
    return number if math.isfinite(number) else None


def _trend_capacity(data: dict, by_unit: pd.DataFrame) -> tuple[float | None, float | None, str]:
    """NCC and ECC of the counted area: given with the trend, else the unit or all units."""
    capacity = data.get("capacity") or {}
    for source in (data, capacity):
        if source.get("ncc_animals") is not None or source.get("ecc_animals") is not None:
            units = capacity.get("units")
            area = ("units " + ", ".join(map(str, units))) if units else "the counted area"
            return (
                _finite_or_none(source.get("ncc_animals")),
                _finite_or_none(source.get("ecc_animals")),
                area,
            )
    series = data.get("series")
    rows = by_unit[by_unit["unit_id"].astype(str) == str(series)]
    if series is None or rows.empty:
        rows, area = by_unit, f"all {len(by_unit)} units together"
    else:
        area = f"unit {series}"
    return float(rows["ncc_animals"].sum()), float(rows["ecc_animals"].sum()), area


def _interval(data: dict, name: str, digits: int) -> str:
    bounds = data.get(name)
    if not bounds or any(_missing(b) for b in bounds):
        return ""
    return f" (interval {bounds[0]:,.{digits}f} to {bounds[1]:,.{digits}f})"


#: Trend figures shown when given: key, label, decimals, key of its interval.
TREND_FIGURES = (
    ("r_mean", "Mean exponential rate of increase r [1/year]", 3, "r_ci"),
    ("lambda_mean", "Finite rate of increase λ [per year]", 3, "lambda_ci"),
    ("r_max", "Logistic r_max [1/year]", 3, "r_max_ci"),
    ("K", "Fitted ceiling K [animals]", 0, "K_ci"),
    ("msy_level", "Maximum-sustained-yield level K/2 [animals]", 0, None),
    ("msy_yield", "Maximum sustained yield r·K/4 [animals/year]", 0, None),
)


def _trend_figures(data: dict) -> dict:
    shown = {}
    for name, label, digits, interval in TREND_FIGURES:
        value = data.get(name)
        if not _missing(value):
            bounds = _interval(data, interval, digits) if interval else ""
            shown[label] = f"{float(value):,.{digits}f}" + bounds
    for name, label in (("phase", "Phase"), ("ceiling_reason", "Ceiling evidence")):
        if data.get(name):
            shown[label] = str(data[name])
    return shown


# --- 10. supply by stratum --------------------------------------------------------------------

SUPPLY_COLUMNS = [
    Column("stratum", "Stratum"),
    Column("forage_class", "Forage class"),
    _numeric("mean_kg_per_ha", "Mean [kg DM/ha]", ONE_DECIMAL),
    _numeric("se_kg_per_ha", "Standard error [kg DM/ha]", ONE_DECIMAL),
    _numeric("n_plots", "Plots (n)"),
]


def _supply(estimate: Estimate) -> dict:
    frame = estimate.supply.table()
    absent = (frame["mean_kg_per_ha"] == 0) & (frame["n_plots"] > 0)
    return {"table": table(frame[~absent], SUPPLY_COLUMNS), "omitted": int(absent.sum())}


# --- 11. methods ------------------------------------------------------------------------------


@dataclass(frozen=True)
class Method:
    """One step of the method: its equation, a short explanation and its source."""

    title: str
    equation: str
    text: str
    source: str


METHODS = (
    Method(
        "Clip plots to forage per hectare",
        "B = 10 · m / A    [kg DM/ha]; stratum mean x̄ = Σx/n, SE = s/√n",
        "m is the oven-dry mass clipped in a frame [g], A the frame area [m²]; 1 g/m² = "
        "10 kg/ha. A forage class missing from a plot counts as 0 on that plot.",
        "SI unit definitions; sample mean and standard error (common practice).",
    ),
    Method(
        "Available forage",
        "a(unit, class) = Σ_strata accessible ha × mean kg/ha    [kg DM]",
        "Accessible hectares come from overlaying the strata on the units in the area CRS.",
        "Stratified estimation (common practice).",
    ),
    Method(
        "Basal metabolism",
        "BMR = 70 · W^0.75    [kcal/day], W in kg",
        "W^0.75 is metabolic body size.",
        "Kleiber, M. 1961. The Fire of Life. Wiley, New York.",
    ),
    Method(
        "Energy requirement by nutritional state",
        "ME = m · BMR;  DE = ME / 0.82    [kcal/day]",
        "m is the multiple of basal metabolism for the state and season (parameter table "
        "below). 0.82 converts metabolizable to digestible energy for ruminants on forage.",
        "Multipliers: Robbins, C.T. 1993. Wildlife Feeding and Nutrition, 2nd ed., Academic "
        "Press (from memory, see each row's source). ME = 0.82 · DE: National Research Council "
        "1996, Nutrient Requirements of Beef Cattle, 7th rev. ed., p. 126.",
    ),
    Method(
        "Intake, protein requirement and minimum diet quality",
        "I = i · W^0.75 / 1000 [kg DM/day];  R_DP = p · W^0.75 [g/day];\n"
        "q_DE = DE / (1000 · I) [kcal/g];  q_DP = 100 · R_DP / (1000 · I) [%]",
        "The diet must supply the requirement within the intake limit. A herd is its "
        "share-weighted average animal.",
        "Hobbs, N.T. & Swift, D.M. 1985. J. Wildl. Manage. 49:814–822; i and p from memory "
        "or common practice (parameter table).",
    ),
    Method(
        "Digestible energy of forage",
        "DE = GE · DMD / 100    [kcal/g DM]",
        "Used when a forage class gives dry-matter digestibility instead of DE; GE defaults "
        "to 4.4 kcal/g.",
        "Robbins, C.T. 1993. Wildlife Feeding and Nutrition (from memory).",
    ),
    Method(
        "Digestible protein of forage",
        "DP = max(0, −3.87 + 0.9283 · CP − 11.82 · BSA)    [% DM]",
        "CP is crude protein [% DM]; BSA the tannins' protein precipitation [mg/mg].",
        "Robbins, C.T., Hanley, T.A., Hagerman, A.E. et al. 1987. Ecology 68:98–107 "
        "(abstract read); −3.87 + 0.9283 · CP read in a secondary table citing Hanley et al. "
        "1992, Ecology 73:537–541; BSA slope from memory.",
    ),
    Method(
        "Nutritional carrying capacity (one nutrient)",
        "maximise Σ x_i  subject to  0 ≤ x_i ≤ c_i a_i,  Σ x_i (q_i − T) ≥ 0;\n"
        "NCC [animal-days] = Σ x_i / I;  NCC [animals] = animal-days / D",
        "A linear programme solved exactly by sorting forage by quality and accumulating "
        "until the diet's DE falls to the threshold T. c_i is the allowable use when NCC is "
        "capped at allowable use, else 1; D is the season length.",
        "Hobbs, N.T. & Swift, D.M. 1985. Estimates of habitat carrying capacity incorporating "
        "explicit nutritional constraints. J. Wildl. Manage. 49:814–822.",
    ),
    Method(
        "Two nutrients at once",
        "… and Σ x_i (p_i − P) ≥ 0",
        "Energy and protein constraints together, solved exactly from the vertices of the "
        "two-multiplier dual, or by scipy.optimize.linprog (HiGHS) when that cannot certify "
        "the optimum. The limiting factor names the binding constraint(s).",
        "Hanley, T.A. & Rogers, J.J. 1989. Estimating carrying capacity with simultaneous "
        "nutritional constraints. USDA Forest Service Research Note PNW-RN-485.",
    ),
    Method(
        "Ecological carrying capacity (forage-quantity ceiling)",
        "ECC [animal-days] = 1000 · Σ a_i q_i / R_maint",
        "All forage counts, whatever its quality; R_maint is the herd's DE requirement at "
        "maintenance [kcal/day]. The ceiling NCC is set against.",
        "Hobbs, N.T. & Swift, D.M. 1985. J. Wildl. Manage. 49:814–822.",
    ),
    Method(
        "Capacity at allowable use",
        "AUC [animal-days] = Σ u_i a_i / I",
        "u_i is each forage class's allowable use (the fraction that may be removed).",
        "Holechek, J.L. 1988. An approach for setting the stocking rate. Rangelands 10:10–14.",
    ),
    Method(
        "Animal units",
        "AUE = (W / 453.6)^0.75 [AU];  AUM = animal-days · AUE / 30",
        "One animal unit is a 1000-lb (453.6 kg) cow eating 26 lb (11.8 kg) oven-dry forage a "
        "day; one AUM is 30 animal-unit days.",
        "USDA NRCS National Range and Pasture Handbook (attribution from memory; values read "
        "in secondary sources); Society for Range Management 1998 glossary (30-day AUM).",
    ),
    Method(
        "Density",
        "NCC per km² = NCC [animals] / (area [ha] / 100)",
        "1 km² = 100 ha.",
        "SI unit definitions.",
    ),
)


BOOTSTRAP_METHOD = Method(
    "Intervals: stratified bootstrap over plots",
    "interval = (100·(1−level)/2, 100·(1+level)/2) percentiles of the replicate capacities",
    "Plots are resampled with replacement within each stratum, the stratum means recomputed "
    "and every capacity solved again for each replicate.",
    "Efron, B. & Tibshirani, R.J. 1993. An Introduction to the Bootstrap. Chapman & Hall "
    "(percentile intervals; stratified resampling, from memory).",
)

SENSITIVITY_METHOD = Method(
    "Sensitivity",
    "Δ_low = NCC(x·(1−δ)) − NCC(x);  Δ_high = NCC(x·(1+δ)) − NCC(x)    [animals]",
    "Each input group is moved down and up by the fraction δ, one at a time, and total NCC "
    "is solved again; inputs are ranked by |Δ_high − Δ_low|.",
    "One-at-a-time perturbation (common practice).",
)

TREND_METHOD = Method(
    "Population trend",
    "λ = N(t+1)/N(t);  r = ln λ;  MSY level = K/2;  MSY = r_max·K/4",
    population.LOGISTIC_METHOD + ".",
    "The logistic model and maximum sustained yield (textbook population ecology); "
    "May, R.M. 1974. Science 186:645–647 (discrete logistic, from memory).",
)


def methods(*, intervals: bool, sensitivity: bool, trend: bool) -> tuple[Method, ...]:
    """The method entries of this run: the core, then those of the optional analyses."""
    optional = (
        (intervals, BOOTSTRAP_METHOD),
        (sensitivity, SENSITIVITY_METHOD),
        (trend, TREND_METHOD),
    )
    return METHODS + tuple(method for used, method in optional if used)


# --- 12. parameters ---------------------------------------------------------------------------


def _parameters(
    estimate: Estimate, project: Project, animals: pd.DataFrame, forage: pd.DataFrame
) -> dict:
    season = project.config.project.season
    return {
        "states": _state_rows(animals, season, project),
        "animals": _animal_rows(animals, project),
        "forage": _forage_rows(forage, project),
        "settings": _threshold_rows(estimate, project),
    }


STATE_COLUMNS = [
    Column("state", "State"),
    Column("season", "Season"),
    _numeric("bmr_multiplier", "m [× BMR]", TWO_DECIMALS),
    _numeric("intake_g_per_kg075_per_day", "Intake i [g DM/kg^0.75/day]", ONE_DECIMAL),
    _numeric("dp_g_per_kg075_per_day", "DP p [g/kg^0.75/day]", ONE_DECIMAL),
    Column("used_by", "Used by"),
    Column("source", "Source"),
]


def _state_rows(animals: pd.DataFrame, season: str, project: Project) -> dict:
    states = energetics.NUTRITIONAL_STATES.copy()
    users: dict[tuple[str, str], list[str]] = {}
    target = project.config.target
    pairs = [(name, state) for name, state in zip(animals["animal_class"], animals["state"])]
    if target.state is not None:
        pairs.append((f"target ({target.animal_class})", target.state))
    for name, state in pairs:
        row = energetics.state_parameters(state, season)
        users.setdefault((row["state"], row["season"]), []).append(str(name))
    states["used_by"] = [
        ", ".join(users.get((s, z), [])) for s, z in zip(states["state"], states["season"])
    ]
    return table(states, STATE_COLUMNS, flag=states["used_by"] != "")


def _animal_rows(animals: pd.DataFrame, project: Project) -> dict:
    frame = animals.copy()
    frame["provenance"] = f"project input: {project.input_path('animal_classes').name}"
    columns = [
        Column("animal_class", "Animal class"),
        _numeric("body_mass_kg", "Body mass [kg]", ONE_DECIMAL),
        _numeric("share", "Share of herd", TWO_DECIMALS),
        Column("state", "State"),
        _numeric("intake_kg_per_day", "Intake override [kg DM/day]", TWO_DECIMALS),
        Column("provenance", "Provenance"),
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
        Column("forage_class", "Forage class"),
        Column("stratum", "Stratum"),
        _numeric("de_kcal_per_g", "DE [kcal/g DM]", THREE_DECIMALS),
        _numeric("dmd_pct", "DMD [%]", ONE_DECIMAL),
        _numeric("cp_pct", "CP [% DM]", ONE_DECIMAL),
        _numeric("tannin", "Tannin [mg BSA/mg]", THREE_DECIMALS),
        _numeric("dp_pct", "DP from CP [% DM]", TWO_DECIMALS),
        _numeric("allowable_use", "Allowable use [fraction]", TWO_DECIMALS),
        Column("key", "Key"),
        Column("provenance", "Provenance"),
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
            _text(config.forage_use.cap_at_allowable_use),
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
    frame = pd.DataFrame(rows, columns=["name", "value", "provenance"])
    columns = [
        Column("name", "Parameter"),
        Column("value", "Value", numeric=True),
        Column("provenance", "Provenance"),
    ]
    return table(frame, columns)


# --- 13. manifest -----------------------------------------------------------------------------


def _manifest(manifest: dict) -> dict:
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
