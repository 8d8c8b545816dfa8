"""Tests of the command line: exit codes, one-line messages, nothing written on error."""

import re
import subprocess
import sys
from pathlib import Path
from types import SimpleNamespace

import geopandas as gpd
import numpy as np
import pandas as pd
import pytest
from shapely.affinity import translate

from nutricap.cli import main

NO_FIGURES = "--no-figures"
"""For the runs whose figure files no test here looks at (each figure is a 300-dpi PNG and an
SVG); test_report_figures_are_written_as_png_and_svg_unless_asked_not_to checks them."""


def _run(capsys, *argv):
    code = main([str(a) for a in argv])
    captured = capsys.readouterr()
    return code, captured.out, captured.err


def test_help_shows_caution(capsys):
    with pytest.raises(SystemExit) as info:
        main(["--help"])
    assert info.value.code == 0
    assert "never replace" in capsys.readouterr().out


def test_estimate_succeeds(project, tmp_path, capsys):
    code, out, _ = _run(capsys, "estimate", project, "--out", tmp_path / "results", NO_FIGURES)
    assert code == 0
    assert "capacity_by_unit.csv" in out and "CAUTION" in out


def test_report_written_by_default_and_skipped_on_request(project, tmp_path, capsys):
    with_report = tmp_path / "with"
    without = tmp_path / "without"
    assert _run(capsys, "estimate", project, "--out", with_report, NO_FIGURES, "--quiet")[0] == 0
    assert _run(capsys, "estimate", project, "--out", without, "--no-report", "--quiet")[0] == 0
    assert (with_report / "report.html").stat().st_size > 10_000
    assert not (without / "report.html").exists()
    assert (without / "capacity_by_unit.csv").is_file()


def test_check_writes_nothing(project, capsys):
    before = sorted(p.name for p in project.parent.iterdir())
    code, out, _ = _run(capsys, "check", project)
    assert code == 0 and "OK" in out
    assert sorted(p.name for p in project.parent.iterdir()) == before


def test_demo_runs(tmp_path, capsys):
    code, out, _ = _run(capsys, "demo", "--out", tmp_path / "demo", NO_FIGURES)
    assert code == 0
    # The example's over-stocked unit (invented for the example) is flagged in the summary.
    assert "flag: unit Petrelhollow" in out and "report.html" in out
    assert (tmp_path / "demo" / "results" / "capacity_by_unit.csv").is_file()
    # The raster variant of the example runs too, with its rules reported.
    rasters = tmp_path / "demo" / "results_rasters"
    assert {"capacity_by_unit.csv", "availability_rules.csv", "report.html"} <= {
        path.name for path in rasters.iterdir()
    }
    assert "On the 50 m grid" in out
    assert out.rstrip().splitlines()[-1].startswith("CAUTION:")


def _tree(folder):
    """Relative path → bytes of every file under ``folder``."""
    return {p.relative_to(folder): p.read_bytes() for p in folder.rglob("*") if p.is_file()}


def test_demo_overwrite_deletes_only_what_the_demo_wrote(tmp_path, capsys):
    demo = tmp_path / "demo"
    assert _run(capsys, "demo", "--out", demo, NO_FIGURES, "--quiet") == (0, "", "")
    for where in ("example_landscape/my_plots.csv", "results/notes.txt", "my_map.qgz"):
        (demo / where).write_text("the user's own file\n")
        before = _tree(demo)
        code, out, err = _run(capsys, "demo", "--out", demo, "--overwrite", NO_FIGURES, "--quiet")
        assert code == 2 and out == "" and len(err.strip().splitlines()) == 1, err
        assert Path(where).name in err
        assert _tree(demo) == before, "nothing deleted, nothing written"
        (demo / where).unlink()
    # Unchanged, the demo's own folders are replaced.
    assert _run(capsys, "demo", "--out", demo, "--overwrite", NO_FIGURES, "--quiet") == (0, "", "")
    assert sorted(p.name for p in demo.iterdir()) == ["example_landscape", "results",
                                                      "results_rasters"]  # fmt: skip


def test_overwrite_policy_is_in_the_help(capsys):
    for command in ("estimate", "demo", "compare"):
        with pytest.raises(SystemExit):
            main([command, "--help"])
        text = " ".join(capsys.readouterr().out.split())
        assert "only if it holds nothing but an earlier run's outputs, unchanged" in text


def _mutate_csv(path, change):
    table = pd.read_csv(path, dtype=str, keep_default_na=False)
    change(table).to_csv(path, index=False)


def _set_cell(column, row, value):
    def change(table):
        table.loc[row, column] = value
        return table

    return change


