"""The example's project files (project.toml, project_rasters.toml): their sections, invented
for the example."""

from __future__ import annotations

from nutricap.example.tables import SEASON_DAYS

# The cattle permit (its AUMs in tables.CATTLE_PERMIT_AUMS), grazed before the deer arrive
# ("graze first, then winter"); preferences invented for the example.
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
