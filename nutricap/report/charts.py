"""The report's charts: capacity by unit, population trend, treatment scenarios, tornado.

Every function takes results it is handed (tables, arrays) and returns a
:class:`matplotlib.figure.Figure` (:func:`nutricap.report.figure_style.new_figure`). Nothing
here computes capacity: sums over units for a chart total, and a scenario total minus its
baseline, are the only arithmetic.
"""

from __future__ import annotations

import math
from collections.abc import Sequence

import numpy as np
import pandas as pd
from matplotlib.figure import Figure
from matplotlib.lines import Line2D
from matplotlib.ticker import FuncFormatter

from nutricap.report.figure_style import (
    OKABE_ITO,
    THOUSANDS,
    distinct_tick_labels,
    label,
    new_figure,
    require_columns,
    scenario_colour,
    signed_animals,
)

#: Style of each capacity series: label, colour, marker.
CAPACITY_SERIES = {
    "ncc_animals": ("NCC (diet quality)", OKABE_ITO["blue"], "o"),
    "allowable_use_animals": ("Allowable-use capacity", OKABE_ITO["orange"], "s"),
    "ecc_animals": ("ECC (forage quantity)", OKABE_ITO["bluish_green"], "^"),
}

#: Largest number of units drawn in the per-unit chart.
MAX_UNITS_CHART = 40


# --- per-unit capacity chart ------------------------------------------------------------------


def capacity_figure(
    by_unit: pd.DataFrame,
    *,
    season_days: float | None = None,
    interval_level: float | None = None,
    max_units: int = MAX_UNITS_CHART,
) -> Figure:
    """Dot chart of NCC, allowable-use capacity and ECC per unit, with interval whiskers.

    Parameters
    ----------
    by_unit : pandas.DataFrame
        Per-unit table with ``unit_id``, ``ncc_animals``, ``ecc_animals``,
        ``allowable_use_animals`` [animals]; optional ``<name>_lo``/``<name>_hi`` interval
        bounds [animals] and ``current_animals`` [animals].
    season_days : float, optional
        Season length [days], for the axis label.
    interval_level : float, optional
        Level of the intervals (e.g. 0.9), for the legend.
    max_units : int, default :data:`MAX_UNITS_CHART`
        Draw at most this many units (those with the largest ECC); the table has them all.

    Returns
    -------
    matplotlib.figure.Figure
    """
    shown = by_unit
    if len(by_unit) > max_units:
        shown = by_unit.nlargest(max_units, "ecc_animals")
    shown = shown.iloc[::-1]
    figure = new_figure(8.0, max(3.0, 0.45 * len(shown) + 1.6))
    ax = figure.add_subplot()
    rows = np.arange(len(shown), dtype=float)
    offsets = np.linspace(-0.22, 0.22, len(CAPACITY_SERIES))
    for offset, (column, style) in zip(offsets, CAPACITY_SERIES.items()):
        _capacity_series(ax, shown, column, rows + offset, style, interval_level)
    if "current_animals" in shown.columns:
        ax.plot(
            shown["current_animals"].to_numpy(dtype=float),
            rows,
            linestyle="none",
            marker="x",
            markersize=8,
            color=OKABE_ITO["black"],
            label="Current animals",
        )
    ax.set_yticks(rows, [label(unit) for unit in shown["unit_id"]])
    ax.set_ylabel("Management unit")
    days = f" for the {season_days:g}-day season" if season_days else ""
    ax.set_xlabel(f"Capacity [animals{days}]")
    ax.xaxis.set_major_formatter(THOUSANDS)
    ax.set_xlim(left=0.0)
    ax.grid(axis="x", color="#dddddd")
    # beside the plot, not over it: a unit's dots or whiskers may lie anywhere
    ax.legend(loc="upper left", bbox_to_anchor=(1.01, 1.0), fontsize=8, frameon=False)
    title = "NCC, allowable-use capacity and ECC by unit"
    if len(shown) < len(by_unit):
        title += f" ({len(shown)} of {len(by_unit)} units, largest ECC)"
    ax.set_title(title)
    return figure


def _capacity_series(
    ax,
    table: pd.DataFrame,
    column: str,
    rows: np.ndarray,
    style: tuple,
    interval_level: float | None,
) -> None:
    words, colour, marker = style
    values = table[column].to_numpy(dtype=float)
    low, high = f"{column}_lo", f"{column}_hi"
    if {low, high} <= set(table.columns):
        errors = np.vstack(
            [values - table[low].to_numpy(dtype=float), table[high].to_numpy(dtype=float) - values]
        )
        level = f", {100 * interval_level:g} % interval" if interval_level else ", interval"
        ax.errorbar(
            values,
            rows,
            xerr=np.clip(errors, 0.0, None),
            fmt=marker,
            color=colour,
            ecolor=colour,
            elinewidth=1.2,
            capsize=3,
            markersize=6,
            label=words + level,
        )
    else:
        ax.plot(
            values, rows, linestyle="none", marker=marker, color=colour, markersize=6, label=words
        )


