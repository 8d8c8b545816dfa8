"""Sections of the HTML report for optional results: sensitivity, treatment scenarios, trend.

Each function returns the template context of its section, or None when the result was
not given (see :class:`nutricap.report.html.ReportExtras`).
"""

from __future__ import annotations

import dataclasses
import math
from typing import Any

import geopandas as gpd
import pandas as pd

from nutricap.cautions import CAUTION
from nutricap.model.scenarios import treatment_years
from nutricap.report import figures
from nutricap.report.formatting import (
    FORAGE_CLASS,
    ONE_DECIMAL,
    SCENARIO,
    THREE_DECIMALS,
    TREATMENT,
    TWO_DECIMALS,
    UNIT,
    YEAR,
    Column,
    embedded_figure,
    format_auto,
    format_text,
    is_missing,
    numeric_column,
    table,
)
from nutricap.report.trend_text import TREND_CAUTIONS

#: Units drawn as small multiples in the scenario chart at most (more: total panel only).
MAX_SCENARIO_PANELS = 12

# --- sensitivity ------------------------------------------------------------------------------


def sensitivity(sensitivity_table: pd.DataFrame | None, change: float | None) -> dict | None:
    """The sensitivity section: tornado chart and table, or None."""
    if sensitivity_table is None:
        return None
    ordered = figures.sort_by_range(sensitivity_table).copy()
    ordered["range_animals"] = (
        ordered["high_change_animals"] - ordered["low_change_animals"]
    ).abs()
    known = ["input", "low_change_animals", "high_change_animals", "range_animals"]
    columns = [
        Column("input", "Input"),
        numeric_column("low_change_animals", "Change with input low [animals]", _signed),
        numeric_column("high_change_animals", "Change with input high [animals]", _signed),
        numeric_column("range_animals", "Range [animals]"),
    ] + [
        Column(name, name.replace("_", " "), format_auto, numeric=True)
        for name in ordered.columns
        if name not in known
    ]
    return {
        "figure": embedded_figure(
            figures.tornado_figure(sensitivity_table, change=change),
            "Tornado chart of the change in total NCC for each input.",
            "sensitivity_tornado",
        ),
        "table": table(ordered, columns),
        "change": f"±{100 * change:g} %" if change else "its low and its high value",
    }


def _signed(value: Any) -> str:
    return "–" if is_missing(value) else figures.signed_animals(float(value))


# --- 7. treatment scenarios -------------------------------------------------------------------

SCENARIO_TOTAL_COLUMNS = [
    SCENARIO,
    YEAR,
    numeric_column("ncc_animals_baseline", "Baseline NCC [animals]"),
    numeric_column("ncc_animals_scenario", "Scenario NCC [animals]"),
    numeric_column("change_animals", "Change in NCC [animals]", _signed),
    numeric_column("allowable_use_animals_scenario", "Scenario allowable-use capacity [animals]"),
    numeric_column("ecc_animals_scenario", "Scenario ECC [animals]"),
]

SCENARIO_UNIT_COLUMNS = [
    UNIT,
    *SCENARIO_TOTAL_COLUMNS[:2],
    Column("years_since_treatment", "Years since treatment", format_auto, numeric=True),
    *SCENARIO_TOTAL_COLUMNS[2:5],
]

TREATED_COLUMNS = [
    SCENARIO,
    TREATMENT,
    YEAR,
    UNIT,
    Column("stratum", "Stratum treated"),
    Column("new_stratum", "Becomes stratum"),
    numeric_column("accessible_ha", "Treated area [ha, accessible]", ONE_DECIMAL),
]

RESPONSE_COLUMNS = [
    TREATMENT,
    FORAGE_CLASS,
    Column("growth_form", "Growth form"),
    numeric_column("years_since", "Years since treatment", format_auto),
    numeric_column("biomass_multiplier", "Biomass × [–]", TWO_DECIMALS),
    numeric_column("de_shift_kcal_per_g", "DE shift [kcal/g]", THREE_DECIMALS),
    numeric_column("cp_shift_pct", "CP shift [% points]", ONE_DECIMAL),
]

