"""The bad-input corpus: broken copies of the invented example project and what each must say.

Every case is a ``Case(name, recipe, pattern)``. ``recipe(folder)`` breaks a fresh copy of the
example project in ``folder`` (``project.toml`` and the files it names); the run
``nutricap estimate folder/project.toml --out OUT --quiet`` (and ``check``) must then exit 2
with one line on stderr matching ``pattern`` — the file and the row, column, feature or key —
and write nothing. A few cases are valid inputs that look suspicious (``exit_code=0``): the
pattern is then searched in stdout and ``verify(folder, table, reference)`` checks the
``capacity_by_unit.csv`` written against the unbroken example's table.

Real broken files live in ``files/``; everything else is a mutation. Every number here is
invented for the example, except the checks in the ``verify`` functions, which name their
source. To add a case: append one ``Case`` line below (see DEVELOPERS.md).
"""

from __future__ import annotations

import csv
import os
import re
import shutil
import sqlite3
import tempfile
import warnings
from collections.abc import Callable
from contextlib import closing
from dataclasses import dataclass
from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd
import pyogrio
import rasterio
from affine import Affine
from markupsafe import escape
from pyproj import Geod
from rasterio.transform import from_origin
from shapely.affinity import translate
from shapely.geometry import Point, Polygon

from nutricap.report.output_folder import write_outputs_list

FILES = Path(__file__).parent / "files"
GRID = from_origin(452_000.0, 4_291_000.0, 100.0, 100.0)
"""A 100-m grid over the example's 15 × 10 km extent (ORIGIN_X_M, ... in nutricap/example/
layers.py)."""
SHIFTED_GRID = from_origin(452_050.0, 4_291_000.0, 100.0, 100.0)
""":data:`GRID` moved by half a cell."""
Recipe = Callable[[Path], None]
VRT_OF_A_MISSING_TILE = """<VRTDataset rasterXSize="150" rasterYSize="100">
  <SRS>EPSG:32612</SRS>
  <GeoTransform>452000, 100, 0, 4291000, 0, -100</GeoTransform>
  <VRTRasterBand dataType="Float32" band="1">
    <SimpleSource>
      <SourceFilename relativeToVRT="1">missing.tif</SourceFilename>
      <SourceBand>1</SourceBand>
    </SimpleSource>
  </VRTRasterBand>
</VRTDataset>
"""
"""A GDAL VRT over :data:`GRID` whose one source file does not exist."""


@dataclass(frozen=True)
class Case:
    """One broken input and the message (or valid result) it must produce."""

    name: str
    recipe: Recipe
    pattern: str
    exit_code: int = 2
    verify: Callable[[Path, pd.DataFrame, pd.DataFrame], None] | None = None
    known_gap: str | None = None
    """Why nutricap does not yet behave as the case asks (the test is then a strict xfail)."""
    prepare_out: Recipe | None = None
    """Fills the output folder before the run (then ``estimate --overwrite`` alone runs)."""
    needs: str | None = None
    """A module the recipe or the run needs beyond the test tools (the case is skipped when it
    cannot be imported, e.g. ``openpyxl`` for a workbook)."""
    project: str = "project.toml"
    """The project file of the example the case runs (``project_rasters.toml``: the grid)."""
    scenario: str | None = None
    """A scenario: then ``compare --scenario`` alone runs (``check`` reads no scenario)."""


# --- recipes ---------------------------------------------------------------------------------


def steps(*recipes: Recipe) -> Recipe:
    """Several recipes applied in turn."""

    def recipe(folder: Path) -> None:
        for each in recipes:
            each(folder)

    return recipe


def edit_csv(name: str, change: Callable[[pd.DataFrame], pd.DataFrame]) -> Recipe:
    """Read ``name`` as text cells, apply ``change``, write it back."""

    def recipe(folder: Path) -> None:
        table = pd.read_csv(folder / name, dtype=str, keep_default_na=False)
        change(table).to_csv(folder / name, index=False)

    return recipe


def set_cell(name: str, row: int, column: str, value: str) -> Recipe:
    """Set a cell; ``row`` is the spreadsheet row (the header is row 1)."""

    def change(table: pd.DataFrame) -> pd.DataFrame:
        table.loc[row - 2, column] = value
        return table

    return edit_csv(name, change)


def rename_column(name: str, old: str, new: str) -> Recipe:
    return edit_csv(name, lambda table: table.rename(columns={old: new}))


def drop_column(name: str, column: str) -> Recipe:
    return edit_csv(name, lambda table: table.drop(columns=[column]))


def copy_row(name: str, row: int, **changes: str) -> Recipe:
    """Append a copy of spreadsheet row ``row`` with some cells changed."""

    def change(table: pd.DataFrame) -> pd.DataFrame:
        extra = table.iloc[[row - 2]].assign(**changes)
        return pd.concat([table, extra], ignore_index=True)

    return edit_csv(name, change)


def drop_rows(name: str, column: str, value: str) -> Recipe:
    return edit_csv(name, lambda table: table[table[column] != value])


def replace_text(name: str, old: str, new: str, count: int = 1) -> Recipe:
    """Replace the first ``count`` occurrences of ``old`` (which must be there)."""

    def recipe(folder: Path) -> None:
        text = (folder / name).read_text(encoding="utf-8")
        if old not in text:
            raise AssertionError(f"recipe: {old!r} not in {name}")
        (folder / name).write_text(text.replace(old, new, count), encoding="utf-8")

    return recipe


def write_text(name: str, text: str) -> Recipe:
    """Write a new file ``name`` holding ``text`` into the project folder."""
    return lambda folder: (folder / name).write_text(text, encoding="utf-8")


def set_key(section: str, line: str) -> Recipe:
    """Add ``line`` at the top of the project file's ``[section]``."""
    return replace_text("project.toml", f"[{section}]\n", f"[{section}]\n{line}\n")


def use_file(source: str, name: str) -> Recipe:
    """Replace ``name`` by the real broken file ``files/source``."""
    return lambda folder: shutil.copyfile(FILES / source, folder / name)


def append_text(name: str, text: str) -> Recipe:
    """Add ``text`` as a last line of ``name`` (which ends with a line break)."""

    def recipe(folder: Path) -> None:
        with (folder / name).open("a", encoding="utf-8") as file:
            file.write(f"{text}\n")

    return recipe


def symlink(name: str, target: str) -> Recipe:
    """Make ``name`` a symbolic link to ``target`` (which need not exist)."""
    return lambda folder: (folder / name).symlink_to(target)


def insert_line(name: str, row: int, line: str) -> Recipe:
    """Insert a text line so that it becomes spreadsheet row ``row``."""

    def recipe(folder: Path) -> None:
        lines = (folder / name).read_text(encoding="utf-8").splitlines()
        lines.insert(row - 1, line)
        (folder / name).write_text("\n".join(lines) + "\n", encoding="utf-8")

    return recipe


def rewrite_bytes(name: str, change: Callable[[bytes], bytes]) -> Recipe:
    def recipe(folder: Path) -> None:
        (folder / name).write_bytes(change((folder / name).read_bytes()))

    return recipe


def write_raster(
    path: Path,
    *,
    value: float = 150.0,
    dtype: str = "float32",
    bands: int = 1,
    transform: Affine = GRID,
    crs: str = "EPSG:32612",
    nodata: float | None = -1.0,
) -> None:
    """A constant raster of 100 × 150 cells (a value invented for the example)."""
    values = np.full((bands, 100, 150), value, dtype=dtype)
    profile = {"driver": "GTiff", "height": 100, "width": 150, "count": bands, "dtype": dtype}
    with rasterio.open(path, "w", **profile, crs=crs, transform=transform, nodata=nodata) as dst:
        dst.write(values)


def biomass_rasters(**layers: dict) -> Recipe:
    """Add a ``[rasters]`` section: forage class → keyword arguments of :func:`write_raster`."""

    def recipe(folder: Path) -> None:
        for name, options in layers.items():
            write_raster(folder / f"{name}.tif", **options)
        entries = ", ".join(f'{name} = "{name}.tif"' for name in layers)
        with (folder / "project.toml").open("a", encoding="utf-8") as file:
            file.write(f"\n[rasters]\nbiomass = {{ {entries} }}\n")

    return recipe


def south_up_biomass(name: str, *, north_up: bool = False) -> Recipe:
    """Add ``[rasters]`` with one biomass raster ``name`` over :data:`GRID`, stored south-up
    (the first row is the southernmost; ``north_up=True``: the same values stored north-up).
    Values rise by 2 kg/ha a row northwards, so that a flipped grid shows in the result."""

    def recipe(folder: Path) -> None:
        from_south = np.arange(100, dtype="float32")[:, np.newaxis] * 2.0 + 40.0
        values = np.repeat(from_south, 150, axis=1)
        transform = Affine(100.0, 0.0, GRID.c, 0.0, 100.0, GRID.f - 100 * 100.0)
        if north_up:
            values, transform = values[::-1], GRID
        profile = {"driver": "GTiff", "height": 100, "width": 150, "count": 1, "dtype": "float32"}
        with rasterio.open(
            folder / f"{name}.tif", "w", **profile, crs="EPSG:32612", transform=transform
        ) as dst:
            dst.write(values, 1)
        with (folder / "project.toml").open("a", encoding="utf-8") as file:
            file.write(f'\n[rasters]\nbiomass = {{ {name} = "{name}.tif" }}\n')

    return recipe


def edit_layer(name: str, change: Callable[[gpd.GeoDataFrame], gpd.GeoDataFrame]) -> Recipe:
    """Read the one layer of ``name`` (GeoPackage), apply ``change``, write a new file."""

    def recipe(folder: Path) -> None:
        path = folder / name
        frame = change(gpd.read_file(path))
        path.unlink()
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")  # e.g. "'crs' was not provided": on purpose here
            frame.to_file(path, layer=path.stem, driver="GPKG")

    return recipe


def add_layer(name: str, layer: str) -> Recipe:
    """Add a copy of the file's layer under another name (a second layer in one file)."""

    def recipe(folder: Path) -> None:
        gpd.read_file(folder / name).to_file(folder / name, layer=layer, driver="GPKG")

    return recipe


