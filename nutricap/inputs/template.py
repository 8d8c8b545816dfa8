"""The template project ``nutricap init DIR`` writes: what a new project must fill in.

A commented project file with every key (the optional ones commented out), the three tables with
their declared headers and one example row each as a comment line (``#`` first: the readers skip
comment lines after the last data row), and a README of what to fill in. Every name and number
in it is invented for the example. The layers (units, strata) are the user's own: the template
names them and ``nutricap check`` says they are missing.
"""

from __future__ import annotations

import os
import shutil
from pathlib import Path

from nutricap.errors import FILE_MISSING, OutputError, file_problem
from nutricap.inputs.columns import Column
from nutricap.inputs.table_cells import COMMENT
from nutricap.inputs.tables import ANIMAL_CLASS_COLUMNS, FORAGE_CLASS_COLUMNS, PLOT_COLUMNS

PROJECT_FILE = "project.toml"
README = "README.md"

#: Table → (declared columns, one example row by column; invented for the example).
TABLES: dict[str, tuple[list[Column], dict[str, str]]] = {
    "forage_classes.csv": (
        FORAGE_CLASS_COLUMNS,
        {
            "forage_class": "bitterbrush",
            "growth_form": "browse",
            "de_kcal_per_g": "2.45",
            "cp_pct": "8",
            "allowable_use": "0.5",
            "key": "true",
            "height_cm": "90",
            "tannin": "0.05",
        },
    ),
    "plots.csv": (
        PLOT_COLUMNS,
        {
            "plot_id": "P001",
            "stratum": "bitterbrush_flat",
            "forage_class": "bitterbrush",
            "dry_mass_g": "14.2",
            "frame_area_m2": "0.25",
        },
    ),
    "animal_classes.csv": (
        ANIMAL_CLASS_COLUMNS,
        {"animal_class": "adult_female", "body_mass_kg": "65", "share": "1", "state": "gestation"},
    ),
}

