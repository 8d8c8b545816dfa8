"""Forage supply on a raster grid: the grid path's entry point (capabilities 1b, 1c, 3, 5, 11).

:func:`grid_problem` sets up the first pass from the project
(:mod:`nutricap.landscape.grid.setup`), streams the windows
(:mod:`nutricap.landscape.grid.window_pass`: per-cell biomass → availability rules → sums by
(unit, stratum) key), and assembles the totals by key into a
:class:`~nutricap.model.problem.CapacityProblem` (one row per unit, or per unit × stratum patch)
like the vector path's, so the same solver and tables follow, with the areas, the rules and
calibration reports, and the notes (:mod:`nutricap.landscape.grid.reports`).

A second streamed pass (:mod:`nutricap.landscape.grid.outputs`) writes
``capacity_density.tif``: animal-days per hectare from each cell's share of the forage eaten
in its row of the solution. The per-cell forage left by the rules is kept between the two
passes in a temporary file (:mod:`nutricap.landscape.grid.cell_cache`, not in memory), so the
inputs are read only once.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Callable
from dataclasses import dataclass, field

import geopandas as gpd
import numpy as np
import pandas as pd
from rasterio.windows import Window

from nutricap.errors import ProjectFileError
from nutricap.landscape import availability as rules_mod
from nutricap.landscape.grid.calibration import CalibratedSums, calibrated_sums
from nutricap.landscape.grid.cell_cache import CellCache
from nutricap.landscape.grid.cluster import ClusterRun, WindowJob, new_job
from nutricap.landscape.grid.layers import LayerStack
from nutricap.landscape.grid.outputs import capacity_density_map
from nutricap.landscape.grid.overview import BlockSums, CoarseGrid, OverviewMap
from nutricap.landscape.grid.rasters import Grid, grid_windows, read_grid, streaming_env
from nutricap.landscape.grid.reports import (
    calibration_report_with_areas,
    check_units,
    grid_notes,
    rule_maps,
    rules_report_by_unit,
    run_notes,
)
from nutricap.landscape.grid.setup import (
    calibrated_groups,
    cell_rules,
    class_sources,
    layer_key,
    layer_specs,
    shape_burners,
    strata_map,
    strata_polygons,
    strata_supply,
    treatment_pairs,
    unit_areas,
)
from nutricap.landscape.grid.sums import GridSetup, Totals, layout_of
from nutricap.landscape.grid.window_pass import (
    WORKERS,
    WindowReader,
    chunk_rows,
    stream_windows,
)
from nutricap.landscape.plots import StratumSupply
from nutricap.landscape.vectors import StratumAreas, choose_area_crs
from nutricap.model.problem import CapacityProblem, build_forage_items, require_override_strata

Progress = Callable[[str], None]


@dataclass(frozen=True)
class TreatedSums:
    """What the cells of a scenario's treatment polygons hold, by pair × stratum.

    A pair is a unit and a treatment polygon that meet (``pair_unit``, ``pair_polygon``:
    indexes into the units and the treatment polygons).

    Attributes
    ----------
    pair_unit, pair_polygon : int arrays (pairs,)
    cells : array (pairs, strata)
        Treated cells of the pair in each stratum.
    left_kg : array (pairs, strata, classes) [kg]
        Forage the availability rules leave of the current biomass (included in the
        baseline's sums of the unit and stratum).
    kept_ha : array (pairs, strata, classes) [ha]
        Σ over the cells of the share of each class the rules keep × cell area: forage of
        ``m`` kg/ha in each cell leaves ``m × kept_ha`` kg (rules proportional to the biomass).
    """

    pair_unit: np.ndarray
    pair_polygon: np.ndarray
    cells: np.ndarray
    left_kg: np.ndarray
    kept_ha: np.ndarray


@dataclass
class GridResult:
    """The grid path's result: the capacity problem and what the rules and models did.

    Attributes
    ----------
    problem : CapacityProblem
    areas : StratumAreas
        Units with their polygon ``area_ha``; ``by_unit_stratum`` with ``area_ha`` and
        ``accessible_ha`` from the cells.
    supply : StratumSupply
        Plot statistics of the strata-based forage classes (may have no class).
    rules_report : DataFrame
        Area and forage each availability rule removed, per unit (see
        :func:`nutricap.landscape.availability.rules_report`).
    calibration_report : DataFrame or None
        One row per calibrated forage group.
    notes : list of str
    grid : Grid
    resampled : dict
        Layer key → resampling method (None when the layer was on the grid).
    calibrated_sums : list of CalibratedSums
        One per calibrated group, for the model bootstrap (empty without calibrated groups).
    overview_maps : list of OverviewMap
        Coarse maps for the report: the standing forage and what each rule removed (from the
        first pass), then the capacity density once the problem is solved
        (:meth:`add_density_map`).
    blocks : BlockSums
        The first pass's sums by block of the maps' coarse grid.
    """

    problem: CapacityProblem
    areas: StratumAreas
    supply: StratumSupply
    rules_report: pd.DataFrame
    calibration_report: pd.DataFrame | None
    notes: list[str]
    grid: Grid
    resampled: dict[str, str | None]
    windows: list[Window] = field(repr=False)
    cache: CellCache | None = field(repr=False)  # None when the windows ran on a cluster
    row_of_key: np.ndarray = field(repr=False)
    stratum_of_key: np.ndarray = field(repr=False)
    classes: list[str] = field(default_factory=list)
    compression: str = "zstd"
    show_progress: bool = False
    calibrated_sums: list[CalibratedSums] = field(default_factory=list, repr=False)
    cluster: ClusterRun | None = field(default=None, repr=False)
    rules: rules_mod.CellRules | None = field(default=None, repr=False)  # the rules applied
    key_available_kg: np.ndarray | None = field(default=None, repr=False)
    """(units, strata, classes) forage left by the rules [kg]: the problem's supply."""
    mapped_ha: np.ndarray | None = field(default=None, repr=False)  # (units, strata) [ha]
    full_supply: StratumSupply | None = field(default=None, repr=False)  # means of all classes
    overview_maps: list[OverviewMap] = field(default_factory=list, repr=False)
    treated: TreatedSums | None = field(default=None, repr=False)  # with a scenario only
    blocks: BlockSums | None = field(default=None, repr=False)

    def add_density_map(
        self, available_kg: np.ndarray, eaten_kg: np.ndarray, intake_kg_per_day: float
    ) -> None:
        """Append the coarse map of capacity_density.tif (NCC animal-days per ha) to
        :attr:`overview_maps`, from the solution's (rows, items) forage available and eaten
        [kg] and the daily intake [kg/day] (as :func:`~nutricap.landscape.grid.outputs.
        write_capacity_density` is given them)."""
        if self.blocks is not None:
            self.overview_maps.append(
                capacity_density_map(self, available_kg, eaten_kg, intake_kg_per_day)
            )

    def describe(self) -> dict:
        """Grid, resampling and rules in plain values, for the run manifest."""
        return {
            "grid": self.grid.describe(),
            "resampled_layers": {k: v for k, v in self.resampled.items() if v is not None},
            "rules_applied": sorted(set(self.rules_report["rule"]), key=rules_mod.RULES.index),
            "cell_membership": "a cell belongs to a polygon when its centre lies in it",
            "windows": len(self.windows),
            "computed_on": (
                f"Dask cluster at {self.cluster.address}"
                if self.cluster is not None
                else f"this machine, {WORKERS} worker threads"
            ),
        }


# --- the grid problem -----------------------------------------------------------------------


def grid_problem(
    project,
    units: gpd.GeoDataFrame,
    strata: gpd.GeoDataFrame,
    plots: pd.DataFrame,
    forage_classes: pd.DataFrame,
    mode: str,
    progress: Progress | None = None,
    treatments: gpd.GeoDataFrame | None = None,
    streaming_started: Callable[[], None] | None = None,
) -> GridResult:
    """Build the capacity problem from the rasters and availability rules of ``project``.

    Parameters
    ----------
    project : Project
        With a ``[rasters]`` and/or ``[availability]`` section.
    units, strata : GeoDataFrame
        As read by :func:`nutricap.landscape.vectors.read_units` / ``read_strata``.
    plots : DataFrame
        The clip-plot table (strata-based supply).
    forage_classes : DataFrame
        The forage-class table.
    mode : str
        Pooling mode, ``"unit"`` or ``"patch"``.
    progress : callable, optional
        Called with a message per step; a progress bar over windows is shown when given
        (and not quiet).
    treatments : GeoDataFrame, optional
        A scenario's treatment polygons: burnt as one more part of the key, so that the
        same pass also gives the treated cells' sums (:class:`TreatedSums`).
    streaming_started : callable, optional
        Called (without arguments) as the first pass starts, after every layer was checked.
    """
    say = progress or (lambda message: None)
    specs = layer_specs(project)
    if not specs:
        raise ProjectFileError(
            "the raster path needs at least one raster layer to define the grid",
            source=project.path,
            location="sections [rasters] / [availability]",
            expected="a biomass, index, snow_depth, slope or distance_to_water raster",
            found="none",
        )
    config = project.config
    resample = config.rasters.resample if config.rasters is not None else "none"
    grid = read_grid(
        specs[0].path, specs[0].key, resample=resample, area_crs=choose_area_crs(units)[0]
    )
    classes, direct, calibrated, strata_classes = class_sources(project, forage_classes)
    say("fitting index → biomass models" if calibrated else "summarising clip plots by stratum")
    groups, calibration_report = calibrated_groups(project, calibrated, classes)
    strata_source = strata_map(project, strata)
    supply = strata_supply(plots, strata_source, strata_classes, classes, project)
    # before the pass, not after it (build_forage_items checks again, for the polygon path)
    require_override_strata(forage_classes, list(supply.strata), project.source("forage_classes"))
    polygon_stratum, polygon_biomass, access = strata_polygons(strata_source, supply, classes)
    rules = cell_rules(project, forage_classes, classes, access is not None)
    units_table, area_crs, reason, overlap_notes = unit_areas(units, strata_source, project)
    pairs = None if treatments is None else treatment_pairs(units, treatments, grid)
    n_keys = (len(units) + 1) * (len(supply.strata) + 1)  # the last "unit": outside every unit
    unit_base = np.arange(-1, len(units)) * (len(supply.strata) + 1)
    unit_base[0] = len(units) * (len(supply.strata) + 1)
    setup = GridSetup(
        classes=classes,
        n_strata=len(supply.strata),
        polygon_stratum=polygon_stratum,
        unit_base=unit_base,
        polygon_biomass=polygon_biomass,
        strata_columns=[classes.index(name) for name in strata_classes],
        polygon_access=access,
        direct={classes.index(name): f"rasters.biomass.{name}" for name in direct},
        calibrated=groups,
        index_key="rasters.calibrated.index" if groups else None,
        rules=rules,
        snow_key=layer_key(specs, "availability.snow_depth"),
        slope_key=layer_key(specs, "availability.slope"),
        water_key=layer_key(specs, "availability.distance_to_water"),
        dump_key=n_keys,
        treatment_pair=None if pairs is None else pairs[0],
        coarse=CoarseGrid.for_shape(grid.height, grid.width),
    )
    window_size = config.rasters.window_size if config.rasters is not None else None
    windows = grid_windows(grid, window_size)
    n_rows = layout_of(setup).rows
    n_treated = setup.n_treated_keys
    totals = Totals(
        np.zeros(n_keys), np.zeros((n_keys, n_rows)), np.zeros((len(groups), 3), np.int64),
        np.zeros(n_treated), np.zeros((n_treated, 2 * len(classes))),
        _block_sums(setup, len(units)),
    )  # fmt: skip
    show = progress is not None and not getattr(progress, "quiet", False)
    burners = shape_burners(units, strata_source, project, grid, treatments)
    lookup = None if strata_source.codes is None else strata_source.codes.polygon_lookup()
    job = new_job(setup, specs, grid, resample, windows, burners, lookup)
    cache, cluster, resampled = _first_pass(project, job, totals, say, show, streaming_started)
    result = _assemble(
        project, setup, totals, grid, supply, units_table, (area_crs, reason), mode,
        forage_classes, calibration_report, specs, resampled, windows, cache, show,
    )  # fmt: skip
    result.overview_maps.extend(rule_maps(result.blocks, result.grid, setup))
    if pairs is not None:
        result = dataclasses.replace(result, treated=_treated(totals, pairs, setup, grid))
    result = dataclasses.replace(result, notes=overlap_notes + grid_notes(grid) + result.notes)
    return dataclasses.replace(result, cluster=cluster) if cluster is not None else result


def _block_sums(setup: GridSetup, n_units: int) -> BlockSums:
    """Empty sums by block of the maps: the keys of a unit (``unit_base`` order: unit ×
    (strata + "no stratum")), those of a unit and a stratum, the layout's map rows."""
    key = np.arange(setup.dump_key + 1)
    in_unit = key < n_units * (setup.n_strata + 1)
    in_stratum = in_unit & (key % (setup.n_strata + 1) < setup.n_strata)
    layout = layout_of(setup)
    return BlockSums(setup.coarse, in_unit, in_stratum, layout.map_rows, layout.available)


def _treated(totals: Totals, pairs, setup: GridSetup, grid: Grid) -> TreatedSums:
    n_pairs, n_strata, n_classes = pairs[1].size, setup.n_strata, setup.n_classes
    sums = totals.treated_sums.reshape(n_pairs, n_strata, 2 * n_classes) * grid.cell_area_ha
    return TreatedSums(
        pair_unit=pairs[1],
        pair_polygon=pairs[2],
        cells=totals.treated_cells.reshape(n_pairs, n_strata),
        left_kg=sums[:, :, :n_classes],
        kept_ha=sums[:, :, n_classes:],
    )


def _first_pass(project, job: WindowJob, totals: Totals, say: Progress, show: bool, started=None):
    """Every window into ``totals``: on this machine's threads (keeping the cells for the
    density pass in a :class:`CellCache`) or on the Dask cluster of ``[rasters]
    dask_scheduler``. Returns (cache or None, cluster run or None, resampling by layer key).
    """
    rasters = project.config.rasters
    address = rasters.dask_scheduler if rasters is not None else None
    cells, count = job.grid.cells, len(job.windows)
    cache, cluster = None, None
    with streaming_env(), LayerStack(job.specs, job.grid, job.resample) as stack:  # checks all
        if started is not None:
            started()
        if address is None:
            say(f"streaming {cells:,} cells in {count} windows")
            cache = CellCache(job.windows, job.setup.n_classes, chunk_rows)
            reader = WindowReader(stack, job.grid, job.burners, job.strata_lookup)
            stream_windows(job.setup, reader, job.windows, totals, cache, show)
            cache.finish()
        else:
            cluster = ClusterRun(address, rasters.dask_connect_timeout_s, job, project.path)
            say(f"{cells:,} cells in {count} windows on the Dask cluster {address}")
            cluster.first_pass(totals, show)
        return cache, cluster, stack.resampled


def _assemble(
    project, setup, totals, grid, supply, units_table, crs_reason, mode,
    forage_classes, calibration_report, specs, resampled, windows, cache, show,
) -> GridResult:  # fmt: skip
    """Totals by key → checks, capacity problem, areas, reports."""
    n_units, n_strata = len(units_table), setup.n_strata
    cell_ha = grid.cell_area_ha
    inside = n_units * (n_strata + 1)  # keys of the last "unit" hold cells outside every unit
    cells = totals.cells[:inside].reshape(n_units, n_strata + 1)
    sums = totals.sums[:inside].reshape(n_units, n_strata + 1, -1)
    layout = layout_of(setup)
    available_kg = sums[:, :n_strata, layout.available] * cell_ha
    gross_kg = sums[:, :n_strata, layout.gross] * cell_ha
    accessible_ha = sums[:, :n_strata, layout.access] * cell_ha
    without_data = sums[:, :n_strata, layout.nodata]
    check_units(project, units_table, cells, without_data, specs, grid)
    mapped_ha = cells[:, :n_strata] * cell_ha
    full_supply = _full_supply(supply, setup.classes, gross_kg, mapped_ha - without_data * cell_ha)
    items = build_forage_items(full_supply, forage_classes, project.source("forage_classes"))
    problem, row_of_key = key_problem(units_table, available_kg, mapped_ha, items, mode)
    areas = _areas(units_table, full_supply.strata, mapped_ha, accessible_ha, crs_reason)
    report = rules_report_by_unit(units_table, setup.rules, sums[:, :n_strata], layout, cell_ha)
    calibration = calibration_report_with_areas(
        calibration_report, totals.calibration_cells, cell_ha, project
    )
    notes = run_notes(units_table, cells, without_data, cell_ha, resampled, calibration)
    stratum_of_key = np.append(np.tile(np.arange(n_strata + 1), n_units + 1), n_strata)
    calibration_terms = totals.sums[:, layout.calibration]
    calibrated = calibrated_sums(
        setup.calibrated, setup.n_classes, calibration_terms, cell_ha, row_of_key, stratum_of_key
    )
    compression = project.config.rasters.density_compression if project.config.rasters else "zstd"
    return GridResult(
        problem, areas, supply, report, calibration, notes, grid, resampled, windows, cache,
        row_of_key, stratum_of_key, setup.classes, compression, show, calibrated,
        rules=setup.rules, key_available_kg=available_kg, mapped_ha=mapped_ha,
        full_supply=full_supply, blocks=totals.blocks,
    )  # fmt: skip


def _full_supply(supply: StratumSupply, classes, gross_kg, with_data_ha) -> StratumSupply:
    """Biomass per stratum of every class: plot means, or raster means over cells with data."""
    area = with_data_ha.sum(axis=0)
    with np.errstate(invalid="ignore", divide="ignore"):
        raster_mean = np.where(area[:, None] > 0, gross_kg.sum(axis=0) / area[:, None], 0.0)
    mean = raster_mean.copy()
    se = np.full_like(mean, np.nan)
    for column, name in enumerate(supply.classes):
        mean[:, classes.index(name)] = supply.mean_kg_per_ha[:, column]
        se[:, classes.index(name)] = supply.se_kg_per_ha[:, column]
    return StratumSupply(supply.strata, list(classes), mean, se, supply.n_plots)


def key_problem(units_table, available_kg, mapped_ha, items, mode):
    """Rows (units, or unit × stratum patches with cells) × items, and each key's row.

    ``available_kg`` (units, strata, classes) [kg] and ``mapped_ha`` (units, strata) [ha] are
    sums by key; ``items`` are the strata × classes in that order.
    """
    n_units, n_strata, n_classes = available_kg.shape
    unit_ids = units_table["unit_id"].to_numpy()
    row_of_key = np.full((n_units, n_strata + 1), -1)
    if mode == "unit":
        available = available_kg.reshape(n_units, n_strata * n_classes)
        row_unit = np.arange(n_units)
        row_of_key[:, :n_strata] = row_unit[:, None]
    else:
        unit_index, stratum_index = np.nonzero(mapped_ha > 0)
        available = np.zeros((unit_index.size, n_strata * n_classes))
        columns = stratum_index[:, None] * n_classes + np.arange(n_classes)[None, :]
        available[np.arange(unit_index.size)[:, None], columns] = available_kg[
            unit_index, stratum_index
        ]
        row_unit = unit_index
        row_of_key[unit_index, stratum_index] = np.arange(unit_index.size)
    problem = CapacityProblem(unit_ids, row_unit, items, available)
    outside = np.full(n_strata + 2, -1)  # keys outside every unit, and the no-data key
    return problem, np.append(row_of_key.ravel(), outside)


def _areas(units_table, strata_names, mapped_ha, accessible_ha, crs_reason) -> StratumAreas:
    unit_index, stratum_index = np.nonzero(mapped_ha > 0)
    table = pd.DataFrame(
        {
            "unit_id": units_table["unit_id"].to_numpy()[unit_index],
            "stratum": np.asarray(strata_names, dtype=object)[stratum_index],
            "area_ha": mapped_ha[unit_index, stratum_index],
            "accessible_ha": accessible_ha[unit_index, stratum_index],
        }
    )
    area_crs, reason = crs_reason
    return StratumAreas(units_table, table, area_crs, reason)
