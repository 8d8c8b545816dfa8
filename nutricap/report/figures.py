"""Figures of the HTML report: map, capacity chart, population trend, scenarios, tornado.

Every function takes results it is handed (tables, arrays) and returns a
:class:`matplotlib.figure.Figure` built without pyplot (no global state, Agg
canvas); :func:`figure_png` turns one into PNG bytes. Nothing here computes
capacity: sums over units for a chart total are the only arithmetic.

Colours are the Okabe & Ito (2008) colour-blind-safe set and the ``cividis``
colour map (Nuñez, Anderton & Renslow 2018), and every series also differs by
marker or line style, so no figure relies on colour alone.

References
----------
Okabe, M. & Ito, K. 2008. Color Universal Design (CUD): how to make figures and
    presentations that are friendly to colorblind people. Online guide (citation and hex
    codes from memory).
Nuñez, J.R., Anderton, C.R. & Renslow, R.S. 2018. Optimizing colormaps with consideration
    for color vision deficiency. PLoS ONE 13(7):e0199239 (citation from memory; the colour
    map itself is matplotlib's ``cividis``).
"""

from __future__ import annotations

import io
import math
from collections.abc import Sequence

import geopandas as gpd
import numpy as np
import pandas as pd
from matplotlib import patheffects
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.cm import ScalarMappable
from matplotlib.colors import Normalize
from matplotlib.figure import Figure
from matplotlib.lines import Line2D
from matplotlib.patches import Rectangle
from matplotlib.ticker import FuncFormatter

from nutricap.errors import printable

#: Okabe & Ito (2008) colour-blind-safe palette (hex codes from memory).
OKABE_ITO = {
    "black": "#000000",
    "orange": "#E69F00",
    "sky_blue": "#56B4E9",
    "bluish_green": "#009E73",
    "yellow": "#F0E442",
    "blue": "#0072B2",
    "vermillion": "#D55E00",
    "reddish_purple": "#CC79A7",
}

#: Colour map of the NCC-density map (perceptually uniform, colour-vision-deficiency safe).
DENSITY_CMAP = "cividis"

#: Style of each capacity series: label, colour, marker.
CAPACITY_SERIES = {
    "ncc_animals": ("NCC (diet quality)", OKABE_ITO["blue"], "o"),
    "allowable_use_animals": ("Allowable-use capacity", OKABE_ITO["orange"], "s"),
    "ecc_animals": ("ECC (forage quantity)", OKABE_ITO["bluish_green"], "^"),
}

#: Resolution of the embedded PNGs [dots per inch].
PNG_DPI = 110
#: Resolution of the PNG files in the output's figures/ folder [dots per inch] (print).
PRINT_DPI = 300

#: Largest number of units drawn in the per-unit chart, and labelled on the map.
MAX_UNITS_CHART = 40
MAX_UNITS_LABELLED = 30

_THOUSANDS = FuncFormatter(lambda value, _position: f"{value:,.0f}")


def figure_png(figure: Figure, *, dpi: int = PNG_DPI) -> bytes:
    """Render ``figure`` to PNG bytes with the Agg canvas.

    Parameters
    ----------
    figure : matplotlib.figure.Figure
    dpi : int, default :data:`PNG_DPI`
        Resolution [dots per inch].

    Returns
    -------
    bytes
        The PNG file's bytes.
    """
    buffer = io.BytesIO()
    figure.savefig(buffer, format="png", dpi=dpi, metadata={"Software": None})
    return buffer.getvalue()


def figure_svg(figure: Figure) -> bytes:
    """Render ``figure`` to SVG bytes (no date, so that a rerun writes the same file)."""
    buffer = io.BytesIO()
    figure.savefig(buffer, format="svg", metadata={"Date": None})
    return buffer.getvalue()


def _new_figure(width_in: float, height_in: float) -> Figure:
    figure = Figure(figsize=(width_in, height_in), layout="constrained")
    FigureCanvasAgg(figure)
    return figure


# --- (1) map of units shaded by NCC per km² -------------------------------------------------


