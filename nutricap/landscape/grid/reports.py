"""What a grid run tells the user besides the capacity problem: the units it refuses (no cell
on the grid, no stratum, no data), what each availability rule removed (the per-unit report
and the coarse maps of the first pass), the calibration report, and the notes.

Used by :func:`nutricap.landscape.grid.supply.grid_problem`.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from pyproj import CRS

from nutricap.errors import SpatialError
from nutricap.landscape import availability as rules_mod
from nutricap.landscape.grid.layers import LayerStack
from nutricap.landscape.grid.overview import BlockSums, OverviewMap, block_map
from nutricap.landscape.grid.rasters import (
    Grid,
    LayerSpec,
    ShapeBurner,
    grid_windows,
    streaming_env,
)
from nutricap.landscape.grid.sums import GridSetup, Layout, layout_of


def check_units(project, units_table, cells, without_data, specs, grid) -> None:
    """Refuse units with no cell on the grid, no mapped cell, or no cell with data."""
    units_path = project.source("units")
    ids = units_table["unit_id"].to_numpy()
    on_grid = cells.sum(axis=1)
    mapped = cells[:, :-1].sum(axis=1)
    with_data = mapped - without_data.sum(axis=1)
    checks = [
        (
            on_grid == 0,
            "holds no cell centre of the raster grid",
            f"every unit on the grid of {grid.source.name} and larger than a cell",
        ),
        (
            (on_grid > 0) & (mapped == 0),
            "does not overlap any vegetation stratum on the grid",
            f"every unit at least partly covered by the strata layer ({project.strata_file()})",
        ),
        (
            (mapped > 0) & (with_data == 0),
            "has no cell with data in every raster layer",
            "at least one cell with data in every layer ("
            + ", ".join(spec.key for spec in specs)
            + ")",
        ),
    ]
    for number, (bad, message, expected) in enumerate(checks):
        if bad.any():
            found = f"{int(bad.sum())} unit(s): " + ", ".join(map(repr, ids[bad][:10]))
            if number == 2:
                first = units_table.geometry.to_crs(grid.crs).iloc[int(np.flatnonzero(bad)[0])]
                found += "; " + "; ".join(_layers_without_data(first, specs, grid, project))
            raise SpatialError(
                f"unit {ids[bad][0]!r} {message}",
                source=units_path,
                location="attribute 'unit_id'",
                expected=expected,
                found=found,
            )


def _layers_without_data(shape, specs: list[LayerSpec], grid: Grid, project) -> list[str]:
    """Which layers have no data over a unit (the cells whose centre lies in ``shape``)."""
    rasters = project.config.rasters
    resample = rasters.resample if rasters is not None else "none"
    burner = ShapeBurner([shape], [1], "uint8")
    west, south, east, north = shape.bounds
    inside = np.zeros(len(specs))
    cells = 0
    with streaming_env(), LayerStack(specs, grid, resample) as stack:
        for window in grid_windows(grid):
            w_west, w_south, w_east, w_north = grid.window_bounds(window)
            if w_east < west or w_west > east or w_north < south or w_south > north:
                continue
            unit = burner.burn(window, grid) > 0
            cells += int(unit.sum())
            layers = stack.read(window)
            inside += [np.count_nonzero(layers[spec.key][1] & unit) for spec in specs]
    return [
        f"layer {spec.key} ({spec.path.name}) has data on {100 * count / max(cells, 1):.0f} % "
        "of its cells"
        for spec, count in zip(specs, inside)
        if count < cells
    ]


def rules_report_by_unit(units_table, rules, sums, layout: Layout, cell_ha) -> pd.DataFrame:
    """:func:`nutricap.landscape.availability.rules_report` of the sums by unit × stratum
    (units, strata, rows of the layout) [kg/ha, cells summed; ``cell_ha`` the cell area]."""
    area, removed, gross = rule_amounts(sums.sum(axis=1), layout, cell_ha)
    return rules_mod.rules_report(
        units_table["unit_id"].to_numpy(), rules.active(), area, removed, gross
    )


def rule_amounts(sums: np.ndarray, layout: Layout, cell_ha: float):
    """What each rule did, from sums of the layout's rows over cells (by unit, or by block).

    Parameters
    ----------
    sums : ndarray (n, rows of the layout, at least up to ``nodata``)
    layout : Layout
    cell_ha : float
        Area of a cell [ha].

    Returns
    -------
    area_ha : ndarray (n, rules)
        Area where each active rule removed something (``nodata``: without data) [ha].
    removed_kg : ndarray (n, rules)
        Forage each rule removed [kg]; NaN for ``nodata`` (unknown there).
    gross_kg : ndarray (n,)
        Standing forage before the rules [kg].
    """
    area = [sums[:, layout.nodata] * cell_ha]
    area += [sums[:, layout.affected(number)] * cell_ha for number in range(layout.n_rules)]
    removed = np.column_stack([np.full(len(sums), np.nan), removed_amounts(sums, layout, cell_ha)])
    gross = sums[:, layout.gross].sum(axis=1) * cell_ha
    return np.column_stack(area), removed, gross


def removed_amounts(sums: np.ndarray, layout: Layout, cell_ha: float) -> np.ndarray:
    """Forage each rule after ``nodata`` removed [kg], (n, rules), from sums of the layout's
    rows over cells (by unit or by block: at least its map rows)."""
    columns = [layout.removed(number) for number in range(layout.n_rules)]
    return sums[:, columns] * cell_ha


def rule_maps(blocks: BlockSums, grid: Grid, setup: GridSetup) -> list[OverviewMap]:
    """Coarse maps of the first pass: standing forage before the rules, and the forage each
    rule after ``nodata`` removed, in kg per ha of the block's area in units.

    Notes
    -----
    A block's value is Σ kg over its cells in a unit and a stratum (with data) ÷ (cells of
    the block in a unit, in a stratum or not, × cell area [ha]): the removed forage is the
    availability report's (:func:`removed_amounts`, the same pair sums added by block instead
    of by unit), spread over the block's unit area; the standing forage is the forage left +
    Σ removed (equal to the standing forage of the cells with data to float32 rounding).
    NaN where no cell of the block lies in a unit.
    """
    layout = layout_of(setup)
    flat = blocks.sums.reshape(blocks.n_rows, -1).T
    removed_kg = removed_amounts(flat, layout, grid.cell_area_ha)
    gross_kg = flat[:, layout.available].sum(axis=1) * grid.cell_area_ha + removed_kg.sum(axis=1)
    area_ha = np.where(blocks.unit_cells > 0, blocks.unit_cells * grid.cell_area_ha, np.nan)
    shape = blocks.unit_cells.shape
    layers = [("standing_forage", "Standing forage before the availability rules", gross_kg)]
    layers += [
        (f"removed_{rule}", f"Forage removed by the {rule.replace('_', ' ')} rule", kg)
        for rule, kg in zip(setup.rules.active()[1:], removed_kg.T)  # the rules after nodata
    ]
    coarse, transform, crs = blocks.coarse, grid.transform, grid.crs
    return [
        block_map(key, title, "kg DM per ha", kg.reshape(shape) / area_ha, coarse, transform, crs)
        for key, title, kg in layers
    ]


def calibration_report_with_areas(report, counts, cell_ha, project):
    """The calibration report with the areas beyond the plots' index range and margin and
    predicted below zero [ha], and the margin's settings (None without calibrated groups)."""
    if report is None:
        return None
    report = report.copy()
    report["area_beyond_plot_range_ha"] = counts[:, 0] * cell_ha
    report["area_beyond_margin_ha"] = counts[:, 1] * cell_ha
    report["area_predicted_below_zero_ha"] = counts[:, 2] * cell_ha
    calibrated = project.config.rasters.calibrated
    report["extrapolation_margin"] = calibrated.extrapolation_margin
    report["beyond_margin"] = (
        "index clamped to the margin"
        if calibrated.beyond_margin == "clamp"
        else "model extrapolated"
    )
    return report


