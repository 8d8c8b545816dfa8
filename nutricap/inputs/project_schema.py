"""The project file's schema: one pydantic model per section, unknown keys refused.

:class:`ProjectConfig` is the whole file; :mod:`nutricap.inputs.project` reads the TOML,
validates it with this schema and reports every problem at once. The ``[rasters]`` and
``[availability]`` sections are in :mod:`nutricap.inputs.raster_config`.
"""

from __future__ import annotations

import datetime as dt
import typing
from typing import Annotated, Literal

from pydantic import Field, model_validator

from nutricap.inputs.columns import FIRST_YEAR, LAST_YEAR
from nutricap.inputs.raster_config import (
    AvailabilitySection,
    InputPath,
    RasterSection,
    StrictSection,
)

#: Longest season [days]: a year, leap day included. The same bound holds for
#: ``season_days`` and for the span of ``season_start`` .. ``season_end``.
MAX_SEASON_DAYS = 366

#: Seasons of the requirement table; ``fall`` is read as ``autumn``.
SeasonName = Literal["any", "winter", "spring", "summer", "autumn", "fall"]


AT_KEY = "\x1f"
"""Marks, in a whole-file check's message, the key the problem lies at: ``AT_KEY + key +
" " + AT_KEY + message`` (a model validator cannot give pydantic a location of its own)."""


class ProjectSection(StrictSection):
    """``[project]``: what is being estimated and for how long."""

    name: str = Field(min_length=1)
    species: str = Field(min_length=1)
    season: SeasonName = "any"
    season_days: float | None = Field(default=None, gt=0, le=MAX_SEASON_DAYS)
    season_start: dt.date | None = None
    season_end: dt.date | None = None

    @model_validator(mode="after")
    def _one_season_length(self) -> ProjectSection:
        has_dates = self.season_start is not None or self.season_end is not None
        if self.season_days is not None and has_dates:
            raise ValueError("give season_days or season_start/season_end, not both")
        if self.season_days is None and not has_dates:
            raise ValueError("give season_days, or season_start and season_end")
        if has_dates and (self.season_start is None or self.season_end is None):
            raise ValueError("season_start and season_end go together")
        if has_dates and self.season_end < self.season_start:
            raise ValueError("season_end is before season_start")
        if has_dates and self.days > MAX_SEASON_DAYS:
            raise ValueError(
                f"season_start to season_end spans {self.days:g} days; a season is at most "
                f"{MAX_SEASON_DAYS} days (the limit of season_days)"
            )
        return self

    @property
    def days(self) -> float:
        """Season length [days]; with dates, both ends are counted."""
        if self.season_days is not None:
            return float(self.season_days)
        return float((self.season_end - self.season_start).days + 1)


class InputsSection(StrictSection):
    """``[inputs]``: paths to the input files, relative to the project file."""

    forage_classes: InputPath
    plots: InputPath
    animal_classes: InputPath
    units: InputPath
    strata: InputPath | None  # polygons; may be left out when [rasters.strata] gives a raster
    units_layer: str | None = None
    strata_layer: str | None = None
    counts: InputPath | None = None
    #: The user's own requirement table (same columns as nutricap/data/nutritional_states.csv).
    nutritional_states: InputPath | None = None


class TargetSection(StrictSection):
    """``[target]``: the nutritional state the NCC is computed for."""

    animal_class: str | None = None
    state: str | None = None
    protein: bool = False
    diet_de_min_kcal_per_g: float | None = Field(default=None, gt=0, le=5)
    diet_dp_min_pct: float | None = Field(default=None, ge=0, le=40)

    @model_validator(mode="after")
    def _threshold_defined(self) -> TargetSection:
        if self.diet_de_min_kcal_per_g is None and (
            self.animal_class is None or self.state is None
        ):
            raise ValueError("give animal_class and state, or an explicit diet_de_min_kcal_per_g")
        return self


class ForageUseSection(StrictSection):
    """``[forage_use]``: whether NCC respects each class's allowable use."""

    cap_at_allowable_use: bool = True


class SupplySection(StrictSection):
    """``[supply]``: how forage supply is built from plots and maps."""

    strata_without_forage: list[str] = Field(default_factory=list)


class PoolingSection(StrictSection):
    """``[pooling]``: how forage is pooled before the diet constraint is applied."""

    mode: Literal["unit", "patch"] = "unit"


