"""Invented example landscape: a mule-deer winter range with six management units.

Everything here is *invented for the example*: place names, polygons, clip plots,
forage values, herd numbers and counts. The numbers are chosen to look plausible for
a winter range in the Intermountain West, but they are not measurements and must never
serve as a check of correctness.

``write_example_landscape(folder)`` writes the complete project (vector layers, CSV
tables and ``project.toml``) with a fixed seed, so two runs give the same tables and
the same geometries.

Run ``python -m nutricap.example FOLDER`` to write the files into FOLDER.
"""

from __future__ import annotations

import sys
from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd
import rasterio
import shapely
from rasterio.transform import from_origin
from shapely import affinity
from shapely.geometry import MultiPoint, Point, Polygon, box

SEED = 20240117
CRS = "EPSG:32612"  # WGS 84 / UTM zone 12N
ORIGIN_X_M, ORIGIN_Y_M = 452_000.0, 4_281_000.0  # south-west corner [m]
WIDTH_M, HEIGHT_M = 15_000.0, 10_000.0
N_STRATA_CELLS = 70
SEASON_DAYS = 120
FIRST_COUNT_YEAR, N_COUNT_YEARS = 2013, 12

# Unit ids, laid out west to east along the south row, then the north row.
UNIT_IDS = ("Flintwhistle", "Coldmarrow", "Petrelhollow", "Rimgrass", "Thistlemoss", "Wrenfall")
# Current herd as a multiple of the rough allowable-use capacity of each unit
# (invented for the example; "Petrelhollow" is the over-stocked unit).
STOCKING_FACTOR = {
    "Flintwhistle": 0.3,
    "Coldmarrow": 0.35,
    "Petrelhollow": 1.5,
    "Rimgrass": 0.3,
    "Thistlemoss": 0.25,
    "Wrenfall": 0.3,
}

# Forage classes, invented for the example. ``de_kcal_per_g`` is left empty (NaN) where
# ``dmd_pct`` is given instead. ``tannin`` in mg bovine serum albumin precipitated per mg
# forage.
FORAGE_CLASS_COLUMNS = (
    "forage_class",
    "growth_form",
    "de_kcal_per_g",
    "dmd_pct",
    "cp_pct",
    "allowable_use",
    "key",
    "height_cm",
    "tannin",
)
FORAGE_CLASSES = (
    ("big_sagebrush", "browse", 2.75, np.nan, 10.5, 0.50, True, 60.0, 0.01),
    ("bitterbrush", "browse", 2.45, np.nan, 8.0, 0.50, True, 90.0, 0.05),
    ("mountain_mahogany", "browse", 2.35, np.nan, 8.5, 0.50, True, 150.0, 0.08),
    ("rabbitbrush", "browse", 2.30, np.nan, 7.0, 0.40, False, 60.0, 0.02),
    ("serviceberry", "browse", np.nan, 48.0, 6.5, 0.50, False, 180.0, 0.04),
    ("juniper", "browse", 2.50, np.nan, 6.0, 0.30, False, 300.0, 0.03),
    ("aspen_twigs", "browse", 2.20, np.nan, 6.5, 0.50, False, 200.0, 0.06),
    ("cheatgrass", "grass", 1.90, np.nan, 4.0, 0.60, False, 15.0, 0.0),
    ("bluebunch_wheatgrass", "grass", np.nan, 45.0, 4.5, 0.40, False, 40.0, 0.0),
    ("sandberg_bluegrass", "grass", 2.00, np.nan, 5.0, 0.50, False, 15.0, 0.0),
    ("winter_forbs", "forb", 2.60, np.nan, 10.0, 0.50, False, 10.0, 0.0),
)

