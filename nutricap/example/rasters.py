"""The invented raster landscape: snow depth and slope on a 50 m grid over the example's
extent, and the project section that uses them.

Everything here is *invented for the example* (see :mod:`nutricap.example`).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import rasterio
from rasterio.transform import from_origin

from nutricap.example.layers import CRS, HEIGHT_M, ORIGIN_X_M, ORIGIN_Y_M, WIDTH_M

RASTER_CELL_M = 50.0
"""Cell size of the example's snow-depth and slope rasters [m] (300 × 200 cells)."""
RASTER_PROJECT_TOML = """
[rasters]
window_size = 128

[availability]
snow_depth = "snow_depth_cm.tif"
slope = "slope_pct.tif"
min_forage_kg_per_ha = 20
"""
"""The raster variant of the project (project_rasters.toml): the same landscape on a 50 m
grid with snow burial, the packaged slope table and a minimum forage density (and the same
treatment scenarios, burnt on the grid by ``compare``)."""


def raster_fields() -> tuple[np.ndarray, np.ndarray]:
    """Snow depth [cm] and slope [%] on the example grid (invented smooth fields, no noise).

    Snow deepens towards the high north-east (about 0 to 58 cm); slope follows ridges that
    steepen northwards (about 2 to 45 %).
    """
    rows, cols = int(HEIGHT_M / RASTER_CELL_M), int(WIDTH_M / RASTER_CELL_M)
    rel_y = 1.0 - (np.arange(rows)[:, None] + 0.5) / rows  # 0 south, 1 north
    rel_x = (np.arange(cols)[None, :] + 0.5) / cols  # 0 west, 1 east
    height = 0.6 * rel_y + 0.4 * rel_x
    snow = 3.0 + 50.0 * height**1.5 + 5.0 * np.sin(9.0 * rel_x) * np.cos(7.0 * rel_y)
    ridges = np.abs(np.sin(2.0 * np.pi * (2.5 * rel_x + 0.8 * rel_y)))
    slope = 2.0 + 43.0 * ridges * (0.3 + 0.7 * rel_y)
    return np.clip(snow, 0.0, None).astype(np.float32), slope.astype(np.float32)


def write_example_rasters(folder: Path) -> None:
    """Write snow_depth_cm.tif and slope_pct.tif (tiled, compressed GeoTIFFs)."""
    snow, slope = raster_fields()
    profile = {
        "driver": "GTiff",
        "height": snow.shape[0],
        "width": snow.shape[1],
        "count": 1,
        "dtype": "float32",
        "crs": CRS,
        "transform": from_origin(ORIGIN_X_M, ORIGIN_Y_M + HEIGHT_M, RASTER_CELL_M, RASTER_CELL_M),
        "tiled": True,
        "blockxsize": 128,
        "blockysize": 128,
        "compress": "deflate",
        "predictor": 3,
        "nodata": -9999.0,
    }
    for name, values in (("snow_depth_cm.tif", snow), ("slope_pct.tif", slope)):
        with rasterio.open(folder / name, "w", **profile) as dst:
            dst.write(values, 1)