PROJECT_TEXT = """\
# nutricap project file (TOML), written by `nutricap init`. Paths are relative to this file.
# A line beginning with # is a comment: remove the # in front of an optional key to use it.
# README.md says what to fill in; `nutricap check project.toml` says what is still missing.
# Every key is described in docs/inputs.md (rasters: docs/rasters.md). The name below is
# invented for the example: put your own.

[project]
name = "Corvid Flats winter range"    # free text, shown in the outputs
species = "mule deer"                 # free text
season = "winter"                     # any, winter, spring, summer, autumn (or fall)
season_days = 120                     # days the forage must last, at most 366
# season_start = 2026-12-01           # instead of season_days (both days counted)
# season_end = 2027-03-31

[inputs]
forage_classes = "forage_classes.csv" # forage quality and allowable use per class
plots = "plots.csv"                   # clip plots, one row per plot and class found
animal_classes = "animal_classes.csv" # the herd: body mass, share, state
units = "units.gpkg"                  # management units: polygons with unit_id (your layer)
strata = "strata.gpkg"                # vegetation strata: polygons with stratum (your layer)
# units_layer = "units"               # layer names, when a file holds several
# strata_layer = "strata"
# counts = "counts.csv"               # yearly counts: year, count (unit_id, removals optional)
# nutritional_states = "requirements.csv"  # your own requirement table

[target]                              # the nutritional state NCC is computed for
animal_class = "adult_female"         # a class of animal_classes.csv
state = "gestation"                   # maintenance, gestation, late_gestation, lactation, growth
protein = true                        # also require the state's digestible protein
# diet_de_min_kcal_per_g = 2.4        # explicit thresholds override the derived ones
# diet_dp_min_pct = 4.5

[supply]
strata_without_forage = []            # mapped strata known to carry no forage (no plots needed)

[forage_use]
cap_at_allowable_use = true           # NCC eats at most allowable_use x available of each class

[pooling]
mode = "unit"                         # "unit" or "patch" (each stratum patch on its own)

[uncertainty]
bootstrap_replicates = 0              # e.g. 1000 for intervals over the plots
interval_level = 0.9
seed = 20261201
sensitivity_change = 0.1              # one-at-a-time change of each input group

# Your own column names (docs/inputs.md): one table per input, our name = the file's column.
# [columns.units]
# unit_id = "UNIT_NAME"
# current_animals = "HERD_NOW"
# [columns.strata]
# [columns.plots]
# [columns.forage_classes]
# [columns.animal_classes]
# [columns.counts]
# [columns.nutritional_states]
# [columns.treatments]
# [columns.treatment_responses]
# [columns.strata_codes]
# [columns.calibration_plots]

# The sheet of an .xlsx table (the first sheet when not given):
# [sheets]
# plots = "Field 2026"
# forage_classes = "Lab results"
# animal_classes = "Herd"
# counts = "Counts"
# nutritional_states = "Requirements"
# treatment_responses = "Responses"
# strata_codes = "Codes"
# calibration_plots = "Plots with coordinates"

# Another herd on the same range (docs/inputs.md), e.g. a grazing permit, one table per herd:
# [[other_herbivores]]
# name = "cattle permit"
# aums_column = "PERMIT_AUM"          # AUMs per unit in a units-layer column; or instead:
# animals_column = "CATTLE_HEAD"      # head per unit in a units-layer column, or
# numbers_table = "permit.csv"        # a table unit_id, animals (or aums)
# timing = "before"                   # "before" the season, or "same_season"
# preference = { graminoid = 3.0, forb = 1.0 }  # weights by growth form or forage class
# body_mass_kg = 500                  # with head counts: body mass (or intake_kg_per_day)
# intake_kg_per_day = 11.8
# days = 60                           # and the days on the range

# Diet-composition limits of the target species (docs/methods.md):
# [diet.groups.graminoids]
# growth_form = "graminoid"           # the group: one growth form, or
# classes = ["bluebunch", "needlegrass"]  # a list of forage classes
# min_share = 0.2
# max_share = 1.0

# A treatment scenario for `nutricap compare --scenario burn_2028`:
# [scenarios.burn_2028]
# description = "Burn two sagebrush stands in 2028"
# treatments = "treatments.gpkg"      # polygons with a treatment and its year
# treatments_layer = "treatments"
# responses = "treatment_responses.csv"
# first_year = 2026
# last_year = 2040

# Forage from rasters instead of (or beside) the plots' strata means (docs/rasters.md):
# [rasters]
# resample = "none"                   # none, nearest, bilinear, average: rasters on another
#                                     # grid or CRS are warped onto the analysis grid
# window_size = 256                   # cells per side of a processing window
# density_compression = "zstd"        # zstd or deflate
# dask_scheduler = "tcp://scheduler.example:8786"
# dask_connect_timeout_s = 10
# [rasters.biomass]                   # forage class = raster of kg/ha
# bitterbrush = "bitterbrush_kg_per_ha.tif"
# [rasters.calibrated]                # an index raster calibrated on plots with coordinates
# index = "greenness_index.tif"
# plots = "plots_with_coordinates.csv"
# model = "best"                      # linear, loglinear or best
# plots_crs = "EPSG:32612"
# extrapolation_margin = 0.1
# beyond_margin = "clamp"             # clamp or extrapolate
# [rasters.calibrated.groups]
# herbaceous = ["bluebunch", "forbs"]
# [rasters.strata]                    # strata as a raster of codes instead of polygons
# raster = "strata_codes.tif"
# codes = "strata_codes.csv"          # code, stratum

# Rules applied to every cell of the raster path:
# [availability]
# snow_depth = "snow_depth_cm.tif"
# snow_burial = "exposed_fraction"    # or all_or_none
# slope = "slope_pct.tif"
# slope_units = "percent"             # or degrees
# slope_table = "slope_classes.csv"
# distance_to_water = "water_distance_m.tif"
# water_table = "water_classes.csv"
# min_forage_kg_per_ha = 50
# exclusions = ["roads_buffer.gpkg"]
"""