def ncc_density_map(units: gpd.GeoDataFrame, by_unit: pd.DataFrame) -> Figure:
    """Map of the management units shaded by NCC density.

    Parameters
    ----------
    units : geopandas.GeoDataFrame
        Unit polygons with ``unit_id`` (the estimate's ``units``, in the area CRS).
    by_unit : pandas.DataFrame
        Per-unit table with ``unit_id`` and ``ncc_per_km2`` [animals/km²].

    Returns
    -------
    matplotlib.figure.Figure
        Units filled on the ``cividis`` scale with a colour bar in animals/km²; units without
        a value are hatched grey; unit names are written when there are at most
        :data:`MAX_UNITS_LABELLED` units.
    """
    shapes = units[["unit_id", "geometry"]].merge(
        by_unit[["unit_id", "ncc_per_km2"]], on="unit_id", how="left"
    )
    frame = gpd.GeoDataFrame(shapes, geometry="geometry", crs=units.crs)
    figure = _new_figure(*_map_size_in(frame.total_bounds))
    ax = figure.add_subplot()
    values = frame["ncc_per_km2"].to_numpy(dtype=float)
    norm = _density_norm(values)
    frame.plot(
        column="ncc_per_km2",
        cmap=DENSITY_CMAP,
        norm=norm,
        ax=ax,
        edgecolor="white",
        linewidth=0.8,
        missing_kwds={"color": "#d9d9d9", "hatch": "///", "label": "no value"},
    )
    colour_bar = figure.colorbar(ScalarMappable(norm=norm, cmap=DENSITY_CMAP), ax=ax, shrink=0.85)
    colour_bar.set_label("NCC density [animals/km²]")
    if len(frame) <= MAX_UNITS_LABELLED:
        _label_units(ax, frame)
    _map_axes(ax, frame.crs)
    ax.margins(0.02)
    _map_furniture(ax, frame.crs)
    ax.set_title("Nutritional carrying capacity per km² by unit")
    return figure


MAP_WIDTH_IN = 7.0


def _map_size_in(bounds: np.ndarray) -> tuple[float, float]:
    """Figure size [inches] that fits the layers' extent (map, colour bar and labels)."""
    width, height = float(bounds[2] - bounds[0]), float(bounds[3] - bounds[1])
    aspect = height / width if width > 0 and math.isfinite(height / width) else 0.8
    return MAP_WIDTH_IN, float(np.clip(1.3 + 0.78 * MAP_WIDTH_IN * aspect, 3.0, 9.0))


def scale_bar_length(extent: float) -> float:
    """A round length (1, 2 or 5 × 10^k) close to a quarter of ``extent`` [same unit]."""
    if not (extent > 0 and math.isfinite(extent)):
        return 0.0
    target = extent / 4.0
    power = 10.0 ** math.floor(math.log10(target))
    return max(step * power for step in (1.0, 2.0, 5.0) if step * power <= target)


def _map_furniture(ax, crs) -> None:
    """A scale bar (projected CRS in metres) and a grid-north arrow, drawn in the axes."""
    x0, x1 = ax.get_xlim()
    y0, y1 = ax.get_ylim()
    halo = [patheffects.withStroke(linewidth=3, foreground="white")]
    metres = (
        crs is not None
        and crs.is_projected
        and crs.axis_info[0].unit_name
        in (
            "metre",
            "meter",
        )
    )
    if metres:
        length = scale_bar_length(x1 - x0)
        left, base = x0 + 0.04 * (x1 - x0), y0 + 0.05 * (y1 - y0)
        for index in range(2):  # two halves, black and white, as on a printed map
            start = left + index * length / 2.0
            ax.add_patch(
                Rectangle(
                    (start, base),
                    length / 2.0,
                    0.012 * (y1 - y0),
                    facecolor=("black", "white")[index],
                    edgecolor="black",
                    linewidth=0.8,
                    zorder=5,
                )
            )
        words = f"{length / 1000:g} km" if length >= 1000 else f"{length:g} m"
        ax.annotate(
            words,
            (left + length / 2.0, base + 0.02 * (y1 - y0)),
            ha="center",
            va="bottom",
            fontsize=8,
            path_effects=halo,
            zorder=6,
        )
    tip = (x1 - 0.05 * (x1 - x0), y1 - 0.04 * (y1 - y0))
    tail = (tip[0], tip[1] - 0.12 * (y1 - y0))
    ax.annotate(
        "N",
        xy=tip,
        xytext=tail,
        ha="center",
        va="top",
        fontsize=10,
        fontweight="bold",
        arrowprops={
            "arrowstyle": "-|>",
            "color": "black",
            "linewidth": 1.5,
            "path_effects": halo,
        },
        path_effects=halo,
        zorder=6,
    )


