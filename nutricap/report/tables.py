"""Per-unit capacity tables: CSV, GeoPackage layer and Markdown.

Text from the inputs (unit ids, forage classes, strata, ...) is made harmless for each format:
in CSV a cell that a spreadsheet would run as a formula (beginning with ``=``, ``+``, ``-``,
``@``, tab or carriage return) gets a leading apostrophe, as OWASP's CSV-injection guidance
advises (numbers stay numbers); in Markdown the punctuation that makes tables, links or HTML is
backslash-escaped and unprintable characters are written escaped (``\\x1b``, ``\\n``).
"""

from __future__ import annotations

import json
import re
from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd

from nutricap.cautions import CAUTION
from nutricap.errors import printable

DISPLAY_DECIMALS = {
    "area_ha": 1,
    "available_forage_kg": 0,
    "ncc_animals": 0,
    "ecc_animals": 0,
    "allowable_use_animals": 0,
    "ncc_per_km2": 1,
    "ncc_aum": 0,
    "allowable_use_aum": 0,
    "diet_de_kcal_per_g": 3,
    "diet_dp_pct": 2,
    "current_animals": 0,
}
"""Decimals of each per-unit column where it is shown rounded: the HTML report and the Markdown
table (the CSV files keep every digit). Interval bounds round as their figure."""

MARKDOWN_COLUMNS = {
    "unit_id": "Unit",
    "area_ha": "Area (ha)",
    "available_forage_kg": "Available forage (kg DM)",
    "ncc_animals": "NCC (animals)",
    "ecc_animals": "ECC (animals)",
    "allowable_use_animals": "Allowable-use capacity (animals)",
    "ncc_per_km2": "NCC per km²",
    "limiting_factor": "Limiting factor",
    "marginal_forage_class": "Marginal forage class",
    "current_animals": "Current animals",
}


FORMULA_START = ("=", "+", "-", "@", "\t", "\r")
"""First characters that make a spreadsheet read a cell as a formula (OWASP, CSV injection)."""
PLAIN_NUMBER = re.compile(r"[+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?")
MARKDOWN_SPECIAL = re.compile(r"([\\`*_\[\]<>|&~$])")
"""Punctuation with a meaning inside a Markdown table cell: escapes, code, emphasis, links,
HTML, entities, the cell separator, strikethrough, maths (CommonMark lets a backslash escape
each). Line-start syntax (``#``, ``-``, ``1.``) cannot occur: cells and lines begin with our
own text."""


def csv_number(value: float) -> str:
    """A float as a plain decimal with every digit (no exponent): ``1191397.25``, ``1e-08`` →
    ``0.00000001``.

    The shortest text that reads back as the same float (Python's ``repr``), written out in
    positional notation where ``repr`` would use an exponent.
    """
    text = repr(float(value))
    if "e" in text:
        text = np.format_float_positional(float(value), unique=True, trim="0")
    return text


def write_csv(table: pd.DataFrame, path: Path) -> None:
    """Write ``table`` as UTF-8 CSV, numbers as plain decimals in full, formula-like text defused.

    Floats are written by :func:`csv_number` (no exponent, no rounding): a spreadsheet or a
    script reads back exactly the value computed.
    """
    safe = table.rename(columns=spreadsheet_text)
    carriage_return = any("\r" in str(name) for name in safe.columns)
    for index, is_text in enumerate(_text_columns(safe)):
        if is_text:
            safe.isetitem(index, safe.iloc[:, index].map(spreadsheet_text))
            carriage_return |= safe.iloc[:, index].map(_has_carriage_return).any()
    # Python's csv writer quotes a cell holding a line break only if the break is in its line
    # terminator: a lone CR in a text would start a new row. Such a file ends lines in CRLF.
    ending = "\r\n" if carriage_return else "\n"
    safe.to_csv(path, index=False, float_format=csv_number, encoding="utf-8", lineterminator=ending)


def _has_carriage_return(value: object) -> bool:
    return isinstance(value, str) and "\r" in value


def _text_columns(table: pd.DataFrame) -> list[bool]:
    return [not pd.api.types.is_numeric_dtype(dtype) for dtype in table.dtypes]


def spreadsheet_text(value: object) -> object:
    """``value`` with a leading apostrophe if it is text a spreadsheet would run as a formula.

    Follows OWASP's CSV-injection guidance: text beginning with ``=``, ``+``, ``-``, ``@``, tab
    or carriage return is prefixed with ``'``. Numbers, and text that is a plain number
    (``-3.5``), are left as they are.
    """
    if isinstance(value, str) and value.startswith(FORMULA_START):
        if not PLAIN_NUMBER.fullmatch(value):
            return "'" + value
    return value


def markdown_text(value: object) -> object:
    """Text as literal Markdown: unprintable characters escaped, special punctuation escaped.

    Numbers are returned unchanged (they are formatted by the table).
    """
    if not isinstance(value, str):
        return value
    return MARKDOWN_SPECIAL.sub(r"\\\1", printable(value))


def write_geopackage(table: pd.DataFrame, units: gpd.GeoDataFrame, path: Path) -> None:
    """Write the per-unit table joined to the unit polygons as layer ``capacity_by_unit``."""
    shapes = units[["unit_id", "geometry"]].merge(table, on="unit_id", how="right")
    frame = gpd.GeoDataFrame(shapes, geometry="geometry", crs=units.crs)
    frame.to_file(path, layer="capacity_by_unit", driver="GPKG", engine="pyogrio")


def markdown_table(table: pd.DataFrame, *, title: str, context_lines: list[str]) -> str:
    """The per-unit table as Markdown, with its context and the caution."""
    columns = [name for name in MARKDOWN_COLUMNS if name in table.columns]
    shown = table[columns].rename(columns=MARKDOWN_COLUMNS)
    text = [index for index, is_text in enumerate(_text_columns(shown)) if is_text]
    for index in text:
        shown.isetitem(index, shown.iloc[:, index].map(markdown_text))
    # Text columns are not read as numbers (an id "007" stays "007"); numbers round as in the
    # HTML report (DISPLAY_DECIMALS).
    decimals = [f",.{DISPLAY_DECIMALS.get(name, 1)}f" for name in columns]
    body = shown.to_markdown(index=False, floatfmt=decimals, disable_numparse=text)
    context = [markdown_text(line) for line in context_lines]
    caution = f"> **Caution.** {CAUTION}"
    lines = [f"# {markdown_text(title)}", "", *context, "", body, "", caution, ""]
    return "\n".join(lines)


def write_json(data: dict, path: Path) -> None:
    """Write ``data`` as indented UTF-8 JSON."""
    path.write_text(json.dumps(data, indent=2, default=str) + "\n", encoding="utf-8")
