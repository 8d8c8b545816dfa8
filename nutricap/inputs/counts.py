"""The counts table: reading and checking the yearly counts of the ``trend`` command and of
the project's ``counts`` input.

A counts table has columns ``year, count`` (optional ``unit_id`` and ``removals``). Rows in
messages are spreadsheet rows: the header is row 1, the first data row is row 2.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from nutricap.errors import TableError
from nutricap.inputs.columns import (
    FIRST_YEAR,
    LAST_YEAR,
    Column,
    Source,
    read_csv_table,
    spreadsheet_row,
    whole_numbers,
)
from nutricap.science import population

COUNT_COLUMNS = [
    Column("unit_id", "text", required=False, meaning="management unit the count belongs to"),
    Column(
        "year",
        minimum=FIRST_YEAR,
        maximum=LAST_YEAR,
        meaning="calendar year of the count, a whole number such as 2019",
    ),
    Column("count", above=0, meaning="animals counted (or a count index) that year, > 0"),
    Column(
        "removals",
        required=False,
        minimum=0,
        meaning="animals removed after that year's count and before the next; 0 when none",
    ),
]

TOTAL_LABEL = "total"
ROW_CONVENTION = "rows are spreadsheet rows: the header is row 1, the first data row is row 2"


def read_counts(path: Source) -> pd.DataFrame:
    """Read and validate the counts table.

    Returns
    -------
    pandas.DataFrame
        Columns ``unit_id`` (text, "" when the file has none), ``year`` (int), ``count``
        [animals], ``removals`` [animals] (NaN when the file has none) and ``row`` (the
        spreadsheet row), in file order.
    """
    table = read_csv_table(path, COUNT_COLUMNS, what="counts table")
    if table.empty:
        raise TableError(
            "counts table has no data rows",
            source=path,
            expected="one row per year counted",
            found="only a header",
        )
    table["row"] = [spreadsheet_row(index) for index in range(len(table))]
    table["year"] = whole_numbers(table, "year", path, expected="a calendar year such as 2019")
    if "unit_id" not in table.columns:
        table["unit_id"] = ""
    if "removals" not in table.columns:
        table["removals"] = np.nan
    _check_one_count_per_year(table, path)
    return table


def _check_one_count_per_year(table: pd.DataFrame, path: Path) -> None:
    repeated = table.duplicated(["unit_id", "year"], keep="first").to_numpy()
    if repeated.any():
        second = table.iloc[int(np.flatnonzero(repeated)[0])]
        same = table[(table["unit_id"] == second["unit_id"]) & (table["year"] == second["year"])]
        unit = f" for unit {second['unit_id']!r}" if second["unit_id"] else ""
        raise TableError(
            f"year {int(second['year'])} appears twice{unit}",
            source=path,
            location=f"rows {int(same['row'].iloc[0])} and {int(second['row'])}, column 'year'",
            expected="one count per unit and year",
            found="two rows",
        )


def select_series(table: pd.DataFrame, path: Path, unit: str | None) -> dict[str, pd.DataFrame]:
    """Split the table into the series to analyse: one unit, or each unit and their total.

    The total sums counts (and removals) over units in the years in which every unit was
    counted; other years are left out of the total.
    """
    if (table["unit_id"] == "").all():
        return {unit or TOTAL_LABEL: _checked_length(table, path, "the file")}
    units = list(dict.fromkeys(table["unit_id"]))
    if TOTAL_LABEL in units and len(units) > 1:
        raise TableError(
            f"unit id {TOTAL_LABEL!r} is kept for the sum over units",
            source=path,
            location="column 'unit_id'",
            expected="another unit id",
            found=repr(TOTAL_LABEL),
        )
    if unit is not None:
        if unit not in units:
            raise TableError(
                f"unit {unit!r} is not in the counts table",
                source=path,
                location="column 'unit_id'",
                expected="one of " + ", ".join(units),
                found=repr(unit),
            )
        units = [unit]
    series = {
        name: _checked_length(table[table["unit_id"] == name], path, f"unit {name!r}")
        for name in units
    }
    if len(series) > 1:
        series[TOTAL_LABEL] = _checked_length(
            _total(table), path, "the total over units (years in which every unit was counted)"
        )
    return series


def _total(table: pd.DataFrame) -> pd.DataFrame:
    n_units = table["unit_id"].nunique()
    grouped = table.groupby("year").agg(
        count=("count", "sum"),
        removals=("removals", "sum"),
        units=("unit_id", "nunique"),
        row=("row", "min"),
    )
    complete = grouped[grouped["units"] == n_units].reset_index()
    complete["unit_id"] = TOTAL_LABEL
    if table["removals"].isna().all():
        complete["removals"] = np.nan
    return complete


def _checked_length(frame: pd.DataFrame, path: Path, what: str) -> pd.DataFrame:
    frame = frame.sort_values("year", kind="stable")
    if len(frame) < population.MIN_COUNTS_TREND:
        years = ", ".join(str(year) for year in frame["year"]) or "none"
        raise TableError(
            f"too few counts for a trend in {what}",
            source=path,
            location="column 'count'",
            expected=f"at least {population.MIN_COUNTS_TREND} yearly counts "
            f"({population.MIN_COUNTS_LOGISTIC} for the logistic fit)",
            found=f"{len(frame)} (years {years})",
        )
    return frame.reset_index(drop=True)
