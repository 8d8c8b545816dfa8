"""Calibrated raster supply (capability 1b): clip plots with coordinates + an index raster.

The plots are read and checked, the index raster is sampled at them, and one index → biomass
model is fitted per forage group (the models, their choice by AIC and their bootstrap are in
:mod:`nutricap.landscape.biomass_models`).

A group's predicted biomass is shared among its classes in proportion to their totals over
the plots (ratio of sums). The plots' index range bounds the model: cells beyond it by more
than a margin are clamped to the margin (or extrapolated on request) and reported.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import rasterio
from pyproj import CRS, Transformer
from rasterio.errors import RasterioIOError

from nutricap.errors import SpatialError, TableError
from nutricap.inputs.columns import (
    Column,
    Source,
    check_known,
    check_unique,
    read_csv_table,
)
from nutricap.inputs.table_source import first_index, row_error
from nutricap.inputs.tables import PLOT_COLUMNS, refuse_two_biomasses, require_biomass
from nutricap.landscape.biomass_models import (
    INDEX_BINS,
    MIN_PLOTS,
    BiomassModel,
    ModelFits,
    binned_loglinear_forage,
    clamp_index,
    fit_linear,
    fit_loglinear,
    linear_forage,
    margin_bounds,
    pairs_bootstrap,
    select_model,
)
from nutricap.science.supply import biomass_kg_per_ha

__all__ = [  # the models' names stay importable from here (defined in biomass_models)
    "CALIBRATION_PLOT_COLUMNS",
    "INDEX_BINS",
    "BiomassModel",
    "ModelFits",
    "binned_loglinear_forage",
    "calibration_table",
    "clamp_index",
    "class_shares",
    "fit_groups",
    "fit_linear",
    "fit_loglinear",
    "group_biomass",
    "linear_forage",
    "margin_bounds",
    "pairs_bootstrap",
    "read_calibration_plots",
    "sample_index",
    "select_model",
]


CALIBRATION_PLOT_COLUMNS = [
    Column("plot_id", "text", meaning="plot identifier"),
    Column("x", meaning="easting or longitude of the plot, in plots_crs"),
    Column("y", meaning="northing or latitude of the plot, in plots_crs"),
    *[column for column in PLOT_COLUMNS if column.name not in {"plot_id", "stratum"}],
]


def read_calibration_plots(path: Source, known_classes: set[str]) -> pd.DataFrame:
    """Read the plots-with-coordinates table; return it with ``biomass_kg_per_ha``.

    One row per plot × forage class found (a class not recorded on a plot is 0 there);
    every plot has one location.
    """
    table = read_csv_table(path, CALIBRATION_PLOT_COLUMNS, what="calibration plots table")
    direct = table.get("biomass_kg_per_ha", pd.Series(np.nan, index=table.index))
    if {"dry_mass_g", "frame_area_m2"} <= set(table.columns):
        framed = biomass_kg_per_ha(table["dry_mass_g"].to_numpy(), table["frame_area_m2"])
        refuse_two_biomasses(direct, np.asarray(framed, dtype=float), path)
        direct = direct.fillna(pd.Series(np.asarray(framed), index=table.index))
    require_biomass(direct, path)
    table["biomass_kg_per_ha"] = direct
    check_unique(table, ["plot_id", "forage_class"], path)
    check_known(table, "forage_class", known_classes, path, known_from="the forage-class table")
    moved = table.groupby("plot_id")[["x", "y"]].transform("first").ne(table[["x", "y"]])
    index = first_index(moved.any(axis=1))
    if index is not None:
        raise row_error(
            "plot recorded at two locations",
            path,
            index,
            ("x", "y"),
            expected="the same x and y on every row of a plot",
            found=f"plot {table['plot_id'].iloc[index]!r} moved",
        )
    return table


def group_biomass(plots: pd.DataFrame, groups: dict[str, list[str]]) -> pd.DataFrame:
    """Plots × groups biomass [kg/ha] (sum of each group's classes; 0 when none recorded).

    The index is ``plot_id``; columns ``x``, ``y`` come first.
    """
    classes = [name for members in groups.values() for name in members]
    wide = (
        plots.pivot_table(
            index="plot_id", columns="forage_class", values="biomass_kg_per_ha", aggfunc="sum"
        )
        .reindex(columns=classes, fill_value=0.0)
        .fillna(0.0)
    )
    sums = pd.DataFrame({group: wide[members].sum(axis=1) for group, members in groups.items()})
    where = plots.groupby("plot_id")[["x", "y"]].first().reindex(sums.index)
    return pd.concat([where, sums], axis=1)


def class_shares(plots: pd.DataFrame, groups: dict[str, list[str]], path: Path) -> dict[str, float]:
    """Share of each class in its group's biomass over all plots (ratio of sums) [0–1]."""
    totals = plots.groupby("forage_class")["biomass_kg_per_ha"].sum()
    shares = {}
    for group, members in groups.items():
        amounts = totals.reindex(members, fill_value=0.0)
        if amounts.sum() <= 0:
            raise TableError(
                f"forage group {group!r} has no biomass on any plot",
                source=path,
                location="column 'forage_class'",
                expected="plots recording " + ", ".join(map(repr, members)),
                found="none, or only zeros",
            )
        shares.update((amounts / amounts.sum()).to_dict())
    return shares


def sample_index(index_path: Path, where: pd.DataFrame, plots_crs: str | None, plots_path: Source):
    """The index raster's value at each plot (first band).

    Raises :class:`SpatialError` naming the first plot that lies outside the raster or on a
    nodata cell, and how many do.
    """
    with rasterio.open(index_path) as src:
        x, y = where["x"].to_numpy(float), where["y"].to_numpy(float)
        if plots_crs is not None and CRS.from_user_input(plots_crs) != CRS(src.crs.to_wkt()):
            transformer = Transformer.from_crs(plots_crs, src.crs.to_wkt(), always_xy=True)
            x, y = transformer.transform(x, y)
        rows, cols = rasterio.transform.rowcol(src.transform, x, y)
        rows, cols = np.asarray(rows), np.asarray(cols)
        inside = (rows >= 0) & (rows < src.height) & (cols >= 0) & (cols < src.width)
        values = np.full(x.size, np.nan)
        if inside.any():
            try:
                sampled = np.ma.masked_array(
                    [v[0] for v in src.sample(zip(x[inside], y[inside]), indexes=1, masked=True)]
                )
            except RasterioIOError as exc:
                raise SpatialError(
                    "cannot read the index raster at the calibration plots: the file is "
                    "truncated or corrupt",
                    source=index_path,
                    location="key 'rasters.calibrated.index'",
                    expected="a complete GeoTIFF (copy or export it again)",
                    found=f"GDAL: {exc.__cause__ or exc}",
                ) from None
            values[inside] = np.ma.filled(sampled.astype(float), np.nan)
    bad = ~np.isfinite(values)
    if bad.any():
        first = int(np.flatnonzero(bad)[0])
        raise SpatialError(
            f"the index raster does not cover {int(bad.sum())} of {bad.size} calibration plots",
            source=index_path,
            location=f"plot {where.index[first]!r} at ({where['x'].iloc[first]:.10g}, "
            f"{where['y'].iloc[first]:.10g}) in {plots_path.name}",
            expected="every plot on a cell of the index raster with data"
            + ("" if plots_crs else " (x, y in the raster's CRS, or set plots_crs)"),
            found="outside the raster" if not inside[first] else "a nodata cell",
        )
    return values


def calibration_table(models: list[BiomassModel], reasons: list[str], groups: dict) -> pd.DataFrame:
    """One row per group: the model, its fit, residual error and n (for calibration.csv)."""
    rows = [
        {
            "forage_group": m.group,
            "forage_classes": " ".join(groups[m.group]),
            "model": m.kind,
            "selection": reason,
            "n_plots": m.n,
            "intercept": m.intercept,
            "slope": m.slope,
            "r_squared": m.r_squared,
            "residual_se": m.residual_se,
            "residual_se_scale": "kg/ha" if m.kind == "linear" else "ln(kg/ha)",
            "rmse_kg_per_ha": m.rmse_kg_per_ha,
            "aic_kg_per_ha_scale": m.aic,
            "smearing_factor": m.smearing,
            "index_min": m.index_min,
            "index_max": m.index_max,
        }
        for m, reason in zip(models, reasons)
    ]
    return pd.DataFrame(rows)


def fit_groups(
    plots_path: Source,
    index_path: Path,
    groups: dict[str, list[str]],
    choice: str,
    plots_crs: str | None,
    known_classes: set[str],
) -> tuple[list[BiomassModel], dict[str, float], pd.DataFrame]:
    """Read the plots, sample the index and fit one model per group.

    Returns the models (in the order of ``groups``), the class shares within groups, and the
    calibration table.
    """
    plots = read_calibration_plots(plots_path, known_classes)
    by_plot = group_biomass(plots, groups)
    index = sample_index(index_path, by_plot, plots_crs, plots_path)
    shares = class_shares(plots, groups, plots_path)
    models, reasons = [], []
    for group in groups:
        try:
            model, reason = select_model(group, index, by_plot[group].to_numpy(), choice)
        except ValueError as exc:
            raise TableError(
                f"cannot fit the {choice} model of forage group {group!r}: {exc}",
                source=plots_path,
                expected=f"at least {MIN_PLOTS} plots with different index values"
                + ("; every plot's group biomass > 0" if choice == "loglinear" else ""),
                found=f"{len(by_plot)} plots, index range {np.ptp(index):g}",
            ) from None
        models.append(model)
        reasons.append(reason)
    return models, shares, calibration_table(models, reasons, groups)
