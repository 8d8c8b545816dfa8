"""The report's maps and the sections around them: the raster run's coarse maps, the
treatment map and tables of a compare run, and the trend section's counted units.

Coarse maps are built in the test from arrays (invented for the test), not by the grid
passes. The compare report is that of the example project (inputs invented for the
example); its treated hectares are checked against shapely's overlay of the layers.
"""

from __future__ import annotations

import dataclasses
import re

import geopandas as gpd
import numpy as np
import pandas as pd
import pytest
from affine import Affine
from pyproj import CRS
from test_report import manifest, parse, project, raster_estimate, raster_project  # noqa: F401

from nutricap.cli import main
from nutricap.inputs.project import load_project
from nutricap.landscape.grid.overview import OverviewMap
from nutricap.report.html import ReportExtras, report_parts


def section(html: str, name: str) -> str:
    return re.search(rf'<section id="{name}">(.*?)</section>', html, re.DOTALL).group(1)


# --- raster run: every coarse map the passes hand over ---------------------------------------


def invented_maps(estimate) -> list[OverviewMap]:
    """Two coarse maps over the raster run's grid extent (values invented for the test)."""
    grid = estimate.grid.grid
    west, north = grid.transform.c, grid.transform.f
    block = 500.0
    rows = int(np.ceil(grid.height * abs(grid.transform.e) / block))
    cols = int(np.ceil(grid.width * grid.transform.a / block))
    values = np.arange(rows * cols, dtype=float).reshape(rows, cols)
    values[0, 0] = np.nan
    transform = Affine(block, 0.0, west, 0.0, -block, north)
    crs = CRS.from_wkt(grid.crs.to_wkt())
    return [
        OverviewMap("capacity_density", "Capacity density", "animal-days per ha", values,
                    transform, crs),
        OverviewMap("removed_snow", "Forage removed by snow burial", "kg per ha", values / 2,
                    transform, crs),
    ]  # fmt: skip


def test_raster_section_shows_every_coarse_map(raster_estimate, raster_project, manifest):  # noqa: F811
    maps = invented_maps(raster_estimate)
    grid = dataclasses.replace(raster_estimate.grid, overview_maps=maps)
    estimate = dataclasses.replace(raster_estimate, grid=grid)
    html, shown, _ = report_parts(estimate, project=raster_project, manifest=manifest)
    raster = section(html, "raster")
    assert raster.count("<img ") == 2
    rows, cols = maps[0].values.shape
    for overview in maps:
        caption = (
            f"{overview.title} [{overview.units}], on {cols:,} × {rows:,} blocks of 500 × 500 m"
        )
        assert caption in raster
        assert f"raster_{overview.key}" in shown  # written as figures/raster_KEY.png and .svg
    assert len(shown) == html.count("<img ")


def test_raster_section_without_coarse_maps(raster_estimate, raster_project, manifest):  # noqa: F811
    assert raster_estimate.grid.overview_maps  # the passes hand over maps ...
    grid = dataclasses.replace(raster_estimate.grid, overview_maps=[])  # ... a run may have none
    estimate = dataclasses.replace(raster_estimate, grid=grid)
    html, shown, _ = report_parts(estimate, project=raster_project, manifest=manifest)
    assert "<img " not in section(html, "raster")
    assert not [name for name in shown if name.startswith("raster_")]


# --- compare run: the treatments on a map, in a table, with their responses -----------------


@pytest.fixture(scope="module")
def compared(example_project, tmp_path_factory):
    out = tmp_path_factory.mktemp("compare") / "both"
    argv = ["compare", str(example_project), "--scenario", "juniper_thinning"]
    assert main([*argv, "--scenario", "prescribed_burn", "--out", str(out), "--quiet"]) == 0
    return out


def test_compare_report_maps_the_treatments(compared):
    html = (compared / "report.html").read_text(encoding="utf-8")
    scenario = section(html, "scenario")
    assert 'alt="Map of the treatment polygons of each scenario' in scenario
    for name in ("scenario_treatments_map", "scenario_by_year"):
        assert (compared / "figures" / f"{name}.png").is_file()
        assert (compared / "figures" / f"{name}.svg").is_file()
    # The chart says which y axes start at zero and which do not.
    assert "Top row: y axes start at zero" in scenario and "do not start at zero" in scenario


