"""Read and validate the CSV input tables.

Each table has a declared set of columns (:class:`Column`). Reading a table
checks, in order: the file can be read as UTF-8 CSV, every required column is
present, every value parses and lies in its range, ids are unique. The first
problem found is raised as :class:`~nutricap.errors.TableError` naming the
file, the spreadsheet row (the header is row 1, the first data row is row 2)
and the column.

Decisions on awkward files (documented in docs/inputs.md): a UTF-8 byte-order
mark is accepted; a file that is not UTF-8 is refused; a semicolon-separated
file is refused with a message saying so (decimal commas would otherwise be
misread silently).
"""

from __future__ import annotations

import difflib
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from nutricap.errors import TableError

TRUE_WORDS = frozenset({"true", "yes", "y", "1", "t"})
FALSE_WORDS = frozenset({"false", "no", "n", "0", "f", ""})


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


def spreadsheet_row(index: int) -> int:
    """Row number a user sees in a spreadsheet for data row ``index`` (0-based)."""
    return int(index) + 2


def read_csv_table(path: Path, columns: list[Column], *, what: str) -> pd.DataFrame:
    """Read ``path`` and validate it against ``columns``.

    Parameters
    ----------
    path : Path
        The CSV file.
    columns : list of Column
        The declared columns. Columns not declared are kept as text.
    what : str
        What the table is, for messages (``"plots table"``).

    Returns
    -------
    pandas.DataFrame
        Numbers as float, flags as bool, text stripped.
    """
    frame = _read_raw(path, what)
    _check_columns(frame, columns, path)
    for column in columns:
        if column.name in frame.columns:
            frame[column.name] = _convert_column(frame[column.name], column, path)
    return frame


def _read_raw(path: Path, what: str) -> pd.DataFrame:
    if not path.is_file():
        raise TableError(f"{what} not found", source=path, expected="an existing CSV file")
    try:
        text = path.read_bytes().decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        raise TableError(
            f"{what} is not UTF-8 text (byte {exc.start})",
            source=path,
            expected="a CSV file saved as UTF-8",
            found="another encoding; re-save the file as UTF-8 CSV",
        ) from None
    header = text.splitlines()[0] if text.strip() else ""
    if not header:
        raise TableError(f"{what} is empty", source=path, expected="a header row")
    if ";" in header and "," not in header:
        raise TableError(
            f"{what} is separated by semicolons",
            source=path,
            location="row 1",
            expected="comma-separated values with a decimal point",
            found=f"header {header!r}",
        )
    try:
        frame = pd.read_csv(path, dtype=str, keep_default_na=False, encoding="utf-8-sig")
    except (pd.errors.ParserError, pd.errors.EmptyDataError) as exc:
        raise TableError(f"{what} cannot be read as CSV: {exc}", source=path) from None
    frame.columns = [str(name).strip() for name in frame.columns]
    return frame.apply(lambda col: col.str.strip())


def _check_columns(frame: pd.DataFrame, columns: list[Column], path: Path) -> None:
    present = list(frame.columns)
    for column in columns:
        if column.required and column.name not in present:
            close = difflib.get_close_matches(column.name, present, n=1)
            hint = f"; did you mean to name {close[0]!r} {column.name!r}?" if close else ""
            raise TableError(
                f"missing column {column.name!r}{hint}",
                source=path,
                location="row 1 (header)",
                expected=f"column {column.name!r}"
                + (f" ({column.meaning})" if column.meaning else ""),
                found="columns " + ", ".join(repr(name) for name in present),
            )


def _convert_column(values: pd.Series, column: Column, path: Path) -> pd.Series:
    if column.kind == "text":
        _check_blanks(values, column, path)
        return values
    if column.kind == "flag":
        return _convert_flags(values, column, path)
    return _convert_numbers(values, column, path)


def _check_blanks(values: pd.Series, column: Column, path: Path) -> None:
    if column.allow_blank:
        return
    blank = values == ""
    if blank.any():
        index = int(np.flatnonzero(blank.to_numpy())[0])
        raise TableError(
            "empty value",
            source=path,
            location=f"row {spreadsheet_row(index)}, column {column.name!r}",
            expected=column.meaning or "a value",
            found="an empty cell",
        )


def _convert_flags(values: pd.Series, column: Column, path: Path) -> pd.Series:
    lowered = values.str.lower()
    unknown = ~lowered.isin(TRUE_WORDS | FALSE_WORDS)
    if unknown.any():
        index = int(np.flatnonzero(unknown.to_numpy())[0])
        raise TableError(
            "not a true/false value",
            source=path,
            location=f"row {spreadsheet_row(index)}, column {column.name!r}",
            expected="true or false",
            found=repr(values.iloc[index]),
        )
    return lowered.isin(TRUE_WORDS)


def _convert_numbers(values: pd.Series, column: Column, path: Path) -> pd.Series:
    numbers = pd.to_numeric(values.where(values != ""), errors="coerce").astype(float)
    bad_text = numbers.isna() & (values != "")
    if bad_text.any():
        index = int(np.flatnonzero(bad_text.to_numpy())[0])
        raise TableError(
            "not a number",
            source=path,
            location=f"row {spreadsheet_row(index)}, column {column.name!r}",
            expected=column.meaning or "a number",
            found=repr(values.iloc[index]),
        )
    if not column.allow_blank:
        _check_blanks(values, column, path)
    _check_range(numbers, column, path)
    return numbers


def _check_range(numbers: pd.Series, column: Column, path: Path) -> None:
    finite = numbers.to_numpy()
    problems = np.isinf(finite)
    if column.minimum is not None:
        problems |= finite < column.minimum
    if column.above is not None:
        problems |= finite <= column.above
    if column.maximum is not None:
        problems |= finite > column.maximum
    problems &= ~np.isnan(finite)
    if problems.any():
        index = int(np.flatnonzero(problems)[0])
        raise TableError(
            "value out of range",
            source=path,
            location=f"row {spreadsheet_row(index)}, column {column.name!r}",
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


def check_unique(frame: pd.DataFrame, keys: list[str], path: Path) -> None:
    """Raise :class:`TableError` at the first row repeating an earlier ``keys`` combination."""
    duplicated = frame.duplicated(subset=keys, keep="first").to_numpy()
    if duplicated.any():
        index = int(np.flatnonzero(duplicated)[0])
        values = ", ".join(f"{key}={_plain(frame[key].iloc[index])!r}" for key in keys)
        raise TableError(
            "duplicate entry",
            source=path,
            location=f"row {spreadsheet_row(index)}, column {', '.join(repr(k) for k in keys)}",
            expected="each combination once",
            found=f"{values} again",
        )


def _plain(value: object) -> object:
    """A numpy scalar as the Python value it holds (for readable messages)."""
    return value.item() if isinstance(value, np.generic) else value


def check_known(
    frame: pd.DataFrame, column: str, known: set[str], path: Path, *, known_from: str
) -> None:
    """Raise :class:`TableError` at the first value of ``column`` not in ``known``."""
    unknown = ~frame[column].isin(known).to_numpy()
    if unknown.any():
        index = int(np.flatnonzero(unknown)[0])
        value = frame[column].iloc[index]
        close = difflib.get_close_matches(str(value), sorted(known), n=1)
        hint = f"; did you mean {close[0]!r}?" if close else ""
        raise TableError(
            f"unknown {column} {value!r}{hint}",
            source=path,
            location=f"row {spreadsheet_row(index)}, column {column!r}",
            expected=f"one of the {column} values in {known_from}",
            found=repr(value),
        )
