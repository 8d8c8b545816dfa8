"""The figures of the report, in one place: maps, charts, rendering and the figure files.

The figures themselves are drawn by :mod:`nutricap.report.maps` (units by NCC per km², the
coarse maps of a raster run, the treatments of a compare run) and
:mod:`nutricap.report.charts` (capacity by unit, population trend, scenarios, tornado);
:mod:`nutricap.report.figure_style` holds what they share (palette, resolution, PNG and SVG
rendering). This module gathers their public names and writes the figure files
(:func:`write_figures`).
"""

from __future__ import annotations

from pathlib import Path
from typing import TYPE_CHECKING

from matplotlib.figure import Figure

from nutricap.report.charts import (
    CAPACITY_SERIES,
    MAX_TORNADO_INPUTS,
    MAX_UNITS_CHART,
    SCENARIO_COLUMNS,
    SCENARIO_FIGURES,
    TORNADO_COLUMNS,
    capacity_figure,
    population_trend_figure,
    scenario_figure,
    sort_by_range,
    tornado_figure,
)
from nutricap.report.figure_process import plain_collections
from nutricap.report.figure_style import (
    DENSITY_CMAP,
    OKABE_ITO,
    PNG_DPI,
    PRINT_DPI,
    distinct_tick_labels,
    figure_pixels,
    figure_png,
    figure_svg,
    new_figure,
    print_png,
    screen_png,
    signed_animals,
)
from nutricap.report.maps import (
    MAX_UNITS_LABELLED,
    ncc_density_map,
    overview_map,
    scale_bar_length,
    treatment_map,
)

if TYPE_CHECKING:
    from nutricap.report.formatting import FigureFiles

__all__ = [
    "CAPACITY_SERIES",
    "DENSITY_CMAP",
    "FIGURES_FOLDER",
    "MAX_TORNADO_INPUTS",
    "MAX_UNITS_CHART",
    "MAX_UNITS_LABELLED",
    "OKABE_ITO",
    "PNG_DPI",
    "PRINT_DPI",
    "SCENARIO_COLUMNS",
    "SCENARIO_FIGURES",
    "TORNADO_COLUMNS",
    "capacity_figure",
    "distinct_tick_labels",
    "figure_png",
    "figure_pixels",
    "figure_svg",
    "ncc_density_map",
    "new_figure",
    "overview_map",
    "population_trend_figure",
    "print_png",
    "scale_bar_length",
    "scenario_figure",
    "screen_png",
    "signed_animals",
    "sort_by_range",
    "tornado_figure",
    "treatment_map",
    "write_figures",
]

FIGURES_FOLDER = "figures"
"""Folder of the output holding each figure of the report as PNG and SVG."""


def write_figures(
    shown: dict[str, Figure], folder: Path, drawn: dict[str, FigureFiles] | None = None
) -> list[Path]:
    """Each figure as ``NAME.png`` (:data:`PRINT_DPI` dpi) and ``NAME.svg`` in ``folder``
    (created; normally inside the run's staging folder); returns the files written.

    ``drawn``: figure files being made already, by name (see
    :func:`nutricap.report.formatting.render_embedded`); what they lack is drawn here. The
    SVGs are drawn first, while the print PNGs are encoded.
    """
    drawn = drawn or {}
    folder.mkdir(exist_ok=True)
    written = []
    for name, figure in shown.items():
        plain_collections(figure)  # as every figure drawn with its files (figure_process)
        svg = folder / f"{name}.svg"
        made = drawn.get(name)
        svg.write_bytes(figure_svg(figure) if made is None or made.svg is None else made.svg)
        written.append(svg)
    for name, figure in shown.items():
        png = folder / f"{name}.png"
        made = drawn.get(name)
        png.write_bytes(figure_png(figure, dpi=PRINT_DPI) if made is None else made.png.result())
        written.append(png)
    return written