def test_compare_report_gives_treated_hectares_per_unit(compared, example_project):
    html = (compared / "report.html").read_text(encoding="utf-8")
    body = re.search(
        r"<caption>Treated land by scenario.*?<tbody>(.*?)</tbody>",
        section(html, "scenario"),
        re.DOTALL,
    ).group(1)
    rows = [re.findall(r"<td[^>]*>(.*?)</td>", row) for row in re.findall(r"<tr>(.*?)</tr>", body)]
    shown = pd.DataFrame(
        rows, columns=["scenario", "treatment", "year", "unit_id", "stratum", "new", "ha"]
    )
    shown["ha"] = shown["ha"].str.replace(",", "").astype(float)
    by_unit = shown.groupby(["scenario", "unit_id"])["ha"].sum()
    # shapely's overlay of each treatment layer with the units, areas in the units' projected
    # CRS (example_landscape: EPSG:32612, every hectare of a unit accessible).
    folder = example_project.parent
    units = gpd.read_file(folder / "units.gpkg")
    config = load_project(example_project).config
    for name in ("juniper_thinning", "prescribed_burn"):
        layer = gpd.read_file(folder / config.scenarios[name].treatments).to_crs(units.crs)
        pieces = gpd.overlay(layer, units[["unit_id", "geometry"]], how="intersection")
        expected = pieces.assign(ha=pieces.area / 1e4).groupby("unit_id")["ha"].sum()
        for unit, hectares in expected.items():
            assert by_unit[(name, unit)] == pytest.approx(hectares, abs=0.05 * len(shown)), unit


# --- trend: the units the counts cover --------------------------------------------------------


def test_trend_section_compares_counts_with_the_counted_units(
    example_estimate,
    project,  # noqa: F811
    manifest,  # noqa: F811
    tmp_path,
):
    from nutricap.inputs.counts import read_counts
    from nutricap.workflow import counts_trend

    by_unit = example_estimate.by_unit
    two = by_unit["unit_id"].tolist()[:2]
    rows = [  # counts of two units and of an id that is no unit (invented for the test)
        {"unit_id": unit, "year": year, "count": 100 + 10 * index + year - 2015}
        for index, unit in enumerate([*two, "Nowhere"])
        for year in range(2015, 2021)
    ]
    path = tmp_path / "counts.csv"
    pd.DataFrame(rows).to_csv(path, index=False)
    trend = counts_trend(project, read_counts(path), lambda message: None, by_unit)
    extras = ReportExtras(trend=trend, interval_level=0.9)
    html, shown, _ = report_parts(
        example_estimate, project=project, manifest=manifest, extras=extras
    )
    text = parse(section(html, "trend")).plain_text
    assert f"the 2 counted units ({', '.join(two)})" in text
    assert "Nowhere" in text and "match no management unit" in text
    # The chart's NCC and ECC: the sums over the two counted units (pandas), as lines or, far
    # above these counts, named in the legend.
    ax = shown["population_trend"].axes[0]
    lines = {line.get_label().split(":")[0]: line for line in ax.lines}
    named = [text.get_text() for text in ax.get_legend().get_texts()]
    chosen = by_unit[by_unit["unit_id"].isin(two)]
    for words, column in (("NCC from forage", "ncc_animals"), ("ECC from forage", "ecc_animals")):
        total = chosen[column].sum()
        if words in lines:
            assert lines[words].get_ydata()[0] == pytest.approx(total)
        else:
            assert f"{words}: {total:,.0f} (above the chart)" in named


# --- drawn shapes: polygons simplified to what a print can show ------------------------------


def test_drawn_shapes_drop_vertices_no_print_can_show():
    """A 10 km square densified every metre (40,000 vertices) with a notch of 500 m, far
    above a print pixel: drawn, it keeps the notch and loses the rest; shapely's Hausdorff
    distance between drawn and true outline stays within the stated tolerance."""
    from shapely.geometry import Polygon

    from nutricap.report.figure_style import PRINT_DPI
    from nutricap.report.maps import MAP_WIDTH_IN, SIMPLIFY_PIXELS, drawn_shapes

    side_m = 10_000.0
    square = Polygon([(0, 0), (side_m, 0), (side_m, side_m), (0, side_m)]).segmentize(1.0)
    notch = Polygon([(4_000, 0), (4_500, 0), (4_500, 500), (4_000, 500)])
    unit = square.difference(notch).segmentize(1.0)
    frame = gpd.GeoDataFrame({"unit_id": ["u1"]}, geometry=[unit], crs="EPSG:32611")

    drawn = drawn_shapes(frame).geometry.iloc[0]

    tolerance_m = SIMPLIFY_PIXELS * side_m / (MAP_WIDTH_IN * PRINT_DPI)
    assert len(unit.exterior.coords) > 40_000
    assert len(drawn.exterior.coords) <= 12  # 8 corners, closed ring
    assert drawn.is_valid
    assert drawn.hausdorff_distance(unit) <= tolerance_m
    # every point moves by at most the tolerance: the area by at most perimeter x tolerance
    assert abs(drawn.area - unit.area) <= unit.length * tolerance_m


def test_drawn_shapes_leave_an_empty_frame_alone():
    from nutricap.report.maps import drawn_shapes

    frame = gpd.GeoDataFrame({"unit_id": []}, geometry=[], crs="EPSG:32611")
    assert drawn_shapes(frame) is frame
