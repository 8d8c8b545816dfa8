"""Tests of the report's figures: maps (nutricap.report.maps), charts (nutricap.report.charts),
their rendering and files (nutricap.report.figure_style, nutricap.report.figures).

The frames and arrays are invented for the test: they check that each figure shows what it
is given (values drawn, axis labels, legends, map furniture), not that any capacity is right.
Expected values are computed here from the frames with numpy, pandas, shapely or pyproj.
"""

from __future__ import annotations

import struct
import xml.etree.ElementTree as ElementTree

import geopandas as gpd
import numpy as np
import pandas as pd
import pytest
from affine import Affine
from matplotlib.container import ErrorbarContainer
from pyproj import CRS
from shapely.geometry import box
from test_report import invented_scenario, invented_sensitivity, png_size

from nutricap.landscape.grid.overview import OverviewMap
from nutricap.report import figures
from nutricap.report.figure_style import PAD_IN

UTM = "EPSG:32612"


def check_png(figure) -> None:
    data = figures.figure_png(figure)
    width, height = png_size(data)
    assert width > 100 and height > 100


def legend_texts(ax) -> list[str]:
    return [text.get_text() for text in ax.get_legend().get_texts()]


def two_units(crs: str = UTM) -> gpd.GeoDataFrame:
    """Two 1 km squares, one above the other (invented for the test)."""
    return gpd.GeoDataFrame(
        {"unit_id": ["North", "South"]},
        geometry=[box(0, 1000, 1000, 2000), box(0, 0, 1000, 1000)],
        crs=crs,
    )


def invented_overview(crs: str = UTM) -> OverviewMap:
    """A 4 × 2 map of 500 m blocks over the two units, one block NaN (invented for the test)."""
    values = np.array([[1.0, 2.0], [3.0, np.nan], [5.0, 6.0], [7.0, 8.0]])
    return OverviewMap(
        "removed_snow", "Forage removed by snow", "kg per ha", values,
        Affine(500.0, 0.0, 0.0, 0.0, -500.0, 2000.0), CRS(crs),
    )  # fmt: skip


def invented_treatments() -> list[tuple[str, gpd.GeoDataFrame]]:
    layer = gpd.GeoDataFrame(
        {"treatment": ["thinning", "burn"], "year": [2027, 2029]},
        geometry=[box(100, 1100, 600, 1600), box(200, 200, 700, 500)],
        crs=UTM,
    )
    return [("both", layer), ("thin only", layer.iloc[:1])]


# --- map furniture on every map ------------------------------------------------------------


def panel_texts(ax) -> list[list[str]]:
    """The texts of each furniture panel (offset box anchored to the map) of ``ax``."""
    from matplotlib.offsetbox import AnchoredOffsetbox
    from matplotlib.text import Text

    panels = [artist for artist in ax.artists if isinstance(artist, AnchoredOffsetbox)]
    return [[t.get_text() for t in panel.findobj(Text) if t.get_text()] for panel in panels]


def furniture(figure) -> dict:
    """What a reader uses to read a map: scale-bar text, north arrow, axis labels, legend."""
    from matplotlib.patches import Polygon

    ax = figure.axes[0]
    panels = panel_texts(ax)
    arrows = [
        panel
        for panel in ax.artists
        if any(t.get_text() == "N" for t in panel.findobj(lambda a: hasattr(a, "get_text")))
        and panel.findobj(Polygon)  # the arrow's head
    ]
    lengths = [text for texts in panels for text in texts if text.endswith((" m", " km"))]
    colour_bars = [inset.get_ylabel() for inset in ax.child_axes]  # drawn as map-high insets
    legend = ax.get_legend()
    return {
        "north": len(arrows),
        "scale": lengths,
        "labels": (ax.get_xlabel(), ax.get_ylabel()),
        "legend": colour_bars + ([legend.get_title().get_text()] if legend else []),
    }


MAPS = {
    "ncc density": lambda: figures.ncc_density_map(
        two_units(), pd.DataFrame({"unit_id": ["North", "South"], "ncc_per_km2": [12.0, 30.0]})
    ),
    "raster overview": lambda: figures.overview_map(invented_overview(), two_units()),
    "treatments": lambda: figures.treatment_map(two_units(), invented_treatments()),
}


