"""Tests of nutricap.inputs.columns: the user's column names, shapefiles' cut names and
spreadsheets, end to end on the invented example.

The reference of every comparison is the same invented example read as nutricap writes it
(CSV tables, GeoPackage layers): the data are identical, only the file format or the column
names differ, so the capacity table must be the same to 1e-9 (or the run refused). Each
comparison also checks that the input it renames matters (dropping it changes the table), so
that a comparison cannot pass by ignoring the renamed column.
"""

import shutil
import warnings
from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd
import pytest

from nutricap.errors import InputError, ProjectFileError, SpatialError, TableError
from nutricap.inputs.columns import TableSource, read_csv_table
from nutricap.inputs.project import load_project
from nutricap.inputs.tables import FORAGE_CLASS_COLUMNS, PLOT_COLUMNS, read_plots
from nutricap.report.manifest import input_checksums, sha256_of_file
from nutricap.workflow import estimate

NUMBERS = ["ncc_animals", "ecc_animals", "allowable_use_animals"]
TABLES = ("forage_classes", "plots", "animal_classes", "counts")


def _copy(example_project: Path, folder: Path) -> Path:
    shutil.copytree(example_project.parent, folder)
    project = folder / "project.toml"
    text = project.read_text().replace("bootstrap_replicates = 1000", "bootstrap_replicates = 0")
    project.write_text(text)
    return project


def _table(project: Path) -> pd.DataFrame:
    return estimate(load_project(project)).by_unit.set_index("unit_id")


@pytest.fixture(scope="module")
def reference(example_project, tmp_path_factory):
    """The capacity table of the unchanged example (CSV and GeoPackage; invented data)."""
    return _table(_copy(example_project, tmp_path_factory.mktemp("reference") / "inputs"))


def _same_numbers(table: pd.DataFrame, reference: pd.DataFrame) -> None:
    """Every number of the capacity table (current use included) to 1e-9, every text equal."""
    assert list(table.index) == list(reference.index)
    assert list(table.columns) == list(reference.columns)
    numeric = reference.select_dtypes("number").columns
    assert {"accessible_ha", "current_animals", *NUMBERS} <= set(numeric)
    np.testing.assert_allclose(
        table[numeric].to_numpy(float), reference[numeric].to_numpy(float), rtol=1e-9, atol=1e-9
    )
    text = reference.columns.difference(numeric)
    pd.testing.assert_frame_equal(table[text], reference[text])


def _differs(table: pd.DataFrame, reference: pd.DataFrame) -> bool:
    return not np.allclose(table[NUMBERS], reference[NUMBERS], rtol=1e-9, atol=1e-9)


def _rewrite_layer(path: Path, change, *, suffix: str = ".gpkg") -> Path:
    frame = change(gpd.read_file(path))
    path.unlink()
    target = path.with_suffix(suffix)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # GDAL's warning that it cuts long names: on purpose
        frame.to_file(target, driver="ESRI Shapefile" if suffix == ".shp" else "GPKG")
    return target


def _use_files(project: Path, **names: str) -> None:
    text = project.read_text()
    for old, new in names.items():
        text = text.replace(f'"{old}"', f'"{new}"')
    project.write_text(text)


# --- shapefiles ---------------------------------------------------------------------------


def _as_shapefiles(project: Path) -> None:
    for name in ("units", "strata"):
        _rewrite_layer(project.parent / f"{name}.gpkg", lambda g: g, suffix=".shp")
    _use_files(project, **{"units.gpkg": "units.shp", "strata.gpkg": "strata.shp"})


def test_shapefile_names_cut_to_ten_characters_give_the_geopackage_table(
    example_project, tmp_path, reference
):
    project = _copy(example_project, tmp_path / "inputs")
    _as_shapefiles(project)
    # GDAL cut the names when it wrote the files (the situation of every shapefile user).
    assert "accessible" in gpd.read_file(project.parent / "strata.shp").columns
    assert "current_an" in gpd.read_file(project.parent / "units.shp").columns
    loaded = load_project(project)
    result = estimate(loaded)
    _same_numbers(result.by_unit.set_index("unit_id"), reference)
    names = loaded.column_names()
    assert names[str(project.parent / "strata.shp")]["recognised"] == {
        "accessible_fraction": "accessible"
    }
    assert names[str(project.parent / "units.shp")]["recognised"] == {
        "current_animals": "current_an"
    }