class UncertaintySection(StrictSection):
    """``[uncertainty]``: stratified bootstrap over plots and one-at-a-time sensitivity."""

    bootstrap_replicates: int = Field(default=0, ge=0, le=100_000)
    interval_level: float = Field(default=0.9, gt=0, lt=1)
    seed: int = Field(default=20261201, ge=0)
    sensitivity_change: float = Field(default=0.1, ge=0, lt=1)


class ScenarioSection(StrictSection):
    """``[scenarios.NAME]``: a set of treatments and the years to compare."""

    treatments: InputPath
    treatments_layer: str | None = None
    responses: InputPath
    first_year: int = Field(ge=FIRST_YEAR, le=LAST_YEAR)
    last_year: int = Field(ge=FIRST_YEAR, le=LAST_YEAR)
    description: str = ""

    @model_validator(mode="after")
    def _years_in_order(self) -> ScenarioSection:
        if self.last_year < self.first_year:
            raise ValueError("last_year is before first_year")
        if self.last_year - self.first_year > 200:
            raise ValueError("a scenario spans at most 200 years")
        return self


ColumnName = Annotated[str, Field(min_length=1)]
ColumnMap = dict[ColumnName, ColumnName]


class ColumnsSection(StrictSection):
    """``[columns.KEY]``: our column name → the file's own, for each input (layers included).

    ``treatments`` and ``treatment_responses`` apply to every scenario's files.
    """

    forage_classes: ColumnMap = Field(default_factory=dict)
    plots: ColumnMap = Field(default_factory=dict)
    animal_classes: ColumnMap = Field(default_factory=dict)
    counts: ColumnMap = Field(default_factory=dict)
    nutritional_states: ColumnMap = Field(default_factory=dict)
    units: ColumnMap = Field(default_factory=dict)
    strata: ColumnMap = Field(default_factory=dict)
    treatments: ColumnMap = Field(default_factory=dict)
    treatment_responses: ColumnMap = Field(default_factory=dict)
    strata_codes: ColumnMap = Field(default_factory=dict)
    calibration_plots: ColumnMap = Field(default_factory=dict)


SheetName = Annotated[str, Field(min_length=1, max_length=31)]  # Excel's longest sheet name


class SheetsSection(StrictSection):
    """``[sheets]``: the sheet to read of a table given as an ``.xlsx`` workbook (default:
    the first)."""

    forage_classes: SheetName | None = None
    plots: SheetName | None = None
    animal_classes: SheetName | None = None
    counts: SheetName | None = None
    nutritional_states: SheetName | None = None
    treatment_responses: SheetName | None = None
    strata_codes: SheetName | None = None
    calibration_plots: SheetName | None = None


#: Inputs whose project key is not ``inputs.KEY``: the key of their path.
SOURCE_PATH_KEYS = {
    "strata_codes": "rasters.strata.codes",
    "calibration_plots": "rasters.calibrated.plots",
}


class OtherHerbivoreSection(StrictSection):
    """``[[other_herbivores]]``: one herd of another species sharing the range (e.g. a grazing
    permit), whose forage use is removed before the target species' capacity is solved."""

    name: str = Field(min_length=1)
    #: Numbers per unit: a units-layer column of animals or of AUMs, or a CSV table
    #: (``unit_id`` and ``animals`` or ``aums``); exactly one.
    animals_column: str | None = Field(default=None, min_length=1)
    aums_column: str | None = Field(default=None, min_length=1)
    numbers_table: InputPath | None = None
    body_mass_kg: float | None = Field(default=None, gt=0, le=2000)
    intake_kg_per_day: float | None = Field(default=None, gt=0, le=60)
    days: float | None = Field(default=None, gt=0, le=MAX_SEASON_DAYS)
    timing: Literal["same_season", "before"]
    #: Weights by forage class or growth form (a class's own weight wins); classes not
    #: named are not eaten. Empty: every class weighs 1.
    preference: dict[str, float] = Field(default_factory=dict)

    @model_validator(mode="after")
    def _numbers_and_intake(self) -> OtherHerbivoreSection:
        given = [self.animals_column, self.aums_column, self.numbers_table]
        if sum(value is not None for value in given) != 1:
            raise ValueError("give exactly one of animals_column, aums_column, numbers_table")
        for name, weight in self.preference.items():
            if not (0 <= weight <= 1000) or weight != weight:
                raise ValueError(
                    f"preference {name!r} must lie between 0 and 1000 (found {weight:g})"
                )
        if self.preference and not any(w > 0 for w in self.preference.values()):
            raise ValueError("at least one preference weight must be above 0")
        return self