@pytest.mark.parametrize("name", MAPS)
def test_every_map_carries_its_furniture(name):
    figure = MAPS[name]()
    found = furniture(figure)
    assert found["north"] == 1, "a north arrow"
    # Extent 2 km tall, 1 km wide + 2 % margins each side: 1,040 m across, a quarter of it
    # rounded down to 1, 2 or 5 × 10^k m is 200 m (arithmetic).
    assert found["scale"] == ["200 m"]
    # The CRS's axis names in km; its name as pyproj gives it (not a PROJ string), once.
    assert found["labels"] == (f"Easting [km]\nCRS: {CRS(UTM).name}", "Northing [km]")
    assert found["legend"] and all(words for words in found["legend"])
    check_png(figure)


def test_map_furniture_fits_its_panels_on_a_short_wide_map():
    # Sized by the map's height, the scale bar's text and the north arrow spilled out of
    # their panels on a map ten times as wide as tall: each piece must lie inside its panel.
    from matplotlib.offsetbox import AnchoredOffsetbox

    wide = gpd.GeoDataFrame(
        {"unit_id": ["West", "East"]},
        geometry=[box(0, 0, 5000, 1000), box(5000, 0, 10000, 1000)],
        crs=UTM,
    )
    figure = figures.ncc_density_map(
        wide, pd.DataFrame({"unit_id": ["West", "East"], "ncc_per_km2": [1.0, 2.0]})
    )
    figure.canvas.draw()  # lays the figure out and draws it (not trimmed: one frame)
    renderer = figure.canvas.get_renderer()
    panels = [a for a in figure.axes[0].artists if isinstance(a, AnchoredOffsetbox)]
    assert len(panels) == 2
    map_box = figure.axes[0].get_window_extent(renderer)
    for panel in panels:
        frame = panel.patch.get_window_extent(renderer)
        child = panel.get_child().get_window_extent(renderer)
        assert frame.x0 <= child.x0 and child.x1 <= frame.x1
        assert frame.y0 <= child.y0 and child.y1 <= frame.y1
        assert map_box.y0 <= frame.y0 and frame.y1 <= map_box.y1  # inside the map


def test_map_has_little_margin():
    figure = MAPS["ncc density"]()
    ax = figure.axes[0]
    west, east = ax.get_xlim()
    assert (west, east) == pytest.approx((-20.0, 1020.0))  # 2 % of 1 km each side
    # The rendered file is trimmed to what the figure draws: no band of white around it.
    from io import BytesIO

    from PIL import Image

    pixels = np.asarray(Image.open(BytesIO(figures.figure_png(figure))).convert("L"))
    rows = np.nonzero((pixels < 250).any(axis=1))[0]
    columns = np.nonzero((pixels < 250).any(axis=0))[0]
    margin = PAD_IN * figures.PNG_DPI + 2
    assert rows[0] <= margin and pixels.shape[0] - 1 - rows[-1] <= margin
    assert columns[0] <= margin and pixels.shape[1] - 1 - columns[-1] <= margin


def test_map_without_a_projected_crs_has_no_scale_bar():
    figure = figures.ncc_density_map(
        two_units(crs="EPSG:4326"),
        pd.DataFrame({"unit_id": ["North", "South"], "ncc_per_km2": [1.0, 2.0]}),
    )
    found = furniture(figure)
    assert found["scale"] == [] and found["north"] == 1
    assert "degree" in found["labels"][0] and CRS("EPSG:4326").name in found["labels"][0]


def test_ncc_density_map_names_the_units_and_the_legend_unit():
    figure = MAPS["ncc density"]()
    ax = figure.axes[0]
    names = sorted([t.get_text() for t in ax.texts] + sum(panel_texts(ax), []))
    assert names == ["200 m", "N", "North", "South"]
    assert furniture(figure)["legend"] == ["NCC density [animals/km²]"]


# --- the raster run's coarse maps -------------------------------------------------------------