# --- population trend ---------------------------------------------------------------------


FAR_ABOVE = 3.0
"""A reference line above this many times the largest count (or fitted count) is named in the
trend chart's legend instead of drawn, so that the counts keep the chart's height."""


def population_trend_figure(
    years: Sequence[float],
    counts: Sequence[float],
    fitted_years: Sequence[float] | None,
    fitted_counts: Sequence[float] | None,
    K: float | None,
    ncc_animals: float | None,
    ecc_animals: float | None,
) -> Figure:
    """Counts over time with the fitted logistic and reference lines K, K/2, NCC and ECC.

    Parameters
    ----------
    years, counts : sequence of float
        Year [year] and count [animals, an index with detection error] of each survey.
    fitted_years, fitted_counts : sequence of float, optional
        The fitted curve [year], [animals]; None when no curve was fitted.
    K : float or None
        Fitted ceiling [animals]; None when the series shows no evidence of one (the K and
        K/2 lines are then left out and the title and legend say so).
    ncc_animals, ecc_animals : float or None
        Forage NCC and ECC of the same area [animals]; None to leave a line out.

    Returns
    -------
    matplotlib.figure.Figure
    """
    figure = new_figure(8.0, 4.8)
    ax = figure.add_subplot()
    ax.plot(
        years, counts, linestyle="none", marker="o", color=OKABE_ITO["black"], label="Count (index)"
    )
    if fitted_years is not None and fitted_counts is not None:
        ax.plot(
            fitted_years,
            fitted_counts,
            color=OKABE_ITO["sky_blue"],
            linewidth=2,
            label="Fitted logistic",
        )
    half = None if K is None else K / 2.0
    lines = [
        (K, "K (fitted ceiling)", OKABE_ITO["vermillion"], "-"),
        (half, "K/2 (maximum sustained yield level)", OKABE_ITO["vermillion"], ":"),
        (ncc_animals, "NCC from forage", OKABE_ITO["blue"], "--"),
        (ecc_animals, "ECC from forage", OKABE_ITO["bluish_green"], "-."),
    ]
    top = float(np.nanmax(np.asarray([*counts, *(fitted_counts or [])], dtype=float)))
    above = []  # lines far above the counts: named, not drawn (they would flatten them)
    for value, words, colour, style in lines:
        if value is None or not math.isfinite(value):
            continue
        if value > FAR_ABOVE * top:
            above.append(f"{words}: {value:,.0f} (above the chart)")
            continue
        ax.axhline(
            value, color=colour, linestyle=style, linewidth=1.5, label=f"{words}: {value:,.0f}"
        )
    handles, labels = ax.get_legend_handles_labels()
    for words in above:
        handles.append(Line2D([], [], linestyle="none"))
        labels.append(words)
    title = "Counts over time beside forage capacity"
    if K is None:
        handles.append(Line2D([], [], linestyle="none"))
        labels.append("no evidence of a ceiling: K not drawn")
        title += " (no evidence of a ceiling)"
    # beside the plot: the reference lines run across all of it
    ax.legend(
        handles, labels, fontsize=8, loc="upper left", bbox_to_anchor=(1.01, 1.0), frameon=False
    )
    ax.set_xlabel("Year")
    ax.set_ylabel("Animals [count index]")
    ax.yaxis.set_major_formatter(THOUSANDS)
    ax.set_ylim(bottom=0.0)
    ax.grid(color="#eeeeee")
    ax.set_title(title)
    return figure


# --- treatment scenarios ------------------------------------------------------------------

SCENARIO_COLUMNS = ("unit_id", "scenario", "year", "ncc_animals_baseline", "ncc_animals_scenario")

SCENARIO_FIGURES = (
    ("ncc", "NCC"),
    ("allowable_use", "Allowable-use capacity"),
    ("ecc", "ECC"),
)
"""The capacity figures charted for a scenario: column stem and panel title."""

#: Room above the highest line of a panel whose y axis starts at zero [share of the highest].
HEADROOM = 0.08