class DietGroupSection(StrictSection):
    """``[diet.groups.NAME]``: a group of forage classes (listed, or one growth form) and the
    share of the diet it must make up."""

    classes: list[str] | None = Field(default=None, min_length=1)
    growth_form: str | None = Field(default=None, min_length=1)
    min_share: float = Field(default=0.0, ge=0, le=1)
    max_share: float = Field(default=1.0, ge=0, le=1)

    @model_validator(mode="after")
    def _one_membership(self) -> DietGroupSection:
        if (self.classes is None) == (self.growth_form is None):
            raise ValueError("give classes or growth_form (one of them)")
        if self.min_share > self.max_share:
            raise ValueError(f"min_share {self.min_share:g} is above max_share {self.max_share:g}")
        return self


class DietSection(StrictSection):
    """``[diet]``: diet-composition limits of the target species."""

    groups: dict[str, DietGroupSection] = Field(default_factory=dict)


class ProjectConfig(StrictSection):
    """The whole project file."""

    project: ProjectSection
    inputs: InputsSection
    target: TargetSection
    supply: SupplySection = SupplySection()
    forage_use: ForageUseSection = ForageUseSection()
    pooling: PoolingSection = PoolingSection()
    uncertainty: UncertaintySection = UncertaintySection()
    scenarios: dict[str, ScenarioSection] = Field(default_factory=dict)
    rasters: RasterSection | None = None
    availability: AvailabilitySection | None = None
    columns: ColumnsSection = ColumnsSection()
    sheets: SheetsSection = SheetsSection()
    other_herbivores: list[OtherHerbivoreSection] = Field(default_factory=list)
    diet: DietSection = DietSection()

    @model_validator(mode="before")
    @classmethod
    def _strata_raster_stands_for_polygons(cls, data: typing.Any) -> typing.Any:
        """With ``[rasters.strata]`` the key ``inputs.strata`` may be left out (it is None);
        without it, a missing ``inputs.strata`` is reported like any missing key."""
        if not isinstance(data, dict):
            return data
        rasters, inputs = data.get("rasters"), data.get("inputs")
        if isinstance(rasters, dict) and "strata" in rasters and isinstance(inputs, dict):
            if "strata" not in inputs:
                return {**data, "inputs": {**inputs, "strata": None}}
        return data

    @model_validator(mode="after")
    def _one_strata_map(self) -> ProjectConfig:
        if self.strata_as_raster and self.inputs.strata is not None:
            raise ValueError(
                f"{AT_KEY}inputs.strata {AT_KEY}the strata are given twice: as polygons ([inputs] "
                "strata) and as a raster ([rasters.strata]); keep one"
            )
        return self

    def given_inputs(self) -> set[str]:
        """The keys of ``[columns]`` and ``[sheets]`` naming an input this project reads."""
        inputs = self.inputs
        given = {key for key in InputsSection.model_fields if getattr(inputs, key) is not None}
        if self.scenarios:
            given |= {"treatments", "treatment_responses"}
        if self.strata_as_raster:
            given.add("strata_codes")
        if self.rasters is not None and self.rasters.calibrated is not None:
            given.add("calibration_plots")
        return given

    @model_validator(mode="after")
    def _herd_names_unique(self) -> ProjectConfig:
        names = [herd.name for herd in self.other_herbivores]
        repeated = sorted({name for name in names if names.count(name) > 1})
        if repeated:
            second = [i for i, name in enumerate(names) if name == repeated[0]][1]
            raise ValueError(
                f"{AT_KEY}other_herbivores.{second}.name {AT_KEY}the name {repeated[0]!r} is "
                "used by an earlier herd as well (expected a name of its own)"
            )
        return self

    @property
    def strata_as_raster(self) -> bool:
        """Whether the strata map is a categorical raster (``[rasters.strata]``)."""
        return self.rasters is not None and self.rasters.strata is not None
