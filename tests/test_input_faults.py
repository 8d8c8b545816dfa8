"""Inputs a hostile-input probe found mishandled (second round), each now refused with one
message or handled without a traceback or warning.

- ``trend`` on counts whose logistic fit overflows (nutricap.science.population);
- a plots row that gives its biomass twice (nutricap.inputs.tables);
- a forage-class ``stratum`` override naming no stratum of the map (nutricap.model.problem).

The unknown forage class or growth form of a treatment response is tested in
tests/test_scenarios.py. Tables here are invented for the example; the check values are
hand computations, given beside each check.
"""

from __future__ import annotations

import subprocess
import sys

import pandas as pd
import pytest

from nutricap.cli import main
from nutricap.errors import TableError
from nutricap.inputs.tables import read_plots
from nutricap.model.problem import require_override_strata

PLOTS_HEADER = "plot_id,stratum,forage_class,dry_mass_g,frame_area_m2,biomass_kg_per_ha\n"


def _write(tmp_path, name, text):
    path = tmp_path / name
    path.write_text(text, encoding="utf-8")
    return path


def _one_error_line(capsys) -> str:
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1, err
    assert "Traceback" not in err[0] and "Warning" not in err[0]
    return err[0]


# --- trend: the logistic fit across long gaps ---------------------------------------------


@pytest.mark.parametrize(
    ("rows", "logistic"),
    [
        # A gap of 397 years: trial parameters with 1/K < 0 overflow across it (the fit once
        # raised "array must not contain infs or NaNs"); the fit itself converges.
        ("1800,100\n1801,130\n1802,160\n1803,200\n2200,50000\n", "logistic: K = none"),
        # Counts swinging 5 ↔ 5000 every 10 years: the fit stops at its evaluation limit
        # (and once printed "RuntimeWarning: overflow encountered in multiply").
        (
            "2000,5\n2010,5000\n2020,5\n2030,5000\n2040,5\n2050,5000\n",
            "logistic: logistic not fitted: the least-squares fit stopped",
        ),
    ],
)
def test_trend_with_overflowing_logistic_exits_0_without_warnings(tmp_path, rows, logistic):
    counts = _write(tmp_path, "counts.csv", "year,count\n" + rows)
    run = subprocess.run(
        [sys.executable, "-m", "nutricap", "trend", str(counts)],
        capture_output=True,
        text=True,
        check=False,
    )
    assert run.returncode == 0, run.stderr
    assert "Warning" not in run.stderr and "Traceback" not in run.stderr
    assert "mean r = " in run.stdout and logistic in run.stdout


# --- plots: biomass given twice -----------------------------------------------------------


@pytest.mark.parametrize("direct", ["999", "215"])
def test_plot_row_with_mass_and_biomass_is_refused(tmp_path, direct):
    # Refused whether or not the two agree: 21.5 g in 1 m² = 21.5 g/m² = 215 kg/ha
    # (1 g/m² = 10 kg/ha: 10 000 m² per ha, 1000 g per kg).
    path = _write(
        tmp_path,
        "plots.csv",
        PLOTS_HEADER + "p1,s,grass,5,0.25,\n" + f"p2,s,grass,21.5,1.0,{direct}\n",
    )
    pattern = (
        r"plots\.csv: row 3, columns 'dry_mass_g'/'frame_area_m2'/'biomass_kg_per_ha': "
        r"biomass given twice \(expected dry_mass_g with frame_area_m2, or biomass_kg_per_ha, "
        rf"not both; found 215 kg/ha from mass and frame area and {direct} kg/ha given directly\)"
    )
    with pytest.raises(TableError, match=pattern):
        read_plots(path)


def test_plot_rows_may_give_biomass_either_way(tmp_path):
    # 5 g in 0.25 m² = 20 g/m² = 200 kg/ha (SI definitions); the second row's 80 as given.
    path = _write(tmp_path, "plots.csv", PLOTS_HEADER + "p1,s,grass,5,0.25,\np2,s,grass,,,80\n")
    assert read_plots(path)["biomass_kg_per_ha"].tolist() == [200.0, 80.0]


def test_check_refuses_a_plot_with_biomass_twice(project, capsys):
    path = project.parent / "plots.csv"
    plots = pd.read_csv(path, dtype=str, keep_default_na=False)
    plots["biomass_kg_per_ha"] = ""
    plots.loc[0, "biomass_kg_per_ha"] = "999"
    plots.to_csv(path, index=False)
    assert main(["check", str(project), "--quiet"]) == 2
    line = _one_error_line(capsys)
    assert f"{path}: row 2, columns 'dry_mass_g'/'frame_area_m2'/'biomass_kg_per_ha'" in line
    assert "and 999 kg/ha given directly" in line


# --- forage classes: a stratum override off the map ---------------------------------------


def test_override_of_a_stratum_not_on_the_map_is_refused():
    table = pd.DataFrame(
        {"forage_class": ["grass", "shrub", "grass"], "stratum": ["", "", "alpine_tundra"]}
    )
    pattern = (
        r"^forage_classes\.csv: row 4, column 'stratum': stratum override 'alpine_tundra' is "
        r"not a stratum of the strata map \(expected a stratum of the strata map \('aspen', "
        r"'sagebrush'\); found 'alpine_tundra'\)$"
    )
    with pytest.raises(TableError, match=pattern):
        require_override_strata(table, ["sagebrush", "aspen"], "forage_classes.csv")


def test_override_of_a_mapped_stratum_is_accepted():
    table = pd.DataFrame({"forage_class": ["grass", "grass"], "stratum": ["", "aspen"]})
    require_override_strata(table, ["sagebrush", "aspen"])


def test_override_with_a_close_name_suggests_the_stratum():
    table = pd.DataFrame({"forage_class": ["grass", "grass"], "stratum": ["", "aspen_"]})
    with pytest.raises(TableError, match=r"row 3, column 'stratum': .*did you mean 'aspen'\?"):
        require_override_strata(table, ["sagebrush", "aspen"])


def test_check_refuses_an_override_of_a_stratum_not_on_the_map(project, capsys):
    path = project.parent / "forage_classes.csv"
    classes = pd.read_csv(path, dtype=str, keep_default_na=False)
    classes["stratum"] = ""
    override = classes.iloc[[0]].assign(stratum="alpine_tundra")
    pd.concat([classes, override], ignore_index=True).to_csv(path, index=False)
    row = len(classes) + 2  # the header is row 1
    assert main(["check", str(project), "--quiet"]) == 2
    line = _one_error_line(capsys)
    assert f"row {row}, column 'stratum': stratum override 'alpine_tundra'" in line
    assert "'sagebrush_steppe'" in line  # the map's strata are listed


def test_quiet_run_with_a_home_folder_it_cannot_write_prints_nothing(example_project, tmp_path):
    # matplotlib warned on stderr that it made a temporary cache folder; --quiet prints nothing
    # but errors. Figures are drawn (figure files on) in this process and the second one.
    import os
    import subprocess
    import sys

    environment = {**os.environ, "HOME": str(tmp_path / "missing"), "XDG_CACHE_HOME": "/proc/x"}
    environment["MPLCONFIGDIR"] = "/proc/x"
    done = subprocess.run(
        [sys.executable, "-m", "nutricap", "estimate", str(example_project)]
        + ["--out", str(tmp_path / "out"), "--quiet"],
        capture_output=True,
        text=True,
        env=environment,
        check=False,
    )
    assert done.returncode == 0, done.stderr
    assert done.stdout == "" and done.stderr == ""
