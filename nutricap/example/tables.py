"""The invented tables of the example: forage classes, clip plots, animal classes, counts,
treatment responses and the cattle permit, with the herd sizes drawn from the strata.

Everything here is *invented for the example* (see :mod:`nutricap.example`).
"""

from __future__ import annotations

import geopandas as gpd
import numpy as np
import pandas as pd

SEASON_DAYS = 120
FIRST_COUNT_YEAR, N_COUNT_YEARS = 2013, 12

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
    ("juniper", "browse", 2.10, np.nan, 6.0, 0.30, False, 300.0, 0.03),
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
