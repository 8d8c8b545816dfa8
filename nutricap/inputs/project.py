"""The project file: schema, validation and loading.

A project file is TOML (data only; nothing in it is ever evaluated). Paths in
``[inputs]`` are relative to the file. Validation uses pydantic and reports
every problem at once, each with its key and what was expected.
"""

from __future__ import annotations

import datetime as dt
import difflib
import tomllib
import types
import typing
from pathlib import Path
from typing import Annotated, Literal

from pydantic import BaseModel, Field, ValidationError, model_validator

from nutricap.errors import FILE_MISSING, ProjectFileError, file_problem
from nutricap.inputs.columns import FIRST_YEAR, LAST_YEAR, TableSource, has_data_rows
from nutricap.inputs.raster_config import (
    AvailabilitySection,
    InputPath,
    RasterSection,
    StrictSection,
    raster_input_paths,
)
from nutricap.inputs.template import README, is_template_readme

#: Longest season [days]: a year, leap day included. The same bound holds for
#: ``season_days`` and for the span of ``season_start`` .. ``season_end``.
MAX_SEASON_DAYS = 366

#: Seasons of the requirement table; ``fall`` is read as ``autumn``.
SeasonName = Literal["any", "winter", "spring", "summer", "autumn", "fall"]


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
                "the strata are given twice: as polygons ([inputs] strata) and as a raster "
                "([rasters.strata]); keep one"
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
            raise ValueError(f"other_herbivores: the name {repeated[0]!r} is used twice")
        return self

    @property
    def strata_as_raster(self) -> bool:
        """Whether the strata map is a categorical raster (``[rasters.strata]``)."""
        return self.rasters is not None and self.rasters.strata is not None


class Project:
    """A validated project: its configuration and its file's folder.

    Attributes
    ----------
    path : Path
        The project file, absolute.
    config : ProjectConfig
        The validated contents.
    """

    def __init__(self, path: Path, config: ProjectConfig) -> None:
        self.path = path
        self.config = config
        self._sources: dict[tuple[str, Path], TableSource] = {}

    def source(self, key: str, path: Path | None = None) -> TableSource:
        """Input ``key`` (``"plots"``, ``"units"``, ``"treatments"``...) with the user's column
        names (``[columns.KEY]``) and sheet (``[sheets] KEY``); ``path`` for the inputs of
        scenarios. The same object for the same file: it records what was read under which
        names (:meth:`column_names`)."""
        if path is None:
            path = self.input_paths()[SOURCE_PATH_KEYS.get(key, key)]
        cached = self._sources.get((key, path))
        if cached is None:
            cached = TableSource(
                path,
                key,
                columns=dict(getattr(self.config.columns, key)),
                sheet=getattr(self.config.sheets, key, None),
                project_file=self.path,
            )
            self._sources[(key, path)] = cached
        return cached

    def column_names(self) -> dict[str, dict]:
        """The inputs read under other column names than ours, by file: the input's key, the
        user's mapping and the names recognised (a shapefile's 10-character forms)."""
        found = {}
        for (key, path), source in sorted(self._sources.items(), key=lambda item: str(item[0])):
            if source.columns or source.recognised:
                found[str(path)] = {
                    "input": key,
                    "mapped": dict(source.columns),
                    "recognised": dict(source.recognised),
                }
        return found

    @property
    def folder(self) -> Path:
        return self.path.parent

    def input_path(self, name: str) -> Path | None:
        """Absolute path of input ``name`` (``"plots"``, ...), or None when not given."""
        relative = getattr(self.config.inputs, name)
        if relative is None:
            return None
        return (self.folder / relative).resolve()

    def input_paths(self) -> dict[str, Path]:
        """Every input file given, by key."""
        return {key: path.resolve() for key, path in self.written_input_paths().items()}

    def written_input_paths(self) -> dict[str, Path]:
        """Every input file given, by key, as written: in the project file's folder, symbolic
        links not followed."""
        inputs = self.config.inputs
        names = (
            "forage_classes",
            "plots",
            "animal_classes",
            "units",
            "strata",
            "counts",
            "nutritional_states",
        )
        found = {name: path for name in names if (path := getattr(inputs, name)) is not None}
        for name, scenario in self.config.scenarios.items():
            found[f"scenarios.{name}.treatments"] = scenario.treatments
            found[f"scenarios.{name}.responses"] = scenario.responses
        for index, herd in enumerate(self.config.other_herbivores):
            if herd.numbers_table is not None:
                found[f"other_herbivores.{index}.numbers_table"] = herd.numbers_table
        found.update(raster_input_paths(self.config.rasters, self.config.availability))
        return {key: self.folder / path for key, path in found.items()}

    def strata_file(self) -> Path:
        """The strata map: the polygons of ``[inputs] strata`` or the ``[rasters.strata]``
        raster."""
        if self.config.strata_as_raster:
            return (self.folder / self.config.rasters.strata.raster).resolve()
        return self.input_path("strata")

    def files(self) -> list[Path]:
        """The project file and every input file: what a run reads and its manifest lists."""
        return [self.path, *self.input_paths().values()]


