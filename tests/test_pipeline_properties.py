"""Property tests of the whole estimate pipeline on small generated landscapes.

Each example writes a tiny project (GeoPackages and CSVs in a temporary folder): strata are
horizontal bands across the whole landscape, units a grid of rectangles whose north/south cut
falls inside a band, forage values and plots drawn by hypothesis (all invented for the
example). The properties are invariances the method implies, not values:

- results do not depend on the order of rows in any table or of features in any layer;
- splitting a unit in two: area, forage, ECC and allowable-use capacity add up; NCC adds up
  when pooling allows it (patch pooling, or halves with the same mix of strata under unit
  pooling) and otherwise the whole carries at least the sum of its halves (pooling can only
  help: the halves' diets together are a feasible diet for the whole, Hobbs & Swift 1985 LP);
- unit conversions round-trip, alone and through the pipeline (grams per frame vs kg/ha,
  digestible energy given vs from digestibility, season dates vs days, AUM vs animal-days).
"""

from __future__ import annotations

import tempfile
from dataclasses import dataclass
from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd
from hypothesis import given, settings
from hypothesis import strategies as st
from shapely.geometry import box

from nutricap.inputs.project import load_project
from nutricap.science import energetics
from nutricap.science.supply import biomass_kg_per_ha
from nutricap.workflow import estimate

UTM = "EPSG:32612"
X0, Y0 = 500_000.0, 4_500_000.0
WIDTH_M, HEIGHT_M = 3_000.0, 2_000.0
STEP_M = 100.0
SEASON_DAYS = 100
PIPELINE = settings(max_examples=15, deadline=None)
NUMERIC = [
    "area_ha", "available_forage_kg", "ncc_animal_days", "ncc_animals", "ecc_animal_days",
    "ecc_animals", "allowable_use_animals", "ncc_per_km2", "mapped_ha", "accessible_ha",
    "ecc_per_km2", "ncc_aum", "allowable_use_aum",
]  # fmt: skip
ADDITIVE = ["area_ha", "available_forage_kg", "ecc_animal_days", "allowable_use_animals"]
ANIMALS = pd.DataFrame(
    {
        "animal_class": ["doe", "fawn"],
        "body_mass_kg": [65.0, 35.0],
        "share": [0.7, 0.3],
        "state": ["maintenance", "growth"],
    }
)  # invented for the example


@dataclass(frozen=True)
class Landscape:
    """A generated landscape (every value invented for the example)."""

    band_cuts_m: tuple[float, ...]  # y of the strata boundaries above Y0
    column_edges_m: tuple[float, ...]  # x of the unit boundaries east of X0
    row_cut_m: float  # y of the north/south unit boundary (inside a band)
    accessible: tuple[float, ...]  # accessible fraction per stratum
    forage: pd.DataFrame
    plots: pd.DataFrame
    de_min_kcal_per_g: float
    dp_min_pct: float | None
    mode: str

    @property
    def strata(self) -> gpd.GeoDataFrame:
        edges = (0.0, *self.band_cuts_m, HEIGHT_M)
        shapes = [box(X0, Y0 + low, X0 + WIDTH_M, Y0 + high) for low, high in zip(edges, edges[1:])]
        names = [f"s{i}" for i in range(len(shapes))]
        frame = {"stratum": names, "accessible_fraction": list(self.accessible)}
        return gpd.GeoDataFrame(frame, geometry=shapes, crs=UTM)

    @property
    def units(self) -> gpd.GeoDataFrame:
        xs = (0.0, *self.column_edges_m, WIDTH_M)
        shapes, ids = [], []
        for column, (west, east) in enumerate(zip(xs, xs[1:])):
            for row, (south, north) in enumerate([(0.0, self.row_cut_m),
                                                  (self.row_cut_m, HEIGHT_M)]):  # fmt: skip
                shapes.append(box(X0 + west, Y0 + south, X0 + east, Y0 + north))
                ids.append(f"u{column}{'sn'[row]}")
        return gpd.GeoDataFrame({"unit_id": ids}, geometry=shapes, crs=UTM)