# Mean winter standing crop by stratum and forage class [kg/ha], invented for the example.
STRATUM_MIX_KG_PER_HA = {
    "sagebrush_steppe": {
        "big_sagebrush": 120,
        "bitterbrush": 35,
        "rabbitbrush": 45,
        "cheatgrass": 80,
        "bluebunch_wheatgrass": 90,
        "sandberg_bluegrass": 45,
        "winter_forbs": 15,
    },
    "mountain_shrub": {
        "bitterbrush": 90,
        "mountain_mahogany": 100,
        "serviceberry": 80,
        "big_sagebrush": 50,
        "bluebunch_wheatgrass": 70,
        "winter_forbs": 20,
    },
    "juniper_woodland": {
        "juniper": 220,
        "big_sagebrush": 40,
        "mountain_mahogany": 30,
        "cheatgrass": 70,
        "sandberg_bluegrass": 30,
    },
    "aspen": {
        "aspen_twigs": 130,
        "serviceberry": 70,
        "winter_forbs": 40,
        "bluebunch_wheatgrass": 60,
    },
    "grass_meadow": {
        "bluebunch_wheatgrass": 320,
        "sandberg_bluegrass": 140,
        "winter_forbs": 60,
        "cheatgrass": 50,
    },
    "burned_shrub": {
        "cheatgrass": 380,
        "rabbitbrush": 60,
        "sandberg_bluegrass": 80,
        "winter_forbs": 45,
        "bitterbrush": 12,
    },
}
STRATA = tuple(STRATUM_MIX_KG_PER_HA)
# Probability of each stratum in the low, middle and high third of the terrain index.
STRATUM_PROBABILITY = np.array(
    [
        # sage  mshrub  juniper  aspen  meadow  burned
        [0.50, 0.00, 0.10, 0.00, 0.15, 0.25],
        [0.30, 0.25, 0.35, 0.00, 0.00, 0.10],
        [0.00, 0.45, 0.10, 0.30, 0.15, 0.00],
    ]
)
PLOTS_PER_STRATUM = {
    "sagebrush_steppe": 80,
    "mountain_shrub": 60,
    "juniper_woodland": 50,
    "aspen": 30,
    "grass_meadow": 35,
    "burned_shrub": 45,
}
FRAME_AREA_M2 = {"grass_meadow": 0.25, "burned_shrub": 0.25}  # others: 1.0 m2
PRESENCE_PROBABILITY = 0.85
BIOMASS_LOG_SD = 0.6

ANIMAL_CLASSES = pd.DataFrame(
    {
        "animal_class": ["adult_female", "fawn", "adult_male"],
        "body_mass_kg": [65.0, 35.0, 80.0],
        "share": [0.6, 0.3, 0.1],
        "state": ["gestation", "growth", "maintenance"],
    }
)
# Daily dry-matter intake of an average deer, used only to size the invented herds
# [kg/day] (common practice: about 2.5 % of a 65-kg doe's body mass).
HERD_SIZING_INTAKE_KG_PER_DAY = 1.6

# A cattle grazing permit on two units, in AUMs, grazed before the deer arrive ("graze
# first, then winter"); numbers and preferences invented for the example.
CATTLE_PERMIT_AUMS = {"Coldmarrow": 400.0, "Rimgrass": 500.0}
OTHER_HERBIVORES_TOML = """
[[other_herbivores]]
name = "cattle permit"
numbers_table = "cattle_permit.csv"
timing = "before"
preference = { grass = 1.0, forb = 0.3, browse = 0.05 }
"""

# A cap on one browse class in the deer's diet, set so that it binds where big sagebrush is
# plentiful (Coldmarrow, Petrelhollow) and nowhere else; invented for the example.
DIET_TOML = """
# Diet-composition limit, invented for the example: big sagebrush at most 28 % of the diet.
[diet.groups.sagebrush]
classes = ["big_sagebrush"]
max_share = 0.28
"""

PROJECT_TOML = f"""\
# Example project, invented for the example: no real place, herd or data set.
[project]
name = "Tallowreed Basin winter range"
species = "mule deer"
season = "winter"
season_days = {SEASON_DAYS}

[inputs]
forage_classes = "forage_classes.csv"
plots = "plots.csv"
animal_classes = "animal_classes.csv"
units = "units.gpkg"
strata = "strata.gpkg"
counts = "counts.csv"

[target]
animal_class = "adult_female"
state = "gestation"
protein = true

[forage_use]
cap_at_allowable_use = true

[pooling]
mode = "unit"

[uncertainty]
bootstrap_replicates = 1000
interval_level = 0.9
seed = 20261201
sensitivity_change = 0.1
{OTHER_HERBIVORES_TOML}{DIET_TOML}"""


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


def study_area() -> Polygon:
    """Return the rectangular study area in UTM 12N coordinates [m]."""
    return box(ORIGIN_X_M, ORIGIN_Y_M, ORIGIN_X_M + WIDTH_M, ORIGIN_Y_M + HEIGHT_M)


def voronoi_cells(seeds_xy: np.ndarray, area: Polygon) -> list[Polygon]:
    """Tile ``area`` with the Voronoi cells of ``seeds_xy``, in the order of the seeds.

    Parameters
    ----------
    seeds_xy : ndarray of shape (n, 2)
        Seed coordinates inside ``area`` [m].
    area : Polygon
        Region to tile.

    Returns
    -------
    list of Polygon
        Cell ``i`` contains seed ``i``; the cells cover ``area`` without overlap.
    """
    cells = shapely.voronoi_polygons(MultiPoint(seeds_xy), extend_to=area).geoms
    seeds = [Point(xy) for xy in seeds_xy]
    ordered = [next(c for c in cells if c.intersects(seed)) for seed in seeds]
    return [cell.intersection(area) for cell in ordered]


