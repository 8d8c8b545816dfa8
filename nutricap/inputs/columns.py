"""Read and validate the CSV input tables.

Each table has a declared set of columns (:class:`Column`). Reading a table
checks, in order: the file can be read as UTF-8 CSV, every required column is
present, every value parses and lies in its range, ids are unique. The first
problem found is raised as :class:`~nutricap.errors.TableError` naming the
file, the spreadsheet row (the header is row 1, the first data row is row 2)
and the column.

The file is read as text cells by :mod:`nutricap.inputs.table_cells` (with the checks of its
layout: encoding, separators, comments, repeated or NUL-holding names). Decisions on awkward
tables (documented in docs/inputs.md): an undeclared column named almost like an absent
declared one (``tanin`` for ``tannin``) is refused as a misspelling; empty rows at the end
are ignored, an empty row between data rows is refused (every later row number would be off
by one); a table with no data rows is refused.

A table may also be an ``.xlsx`` workbook (one sheet, read by :mod:`nutricap.inputs.spreadsheet`
and validated exactly like a CSV file, rows being the sheet's own), and its columns may carry
the user's own names: a :class:`~nutricap.inputs.table_source.TableSource` holds the file with
the project's ``[columns.KEY]`` mapping and ``[sheets]`` entry; the mapping is applied here,
once, as the table is read, and every later
message about a mapped column names the file's own column (``column 'ELK_NOW' (mapped to
current_animals)``).
"""

from __future__ import annotations

import difflib
import re
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from nutricap.errors import TableError
from nutricap.inputs.table_cells import read_cells
from nutricap.inputs.table_source import (
    Source,
    TableSource,
    apply_column_names,
    as_source,
    closest_name,
    first_index,
    row_error,
    spreadsheet_row,
)

TRUE_WORDS = frozenset({"true", "yes", "y", "1", "t"})
FALSE_WORDS = frozenset({"false", "no", "n", "0", "f", ""})
NOT_AVAILABLE = frozenset({"na", "n/a"})
"""Cell texts read as blank (case-insensitive) where a column accepts blanks."""
DATE_LIKE = re.compile(r"^\d{1,4}[/.-]\d{1,2}[/.-]\d{1,4}([ T]\d{1,2}:\d{2}(:\d{2})?)?$")
ISO_DATE = re.compile(r"^\d{4}-\d{2}-\d{2}([ T]\d{2}:\d{2}(:\d{2})?)?$")
NEAR_MISS_CUTOFF = 0.8
"""An undeclared column this close (difflib ratio, ignoring case) to an absent declared one
is taken for a misspelling and refused."""


#: Calendar years a project may name [year], in every form: counts, treatment years and
#: scenario spans. A year outside is taken for a typing error and refused.
FIRST_YEAR, LAST_YEAR = 1800, 2200


@dataclass(frozen=True)
class Column:
    """One column of an input table.

    ``kind`` is ``"text"``, ``"number"`` or ``"flag"`` (true/false).
    ``minimum``/``maximum`` bound numbers (inclusive unless ``above`` is set,
    which makes the minimum exclusive).
    """

    name: str
    kind: str = "number"
    required: bool = True
    minimum: float | None = None
    maximum: float | None = None
    above: float | None = None
    allow_blank: bool = False
    meaning: str = ""

    @classmethod
    def optional(cls, name: str, kind: str = "number", **limits) -> Column:
        """A column the file may leave out, or leave blank in any row (``limits``: the other
        fields, e.g. ``minimum`` and ``meaning``)."""
        return cls(name, kind, required=False, allow_blank=True, **limits)


def read_csv_table(path: Path | TableSource, columns: list[Column], *, what: str) -> pd.DataFrame:
    """Read ``path`` and validate it against ``columns``.

    Parameters
    ----------
    path : Path or TableSource
        The CSV file or ``.xlsx`` workbook; a :class:`TableSource` carries the user's column
        names and sheet.
    columns : list of Column
        The declared columns. Columns not declared are kept as text.
    what : str
        What the table is, for messages (``"plots table"``).

    Returns
    -------
    pandas.DataFrame
        Numbers as float, flags as bool, text stripped; columns under our names.
    """
    source = as_source(path)
    frame = read_cells(source, what)
    renaming = apply_column_names(list(frame.columns), source, [c.name for c in columns], what)
    frame = frame.rename(columns=renaming)
    _check_columns(frame, columns, source)
    frame = _without_empty_rows(frame, source, what)
    for column in columns:
        if column.name in frame.columns:
            frame[column.name] = _convert_column(frame[column.name], column, source)
    return frame


