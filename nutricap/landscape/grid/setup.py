"""What the grid path takes from the project: its rasters, forage classes, strata map,
availability rules, calibrated groups, units and the shapes burnt into each window.

Used by :func:`nutricap.landscape.grid.supply.grid_problem` to set up the first pass.
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd
import shapely

from nutricap.errors import ProjectFileError
from nutricap.landscape import availability as rules_mod
from nutricap.landscape.calibration import fit_groups, margin_bounds
from nutricap.landscape.grid.calibration import CalibratedGroup
from nutricap.landscape.grid.rasters import Grid, LayerSpec, ShapeBurner
from nutricap.landscape.plots import StratumSupply, stratum_supply
from nutricap.landscape.strata_raster import StrataCodes, read_strata_codes
from nutricap.landscape.vectors import (
    M2_PER_HA,
    _extra_unit_columns,
    check_no_overlaps,
    choose_area_crs,
    read_layer,
    to_area_crs,
)


def layer_specs(project) -> list[LayerSpec]:
    """Every raster of the project in grid order: the first defines the grid."""
    paths = project.input_paths()
    keys = [key for key in paths if key.startswith(("rasters.", "availability."))]
    rasters = [
        key
        for key in keys
        if not key.endswith((".plots", "_table", ".codes")) and ".exclusions." not in key
    ]
    specs = [LayerSpec.for_key(key, paths[key]) for key in rasters]
    availability = project.config.availability
    if availability is not None and availability.slope_units == "degrees":
        specs = [
            replace(spec, maximum=90.0, meaning="slope in degrees")
            if spec.key == "availability.slope"
            else spec
            for spec in specs
        ]
    return specs


def _general_classes(forage_classes: pd.DataFrame) -> pd.DataFrame:
    return forage_classes[forage_classes["stratum"] == ""].set_index("forage_class")


def _check_class_names(project, names: list[str], key: str, known: list[str]) -> None:
    unknown = [name for name in names if name not in known]
    if unknown:
        raise ProjectFileError(
            f"forage class {unknown[0]!r} is not in the forage-class table",
            source=project.path,
            location=f"key {key!r}",
            expected="one of " + ", ".join(map(repr, known)),
            found=repr(unknown[0]),
        )


def cell_rules(project, forage_classes: pd.DataFrame, classes: list[str], partial: bool):
    """The availability rules of the project, with the class heights the snow rule needs."""
    section = project.config.availability
    if section is None:
        return rules_mod.CellRules(partial_access=partial)
    heights = None
    if section.snow_depth is not None:
        heights = _general_classes(forage_classes).loc[classes, "height_cm"].to_numpy(float)
        missing = [name for name, h in zip(classes, heights) if np.isnan(h)]
        if missing:
            raise ProjectFileError(
                f"forage class {missing[0]!r} has no height_cm, which the snow rule needs",
                source=project.source("forage_classes"),
                location="column 'height_cm'",
                expected="a height for every forage class when [availability] snow_depth is set",
                found=f"{len(missing)} class(es) without: " + ", ".join(map(repr, missing)),
            )
    folder = project.folder
    return rules_mod.CellRules(
        height_cm=heights,
        snow_method=section.snow_burial,
        min_forage_kg_per_ha=section.min_forage_kg_per_ha,
        slope_table=_table(section.slope, section.slope_table, "slope", folder),
        water_table=_table(
            section.distance_to_water, section.water_table, "distance_to_water", folder
        ),
        slope_in_degrees=section.slope_units == "degrees",
        partial_access=partial,
        exclusions=bool(section.exclusions),
    )


def _table(layer, table, factor: str, folder: Path):
    if layer is None:
        return None
    path = (folder / table).resolve() if table is not None else None
    return rules_mod.load_reduction_table(path, factor)


@dataclass(frozen=True)
class StrataMap:
    """The strata of the grid path: polygons burnt per window, or a raster of codes.

    ``names`` holds the stratum of each polygon code 1, 2, … (strata polygons in their order,
    or rows of the codes table).
    """

    names: list[str]
    accessible_fraction: np.ndarray | None  # per polygon code 1, 2, …; None: all 1
    path: Path  # the strata file named in messages
    polygons: gpd.GeoDataFrame | None = None
    codes: StrataCodes | None = None

    @property
    def strata(self) -> list[str]:
        """The strata of the map, sorted."""
        return sorted(set(self.names))


def strata_map(project, strata: gpd.GeoDataFrame | None) -> StrataMap:
    """The project's strata map: the polygons read, or the codes table of its strata raster."""
    if strata is not None:
        fraction = strata["accessible_fraction"].to_numpy(dtype=np.float32)
        return StrataMap(
            list(strata["stratum"]),
            fraction if (fraction < 1).any() else None,
            project.strata_file(),
            polygons=strata,
        )
    codes = read_strata_codes(project.source("strata_codes"))
    return StrataMap(codes.strata, codes.accessible_fraction, project.strata_file(), codes=codes)


