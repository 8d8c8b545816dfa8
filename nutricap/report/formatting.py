"""Formatting for the HTML report: values to cell text, tables to rows, figures to data URIs.

The helpers turn what a report section is handed into plain strings for the Jinja2
template (:mod:`nutricap.report.html`); they compute nothing.
"""

from __future__ import annotations

import base64
from collections import deque
from collections.abc import Callable, Sequence
from concurrent.futures import Future, ThreadPoolExecutor
from contextlib import nullcontext
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd

from nutricap.report import figures
from nutricap.report.figure_process import (
    DrawnFigure,
    FigureProcess,
    draw_files,
    plain_collections,
)

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


MIN_FIGURES_FOR_PROCESS = 3
"""With figure files and at least this many figures, a second process draws some of them
(:mod:`nutricap.report.figure_process`); with fewer, starting it costs more than it saves."""


@dataclass(frozen=True)
class FigureFiles:
    """A figure's print PNG (bytes, being encoded) and its SVG when it was drawn already
    (None: the figure files' writer draws it)."""

    png: Future
    svg: bytes | None = None


def render_embedded(
    parts: list[dict],
    *,
    print_files: bool,
    process: FigureProcess | None = None,
    ahead: Sequence[tuple[dict, Future]] = (),
) -> dict[str, FigureFiles]:
    """Fill each :func:`embedded_figure` part's ``"src"``; return the figure files by name.

    Without ``print_files`` each figure is drawn at the report's resolution only and nothing
    is returned. With them each figure is drawn once, at the print resolution: here, where a
    background thread encodes the report's image reduced from that drawing
    (:func:`figures.screen_png`) and the print PNG (:func:`figures.print_png`) while the next
    figure is drawn (at most two drawings held: about 16 MB each for a 7-inch map at
    300 dpi); and, from :data:`MIN_FIGURES_FOR_PROCESS` figures on, also in a second process
    (``process``, started by the caller ahead of the report; None: started here), which takes
    figures from the end of the list while this one takes them from the start. The SVGs of
    the figures drawn here are drawn once this one's share is done, while the second process
    finishes its own. ``ahead``: parts handed to ``process`` already, while the report was
    being built (:func:`hand_ahead`), with their drawings to come.
    """
    if not print_files:
        for part in parts:
            part["src"] = _data_uri(figures.figure_png(part["figure"]))
        return {}
    handed = list(ahead)
    queue = deque(part for part in parts if all(part is not early for early, _ in ahead))
    here: dict[str, tuple[Future, Future]] = {}
    svgs: dict[str, bytes] = {}
    if len(parts) < MIN_FIGURES_FOR_PROCESS:
        second = nullcontext()
    else:
        second = nullcontext(process) if process is not None else FigureProcess()
    with ThreadPoolExecutor(max_workers=1, thread_name_prefix="png") as encoder:
        with second as other:
            pending = None
            while queue:
                if other is not None and (not handed or handed[-1][1].done()):
                    future = other.draw(queue[-1]["figure"])
                    if future is not None:
                        handed.append((queue.pop(), future))
                        continue
                    other = None  # it cannot take figures: draw the rest here
                part = queue.popleft()
                plain_collections(part["figure"])
                image = figures.figure_pixels(part["figure"])
                if pending is not None:
                    pending.result()  # the previous drawing is let go before this one is queued
                screen = encoder.submit(figures.screen_png, image)
                pending = encoder.submit(figures.print_png, image)
                here[part["name"]] = (screen, pending)
                del image  # the encoder's tasks hold the drawing until they are done
            for part in parts:
                if part["name"] in here:
                    svgs[part["name"]] = figures.figure_svg(part["figure"])
            drawn = {part["name"]: _drawn_elsewhere(part, future) for part, future in handed}
    files = {}
    for part in parts:
        name = part["name"]
        if name in drawn:
            part["src"] = _data_uri(drawn[name].screen_png)
            files[name] = FigureFiles(_done(drawn[name].print_png), drawn[name].svg)
        else:
            screen, printed = here[name]
            part["src"] = _data_uri(screen.result())
            files[name] = FigureFiles(printed, svgs[name])
    return files


def hand_ahead(parts: list[dict], process: FigureProcess | None) -> list[tuple[dict, Future]]:
    """Hand the first of ``parts`` (:func:`embedded_figure`) to the second process now, while
    the rest of the report is built, so that it does not wait for the last figure to be built
    before it starts (for :func:`render_embedded`'s ``ahead``); nothing without a process."""
    if process is None or not parts:
        return []
    future = process.draw(parts[0]["figure"])
    return [] if future is None else [(parts[0], future)]


def _drawn_elsewhere(part: dict, future: Future) -> DrawnFigure:
    """The second process's drawing of ``part``'s figure, or the same drawing made here if
    the process failed (the figure was pickled before it was handed over, and is unchanged)."""
    try:
        return future.result()
    except Exception:  # noqa: BLE001 - a broken process, or a figure that did not unpickle
        return draw_files(part["figure"])


def _done(value: Any) -> Future:
    future: Future = Future()
    future.set_result(value)
    return future


def _data_uri(png: bytes) -> str:
    return "data:image/png;base64," + base64.b64encode(png).decode("ascii")
