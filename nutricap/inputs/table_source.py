"""A table's file as the project names it, and the places in it that messages name.

:class:`TableSource` holds the file with the project's ``[columns.KEY]`` mapping (our column
name → the file's own) and ``[sheets]`` entry; :func:`apply_column_names` checks the mapping
against the file's header. Rows in messages are spreadsheet rows (the header is row 1, the
first data row is row 2: :func:`spreadsheet_row`); :func:`row_error` builds the
:class:`~nutricap.errors.TableError` of one data row, :func:`first_index` finds it.

Below :mod:`nutricap.inputs.table_cells` (a table's file as text cells),
:mod:`nutricap.inputs.spreadsheet` (the ``.xlsx`` reader) and :mod:`nutricap.inputs.columns`
(the declared columns), which all use it.
"""

from __future__ import annotations

import difflib
import functools
import zipfile
from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from nutricap.errors import ProjectFileError, TableError

SPREADSHEET_SUFFIXES = (".xlsx", ".xlsm")


@dataclass(frozen=True)
class TableSource:
    """An input table or layer as the project names it.

    Attributes
    ----------
    path : Path
        The file.
    key : str
        The project's name of the input (``"plots"``, ``"units"``): the ``KEY`` of
        ``[columns.KEY]`` and ``[sheets] KEY``; empty for a file read on its own.
    columns : Mapping of str to str
        The user's ``[columns.KEY]`` table: our column name → the file's own.
    sheet : str, optional
        The sheet of a spreadsheet to read (``[sheets] KEY``); the first sheet when None.
    project_file : Path, optional
        The project file, named in messages about the mapping.
    recognised : dict of str to str
        Our column name → the file's, for names recognised at read time (a shapefile's
        10-character forms). Filled by the reader; not part of equality.

    Notes
    -----
    Passed as ``source`` of an :class:`~nutricap.errors.InputError`, it names the file and
    rewrites the location so that a mapped column reads ``'ELK_NOW' (mapped to
    current_animals)`` and a spreadsheet's rows are preceded by the sheet's name.
    """

    path: Path
    key: str = ""
    columns: Mapping[str, str] = field(default_factory=dict)
    sheet: str | None = None
    project_file: Path | None = None
    recognised: dict[str, str] = field(default_factory=dict, compare=False, repr=False)

    def __str__(self) -> str:
        return str(self.path)

    def __fspath__(self) -> str:
        return str(self.path)

    @property
    def name(self) -> str:
        """The file's name (as ``Path.name``)."""
        return self.path.name

    @property
    def is_spreadsheet(self) -> bool:
        return self.path.suffix.lower() in SPREADSHEET_SUFFIXES

    def mapped(self) -> dict[str, str]:
        """Every renamed column, ours → the file's: the user's mapping and the recognised."""
        return {**self.columns, **self.recognised}

    @functools.cached_property
    def sheet_name(self) -> str | None:
        """The sheet read: the one named in the project file, or the workbook's first."""
        if self.sheet is not None or not self.is_spreadsheet:
            return self.sheet
        try:
            return sheet_names(self.path)[0]
        except (OSError, ValueError, KeyError, IndexError, zipfile.BadZipFile, ImportError):
            return None

    def relabel(self, location: str | None) -> str | None:
        """``location`` with mapped columns under the file's names and the sheet first."""
        if location is not None:
            for ours, theirs in self.mapped().items():
                location = location.replace(repr(ours), f"{theirs!r} (mapped to {ours})")
        if self.is_spreadsheet and self.sheet_name is not None:
            sheet = f"sheet {self.sheet_name!r}"
            location = f"{sheet}, {location}" if location else sheet
        return location

    def key_of(self, table: str) -> str:
        """The project-file key of one of this input's sections (``columns.units``)."""
        return f"{table}.{self.key}" if self.key else table


Source = Path | TableSource
"""A table's file: a bare path, or a :class:`TableSource` with the user's names."""


def as_source(path: Path | TableSource) -> TableSource:
    """``path`` as a :class:`TableSource` (a bare path: no mapping, first sheet)."""
    return path if isinstance(path, TableSource) else TableSource(Path(path))


