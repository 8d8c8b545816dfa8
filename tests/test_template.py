"""Tests of nutricap.inputs.template and `nutricap init`: the template project a new user fills."""

import re
import tomllib
import typing

import geopandas as gpd
import pytest
from pydantic import BaseModel
from shapely.geometry import box

from nutricap.cli import main
from nutricap.inputs.project import ProjectConfig
from nutricap.inputs.template import PROJECT_FILE, TABLES, template_files


def _run(capsys, *argv):
    code = main([str(a) for a in argv])
    out, err = capsys.readouterr()
    return code, out, err


def _keys(model: type[BaseModel], prefix: str = "") -> list[str]:
    """Every key of the project-file schema as ``section.key`` (dict sections: one entry)."""
    keys = []
    for name, field in model.model_fields.items():
        inner = field.annotation
        if typing.get_origin(inner) is not dict:  # X | None → X
            inner = next((a for a in typing.get_args(inner) if a is not type(None)), inner)
        if typing.get_origin(inner) is dict and isinstance(typing.get_args(inner)[1], type):
            if issubclass(typing.get_args(inner)[1], BaseModel):
                keys += _keys(typing.get_args(inner)[1], f"{prefix}{name}.NAME.")
                continue
        if isinstance(inner, type) and issubclass(inner, BaseModel):
            keys += _keys(inner, f"{prefix}{name}.")
        else:
            keys.append(prefix + name)
    return keys


def _template_keys(text: str) -> set[str]:
    """``section.key`` of every key written, commented out or not."""
    found, section = set(), ""
    for line in text.splitlines():
        line = line.lstrip("# ").strip()
        header = re.fullmatch(r"\[\[?([A-Za-z_.0-9]+)\]\]?.*", line)  # [table] or [[array]]
        if header:
            section = re.sub(r"^scenarios\.[^.]+", "scenarios.NAME", header.group(1))
            section = re.sub(r"^diet\.groups\.[^.]+", "diet.groups.NAME", section)
            found.add(section)
        elif match := re.match(r"([A-Za-z_0-9]+) = ", line):
            found.add(f"{section}.{match.group(1)}")
    return found


def test_template_names_every_key_of_the_schema():
    written = _template_keys(template_files()[PROJECT_FILE])
    # The schema itself (pydantic) is the reference: every field is in the template.
    missing = [key for key in _keys(ProjectConfig) if key not in written]
    assert missing == []


def test_template_project_file_is_valid_as_written():
    # Validated by the schema (pydantic), not by nutricap's own reading of files.
    config = ProjectConfig.model_validate(tomllib.loads(template_files()[PROJECT_FILE]))
    assert config.project.days == 120


def test_template_tables_carry_every_declared_column():
    for name, (columns, _example) in TABLES.items():
        header = template_files()[name].splitlines()[0].split(",")
        assert header == [column.name for column in columns], name


def test_init_then_check_says_what_is_missing(tmp_path, capsys):
    folder = tmp_path / "corvid"
    code, out, err = _run(capsys, "init", folder)
    assert code == 0 and err == ""
    assert "nutricap check" in out
    assert sorted(p.name for p in folder.iterdir()) == sorted(template_files())
    code, out, err = _run(capsys, "check", folder / PROJECT_FILE)
    assert code == 2 and out == ""
    assert len(err.strip().splitlines()) == 1 and "Traceback" not in err
    assert "the project is not filled in yet (README.md beside it says what to fill in)" in err
    for part in (
        "'inputs.units' units.gpkg does not exist",
        "'inputs.strata' strata.gpkg does not exist",
        "'inputs.plots' plots.csv has no data rows yet",
        "'inputs.forage_classes' forage_classes.csv has no data rows yet",
        "'inputs.animal_classes' animal_classes.csv has no data rows yet",
    ):
        assert part in err


@pytest.mark.parametrize("content", ["notes.txt", None])
def test_init_refuses_a_non_empty_folder_or_a_file(tmp_path, capsys, content):
    target = tmp_path / "taken"
    if content is None:
        target.write_text("a file\n")
    else:
        target.mkdir()
        (target / content).write_text("mine\n")
    before = sorted(tmp_path.rglob("*"))
    code, out, err = _run(capsys, "init", target)
    assert code == 2 and out == "" and len(err.strip().splitlines()) == 1
    assert str(target) in err and ("not empty" in err or "is a file" in err)
    assert sorted(tmp_path.rglob("*")) == before


def test_init_into_an_empty_folder(tmp_path, capsys):
    (tmp_path / "empty").mkdir()
    code, _out, _err = _run(capsys, "init", tmp_path / "empty")
    assert code == 0 and (tmp_path / "empty" / PROJECT_FILE).is_file()
    assert [p.name for p in tmp_path.iterdir()] == ["empty"]  # no staging folder left


def test_filled_template_checks_ok(tmp_path, capsys):
    folder = tmp_path / "corvid"
    _run(capsys, "init", folder)
    for name in TABLES:  # the example rows uncommented: what a user types first
        path = folder / name
        path.write_text(path.read_text().replace("\n# ", "\n"))
    # Layers invented for the example: one 1 km² unit, one stratum covering it (UTM 12N).
    square = box(500_000, 4_300_000, 501_000, 4_301_000)
    gpd.GeoDataFrame({"unit_id": ["North"]}, geometry=[square], crs="EPSG:32612").to_file(
        folder / "units.gpkg"
    )
    gpd.GeoDataFrame(
        {"stratum": ["bitterbrush_flat"]}, geometry=[square], crs="EPSG:32612"
    ).to_file(folder / "strata.gpkg")
    code, out, err = _run(capsys, "check", folder / PROJECT_FILE)
    assert code == 0, err
    assert "OK — 1 units, 1 strata, 1 plots" in out