def _distinct_steps(draw, count: int, steps: int) -> tuple[float, ...]:
    picked = draw(st.lists(st.integers(1, steps - 1), min_size=count, max_size=count, unique=True))
    return tuple(sorted(STEP_M * value for value in picked))


@st.composite
def landscapes(draw) -> Landscape:
    n_strata = draw(st.integers(2, 3))
    band_cuts = _distinct_steps(draw, n_strata - 1, int(HEIGHT_M / STEP_M))
    column_edges = _distinct_steps(draw, draw(st.integers(0, 2)), int(WIDTH_M / STEP_M))
    row_cut = draw(st.integers(1, int(HEIGHT_M / STEP_M) - 1)) * STEP_M - STEP_M / 2
    accessible = tuple(draw(st.sampled_from([1.0, 0.8, 0.45])) for _ in range(n_strata))
    classes = [f"c{i}" for i in range(draw(st.integers(2, 4)))]
    two_decimals = st.integers(150, 330).map(lambda v: v / 100)
    forage = pd.DataFrame(
        {
            "forage_class": classes,
            "de_kcal_per_g": [draw(two_decimals) for _ in classes],
            "cp_pct": [draw(st.integers(20, 160)) / 10 for _ in classes],
            "allowable_use": [draw(st.integers(20, 80)) / 100 for _ in classes],
        }
    )
    rows = []
    for stratum in range(n_strata):
        for plot in range(draw(st.integers(2, 3))):
            for number, name in enumerate(classes):
                mass = draw(st.integers(1 if number == 0 else 0, 600))
                if mass:
                    rows.append((f"p{stratum}{plot}", f"s{stratum}", name, float(mass)))
    plots = pd.DataFrame(rows, columns=["plot_id", "stratum", "forage_class", "biomass_kg_per_ha"])
    protein = draw(st.booleans())
    return Landscape(
        band_cuts_m=band_cuts,
        column_edges_m=column_edges,
        row_cut_m=row_cut,
        accessible=accessible,
        forage=forage,
        plots=plots,
        de_min_kcal_per_g=draw(st.integers(180, 260)) / 100,
        dp_min_pct=draw(st.integers(20, 60)) / 10 if protein else None,
        mode=draw(st.sampled_from(["unit", "patch"])),
    )


def _project_text(land: Landscape, season: str) -> str:
    dp = f"diet_dp_min_pct = {land.dp_min_pct}\n" if land.dp_min_pct is not None else ""
    return (
        '[project]\nname = "generated"\nspecies = "deer"\n'
        f"{season}\n"
        '[inputs]\nforage_classes = "forage.csv"\nplots = "plots.csv"\n'
        'animal_classes = "animals.csv"\nunits = "units.gpkg"\nstrata = "strata.gpkg"\n'
        f"[target]\ndiet_de_min_kcal_per_g = {land.de_min_kcal_per_g}\n{dp}"
        f'[pooling]\nmode = "{land.mode}"\n'
        "[uncertainty]\nbootstrap_replicates = 0\nsensitivity_change = 0\n"
    )


def run(
    land: Landscape,
    *,
    units: gpd.GeoDataFrame | None = None,
    strata: gpd.GeoDataFrame | None = None,
    plots: pd.DataFrame | None = None,
    forage: pd.DataFrame | None = None,
    animals: pd.DataFrame | None = None,
    season: str = f"season_days = {SEASON_DAYS}",
) -> pd.DataFrame:
    """Write the project (with any table or layer replaced) and estimate it; table by unit_id."""
    with tempfile.TemporaryDirectory() as name:
        folder = Path(name)
        (units if units is not None else land.units).to_file(folder / "units.gpkg", layer="units")
        (strata if strata is not None else land.strata).to_file(
            folder / "strata.gpkg", layer="strata"
        )
        (plots if plots is not None else land.plots).to_csv(folder / "plots.csv", index=False)
        (forage if forage is not None else land.forage).to_csv(folder / "forage.csv", index=False)
        (animals if animals is not None else ANIMALS).to_csv(folder / "animals.csv", index=False)
        (folder / "project.toml").write_text(_project_text(land, season), encoding="utf-8")
        table = estimate(load_project(folder / "project.toml")).by_unit
    return table.sort_values("unit_id", kind="stable").reset_index(drop=True)