def _without_empty_rows(frame: pd.DataFrame, path: Source, what: str) -> pd.DataFrame:
    """Drop empty rows at the end; refuse one between data rows (row numbers would shift)."""
    empty = (frame == "").all(axis=1).to_numpy()
    filled = np.flatnonzero(~empty)
    if filled.size == 0:
        raise TableError(
            f"{what} has a header but no data rows",
            source=path,
            location="row 2",
            expected="at least one data row",
            found="none",
        )
    frame = frame.iloc[: filled[-1] + 1]
    index = first_index(empty[: filled[-1]])
    if index is not None:
        raise row_error(
            "empty row between data rows",
            path,
            index,
            expected="no empty rows (delete it, so that row numbers stay those of the file)",
            found="an empty row",
        )
    return frame


def _check_columns(frame: pd.DataFrame, columns: list[Column], path: Source) -> None:
    present = list(frame.columns)
    found = "columns " + ", ".join(repr(name) for name in present)
    for column in columns:
        if column.required and column.name not in present:
            close = closest_name(column.name, present, cutoff=0.6)
            hint = f"; did you mean to name {close!r} {column.name!r}?" if close else ""
            raise TableError(
                f"missing column {column.name!r}{hint}",
                source=path,
                location="row 1 (header)",
                expected=f"column {column.name!r}"
                + (f" ({column.meaning})" if column.meaning else ""),
                found=found,
            )
    _refuse_near_misses(present, columns, path)


def _refuse_near_misses(present: list[str], columns: list[Column], path: Source) -> None:
    """Refuse an undeclared column named almost like an absent declared one.

    A misspelt optional column (``tanin``, ``dry_mass_kg``) would otherwise be kept as a
    note and its values silently ignored.
    """
    declared = {column.name: column for column in columns}
    absent = [name for name in declared if name not in present]
    for name in present:
        if name in declared:
            continue
        close = closest_name(name, absent, cutoff=NEAR_MISS_CUTOFF)
        if close is not None:
            meaning = declared[close].meaning
            raise TableError(
                f"unknown column {name!r}; did you mean {close!r}?",
                source=path,
                location="row 1 (header)",
                expected=f"column {close!r}"
                + (f" ({meaning})" if meaning else "")
                + ", or a name clearly different from it for a column to ignore",
                found=repr(name),
            )


def _convert_column(values: pd.Series, column: Column, path: Source) -> pd.Series:
    if column.allow_blank:
        values = values.mask(values.str.lower().isin(NOT_AVAILABLE), "")
    if column.kind == "text":
        _check_blanks(values, column, path)
        return values
    if column.kind == "flag":
        return _convert_flags(values, column, path)
    return _convert_numbers(values, column, path)


def _check_blanks(values: pd.Series, column: Column, path: Source) -> None:
    if column.allow_blank:
        return
    index = first_index(values == "")
    if index is not None:
        raise row_error(
            "empty value",
            path,
            index,
            column.name,
            expected=column.meaning or "a value",
            found="an empty cell",
        )


def _convert_flags(values: pd.Series, column: Column, path: Source) -> pd.Series:
    lowered = values.str.lower()
    index = first_index(~lowered.isin(TRUE_WORDS | FALSE_WORDS))
    if index is not None:
        raise row_error(
            "not a true/false value",
            path,
            index,
            column.name,
            expected="true or false",
            found=repr(values.iloc[index]),
        )
    return lowered.isin(TRUE_WORDS)


