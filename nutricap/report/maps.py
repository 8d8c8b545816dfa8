"""The report's maps: units shaded by NCC per km², coarse maps of a raster run, treatments.

Every map carries the same furniture (:func:`finish_map`): axes in km (or the CRS's own
units) named after the CRS, a scale bar (projected CRS in metres), a grid-north arrow, a
legend or colour bar with units, and little margin around the layers' extent. The maps draw
what they are handed; nothing here computes capacity.
"""

from __future__ import annotations

import math
import textwrap
from collections.abc import Sequence

import geopandas as gpd
import numpy as np
import pandas as pd
from matplotlib import patheffects
from matplotlib.cm import ScalarMappable
from matplotlib.colors import Normalize
from matplotlib.figure import Figure
from matplotlib.lines import Line2D
from matplotlib.offsetbox import AnchoredOffsetbox, AuxTransformBox, DrawingArea, TextArea, VPacker
from matplotlib.patches import Patch, Polygon, Rectangle
from matplotlib.text import Text
from matplotlib.ticker import FuncFormatter

from nutricap.report.figure_style import (
    DENSITY_CMAP,
    PRINT_DPI,
    kilometres,
    label,
    new_figure,
    scenario_colour,
)

#: Width of every map figure [inches]; the height follows the layers' extent.
MAP_WIDTH_IN = 7.0
#: Unit names are written on a map of at most this many units.
MAX_UNITS_LABELLED = 30
#: Margin around the layers' extent [share of the extent].
MAP_MARGIN = 0.02
#: Longest line of the CRS's name under a map's x axis [characters].
CRS_NAME_CHARS = 64
#: Polygons are drawn simplified to this share of a print pixel (:func:`drawn_shapes`).
SIMPLIFY_PIXELS = 0.25

_HALO = [patheffects.withStroke(linewidth=3, foreground="white")]
_METRES = ("metre", "meter")


def map_figure(bounds: Sequence[float]) -> tuple[Figure, object]:
    """A figure sized to ``bounds`` (west, south, east, north) and its one map axes."""
    figure = new_figure(*map_size_in(bounds))
    ax = figure.add_subplot()
    ax.set_aspect("equal")
    return figure, ax


def map_size_in(bounds: Sequence[float]) -> tuple[float, float]:
    """Figure size [inches] that fits the layers' extent (map, colour bar and labels)."""
    width, height = float(bounds[2] - bounds[0]), float(bounds[3] - bounds[1])
    aspect = height / width if width > 0 and math.isfinite(height / width) else 0.8
    return MAP_WIDTH_IN, float(np.clip(1.3 + 0.78 * MAP_WIDTH_IN * aspect, 3.0, 9.0))


def drawn_shapes(frame: gpd.GeoDataFrame) -> gpd.GeoDataFrame:
    """``frame`` with its geometries simplified to :data:`SIMPLIFY_PIXELS` of a pixel of the
    map's print file (:data:`PRINT_DPI`, :data:`MAP_WIDTH_IN` wide: a tolerance in the
    frame's own CRS units; Douglas–Peucker, each geometry kept valid).

    Units are densified every 100 m before they are reprojected (landscape.vectors), so a
    map of a large landscape would otherwise draw vertices no print can show: the 2,000 units
    of a 1e9-cell benchmark have about 1.7 million, held again by every map and written out
    in every SVG.
    """
    if frame.empty:
        return frame
    west, south, east, north = frame.total_bounds
    extent = max(east - west, north - south)
    tolerance = SIMPLIFY_PIXELS * extent / (MAP_WIDTH_IN * PRINT_DPI)
    if not (math.isfinite(tolerance) and tolerance > 0):
        return frame
    return frame.set_geometry(frame.geometry.simplify(tolerance, preserve_topology=True))


def finish_map(ax, crs, bounds: Sequence[float], title: str) -> None:
    """Extent (``bounds`` plus :data:`MAP_MARGIN`), axes named after ``crs``, scale bar,
    north arrow and ``title``: the furniture every map of the report carries."""
    west, south, east, north = (float(value) for value in bounds)
    pad_x, pad_y = MAP_MARGIN * (east - west), MAP_MARGIN * (north - south)
    ax.set_xlim(west - pad_x, east + pad_x)
    ax.set_ylim(south - pad_y, north + pad_y)
    map_axes(ax, crs)
    map_furniture(ax, crs)
    ax.set_title(title)


def colour_bar(figure: Figure, ax, norm: Normalize, cmap, words: str):
    """A colour bar as tall as the map, to its right, labelled ``words`` (name and units)."""
    cax = ax.inset_axes([1.03, 0.0, 0.035, 1.0])
    bar = figure.colorbar(ScalarMappable(norm=norm, cmap=cmap), cax=cax)
    bar.set_label(words)
    return bar