def _shuffled(frame, permutation):
    return frame.iloc[list(permutation)].reset_index(drop=True)


def _permutation(data, size: int) -> list[int]:
    return data.draw(st.permutations(range(size)))


# --- order does not matter -------------------------------------------------------------------


@PIPELINE
@given(land=landscapes(), data=st.data())
def test_results_do_not_depend_on_row_or_feature_order(land, data):
    before = run(land)
    units, strata = land.units, land.strata
    after = run(
        land,
        units=_shuffled(units, _permutation(data, len(units))),
        strata=_shuffled(strata, _permutation(data, len(strata))),
        plots=_shuffled(land.plots, _permutation(data, len(land.plots))),
        forage=_shuffled(land.forage, _permutation(data, len(land.forage))),
        animals=_shuffled(ANIMALS, _permutation(data, len(ANIMALS))),
    )
    pd.testing.assert_frame_equal(before[NUMERIC], after[NUMERIC], rtol=1e-9)
    assert before["limiting_factor"].tolist() == after["limiting_factor"].tolist()
    # Unit conversions inside the table round-trip: animals × days, density × km² (1 km² =
    # 100 ha, SI), AUM × 30 / AUE (NRCS animal-unit month of 30 animal-unit days).
    np.testing.assert_allclose(before["ncc_animals"] * SEASON_DAYS, before["ncc_animal_days"])
    np.testing.assert_allclose(before["ncc_per_km2"] * before["area_ha"] / 100,
                               before["ncc_animals"])  # fmt: skip
    assert (before["ncc_animals"] <= before["ecc_animals"] * (1 + 1e-9) + 1e-9).all()


# --- splitting a unit ------------------------------------------------------------------------


def _split(units: gpd.GeoDataFrame, index: int, direction: str) -> gpd.GeoDataFrame:
    """Units with unit ``index`` cut in two, ``<id>_a``/``<id>_b``: in halves along x, or
    at a third of its height along y."""
    unit = units.iloc[index]
    west, south, east, north = unit.geometry.bounds
    if direction == "vertical":
        middle = (west + east) / 2
        halves = [box(west, south, middle, north), box(middle, south, east, north)]
    else:
        middle = south + (north - south) / 3
        halves = [box(west, south, east, middle), box(west, middle, east, north)]
    rest = units.drop(index=units.index[index])
    parts = gpd.GeoDataFrame(
        {"unit_id": [f"{unit.unit_id}_a", f"{unit.unit_id}_b"]}, geometry=halves, crs=units.crs
    )
    return pd.concat([rest, parts], ignore_index=True)


@PIPELINE
@given(land=landscapes(), data=st.data())
def test_splitting_a_unit_adds_up(land, data):
    units = land.units
    index = data.draw(st.integers(0, len(units) - 1))
    direction = data.draw(st.sampled_from(["vertical", "horizontal"]))
    whole = run(land).set_index("unit_id")
    split = run(land, units=_split(units, index, direction)).set_index("unit_id")
    name = units["unit_id"].iloc[index]
    halves = split.loc[[f"{name}_a", f"{name}_b"]]
    others = whole.index.drop(name)
    pd.testing.assert_frame_equal(whole.loc[others, NUMERIC], split.loc[others, NUMERIC],
                                  rtol=1e-9)  # fmt: skip
    for column in ADDITIVE:
        np.testing.assert_allclose(halves[column].sum(), whole.at[name, column], rtol=1e-9)
    ncc_halves, ncc_whole = halves["ncc_animal_days"].sum(), whole.at[name, "ncc_animal_days"]
    # Strata are horizontal bands, so vertical halves hold the same mix of strata as the whole.
    if land.mode == "patch" or direction == "vertical":
        np.testing.assert_allclose(ncc_halves, ncc_whole, rtol=1e-7, atol=1e-6)
    else:
        assert ncc_halves <= ncc_whole * (1 + 1e-9) + 1e-6