def strata_supply(plots, strata: StrataMap, strata_classes, all_classes, project) -> StratumSupply:
    """Plot statistics of the strata-based classes (every plot counts, with its zeros)."""
    map_strata = strata.strata
    if not strata_classes:
        n_plots = plots.groupby("stratum")["plot_id"].nunique().reindex(map_strata, fill_value=0)
        empty = np.zeros((len(map_strata), 0))
        return StratumSupply(map_strata, [], empty, empty.copy(), n_plots.to_numpy(int))
    full = stratum_supply(
        plots,
        all_classes,
        map_strata,
        plots_path=project.source("plots"),
        strata_path=strata.path if strata.codes is None else strata.codes.path,
        strata_without_forage=project.config.supply.strata_without_forage,
    )
    columns = [all_classes.index(name) for name in strata_classes]
    return StratumSupply(
        full.strata,
        list(strata_classes),
        full.mean_kg_per_ha[:, columns],
        full.se_kg_per_ha[:, columns],
        full.n_plots,
    )


def class_sources(project, forage_classes):
    """The forage classes (sorted), the direct ones (class → raster), the calibrated section,
    and the classes whose biomass comes from the plots of the strata."""
    config = project.config
    classes = sorted(_general_classes(forage_classes).index)
    rasters = config.rasters
    direct = dict(rasters.biomass) if rasters is not None else {}
    calibrated = rasters.calibrated if rasters is not None else None
    _check_class_names(project, list(direct), "rasters.biomass", classes)
    if calibrated is not None:
        _check_class_names(project, calibrated.classes(), "rasters.calibrated.groups", classes)
    on_rasters = set(direct) | set(calibrated.classes() if calibrated else [])
    return classes, direct, calibrated, [c for c in classes if c not in on_rasters]


def calibrated_groups(project, calibrated, classes):
    """The fitted :class:`CalibratedGroup` of each calibrated forage group, and the fits'
    report (``[], None`` without calibrated groups)."""
    if calibrated is None:
        return [], None
    models, shares, report = fit_groups(
        project.source("calibration_plots"),
        project.input_paths()["rasters.calibrated.index"],
        calibrated.groups,
        calibrated.model,
        calibrated.plots_crs,
        set(classes),
    )
    groups = []
    for model, members in zip(models, calibrated.groups.values()):
        low, high = margin_bounds(model, calibrated.extrapolation_margin)
        groups.append(
            CalibratedGroup(
                model=model,
                class_index=np.array([classes.index(m) for m in members]),
                shares=np.array([shares[m] for m in members], dtype=np.float32),
                low=low,
                high=high,
                clamp=calibrated.beyond_margin == "clamp",
            )
        )
    return groups, report


def strata_polygons(strata: StrataMap, supply: StratumSupply, classes: list[str]):
    """Per polygon code (0 = none): stratum code, plot-mean biomass, accessible fraction."""
    names = supply.strata
    stratum = np.concatenate(([len(names)], pd.Index(names).get_indexer(strata.names)))
    biomass = np.zeros((len(names) + 1, len(classes)), dtype=np.float32)  # last row: none
    for column, name in enumerate(supply.classes):
        biomass[:-1, classes.index(name)] = np.nan_to_num(supply.mean_kg_per_ha[:, column])
    polygon_biomass = biomass[stratum]
    fraction = strata.accessible_fraction
    access = None if fraction is None else np.concatenate(([1.0], fraction)).astype(np.float32)
    return stratum.astype(np.int64), polygon_biomass, access