SCENARIO_METHOD = (
    "Each treatment polygon is overlaid on the units' stratum pieces; from its treatment year "
    "on, the treated hectares become patches of their own (of the new stratum when one is "
    "given), whose forage is the stratum's clip-plot mean changed by the response table: "
    "biomass multiplied, DE and CP shifted, by forage class or by growth form. NCC, ECC and "
    "allowable-use capacity are then solved again for every year, with the same diet target, "
    "herd and settings as the baseline; the baseline is the estimate above, the same every "
    "year. A response is interpolated linearly between the years listed. In the treatment year "
    "(0 years since) and before the first listed year the first listed value applies (a table "
    "starting at year 1 therefore acts in the treatment year already); after the last listed "
    "year the treated land returns to its untreated forage at once. List a year 0 row for the "
    "treatment year and a last row at the untreated value (multiplier 1, shifts 0) for a "
    "gradual return."
)


def scenario(
    scenario_table: pd.DataFrame | None,
    scenarios: list | None = None,
    units: gpd.GeoDataFrame | None = None,
) -> dict | None:
    """The treatment-scenario section: description, treatments and their map, responses,
    chart, tables (``units``: the unit polygons under the treatment map)."""
    if scenario_table is None:
        return None
    n_units = scenario_table["unit_id"].nunique()
    scenarios = scenarios or []
    years = treatment_years(scenarios)
    chart = figures.scenario_figure(
        scenario_table, per_unit=n_units <= MAX_SCENARIO_PANELS, treatment_years=years
    )
    summed = [name for name in SCENARIO_SUMMED if name in scenario_table.columns]
    totals = scenario_table.groupby(["scenario", "year"], as_index=False, sort=False)[summed].sum()
    totals["change_animals"] = totals["ncc_animals_scenario"] - totals["ncc_animals_baseline"]
    return {
        "figure": embedded_figure(
            chart,
            "Line charts of NCC, allowable-use capacity and ECC over the years, baseline "
            "against each treatment scenario, with their change from the baseline, treatment "
            "years marked.",
            "scenario_by_year",
        ),
        "map": _treatment_map(scenarios, units),
        "per_unit_panels": n_units <= MAX_SCENARIO_PANELS,
        "described": [_described(s) for s in scenarios],
        "treated": _treated_table(scenarios),
        "responses": _responses_table(scenarios),
        "method": SCENARIO_METHOD,
        "totals": table(totals, SCENARIO_TOTAL_COLUMNS),
        "by_unit": table(scenario_table, SCENARIO_UNIT_COLUMNS),
    }


SCENARIO_SUMMED = (
    "ncc_animals_baseline",
    "ncc_animals_scenario",
    "allowable_use_animals_scenario",
    "ecc_animals_scenario",
)


def _treatment_map(scenarios: list, units: gpd.GeoDataFrame | None) -> dict | None:
    """The treatment polygons of every scenario over the units, or None without them."""
    layers = [(s.name, s.treatments) for s in scenarios if s.treatments is not None]
    if units is None or not layers:
        return None
    return embedded_figure(
        figures.treatment_map(units, layers),
        "Map of the treatment polygons of each scenario over the management units.",
        "scenario_treatments_map",
    )


def _described(scenario) -> dict:
    section = scenario.section
    treated = scenario.treated
    return {
        "name": scenario.name,
        "description": section.description or "(no description in the project file)",
        "years": f"{section.first_year}–{section.last_year}",
        "treatments": ", ".join(sorted(set(map(str, treated["treatment"])))) or "none",
        "hectares": ONE_DECIMAL(treated["accessible_ha"].sum()),
        "responses": str(section.responses),
    }


def _treated_table(scenarios: list) -> dict | None:
    if not scenarios:
        return None
    frames = [s.treated.assign(scenario=s.name) for s in scenarios]
    frame = pd.concat(frames, ignore_index=True)
    frame["new_stratum"] = frame["new_stratum"].replace("", "(same)")
    keys = ["scenario", "treatment", "year", "unit_id", "stratum", "new_stratum"]
    order = {name: index for index, name in enumerate(s.name for s in scenarios)}
    frame = frame.groupby(keys, as_index=False, sort=False)["accessible_ha"].sum()
    frame = frame.sort_values(
        ["scenario", "year", "unit_id", "stratum"], key=_scenario_order(order), kind="stable"
    )
    return table(frame, TREATED_COLUMNS)


