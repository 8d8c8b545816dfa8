"""Read and validate the CSV input tables.

Each table has a declared set of columns (:class:`Column`). Reading a table
checks, in order: the file can be read as UTF-8 CSV, every required column is
present, every value parses and lies in its range, ids are unique. The first
problem found is raised as :class:`~nutricap.errors.TableError` naming the
file, the spreadsheet row (the header is row 1, the first data row is row 2)
and the column.

Decisions on awkward files (documented in docs/inputs.md): a UTF-8 byte-order
mark is accepted; a file that is not UTF-8 is refused; a file separated by
semicolons (or tabs, or vertical bars) is refused with a message saying so
(decimal commas would otherwise be misread silently); a column name repeated in
the header is refused; an undeclared column named almost like an absent declared
one (``tanin`` for ``tannin``) is refused as a misspelling; empty rows at the end
are ignored, an empty row between data rows is refused (every later row number
would be off by one); a table with no data rows is refused.

A table may also be an ``.xlsx`` workbook (one sheet, read by :mod:`nutricap.inputs.spreadsheet`
and validated exactly like a CSV file, rows being the sheet's own), and its columns may carry
the user's own names: a :class:`~nutricap.inputs.table_source.TableSource` holds the file with
the project's ``[columns.KEY]`` mapping and ``[sheets]`` entry; the mapping is applied here,
once, as the table is read, and every later
message about a mapped column names the file's own column (``column 'ELK_NOW' (mapped to
current_animals)``).
A line beginning with ``#`` is a comment (the example rows of a template written by
``nutricap init``): comment lines after the last data row are skipped like empty rows; one
above a data row is refused, for the same reason as an empty row.
"""

from __future__ import annotations

import csv
import difflib
import io
import re
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from nutricap.errors import ProjectFileError, TableError, file_problem
from nutricap.inputs.spreadsheet import sheet_text_rows
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
OTHER_SEPARATORS = {";": "semicolons", "\t": "tabs", "|": "vertical bars"}
NEWLINE = b"\n"
OTHER_SPREADSHEETS = (".xls", ".ods", ".numbers")
NOT_AVAILABLE = frozenset({"na", "n/a"})
"""Cell texts read as blank (case-insensitive) where a column accepts blanks."""
DATE_LIKE = re.compile(r"^\d{1,4}[/.-]\d{1,2}[/.-]\d{1,4}([ T]\d{1,2}:\d{2}(:\d{2})?)?$")
ISO_DATE = re.compile(r"^\d{4}-\d{2}-\d{2}([ T]\d{2}:\d{2}(:\d{2})?)?$")
COMMENT = "#"
"""A line beginning with this and then a space (or nothing) is a comment, allowed after the last
data row. ``#12,...`` is data (a plot id may begin with ``#``), never skipped as a comment."""
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
    frame = _read_sheet(source, what) if source.is_spreadsheet else _read_raw(source, what)
    renaming = apply_column_names(list(frame.columns), source, [c.name for c in columns], what)
    frame = frame.rename(columns=renaming)
    _check_columns(frame, columns, source)
    frame = _without_empty_rows(frame, source, what)
    for column in columns:
        if column.name in frame.columns:
            frame[column.name] = _convert_column(frame[column.name], column, source)
    return frame


def _read_raw(source: TableSource, what: str) -> pd.DataFrame:
    _refuse_sheet_of_csv(source)
    text = _without_trailing_comments(_read_text(source, what), source)
    lines = text.splitlines()
    header = lines[0].strip() if lines else ""
    if not header:
        raise _no_header(what, not text.strip(), source)
    _refuse_other_separators(header, source, what)
    _refuse_repeated_columns([name.strip() for name in next(csv.reader([header]))], source)
    try:
        frame = pd.read_csv(
            io.StringIO(text), dtype=str, keep_default_na=False, skip_blank_lines=False
        )
    except (pd.errors.ParserError, pd.errors.EmptyDataError) as exc:
        raise _parser_error(exc, source, what) from None
    return _stripped(frame, source, what)


def _stripped(frame: pd.DataFrame, source: TableSource, what: str) -> pd.DataFrame:
    frame.columns = [str(name).strip() for name in frame.columns]
    frame = frame.apply(lambda col: col.str.strip())
    _refuse_nul(frame, source, what)
    return frame


def _refuse_sheet_of_csv(source: TableSource) -> None:
    if source.sheet is not None:
        raise ProjectFileError(
            f"a sheet is named for {source.path}, which is not a spreadsheet",
            source=source.project_file,
            location=f"key 'sheets.{source.key}'",
            expected="a sheet only for an .xlsx workbook",
            found=repr(source.sheet),
        )


def _read_sheet(source: TableSource, what: str) -> pd.DataFrame:
    """One sheet of an ``.xlsx`` workbook as text cells, row 1 the header (as a CSV file)."""
    rows = sheet_text_rows(source, what)
    if not rows or not any(rows[0]):
        raise _no_header(what, not any(any(row) for row in rows), source)
    header, body = rows[0], rows[1:]
    kept = [i for i, name in enumerate(header) if name.strip() or any(row[i] for row in body)]
    header = [header[i].strip() or f"Unnamed: {i}" for i in kept]
    _refuse_repeated_columns(header, source)
    frame = pd.DataFrame([[row[i] for i in kept] for row in body], columns=header, dtype=str)
    return _stripped(frame, source, what)