def grid_notes(grid: Grid) -> list[str]:
    """The analysis grid nutricap defined, when the first raster is in a geographic CRS."""
    if grid.warped_from is None:
        return []
    return [
        f"raster {grid.source.name} is in a geographic CRS ({grid.warped_from}): the analysis "
        f"grid is {grid.width} × {grid.height} cells of {grid.transform.a:.4g} × "
        f"{-grid.transform.e:.4g} m in {CRS.from_wkt(grid.crs.to_wkt()).name}, and every "
        "raster is warped onto it (GDAL's warper, rasterio WarpedVRT)"
    ]


UNITS_NAMED = 10
"""Units named at most in a note (the largest first; the rest are counted)."""


def run_notes(units_table, cells, without_data, cell_ha, resampled, calibration) -> list[str]:
    """Resampled layers, mapped area without data or without stratum, units partly off the
    grid, calibrated groups used beyond their margin (areas [ha])."""
    notes = [
        f"raster layer {key} resampled onto the grid by {method} resampling"
        for key, method in resampled.items()
        if method is not None
    ]
    lost = without_data.sum() * cell_ha
    if lost > 0:
        notes.append(
            f"{lost:,.1f} ha of mapped unit area has no data in at least one raster layer; no "
            "forage is counted there (availability_rules.csv, rule 'nodata')"
        )
    unmapped_by_unit = cells[:, -1] * cell_ha
    if unmapped_by_unit.sum() > 0:
        order = np.argsort(-unmapped_by_unit, kind="stable")
        named = [
            f"{units_table['unit_id'].iloc[i]} {unmapped_by_unit[i]:,.1f} ha"
            for i in order[:UNITS_NAMED]
            if unmapped_by_unit[i] > 0
        ]
        more = int((unmapped_by_unit > 0).sum()) - len(named)
        notes.append(
            f"{unmapped_by_unit.sum():,.1f} ha of unit area on the grid lies in no stratum "
            f"({', '.join(named)}{f' and {more} more units' if more > 0 else ''}: outside the "
            "strata polygons, or a raster code the codes table does not list, or no data in "
            "the strata raster); no forage is counted there"
        )
    on_grid_ha = cells.sum(axis=1) * cell_ha
    share = on_grid_ha / units_table["area_ha"].to_numpy()
    partial = units_table["unit_id"].to_numpy()[share < 0.99]
    if partial.size:
        notes.append(
            "units with less than 99 % of their area on the raster grid (forage off the grid "
            "is not counted): " + ", ".join(map(str, partial))
        )
    if calibration is not None:
        for row in calibration.itertuples():
            if row.area_beyond_margin_ha > 0:
                notes.append(
                    f"WARNING: calibrated forage group {row.forage_group!r}: "
                    f"{row.area_beyond_margin_ha:,.1f} ha has an index beyond the plots' range "
                    f"[{row.index_min:.4g}, {row.index_max:.4g}] by more than the margin "
                    f"({row.extrapolation_margin:g} of the range); {row.beyond_margin}"
                )
    return notes