def scale_bar_length(extent: float) -> float:
    """A round length (1, 2 or 5 × 10^k) close to a quarter of ``extent`` [same unit]."""
    if not (extent > 0 and math.isfinite(extent)):
        return 0.0
    target = extent / 4.0
    power = 10.0 ** math.floor(math.log10(target))
    return max(step * power for step in (1.0, 2.0, 5.0) if step * power <= target)


def in_metres(crs) -> bool:
    """Whether ``crs`` is projected with its first axis in metres (a scale bar can be drawn)."""
    return crs is not None and crs.is_projected and crs.axis_info[0].unit_name in _METRES


def map_furniture(ax, crs) -> None:
    """A scale bar (projected CRS in metres) and a grid-north arrow, each on a white panel.

    Both are offset boxes anchored to the map's corners, sized in points: they keep their
    size and fit their panels on a map of any shape (sized by the map's height, they spilled
    out of their panels on a short, wide map); on a very short map the arrow is smaller, with
    the "N" beside it."""
    x0, x1 = ax.get_xlim()
    y0, y1 = ax.get_ylim()
    if in_metres(crs):
        ax.add_artist(_furniture_panel(_scale_bar(ax, scale_bar_length(x1 - x0), x1 - x0), 3))
    map_height_pt = MAP_AXES_WIDTH_PT * (y1 - y0) / (x1 - x0) if x1 > x0 else np.inf
    ax.add_artist(_furniture_panel(_north_arrow(NORTH_ARROW_SHARE * map_height_pt), 1))


#: Thickness of the scale bar [share of the map's width: about 3 points on a map
#: MAP_WIDTH_IN wide; a length on the map, as the bar's own length is].
SCALE_BAR_THICKNESS = 0.008
#: Width of a map's axes, about (the figure less its colour bar and labels) [points].
MAP_AXES_WIDTH_PT = 0.75 * MAP_WIDTH_IN * 72.0
#: The north arrow is at most this share of the map's height [-] ...
NORTH_ARROW_SHARE = 0.5
#: ... and 16 to 28 points tall; below 24 points the "N" stands beside it.
NORTH_ARROW_PT = (16.0, 28.0, 24.0)


def _scale_bar(ax, length: float, width: float) -> VPacker:
    """A two-tone bar of ``length`` [m] (the map's scale) with its length written above it;
    ``width``: the map's width [m]."""
    bar = AuxTransformBox(ax.transData)
    thickness = SCALE_BAR_THICKNESS * width
    for index in range(2):  # two halves, black and white, as on a printed map
        bar.add_artist(
            Rectangle(
                (index * length / 2.0, 0.0),
                length / 2.0,
                thickness,
                facecolor=("black", "white")[index],
                edgecolor="black",
                linewidth=0.8,
            )
        )
    words = f"{length / 1000:g} km" if length >= 1000 else f"{length:g} m"
    text = TextArea(words, textprops={"fontsize": 8})
    return VPacker(children=[text, bar], align="center", pad=0, sep=2)


def _north_arrow(largest_pt: float) -> DrawingArea:
    """A filled arrow pointing up (grid north) with a bold "N" under it, or beside it when
    the arrow is short; at most ``largest_pt`` tall (within :data:`NORTH_ARROW_PT`)."""
    shortest, tallest, stacked = NORTH_ARROW_PT
    height = float(np.clip(largest_pt, shortest, tallest))
    beside = height < stacked
    width = 22.0 if beside else 12.0
    middle = 5.0 if beside else width / 2.0
    foot = 0.0 if beside else 11.0  # the shaft starts above the "N" when it stands under it
    drawing = DrawingArea(width, height)
    drawing.add_artist(Line2D([middle, middle], [foot, height - 5.0], color="black", lw=1.5))
    head = [(middle - 4.0, height - 8.0), (middle, height), (middle + 4.0, height - 8.0)]
    drawing.add_artist(Polygon(head, closed=True, facecolor="black", edgecolor="black"))
    letter = (16.0, height / 2.0, "center") if beside else (middle, 0.0, "baseline")
    drawing.add_artist(
        Text(letter[0], letter[1], "N", ha="center", va=letter[2], fontsize=10, fontweight="bold")
    )
    return drawing


def _furniture_panel(child, corner: int) -> AnchoredOffsetbox:
    """``child`` on a white, slightly transparent panel in the map's ``corner`` (a legend
    location code: 1 upper right, 3 lower left)."""
    panel = AnchoredOffsetbox(loc=corner, child=child, pad=0.35, borderpad=0.6, frameon=True)
    panel.patch.set(facecolor="white", edgecolor="#888888", linewidth=0.5, alpha=0.92)
    panel.set_zorder(6)
    return panel