BROKEN = {
    "missing column": (
        "plots.csv",
        lambda t: t.drop(columns=["forage_class"]),
        r"plots\.csv.*missing column 'forage_class'",
    ),
    "unknown forage class": (
        "plots.csv",
        _set_cell("forage_class", 4, "sagebrsh"),
        r"plots\.csv: row 6, column 'forage_class'.*unknown forage_class",
    ),
    "negative mass": (
        "plots.csv",
        _set_cell("dry_mass_g", 0, "-2"),
        r"plots\.csv: row 2, column 'dry_mass_g'.*out of range",
    ),
    "unknown state": (
        "animal_classes.csv",
        _set_cell("state", 1, "hibernation"),
        r"animal_classes\.csv: row 3, column 'state'",
    ),
}


@pytest.mark.parametrize("case", sorted(BROKEN))
def test_broken_table_exits_2_with_one_message_and_writes_nothing(case, project, tmp_path, capsys):
    name, change, pattern = BROKEN[case]
    _mutate_csv(project.parent / name, change)
    out = tmp_path / "results"
    for argv in (("check", project, "--quiet"), ("estimate", project, "--out", out, "--quiet")):
        code, _, err = _run(capsys, *argv)
        assert code == 2
        lines = err.strip().splitlines()
        assert len(lines) == 1 and "Traceback" not in err
        assert re.search(pattern, lines[0]), lines[0]
    assert not out.exists()


def test_stratum_without_plots(project, tmp_path, capsys):
    plots = pd.read_csv(project.parent / "plots.csv")
    plots[plots["stratum"] != "aspen"].to_csv(project.parent / "plots.csv", index=False)
    code, _, err = _run(capsys, "estimate", project, "--out", tmp_path / "r", "--quiet")
    assert code == 2 and "stratum 'aspen' is on the map but has no plots" in err
    assert not (tmp_path / "r").exists()


def test_unit_outside_the_map(project, tmp_path, capsys):
    units = gpd.read_file(project.parent / "units.gpkg")
    units.loc[0, "geometry"] = translate(units.geometry.iloc[0], xoff=100_000)
    units.to_file(project.parent / "units.gpkg", layer="units", driver="GPKG")
    code, _, err = _run(capsys, "estimate", project, "--out", tmp_path / "r", "--quiet")
    assert code == 2 and "does not overlap any vegetation stratum" in err


def test_unreadable_layer(project, tmp_path, capsys):
    (project.parent / "strata.gpkg").write_bytes(b"this is not a geopackage")
    code, _, err = _run(capsys, "estimate", project, "--out", tmp_path / "r", "--quiet")
    assert code == 2 and "strata.gpkg" in err and "cannot read" in err


def test_out_inside_input_folder_refused(project, capsys):
    code, _, err = _run(capsys, "estimate", project, "--out", project.parent / "results", "--quiet")
    assert code == 2 and "input folder" in err
    assert not (project.parent / "results").exists()


def test_existing_output_needs_overwrite_and_survives_failure(project, tmp_path, capsys):
    out = tmp_path / "results"
    assert _run(capsys, "estimate", project, "--out", out, NO_FIGURES, "--quiet")[0] == 0
    first = (out / "capacity_by_unit.csv").read_bytes()
    code, _, err = _run(capsys, "estimate", project, "--out", out, "--quiet")
    assert code == 2 and "--overwrite" in err
    _mutate_csv(project.parent / "plots.csv", _set_cell("dry_mass_g", 0, "-2"))
    code, _, _ = _run(capsys, "estimate", project, "--out", out, "--overwrite", "--quiet")
    assert code == 2
    assert (out / "capacity_by_unit.csv").read_bytes() == first


# --- what is printed: --quiet, the largest units, escaped text --------------------------------


@pytest.mark.parametrize("command", ["estimate", "check", "compare"])
def test_quiet_prints_nothing_on_success(project, tmp_path, capsys, command):
    argv = [command, project, "--quiet"]
    if command != "check":
        argv += ["--out", tmp_path / "out", "--no-report"]
    if command == "compare":
        argv += ["--scenario", "prescribed_burn"]
    assert _run(capsys, *argv) == (0, "", "")


def test_quiet_console_command_shows_no_python_warning(project, tmp_path):
    # A warning raised during the run (simulated) reaches the terminal without --quiet only.
    script = (
        "import sys, warnings; import nutricap.workflow as w; real = w.estimate\n"
        "def warned(*a, **k):\n    warnings.warn('simulated warning'); return real(*a, **k)\n"
        "w.estimate = warned; from nutricap.cli import run_and_exit; run_and_exit()"
    )
    for quiet in (True, False):
        argv = [sys.executable, "-c", script, "check", str(project)] + ["--quiet"] * quiet
        done = subprocess.run(argv, capture_output=True, text=True, check=False)
        assert done.returncode == 0, done.stderr
        assert ("simulated warning" in done.stderr) is not quiet, done.stderr
        assert (done.stdout == "") is quiet