def make_units(rng: np.random.Generator) -> gpd.GeoDataFrame:
    """Six management units from a jittered 3 x 2 grid of Voronoi seeds."""
    col, row = np.meshgrid(np.arange(3), np.arange(2))
    x = ORIGIN_X_M + (col.ravel() + 0.5) * WIDTH_M / 3
    y = ORIGIN_Y_M + (row.ravel() + 0.5) * HEIGHT_M / 2
    jitter = rng.uniform(-0.25, 0.25, size=(6, 2)) * [WIDTH_M / 3, HEIGHT_M / 2]
    cells = voronoi_cells(np.column_stack([x, y]) + jitter, study_area())
    return gpd.GeoDataFrame({"unit_id": list(UNIT_IDS)}, geometry=cells, crs=CRS)


def terrain_index(xy: np.ndarray, rng: np.random.Generator) -> np.ndarray:
    """Invented 0-1 index rising to the north-east (a stand-in for elevation)."""
    rel = (xy - [ORIGIN_X_M, ORIGIN_Y_M]) / [WIDTH_M, HEIGHT_M]
    index = 0.6 * rel[:, 1] + 0.4 * rel[:, 0] + rng.normal(0.0, 0.08, len(xy))
    return np.clip(index, 0.0, 1.0)


def rock_outcrop() -> Polygon:
    """An unmapped rock outcrop of about 1.2 km2 (invented for the example)."""
    centre = Point(ORIGIN_X_M + 9_800.0, ORIGIN_Y_M + 6_300.0)
    return affinity.rotate(affinity.scale(centre.buffer(500.0), 1.7, 0.9), 30.0)


def make_strata(rng: np.random.Generator) -> gpd.GeoDataFrame:
    """Vegetation polygons: Voronoi cells with strata drawn along the terrain index.

    A rock outcrop is cut out and left unmapped; a few steep high cells get an
    ``accessible_fraction`` below 1.
    """
    seeds = rng.uniform(
        [ORIGIN_X_M, ORIGIN_Y_M],
        [ORIGIN_X_M + WIDTH_M, ORIGIN_Y_M + HEIGHT_M],
        size=(N_STRATA_CELLS, 2),
    )
    index = terrain_index(seeds, rng)
    band = np.minimum((index * 3).astype(int), 2)
    strata = [STRATA[rng.choice(len(STRATA), p=STRATUM_PROBABILITY[b])] for b in band]
    missing = set(STRATA) - set(strata)
    if missing:
        raise ValueError(f"seed gives no polygon of strata {sorted(missing)}")
    steep = (index > 0.6) & (rng.uniform(size=len(seeds)) < 0.4)
    accessible = np.where(steep, rng.choice([0.4, 0.6, 0.8], size=len(seeds)), 1.0)
    outcrop = rock_outcrop()
    cells = [cell.difference(outcrop) for cell in voronoi_cells(seeds, study_area())]
    frame = gpd.GeoDataFrame(
        {"stratum": strata, "accessible_fraction": accessible}, geometry=cells, crs=CRS
    )
    return frame[~frame.geometry.is_empty].reset_index(drop=True)


def make_forage_classes() -> pd.DataFrame:
    """The forage-class table (invented for the example)."""
    return pd.DataFrame(FORAGE_CLASSES, columns=list(FORAGE_CLASS_COLUMNS))


def make_plots(rng: np.random.Generator) -> pd.DataFrame:
    """Clip plots in long format: one row per plot and forage class found.

    Dry mass per frame is drawn lognormally around the stratum mean; a class absent
    from a plot has no row (zero).
    """
    plot_strata = [s for s, n in PLOTS_PER_STRATUM.items() for _ in range(n)]
    rows = []
    for number, stratum in enumerate(plot_strata, start=1):
        rows.extend(plot_rows(rng, f"P{number:03d}", stratum))
    return pd.DataFrame(
        rows, columns=["plot_id", "stratum", "forage_class", "dry_mass_g", "frame_area_m2"]
    )


