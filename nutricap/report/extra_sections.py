"""Sections of the HTML report for optional results: sensitivity, treatment scenarios, trend.

Each function returns the template context of its section, or None when the result was
not given (see :class:`nutricap.report.html.ReportExtras`).
"""

from __future__ import annotations

import dataclasses
import math
from typing import Any

import pandas as pd

from nutricap.cautions import CAUTION
from nutricap.report import figures
from nutricap.report.formatting import (
    ONE_DECIMAL,
    THREE_DECIMALS,
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
        ),
        "table": table(ordered, columns),
        "change": f"±{100 * change:g} %" if change else "its low and its high value",
    }


def _signed(value: Any) -> str:
    return "–" if is_missing(value) else figures.signed_animals(float(value))


# --- 7. treatment scenarios -------------------------------------------------------------------

SCENARIO_TOTAL_COLUMNS = [
    Column("scenario", "Scenario"),
    Column("year", "Year"),
    numeric_column("ncc_animals_baseline", "Baseline NCC [animals]"),
    numeric_column("ncc_animals_scenario", "Scenario NCC [animals]"),
    numeric_column("change_animals", "Change [animals]", _signed),
]

SCENARIO_UNIT_COLUMNS = [
    Column("unit_id", "Unit"),
    *SCENARIO_TOTAL_COLUMNS[:2],
    Column("years_since_treatment", "Years since treatment", format_auto, numeric=True),
    *SCENARIO_TOTAL_COLUMNS[2:],
]


def scenario(scenario_table: pd.DataFrame | None) -> dict | None:
    """The treatment-scenario section: chart, totals and per-unit table, or None."""
    if scenario_table is None:
        return None
    units = scenario_table["unit_id"].nunique()
    chart = figures.scenario_figure(scenario_table, per_unit=units <= MAX_SCENARIO_PANELS)
    totals = scenario_table.groupby(["scenario", "year"], as_index=False, sort=True)[
        ["ncc_animals_baseline", "ncc_animals_scenario"]
    ].sum()
    totals["change_animals"] = totals["ncc_animals_scenario"] - totals["ncc_animals_baseline"]
    return {
        "figure": embedded_figure(
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
    return {
        "figure": embedded_figure(
            chart,
            "Counts over time with the fitted curve and the reference lines K, K/2, NCC and ECC.",
        ),
        "series": format_text(data.get("series")),
        "area": area,
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
    Column("unit_id", "Unit"),
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
