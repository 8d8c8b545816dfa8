"""Invented example landscape: a mule-deer winter range with six management units.

Everything here is *invented for the example*: place names, polygons, clip plots,
forage values, herd numbers and counts. The numbers are chosen to look plausible for
a winter range in the Intermountain West, but they are not measurements and must never
serve as a check of correctness.

``write_example_landscape(folder)`` writes the complete project (vector layers, CSV
tables and ``project.toml``) with a fixed seed, so two runs give the same tables and
the same geometries. :mod:`.tables` holds the invented tables, :mod:`.layers` the polygon
landscape, :mod:`.rasters` the raster landscape, :mod:`.project_files` the project files'
sections and :mod:`.landscape` the writing of them all.

Run ``python -m nutricap.example FOLDER`` to write the files into FOLDER.
"""

from nutricap.example.landscape import SEED, write_example_landscape
from nutricap.example.layers import CRS, HEIGHT_M, ORIGIN_X_M, ORIGIN_Y_M, WIDTH_M, study_area
from nutricap.example.project_files import DIET_TOML, OTHER_HERBIVORES_TOML
from nutricap.example.rasters import RASTER_CELL_M
from nutricap.example.tables import (
    HERD_SIZING_INTAKE_KG_PER_DAY,
    N_COUNT_YEARS,
    SEASON_DAYS,
    usable_forage_kg,
)

__all__ = ["CRS", "DIET_TOML", "HEIGHT_M", "HERD_SIZING_INTAKE_KG_PER_DAY", "N_COUNT_YEARS"]
__all__ += ["ORIGIN_X_M", "ORIGIN_Y_M", "OTHER_HERBIVORES_TOML", "RASTER_CELL_M", "SEASON_DAYS"]
__all__ += ["SEED", "WIDTH_M", "study_area", "usable_forage_kg", "write_example_landscape"]