def map_axes(ax, crs) -> None:
    """Axis labels with the CRS's axis names and units (metres shown as km), and the CRS's
    name once, under the x axis's label (wrapped at :data:`CRS_NAME_CHARS`: a long name
    beside the y axis of a wide, short map would stand out above and below it)."""
    if crs is None:
        ax.set_xlabel("x [map units; layer has no CRS]")
        ax.set_ylabel("y [map units; layer has no CRS]")
        return
    name = crs.name if crs.name and crs.name != "unknown" else crs.to_string()
    by_direction = {info.direction.lower(): info for info in crs.axis_info}
    pairs = (
        (ax.xaxis, by_direction.get("east"), "Easting"),
        (ax.yaxis, by_direction.get("north"), "Northing"),
    )
    for axis, info, fallback in pairs:
        axis_name = info.name if info is not None else fallback
        unit = info.unit_name if info is not None else "map units"
        if unit in _METRES:
            axis.set_major_formatter(FuncFormatter(kilometres))
            unit = "km"
        axis.set_label_text(f"{axis_name} [{unit}]")
    crs_lines = "\n".join(textwrap.wrap(f"CRS: {name}", CRS_NAME_CHARS))
    ax.xaxis.set_label_text(f"{ax.xaxis.get_label_text()}\n{crs_lines}")


def value_norm(values: np.ndarray, *, from_zero: bool = False) -> Normalize:
    """Colour scale over the finite ``values`` (from 0 when asked and none is negative)."""
    finite = values[np.isfinite(values)]
    if finite.size == 0:
        return Normalize(0.0, 1.0)
    low, high = float(finite.min()), float(finite.max())
    low = 0.0 if from_zero and low >= 0 else low
    return Normalize(low, high if high > low else low + 1.0)


def label_units(ax, frame: gpd.GeoDataFrame) -> None:
    """Write each unit's id at a point inside it (at most :data:`MAX_UNITS_LABELLED` units)."""
    if len(frame) > MAX_UNITS_LABELLED:
        return
    for unit_id, point in zip(frame["unit_id"], frame.geometry.representative_point()):
        if point is None or point.is_empty:
            continue
        ax.annotate(
            label(unit_id),
            (point.x, point.y),
            ha="center",
            va="center",
            fontsize=8,
            path_effects=_HALO,
            zorder=4,
        )


def unit_outlines(ax, units: gpd.GeoDataFrame) -> None:
    """The units' boundaries, dark under white, visible on any colour."""
    for colour, width in (("#222222", 1.8), ("white", 0.8)):
        units.boundary.plot(ax=ax, color=colour, linewidth=width, zorder=3)


# --- units shaded by NCC per km² --------------------------------------------------------------


def ncc_density_map(units: gpd.GeoDataFrame, by_unit: pd.DataFrame) -> Figure:
    """Map of the management units shaded by NCC density.

    Parameters
    ----------
    units : geopandas.GeoDataFrame
        Unit polygons with ``unit_id`` (the estimate's ``units``, in the area CRS).
    by_unit : pandas.DataFrame
        Per-unit table with ``unit_id`` and ``ncc_per_km2`` [animals/km²].

    Returns
    -------
    matplotlib.figure.Figure
        Units filled on the ``cividis`` scale with a colour bar in animals/km²; units without
        a value are hatched grey; unit names are written when there are at most
        :data:`MAX_UNITS_LABELLED` units.
    """
    shapes = units[["unit_id", "geometry"]].merge(
        by_unit[["unit_id", "ncc_per_km2"]], on="unit_id", how="left"
    )
    frame = drawn_shapes(gpd.GeoDataFrame(shapes, geometry="geometry", crs=units.crs))
    bounds = frame.total_bounds
    figure, ax = map_figure(bounds)
    norm = value_norm(frame["ncc_per_km2"].to_numpy(dtype=float))
    frame.plot(
        column="ncc_per_km2",
        cmap=DENSITY_CMAP,
        norm=norm,
        ax=ax,
        edgecolor="white",
        linewidth=0.8,
        missing_kwds={"color": "#d9d9d9", "hatch": "///", "label": "no value"},
    )
    colour_bar(figure, ax, norm, DENSITY_CMAP, "NCC density [animals/km²]")
    label_units(ax, frame)
    finish_map(ax, frame.crs, bounds, "Nutritional carrying capacity per km² by unit")
    return figure


# --- a coarse map of a raster run --------------------------------------------------------------


