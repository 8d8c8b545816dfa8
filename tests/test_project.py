"""Tests of nutricap.inputs.project: TOML validation reports every problem with its key."""

import pytest

from nutricap.errors import ProjectFileError
from nutricap.inputs.project import load_project

GOOD = """
[project]
name = "Test range"
species = "deer"
season = "winter"
season_days = 90

[inputs]
forage_classes = "f.csv"
plots = "p.csv"
animal_classes = "a.csv"
units = "u.gpkg"
strata = "s.gpkg"

[target]
animal_class = "doe"
state = "gestation"
"""


@pytest.fixture()
def folder(tmp_path):
    for name in ("f.csv", "p.csv", "a.csv", "u.gpkg", "s.gpkg"):
        (tmp_path / name).write_text("x")
    return tmp_path


def _project(folder, text):
    path = folder / "project.toml"
    path.write_text(text)
    return path


def test_good_project_resolves_paths_relative_to_file(folder):
    project = load_project(_project(folder, GOOD))
    assert project.input_path("plots") == (folder / "p.csv").resolve()
    assert project.config.project.days == 90
    assert project.config.pooling.mode == "unit"


def test_season_from_dates_counts_both_ends(folder):
    text = GOOD.replace("season_days = 90", "season_start = 2026-12-01\nseason_end = 2027-03-31")
    # 1 Dec 2026 to 31 Mar 2027 inclusive: 31 + 31 + 28 + 31 = 121 days (calendar).
    assert load_project(_project(folder, text)).config.project.days == 121


def test_unknown_key_suggests_the_right_one(folder):
    text = GOOD.replace("season_days", "season_dayz")
    with pytest.raises(
        ProjectFileError, match="unknown key 'project.season_dayz'; did you mean 'season_days'"
    ):
        load_project(_project(folder, text))


def test_every_problem_reported_at_once(folder):
    text = (
        GOOD.replace('season = "winter"', 'season = "monsoon"')
        .replace('strata = "s.gpkg"', "")
        .replace("[target]", "[target]\ndiet_de_min_kcal_per_g = -1")
    )
    with pytest.raises(ProjectFileError) as info:
        load_project(_project(folder, text))
    message = str(info.value)
    assert "3 problems" in message
    assert "project.season" in message and "inputs.strata" in message
    assert "target.diet_de_min_kcal_per_g" in message


def test_toml_syntax_error(folder):
    with pytest.raises(ProjectFileError, match="TOML syntax error"):
        load_project(_project(folder, GOOD + "\nname = = 3\n"))


def test_missing_input_file_reported_in_full(folder):
    (folder / "p.csv").unlink()
    with pytest.raises(ProjectFileError, match=r"inputs\.plots.*p\.csv"):
        load_project(_project(folder, GOOD))


def test_project_file_is_data_not_code(folder):
    # A TOML string that looks like code stays a string; nothing is evaluated.
    text = GOOD.replace('name = "Test range"', "name = \"__import__('os').system('false')\"")
    project = load_project(_project(folder, text))
    assert project.config.project.name.startswith("__import__")


DAYS = r"'project\.season_days': Input should be "


@pytest.mark.parametrize(
    ("old", "new", "message"),
    [
        # A boolean is not a number: `true` was once read as a 1-day season.
        ("season_days = 90", "season_days = true", DAYS + "a valid number"),
        ("season_days = 90", "season_days = inf", DAYS + "a finite number"),
        ("season_days = 90", "season_days = nan", DAYS + "a finite number"),
        ("season_days = 90", 'season_days = "90"', DAYS + "a valid number"),
        # The same bound for every form of the season's length.
        (
            "season_days = 90",
            "season_start = 2025-01-01\nseason_end = 2026-12-31",
            r"'project': .*spans 730 days; a season is at most 366 days",
        ),
        (
            "season_days = 90",
            'season_start = "2026-12-01"\nseason_end = 2027-03-01',
            r"'project\.season_start': Input should be a valid date .*ISO form without quotes",
        ),
        (
            'state = "gestation"',
            'state = "gestation"\nprotein = 1',
            r"'target\.protein': Input should be a valid boolean",
        ),
    ],
)  # fmt: skip
def test_numbers_flags_and_dates_are_strict(folder, old, new, message):
    with pytest.raises(ProjectFileError, match=message):
        load_project(_project(folder, GOOD.replace(old, new)))


@pytest.mark.parametrize(
    ("section", "line", "key"),
    [
        ("uncertainty", "bootstrap_replicates = 100.0", "uncertainty.bootstrap_replicates"),
        ("uncertainty", "bootstrap_replicates = true", "uncertainty.bootstrap_replicates"),
        ("uncertainty", "seed = 1e20", "uncertainty.seed"),
        ("uncertainty", "interval_level = inf", "uncertainty.interval_level"),
        ("forage_use", "cap_at_allowable_use = 0", "forage_use.cap_at_allowable_use"),
    ],
)
def test_whole_numbers_and_flags_refuse_other_types(folder, section, line, key):
    with pytest.raises(ProjectFileError, match=rf"key '{key}'"):
        load_project(_project(folder, GOOD + f"\n[{section}]\n{line}\n"))


@pytest.mark.parametrize("season", ["spring", "autumn", "fall", "summer", "winter", "any"])
def test_every_season_of_the_requirement_table_is_accepted(folder, season):
    text = GOOD.replace('season = "winter"', f'season = "{season}"')
    assert load_project(_project(folder, text)).config.project.season == season