def add_styles_table(name: str) -> Recipe:
    """Add a table without geometries, as a GIS does when it saves its styles in the file."""

    def recipe(folder: Path) -> None:
        styles = pd.DataFrame({"styleName": ["default"], "styleQML": ["<qgis/>"]})
        pyogrio.write_dataframe(styles, folder / name, layer="layer_styles")

    return recipe


def set_geometry(row: int, make: Callable[[object], object]) -> Callable:
    """Replace feature ``row`` (1-based) by ``make(old geometry)``."""

    def change(frame: gpd.GeoDataFrame) -> gpd.GeoDataFrame:
        frame.loc[row - 1, "geometry"] = make(frame.geometry.iloc[row - 1])
        return frame

    return change


def bow_tie(geometry) -> Polygon:
    """A self-intersecting quadrilateral over the old polygon's bounds (invalid)."""
    west, south, east, north = geometry.bounds
    return Polygon([(west, south), (east, north), (east, south), (west, north)])


def scaled_raster(name: str, scale: float) -> Recipe:
    """Give raster ``name`` GDAL scale metadata (values to be read as value × ``scale``)."""

    def recipe(folder: Path) -> None:
        with rasterio.open(folder / name, "r+") as dst:
            dst.scales = (scale,)

    return recipe


def slope_raster(value: float, units: str) -> Recipe:
    """Add ``[availability]`` with a constant slope raster of ``value`` in ``units``."""

    def recipe(folder: Path) -> None:
        write_raster(folder / "slope.tif", value=value)
        with (folder / "project.toml").open("a", encoding="utf-8") as file:
            file.write(f'\n[availability]\nslope = "slope.tif"\nslope_units = "{units}"\n')

    return recipe


# --- checks of valid results -----------------------------------------------------------------


def same_as_reference(folder: Path, table: pd.DataFrame, reference: pd.DataFrame) -> None:
    """The table equals the unbroken example's (both read from the CSV written)."""
    pd.testing.assert_frame_equal(table, reference)


def true_areas(folder: Path, table: pd.DataFrame, reference: pd.DataFrame) -> None:
    """Unit areas are geodesic areas; capacity per km² is unchanged by the layer's CRS.

    Independent check: pyproj.Geod (Karney 2013 algorithm) on the WGS 84 ellipsoid. An edge is
    a straight line in the layer's own CRS (OGC simple features), so the layer is split every
    10 units of its CRS (1e-4° in lon/lat) with shapely first: a geodesic and the straight line
    then coincide to well under 1e-6. The density does not depend on the area CRS because
    forage scales with area.
    """
    units = gpd.read_file(folder / "units.gpkg")
    step = 1e-4 if units.crs.is_geographic else 10.0
    units = units.set_geometry(units.segmentize(step)).to_crs("EPSG:4326")
    geod = Geod(ellps="WGS84")
    geodesic_ha = [abs(geod.geometry_area_perimeter(g)[0]) / 10_000 for g in units.geometry]
    expected = pd.Series(geodesic_ha, index=units["unit_id"])
    np.testing.assert_allclose(table["area_ha"], expected[table["unit_id"]], rtol=1e-5)
    np.testing.assert_allclose(table["ncc_per_km2"], reference["ncc_per_km2"], rtol=1e-4)


def same_as_north_up(folder: Path, table: pd.DataFrame, reference: pd.DataFrame) -> None:
    """A south-up raster gives the table of the same values stored north-up (the land is the
    same; only the order of the rows in the file differs)."""
    from nutricap.cli import main

    with tempfile.TemporaryDirectory() as scratch:
        copy = Path(scratch) / "inputs"
        shutil.copytree(folder, copy)
        (copy / "project.toml").write_text(
            (copy / "project.toml").read_text(encoding="utf-8").split("\n[rasters]")[0] + "\n",
            encoding="utf-8",
        )
        south_up_biomass("juniper", north_up=True)(copy)
        out = Path(scratch) / "results"
        project = str(copy / "project.toml")
        assert main(["estimate", project, "--out", str(out), "--no-figures", "--quiet"]) == 0
        pd.testing.assert_frame_equal(table, pd.read_csv(out / "capacity_by_unit.csv"))
    assert (table["ncc_animals"] > 0).all()


def nothing_meets_target(folder: Path, table: pd.DataFrame, reference: pd.DataFrame) -> None:
    """No diet reaches the target: NCC 0 and the reason 'intake'; the ECC is unchanged."""
    assert (table["ncc_animals"] == 0).all(), table["ncc_animals"]
    assert (table["limiting_factor"] == "intake").all(), table["limiting_factor"]
    pd.testing.assert_series_equal(table["ecc_animals"], reference["ecc_animals"])


# --- issue 14, second corpus: helpers (output safety, injection) -----------------------------


def sql_update(name: str, table: str, column: str, old: str, new: str) -> Recipe:
    """Set ``column`` from ``old`` to ``new`` in a GeoPackage with SQLite (GDAL cannot write a
    NUL inside a text; SQLite keeps the whole text)."""

    def recipe(folder: Path) -> None:
        with closing(sqlite3.connect(folder / name)) as db:
            for function in ("ST_IsEmpty", "ST_MinX", "ST_MaxX", "ST_MinY", "ST_MaxY"):
                db.create_function(function, 1, lambda geometry: 0)  # named in GDAL's triggers
            changed = db.execute(f"UPDATE {table} SET {column} = ? WHERE {column} = ?", (new, old))
            if changed.rowcount == 0:
                raise AssertionError(f"recipe: no {column} {old!r} in {name}")
            db.commit()

    return recipe


def set_unit_ids(*ids: str) -> Recipe:
    """Give the six example units these ids (in feature order), in the units layer and in the
    cattle permit's table alike."""

    def recipe(folder: Path) -> None:
        renamed = dict(zip(gpd.read_file(folder / U)["unit_id"], ids, strict=True))
        edit_layer(U, lambda g: g.assign(unit_id=list(ids)))(folder)
        edit_csv(PERMIT, lambda t: t.assign(unit_id=t["unit_id"].map(renamed)))(folder)

    return recipe


def set_current_animals(*numbers: float) -> Recipe:
    return edit_layer(U, lambda g: g.assign(current_animals=list(numbers)))


def results_of(folder: Path) -> Path:
    """The output folder of a case: ``results`` beside the inputs (tests/test_bad_inputs.py)."""
    return folder.parent / "results"


def earlier_results(*extra: tuple[str, str], changed: str | None = None) -> Recipe:
    """An output folder as an earlier run left it (run.json, a table, the list of outputs),
    then ``extra`` files (name, text) added and file ``changed`` appended to."""

    def recipe(out: Path) -> None:
        out.mkdir()
        (out / "run.json").write_text('{"command": "estimate"}\n', encoding="utf-8")
        (out / "capacity_by_unit.csv").write_text("unit_id\nA\n", encoding="utf-8")
        write_outputs_list(out)
        for name, text in extra:
            (out / name).parent.mkdir(parents=True, exist_ok=True)
            (out / name).write_text(text, encoding="utf-8")
        if changed is not None:
            with open(out / changed, "a", encoding="utf-8") as stream:
                stream.write("a row of my own\n")

    return recipe


def other_files(out: Path) -> None:
    """A folder of someone else's files (no list of outputs)."""
    out.mkdir()
    (out / "run.json").write_text("{}\n", encoding="utf-8")
    (out / "thesis.docx").write_bytes(b"irreplaceable")


def _numbers_as_reference(table: pd.DataFrame, reference: pd.DataFrame) -> None:
    numeric = reference.select_dtypes("number").columns
    pd.testing.assert_frame_equal(table[numeric], reference[numeric], rtol=1e-6)


def formulas_defused(folder: Path, table: pd.DataFrame, reference: pd.DataFrame) -> None:
    """No cell of any CSV output begins as a formula would (OWASP, "CSV Injection": =, +, -, @,
    tab, CR) unless it is a number (Python's float() reads it); the ids are kept behind a
    leading apostrophe; the numbers are the unbroken example's (only names changed)."""
    for path in sorted(results_of(folder).glob("*.csv")):
        with open(path, newline="", encoding="utf-8") as stream:
            for row in csv.reader(stream):
                for cell in row:
                    if cell[:1] in ("=", "+", "-", "@", "\t", "\r"):
                        float(cell)  # raises for text
    assert '\'=HYPERLINK("http://e.invalid","x")' in set(table["unit_id"])
    assert {"'+1+1", "'-2+3", "'@SUM(A1)", "-3.5"} <= set(table["unit_id"].astype(str))
    _numbers_as_reference(table, reference)


def _cell_separators(line: str) -> int:
    """Pipes of a GFM table row not escaped by a backslash (GFM spec, tables extension)."""
    return len(re.findall(r"(?<!\\)(?:\\\\)*\|", line))


def markup_escaped(folder: Path, table: pd.DataFrame, reference: pd.DataFrame) -> None:
    """capacity_by_unit.md: one row per unit with the header's cells, no raw HTML; report.html:
    the ids HTML-escaped (markupsafe, the escaping Jinja2 uses, computes the expected text)."""
    out = results_of(folder)
    markdown = (out / "capacity_by_unit.md").read_text(encoding="utf-8")
    rows = [line for line in markdown.splitlines() if line.startswith("| ")]
    assert len(rows) == 1 + len(reference), rows
    assert {_cell_separators(row) for row in rows} == {_cell_separators(rows[0])}, rows
    assert "<" not in markdown.replace("\\<", ""), "no raw HTML"
    html = (out / "report.html").read_text(encoding="utf-8")
    assert "<script>alert(1)</script>" not in html and "<b onmouseover" not in html
    assert str(escape("<script>alert(1)</script>")) in html
    _numbers_as_reference(table, reference)