def plot_rows(rng: np.random.Generator, plot_id: str, stratum: str) -> list[tuple]:
    """Rows of one clip plot; at least one forage class is always present."""
    mix = STRATUM_MIX_KG_PER_HA[stratum]
    frame_m2 = FRAME_AREA_M2.get(stratum, 1.0)
    present = rng.uniform(size=len(mix)) < PRESENCE_PROBABILITY
    present[rng.integers(len(mix))] = True
    noise = rng.lognormal(-0.5 * BIOMASS_LOG_SD**2, BIOMASS_LOG_SD, size=len(mix))
    kg_per_ha = np.array(list(mix.values())) * noise
    # 1 g/m2 = 10 kg/ha; weighed to 0.1 g, and a class found weighs at least that
    dry_mass_g = np.maximum(np.round(kg_per_ha * frame_m2 / 10.0, 1), 0.1)
    return [
        (plot_id, stratum, forage_class, float(mass), frame_m2)
        for forage_class, mass, found in zip(mix, dry_mass_g, present, strict=True)
        if found
    ]


def usable_forage_kg(units: gpd.GeoDataFrame, strata: gpd.GeoDataFrame) -> pd.Series:
    """Rough usable forage per unit from the stratum means, used to size the herds.

    Σ over strata polygons of area inside the unit × ``accessible_fraction`` ×
    Σ over classes of mean standing crop × ``allowable_use`` [kg].
    """
    use = make_forage_classes().set_index("forage_class")["allowable_use"]
    usable_kg_ha = {
        s: sum(m * use[c] for c, m in mix.items()) for s, mix in STRATUM_MIX_KG_PER_HA.items()
    }
    pieces = gpd.overlay(units, strata, how="intersection", keep_geom_type=True)
    kg = (
        pieces.geometry.area
        / 1e4
        * pieces["accessible_fraction"]
        * pieces["stratum"].map(usable_kg_ha)
    )
    return kg.groupby(pieces["unit_id"]).sum().reindex(units["unit_id"])


def add_current_animals(units: gpd.GeoDataFrame, strata: gpd.GeoDataFrame) -> gpd.GeoDataFrame:
    """Set ``current_animals`` as the invented stocking factor × rough capacity."""
    capacity = usable_forage_kg(units, strata) / (HERD_SIZING_INTAKE_KG_PER_DAY * SEASON_DAYS)
    factor = units["unit_id"].map(STOCKING_FACTOR).to_numpy()
    units = units.copy()
    units["current_animals"] = np.rint(capacity.to_numpy() * factor).astype(int)
    return units


def make_counts(rng: np.random.Generator, units: gpd.GeoDataFrame) -> pd.DataFrame:
    """Yearly counts per unit: a noisy logistic rise towards ~75 % of today's herd."""
    years = FIRST_COUNT_YEAR + np.arange(N_COUNT_YEARS)
    t = np.arange(N_COUNT_YEARS)
    frames = []
    for unit_id, current in zip(units["unit_id"], units["current_animals"], strict=True):
        k = 0.75 * current
        n0 = k * rng.uniform(0.3, 0.5)
        r = rng.uniform(0.35, 0.6)
        trend = k / (1 + (k - n0) / n0 * np.exp(-r * t))
        count = np.rint(trend * rng.lognormal(0.0, 0.08, N_COUNT_YEARS)).astype(int)
        frames.append(pd.DataFrame({"unit_id": unit_id, "year": years, "count": count}))
    return pd.concat(frames, ignore_index=True)


# Treatment responses by years since treatment, invented for the example. The broad
# pattern (browse and herbs rising for some years after juniper removal; sagebrush killed
# and herbs flushing after fire) follows published reviews from memory, not their numbers.
RESPONSE_COLUMNS = (
    "treatment",
    "forage_class",
    "growth_form",
    "years_since",
    "biomass_multiplier",
    "de_shift_kcal_per_g",
    "cp_shift_pct",
)
RESPONSES = (
    ("thinning", "juniper", "", 0, 0.1, 0.0, 0.0),
    ("thinning", "juniper", "", 15, 0.4, 0.0, 0.0),
    ("thinning", "big_sagebrush", "", 1, 1.1, 0.0, 0.0),
    ("thinning", "big_sagebrush", "", 6, 1.6, 0.0, 0.0),
    ("thinning", "big_sagebrush", "", 15, 1.3, 0.0, 0.0),
    ("thinning", "", "browse", 1, 1.1, 0.0, 0.0),
    ("thinning", "", "browse", 6, 1.8, 0.0, 0.0),
    ("thinning", "", "browse", 15, 1.2, 0.0, 0.0),
    ("thinning", "", "grass", 1, 1.5, 0.0, 0.0),
    ("thinning", "", "grass", 4, 2.5, 0.0, 0.0),
    ("thinning", "", "grass", 15, 1.3, 0.0, 0.0),
    ("thinning", "", "forb", 1, 2.0, 0.0, 1.0),
    ("thinning", "", "forb", 5, 1.5, 0.0, 0.0),
    ("prescribed_burn", "big_sagebrush", "", 0, 0.05, 0.0, 0.0),
    ("prescribed_burn", "big_sagebrush", "", 20, 0.5, 0.0, 0.0),
    ("prescribed_burn", "bitterbrush", "", 0, 0.3, 0.1, 2.0),
    ("prescribed_burn", "bitterbrush", "", 4, 1.2, 0.0, 0.0),
    ("prescribed_burn", "bitterbrush", "", 12, 1.0, 0.0, 0.0),
    ("prescribed_burn", "", "forb", 1, 2.5, 0.2, 2.0),
    ("prescribed_burn", "", "forb", 5, 1.2, 0.0, 0.0),
    ("prescribed_burn", "", "grass", 1, 1.5, 0.15, 1.5),
    ("prescribed_burn", "", "grass", 4, 1.2, 0.0, 0.0),
)
SCENARIOS_TOML = """
[scenarios.juniper_thinning]
description = "Thin the three largest juniper stands in 2027 (invented for the example)"
treatments = "treatments_thinning.gpkg"
responses = "treatment_responses.csv"
first_year = 2026
last_year = 2042

[scenarios.prescribed_burn]
description = "Burn two sagebrush stands in 2028 (invented for the example)"
treatments = "treatments_burn.gpkg"
responses = "treatment_responses.csv"
first_year = 2026
last_year = 2042
"""