def _convert_numbers(values: pd.Series, column: Column, path: Source) -> pd.Series:
    numbers = pd.to_numeric(values.where(values != ""), errors="coerce").astype(float)
    index = first_index(numbers.isna() & (values != ""))
    if index is not None:
        raise row_error(
            "not a number" + _date_words(values.iloc[index]),
            path,
            index,
            column.name,
            expected=column.meaning or "a number",
            found=repr(values.iloc[index]),
        )
    if not column.allow_blank:
        _check_blanks(values, column, path)
    _check_range(numbers, column, path)
    return numbers


def _date_words(text: str) -> str:
    """Words saying that ``text`` is a date (and whether in ISO form), or ``""``."""
    if ISO_DATE.match(text):
        return ": a date"
    if DATE_LIKE.match(text):
        return (
            ": a date, and not in ISO form (YYYY-MM-DD; 12/1/2026 may be 1 December or 12 January)"
        )
    return ""


def _check_range(numbers: pd.Series, column: Column, path: Source) -> None:
    finite = numbers.to_numpy()
    problems = np.isinf(finite)
    if column.minimum is not None:
        problems |= finite < column.minimum
    if column.above is not None:
        problems |= finite <= column.above
    if column.maximum is not None:
        problems |= finite > column.maximum
    index = first_index(problems & ~np.isnan(finite))
    if index is not None:
        raise row_error(
            "value out of range",
            path,
            index,
            column.name,
            expected=_range_words(column),
            found=repr(float(finite[index])),
        )


def _range_words(column: Column) -> str:
    low = (
        f"> {column.above:g}"
        if column.above is not None
        else (f">= {column.minimum:g}" if column.minimum is not None else "")
    )
    high = f"<= {column.maximum:g}" if column.maximum is not None else ""
    bounds = " and ".join(part for part in (low, high) if part)
    unit = f" ({column.meaning})" if column.meaning else ""
    return f"a number {bounds}{unit}".strip()


def check_unique(frame: pd.DataFrame, keys: list[str], path: Source) -> None:
    """Raise :class:`TableError` at the first row repeating an earlier ``keys`` combination."""
    duplicated = frame.duplicated(subset=keys, keep="first").to_numpy()
    if duplicated.any():
        index = int(np.flatnonzero(duplicated)[0])
        values = ", ".join(f"{key}={plain_value(frame[key].iloc[index])!r}" for key in keys)
        raise TableError(
            "duplicate entry",
            source=path,
            location=f"row {spreadsheet_row(index)}, column {', '.join(repr(k) for k in keys)}",
            expected="each combination once",
            found=f"{values} again",
        )


def whole_numbers(table: pd.DataFrame, column: str, path: Source, *, expected: str) -> np.ndarray:
    """The values of number ``column`` as int64; a :class:`TableError` at the first not whole."""
    values = table[column].to_numpy(dtype=float)
    index = first_index(values != np.round(values))
    if index is not None:
        raise row_error(
            f"{column} is not a whole number",
            path,
            index,
            column,
            expected=expected,
            found=repr(float(values[index])),
        )
    return values.astype(np.int64)


def plain_value(value: object) -> object:
    """A numpy scalar as the Python value it holds (for readable messages)."""
    return value.item() if isinstance(value, np.generic) else value


def shown_value(value: object) -> str:
    """A cell's value as a message shows it: ``repr`` of the plain value, or "an empty (NULL)
    value" where there is none (a NULL attribute reads as NaN or None)."""
    if value is None or (isinstance(value, float | np.floating) and np.isnan(value)):
        return "an empty (NULL) value"
    return repr(plain_value(value))


def check_known(
    frame: pd.DataFrame, column: str, known: set[str], path: Source, *, known_from: str
) -> None:
    """Raise :class:`TableError` at the first value of ``column`` not in ``known``."""
    index = first_index(~frame[column].isin(known))
    if index is not None:
        value = frame[column].iloc[index]
        close = difflib.get_close_matches(str(value), sorted(known), n=1)
        hint = f"; did you mean {close[0]!r}?" if close else ""
        raise row_error(
            f"unknown {column} {value!r}{hint}",
            path,
            index,
            column,
            expected=f"one of the {column} values in {known_from}",
            found=repr(value),
        )