def _density_norm(values: np.ndarray) -> Normalize:
    finite = values[np.isfinite(values)]
    if finite.size == 0:
        return Normalize(0.0, 1.0)
    low, high = float(finite.min()), float(finite.max())
    return Normalize(low, high if high > low else low + 1.0)


def _label(text: object) -> str:
    """An id as chart text: unprintable characters escaped, ``$`` not read as mathtext."""
    return printable(text).replace("$", r"\$")


def _label_units(ax, frame: gpd.GeoDataFrame) -> None:
    halo = [patheffects.withStroke(linewidth=2.5, foreground="white")]
    for unit_id, point in zip(frame["unit_id"], frame.geometry.representative_point()):
        if point is None or point.is_empty:
            continue
        ax.annotate(
            _label(unit_id),
            (point.x, point.y),
            ha="center",
            va="center",
            fontsize=8,
            path_effects=halo,
        )


def _map_axes(ax, crs) -> None:
    """Axis labels with the CRS's axis names and units; metres shown as km."""
    if crs is None:
        ax.set_xlabel("x [map units; layer has no CRS]")
        ax.set_ylabel("y [map units; layer has no CRS]")
        return
    code = crs.name if crs.name and crs.name != "unknown" else crs.to_string()
    by_direction = {info.direction.lower(): info for info in crs.axis_info}
    pairs = (
        (ax.xaxis, by_direction.get("east"), "Easting"),
        (ax.yaxis, by_direction.get("north"), "Northing"),
    )
    for axis, info, fallback in pairs:
        name = info.name if info is not None else fallback
        unit = info.unit_name if info is not None else "map units"
        if unit in ("metre", "meter"):
            axis.set_major_formatter(FuncFormatter(lambda value, _p: f"{value / 1000:,.0f}"))
            unit = "km"
        axis.set_label_text(f"{name} [{unit}] ({code})")


# --- (2) per-unit capacity chart --------------------------------------------------------------


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
    figure = _new_figure(8.0, max(3.0, 0.45 * len(shown) + 1.6))
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
    ax.set_yticks(rows, [_label(unit) for unit in shown["unit_id"]])
    ax.set_ylabel("Management unit")
    days = f" for the {season_days:g}-day season" if season_days else ""
    ax.set_xlabel(f"Capacity [animals{days}]")
    ax.xaxis.set_major_formatter(_THOUSANDS)
    ax.set_xlim(left=0.0)
    ax.grid(axis="x", color="#dddddd")
    ax.legend(loc="lower right", fontsize=8, framealpha=0.9)
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
    label, colour, marker = style
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
            label=label + level,
        )
    else:
        ax.plot(
            values, rows, linestyle="none", marker=marker, color=colour, markersize=6, label=label
        )


