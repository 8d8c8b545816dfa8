"""The report's section of a raster run: the grid, what each availability rule removed, the
calibrated biomass models and the reduction tables used, with their sources.

Formats what the grid path computed (:class:`nutricap.landscape.grid.supply.GridResult`);
returns None for a run without rasters.
"""

from __future__ import annotations

import re
from typing import TYPE_CHECKING

import numpy as np
import pandas as pd

from nutricap.report import figures, methods_text
from nutricap.report.formatting import (
    ONE_DECIMAL,
    SOURCE,
    THREE_DECIMALS,
    Column,
    embedded_figure,
    format_auto,
    numeric_column,
    table,
)
from nutricap.report.references import short_citation

if TYPE_CHECKING:
    from nutricap.model.estimate import Estimate

RULE_COLUMNS = [
    Column("rule", "Rule"),
    Column("meaning", "What it removes"),
    numeric_column("area_ha", "Area where it acted [ha]", ONE_DECIMAL),
    numeric_column("forage_removed_kg", "Forage removed [kg DM]"),
    numeric_column("forage_removed_pct", "Share of standing forage [%]", ONE_DECIMAL),
]

CALIBRATION_COLUMNS = [
    Column("forage_group", "Group"),
    Column("forage_classes", "Forage classes"),
    Column("model", "Model"),
    Column("selection", "Why this model"),
    numeric_column("n_plots", "Plots (n)"),
    numeric_column("intercept", "a", format_auto),
    numeric_column("slope", "b", format_auto),
    numeric_column("r_squared", "R²", THREE_DECIMALS),
    numeric_column("residual_se", "Residual SE (fitted scale)", format_auto),
    numeric_column("rmse_kg_per_ha", "RMSE [kg/ha]", ONE_DECIMAL),
    numeric_column("index_min", "Plots' index from", format_auto),
    numeric_column("index_max", "to", format_auto),
    numeric_column("area_beyond_plot_range_ha", "Area beyond the plots' range [ha]", ONE_DECIMAL),
    numeric_column("area_beyond_margin_ha", "Area beyond the margin [ha]", ONE_DECIMAL),
    Column("beyond_margin", "Beyond the margin"),
]

REDUCTION_COLUMNS = [
    Column("factor", "Factor"),
    Column("range", "Class"),
    numeric_column("reduction_pct", "Capacity removed [%]"),
    SOURCE,
]


def raster_landscape(estimate: Estimate, species: str = "the species") -> dict | None:
    """The raster section's context: grid facts, rules table, models, reduction tables."""
    grid = estimate.grid
    if grid is None:
        return None
    rules = grid.rules_report[grid.rules_report["unit_id"] == "all units"]
    calibration = grid.calibration_report
    reductions = _reduction_tables(grid.rules)
    return {
        "maps": overview_figures(grid.overview_maps, estimate.units),
        "facts": _grid_facts(grid),
        "livestock": livestock_rules(rules, grid.rules, species),
        "rules": table(rules, RULE_COLUMNS),
        "calibration": None if calibration is None else table(calibration, CALIBRATION_COLUMNS),
        "reductions": None if reductions is None else table(reductions, REDUCTION_COLUMNS),
    }


def overview_figures(maps, units) -> list[dict]:
    """Each coarse map of the run (:class:`nutricap.landscape.grid.overview.OverviewMap`) as
    an embedded figure with a one-line caption, the units outlined on top."""
    return [
        {
            **embedded_figure(
                figures.overview_map(overview, units),
                f"Map: {overview.title} [{overview.units}].",
                "raster_" + re.sub(r"[^A-Za-z0-9_-]+", "_", overview.key),
            ),
            "caption": overview_caption(overview),
        }
        for overview in maps
    ]


def overview_caption(overview) -> str:
    """One line: what the map shows, its units and the size of its blocks."""
    transform = overview.transform
    rows, columns = np.shape(overview.values)
    return (
        f"{overview.title} [{overview.units}], on {columns:,} × {rows:,} blocks of "
        f"{abs(transform.a):,.4g} × {abs(transform.e):,.4g} {_length_unit(overview.crs)}; "
        "blank: outside the units."
    )