def test_the_accessible_fraction_matters_to_the_example(example_project, tmp_path, reference):
    """Without the recognition the shapefile run would give this different table."""
    project = _copy(example_project, tmp_path / "inputs")
    _rewrite_layer(project.parent / "strata.gpkg", lambda g: g.drop(columns="accessible_fraction"))
    assert _differs(_table(project), reference)


def test_a_cut_name_with_a_numbered_twin_is_refused_with_the_line_to_add(example_project, tmp_path):
    project = _copy(example_project, tmp_path / "inputs")
    _rewrite_layer(
        project.parent / "strata.gpkg",
        lambda g: g.assign(accessible_fraction_2019=0.3),
        suffix=".shp",
    )
    _use_files(project, **{"strata.gpkg": "strata.shp"})
    with pytest.raises(SpatialError) as caught:
        estimate(load_project(project))
    message = str(caught.value)
    assert "strata.shp: attribute 'accessible'" in message
    assert "[columns.strata] accessible_fraction = 'accessible'" in message
    assert "'accessib_1'" in message  # GDAL's numbered name of the second cut


def test_a_cut_name_outside_a_shapefile_is_refused(example_project, tmp_path):
    project = _copy(example_project, tmp_path / "inputs")
    _rewrite_layer(
        project.parent / "units.gpkg", lambda g: g.rename(columns={"current_animals": "current_an"})
    )
    with pytest.raises(SpatialError, match=r"units\.gpkg: attribute 'current_an': .*"
                       r"\[columns\.units\] current_animals = 'current_an'"):  # fmt: skip
        estimate(load_project(project))


def test_the_manifest_hashes_every_part_of_a_shapefile(example_project, tmp_path):
    project = _copy(example_project, tmp_path / "inputs")
    _as_shapefiles(project)
    (project.parent / "units.shp.xml").write_text("<metadata/>")  # a GIS's sidecar
    files = load_project(project).files()
    hashed = input_checksums(files)
    parts = sorted(p for p in project.parent.iterdir() if p.name.startswith("units."))
    assert {".shp", ".shx", ".dbf", ".prj", ".cpg", ".xml"} <= {p.suffix for p in parts}
    for part in parts:
        assert hashed[str(part)]["sha256"] == sha256_of_file(part)


# --- the user's column names --------------------------------------------------------------

MAPPING = """
[columns.units]
unit_id = "UNIT_NAME"
current_animals = "ELK_NOW"

[columns.strata]
stratum = "VEG_TYPE"
accessible_fraction = "REACH"

[columns.plots]
plot_id = "Plot"
dry_mass_g = "Mass (g)"
stratum = "Veg"

[columns.forage_classes]
cp_pct = "CP %"

[columns.animal_classes]
share = "Fraction of herd"

[columns.counts]
unit_id = "Unit"
count = "Animals"
"""

RENAMES = {
    "plots.csv": {"plot_id": "Plot", "dry_mass_g": "Mass (g)", "stratum": "Veg"},
    "forage_classes.csv": {"cp_pct": "CP %"},
    "animal_classes.csv": {"share": "Fraction of herd"},
    "counts.csv": {"unit_id": "Unit", "count": "Animals"},
}


def _renamed_landscape(project: Path) -> None:
    folder = project.parent
    _rewrite_layer(
        folder / "units.gpkg",
        lambda g: g.rename(columns={"unit_id": "UNIT_NAME", "current_animals": "ELK_NOW"}),
    )
    _rewrite_layer(
        folder / "strata.gpkg",
        lambda g: g.rename(columns={"stratum": "VEG_TYPE", "accessible_fraction": "REACH"}),
    )
    for name, renames in RENAMES.items():
        table = pd.read_csv(folder / name, dtype=str, keep_default_na=False)
        table.rename(columns=renames).to_csv(folder / name, index=False)