def scenario_figure(
    scenario_table: pd.DataFrame,
    *,
    per_unit: bool = False,
    treatment_years: dict[str, Sequence[int]] | None = None,
) -> Figure:
    """NCC, allowable-use capacity and ECC over the years, baseline against each scenario.

    Parameters
    ----------
    scenario_table : pandas.DataFrame
        Columns ``unit_id, scenario, year, ncc_animals_baseline, ncc_animals_scenario``
        [animals], and the same pair for ``allowable_use`` and ``ecc`` when present.
    per_unit : bool, default False
        Add one small panel per unit of its change in NCC under the panels of the totals.
    treatment_years : dict of str → sequence of int, optional
        Calendar years in which each scenario treats land, marked by vertical dotted lines.

    Returns
    -------
    matplotlib.figure.Figure
        First row: each total over units, y axis from zero. Second row: each total's change
        from its baseline [animals], around zero (the baseline). Then, with ``per_unit``, the
        change in NCC of each unit. Tick labels carry as many decimals as keep them apart.
    """
    require_columns(scenario_table, SCENARIO_COLUMNS, "scenario table")
    shown = [
        (stem, title)
        for stem, title in SCENARIO_FIGURES
        if {f"{stem}_animals_baseline", f"{stem}_animals_scenario"} <= set(scenario_table.columns)
    ]
    units = list(dict.fromkeys(scenario_table["unit_id"])) if per_unit else []
    columns = 3
    unit_rows = math.ceil(len(units) / columns)
    figure = new_figure(10.0, 3.4 + 2.5 + 2.2 * unit_rows)
    grid = figure.add_gridspec(2 + unit_rows, columns, height_ratios=[1.5, 1.2] + [1.0] * unit_rows)
    years = treatment_years or {}
    for index, (stem, title) in enumerate(shown):
        totals = _scenario_totals(scenario_table, stem)
        ax = figure.add_subplot(grid[0, index])
        _level_panel(ax, totals, years, legend=index == 0)
        ax.set_title(f"{title}, total over units", fontsize=10)
        ax = figure.add_subplot(grid[1, index])
        _change_panel(ax, totals, years)
        ax.set_title(f"{title}: change from baseline", fontsize=10)
    for index, unit in enumerate(units):
        ax = figure.add_subplot(grid[2 + index // columns, index % columns])
        rows = scenario_table[scenario_table["unit_id"] == unit]
        _change_panel(ax, _scenario_totals(rows, "ncc"), years, small=True)
        ax.set_title(f"NCC change, {label(unit)}", fontsize=9)
    return figure


def _scenario_totals(table: pd.DataFrame, stem: str) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Baseline and scenario totals of ``stem`` over the table's units: year × scenario."""
    base_column, scenario_column = f"{stem}_animals_baseline", f"{stem}_animals_scenario"
    totals = table.groupby(["scenario", "year"], sort=False)[[base_column, scenario_column]].sum()
    order = list(dict.fromkeys(table["scenario"]))
    baseline = totals[base_column].unstack("scenario").sort_index()[order]
    scenario = totals[scenario_column].unstack("scenario").sort_index()[order]
    return baseline, scenario


def _level_panel(ax, totals, treatment_years, *, legend: bool) -> None:
    """Baseline (black dashed) and one line per scenario, y axis from zero."""
    baseline, scenario = totals
    same = baseline.apply(
        lambda column: np.allclose(column, baseline.iloc[:, 0], equal_nan=True)
    ).all()
    for name, series in (baseline.iloc[:, :1] if same else baseline).items():
        ax.plot(
            series.index,
            series.to_numpy(),
            color=OKABE_ITO["black"],
            linestyle="--",
            marker=".",
            label="baseline" if same else f"baseline ({label(name)})",
        )
    _scenario_lines(ax, scenario, treatment_years)
    highest = np.nanmax([np.nanmax(baseline.to_numpy()), np.nanmax(scenario.to_numpy()), 0.0])
    ax.set_ylim(0.0, highest * (1.0 + HEADROOM) if highest > 0 else 1.0)
    _year_axis(ax, "Capacity [animals]")
    distinct_tick_labels(ax.yaxis)
    if legend:
        ax.legend(fontsize=7, framealpha=0.9, loc="lower left")


def _change_panel(ax, totals, treatment_years, *, small: bool = False) -> None:
    """Each scenario total minus its baseline [animals]; the baseline is the zero line."""
    baseline, scenario = totals
    ax.axhline(0.0, color=OKABE_ITO["black"], linestyle="--", linewidth=1.0)
    _scenario_lines(ax, scenario - baseline, treatment_years)
    _year_axis(ax, "Change [animals]")
    low, high = ax.get_ylim()
    if high - low < 2.0:  # no change at all: a readable band around zero
        ax.set_ylim(-1.0, 1.0)
    distinct_tick_labels(ax.yaxis, signed=True)
    if small:
        ax.tick_params(labelsize=7)
        ax.xaxis.label.set_size(7)
        ax.yaxis.label.set_size(7)


def _scenario_lines(ax, frame: pd.DataFrame, treatment_years) -> None:
    for index, (name, series) in enumerate(frame.items()):
        colour = scenario_colour(index)
        ax.plot(
            series.index,
            series.to_numpy(),
            color=colour,
            linewidth=2,
            marker="o",
            markersize=3,
            label=f"scenario: {label(name)}",
        )
        for year in treatment_years.get(name, ()):
            ax.axvline(year, color=colour, linestyle=":", linewidth=1.2)
    if any(treatment_years.get(name) for name in frame.columns):
        ax.plot([], [], color="#555555", linestyle=":", label="treatment year")


def _year_axis(ax, y_label: str) -> None:
    ax.set_xlabel("Year")
    ax.set_ylabel(y_label)
    ax.xaxis.get_major_locator().set_params(integer=True)
    ax.grid(color="#eeeeee")


# --- sensitivity tornado --------------------------------------------------------------------

TORNADO_COLUMNS = ("input", "low_change_animals", "high_change_animals")

#: Largest number of inputs drawn in the tornado chart (the table lists them all).
MAX_TORNADO_INPUTS = 15


def tornado_figure(
    sensitivity_table: pd.DataFrame,
    *,
    change: float | None = None,
    max_inputs: int = MAX_TORNADO_INPUTS,
) -> Figure:
    """Tornado chart of the change in capacity when each input is set low and high.

    Parameters
    ----------
    sensitivity_table : pandas.DataFrame
        Columns ``input`` (name), ``low_change_animals`` and ``high_change_animals``: change in
        total NCC with the input at its low and at its high value [animals].
    change : float, optional
        The fractional change that made the low and high values (0.1 for ±10 %), for the
        legend.
    max_inputs : int, default :data:`MAX_TORNADO_INPUTS`
        Draw at most this many inputs (the widest ranges); the title says when some are left
        out.

    Returns
    -------
    matplotlib.figure.Figure
        Inputs sorted by range |high − low|, the widest at the top; inputs that change
        nothing either way are left out (the title counts them).
    """
    require_columns(sensitivity_table, TORNADO_COLUMNS, "sensitivity table")
    changes = sensitivity_table[["low_change_animals", "high_change_animals"]]
    moving = sensitivity_table[(changes != 0.0).any(axis=1)]  # no bar to draw for the others
    table = sort_by_range(moving).iloc[:max_inputs].iloc[::-1]
    figure = new_figure(8.0, max(2.8, 0.42 * len(table) + 1.5))
    ax = figure.add_subplot()
    rows = np.arange(len(table))
    low, high = ("low value", "high value") if not change else (f"{-change:+.0%}", f"{change:+.0%}")
    bars = (
        ("low_change_animals", OKABE_ITO["sky_blue"], None, low),
        ("high_change_animals", OKABE_ITO["vermillion"], "//", high),
    )
    for column, colour, hatch, words in bars:
        ax.barh(
            rows,
            table[column].to_numpy(dtype=float),
            height=0.6,
            color=colour,
            edgecolor=OKABE_ITO["black"],
            hatch=hatch,
            label=f"input at {words}",
        )
    ax.axvline(0.0, color=OKABE_ITO["black"], linewidth=1)
    ax.set_axisbelow(True)
    ax.set_yticks(rows, [str(name) for name in table["input"]])
    ax.set_ylabel("Input")
    ax.set_xlabel("Change in total NCC [animals]")
    ax.xaxis.set_major_formatter(FuncFormatter(signed_animals))
    ax.grid(axis="x", color="#eeeeee")
    ax.legend(fontsize=8, framealpha=0.9)
    title = "Sensitivity of total NCC to each input"
    left_out = [f"{len(table)} widest of {len(moving)}"] if len(table) < len(moving) else []
    if len(moving) < len(sensitivity_table):
        left_out.append(f"{len(sensitivity_table) - len(moving)} with no effect not drawn")
    if left_out:
        title += f" ({'; '.join(left_out)})"
    ax.set_title(title)
    return figure


def sort_by_range(sensitivity_table: pd.DataFrame) -> pd.DataFrame:
    """Rows sorted by |high − low| change, largest first (ties keep their order)."""
    spread = (
        sensitivity_table["high_change_animals"] - sensitivity_table["low_change_animals"]
    ).abs()
    order = np.argsort(-spread.to_numpy(dtype=float), kind="stable")
    return sensitivity_table.iloc[order]
