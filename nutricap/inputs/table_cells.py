"""A table's file read as text cells (a CSV file, or one sheet of an ``.xlsx`` workbook), with
the checks of its layout.

Decisions on awkward files (documented in docs/inputs.md): a UTF-8 byte-order mark is
accepted; a file that is not UTF-8 is refused; a file separated by semicolons (or tabs, or
vertical bars) is refused with a message saying so (decimal commas would otherwise be misread
silently); a column name repeated in the header is refused; a NUL character is refused. A line
beginning with ``#`` is a comment (the example rows of a template written by ``nutricap
init``): comment lines after the last data row are skipped like empty rows; one above a data
row is refused (every later row number would be off by one). The declared columns and their
values are checked by :mod:`nutricap.inputs.columns`.
"""

from __future__ import annotations

import csv
import io
import re
from pathlib import Path

import numpy as np
import pandas as pd

from nutricap.errors import ProjectFileError, TableError, file_problem
from nutricap.inputs.spreadsheet import sheet_text_rows
from nutricap.inputs.table_source import Source, TableSource, spreadsheet_row

OTHER_SEPARATORS = {";": "semicolons", "\t": "tabs", "|": "vertical bars"}
NEWLINE = b"\n"
OTHER_SPREADSHEETS = (".xls", ".ods", ".numbers")
COMMENT = "#"
"""A line beginning with this and then a space (or nothing) is a comment, allowed after the last
data row. ``#12,...`` is data (a plot id may begin with ``#``), never skipped as a comment."""


def read_cells(source: TableSource, what: str) -> pd.DataFrame:
    """Every cell of the table as stripped text, the header's names as columns.

    ``what`` is what the table is, for messages (``"plots table"``).
    """
    return _read_sheet(source, what) if source.is_spreadsheet else _read_raw(source, what)


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
        if data.startswith(BINARY_SIGNATURES):
            raise TableError(
                f"{what} is not a table but a binary file",
                source=path,
                expected="a CSV file saved as UTF-8 (is the project file naming the right file?)",
                found="a GeoPackage, database, archive or image",
            ) from None
        row = data[: exc.start].count(NEWLINE) + 1
        raise TableError(
            f"{what} is not UTF-8 text",
            source=path,
            location=f"row {row}",
            expected="a CSV file saved as UTF-8",
            found=f"byte {data[exc.start]:#04x} at offset {exc.start}, another encoding; "
            "re-save the file as UTF-8 CSV",
        ) from None


BINARY_SIGNATURES = (b"SQLite format 3\x00", b"PK\x03\x04", b"\x1f\x8b", b"II*\x00", b"MM\x00*")
"""Starts of binary files a table is sometimes confused with: GeoPackage (SQLite), zip
(including .xlsx), gzip, TIFF."""


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
    unclosed = re.search(r"EOF inside string starting at row (\d+)", str(exc))
    if unclosed is not None:  # pandas counts the file's lines from 0
        return TableError(
            "a quoted value is never closed",
            source=path,
            location=f"row {int(unclosed.group(1)) + 1}",
            expected='a closing " for each opening " (or no quotes at all)',
            found='a " that opens a value running to the end of the file',
        )
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