def test_renamed_columns_with_a_mapping_give_the_original_table(
    example_project, tmp_path, reference
):
    project = _copy(example_project, tmp_path / "inputs")
    _renamed_landscape(project)
    project.write_text(project.read_text() + MAPPING)
    loaded = load_project(project)
    _same_numbers(estimate(loaded).by_unit.set_index("unit_id"), reference)
    recorded = loaded.column_names()[str(project.parent / "units.gpkg")]
    assert recorded["mapped"] == {"unit_id": "UNIT_NAME", "current_animals": "ELK_NOW"}


def test_renamed_columns_without_the_mapping_are_refused(example_project, tmp_path):
    project = _copy(example_project, tmp_path / "inputs")
    _renamed_landscape(project)
    with pytest.raises(InputError):
        estimate(load_project(project))


def test_a_message_about_a_mapped_column_names_the_file_column(example_project, tmp_path):
    project = _copy(example_project, tmp_path / "inputs")
    _renamed_landscape(project)
    project.write_text(project.read_text() + MAPPING)
    table = pd.read_csv(project.parent / "plots.csv", dtype=str, keep_default_na=False)
    table.loc[3, "Mass (g)"] = "-2"
    table.to_csv(project.parent / "plots.csv", index=False)
    with pytest.raises(TableError) as caught:
        estimate(load_project(project))
    assert "plots.csv: row 5, column 'Mass (g)' (mapped to dry_mass_g): value out of range" in (
        str(caught.value)
    )


def _mapped_read(tmp_path, mapping: dict[str, str]) -> pd.DataFrame:
    path = tmp_path / "plots.csv"
    path.write_text("Plot,stratum,forage_class,biomass_kg_per_ha\nP1,grass,forb,120\n")
    source = TableSource(path, "plots", mapping, project_file=tmp_path / "project.toml")
    return read_csv_table(source, PLOT_COLUMNS, what="plots table")


def test_an_unknown_name_of_ours_is_one_message_with_a_suggestion(tmp_path):
    with pytest.raises(ProjectFileError) as caught:
        _mapped_read(tmp_path, {"plot_idd": "Plot"})
    assert str(caught.value).startswith(
        f"{tmp_path / 'project.toml'}: key 'columns.plots.plot_idd': the plots table has no "
        "column 'plot_idd' to map; did you mean 'plot_id'?"
    )


def test_a_file_column_the_file_lacks_is_one_message_with_a_suggestion(tmp_path):
    with pytest.raises(ProjectFileError, match=r"key 'columns\.plots\.plot_id': .*plots\.csv "
                       r"has no column 'Plots'; did you mean 'Plot'\?"):  # fmt: skip
        _mapped_read(tmp_path, {"plot_id": "Plots"})


def test_a_mapping_onto_a_column_the_file_also_has_is_refused(tmp_path):
    with pytest.raises(ProjectFileError, match=r"has a column 'stratum' of its own"):
        _mapped_read(tmp_path, {"plot_id": "Plot", "stratum": "forage_class"})


def test_a_mapping_for_an_input_the_project_lacks_is_refused(project):
    project.write_text(project.read_text() + '\n[columns.nutritional_states]\nstate = "S"\n')
    with pytest.raises(ProjectFileError, match=r"key 'columns\.nutritional_states': "):
        load_project(project)


def test_an_unknown_input_under_columns_suggests_the_right_one(project):
    project.write_text(project.read_text() + '\n[columns.plot]\nplot_id = "P"\n')
    with pytest.raises(ProjectFileError, match=r"unknown key 'columns\.plot'; did you mean "):
        load_project(project)


# --- NA and dates -------------------------------------------------------------------------


def test_na_is_blank_where_a_column_accepts_blanks(tmp_path):
    path = tmp_path / "forage.csv"
    path.write_text(
        "forage_class,de_kcal_per_g,dmd_pct,cp_pct,allowable_use,tannin\n"
        "forb,2.6,NA,9,0.5,n/a\ngrass,N/A,50,7,0.5,0.1\n"
    )
    table = read_csv_table(path, FORAGE_CLASS_COLUMNS, what="forage-class table")
    assert np.isnan(table["dmd_pct"].iloc[0]) and np.isnan(table["tannin"].iloc[0])
    assert np.isnan(table["de_kcal_per_g"].iloc[1]) and table["tannin"].iloc[1] == 0.1