def _no_header(what: str, empty: bool, source: TableSource) -> TableError:
    """The error of a table without a header row: an empty file, or blank cells on row 1."""
    return TableError(
        f"{what} is empty" if empty else f"{what} has no header on row 1",
        source=source,
        location="row 1",
        expected="a header row naming the columns",
    )


def _is_comment(line: str) -> bool:
    text = line.strip()
    return text == COMMENT or text.startswith(COMMENT + " ")


def has_data_rows(path: Path) -> bool:
    """Whether a readable CSV file has a line after the header that is neither empty nor a
    comment (True when it cannot be read as text: its reader then says why)."""
    try:
        lines = path.read_bytes().decode("utf-8-sig").splitlines()[1:]
    except (OSError, UnicodeDecodeError):
        return True
    return any(line.strip() and not _is_comment(line) for line in lines)


def _without_trailing_comments(text: str, path: Source) -> str:
    """``text`` without the comment and empty lines after its last data row; a comment line
    above a data row is refused (every later row number would be off by one)."""
    lines = text.splitlines(keepends=True)
    if not any(_is_comment(line) for line in lines[1:]):
        return text
    end = len(lines)
    while end > 1 and (not lines[end - 1].strip() or _is_comment(lines[end - 1])):
        end -= 1
    for number, line in enumerate(lines[1:end], start=2):
        if _is_comment(line):
            raise TableError(
                f"a comment line (beginning with {COMMENT + ' '!r}) above a data row",
                source=path,
                location=f"row {number}",
                expected="comment lines only after the last data row: delete it or move it "
                "to the end (the rows below would be numbered one off)",
                found=repr(line.strip()[:60]),
            )
    return "".join(lines[:end])


def _refuse_nul(frame: pd.DataFrame, path: Source, what: str) -> None:
    """Refuse a NUL character in the header or a cell: other programs cut text there."""
    nul_cells = frame.apply(lambda col: col.str.contains("\0", regex=False)).to_numpy()
    names = [name for name in frame.columns if "\0" in name]
    if not names and not nul_cells.any():
        return
    if names:
        position = f"row 1 (header), column {list(frame.columns).index(names[0]) + 1}"
        value = names[0]
    else:
        index, column = (int(i[0]) for i in np.nonzero(nul_cells))
        position = f"row {spreadsheet_row(index)}, column {frame.columns[column]!r}"
        value = frame.iat[index, column]
    raise TableError(
        f"{what} holds a NUL character (byte 0), as a damaged or binary file does",
        source=path,
        location=position,
        expected="text without NUL characters",
        found=repr(value),
    )


def _read_text(source: TableSource, what: str) -> str:
    path = source.path
    problem = file_problem(path)
    if problem is not None:
        raise TableError(f"{what} {problem}", source=source, expected="an existing CSV file")
    if path.is_dir():
        raise TableError(f"{what} is a folder, not a file", source=source, expected="a CSV file")
    if path.suffix.lower() in OTHER_SPREADSHEETS:
        raise TableError(
            f"{what} is a {path.suffix} spreadsheet",
            source=source,
            expected="a CSV file or an .xlsx workbook",
            found=f"a {path.suffix} file; save it as .xlsx or CSV",
        )
    data = path.read_bytes()
    try:
        return data.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        row = data[: exc.start].count(NEWLINE) + 1
        raise TableError(
            f"{what} is not UTF-8 text (byte {exc.start})",
            source=path,
            location=f"row {row}",
            expected="a CSV file saved as UTF-8",
            found="another encoding; re-save the file as UTF-8 CSV",
        ) from None


def _refuse_other_separators(header: str, path: Source, what: str) -> None:
    if "," in header:
        return
    for separator, words in OTHER_SEPARATORS.items():
        if separator in header:
            raise TableError(
                f"{what} is separated by {words}",
                source=path,
                location="row 1",
                expected="comma-separated values with a decimal point",
                found=f"header {header!r}",
            )


def _refuse_repeated_columns(names: list[str], path: Path | TableSource) -> None:
    seen: set[str] = set()
    for number, name in enumerate(names, start=1):
        if name and name in seen:
            raise TableError(
                f"column {name!r} appears twice in the header",
                source=path,
                location=f"row 1 (header), column {number}",
                expected="each column name once",
                found=f"a second {name!r}",
            )
        seen.add(name)


def _parser_error(exc: Exception, path: Source, what: str) -> TableError:
    match = re.search(r"Expected (\d+) fields in line (\d+), saw (\d+)", str(exc))
    if match is None:
        return TableError(f"{what} cannot be read as CSV: {exc}", source=path)
    expected, line, found = match.groups()
    return TableError(
        "more values than the header has columns",
        source=path,
        location=f"row {line}",
        expected=f"{expected} values as in the header (a decimal comma, or a comma in an "
        "unquoted text?)",
        found=f"{found} values",
    )


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