# --- unit conversions round-trip -------------------------------------------------------------


@PIPELINE
@given(land=landscapes(), frame_area_m2=st.sampled_from([0.1, 0.25, 0.5, 1.0, 2.0]))
def test_grams_per_frame_and_kg_per_ha_give_the_same_result(land, frame_area_m2):
    # dry_mass_g = B × A / 10 (1 g/m² = 10 kg/ha; SI definitions).
    framed = land.plots.assign(
        dry_mass_g=land.plots["biomass_kg_per_ha"] * frame_area_m2 / 10, frame_area_m2=frame_area_m2
    ).drop(columns=["biomass_kg_per_ha"])
    pd.testing.assert_frame_equal(run(land)[NUMERIC], run(land, plots=framed)[NUMERIC],
                                  rtol=1e-12)  # fmt: skip


@PIPELINE
@given(land=landscapes(), gross=st.integers(400, 480).map(lambda v: v / 100))
def test_energy_given_or_from_digestibility_gives_the_same_result(land, gross):
    # DE = DMD / 100 × GE (Robbins 1993), so DMD = 100 × DE / GE gives the same DE back.
    via_dmd = land.forage.assign(
        dmd_pct=100 * land.forage["de_kcal_per_g"] / gross, gross_energy_kcal_per_g=gross,
        de_kcal_per_g=np.nan,
    )  # fmt: skip
    pd.testing.assert_frame_equal(run(land)[NUMERIC], run(land, forage=via_dmd)[NUMERIC],
                                  rtol=1e-9)  # fmt: skip


@settings(max_examples=5, deadline=None)
@given(land=landscapes(), start_day=st.integers(0, 300))
def test_season_dates_and_season_days_agree(land, start_day):
    start = pd.Timestamp("2026-09-01") + pd.Timedelta(days=start_day)
    end = start + pd.Timedelta(days=SEASON_DAYS - 1)  # both ends counted
    dates = f"season_start = {start.date()}\nseason_end = {end.date()}"
    pd.testing.assert_frame_equal(run(land)[NUMERIC], run(land, season=dates)[NUMERIC])


finite = st.floats(min_value=0.0, max_value=1e6, allow_nan=False)


@given(mass_g=finite, area_m2=st.floats(min_value=1e-3, max_value=1e4))
def test_grams_per_frame_round_trip(mass_g, area_m2):
    # 1 g/m² = 10 kg/ha (SI definitions): back to grams with B × A / 10.
    back = biomass_kg_per_ha(mass_g, area_m2) * area_m2 / 10
    np.testing.assert_allclose(back, mass_g, rtol=1e-12, atol=1e-9)


@given(de=finite)
def test_digestible_and_metabolizable_energy_round_trip(de):
    back = energetics.digestible_energy_from_metabolizable(
        energetics.metabolizable_energy_from_digestible(de)
    )
    np.testing.assert_allclose(back, de, rtol=1e-12, atol=1e-9)


@given(forage=finite)
def test_animal_unit_months_round_trip(forage):
    # AUM = forage / (26 lb x 30 days) (NRCS animal-unit month as a quantity of forage).
    back = energetics.animal_unit_months(forage) * 26 * 30 * energetics.KG_PER_LB
    np.testing.assert_allclose(back, forage, rtol=1e-12, atol=1e-9)