def _scenario_order(order: dict):
    """Sort key: scenarios in the order they were compared, other columns as they are."""
    return lambda column: column.map(order) if column.name == "scenario" else column


def _responses_table(scenarios: list) -> dict | None:
    """The response rows of the treatments the scenarios apply (each table once)."""
    if not scenarios:
        return None
    rows = []
    for s in scenarios:
        used = set(map(str, s.treated["treatment"]))
        rows.append(s.responses[s.responses["treatment"].isin(used)])
    frame = pd.concat(rows, ignore_index=True).drop_duplicates()
    return table(frame, RESPONSE_COLUMNS)


# --- 8. population trend ----------------------------------------------------------------------


def _as_mapping(trend: Any) -> dict:
    if dataclasses.is_dataclass(trend) and not isinstance(trend, type):
        return dataclasses.asdict(trend)
    return dict(trend)


def trend(result: Any, by_unit: pd.DataFrame) -> dict | None:
    """The population-trend section: chart, fitted figures and cautions, or None."""
    if result is None:
        return None
    data = _as_mapping(result)
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
    level = data.get("level")
    unmatched = [str(unit) for unit in data.get("unmatched_units") or []]
    notes = []
    if unmatched:
        notes.append(
            f"Counts of {len(unmatched)} unit id(s) that match no management unit "
            f"({', '.join(unmatched)}) are in the counted total but have no NCC or ECC here."
        )
    if level:
        notes.append(
            f"Intervals are at the report's {100 * level:g} % level ([uncertainty] "
            "interval_level), like the capacity intervals; the trend command's own default is "
            "95 % (--level)."
        )
    return {
        "figure": embedded_figure(
            chart,
            "Counts over time with the fitted curve and the reference lines K, K/2, NCC and ECC.",
            "population_trend",
        ),
        "series": format_text(data.get("series")),
        "area": area,
        "notes": notes,
        "statement": (data.get("capacity") or {}).get("statement"),
        "fitted": data.get("fitted_counts") is not None,
        "ceiling": K is not None,
        "figures": _trend_figures(data),
        "cautions": [caution for caution in TREND_CAUTIONS if caution != CAUTION],
    }


def _finite_or_none(value: Any) -> float | None:
    if is_missing(value):
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
            if data.get("counted_all_units"):
                area = f"all {len(units)} units (the counts cover every unit)"
            elif units:
                area = f"the {len(units)} counted units ({', '.join(map(str, units))})"
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
    if not bounds or any(is_missing(b) for b in bounds):
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
        if not is_missing(value):
            bounds = _interval(data, interval, digits) if interval else ""
            shown[label] = f"{float(value):,.{digits}f}" + bounds
    for name, label in (("phase", "Phase"), ("ceiling_reason", "Ceiling evidence")):
        if data.get(name):
            shown[label] = str(data[name])
    return shown


# --- other herbivores on the shared range -----------------------------------------------------

SHARED_RANGE_COLUMNS = [
    Column("herd", "Herd"),
    Column("timing", "Timing"),
    UNIT,
    numeric_column("taken_aum", "Forage taken [AUM]", ONE_DECIMAL),
    numeric_column("unmet_aum", "Demand unmet [AUM]", ONE_DECIMAL),
    numeric_column("ncc_animals_without_others", "NCC without other herbivores [animals]"),
    numeric_column("ncc_animals", "NCC with them [animals]"),
    numeric_column("ncc_lost_animals", "NCC lost to this herd [animals]"),
    numeric_column("ncc_lost_per_aum", "NCC lost per AUM taken [animals/AUM]", THREE_DECIMALS),
]


def shared_range(shared: Any, by_unit: pd.DataFrame) -> dict | None:
    """The shared-range section: per herd and unit where it grazes, the forage it takes and
    NCC with and without the other herbivores, or None without other herbivores."""
    if shared is None:
        return None
    rows = shared.by_herd[shared.by_herd["demand_aum"] > 0]
    ncc = by_unit[["unit_id", "ncc_animals", "ncc_animals_without_others"]]
    rows = rows.merge(ncc, on="unit_id", how="left", sort=False)
    return {"table": table(rows, SHARED_RANGE_COLUMNS), "herds": rows["herd"].nunique()}