def apply_column_names(
    names: list[str], source: TableSource, declared: list[str], what: str
) -> dict[str, str]:
    """The renaming (file's name → ours) that gives a table its declared column names.

    The user's ``[columns.KEY]`` mapping is checked against ``declared`` (our names) and
    ``names`` (the file's); a problem is one :class:`~nutricap.errors.ProjectFileError`
    naming the project file and the key.
    """
    taken: dict[str, str] = {}
    for ours, theirs in source.columns.items():
        if ours not in declared:
            _mapping_error(
                source, ours, f"the {what} has no column {ours!r} to map", ours, declared,
                expected="one of the columns nutricap reads from it: " + ", ".join(declared),
            )  # fmt: skip
        if theirs not in names:
            _mapping_error(
                source, ours, f"{source.path} has no column {theirs!r}", theirs, names,
                expected="a column of the file: " + ", ".join(map(repr, names)),
            )  # fmt: skip
        if theirs in taken:
            raise ProjectFileError(
                f"column {theirs!r} is mapped twice, to {taken[theirs]!r} and {ours!r}",
                source=source.project_file,
                location=f"key '{source.key_of('columns')}.{ours}'",
                expected="each of the file's columns mapped once",
                found=f"{theirs!r} again",
            )
        if ours in names and ours != theirs:
            raise ProjectFileError(
                f"{source.path} has a column {ours!r} of its own besides {theirs!r} mapped to it",
                source=source.project_file,
                location=f"key '{source.key_of('columns')}.{ours}'",
                expected=f"one column to read as {ours!r}: rename or drop the other",
                found=f"columns {ours!r} and {theirs!r}",
            )
        taken[theirs] = ours
    return taken


def _mapping_error(
    source: TableSource, ours: str, message: str, name: str, known: list[str], *, expected: str
) -> None:
    """Raise the error of mapping ``ours``: ``name`` is not among ``known`` (did you mean)."""
    raise ProjectFileError(
        message + did_you_mean(name, known),
        source=source.project_file,
        location=f"key '{source.key_of('columns')}.{ours}'",
        expected=expected,
        found=repr(name),
    )


def spreadsheet_row(index: int) -> int:
    """Row number a user sees in a spreadsheet for data row ``index`` (0-based)."""
    return int(index) + 2


def closest_name(name: str, candidates: list[str], cutoff: float = 0.6) -> str | None:
    """The candidate closest to ``name`` ignoring case (difflib ratio), or None below ``cutoff``.

    Examples
    --------
    >>> closest_name("UnitID", ["unit_id", "stratum"])
    'unit_id'
    """
    lowered = {candidate.lower(): candidate for candidate in candidates}
    close = difflib.get_close_matches(name.lower(), list(lowered), n=1, cutoff=cutoff)
    return lowered[close[0]] if close else None


def did_you_mean(name: str, known: list[str]) -> str:
    """``"; did you mean 'X'?"`` with the name of ``known`` closest to ``name``, or ``""``."""
    close = closest_name(name, known)
    return f"; did you mean {close!r}?" if close else ""


def first_index(flags: object) -> int | None:
    """Position (0-based) of the first true value of ``flags``, None when none is true.

    ``flags`` is a boolean array or Series over a table's data rows.
    """
    positions = np.flatnonzero(np.asarray(flags))
    return int(positions[0]) if positions.size else None


def row_error(
    message: str,
    source: Source,
    index: int,
    column: str | tuple[str, ...] | None = None,
    *,
    expected: str,
    found: str,
) -> TableError:
    """The :class:`~nutricap.errors.TableError` of data row ``index`` (0-based).

    The location is the spreadsheet row and, when given, the column (``column 'year'``) or
    the columns that together are wrong (``columns 'dry_mass_g'/'frame_area_m2'``).
    """
    location = f"row {spreadsheet_row(index)}"
    if isinstance(column, tuple):
        location += ", columns " + "/".join(map(repr, column))
    elif column is not None:
        location += f", column {column!r}"
    return TableError(message, source=source, location=location, expected=expected, found=found)


def sheet_names(path: Path) -> list[str]:
    """The titles of a workbook's sheets, in order."""
    import openpyxl

    book = openpyxl.load_workbook(path, read_only=True, data_only=True)
    try:
        return [sheet.title for sheet in book.worksheets]
    finally:
        book.close()
