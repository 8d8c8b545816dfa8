"""The ``.xlsx`` reader: one sheet of a workbook as the text cells a CSV file would hold.

Read with openpyxl (imported only when a workbook is read); :mod:`nutricap.inputs.table_cells`
and :mod:`nutricap.inputs.columns` then check the cells exactly like a CSV file's, rows being
the sheet's own.
"""

from __future__ import annotations

import datetime as dt
import zipfile

from nutricap.errors import ProjectFileError, TableError, file_problem
from nutricap.inputs.table_source import TableSource, did_you_mean


def sheet_text_rows(source: TableSource, what: str) -> list[list[str]]:
    """The rows of the sheet ``source`` names (or of the first), every row as wide as the widest.

    Cells are read as the workbook saved them (formulas as their last computed values);
    numbers are written back in full (``repr``), whole numbers without ``.0``, dates in ISO
    form, true/false as words.
    """
    rows = _sheet_rows(source, what)
    width = max((len(row) for row in rows), default=0)
    return [[_cell_text(value) for value in row] + [""] * (width - len(row)) for row in rows]


def _sheet_rows(source: TableSource, what: str) -> list[tuple]:
    problem = file_problem(source.path)
    if problem is not None or source.path.is_dir():
        raise TableError(
            f"{what} {problem or 'is a folder, not a file'}",
            source=source,
            expected="an existing .xlsx workbook",
        )
    try:
        import openpyxl
    except ImportError:
        raise TableError(
            f"{what} is a spreadsheet and openpyxl, which reads them, is not installed",
            source=source,
            expected="openpyxl >= 3.1 installed (a dependency of nutricap)",
        ) from None
    try:
        book = openpyxl.load_workbook(source.path, read_only=True, data_only=True)
    except (OSError, ValueError, KeyError, zipfile.BadZipFile) as exc:
        raise TableError(
            f"{what} cannot be read as an .xlsx workbook ({type(exc).__name__})",
            source=source,
            expected="an Excel workbook saved as .xlsx",
            found="a truncated file, or another format named .xlsx",
        ) from None
    try:
        sheet = _chosen_sheet(book, source)
        return list(sheet.iter_rows(min_row=1, values_only=True))
    finally:
        book.close()


def _chosen_sheet(book, source: TableSource):
    names = [sheet.title for sheet in book.worksheets]
    if not names:
        raise TableError("the workbook has no sheets", source=source, expected="one sheet")
    if source.sheet is None:
        return book.worksheets[0]
    if source.sheet not in names:
        raise ProjectFileError(
            f"{source.path} has no sheet {source.sheet!r}" + did_you_mean(source.sheet, names),
            source=source.project_file,
            location=f"key 'sheets.{source.key}'",
            expected="one of the workbook's sheets: " + ", ".join(map(repr, names)),
            found=repr(source.sheet),
        )
    return book[source.sheet]


def _cell_text(value: object) -> str:
    """A cell's value as the text a CSV file would hold."""
    if value is None:
        return ""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, float):
        return str(int(value)) if value.is_integer() else repr(value)
    if isinstance(value, dt.datetime) and value.time() == dt.time(0):
        return value.date().isoformat()
    if isinstance(value, dt.date | dt.time):
        return value.isoformat()
    return str(value)