# --- (3) population trend ---------------------------------------------------------------------


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
    figure = _new_figure(8.0, 4.8)
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
    lines = [
        (K, "K (fitted ceiling)", OKABE_ITO["vermillion"], "-"),
        (
            None if K is None else K / 2.0,
            "K/2 (maximum sustained yield level)",
            OKABE_ITO["vermillion"],
            ":",
        ),
        (ncc_animals, "NCC from forage", OKABE_ITO["blue"], "--"),
        (ecc_animals, "ECC from forage", OKABE_ITO["bluish_green"], "-."),
    ]
    for value, label, colour, style in lines:
        if value is not None and math.isfinite(value):
            ax.axhline(
                value, color=colour, linestyle=style, linewidth=1.5, label=f"{label}: {value:,.0f}"
            )
    handles, labels = ax.get_legend_handles_labels()
    title = "Counts over time beside forage capacity"
    if K is None:
        handles.append(Line2D([], [], linestyle="none"))
        labels.append("no evidence of a ceiling: K not drawn")
        title += " (no evidence of a ceiling)"
    ax.legend(handles, labels, fontsize=8, loc="best", framealpha=0.9)
    ax.set_xlabel("Year")
    ax.set_ylabel("Animals [count index]")
    ax.yaxis.set_major_formatter(_THOUSANDS)
    ax.set_ylim(bottom=0.0)
    ax.grid(color="#eeeeee")
    ax.set_title(title)
    return figure


# --- (4) treatment scenarios ------------------------------------------------------------------

SCENARIO_COLUMNS = ("unit_id", "scenario", "year", "ncc_animals_baseline", "ncc_animals_scenario")
_SCENARIO_COLOURS = ("vermillion", "blue", "orange", "reddish_purple", "bluish_green", "sky_blue")


SCENARIO_FIGURES = (
    ("ncc", "NCC"),
    ("allowable_use", "Allowable-use capacity"),
    ("ecc", "ECC"),
)
"""The capacity figures charted for a scenario: column stem and panel title."""


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
        Add one small NCC panel per unit under the panels of the totals over units.
    treatment_years : dict of str → sequence of int, optional
        Calendar years in which each scenario treats land, marked by vertical dotted lines.

    Returns
    -------
    matplotlib.figure.Figure
        Every y axis starts at zero; tick labels carry as many decimals as keep them apart.
    """
    _require_columns(scenario_table, SCENARIO_COLUMNS, "scenario table")
    shown = [
        (stem, title)
        for stem, title in SCENARIO_FIGURES
        if {f"{stem}_animals_baseline", f"{stem}_animals_scenario"} <= set(scenario_table.columns)
    ]
    units = list(dict.fromkeys(scenario_table["unit_id"]))
    columns = 3
    unit_rows = math.ceil(len(units) / columns) if per_unit else 0
    figure = _new_figure(10.0, 4.0 + 2.3 * unit_rows)
    grid = figure.add_gridspec(1 + unit_rows, columns, height_ratios=[1.6] + [1.0] * unit_rows)
    years = treatment_years or {}
    for index, (stem, title) in enumerate(shown):
        ax = figure.add_subplot(grid[0, index % columns])
        _scenario_panel(ax, scenario_table, stem, years, legend=index == 0)
        ax.set_title(f"{title}, total over units", fontsize=10)
    for index, unit in enumerate(units if per_unit else []):
        ax = figure.add_subplot(grid[1 + index // columns, index % columns])
        rows = scenario_table[scenario_table["unit_id"] == unit]
        _scenario_panel(ax, rows, "ncc", years, legend=False)
        ax.set_title(f"NCC, {_label(unit)}", fontsize=9)
        ax.tick_params(labelsize=7)
        ax.xaxis.label.set_size(7)
        ax.yaxis.label.set_size(7)
    return figure


def _scenario_panel(ax, table: pd.DataFrame, stem: str, treatment_years, *, legend: bool) -> None:
    """Baseline (black dashed) and one line per scenario, summed over the table's units."""
    base_column, scenario_column = f"{stem}_animals_baseline", f"{stem}_animals_scenario"
    totals = table.groupby(["scenario", "year"], sort=True)[[base_column, scenario_column]].sum()
    baseline = totals[base_column].unstack("scenario")
    scenario = totals[scenario_column].unstack("scenario")
    same = baseline.apply(
        lambda column: np.allclose(column, baseline.iloc[:, 0], equal_nan=True)
    ).all()
    baselines = baseline.iloc[:, :1] if same else baseline
    for name, series in baselines.items():
        label = "baseline" if same else f"baseline ({name})"
        ax.plot(
            series.index,
            series.to_numpy(),
            color=OKABE_ITO["black"],
            linestyle="--",
            marker=".",
            label=label,
        )
    for index, (name, series) in enumerate(scenario.items()):
        colour = OKABE_ITO[_SCENARIO_COLOURS[index % len(_SCENARIO_COLOURS)]]
        ax.plot(
            series.index,
            series.to_numpy(),
            color=colour,
            linewidth=2,
            marker="o",
            markersize=3,
            label=f"scenario: {_label(name)}",
        )
        for year in treatment_years.get(name, ()):
            ax.axvline(year, color=colour, linestyle=":", linewidth=1.2)
    if any(treatment_years.get(name) for name in scenario.columns):
        ax.plot([], [], color="#555555", linestyle=":", label="treatment year")
    ax.set_xlabel("Year")
    ax.set_ylabel("Capacity [animals]")
    ax.set_ylim(bottom=0.0)
    ax.xaxis.get_major_locator().set_params(integer=True)
    ax.grid(color="#eeeeee")
    distinct_tick_labels(ax.yaxis)
    if legend:
        ax.legend(fontsize=7, framealpha=0.9, loc="lower left")