def unit_areas(units, strata: StrataMap, project) -> tuple[gpd.GeoDataFrame, object, str, list]:
    """Units with their polygon area [ha] in the area CRS (as in the vector path), the CRS, why
    it was chosen, and the notes on overlaps within the tolerance."""
    area_crs, reason = choose_area_crs(units)
    in_area_crs = to_area_crs(units, area_crs)
    notes = [check_no_overlaps(in_area_crs, "unit_id", project.source("units"), "units")]
    if strata.polygons is not None:
        notes.append(
            check_no_overlaps(
                to_area_crs(strata.polygons, area_crs), "stratum", strata.path, "strata polygons"
            )
        )
    table = in_area_crs[["unit_id", *_extra_unit_columns(in_area_crs), "geometry"]].copy()
    table["area_ha"] = table.geometry.area / M2_PER_HA
    return table, area_crs, reason, [note for note in notes if note]


def shape_burners(
    units, strata: StrataMap, project, grid: Grid, treatments: gpd.GeoDataFrame | None = None
) -> dict[str, ShapeBurner]:
    """The shapes burnt into each window: units, strata polygons (when given), exclusions,
    treatment polygons (a scenario's, when given; codes 1, 2, … in their order)."""
    burners = {
        "units": ShapeBurner(
            units.to_crs(grid.crs).geometry.to_numpy(), np.arange(1, len(units) + 1), "int32"
        ),
    }
    if strata.polygons is not None:
        geometries = strata.polygons.to_crs(grid.crs).geometry.to_numpy()
        burners["strata"] = ShapeBurner(geometries, np.arange(1, len(geometries) + 1), "int32")
    section = project.config.availability
    if section is not None and section.exclusions:
        shapes = []
        for number in range(1, len(section.exclusions) + 1):
            key = f"availability.exclusions.{number}"
            layer = read_layer(project.input_paths()[key], layer=None, columns=[], what=key)
            shapes.extend(layer.to_crs(grid.crs).geometry.to_numpy())
        burners["exclusions"] = ShapeBurner(shapes, np.ones(len(shapes), dtype=np.uint8), "uint8")
    if treatments is not None:
        shapes = treatments.to_crs(grid.crs).geometry.to_numpy()
        burners["treatments"] = ShapeBurner(shapes, np.arange(1, len(shapes) + 1), "int32")
    return burners


def treatment_pairs(units, treatments: gpd.GeoDataFrame, grid: Grid):
    """The (unit, treatment polygon) pairs that meet, and the lookup the windows use.

    Returns ``(lookup, pair_unit, pair_polygon)``: ``lookup[unit code, polygon code]`` is the
    pair's number (-1 where they do not meet, and for code 0: none); ``pair_unit`` and
    ``pair_polygon`` the unit and polygon index of each pair. A cell centre inside both
    polygons lies in both closures, so their pair is always listed.
    """
    unit_shapes = units.to_crs(grid.crs).geometry.to_numpy()
    shapes = treatments.to_crs(grid.crs).geometry.to_numpy()
    polygon, unit = shapely.STRtree(unit_shapes).query(shapes, predicate="intersects")
    order = np.lexsort((polygon, unit))
    pair_unit, pair_polygon = unit[order], polygon[order]
    lookup = np.full((len(unit_shapes) + 1, len(shapes) + 1), -1, dtype=np.int64)
    lookup[pair_unit + 1, pair_polygon + 1] = np.arange(pair_unit.size)
    return lookup, pair_unit, pair_polygon


def layer_key(specs: list[LayerSpec], name: str) -> str | None:
    """``name`` when a layer of the project has that key, else None."""
    return next((spec.key for spec in specs if spec.key == name), None)