def no_reduction_without_animals(unit: str) -> Callable:
    """A unit without animals needs no reduction (0, not blank) and is not flagged; the
    capacity figures are the unbroken example's (current numbers do not change capacity)."""

    def verify(folder: Path, table: pd.DataFrame, reference: pd.DataFrame) -> None:
        row = table.set_index("unit_id").loc[unit]
        assert row["current_animals"] == 0 and row["demand_kg"] == 0, row
        assert row["reduction_for_key_use_animals"] == 0, row
        assert row["reduction_for_ncc_animals"] == 0, row
        assert not row["overuse"] and not row["above_ncc"], row
        reductions = ["reduction_for_key_use_animals", "reduction_for_ncc_animals"]
        assert table[reductions].notna().all().all(), table[reductions]
        capacity = ["ncc_animals", "ecc_animals", "allowable_use_animals", "area_ha"]
        pd.testing.assert_frame_equal(table[capacity], reference[capacity])

    return verify


NO_ESCAPE_AND = r"^(?![\s\S]*\x1b)[\s\S]*"
"""Pattern prefix: stdout holds no ESC character at all (and then what follows)."""


# --- recipes of issue 13: column mapping, shapefiles, spreadsheets ----------------------------


def as_shapefile(name: str, change=lambda g: g) -> Recipe:
    """Write layer ``name`` (GeoPackage) as a shapefile, as GDAL writes one (names cut to 10
    characters), and point the project file at it."""

    def recipe(folder: Path) -> None:
        path = folder / name
        frame = change(gpd.read_file(path))
        path.unlink()
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")  # GDAL's note that it cuts names: on purpose
            frame.to_file(path.with_suffix(".shp"), driver="ESRI Shapefile")
        replace_text("project.toml", f'"{name}"', f'"{path.stem}.shp"')(folder)

    return recipe


def as_workbook(name: str, sheet: str = "Sheet1", change=None) -> Recipe:
    """Write CSV table ``name`` as an .xlsx workbook (numbers as numbers) on ``sheet``, after
    a sheet of notes, change cells (``change(worksheet)``) and point the project file at it."""

    def recipe(folder: Path) -> None:
        import openpyxl

        path = folder / name
        with path.open(newline="", encoding="utf-8") as stream:
            rows = list(csv.reader(stream))
        book = openpyxl.Workbook()
        book.active.title = "Notes"
        book.active["A1"] = "invented for the example"
        worksheet = book.create_sheet(sheet)
        for row in rows:
            worksheet.append([_number_or_text(cell) for cell in row])
        if change is not None:
            change(worksheet)
        book.save(path.with_suffix(".xlsx"))
        path.unlink()
        replace_text("project.toml", f'"{name}"', f'"{path.stem}.xlsx"')(folder)
        append_text("project.toml", f'[sheets]\n{path.stem} = "{sheet}"')(folder)

    return recipe


def _number_or_text(cell: str) -> float | str:
    try:
        return float(cell)
    except ValueError:
        return cell


def map_columns(table: str, **names: str) -> Recipe:
    """Add ``[columns.TABLE]`` with our name = the file's to the project file."""
    lines = "\n".join(f'{ours} = "{theirs}"' for ours, theirs in names.items())
    return append_text("project.toml", f"[columns.{table}]\n{lines}")


# --- the corpus ------------------------------------------------------------------------------

P, F, A = "plots.csv", "forage_classes.csv", "animal_classes.csv"
U, S = "units.gpkg", "strata.gpkg"
PERMIT = "cattle_permit.csv"
ROW1 = r": row 1 \(header\): "
RASTER_KEY = r"big_sagebrush\.tif: key 'rasters\.biomass\.big_sagebrush': "
SITE_GRID = 'LOCAL_CS["site grid",UNIT["metre",1]]'
"""A local engineering CRS in metres with no datum on the Earth (WKT 1)."""
NO_CURRENT_ANIMALS = edit_layer(U, lambda g: g.drop(columns=["current_animals"]))