def distinct_tick_labels(axis, max_decimals: int = 4) -> int:
    """Give ``axis`` a thousands-separated formatter with the fewest decimals (0 to
    ``max_decimals``) that keeps its major tick labels apart; return the decimals used."""
    ticks = axis.get_majorticklocs()
    for digits in range(max_decimals + 1):
        labels = [f"{tick:,.{digits}f}" for tick in ticks]
        if len(set(labels)) == len(labels):
            break
    axis.set_major_formatter(FuncFormatter(lambda value, _p, d=digits: f"{value:,.{d}f}"))
    return digits


def _require_columns(table: pd.DataFrame, columns: Sequence[str], what: str) -> None:
    missing = [column for column in columns if column not in table.columns]
    if missing:
        raise ValueError(
            f"{what} lacks column(s) {', '.join(missing)}; "
            f"found {', '.join(map(str, table.columns))}"
        )


# --- (5) sensitivity tornado ------------------------------------------------------------------

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
        Inputs sorted by range |high − low|, the widest at the top.
    """
    _require_columns(sensitivity_table, TORNADO_COLUMNS, "sensitivity table")
    table = sort_by_range(sensitivity_table).iloc[:max_inputs].iloc[::-1]
    figure = _new_figure(8.0, max(2.8, 0.42 * len(table) + 1.5))
    ax = figure.add_subplot()
    rows = np.arange(len(table))
    low, high = ("low value", "high value") if not change else (f"{-change:+.0%}", f"{change:+.0%}")
    ax.barh(
        rows,
        table["low_change_animals"].to_numpy(dtype=float),
        height=0.6,
        color=OKABE_ITO["sky_blue"],
        edgecolor=OKABE_ITO["black"],
        label=f"input at {low}",
    )
    ax.barh(
        rows,
        table["high_change_animals"].to_numpy(dtype=float),
        height=0.6,
        color=OKABE_ITO["vermillion"],
        edgecolor=OKABE_ITO["black"],
        hatch="//",
        label=f"input at {high}",
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
    if len(table) < len(sensitivity_table):
        title += f" ({len(table)} widest of {len(sensitivity_table)})"
    ax.set_title(title)
    return figure


def signed_animals(value: float, _position: int | None = None) -> str:
    """A change in animals with its sign and thousands separators: '+1,200', '-35', '0'."""
    return "0" if round(value) == 0 else f"{value:+,.0f}"


def sort_by_range(sensitivity_table: pd.DataFrame) -> pd.DataFrame:
    """Rows sorted by |high − low| change, largest first (ties keep their order)."""
    spread = (
        sensitivity_table["high_change_animals"] - sensitivity_table["low_change_animals"]
    ).abs()
    order = np.argsort(-spread.to_numpy(dtype=float), kind="stable")
    return sensitivity_table.iloc[order]