def _fake_result(count):
    """A per-unit table of ``count`` units with invented figures (for printing only)."""
    rng = np.random.default_rng(7)
    ncc = rng.permutation(count) * 10.0 + 5.0
    table = pd.DataFrame(
        {
            "unit_id": [f"U{i:03d}" for i in range(count)],
            "ncc_animals": ncc,
            "ecc_animals": ncc * 4,
            "allowable_use_animals": ncc * 2,
            "limiting_factor": "protein",
            "current_animals": ncc * 3,
            "overuse": True,
            "above_ncc": True,
            "key_class": "browse",
            "key_use_fraction": 0.9,
            "key_allowable_use": 0.5,
        }
    )
    return SimpleNamespace(by_unit=table, season_days=120.0, notes=[])


def test_summary_shows_the_20_largest_units_the_totals_and_the_table(tmp_path, capsys):
    from nutricap.cli.console import print_summary as _print_summary

    result = _fake_result(200)
    _print_summary(result, tmp_path)
    lines = capsys.readouterr().out.splitlines()
    printed = [line.split()[0] for line in lines if re.match(r"\s*U\d{3}\s", line)]
    table = result.by_unit
    largest = sorted(zip(table["ncc_animals"], table["unit_id"]), reverse=True)[:20]
    assert printed == [unit for _, unit in largest]
    assert any("180 more units" in line for line in lines)
    assert f"Total NCC {table['ncc_animals'].sum():,.0f} animals;" in "\n".join(lines)
    assert any(str(tmp_path / "capacity_by_unit.csv") in line for line in lines)
    flags = [line for line in lines if line.startswith("flag: unit")]
    assert len(flags) == 20 and any("180 more units flagged" in line for line in lines)
    assert len(lines) < 50


def test_ids_are_printed_escaped(tmp_path, capsys):
    from nutricap.cli.console import print_summary as _print_summary

    result = _fake_result(3)
    result.by_unit.loc[0, "unit_id"] = "\x1b[2J\x1b[Hfake\nnutricap: OK\u202e"
    result.notes.append("unit '\x1b]0;title\x07' has one plot")
    _print_summary(result, tmp_path)
    out = capsys.readouterr().out
    assert "\x1b" not in out and "\x07" not in out and "\u202e" not in out
    assert "\\x1b[2J\\x1b[Hfake\\nnutricap: OK\\u202e" in out
    assert not any(line.startswith("nutricap: OK") for line in out.splitlines())
    assert "\\x1b]0;title\\x07" in out


def test_error_messages_escape_ids(project, tmp_path, capsys):
    units = gpd.read_file(project.parent / "units.gpkg")
    units.loc[1, "unit_id"] = "\x1b[31mred\nfake line"
    units.loc[2, "unit_id"] = "\x1b[31mred\nfake line"
    units.to_file(project.parent / "units.gpkg", layer="units", driver="GPKG")
    code, out, err = _run(capsys, "check", project, "--quiet")
    assert code == 2 and out == ""
    assert err.count("\n") == 1 and "\x1b" not in err
    assert "\\x1b[31mred\\nfake line" in err


def test_report_figures_are_written_as_png_and_svg_unless_asked_not_to(project, tmp_path, capsys):
    out = tmp_path / "results"
    assert _run(capsys, "estimate", project, "--out", out, "--quiet")[0] == 0
    images = (out / "report.html").read_text(encoding="utf-8").count("<img ")
    assert images >= 2
    assert len(list((out / "figures").glob("*.png"))) == images
    assert len(list((out / "figures").glob("*.svg"))) == images
    # The figures are part of the run's outputs: a rerun with --overwrite replaces them.
    assert _run(capsys, "estimate", project, "--out", out, "--overwrite", "--quiet")[0] == 0
    bare = tmp_path / "bare"
    assert _run(capsys, "estimate", project, "--out", bare, "--no-figures", "--quiet")[0] == 0
    assert (bare / "report.html").is_file() and not (bare / "figures").exists()
    code, _, err = _run(
        capsys, "estimate", project, "--out", tmp_path / "b", "--pdf", "--no-report"
    )
    assert code == 2 and "--no-report" in err and not (tmp_path / "b").exists()


@pytest.mark.parametrize(
    "argv, words",
    [
        (["estimate"], "the following arguments are required: project, --out"),
        (["trend", "counts.csv", "--level", "abc"], "argument --level: invalid float value"),
        (["frobnicate"], "invalid choice: 'frobnicate'"),
    ],
)
def test_a_command_line_mistake_is_one_line(argv, words, capsys):
    # As every other error: one line on stderr, exit 2 (argparse printed its usage first).
    with pytest.raises(SystemExit) as stop:
        main(argv)
    assert stop.value.code == 2
    lines = capsys.readouterr().err.splitlines()
    assert len(lines) == 1 and words in lines[0], lines
    assert lines[0].startswith("nutricap") and lines[0].endswith("--help)")