CASES = [
    # Columns missing, renamed, repeated, or named with the wrong unit.
    Case(
        "plots: column renamed",
        rename_column(P, "forage_class", "Forage Class"),
        r"plots\.csv" + ROW1 + r"missing column 'forage_class'; did you mean to name "
        r"'Forage Class'",
    ),
    Case(
        "forage classes: column dropped",
        drop_column(F, "allowable_use"),
        r"forage_classes\.csv" + ROW1 + r"missing column 'allowable_use'",
    ),
    Case(
        "plots: mass in kg, not g",
        rename_column(P, "dry_mass_g", "dry_mass_kg"),
        r"plots\.csv" + ROW1 + r"unknown column 'dry_mass_kg'; did you mean 'dry_mass_g'\?",
    ),
    Case(
        "plots: g/m² where kg/ha expected",
        steps(rename_column(P, "dry_mass_g", "biomass_g_per_m2"), drop_column(P, "frame_area_m2")),
        r"plots\.csv" + ROW1 + r"unknown column 'biomass_g_per_m2'; did you mean "
        r"'biomass_kg_per_ha'\?",
    ),
    Case(
        "forage classes: optional column misspelt",
        rename_column(F, "tannin", "tanin"),
        r"forage_classes\.csv" + ROW1 + r"unknown column 'tanin'; did you mean 'tannin'\?",
    ),
    Case(
        "forage classes: column twice",
        replace_text(F, ",allowable_use,", ",cp_pct,"),
        r"forage_classes\.csv: row 1 \(header\), column 6: column 'cp_pct' appears twice",
    ),
    Case(
        "units: id attribute renamed",
        edit_layer(U, lambda g: g.rename(columns={"unit_id": "UnitID"})),
        r"units\.gpkg: attribute 'unit_id': units layer has no column 'unit_id'; did you mean "
        r"to name 'UnitID'",
    ),
    # Wrong units and absurd values.
    Case(
        "plots: frame area of 0",
        set_cell(P, 5, "frame_area_m2", "0"),
        r"plots\.csv: row 5, column 'frame_area_m2': value out of range \(expected a number > 0",
    ),
    Case(
        "plots: mass in mg (absurd biomass)",
        set_cell(P, 3, "dry_mass_g", "28000"),
        r"plots\.csv: row 3, columns 'dry_mass_g'/'frame_area_m2': biomass out of range",
    ),
    Case(
        "plots: negative mass",
        set_cell(P, 7, "dry_mass_g", "-3.5"),
        r"plots\.csv: row 7, column 'dry_mass_g': value out of range .*found -3\.5",
    ),
    Case(
        "plots: NaN mass",
        set_cell(P, 4, "dry_mass_g", "NaN"),
        r"plots\.csv: row 4, column 'dry_mass_g': not a number .*found 'NaN'",
    ),
    Case(
        "forage classes: DE above 5 kcal/g",
        set_cell(F, 3, "de_kcal_per_g", "24.5"),
        r"forage_classes\.csv: row 3, column 'de_kcal_per_g': value out of range "
        r"\(expected a number > 0 and <= 5",
    ),
    Case(
        "forage classes: allowable use in percent",
        set_cell(F, 2, "allowable_use", "50"),
        r"forage_classes\.csv: row 2, column 'allowable_use': value out of range "
        r"\(expected a number >= 0 and <= 1",
    ),
    Case(
        "forage classes: digestibility as a fraction",
        set_cell(F, 6, "dmd_pct", "0.48"),
        r"forage_classes\.csv: row 6, column 'dmd_pct': a value of 1 % or less",
    ),
    Case(
        "forage classes: infinite crude protein",
        set_cell(F, 4, "cp_pct", "inf"),
        r"forage_classes\.csv: row 4, column 'cp_pct': value out of range",
    ),
    Case(
        "forage classes: no energy value",
        set_cell(F, 2, "de_kcal_per_g", ""),
        r"forage_classes\.csv: row 2, columns 'de_kcal_per_g'/'dmd_pct': no energy value",
    ),
    Case(
        "animal classes: body mass of 0",
        set_cell(A, 3, "body_mass_kg", "0"),
        r"animal_classes\.csv: row 3, column 'body_mass_kg': value out of range "
        r"\(expected a number >= 1 and <= 2000",
    ),
    Case(
        "animal classes: body mass of 10 g",
        set_cell(A, 3, "body_mass_kg", "0.01"),
        r"animal_classes\.csv: row 3, column 'body_mass_kg': value out of range .*found 0\.01",
    ),
    Case(
        "forage classes: a forage height of 0 cm",
        set_cell("forage_classes.csv", 2, "height_cm", "0"),
        r"forage_classes\.csv: row 2, column 'height_cm': value out of range \(expected a number "
        r"> 0",
    ),
    Case(
        "animal classes: shares in percent",
        set_cell(A, 2, "share", "60"),
        r"animal_classes\.csv: row 2, column 'share': value out of range",
    ),
    Case(
        "animal classes: shares add to 1.2",
        set_cell(A, 4, "share", "0.3"),
        r"animal_classes\.csv: column 'share': herd shares do not add up to 1 .*found sum 1\.2",
    ),
    Case(
        "animal classes: unknown state",
        set_cell(A, 2, "state", "lactaton"),
        r"animal_classes\.csv: row 2, column 'state': unknown nutritional state 'lactaton'",
    ),
    Case(
        "strata: accessible fraction above 1",
        edit_layer(S, lambda g: g.assign(accessible_fraction=[1.5] + [1.0] * (len(g) - 1))),
        r"strata\.gpkg: feature 1 \(of 70\), attribute 'accessible_fraction': strata layer has a "
        r"bad accessible_fraction "
        r"\(expected a number between 0 and 1; found 1\.5\)",
    ),
    Case(
        "units: negative current animals",
        edit_layer(U, lambda g: g.assign(current_animals=[10, 20, -5, 40, 50, 60])),
        r"units\.gpkg: feature 3 \(of 6\), attribute 'current_animals': units layer has a bad "
        r"current_animals",
    ),
    # Duplicate ids.
    Case(
        "plots: plot × class twice",
        copy_row(P, 2),
        r"plots\.csv: row \d+, column "
        r"'plot_id', 'forage_class': duplicate entry \(expected each combination once; "
        r"found plot_id='P001', forage_class='big_sagebrush' again\)",
    ),
    Case(
        "forage classes: class twice",
        copy_row(F, 3, cp_pct="9"),
        r"forage_classes\.csv: row 13, column 'forage_class', 'stratum': duplicate entry",
    ),
    Case(
        "animal classes: class twice",
        copy_row(A, 2, share="0"),
        r"animal_classes\.csv: row 5, column 'animal_class': duplicate entry",
    ),
    Case(
        "units: id twice",
        edit_layer(U, lambda g: g.assign(unit_id=g["unit_id"].where(g.index != 4, "Coldmarrow"))),
        r"units\.gpkg: feature 5 \(of 6\), attribute 'unit_id': duplicate unit_id .*found "
        r"'Coldmarrow'",
    ),
    Case(
        "plots: plot in two strata",
        set_cell(P, 3, "stratum", "aspen"),
        r"plots\.csv: row 3, column 'stratum': plot recorded in two strata",
    ),
    # Forage classes and strata that do not match between tables and map.
    Case(
        "plots: class not in the quality table",
        set_cell(P, 6, "forage_class", "sagebrsh"),
        r"plots\.csv: row 6, column 'forage_class': unknown forage_class 'sagebrsh'",
    ),
    Case(
        "forage classes: class never on a plot (valid, supply 0)",
        copy_row(F, 2, forage_class="winterfat"),
        r"note: forage classes in the forage-class table never recorded on a plot "
        r"\(supply 0\): winterfat",
        exit_code=0,
        verify=same_as_reference,
    ),
    Case(
        "forage classes: without the optional growth_form (valid)",
        steps(
            drop_column(F, "growth_form"),
            # the cattle permit's preference by growth form, written out by class instead
            replace_text(
                "project.toml",
                "{ grass = 1.0, forb = 0.3, browse = 0.05 }",
                "{ cheatgrass = 1.0, bluebunch_wheatgrass = 1.0, sandberg_bluegrass = 1.0, "
                "winter_forbs = 0.3, big_sagebrush = 0.05, bitterbrush = 0.05, "
                "mountain_mahogany = 0.05, rabbitbrush = 0.05, serviceberry = 0.05, "
                "juniper = 0.05, aspen_twigs = 0.05 }",
            ),
        ),
        r"Total NCC",
        exit_code=0,
        verify=same_as_reference,
    ),
    Case(
        "forage classes: stratum row without a general row",
        copy_row(F, 2, forage_class="winterfat", stratum="aspen"),
        r"forage_classes\.csv: row 13, column 'forage_class': stratum-specific row for a class "
        r"without a general row",
    ),
    Case(
        "plots: stratum not on the map",
        edit_csv(P, lambda t: t.replace({"stratum": {"sagebrush_steppe": "sagebrush"}})),
        r"plots\.csv: row 2, column 'stratum': unknown stratum 'sagebrush'; did you mean",
    ),
    Case(
        "strata: stratum without plots",
        drop_rows(P, "stratum", "grass_meadow"),
        r"strata\.gpkg: attribute 'stratum': stratum 'grass_meadow' is on the map but has "
        r"no plots",
    ),
    # Geometry: overlaps, units off the map, invalid and empty shapes, CRS.
    Case(
        "units: two units overlap",
        edit_layer(U, set_geometry(2, lambda g: g.buffer(250))),
        r"units\.gpkg: features 1 and 2 \(of 6\): units overlap: unit_id 'Flintwhistle' and "
        r"'Coldmarrow'",
    ),
    Case(
        "strata: polygons overlap",
        edit_layer(S, set_geometry(1, lambda g: g.buffer(400))),
        r"strata\.gpkg: features \d+ and \d+ \(of 70\): strata polygons overlap",
    ),
    Case(
        "units: a unit on no stratum",
        edit_layer(U, set_geometry(4, lambda g: translate(g, xoff=80_000))),
        r"units\.gpkg: attribute 'unit_id': unit 'Rimgrass' does not overlap any vegetation "
        r"stratum",
    ),
    Case(
        "units: self-intersecting polygon",
        edit_layer(U, set_geometry(2, bow_tie)),
        r"units\.gpkg: feature 2 \(of 6\): units layer has an invalid geometry "
        r"\(Self-intersection",
    ),
    Case(
        "strata: empty geometry",
        edit_layer(S, set_geometry(3, lambda g: Polygon())),
        r"strata\.gpkg: feature 3 \(of 70\): strata layer has an empty geometry",
    ),
    Case(
        "units: points, not polygons",
        edit_layer(U, lambda g: g.set_geometry([Point(c.x, c.y) for c in g.centroid])),
        r"units\.gpkg: feature 1 \(of 6\): units layer has a non-polygon geometry "
        r".*found Point",
    ),
    Case(
        "strata: no features",
        edit_layer(S, lambda g: g.iloc[:0]),
        r"strata\.gpkg: strata layer has no features",
    ),
    Case(
        "units: no CRS",
        edit_layer(U, lambda g: g.set_crs(None, allow_override=True)),
        r"units\.gpkg: units layer has no coordinate reference system",
    ),
    Case(
        "units: projected coordinates labelled geographic",
        edit_layer(U, lambda g: g.set_crs("EPSG:4326", allow_override=True)),
        r"units\.gpkg: feature 1 \(of 6\): units layer has coordinates that are not "
        r"longitudes and latitudes, yet its CRS is geographic",
    ),
    Case(
        "units: geographic CRS (valid: equal-area areas)",
        edit_layer(U, lambda g: g.to_crs("EPSG:4326")),
        r"Total NCC",
        exit_code=0,
        verify=true_areas,
    ),
    Case(
        "units: CRS in US survey feet (valid: equal-area areas)",
        edit_layer(U, lambda g: g.to_crs("EPSG:3566")),
        r"Total NCC",
        exit_code=0,
        verify=true_areas,
    ),
    Case(
        "units: Web Mercator (valid: equal-area areas)",
        edit_layer(U, lambda g: g.to_crs("EPSG:3857")),
        r"Total NCC",
        exit_code=0,
        verify=true_areas,
    ),
    Case(
        "strata: not a vector file",
        rewrite_bytes(S, lambda b: b"not a geopackage"),
        r"strata\.gpkg: cannot read strata layer: not a vector format GDAL can read",
    ),
    Case(
        "units: a table, not a layer",
        replace_text("project.toml", '"units.gpkg"', '"counts.csv"'),
        r"counts\.csv: units layer has no geometries",
    ),
    Case(
        "units: two layers and none named",
        add_layer(U, "units_2019"),
        r"units\.gpkg: the file holds 2 layers and the project file names none for the units "
        r"layer .*one of 'units', 'units_2019'",
    ),
    Case(
        "units: one layer and a table of styles (valid)",
        add_styles_table(U),
        r"Total NCC",
        exit_code=0,
        verify=same_as_reference,
    ),
    Case(
        "units: layer name misspelt",
        set_key("inputs", 'units_layer = "unit"'),
        r"units\.gpkg: layer 'unit': the file has no layer 'unit' .*one of the file's layers: "
        r"'units'",
    ),
    # The project file.
    Case(
        "project: TOML syntax error",
        use_file("project_syntax_error.toml", "project.toml"),
        r"project\.toml: TOML syntax error: .*\(at line 4, column \d+\)",
    ),
    Case(
        "project: unknown key",
        replace_text("project.toml", "protein = true", "protien = true"),
        r"project\.toml: 1 problem: unknown key 'target\.protien'; did you mean 'protein'\?",
    ),
    Case(
        "project: unknown section",
        replace_text("project.toml", "[pooling]", "[poolng]"),
        r"project\.toml: 1 problem: unknown key 'poolng'; did you mean 'pooling'\?",
    ),
    Case(
        "project: unknown key in a scenario",
        replace_text("project.toml", "first_year = 2026", "first_yaer = 2026"),
        r"project\.toml: 2 problems: missing key 'scenarios\.juniper_thinning\.first_year'; "
        r"unknown key 'scenarios\.juniper_thinning\.first_yaer'; did you mean 'first_year'\?",
    ),
    Case(
        "project: path does not exist",
        replace_text("project.toml", '"plots.csv"', '"plot.csv"'),
        r"project\.toml: input file for key 'inputs\.plots' does not exist .*found /.*/plot\.csv",
    ),
    Case(
        "project: input is a folder",
        steps(
            lambda folder: (folder / "plots").mkdir(),
            replace_text("project.toml", '"plots.csv"', '"plots"'),
        ),
        r"/plots: plots table is a folder, not a file",
    ),
    Case(
        "project: season of 0 days",
        replace_text("project.toml", "season_days = 120", "season_days = 0"),
        r"project\.toml: 1 problem: key 'project\.season_days': Input should be greater than 0",
    ),
    Case(
        "project: pooling mode misspelt",
        replace_text("project.toml", 'mode = "unit"', 'mode = "units"'),
        r"project\.toml: 1 problem: key 'pooling\.mode': .*\(found 'units'\)",
    ),
    Case(
        "project: target class not in the herd",
        replace_text("project.toml", 'animal_class = "adult_female"', 'animal_class = "doe"'),
        r"project\.toml: key 'target\.animal_class': target animal class 'doe' is not in the "
        r"animal-class table",
    ),
    Case(
        "project: code is not run",
        replace_text(
            "project.toml", 'species = "mule deer"', 'species = __import__("os").system("echo run")'
        ),
        r"project\.toml: TOML syntax error: Invalid value \(at line 4",
    ),
    Case(
        "project: not UTF-8",
        rewrite_bytes("project.toml", lambda b: b.replace(b"mule deer", b"chevreuil \xe9")),
        r"project\.toml: line 4: project file is not UTF-8 text",
    ),
    # A target no forage can meet: a valid result of zero, with the reason.
    Case(
        "target: diet no forage can meet (valid: NCC 0, 'intake')",
        set_key("target", "diet_de_min_kcal_per_g = 4.5"),
        r"no mix of the available forage reaches the target diet",
        exit_code=0,
        verify=nothing_meets_target,
    ),
    Case(
        "forage classes: crude protein blank while protein is required",
        set_cell(F, 4, "cp_pct", ""),
        r"forage_classes\.csv: row 4, column 'cp_pct': crude protein missing",
    ),
    # Encodings and separators: refused clearly (decision in nutricap/tables.py).
    Case(
        "animal classes: latin-1 file",
        use_file("animal_classes_latin1.csv", A),
        r"animal_classes\.csv: row 3: animal-class table is not UTF-8 text .*re-save the file "
        r"as UTF-8",
    ),
    Case(
        "plots: UTF-16 file",
        rewrite_bytes(P, lambda b: b.decode("utf-8").encode("utf-16")),
        r"plots\.csv: row 1: plots table is not UTF-8 text",
    ),
    Case(
        "forage classes: semicolons and decimal commas",
        use_file("forage_classes_semicolon.csv", F),
        r"forage_classes\.csv: row 1: forage-class table is separated by semicolons "
        r"\(expected comma-separated values with a decimal point",
    ),
    Case(
        "plots: tab-separated",
        rewrite_bytes(P, lambda b: b.replace(b",", b"\t")),
        r"plots\.csv: row 1: plots table is separated by tabs",
    ),
    Case(
        "forage classes: decimal comma in a comma file",
        replace_text(F, "bitterbrush,browse,2.45,", "bitterbrush,browse,2,45,"),
        r"forage_classes\.csv: row 3: more values than the header has columns "
        r"\(expected 9 values .*found 10 values\)",
    ),
    Case(
        "plots: UTF-8 with byte-order mark (valid)",
        rewrite_bytes(P, lambda b: b"\xef\xbb\xbf" + b),
        r"Total NCC",
        exit_code=0,
        verify=same_as_reference,
    ),
    # Half-finished files.
    Case(
        "plots: header only",
        rewrite_bytes(P, lambda b: b.split(b"\n")[0] + b"\n"),
        r"plots\.csv: row 2: plots table has a header but no data rows",
    ),
    Case(
        "animal classes: empty file",
        rewrite_bytes(A, lambda b: b""),
        r"animal_classes\.csv: row 1: animal-class table is empty",
    ),
    Case(
        "plots: empty row in the middle",
        insert_line(P, 6, ""),
        r"plots\.csv: row 6: empty row between data rows",
    ),
    Case(
        "plots: empty rows at the end (valid)",
        rewrite_bytes(P, lambda b: b + b"\n,,,,\n\n"),
        r"Total NCC",
        exit_code=0,
        verify=same_as_reference,
    ),
    Case(
        "plots: blank stratum",
        set_cell(P, 9, "stratum", " "),
        r"plots\.csv: row 9, column 'stratum': empty value",
    ),
    # Rasters ([rasters] biomass layers over the example's extent).
    Case(
        "rasters: misaligned by half a cell",
        biomass_rasters(juniper={}, big_sagebrush={"transform": SHIFTED_GRID}),
        r"big_sagebrush\.tif: key 'rasters\.biomass\.big_sagebrush': raster is not on the grid "
        r"of the first raster layer .*shifted by 0\.500",
    ),
    Case(
        "rasters: all nodata",
        biomass_rasters(juniper={"value": -1.0}),
        r"units\.gpkg: attribute 'unit_id': unit 'Flintwhistle' has no cell with data in every "
        r"raster layer .*rasters\.biomass\.juniper",
    ),
    Case(
        "rasters: grid in a geographic CRS",
        biomass_rasters(
            juniper={"crs": "EPSG:4326", "transform": from_origin(-111.55, 38.8, 0.001, 0.001)}
        ),
        r"juniper\.tif: key 'rasters\.biomass\.juniper': the raster that defines the grid has "
        r"a geographic CRS",
    ),
    Case(
        "rasters: not a raster",
        steps(biomass_rasters(juniper={}), rewrite_bytes("juniper.tif", lambda b: b"II*\0")),
        r"juniper\.tif: key 'rasters\.biomass\.juniper': cannot read raster",
    ),
    Case(
        "rasters: complex data type",
        biomass_rasters(juniper={}, big_sagebrush={"dtype": "complex64"}),
        RASTER_KEY + r".*raster values are not real numbers",
    ),
    Case(
        "rasters: three bands (an RGB image)",
        biomass_rasters(juniper={}, big_sagebrush={"dtype": "uint8", "bands": 3, "nodata": None}),
        RASTER_KEY + r".*raster has 3 bands",
    ),
    Case(
        "rasters: absurd biomass (1e9 kg/ha)",
        biomass_rasters(juniper={}, big_sagebrush={"value": 1e9}),
        RASTER_KEY[:-2] + r", cell row \d+, column \d+: raster value out of range.*found 1e\+09",
    ),
    Case(
        "rasters: negative biomass",
        biomass_rasters(juniper={}, big_sagebrush={"value": -5, "dtype": "int16"}),
        RASTER_KEY[:-2] + r", cell row \d+, column \d+: raster value out of range.*found -5",
    ),
    Case(
        "counts: column misspelt",
        steps(NO_CURRENT_ANIMALS, rename_column("counts.csv", "count", "counts")),
        r"counts\.csv" + ROW1 + r"missing column 'count'; did you mean to name 'counts'",
    ),
    Case(
        "counts: a unit without counts",
        steps(NO_CURRENT_ANIMALS, drop_rows("counts.csv", "unit_id", "Wrenfall")),
        r"counts\.csv: column 'unit_id': no count for unit 'Wrenfall'",
    ),
    # issue 14, second corpus: tracebacks and messages
    Case(
        "project: arrays nested 5,000 deep",
        append_text("project.toml", "x = " + "[" * 5000 + "]" * 5000),
        r"project\.toml: line 57: arrays or inline tables nested too deeply to read",
    ),
    Case(
        "project: inline tables nested 3,000 deep",
        append_text("project.toml", "x = " + "{a=" * 3000 + "1" + "}" * 3000),
        r"project\.toml: line 57: arrays or inline tables nested too deeply to read",
    ),
    Case(
        "project: input is a symbolic link to itself",
        steps(
            symlink("loop.csv", "loop.csv"),
            replace_text("project.toml", '"plots.csv"', '"loop.csv"'),
        ),
        r"project\.toml: input file for key 'inputs\.plots' is a symbolic link that loops back on "
        r"itself .*found /.*/loop\.csv\)",
    ),
    Case(
        "project: input is a link to /dev/zero",
        steps(
            symlink("zero.csv", "/dev/zero"),
            replace_text("project.toml", '"plots.csv"', '"zero.csv"'),
        ),
        r"project\.toml: input file for key 'inputs\.plots' is not a regular file but a character "
        r"device .*found /.*/zero\.csv\)",
    ),
    Case(
        "project: input is a named pipe",
        steps(
            lambda folder: os.mkfifo(folder / "pipe.gpkg"),
            replace_text("project.toml", '"units.gpkg"', '"pipe.gpkg"'),
        ),
        r"project\.toml: input file for key 'inputs\.units' is not a regular file but a named pipe "
        r"\(FIFO\) .*found /.*/pipe\.gpkg\)",
    ),
    Case(
        "project: units layer is the project's own folder",
        replace_text("project.toml", '"units.gpkg"', '"."'),
        r"project\.toml: input file for key 'inputs\.units' is a folder that holds the project "
        r"file",
    ),
    Case(
        "counts: year of 10^12",
        set_cell("counts.csv", 2, "year", "1000000000000"),
        r"counts\.csv: row 2, column 'year': value out of range \(expected a number >= 1800 and "
        r"<= 2200",
    ),
    Case(
        "counts: year -5000",
        set_cell("counts.csv", 5, "year", "-5000"),
        r"counts\.csv: row 5, column 'year': value out of range .*found -5000",
    ),
    Case(
        "animal classes: intake of 1 g a day",
        edit_csv(A, lambda t: t.assign(intake_kg_per_day=["0.001", "", ""])),
        r"animal_classes\.csv: row 2, column 'intake_kg_per_day': intake too small for the "
        r"requirement of 'adult_female' in state 'gestation': its diet would need .* kcal DE/g "
        r".*found 0\.001 kg/day",
    ),
    Case(
        "animal classes: intake of a non-target class of 250 g a day",
        edit_csv(A, lambda t: t.assign(intake_kg_per_day=["", "", "0.25"])),
        r"animal_classes\.csv: row 4, column 'intake_kg_per_day': intake too small for the "
        r"requirement of 'adult_male' in state 'maintenance'",
    ),
    Case(
        "project: target state misspelt",
        replace_text("project.toml", 'state = "gestation"', 'state = "gestaton"'),
        r"project\.toml: key 'target\.state': unknown nutritional state 'gestaton' \(expected "
        r"one of the known states gestation, .*found 'gestaton'\)",
    ),
    Case(
        "units: local engineering CRS",
        edit_layer(U, lambda g: g.set_crs(SITE_GRID, allow_override=True)),
        r"units\.gpkg: units layer has a local \(engineering\) coordinate reference system, not "
        r"tied to the Earth .*found CRS 'site grid'",
    ),
    Case(
        "rasters: grid in a local engineering CRS",
        biomass_rasters(juniper={"crs": SITE_GRID}),
        r"juniper\.tif: key 'rasters\.biomass\.juniper': raster has a local \(engineering\) "
        r"coordinate reference system",
    ),
    Case(
        "rasters: second layer in a local engineering CRS, resampled",
        steps(
            biomass_rasters(juniper={}, big_sagebrush={"crs": SITE_GRID}),
            set_key("rasters", 'resample = "bilinear"'),
        ),
        RASTER_KEY + r"raster has a local \(engineering\) coordinate reference system",
    ),
    Case(
        "rasters: grid stored south-up (valid: as north-up)",
        south_up_biomass("juniper"),
        r"Total NCC",
        exit_code=0,
        verify=same_as_north_up,
    ),
    Case(
        "rasters: second layer south-up",
        biomass_rasters(
            juniper={},
            big_sagebrush={"transform": Affine(100.0, 0.0, GRID.c, 0.0, 100.0, GRID.f - 1e4)},
        ),
        RASTER_KEY + r"raster is not on the grid of the first raster layer \(expected a north-up "
        r"grid .*found a south-up grid \(rows from south to north",
    ),
    Case(
        "rasters: second layer sheared",
        biomass_rasters(
            juniper={},
            big_sagebrush={"transform": Affine(100.0, 1.0, GRID.c, 0.0, -100.0, GRID.f)},
        ),
        RASTER_KEY + r"raster is not on the grid of the first raster layer \(expected a grid "
        r"without rotation or shear, .*found a rotated or sheared grid \(rotation terms 1, 0",
    ),
    Case(
        "rasters: GeoTIFF cut off halfway",
        steps(
            biomass_rasters(juniper={}), rewrite_bytes("juniper.tif", lambda b: b[: len(b) // 2])
        ),
        r"juniper\.tif: key 'rasters\.biomass\.juniper', cells from row \d+, column \d+: cannot "
        r"read the raster's cells: the file is truncated or corrupt",
    ),
    Case(
        "units: GeoPackage cut off halfway",
        rewrite_bytes(U, lambda b: b[: len(b) // 2]),
        r"units\.gpkg: cannot read units layer: the file is truncated or corrupt",
    ),
    # issue 14, second corpus: output safety, injection
    # Wrong numbers with exit 0: no animals, NUL characters (other programs cut text there).
    Case(
        "units: a unit without animals (valid: reduction 0, not blank)",
        set_current_animals(1095, 1131, 0, 992, 575, 540),
        r"Total NCC",
        exit_code=0,
        verify=no_reduction_without_animals("Petrelhollow"),
    ),
    Case(
        "plots: NUL in a plot id",
        set_cell(P, 3, "plot_id", "P0\x0001"),
        r"plots\.csv: row 3, column 'plot_id': plots table holds a NUL character \(byte 0\)"
        r".*found 'P0\\x0001'",
    ),
    Case(
        "forage classes: NUL in a class name",
        set_cell(F, 4, "forage_class", "cheat\x00grass"),
        r"forage_classes\.csv: row 4, column 'forage_class': forage-class table holds a NUL",
    ),
    Case(
        "animal classes: NUL in the header",
        replace_text(A, "body_mass_kg", "body_mass\x00kg"),
        r"animal_classes\.csv: row 1 \(header\), column 2: animal-class table holds a NUL",
    ),
    Case(
        "counts: NUL in a unit id",
        set_cell("counts.csv", 5, "unit_id", "Flint\x00whistle"),
        r"counts\.csv: row 5, column 'unit_id': counts table holds a NUL",
    ),
    Case(
        "units: NUL in a unit id (GDAL reads 'Cold')",
        sql_update(U, "units", "unit_id", "Coldmarrow", "Cold\x00marrow"),
        r"units\.gpkg: feature 2 \(of 6\): units layer has a NUL character \(byte 0\) in "
        r"attribute 'unit_id'.*found 'Cold\\x00marrow'",
    ),
    Case(
        "strata: NUL in a stratum name",
        sql_update(S, "strata", "stratum", "aspen", "asp\x00en"),
        r"strata\.gpkg: feature \d+ \(of 70\): strata layer has a NUL character .*'stratum'",
    ),
    # Injection: spreadsheet formulas, Markdown and HTML, terminal escape sequences.
    Case(
        "units and a forage class named like formulas (valid: defused in every CSV)",
        steps(
            set_unit_ids(
                '=HYPERLINK("http://e.invalid","x")', "+1+1", "-2+3", "@SUM(A1)", "-3.5", "Wrenfall"
            ),
            replace_text(P, "cheatgrass", "=cheatgrass", count=-1),
            replace_text(F, "cheatgrass", "=cheatgrass", count=-1),
        ),
        r"Total NCC",
        exit_code=0,
        verify=formulas_defused,
    ),
    Case(
        "units: ids with Markdown and HTML (valid: escaped in the .md and the report)",
        set_unit_ids(
            "a|b",
            "two\nlines",
            "<script>alert(1)</script>",
            "[link](http://e.invalid)",
            '<b onmouseover="x">bold</b>',
            "`code` *em* $x$",
        ),
        r"Total NCC",
        exit_code=0,
        verify=markup_escaped,
    ),
    Case(
        "units: id with escape sequences (valid: printed escaped)",
        set_unit_ids(
            "Flintwhistle",
            "\x1b[2J\x1b[Hnutricap: OK",
            "Petrelhollow",
            "Rimgrass",
            "Thistlemoss",
            "Wrenfall\u202e",
        ),
        NO_ESCAPE_AND + r"\\x1b\[2J\\x1b\[Hnutricap: OK .*\n[\s\S]*Wrenfall\\u202e",
        exit_code=0,
        verify=lambda folder, table, reference: _numbers_as_reference(table, reference),
    ),
    Case(
        "units: an id with an escape sequence, twice",
        set_unit_ids("A", "\x1b[31mB", "C", "\x1b[31mB", "E", "F"),
        r"units\.gpkg: feature 4 \(of 6\), attribute 'unit_id': duplicate unit_id .*found "
        r"'\\x1b\[31mB'\)$",
    ),
    Case(
        "units: an id with a newline, twice (one line)",
        set_unit_ids("A", "B\nnutricap: fake", "C", "D", "B\nnutricap: fake", "F"),
        r"units\.gpkg: feature 5 \(of 6\), attribute 'unit_id': duplicate unit_id .*found "
        r"'B\\nnutricap: fake'\)$",
    ),
    # The output folder: --overwrite removes only an earlier run's own, unchanged files.
    Case(
        "output: --overwrite onto results holding a file of the user's",
        lambda folder: None,
        r"results: the output folder holds files that are not nutricap results; it is not "
        r"replaced .*found notes\.txt \(not written by nutricap\)",
        prepare_out=earlier_results(("notes.txt", "my notes\n")),
    ),
    Case(
        "output: --overwrite onto results with a table changed since",
        lambda folder: None,
        r"results: the output folder holds files .*capacity_by_unit\.csv \(changed since "
        r"nutricap wrote it\)",
        prepare_out=earlier_results(changed="capacity_by_unit.csv"),
    ),
    Case(
        "output: --overwrite onto results with a subfolder of the user's",
        lambda folder: None,
        r"results: the output folder holds files .*photos/ \(not written by nutricap\)",
        prepare_out=earlier_results(("photos/a.jpg", "jpeg")),
    ),
    Case(
        "output: --overwrite onto a folder of other files with a run.json",
        lambda folder: None,
        r"results: the output folder holds files that are not nutricap results.*run\.json "
        r"\(not written by nutricap\)",
        prepare_out=other_files,
    ),
    # issue 12: strict project-file types and ranges, the user's own requirement table
    Case(
        "units: current_animals = inf",
        set_current_animals(1095, 1131, float("inf"), 992, 575, 540),
        r"units\.gpkg: feature 3 \(of 6\), attribute 'current_animals': units layer has a bad "
        r"current_animals \(expected a number at least 0; found inf\)",
    ),
    Case(
        "project: season_days = true (a boolean is not a number)",
        replace_text("project.toml", "season_days = 120", "season_days = true"),
        r"project\.toml: 1 problem: key 'project\.season_days': Input should be a valid number "
        r"\(found True\)",
    ),
    Case(
        "project: season dates spanning 730 days",
        replace_text(
            "project.toml",
            "season_days = 120",
            "season_start = 2025-01-01\nseason_end = 2026-12-31",
        ),
        r"project\.toml: 1 problem: key 'project': season_start to season_end spans 730 days; a "
        r"season is at most 366 days",
    ),
    Case(
        "project: infinite interval level and a decimal replicate count",
        replace_text(
            "project.toml",
            "bootstrap_replicates = 1000\ninterval_level = 0.9",
            "bootstrap_replicates = 1000.0\ninterval_level = inf",
        ),
        r"project\.toml: 2 problems: key 'uncertainty\.bootstrap_replicates': Input should be a "
        r"valid integer \(found 1000\.0\); key 'uncertainty\.interval_level': Input should be a "
        r"finite number \(found inf\)",
    ),
    Case(
        "project: own requirement table with a negative multiplier",
        steps(
            write_text(
                "my_states.csv",
                "state,season,bmr_multiplier,intake_g_per_kg075_per_day,dp_g_per_kg075_per_day,"
                "source\nmaintenance,any,2.0,75,2.5,invented\ngestation,any,-2.1,78,2.6,invented\n"
                "growth,any,2.9,95,9.0,invented\n",
            ),
            set_key("inputs", 'nutritional_states = "my_states.csv"'),
        ),
        r"my_states\.csv: row 3, column 'bmr_multiplier': value out of range",
    ),
    Case(
        "project: own requirement table without the target's state",
        steps(
            write_text(
                "my_states.csv",
                "state,season,bmr_multiplier,intake_g_per_kg075_per_day,dp_g_per_kg075_per_day,"
                "source\nmaintenance,any,2.0,75,2.5,invented\ngrowth,any,2.9,95,9.0,invented\n",
            ),
            set_key("inputs", 'nutritional_states = "my_states.csv"'),
        ),
        r"animal_classes\.csv: row 2, column 'state': unknown nutritional state 'gestation'",
    ),
    # issue 13: column mapping, shapefiles, spreadsheets
    Case(
        "units: mapping names an attribute the layer lacks",
        map_columns("units", unit_id="UNIT_NAME"),
        r"project\.toml: key 'columns\.units\.unit_id': \S*units\.gpkg has no column "
        r"'UNIT_NAME'; did you mean 'unit_id'\?",
    ),
    Case(
        "plots: mapping with a name nutricap does not read",
        map_columns("plots", plot_idd="plot_id"),
        r"project\.toml: key 'columns\.plots\.plot_idd': the plots table has no column "
        r"'plot_idd' to map; did you mean 'plot_id'\?",
    ),
    Case(
        "counts: mapping onto a column beside one of ours",
        map_columns("counts", count="year"),
        r"project\.toml: key 'columns\.counts\.count': \S*counts\.csv has a column 'count' of "
        r"its own besides 'year' mapped to it",
    ),
    Case(
        "forage classes: one column mapped twice",
        steps(
            rename_column(F, "cp_pct", "CP"),
            map_columns("forage_classes", cp_pct="CP", dmd_pct="CP"),
        ),
        r"project\.toml: key 'columns\.forage_classes\.dmd_pct': column 'CP' is mapped twice, "
        r"to 'cp_pct' and 'dmd_pct'",
    ),
    Case(
        "project: mapping for an input the project does not read",
        map_columns("nutritional_states", state="STATE"),
        r"project\.toml: key 'columns\.nutritional_states': \[columns\] names the input "
        r"'nutritional_states', which this project does not read",
    ),
    Case(
        "units: bad value of a mapped attribute names the layer's own",
        steps(
            edit_layer(
                U,
                lambda g: g.rename(columns={"current_animals": "ELK_NOW"}).assign(
                    ELK_NOW=[10, 20, -5, 40, 50, 60]
                ),
            ),
            map_columns("units", current_animals="ELK_NOW"),
        ),
        r"units\.gpkg: feature 3 \(of 6\), attribute 'ELK_NOW' \(mapped to current_animals\): "
        r"units layer has a bad current_animals",
    ),
    Case(
        "plots: bad value of a mapped column names the table's own",
        steps(
            rename_column(P, "dry_mass_g", "Mass (g)"),
            set_cell(P, 5, "Mass (g)", "-1"),
            map_columns("plots", dry_mass_g="Mass (g)"),
        ),
        r"plots\.csv: row 5, column 'Mass \(g\)' \(mapped to dry_mass_g\): value out of range",
    ),
    Case(
        "units and strata: shapefiles with names cut to 10 characters (valid)",
        steps(as_shapefile(U), as_shapefile(S)),
        r"Total NCC",
        exit_code=0,
        verify=same_as_reference,
    ),
    Case(
        "strata: shapefile whose cut name has a numbered twin",
        as_shapefile(S, lambda g: g.assign(accessible_fraction_2019=0.3)),
        r"strata\.shp: attribute 'accessible': strata layer attribute 'accessible' is "
        r"'accessible_fraction' cut to 10 characters, but so could be 'accessib_1'.*"
        r"\[columns\.strata\] accessible_fraction = 'accessible'",
    ),
    Case(
        "units: GeoPackage attribute named as a shapefile cuts current_animals",
        edit_layer(U, lambda g: g.rename(columns={"current_animals": "current_an"})),
        r"units\.gpkg: attribute 'current_an': units layer attribute 'current_an' looks like "
        r"'current_animals' cut to 10 characters.*\[columns\.units\] current_animals = "
        r"'current_an'",
    ),
    Case(
        "plots: a sheet named for a CSV table",
        append_text("project.toml", '[sheets]\nplots = "Field 2026"'),
        r"project\.toml: key 'sheets\.plots': a sheet is named for \S*plots\.csv, which is not "
        r"a spreadsheet",
    ),
    Case(
        "plots: an .xls workbook",
        lambda folder: (
            shutil.copyfile(folder / P, folder / "plots.xls"),
            replace_text("project.toml", '"plots.csv"', '"plots.xls"')(folder),
        ),
        r"plots\.xls: plots table is a \.xls spreadsheet \(expected a CSV file or an \.xlsx "
        r"workbook",
    ),
    Case(
        "plots: workbook on a named sheet (valid)",
        as_workbook(P, "Field 2026"),
        r"Total NCC",
        exit_code=0,
        verify=same_as_reference,
        needs="openpyxl",
    ),
    Case(
        "plots: workbook without the sheet named",
        steps(
            as_workbook(P, "Field 2026"),
            replace_text("project.toml", 'plots = "Field 2026"', 'plots = "Field 2025"'),
        ),
        r"project\.toml: key 'sheets\.plots': \S*plots\.xlsx has no sheet 'Field 2025'; did "
        r"you mean 'Field 2026'\?",
        needs="openpyxl",
    ),
    Case(
        "plots: workbook with a negative mass (sheet and row named)",
        as_workbook(P, "Field 2026", change=lambda sheet: sheet.cell(7, 4, -3.0)),
        r"plots\.xlsx: sheet 'Field 2026', row 7, column 'dry_mass_g': value out of range",
        needs="openpyxl",
    ),
    Case(
        "plots: workbook with a non-ISO date for a number",
        as_workbook(P, "Field 2026", change=lambda sheet: sheet.cell(4, 4, "12/1/2026")),
        r"plots\.xlsx: sheet 'Field 2026', row 4, column 'dry_mass_g': not a number: a date, "
        r"and not in ISO form \(YYYY-MM-DD",
        needs="openpyxl",
    ),
    Case(
        "plots: a text file named .xlsx",
        lambda folder: (
            shutil.copyfile(folder / P, folder / "plots.xlsx"),
            replace_text("project.toml", '"plots.csv"', '"plots.xlsx"')(folder),
        ),
        r"plots\.xlsx: plots table cannot be read as an \.xlsx workbook",
        needs="openpyxl",
    ),
    Case(
        "counts: a year written as a date in month/day/year form",
        set_cell("counts.csv", 3, "year", "12/1/2026"),
        r"counts\.csv: row 3, column 'year': not a number: a date, and not in ISO form",
    ),
    Case(
        "forage classes: NA where a blank is allowed (valid)",
        set_cell(F, 2, "height_cm", "NA"),
        r"Total NCC",
        exit_code=0,
        verify=same_as_reference,
    ),
    Case(
        "forage classes: n/a where a value is required",
        set_cell(F, 2, "allowable_use", "n/a"),
        r"forage_classes\.csv: row 2, column 'allowable_use': not a number",
    ),
    # issue 17: raster scenarios (compare on project_rasters.toml, refused before the pass)
    Case(
        "raster scenario: unknown scenario name",
        lambda folder: None,
        r"project_rasters\.toml: key 'scenarios\.no_such_plan': no scenario named 'no_such_plan'",
        project="project_rasters.toml",
        scenario="no_such_plan",
    ),
    Case(
        "raster scenario: new_stratum not a stratum",
        edit_layer(
            "treatments_burn.gpkg",
            lambda frame: frame.assign(new_stratum=["grass_meadow", "aspen_grove"]),
        ),
        r"treatments_burn\.gpkg: feature 2 \(of 2\), attribute 'new_stratum': new_stratum is "
        r"not a stratum with plots \(expected empty, or one of .*; found 'aspen_grove'\)",
        project="project_rasters.toml",
        scenario="prescribed_burn",
    ),
    Case(
        "raster scenario: treatment type without responses",
        edit_layer("treatments_burn.gpkg", lambda frame: frame.assign(treatment="mowing")),
        r"treatments_burn\.gpkg: attribute 'treatment': treatment 'mowing' has no rows in the "
        r"response table",
        project="project_rasters.toml",
        scenario="prescribed_burn",
    ),
    Case(
        "raster scenario: treatment year not a calendar year",
        edit_layer("treatments_burn.gpkg", lambda frame: frame.assign(year=[2028, 20280])),
        r"treatments_burn\.gpkg: feature 2 \(of 2\), attribute 'year': treatment year is not "
        r"a calendar year",
        project="project_rasters.toml",
        scenario="prescribed_burn",
    ),
    Case(
        "raster scenario: overlapping treatment polygons",
        edit_layer(
            "treatments_burn.gpkg",
            lambda frame: frame.set_geometry([frame.geometry.iloc[0]] * 2, crs=frame.crs),
        ),
        r"treatments_burn\.gpkg: .*overlap",
        project="project_rasters.toml",
        scenario="prescribed_burn",
    ),
    Case(
        "raster scenario: response multiplier out of range",
        set_cell("treatment_responses.csv", 15, "biomass_multiplier", "-1"),
        r"treatment_responses\.csv: row 15, column 'biomass_multiplier': value out of range",
        project="project_rasters.toml",
        scenario="prescribed_burn",
    ),
    # issue 13: bare plots, init, edges
    Case(
        "plots: a row without forage class that records forage",
        set_cell(P, 5, "forage_class", ""),
        r"plots\.csv: row 5, column 'forage_class': forage without a forage class \(expected a "
        r"forage class, or mass 0 on the one row of a bare plot",
    ),
    Case(
        "plots: a plot recorded both bare and with forage",
        copy_row(P, 2, forage_class="", dry_mass_g="0"),
        r"plots\.csv: row 2, column 'forage_class': plot recorded both as bare and with a "
        r"forage class .*plot 'P001'",
    ),
    Case(
        "plots: a comment line above a data row",
        insert_line(P, 3, "# P000,sagebrush_steppe,big_sagebrush,1,1"),
        r"plots\.csv: row 3: a comment line \(beginning with '# '\) above a data row \(expected "
        r"comment lines only after the last data row",
    ),
    Case(
        "plots: comment lines after the last data row (valid, skipped)",
        steps(append_text(P, "# P000,sagebrush_steppe,big_sagebrush,1,1"), append_text(P, "")),
        r"Total NCC",
        exit_code=0,
        verify=same_as_reference,
    ),
    Case(
        "plots: a last row whose plot id begins with # is data, not a comment",
        append_text(P, "#P999,sagebrush_steppe,big_sagebrush,-1,0.25"),
        r"plots\.csv: row \d+, column 'dry_mass_g': value out of range",
    ),
    Case(
        "project: a layer missing and two tables without data rows (a template not filled in)",
        steps(
            lambda folder: (folder / "strata.gpkg").unlink(),
            edit_csv(F, lambda t: t.iloc[:0]),
            edit_csv(P, lambda t: t.iloc[:0]),
        ),
        r"project\.toml: the project is not filled in yet: 3 inputs to provide: 'inputs\.strata' "
        r"strata\.gpkg does not exist; 'inputs\.forage_classes' forage_classes\.csv has no data "
        r"rows yet; 'inputs\.plots' plots\.csv has no data rows yet",
    ),
    Case(
        "supply: strata_without_forage names a sampled stratum and one not on the map (valid)",
        replace_text(
            "project.toml",
            "[forage_use]\n",
            '[supply]\nstrata_without_forage = ["sagebrush_steppe", "glacer"]\n\n[forage_use]\n',
        ),
        r"note: strata listed in \[supply\] strata_without_forage have clip plots, and their "
        r"plots are used .*sagebrush_steppe \(\d+ plots\).*\nnote: strata listed in \[supply\] "
        r"strata_without_forage are not on the strata map .*glacer",
        exit_code=0,
        verify=same_as_reference,
    ),
    Case(
        "counts: a unit id that matches no unit (valid, noted)",
        steps(
            append_text("counts.csv", "Nowhere Flat,2022,30"),
            append_text("counts.csv", "Nowhere Flat,2023,35"),
            append_text("counts.csv", "Nowhere Flat,2024,40"),
        ),
        r"note: counts for 1 unit id\(s\) that match no unit of the units layer \(3 rows\): "
        r"'Nowhere Flat'",
        exit_code=0,
        verify=same_as_reference,
    ),
    # issue 16: other herbivores and diet limits
    Case(
        "other herbivores: a unit the units layer lacks",
        set_cell("cattle_permit.csv", 3, "unit_id", "Nowhere"),
        r"cattle_permit\.csv: row 3, column 'unit_id': unit 'Nowhere' is not in the units layer",
    ),
    Case(
        "other herbivores: negative AUMs",
        set_cell("cattle_permit.csv", 2, "aums", "-40"),
        r"cattle_permit\.csv: row 2, column 'aums': value out of range",
    ),
    Case(
        "other herbivores: a unit twice in the numbers table",
        copy_row("cattle_permit.csv", 2),
        r"cattle_permit\.csv: row 4.*'unit_id'",
    ),
    Case(
        "other herbivores: both animals and AUMs in the numbers table",
        edit_csv("cattle_permit.csv", lambda table: table.assign(animals=10)),
        r"cattle_permit\.csv: row 1 \(header\): a herd numbers table needs one numbers column",
    ),
    Case(
        "other herbivores: unknown class in the preference",
        replace_text("project.toml", "{ grass = 1.0,", "{ grasss = 1.0,"),
        r"project\.toml: key 'other_herbivores\.0\.preference\.grasss': unknown forage class "
        r"or growth form 'grasss'",
    ),
    Case(
        "other herbivores: a negative preference",
        replace_text("project.toml", "browse = 0.05 }", "browse = -0.05 }"),
        r"project\.toml: 1 problem: key 'other_herbivores\.0': preference 'browse' must lie "
        r"between 0 and 1000 \(found -0\.05\)",
    ),
    Case(
        "other herbivores: AUMs with a body mass",
        replace_text(
            "project.toml", 'timing = "before"\n', 'timing = "before"\nbody_mass_kg = 500\n'
        ),
        r"project\.toml: key 'other_herbivores\.0\.body_mass_kg': numbers in AUMs are forage "
        r"already",
    ),
    Case(
        "other herbivores: head counts without days on the range",
        steps(
            edit_csv("cattle_permit.csv", lambda table: table.rename(columns={"aums": "animals"})),
            replace_text(
                "project.toml", 'timing = "before"\n', 'timing = "before"\nbody_mass_kg = 500\n'
            ),
        ),
        r"project\.toml: key 'other_herbivores\.0\.days': missing days",
    ),
    Case(
        "other herbivores: a units-layer column that is not there",
        replace_text(
            "project.toml",
            'numbers_table = "cattle_permit.csv"',
            'animals_column = "cattle_head"\nbody_mass_kg = 500\ndays = 90',
        ),
        r"units\.gpkg.*cattle_head",
    ),
    Case(
        "other herbivores: negative head counts in the units layer",
        steps(
            edit_layer("units.gpkg", lambda units: units.assign(cattle_head=-3.0)),
            replace_text(
                "project.toml",
                'numbers_table = "cattle_permit.csv"',
                'animals_column = "cattle_head"\nbody_mass_kg = 500\ndays = 90',
            ),
        ),
        r"units\.gpkg: feature .*units layer has a bad cattle_head",
    ),
    Case(
        "other herbivores: numbers given twice",
        replace_text(
            "project.toml",
            'numbers_table = "cattle_permit.csv"',
            'numbers_table = "cattle_permit.csv"\naums_column = "current_animals"',
        ),
        r"project\.toml: 1 problem: key 'other_herbivores\.0': give exactly one of "
        r"animals_column, aums_column, numbers_table",
    ),
    Case(
        "other herbivores: unknown timing",
        replace_text("project.toml", 'timing = "before"', 'timing = "after"'),
        r"project\.toml: 1 problem: key 'other_herbivores\.0\.timing'",
    ),
    Case(
        "other herbivores: a misspelt key",
        replace_text("project.toml", "preference = {", "preferences = {"),
        r"project\.toml: 1 problem: unknown key 'other_herbivores\.0\.preferences'; did you "
        r"mean 'preference'\?",
    ),
    Case(
        "other herbivores: the numbers table is missing",
        lambda folder: (folder / "cattle_permit.csv").unlink(),
        r"project\.toml: input file for key 'other_herbivores\.0\.numbers_table' does not exist",
    ),
    # third probe (2026-12-04): tracebacks and inputs read wrongly without a word
    Case(
        "forage classes: a quote never closed",
        replace_text("forage_classes.csv", "\nbitterbrush,", '\n"bitterbrush,'),
        r"forage_classes\.csv: row 3: a quoted value is never closed",
    ),
    Case(
        "rasters: an empty (0-byte) file",
        steps(biomass_rasters(juniper={}), write_text("juniper.tif", "")),
        r"juniper\.tif: key 'rasters\.biomass\.juniper': cannot read raster \(expected a "
        r"raster GDAL reads .*found an empty file \(0 bytes\)\)",
    ),
    Case(
        "project: the plots table is a GeoPackage",
        replace_text("project.toml", '"plots.csv"', '"units.gpkg"'),
        r"units\.gpkg: plots table is not a table but a binary file",
    ),
    Case(
        "other herbivores: two herds of one name",
        append_text(
            "project.toml",
            '\n[[other_herbivores]]\nname = "cattle permit"\ntiming = "before"\n'
            'numbers_table = "cattle_permit.csv"\npreference = { grass = 1.0 }\n',
        ),
        r"project\.toml: 1 problem: key 'other_herbivores\.1\.name': the name 'cattle permit' "
        r"is used by an earlier herd as well .*found 'cattle permit'\)",
    ),
    Case(
        "rasters: a VRT whose source tile is missing",
        steps(
            biomass_rasters(juniper={}, big_sagebrush={}),
            write_text("sagebrush.vrt", VRT_OF_A_MISSING_TILE),
            replace_text("project.toml", '"big_sagebrush.tif"', '"sagebrush.vrt"'),
        ),
        r"sagebrush\.vrt: key 'rasters\.biomass\.big_sagebrush', cells from row 0, column 0: "
        r"cannot read the raster's cells: a source file of the VRT is missing.*missing\.tif",
    ),
    Case(
        "project: saved with a UTF-8 byte-order mark (valid)",
        rewrite_bytes("project.toml", lambda data: b"\xef\xbb\xbf" + data),
        r"",
        exit_code=0,
        verify=same_as_reference,
    ),
    Case(
        "units: a shapefile without its .dbf",
        steps(as_shapefile("units.gpkg"), lambda folder: (folder / "units.dbf").unlink()),
        r"units\.shp: units layer: the shapefile's \.dbf file is missing \(expected units\.dbf",
    ),
    Case(
        "units: a shapefile without its .shx",
        steps(as_shapefile("units.gpkg"), lambda folder: (folder / "units.shx").unlink()),
        r"units\.shp: units layer: the shapefile's \.shx file is missing",
    ),
    Case(
        "units: a NULL current_animals",
        edit_layer("units.gpkg", lambda units: units.assign(current_animals=np.nan)),
        r"units\.gpkg: feature 1 \(of 6\), attribute 'current_animals': .*found an empty "
        r"\(NULL\) value\)",
    ),
    Case(
        "rasters: a Dask scheduler address without a port",
        steps(
            biomass_rasters(juniper={}),
            append_text("project.toml", 'dask_scheduler = "not a url at all"\n'),
        ),
        r"project\.toml: 1 problem: key 'rasters\.dask_scheduler': not a scheduler address",
    ),
    Case(
        "rasters: calibration plots in an unknown CRS",
        steps(
            biomass_rasters(juniper={}),
            append_text(
                "project.toml",
                '[rasters.calibrated]\nindex = "juniper.tif"\nplots = "plots.csv"\n'
                'groups = { shrubs = ["big_sagebrush"] }\nplots_crs = "EPSG:99999"\n',
            ),
        ),
        r"project\.toml: 1 problem: key 'rasters\.calibrated\.plots_crs': unknown CRS",
    ),
    Case(
        "rasters: biomass stored scaled (GDAL scale 0.1)",
        steps(biomass_rasters(juniper={}), scaled_raster("juniper.tif", 0.1)),
        r"juniper\.tif: key 'rasters\.biomass\.juniper': raster stores its values scaled .*"
        r"found scale 0\.1, offset 0",
    ),
    Case(
        "availability: slope of 120 degrees",
        steps(biomass_rasters(juniper={}), slope_raster(120.0, "degrees")),
        r"slope\.tif: key 'availability\.slope', cell row \d+, column \d+: raster value out of "
        r"range \(expected slope in degrees between 0 and 90; found 120",
    ),
    Case(
        "units: a polygon at 1e200 m",
        edit_layer(
            "units.gpkg",
            set_geometry(2, lambda _: Polygon([(1e200, 1e200), (2e200, 1e200), (2e200, 2e200)])),
        ),
        r"units\.gpkg: feature 2 \(of 6\): units layer has coordinates that lie nowhere on the "
        r"Earth in its CRS",
    ),
]
