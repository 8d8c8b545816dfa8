"""The project's tables and layers, read and checked (the pipeline's first step).

:class:`Inputs` holds them; :func:`on_grid` says whether the project is estimated on a raster
grid.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field

import geopandas as gpd
import pandas as pd

from nutricap.inputs.counts import read_counts
from nutricap.inputs.project import Project
from nutricap.inputs.tables import read_animal_classes, read_forage_classes, read_plots
from nutricap.landscape.vectors import read_strata, read_units
from nutricap.model.requirements import requirement_table
from nutricap.model.shared_range import OtherHerd, load_other_herds
from nutricap.science import energetics

Progress = Callable[[str], None]
"""Where the steps say what they are doing (a message per step)."""


@dataclass(frozen=True)
class Inputs:
    """The project's tables and layers, read and checked."""

    forage_classes: pd.DataFrame
    plots: pd.DataFrame
    animals: pd.DataFrame
    units: gpd.GeoDataFrame
    strata: gpd.GeoDataFrame | None  # None when the strata are a raster ([rasters.strata])
    counts: pd.DataFrame | None = None
    requirement_table: pd.DataFrame = field(default_factory=lambda: energetics.NUTRITIONAL_STATES)
    requirement_notes: list[str] = field(default_factory=list)
    other_herds: tuple[OtherHerd, ...] = ()


def on_grid(project: Project) -> bool:
    """Whether ``project`` is estimated on a raster grid ([rasters] or [availability])."""
    return project.config.rasters is not None or project.config.availability is not None


def read_inputs(project: Project, say: Progress) -> Inputs:
    """Read and check every table and layer of the project."""
    config = project.config
    say("reading tables")
    forage_classes = read_forage_classes(project.source("forage_classes"))
    plots = read_plots(project.source("plots"))
    animals = read_animal_classes(project.source("animal_classes"))
    say("reading layers")
    herd_columns = [
        column
        for herd in config.other_herbivores
        for column in (herd.animals_column, herd.aums_column)
        if column is not None
    ]
    units = read_units(project.source("units"), config.inputs.units_layer, herd_columns)
    strata = None  # a strata raster is read window by window on the grid path
    if not config.strata_as_raster:
        strata = read_strata(project.source("strata"), config.inputs.strata_layer)
    given = config.inputs.counts is not None
    counts = read_counts(project.source("counts")) if given else None
    states, state_notes = requirement_table(project)
    others = load_other_herds(project, units, forage_classes)
    return Inputs(
        forage_classes, plots, animals, units, strata, counts, states, state_notes, others
    )