def load_project(path: str | Path) -> Project:
    """Read and validate a project file; raise :class:`ProjectFileError` on any problem."""
    written = Path(path).absolute()
    problem = file_problem(written)
    if problem is not None or written.is_dir():
        raise ProjectFileError(
            f"project file {problem or 'is a folder'}", source=written, expected="a TOML file"
        )
    path = written.resolve()
    raw = _read_toml(path)
    try:
        config = ProjectConfig.model_validate(raw)
    except ValidationError as exc:
        raise ProjectFileError(_describe_problems(exc, raw), source=path) from None
    project = Project(path, config)
    _check_names_for_given_inputs(project)
    _check_inputs_exist(project)
    return project


def _check_names_for_given_inputs(project: Project) -> None:
    """``[columns.KEY]`` and ``[sheets] KEY`` name inputs the project reads (else a typing
    error, or a file left out, would pass unnoticed)."""
    given = project.config.given_inputs()
    for section in ("columns", "sheets"):
        for key, value in getattr(project.config, section):
            if value and key not in given:
                raise ProjectFileError(
                    f"[{section}] names the input {key!r}, which this project does not read",
                    source=project.path,
                    location=f"key '{section}.{key}'",
                    expected="names for inputs given in [inputs], [scenarios.*] or [rasters]: "
                    + ", ".join(sorted(given)),
                    found=repr(key),
                )


def _read_toml(path: Path) -> dict:
    data = path.read_bytes()
    try:
        return tomllib.loads(data.decode("utf-8"))
    except UnicodeDecodeError as exc:
        line = data[: exc.start].count(b"\n") + 1
        raise ProjectFileError(
            "project file is not UTF-8 text",
            source=path,
            location=f"line {line}",
            expected="a TOML file saved as UTF-8",
            found=f"byte {data[exc.start]:#04x}",
        ) from None
    except tomllib.TOMLDecodeError as exc:
        raise ProjectFileError(f"TOML syntax error: {exc}", source=path) from None
    except RecursionError:
        line = _deep_nesting_line(data.decode("utf-8"))
        raise ProjectFileError(
            "arrays or inline tables nested too deeply to read",
            source=path,
            location=f"line {line}" if line is not None else None,
            expected=f"at most {NESTING_SHOWN} levels (no key of a project file needs more "
            "than three)",
            found="deeper nesting",
        ) from None


NESTING_SHOWN = 50
"""Depth of nested arrays and inline tables at which the line is named when the file is too
deep to parse (no key of the schema nests more than three levels)."""


def _deep_nesting_line(text: str) -> int | None:
    """The first line where ``[``/``{`` nesting outside quoted strings exceeds
    :data:`NESTING_SHOWN` (a rough scan: for the message only)."""
    depth = 0
    for number, line in enumerate(text.splitlines(), start=1):
        quote = None
        for char in line:
            if quote is not None:
                quote = None if char == quote else quote
            elif char in "\"'":
                quote = char
            elif char == "#":
                break
            elif char in "[{":
                depth += 1
                if depth > NESTING_SHOWN:
                    return number
            elif char in "]}":
                depth -= 1
    return None


def _describe_problems(exc: ValidationError, raw: dict) -> str:
    problems = [_describe_one(error, raw) for error in exc.errors()]
    count = len(problems)
    head = "1 problem" if count == 1 else f"{count} problems"
    return f"{head}: " + "; ".join(problems)