def test_overview_map_draws_the_values_with_nan_transparent():
    overview = invented_overview()
    figure = figures.overview_map(overview, two_units())
    ax = figure.axes[0]
    (image,) = ax.get_images()
    drawn = image.get_array()
    np.testing.assert_array_equal(drawn.filled(-1.0), np.nan_to_num(overview.values, nan=-1.0))
    assert drawn.mask.tolist() == np.isnan(overview.values).tolist()
    # Extent from the transform: 2 columns × 500 m, 4 rows × 500 m from (0, 2000), north up.
    assert image.get_extent() == [0.0, 1000.0, 0.0, 2000.0]
    assert image.origin == "upper"
    assert image.cmap.get_bad()[3] == 0.0, "NaN blocks are transparent"
    assert image.norm.vmin == 0.0 and image.norm.vmax == 8.0  # from zero to the largest value
    assert furniture(figure)["legend"] == ["Forage removed by snow [kg per ha]"]
    # Unit outlines on top of the image, and the units named.
    outlines = [c for c in ax.collections if c.get_zorder() > image.get_zorder()]
    assert len(outlines) >= 2
    assert {"North", "South"} <= {t.get_text() for t in ax.texts}


def test_overview_map_reprojects_the_unit_outlines():
    # The units in geographic coordinates, the map in UTM: pyproj gives the units' corners.
    from pyproj import Transformer

    to_geographic = Transformer.from_crs(UTM, "EPSG:4326", always_xy=True)
    corners = [to_geographic.transform(x, y) for x, y in ((0, 0), (1000, 2000))]
    (lon0, lat0), (lon1, lat1) = corners
    units = gpd.GeoDataFrame(
        {"unit_id": ["Both"]}, geometry=[box(lon0, lat0, lon1, lat1)], crs="EPSG:4326"
    )
    figure = figures.overview_map(invented_overview(), units)
    west, east = figure.axes[0].get_xlim()
    assert -60 < west < 0 and 1000 < east < 1060  # metres of the map's CRS, not degrees


def test_overview_map_of_nothing_but_nan_still_draws():
    overview = invented_overview()
    empty = OverviewMap(
        overview.key, overview.title, overview.units, np.full((4, 2), np.nan),
        overview.transform, overview.crs,
    )  # fmt: skip
    check_png(figures.overview_map(empty))


# --- the treatments of a compare run ------------------------------------------------------------


def test_treatment_map_draws_each_scenario_and_treatment():
    figure = MAPS["treatments"]()
    ax = figure.axes[0]
    assert legend_texts(ax) == [
        "both: burn, 2029",
        "both: thinning, 2027",
        "thin only: thinning, 2027",
    ]
    handles = ax.get_legend().legend_handles
    colours = [tuple(handle.get_facecolor()[:3]) for handle in handles]
    hatches = [handle.get_hatch() for handle in handles]
    assert colours[0] == colours[1] != colours[2]  # one colour per scenario
    assert hatches[1] == hatches[2] != hatches[0]  # one hatch per treatment type


# --- rendering and files --------------------------------------------------------------------


def test_figure_files_are_300_dpi_png_and_valid_svg(tmp_path):
    shown = {name: make() for name, make in MAPS.items()}
    shown = {name.replace(" ", "_"): figure for name, figure in shown.items()}
    written = figures.write_figures(shown, tmp_path / "figures")
    assert sorted(p.name for p in written) == sorted(
        f"{name}.{ext}" for name in shown for ext in ("png", "svg")
    )
    for name in shown:
        png = (tmp_path / "figures" / f"{name}.png").read_bytes()
        # PNG specification, pHYs chunk: pixels per metre, unit 1 (metre); 300 dpi = 11811 /m.
        at = png.index(b"pHYs")
        x, y, unit = struct.unpack(">IIB", png[at + 4 : at + 13])
        assert (x, y, unit) == (11811, 11811, 1), name
        # SVG 1.1: an svg root element; matplotlib names each axes' group "axes_N".
        root = ElementTree.parse(tmp_path / "figures" / f"{name}.svg").getroot()
        assert root.tag == "{http://www.w3.org/2000/svg}svg" and root.get("viewBox")
        groups = [g.get("id", "") for g in root.iter("{http://www.w3.org/2000/svg}g")]
        assert "axes_1" in groups, name


