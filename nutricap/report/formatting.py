"""Formatting for the HTML report: values to cell text, tables to rows, figures to data URIs.

The helpers turn what a report section is handed into plain strings for the Jinja2
template (:mod:`nutricap.report.html`); they compute nothing.
"""

from __future__ import annotations

import base64
from collections.abc import Callable
from concurrent.futures import Future, ThreadPoolExecutor
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd

from nutricap.report import figures

if TYPE_CHECKING:
    from matplotlib.figure import Figure


def crs_label(crs: Any) -> str:
    """A CRS as its authority code (``EPSG:32612``) when it has one, else its name (a CRS
    nutricap defined, e.g. an equal-area projection centred on the units)."""
    return crs.to_string() if crs.to_authority() is not None else crs.name


def is_missing(value: Any) -> bool:
    """Whether ``value`` is None or NaN (shown as '–')."""
    if value is None:
        return True
    try:
        return bool(pd.isna(value))
    except (TypeError, ValueError):
        return False


def _number(digits: int, *, percent: bool = False) -> Callable[[Any], str]:
    """Formatter with thousands separators and ``digits`` decimals; '–' for a missing value."""

    def format_value(value: Any) -> str:
        if is_missing(value):
            return "–"
        number = float(value) * (100.0 if percent else 1.0)
        return f"{number:,.{digits}f}" + (" %" if percent else "")

    return format_value


def format_text(value: Any) -> str:
    """A cell as text: '–' when missing or empty, yes/no for booleans."""
    if is_missing(value) or value == "":
        return "–"
    if isinstance(value, bool | np.bool_):
        return "yes" if value else "no"
    return str(value)


def format_auto(value: Any) -> str:
    """Whole numbers as counts, other numbers to three significant digits, text as text."""
    if isinstance(value, bool | np.bool_ | str) or is_missing(value):
        return format_text(value)
    if isinstance(value, int | float | np.number):
        number = float(value)
        return f"{number:,.0f}" if abs(number) >= 100 or number.is_integer() else f"{number:.3g}"
    return str(value)


def decimals(digits: int) -> Callable[[Any], str]:
    """Formatter with thousands separators and ``digits`` decimals ('–' when missing)."""
    return _number(digits)


ANIMALS = _number(0)
ONE_DECIMAL = _number(1)
TWO_DECIMALS = _number(2)
THREE_DECIMALS = _number(3)
PERCENT = _number(0, percent=True)


@dataclass(frozen=True)
class Column:
    """A column of a rendered table: source column, header with unit, formatter."""

    name: str
    header: str
    format: Callable[[Any], str] = format_text
    numeric: bool = False


def numeric_column(name: str, header: str, format_value: Callable[[Any], str] = ANIMALS) -> Column:
    """A right-aligned column, formatted as whole animals unless told."""
    return Column(name, header, format_value, numeric=True)


# Columns that several tables of the report show, declared once (same name, same header).
UNIT = Column("unit_id", "Unit")
SCENARIO = Column("scenario", "Scenario")
YEAR = Column("year", "Year")
TREATMENT = Column("treatment", "Treatment")
STRATUM = Column("stratum", "Stratum")
FORAGE_CLASS = Column("forage_class", "Forage class")
STATE = Column("state", "State")
SOURCE = Column("source", "Source")
PROVENANCE = Column("provenance", "Provenance")


def table(
    frame: pd.DataFrame,
    columns: list[Column],
    *,
    flag: pd.Series | None = None,
    footer: list[str] | None = None,
) -> dict:
    """A table as plain strings for the template: headers, rows (with a flag), alignment."""
    present = [column for column in columns if column.name in frame.columns]
    flags = [False] * len(frame) if flag is None else [bool(value) for value in flag]
    rows = [
        {"cells": [column.format(value) for column, value in zip(present, row)], "flag": marked}
        for row, marked in zip(frame[[c.name for c in present]].itertuples(index=False), flags)
    ]
    return {
        "headers": [column.header for column in present],
        "numeric": [column.numeric for column in present],
        "rows": rows,
        "footer": footer,
    }


TALL_FIGURE_IN = 7.0
"""Figures taller than this [inches] may fill a printed page; others print at most 85 mm high,
so that two share a page."""


def embedded_figure(figure: Figure, alt: str, name: str) -> dict:
    """``figure`` for the report: its alt text, whether it is tall, and its file name.

    ``name`` is the figure's file name (no extension) in the output's ``figures/`` folder;
    the figure itself is kept under ``"figure"``. ``"src"`` (the base64 PNG data URI) is
    filled by :func:`render_embedded` once every figure of the report is built.
    """
    return {
        "src": None,
        "alt": alt,
        "tall": bool(figure.get_figheight() > TALL_FIGURE_IN),
        "name": name,
        "figure": figure,
    }


def render_embedded(parts: list[dict], *, print_files: bool) -> dict[str, Future]:
    """Fill each :func:`embedded_figure` part's ``"src"``; return the print PNGs by name.

    Without ``print_files`` each figure is drawn at the report's resolution only and nothing
    is returned. With them each figure is drawn once, at the print resolution, and a
    background thread encodes, figure after figure, the report's image reduced from that
    drawing (:func:`figures.screen_png`) and the print PNG (:func:`figures.print_png`),
    while the next figure is drawn; at most two drawings are held (the one being encoded and
    the one just drawn: about 16 MB each for a 7-inch map at 300 dpi). The print PNGs are
    returned as futures for the figure files.
    """
    if not print_files:
        for part in parts:
            part["src"] = _data_uri(figures.figure_png(part["figure"]))
        return {}
    encoder = ThreadPoolExecutor(max_workers=1, thread_name_prefix="png")
    screens, printed, pending = [], {}, None
    for part in parts:
        image = figures.figure_pixels(part["figure"])
        if pending is not None:
            pending.result()  # the previous drawing is let go before this one is queued
        screens.append(encoder.submit(figures.screen_png, image))
        pending = printed[part["name"]] = encoder.submit(figures.print_png, image)
        del image  # the encoder's tasks hold the drawing until they are done
    encoder.shutdown(wait=False)
    for part, screen in zip(parts, screens, strict=True):
        part["src"] = _data_uri(screen.result())
    return printed


def _data_uri(png: bytes) -> str:
    return "data:image/png;base64," + base64.b64encode(png).decode("ascii")