def _length_unit(crs) -> str:
    """The linear unit of a pyproj or rasterio CRS as a symbol ('m' for metres), or 'map
    units'."""
    if crs is None:
        return "map units"
    axes = getattr(crs, "axis_info", None)
    units = (axes[0].unit_name if axes else getattr(crs, "linear_units", None)) or "map units"
    return "m" if units in ("metre", "meter") else units


LIVESTOCK_RULES = {"slope": "slope_table", "distance_to_water": "water_table"}
"""Rules whose packaged reduction tables were made for cattle, and the key that replaces each."""


def livestock_rules(rules: pd.DataFrame, rule_set, species: str) -> list[str]:
    """Sentences for each slope or water rule that used the packaged livestock table.

    ``rules``: the all-units rows of the rules report (``rule``, ``forage_removed_kg``,
    ``forage_removed_pct``); ``rule_set``: the run's rules (their tables' ``row_sources``).
    """
    sentences = []
    for rule, key in LIVESTOCK_RULES.items():
        reduction = getattr(rule_set, key, None) if rule_set is not None else None
        row = rules[rules["rule"] == rule]
        if reduction is None or row.empty or not _packaged(reduction):
            continue
        removed, share = row["forage_removed_kg"].iloc[0], row["forage_removed_pct"].iloc[0]
        sentences.append(
            f"The {rule.replace('_', '-')} reduction is the packaged table of Holechek (1988), "
            f"made for cattle on rangeland, applied to {species} by default: here it removed "
            f"{removed:,.0f} kg DM ({share:.1f} % of the standing forage). Wild ungulates use "
            f"steep ground and distance from water differently; [availability] {key} replaces it "
            "with a table of the species' own."
        )
    return sentences


def _packaged(reduction) -> bool:
    return any("Holechek" in str(text) for text in reduction.row_sources)


def _grid_facts(grid) -> dict[str, str]:
    described = grid.describe()
    facts = {
        "Grid": f"{grid.grid.width:,} × {grid.grid.height:,} cells of {_cell_words(grid)}",
        "Grid CRS": str(grid.grid.crs),
        "Cell membership": described["cell_membership"],
        "Windows": f"{described['windows']:,}, computed on {described['computed_on']}",
    }
    resampled = described["resampled_layers"]
    if resampled:
        facts["Resampled layers"] = "; ".join(f"{k} by {m}" for k, m in resampled.items())
    return facts


def _cell_words(grid) -> str:
    transform, units = grid.grid.transform, _length_unit(grid.grid.crs)
    return f"{abs(transform.a):g} × {abs(transform.e):g} {units} ({grid.grid.cell_area_ha:g} ha)"


def _reduction_tables(rules) -> pd.DataFrame | None:
    """The slope and distance-to-water tables the run applied (packaged or the user's)."""
    used = [(rules.slope_table, "%"), (rules.water_table, "m")] if rules is not None else []
    frames = []
    for reduction, unit in used:
        if reduction is None:
            continue
        lower = np.concatenate(([0.0], reduction.upper[:-1]))
        frames.append(
            pd.DataFrame(
                {
                    "factor": reduction.factor.replace("_", " "),
                    "range": [_class_words(lo, hi, unit) for lo, hi in zip(lower, reduction.upper)],
                    "reduction_pct": 100.0 * reduction.reduction,
                    "source": [short_citation(text) for text in reduction.row_sources],
                }
            )
        )
    return pd.concat(frames, ignore_index=True) if frames else None


def _class_words(lower: float, upper: float, unit: str) -> str:
    if np.isinf(upper):
        return f"over {lower:,.4g} {unit}"
    return f"{lower:,.4g}–{upper:,.4g} {unit}"


def raster_methods(estimate: Estimate, *, intervals: bool) -> tuple:
    """The method entries of the raster path that this run used (empty without rasters)."""
    grid = estimate.grid
    if grid is None:
        return ()
    applied = set(grid.describe()["rules_applied"])
    calibrated = grid.calibration_report is not None
    return methods_text.raster_methods(
        snow="snow" in applied,
        reductions=bool(applied & {"slope", "distance_to_water"}),
        min_density="min_forage" in applied,
        calibrated=calibrated,
        model_bootstrap=calibrated and intervals,
    )