def test_one_drawing_gives_the_print_and_the_report_images():
    import io

    from PIL import Image

    from nutricap.report.figure_style import PNG_DPI, PRINT_DPI, SCREEN_REDUCTION
    from nutricap.report.formatting import embedded_figure, render_embedded

    figure = MAPS["raster overview"]()
    pixels = np.asarray(figures.figure_pixels(figure))
    # matplotlib's own PNG of the same figure at the same resolution (decoded by Pillow) is
    # the reference: the raw buffer kept must be exactly those pixels.
    reference = np.asarray(Image.open(io.BytesIO(figures.figure_png(figure, dpi=PRINT_DPI))))
    # The map is opaque (white background): kept as RGB, the same colours.
    assert (reference[..., 3] == 255).all()
    reference = reference[..., :3]
    assert pixels.shape == reference.shape and np.array_equal(pixels, reference)
    part = embedded_figure(figure, "alt", "units")
    printed = render_embedded([part], print_files=True)
    screen = np.asarray(Image.open(io.BytesIO(base64_png(part["src"]))))
    print_file = np.asarray(Image.open(io.BytesIO(printed["units"].png.result())))
    assert np.array_equal(print_file, reference)
    # Pillow's reduce keeps a last, partial block: ceil(side / 3) pixels a side.
    rows, columns = (-(-side // SCREEN_REDUCTION) for side in reference.shape[:2])
    assert screen.shape == (rows, columns, 3) and PRINT_DPI // PNG_DPI == SCREEN_REDUCTION
    # Each report pixel of a whole block is the mean of its 3 × 3 print pixels (numpy, to ±1
    # for rounding).
    whole_rows, whole_columns = (side // 3 for side in reference.shape[:2])
    blocks = reference[: whole_rows * 3, : whole_columns * 3].astype(float)
    means = blocks.reshape(whole_rows, 3, whole_columns, 3, 3).mean(axis=(1, 3))
    assert np.abs(screen[:whole_rows, :whole_columns] - means).max() <= 1.0


def test_a_figure_with_transparent_pixels_keeps_its_alpha():
    import io

    from PIL import Image

    from nutricap.report.figure_style import PRINT_DPI

    figure = MAPS["raster overview"]()
    figure.patch.set_alpha(0.0)  # a transparent background: the alpha channel carries it
    image = figures.figure_pixels(figure)
    reference = np.asarray(Image.open(io.BytesIO(figures.figure_png(figure, dpi=PRINT_DPI))))
    assert image.mode == "RGBA" and (reference[..., 3] < 255).any()
    assert np.array_equal(np.asarray(image), reference)


@pytest.mark.parametrize("first_ahead", [False, True], ids=["at the end", "first handed ahead"])
def test_figures_drawn_in_the_second_process_are_the_files_drawn_here(first_ahead):
    # The second process draws pickled figures with the same functions (figure_process): its
    # files must be byte for byte those of drawing the same figures here, and it must have
    # drawn some of them (it takes figures from the end of the list, and the first one when
    # it was handed ahead, while the report was built). A process the caller started ahead is
    # used and left open (the caller closes it).
    from nutricap.report.figure_process import FigureProcess, draw_files
    from nutricap.report.formatting import (
        MIN_FIGURES_FOR_PROCESS,
        embedded_figure,
        hand_ahead,
        render_embedded,
    )

    names = [*MAPS, "ncc density again"]
    assert len(names) >= MIN_FIGURES_FOR_PROCESS
    makers = [*MAPS.values(), MAPS["ncc density"]]
    parts = [embedded_figure(make(), "alt", name) for name, make in zip(names, makers)]
    here = [draw_files(make()) for make in makers]
    with FigureProcess() as process:
        ahead = hand_ahead(parts, process) if first_ahead else []
        assert [part for part, _ in ahead] == parts[:1] if first_ahead else not ahead
        files = render_embedded(parts, print_files=True, process=process, ahead=ahead)
        assert 0 < process.handed < len(names)  # both processes drew figures
        again = process.draw(makers[0]())
        assert again is not None and again.result().svg == here[0].svg
    for part, name, expected in zip(parts, names, here):
        assert base64_png(part["src"]) == expected.screen_png, name
        assert files[name].png.result() == expected.print_png, name
        assert files[name].svg == expected.svg, name


def test_a_run_that_fails_stops_the_figure_process_at_once():
    # Off the grid the figure process starts before the estimate (workflow.runs): when the
    # run fails, its process is stopped, not awaited (it may still be importing), and the
    # run's own error is what comes out.
    from nutricap.report.figure_process import FigureProcess

    with pytest.raises(ValueError, match="the run's own error"):
        with FigureProcess() as process:
            workers = list(process._pool._processes.values())
            assert workers  # the process was started
            raise ValueError("the run's own error")
    for worker in workers:
        worker.join(timeout=10)
        assert not worker.is_alive()
        assert worker.exitcode is not None and worker.exitcode < 0  # terminated (SIGTERM)


def base64_png(uri: str) -> bytes:
    import base64

    prefix = "data:image/png;base64,"
    assert uri.startswith(prefix)
    return base64.b64decode(uri[len(prefix) :])


# --- charts -------------------------------------------------------------------------------------


@pytest.mark.parametrize(
    "extent, length", [(15000.0, 2000.0), (1000.0, 200.0), (4.0, 1.0), (80000.0, 20000.0)]
)
def test_scale_bar_is_a_round_quarter_of_the_extent(extent, length):
    # Arithmetic: the largest 1, 2 or 5 × 10^k not above extent / 4.
    assert figures.scale_bar_length(extent) == length


def capacity_frame(intervals: bool) -> pd.DataFrame:
    frame = pd.DataFrame(
        {
            "unit_id": ["A", "B"],
            "ncc_animals": [100.0, 250.0],
            "ecc_animals": [400.0, 900.0],
            "allowable_use_animals": [200.0, 500.0],
        }
    )
    if intervals:
        for name in ("ncc_animals", "ecc_animals", "allowable_use_animals"):
            frame[f"{name}_lo"] = frame[name] * 0.8
            frame[f"{name}_hi"] = frame[name] * 1.2
    return frame


@pytest.mark.parametrize("intervals", [False, True])
def test_capacity_figure(intervals):
    figure = figures.capacity_figure(capacity_frame(intervals), season_days=120, interval_level=0.9)
    check_png(figure)
    ax = figure.axes[0]
    bars = [c for c in ax.containers if isinstance(c, ErrorbarContainer)]
    assert len(bars) == (3 if intervals else 0)
    assert "[animals" in ax.get_xlabel()
    assert any(("90 % interval" in text) is intervals for text in legend_texts(ax))


def test_capacity_figure_limits_units():
    frame = pd.DataFrame(
        {
            "unit_id": [f"U{i}" for i in range(10)],
            "ncc_animals": np.arange(10.0),
            "ecc_animals": np.arange(10.0) * 4,
            "allowable_use_animals": np.arange(10.0) * 2,
        }
    )
    figure = figures.capacity_figure(frame, max_units=4)
    ticks = [t.get_text() for t in figure.axes[0].get_yticklabels()]
    assert sorted(ticks) == ["U6", "U7", "U8", "U9"]  # the four largest ECC
    assert "4 of 10" in figure.axes[0].get_title()


def test_population_trend_figure_with_ceiling():
    figure = figures.population_trend_figure(
        [2020, 2021, 2022],
        [100, 150, 190],
        [2020, 2021, 2022],
        [105, 145, 185],
        400.0,
        300.0,
        900.0,
    )
    check_png(figure)
    texts = legend_texts(figure.axes[0])
    for label in (
        "K (fitted ceiling): 400",
        "K/2 (maximum sustained yield level): 200",
        "NCC from forage: 300",
        "ECC from forage: 900 (above the chart)",  # 900 > 3 × the largest count, 190
        "Fitted logistic",
    ):
        assert label in texts
    assert figure.axes[0].get_ylabel().endswith("]")
    drawn = [line.get_label() for line in figure.axes[0].lines]
    assert not any(label.startswith("ECC") for label in drawn)  # named, not drawn
    assert figure.axes[0].get_ylim()[1] < 900.0


def test_population_trend_figure_draws_a_line_near_the_counts():
    # ECC 500 is within 3 × the largest count (190 × 3 = 570): drawn as a line.
    figure = figures.population_trend_figure(
        [2020, 2021, 2022], [100, 150, 190], None, None, None, 300.0, 500.0
    )
    drawn = [line.get_label() for line in figure.axes[0].lines]
    assert "ECC from forage: 500" in drawn and "NCC from forage: 300" in drawn


def test_population_trend_figure_without_ceiling():
    figure = figures.population_trend_figure(
        [2020, 2021, 2022], [100, 150, 190], None, None, None, 300.0, None
    )
    ax = figure.axes[0]
    texts = legend_texts(ax)
    assert not any(text.startswith("K") for text in texts)
    assert any("no evidence of a ceiling" in text for text in texts)
    assert "no evidence of a ceiling" in ax.get_title()
    assert len(ax.lines) == 2  # the counts and the NCC line


def test_scenario_figure_total_is_sum_over_units():
    table = invented_scenario(["A", "B", "C"])
    figure = figures.scenario_figure(table)
    ax = figure.axes[0]
    lines = {line.get_label(): line for line in ax.lines}
    expected = table.groupby("year")["ncc_animals_scenario"].sum()
    np.testing.assert_allclose(lines["scenario: spring burn"].get_ydata(), expected.to_numpy())
    np.testing.assert_allclose(lines["baseline"].get_ydata(), 300.0)
    # The change panel under it: the total of the table's change column (invented frame).
    change = figure.axes[1]
    drawn = next(line for line in change.lines if line.get_label() == "scenario: spring burn")
    np.testing.assert_allclose(drawn.get_ydata(), table.groupby("year")["change_animals"].sum())
    check_png(figure)


def test_scenario_figure_small_multiples_show_each_units_change():
    table = invented_scenario(["A", "B", "C", "D"])
    table.loc[table["unit_id"] == "B", "ncc_animals_scenario"] = 100.0  # B unchanged
    figure = figures.scenario_figure(table, per_unit=True)
    assert len(figure.axes) == 2 + 4  # NCC total, its change, one panel per unit
    titles = [ax.get_title() for ax in figure.axes[2:]]
    assert titles == ["NCC change, A", "NCC change, B", "NCC change, C", "NCC change, D"]
    unchanged = figure.axes[3]
    drawn = next(line for line in unchanged.lines if line.get_label() == "scenario: spring burn")
    assert np.all(drawn.get_ydata() == 0.0)
    figure.canvas.draw()
    labels = [label.get_text() for label in unchanged.get_yticklabels() if label.get_text()]
    # A band of ±1 animal around the baseline, ticks written as they are (0.25, not 0.2).
    assert unchanged.get_ylim() == (-1.0, 1.0) and "0" in labels
    assert all(float(text.replace("+", "").replace("−", "-")) in {-1, -0.5, 0, 0.5, 1, -0.75,
               -0.25, 0.25, 0.75} for text in labels), labels  # fmt: skip


def test_scenario_figure_charts_three_capacities_with_treatment_years():
    table = invented_scenario(["A", "B"])
    for stem, factor in (("allowable_use", 2.0), ("ecc", 4.0)):  # invented for the test
        table[f"{stem}_animals_baseline"] = factor * table["ncc_animals_baseline"]
        table[f"{stem}_animals_scenario"] = factor * table["ncc_animals_scenario"]
    figure = figures.scenario_figure(table, treatment_years={"spring burn": [2027]})
    titles = [ax.get_title() for ax in figure.axes]
    assert titles == [
        "NCC, total over units",
        "NCC: change from baseline",
        "Allowable-use capacity, total over units",
        "Allowable-use capacity: change from baseline",
        "ECC, total over units",
        "ECC: change from baseline",
    ]
    figure.canvas.draw()
    for ax in figure.axes:
        if "total" in ax.get_title():  # the totals start at zero (the change panels cannot)
            assert ax.get_ylim()[0] == 0.0
            assert ax.get_ylim()[1] > max(line.get_ydata().max() for line in ax.lines[:2])
        else:
            zero = [line for line in ax.lines if list(line.get_ydata()) == [0, 0]]
            assert len(zero) == 1 and zero[0].get_linestyle() == "--"  # the baseline
        marks = [line for line in ax.lines if list(line.get_xdata()) == [2027, 2027]]
        assert len(marks) == 1 and marks[0].get_linestyle() == ":"
        labels = [label.get_text() for label in ax.get_yticklabels() if label.get_text()]
        assert len(labels) == len(set(labels)), labels


def test_several_scenarios_are_charted_together():
    first = invented_scenario(["A", "B"])
    second = first.assign(scenario="thinning", ncc_animals_scenario=90.0, change_animals=-10.0)
    figure = figures.scenario_figure(
        pd.concat([first, second]), treatment_years={"spring burn": [2027], "thinning": [2029]}
    )
    names = {line.get_label() for line in figure.axes[0].lines}
    assert {"baseline", "scenario: spring burn", "scenario: thinning"} <= names
    change = {line.get_label(): line for line in figure.axes[1].lines}
    np.testing.assert_allclose(change["scenario: thinning"].get_ydata(), -20.0)  # 2 units × -10
    marked = sorted(int(line.get_xdata()[0]) for line in figure.axes[0].lines
                    if line.get_linestyle() == ":" and len(line.get_xdata()) == 2)  # fmt: skip
    assert marked == [2027, 2029]


def test_tick_labels_get_the_decimals_that_keep_them_apart():
    # The case: totals between 127.6 and 128.4 printed as "128, 128, 127".
    figure = figures.new_figure(4.0, 3.0)
    ax = figure.add_subplot()
    ax.plot([0, 1], [127.6, 128.4])
    ax.set_ylim(127.6, 128.4)
    digits = figures.distinct_tick_labels(ax.yaxis)
    figure.canvas.draw()
    labels = [label.get_text() for label in ax.get_yticklabels() if label.get_text()]
    assert digits >= 1 and len(labels) == len(set(labels)) > 2


def test_scenario_figure_needs_its_columns():
    with pytest.raises(ValueError, match="ncc_animals_scenario"):
        figures.scenario_figure(invented_scenario(["A"]).drop(columns="ncc_animals_scenario"))


def test_tornado_sorted_by_range():
    figure = figures.tornado_figure(invented_sensitivity(), change=0.1)
    check_png(figure)
    ax = figure.axes[0]
    top_to_bottom = [t.get_text() for t in ax.get_yticklabels()][::-1]
    assert top_to_bottom == ["diet DE threshold", "intake", "biomass"]  # ranges 1450, 220, 185
    assert legend_texts(ax) == ["input at -10%", "input at +10%"]


def test_tornado_limits_inputs():
    table = pd.DataFrame(
        {
            "input": list("abcdef"),
            "low_change_animals": -np.arange(6.0),
            "high_change_animals": np.arange(6.0),
        }
    )
    figure = figures.tornado_figure(table, max_inputs=3)
    assert sorted(t.get_text() for t in figure.axes[0].get_yticklabels()) == ["d", "e", "f"]
    # "a" moves nothing (0 both ways): counted apart, as not drawn.
    assert figure.axes[0].get_title().endswith("(3 widest of 5; 1 with no effect not drawn)")


def test_tornado_leaves_out_inputs_without_effect():
    table = invented_sensitivity()
    table.loc[len(table)] = ["tannin", 0.0, 0.0]  # an input that changes nothing
    figure = figures.tornado_figure(table)
    names = [t.get_text() for t in figure.axes[0].get_yticklabels()]
    assert "tannin" not in names and len(names) == 3
    assert "1 with no effect not drawn" in figure.axes[0].get_title()