def test_na_is_refused_where_a_value_is_required(tmp_path):
    path = tmp_path / "forage.csv"
    path.write_text("forage_class,de_kcal_per_g,cp_pct,allowable_use\nforb,2.6,9,NA\n")
    with pytest.raises(TableError, match=r"row 2, column 'allowable_use': not a number"):
        read_csv_table(path, FORAGE_CLASS_COLUMNS, what="forage-class table")


def test_a_date_not_in_iso_form_is_named_so(tmp_path):
    path = tmp_path / "plots.csv"
    path.write_text("plot_id,stratum,forage_class,biomass_kg_per_ha\nP1,grass,forb,12/1/2026\n")
    with pytest.raises(TableError, match=r"a date, and not in ISO form \(YYYY-MM-DD"):
        read_plots(path)


# --- spreadsheets -------------------------------------------------------------------------


def _as_workbooks(project: Path, *, sheet: str | None = None) -> None:
    """Each CSV table as an .xlsx workbook, numbers as numbers; the plots on sheet ``sheet``
    after a sheet of notes when given."""
    pytest.importorskip("openpyxl")
    folder = project.parent
    for name in TABLES:
        table = pd.read_csv(folder / f"{name}.csv", dtype=str, keep_default_na=False)
        for column in table.columns:
            numbers = pd.to_numeric(table[column], errors="coerce")
            if numbers.notna().all():
                table[column] = numbers
        with pd.ExcelWriter(folder / f"{name}.xlsx", engine="openpyxl") as writer:
            if name == "plots" and sheet is not None:
                pd.DataFrame({"note": ["invented for the example"]}).to_excel(
                    writer, sheet_name="Notes", index=False
                )
            table.to_excel(writer, sheet_name=sheet or "Sheet1", index=False)
        (folder / f"{name}.csv").unlink()
    _use_files(project, **{f"{name}.csv": f"{name}.xlsx" for name in TABLES})
    if sheet is not None:
        project.write_text(project.read_text() + f'\n[sheets]\nplots = "{sheet}"\n')


def test_workbooks_give_the_csv_table(example_project, tmp_path, reference):
    project = _copy(example_project, tmp_path / "inputs")
    _as_workbooks(project, sheet="Field 2026")
    _same_numbers(_table(project), reference)


def test_a_workbook_message_names_the_sheet_and_its_row(example_project, tmp_path):
    project = _copy(example_project, tmp_path / "inputs")
    _as_workbooks(project, sheet="Field 2026")
    import openpyxl

    path = project.parent / "plots.xlsx"
    book = openpyxl.load_workbook(path)
    book["Field 2026"]["D7"] = -3  # column D: dry_mass_g, spreadsheet row 7
    book.save(path)
    with pytest.raises(TableError) as caught:
        estimate(load_project(project))
    assert str(caught.value).startswith(
        f"{path}: sheet 'Field 2026', row 7, column 'dry_mass_g': value out of range"
    )


def test_a_sheet_the_workbook_lacks_is_one_message_with_a_suggestion(example_project, tmp_path):
    project = _copy(example_project, tmp_path / "inputs")
    _as_workbooks(project, sheet="Field 2026")
    project.write_text(project.read_text().replace('"Field 2026"', '"Field 2025"'))
    with pytest.raises(ProjectFileError, match=r"key 'sheets\.plots': .*has no sheet "
                       r"'Field 2025'; did you mean 'Field 2026'\?"):  # fmt: skip
        estimate(load_project(project))


def test_a_sheet_for_a_csv_file_is_refused(project):
    project.write_text(project.read_text() + '\n[sheets]\nplots = "Field 2026"\n')
    with pytest.raises(ProjectFileError, match=r"key 'sheets\.plots': a sheet is named"):
        estimate(load_project(project))


def test_rows_of_a_sheet_are_its_own_when_the_first_rows_are_empty(tmp_path):
    openpyxl = pytest.importorskip("openpyxl")
    book = openpyxl.Workbook()
    sheet = book.active
    sheet["A3"], sheet["B3"] = "plot_id", "stratum"  # header on row 3: refused, as in a CSV
    path = tmp_path / "plots.xlsx"
    book.save(path)
    with pytest.raises(TableError, match=r"sheet 'Sheet', row 1: plots table has no header"):
        read_plots(path)