def make_treatments(
    strata: gpd.GeoDataFrame, stratum: str, count: int, inset_m: float, treatment: str, year: int
) -> gpd.GeoDataFrame:
    """Treatment polygons: the ``count`` largest polygons of ``stratum``, inset by ``inset_m``."""
    stands = strata[strata["stratum"] == stratum]
    largest = stands.loc[stands.geometry.area.sort_values(ascending=False).index[:count]]
    shapes = largest.geometry.buffer(-inset_m).reset_index(drop=True)
    labels = {"treatment": [treatment] * len(shapes), "year": [year] * len(shapes)}
    return gpd.GeoDataFrame(labels, geometry=shapes, crs=CRS)


def write_example_landscape(folder: Path, seed: int = SEED) -> Path:
    """Write the invented example project into ``folder``.

    Parameters
    ----------
    folder : Path
        Output folder; created when missing. Existing example files are replaced.
    seed : int
        Seed of ``numpy.random.default_rng``; the default gives the committed files.

    Returns
    -------
    Path
        The project file ``folder / "project.toml"``.
    """
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    rng = np.random.default_rng(seed)
    units = make_units(rng)
    strata = make_strata(rng)
    units = add_current_animals(units, strata)
    make_forage_classes().to_csv(folder / "forage_classes.csv", index=False)
    make_plots(rng).to_csv(folder / "plots.csv", index=False)
    ANIMAL_CLASSES.to_csv(folder / "animal_classes.csv", index=False)
    make_counts(rng, units).to_csv(folder / "counts.csv", index=False)
    pd.DataFrame(RESPONSES, columns=list(RESPONSE_COLUMNS)).to_csv(
        folder / "treatment_responses.csv", index=False
    )
    permit = pd.DataFrame(
        {"unit_id": list(CATTLE_PERMIT_AUMS), "aums": CATTLE_PERMIT_AUMS.values()}
    )
    permit.to_csv(folder / "cattle_permit.csv", index=False)
    thinning = make_treatments(strata, "juniper_woodland", 3, 100.0, "thinning", 2027)
    burn = make_treatments(strata, "sagebrush_steppe", 2, 150.0, "prescribed_burn", 2028)
    layers = (
        (units, "units"),
        (strata, "strata"),
        (thinning, "treatments_thinning"),
        (burn, "treatments_burn"),
    )
    for frame, name in layers:
        path = folder / f"{name}.gpkg"
        path.unlink(missing_ok=True)
        frame.to_file(path, layer=name, driver="GPKG")
    write_example_rasters(folder)
    raster_project = PROJECT_TOML.replace(
        'name = "Tallowreed Basin winter range"',
        'name = "Tallowreed Basin winter range, snow and slope on a 50 m grid"',
    )
    (folder / "project_rasters.toml").write_text(
        raster_project + RASTER_PROJECT_TOML + SCENARIOS_TOML, encoding="utf-8"
    )
    project = folder / "project.toml"
    project.write_text(PROJECT_TOML + SCENARIOS_TOML, encoding="utf-8")
    return project


if __name__ == "__main__":
    if len(sys.argv) != 2:
        sys.exit("usage: python -m nutricap.example FOLDER")
    print(write_example_landscape(Path(sys.argv[1])))