def overview_map(overview, units: gpd.GeoDataFrame | None = None) -> Figure:
    """One coarse map of a raster run (capacity density, what a rule removed) as an image.

    Parameters
    ----------
    overview : nutricap.landscape.grid.overview.OverviewMap
        ``title``, ``units`` (of the values), ``values`` (2-D, NaN outside the units),
        ``transform`` and ``crs`` of the coarse grid.
    units : geopandas.GeoDataFrame, optional
        Unit polygons with ``unit_id``, outlined (and named) on top, in any CRS.

    Returns
    -------
    matplotlib.figure.Figure
        The values on the ``cividis`` scale (from zero when none is negative), blocks with
        NaN left transparent, a colour bar in the map's units, and the map furniture.
    """
    values = np.asarray(overview.values, dtype=float)
    west, south, east, north = overview.bounds()
    outlines = None
    if units is not None and len(units):
        outlines = drawn_shapes(units)
        outlines = outlines if units.crs is None else outlines.to_crs(overview.crs)
    bounds = _union_bounds((west, south, east, north), outlines)
    figure, ax = map_figure(bounds)
    norm = value_norm(values, from_zero=True)
    cmap = _transparent_nan(DENSITY_CMAP)
    ax.imshow(
        np.ma.masked_invalid(values),
        cmap=cmap,
        norm=norm,
        extent=(west, east, south, north),
        origin="upper" if overview.transform.e < 0 else "lower",
        interpolation="nearest",
        zorder=1,
    )
    words = f"{overview.title} [{overview.units}]"
    colour_bar(figure, ax, norm, cmap, words if len(words) <= 48 else f"[{overview.units}]")
    if outlines is not None:
        unit_outlines(ax, outlines)
        label_units(ax, outlines)
    finish_map(ax, overview.crs, bounds, overview.title)
    return figure


def _transparent_nan(name: str):
    from matplotlib import colormaps

    return colormaps[name].with_extremes(bad=(0.0, 0.0, 0.0, 0.0))


def _union_bounds(bounds: Sequence[float], frame: gpd.GeoDataFrame | None) -> np.ndarray:
    """(west, south, east, north) covering ``bounds`` and ``frame``'s extent."""
    if frame is None or frame.empty:
        return np.asarray(bounds, dtype=float)
    other = frame.total_bounds
    return np.array(
        [
            min(bounds[0], other[0]),
            min(bounds[1], other[1]),
            max(bounds[2], other[2]),
            max(bounds[3], other[3]),
        ]
    )


# --- the treatments of a compare run -----------------------------------------------------------

_HATCHES = ("//", "\\\\", "xx", "..", "oo", "++")


def treatment_map(units: gpd.GeoDataFrame, treatments: Sequence[tuple[str, gpd.GeoDataFrame]]):
    """Map of the treatment polygons of each scenario over the management units.

    Parameters
    ----------
    units : geopandas.GeoDataFrame
        Unit polygons with ``unit_id``.
    treatments : sequence of (str, geopandas.GeoDataFrame)
        Each scenario's name and its treatment polygons with ``treatment`` and ``year``
        (in any CRS; drawn in the units' CRS).

    Returns
    -------
    matplotlib.figure.Figure
        Units in light grey with their names; each scenario's polygons in its colour, one
        hatch per treatment type; a legend of scenario, treatment and year(s); map furniture.
    """
    units = drawn_shapes(units)
    drawn = [(name, drawn_shapes(_in_crs(layer, units.crs))) for name, layer in treatments]
    bounds = _union_bounds(units.total_bounds, pd.concat([layer for _n, layer in drawn]))
    figure, ax = map_figure(bounds)
    units.plot(ax=ax, color="#eeeeee", edgecolor="#444444", linewidth=0.8, zorder=1)
    label_units(ax, units)
    hatches = {}
    handles = []
    for index, (name, layer) in enumerate(drawn):
        colour = scenario_colour(index)
        for treatment, polygons in layer.groupby("treatment", sort=True):
            hatch = hatches.setdefault(treatment, _HATCHES[len(hatches) % len(_HATCHES)])
            style = {"facecolor": colour, "edgecolor": "black", "hatch": hatch, "alpha": 0.75}
            polygons.plot(ax=ax, linewidth=0.6, zorder=2, **style)
            years = ", ".join(str(int(year)) for year in sorted(set(polygons["year"])))
            words = f"{label(name)}: {label(treatment)}, {years}"
            handles.append(Patch(linewidth=0.6, label=words, **style))
    finish_map(ax, units.crs, bounds, "Treatments of the scenarios over the management units")
    ax.legend(
        handles=handles,
        title="Scenario: treatment, year",
        loc="upper left",  # beside the map: below it, it covered the axis label and CRS
        bbox_to_anchor=(1.02, 1.0),
        fontsize=8,
        title_fontsize=8,
        framealpha=0.95,
    )
    return figure


def _in_crs(layer: gpd.GeoDataFrame, crs) -> gpd.GeoDataFrame:
    if crs is None or layer.crs is None:
        return layer
    return layer.to_crs(crs)
