"""The project file: loading and validation.

A project file is TOML (data only; nothing in it is ever evaluated). Paths in
``[inputs]`` are relative to the file. Validation uses pydantic (the schema is in
:mod:`nutricap.inputs.project_schema`) and reports every problem at once, each with its key
and what was expected.
"""

from __future__ import annotations

import difflib
import tomllib
import types
import typing
from pathlib import Path

from pydantic import BaseModel, ValidationError

from nutricap.errors import FILE_MISSING, ProjectFileError, file_problem
from nutricap.inputs.project_schema import (
    AT_KEY,
    SOURCE_PATH_KEYS,
    OtherHerbivoreSection,
    ProjectConfig,
    ScenarioSection,
)
from nutricap.inputs.raster_config import raster_input_paths
from nutricap.inputs.table_cells import has_data_rows
from nutricap.inputs.table_source import TableSource
from nutricap.inputs.template import README, is_template_readme

__all__ = ["OtherHerbivoreSection", "Project", "ProjectConfig", "ScenarioSection", "load_project"]
"""The section models stay importable from here (they are defined in project_schema)."""


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
        return tomllib.loads(data.decode("utf-8-sig"))  # a byte-order mark, as some editors write
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
    if message.startswith(AT_KEY):  # a whole-file check naming its key
        key, message = message[1:].split(" " + AT_KEY, 1)
        location = key.split(".")
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
        if isinstance(value, list) and part.isdigit() and int(part) < len(value):
            value = value[int(part)]  # an array of tables ([[other_herbivores]]) by index
        elif isinstance(value, dict) and part in value:
            value = value[part]
        else:
            return None
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