README_TEXT = """\
# A nutricap project to fill in

Written by `nutricap init`. The names and numbers in the example rows are invented for the
example. Fill in, then run `nutricap check project.toml` until it says OK, then
`nutricap estimate project.toml --out results`.

1. **project.toml**: the name, species, season and its length, and the `[target]` animal
   class and state. Optional keys are commented out (`#`); docs/inputs.md describes each.
2. **forage_classes.csv**: one row per forage class: crude protein, digestible energy (or
   dry-matter digestibility), allowable use.
3. **plots.csv**: one row per clip plot and forage class found, with the dry mass and the frame
   area (or the biomass in kg/ha). Record a bare plot (no forage at all) as one row with an
   empty `forage_class` and mass 0: leaving it out biases its stratum's means upward.
4. **animal_classes.csv**: the herd by class: body mass, share of the herd (the shares add up
   to 1) and reproductive state.
5. **units.gpkg** and **strata.gpkg**: your layers (any format GDAL reads; change the paths in
   project.toml): management units with a `unit_id` column (optional `current_animals`), and
   vegetation strata with a `stratum` column (optional `accessible_fraction`). Every mapped
   stratum needs plots, or a place in `[supply] strata_without_forage`.

Each table has one example row as a comment line, beginning with `#`. Lines beginning with `#`
after the last data row are skipped; one above a data row is refused. Overwrite the example row
with your first row, or delete it.
"""


def is_template_readme(path: Path) -> bool:
    """Whether ``path`` is the README a template was written with (its first line)."""
    try:
        with path.open(encoding="utf-8") as stream:
            return stream.readline() == README_TEXT.splitlines(keepends=True)[0]
    except (OSError, UnicodeDecodeError):
        return False


def table_text(columns: list[Column], example: dict[str, str]) -> str:
    """Header of the declared ``columns`` and the example row as a comment line."""
    names = [column.name for column in columns]
    unknown = set(example) - set(names)
    if unknown:
        raise ValueError(f"example cells for undeclared columns: {sorted(unknown)}")
    row = ",".join(example.get(name, "") for name in names)
    return ",".join(names) + "\n" + COMMENT + " " + row + "\n"


def template_files() -> dict[str, str]:
    """Every file of the template project: name → text."""
    files = {PROJECT_FILE: PROJECT_TEXT, README: README_TEXT}
    files.update({name: table_text(*spec) for name, spec in TABLES.items()})
    return files


def write_template(folder: Path) -> list[Path]:
    """Write the template project into ``folder`` (new or empty); return the files written.

    Raises :class:`OutputError` for a folder that holds anything or a path that is not a
    folder; the files appear together (written into a staging folder beside it, then moved).
    """
    folder = Path(folder).absolute()
    _require_empty_folder(folder)
    staging = folder.with_name(f".{folder.name}.init-{os.getpid()}")
    try:
        staging.mkdir(parents=True)
        for name, text in template_files().items():
            (staging / name).write_text(text, encoding="utf-8")
        if folder.is_dir():
            folder.rmdir()  # empty (checked): replaced by the staging folder
        staging.rename(folder)
    except OSError as exc:
        shutil.rmtree(staging, ignore_errors=True)
        raise OutputError(
            f"cannot write the template: {exc.strerror or exc}",
            source=folder,
            expected="a new or empty folder that can be written",
        ) from None
    return [folder / name for name in template_files()]


def _require_empty_folder(folder: Path) -> None:
    problem = file_problem(folder)
    if problem is None and not folder.is_dir():
        problem = "is a file, not a folder"
    elif problem is None and any(folder.iterdir()):
        found = sorted(path.name for path in folder.iterdir())
        raise OutputError(
            "the folder is not empty; init writes a template only into a new or empty folder",
            source=folder,
            expected="a new or empty folder",
            found=f"{len(found)} entries: "
            + ", ".join(found[:5])
            + (", …" if len(found) > 5 else ""),
        )
    if problem is not None and problem != FILE_MISSING:
        raise OutputError(f"the path {problem}", source=folder, expected="a new or empty folder")