def _describe_one(error: dict, raw: dict) -> str:
    location = [str(part) for part in error["loc"]]
    key = ".".join(location) or "(top level)"
    if error["type"] == "extra_forbidden":
        return f"unknown key {key!r}{_did_you_mean(location)}"
    if error["type"] == "missing":
        return f"missing key {key!r}"
    message = error["msg"].removeprefix("Value error, ")
    if error["type"].startswith("date"):
        message += " (a TOML date in ISO form without quotes, e.g. 2026-12-01)"
    found = _lookup(raw, location)
    found_words = f" (found {found!r})" if found is not None and not isinstance(found, dict) else ""
    return f"key {key!r}: {message}{found_words}"


def _did_you_mean(location: list[str]) -> str:
    model = _section_model(location[:-1])
    if model is None:
        return ""
    close = difflib.get_close_matches(location[-1], list(model.model_fields), n=1)
    return f"; did you mean {close[0]!r}?" if close else ""


def _section_model(location: list[str]) -> type[BaseModel] | None:
    """The schema of the section at ``location`` (``["scenarios", "burn"]`` → ScenarioSection)."""
    model: type[BaseModel] = ProjectConfig
    parts = iter(location)
    for part in parts:
        field = model.model_fields.get(part)
        if field is None:
            return None
        annotation = _without_none(field.annotation)
        if typing.get_origin(annotation) in (dict, list):
            next(parts, None)  # the user's name of the entry (a scenario) or its index
            annotation = typing.get_args(annotation)[-1]
        if not (isinstance(annotation, type) and issubclass(annotation, BaseModel)):
            return None
        model = annotation
    return model


def _without_none(annotation: object) -> object:
    """``X | None`` → ``X``; anything else unchanged."""
    if typing.get_origin(annotation) in (typing.Union, types.UnionType):
        kept = [arg for arg in typing.get_args(annotation) if arg is not type(None)]
        return kept[0] if len(kept) == 1 else annotation
    return annotation


def _lookup(raw: dict, location: list[str]) -> object:
    value: object = raw
    for part in location:
        if not isinstance(value, dict) or part not in value:
            return None
        value = value[part]
    return value


def _check_inputs_exist(project: Project) -> None:
    """Every input can be opened: it exists, is a file (or a folder, as some vector formats
    are) and not the project's own folder; links are followed, paths named as written.

    When an input is missing, every missing input and every table with a header and no data
    rows (a template from ``nutricap init`` not filled in yet) are listed in one message; the
    tables' contents are otherwise left to their readers."""
    missing = []
    for name, path in project.written_input_paths().items():
        key = _key(name)
        problem = file_problem(path)
        if problem is None and path.is_dir() and project.path.is_relative_to(path.resolve()):
            problem = "is a folder that holds the project file"
        if problem is not None:
            missing.append((key, path, problem))
    empty = _tables_without_rows(project) if missing else []
    if len(missing) + len(empty) > 1:
        _raise_unfilled(project, missing, empty)
    if missing:
        key, path, problem = missing[0]
        raise ProjectFileError(
            f"input file for key '{key}' {problem}",
            source=project.path,
            expected="a path relative to the project file"
            + ("" if problem == FILE_MISSING else ", to a regular file"),
            found=str(path),
        )


def _tables_without_rows(project: Project) -> list[tuple[str, Path]]:
    """The CSV inputs that are regular files with a header and no data rows."""
    return [
        (_key(name), path)
        for name, path in project.written_input_paths().items()
        if path.suffix.lower() == ".csv" and path.is_file() and not has_data_rows(path)
    ]


def _raise_unfilled(
    project: Project, missing: list[tuple[str, Path, str]], empty: list[tuple[str, Path]]
) -> None:
    parts = [f"'{key}' {_shown(path, project)} {problem}" for key, path, problem in missing]
    parts += [f"'{key}' {_shown(path, project)} has no data rows yet" for key, path in empty]
    readme = project.folder / README
    guide = f" ({README} beside it says what to fill in)" if is_template_readme(readme) else ""
    raise ProjectFileError(
        f"the project is not filled in yet{guide}: {len(parts)} inputs to provide: "
        + "; ".join(parts),
        source=project.path,
        expected="every file the project file names, each table with data rows",
        found=f"{len(missing)} file(s) missing, {len(empty)} table(s) without data rows",
    )


def _key(name: str) -> str:
    """The project key of input ``name`` (``plots`` → ``inputs.plots``)."""
    return name if "." in name else f"inputs.{name}"


def _shown(path: Path, project: Project) -> str:
    """``path`` relative to the project file's folder when inside it."""
    return (
        str(path.relative_to(project.folder)) if path.is_relative_to(project.folder) else str(path)
    )
