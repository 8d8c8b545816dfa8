"""Tests of the ``trend`` command (cli, inputs.counts, model.trend, report.trend_text): reading,
messages, output, NCC/ECC.

Counts tables here are invented for the example; the checks are of the command's
arithmetic, wording and file handling. The science itself is checked in
tests/test_population.py.
"""

from __future__ import annotations

import argparse
import errno
import json
import os
import sys
import types
from pathlib import Path
from unittest import mock

import numpy as np
import pandas as pd
import pytest

from nutricap import cli
from nutricap.errors import InputError, OutputError, TableError
from nutricap.report import output_folder as outputs
from nutricap.report import trend_text

REQUIRED_KEYS = {"r_mean", "r_ci", "K", "r_max", "msy_level", "msy_yield"}


def run_trend(argv: list[str], capsys) -> str:
    parser = argparse.ArgumentParser(prog="nutricap trend")
    cli.add_trend_arguments(parser)
    assert cli.run_trend(parser.parse_args([str(arg) for arg in argv])) == 0
    return capsys.readouterr().out


def write_csv(folder: Path, text: str, name: str = "counts.csv") -> Path:
    folder.mkdir(parents=True, exist_ok=True)
    path = folder / name
    path.write_text(text, encoding="utf-8")
    return path


def logistic_rows(r_max: float, K: float, n0: float, years: range, removals):
    """Exact discrete logistic, written out independently of the module under test."""
    n = n0
    for year in years:
        yield year, n, removals(year)
        n = n + r_max * n * (1.0 - n / K) - removals(year)


TWO_UNITS = """unit_id,year,count
A,2014,100
A,2015,120
A,2016,150
A,2017,175
A,2018,200
B,2014,60
B,2015,70
B,2016,85
B,2017,100
B,2018,120
"""


def test_json_has_required_keys_and_the_fit_of_an_exact_series(tmp_path, capsys):
    # Exact logistic (r_max 0.3, K 900, 10 removed in even years; invented) with 2013
    # missing (a year without removals: a missing year's removals are taken as 0).
    rows = [
        row
        for row in logistic_rows(
            0.3, 900.0, 150.0, range(2005, 2021), lambda year: 10.0 * (year % 2 == 0)
        )
        if row[0] != 2013
    ]
    text = "year,count,removals\n" + "".join(f"{y},{n!r},{h}\n" for y, n, h in rows)
    counts = write_csv(tmp_path / "in", text)
    payload = json.loads(run_trend([counts, "--json"], capsys))
    assert REQUIRED_KEYS <= payload.keys()
    assert payload["K"] == pytest.approx(900.0, rel=1e-6)
    assert payload["r_max"] == pytest.approx(0.3, rel=1e-6)
    # MSY at K/2 with yield r K/4 (Schaefer 1954): 450 animals and 0.3 · 900 / 4 = 67.5.
    assert payload["msy_level"] == pytest.approx(450.0, rel=1e-6)
    assert payload["msy_yield"] == pytest.approx(67.5, rel=1e-6)
    assert payload["ceiling_evidence"] is True
    assert [i["to_year"] - i["from_year"] for i in payload["intervals"]].count(2) == 1
    assert len(payload["cautions"]) == len(trend_text.TREND_CAUTIONS)
    assert payload["removals"] == [row[2] for row in rows]


def test_text_output_has_figures_and_cautions(tmp_path, capsys):
    counts = write_csv(tmp_path / "in", TWO_UNITS)
    out = run_trend([counts, "--unit", "A"], capsys)
    # λ 2014→2015 = 120/100 = 1.200, r = ln 1.2 = 0.182 (definition; hand arithmetic).
    assert "1.200" in out and "+0.182" in out
    for words in (
        "mean r =",
        "λ =",
        "logistic:",
        "indices",
        "weak evidence of K",
        "must be entered if known",
        "never replace",
        "spreadsheet rows",
    ):
        assert words in out


def test_each_unit_and_their_total(tmp_path, capsys):
    counts = write_csv(tmp_path / "in", TWO_UNITS)
    payload = json.loads(run_trend([counts, "--json"], capsys))
    assert payload["series"] == "total"
    assert set(payload["units"]) == {"A", "B"}
    assert payload["counts"] == [160.0, 190.0, 235.0, 275.0, 320.0]  # A + B per year
    assert REQUIRED_KEYS <= payload["units"]["A"].keys()
    # Mean r of unit A equals the slope of ln N on year (independent: numpy.polyfit).
    slope = np.polyfit([2014, 2015, 2016, 2017, 2018], np.log([100, 120, 150, 175, 200]), 1)[0]
    assert payload["units"]["A"]["r_mean"] == pytest.approx(slope, rel=1e-9)


def test_total_uses_only_years_every_unit_was_counted(tmp_path, capsys):
    text = TWO_UNITS + "A,2019,210\nA,2020,220\n"
    counts = write_csv(tmp_path / "in", text)
    payload = json.loads(run_trend([counts, "--json"], capsys))
    assert payload["years"] == [2014, 2015, 2016, 2017, 2018]
    assert payload["units"]["A"]["years"][-1] == 2020


def test_short_series_gets_rates_but_no_logistic(tmp_path, capsys):
    counts = write_csv(tmp_path / "in", "year,count\n2019,40\n2020,44\n2021,50\n")
    payload = json.loads(run_trend([counts, "--json"], capsys))
    assert payload["K"] is None and payload["r_max"] is None
    assert "at least 5 counts" in payload["ceiling_reason"]
    assert payload["r_mean"] > 0


@pytest.mark.parametrize(
    "text, words",
    [
        ("year,count\n2014,10\n2015,0\n2016,12\n", ["row 3", "'count'", "> 0"]),
        ("year,count\n2014,10\n2015,-4\n2016,12\n", ["row 3", "'count'"]),
        ("year,count\n2014,10\n2015,ten\n2016,12\n", ["row 3", "'count'", "not a number"]),
        ("year,count\n2014,10\n2015,\n2016,12\n", ["row 3", "'count'", "empty"]),
        ("year,count\n2014,10\n2015,11\n2014,12\n", ["rows 2 and 4", "'year'", "twice"]),
        ("year,count\n2014,10\n2015.5,11\n2016,12\n", ["row 3", "'year'", "whole"]),
        ("year,animals\n2014,10\n2015,11\n2016,12\n", ["row 1", "missing column 'count'"]),
        ("year,count\n2014,10\n2015,11\n", ["'count'", "at least 3", "found 2"]),
        ("year,count,removals\n2014,10,0\n2015,11,-1\n2016,12,0\n", ["row 3", "'removals'"]),
        (
            "unit_id,year,count\nA,2014,10\nA,2015,11\nA,2016,12\nB,2014,3\n",
            ["unit 'B'", "at least 3"],
        ),
        ("unit_id,year,count\nA,2014,10\n,2015,11\nA,2016,12\n", ["row 3", "'unit_id'"]),
        ("year,count\n", ["no data rows"]),
        # A year of 10^12 once asked numpy for 7 TiB; -5000 passed to the fit as NaN.
        ("year,count\n2014,10\n1000000000000,11\n2016,12\n", ["row 3", "'year'", "<= 2200"]),
        ("year,count\n-5000,10\n2015,11\n2016,12\n", ["row 2", "'year'", ">= 1800"]),
    ],
)
def test_bad_counts_give_one_clear_message(tmp_path, text, words):
    counts = write_csv(tmp_path / "in", text)
    args = argparse.Namespace(
        counts=counts, unit=None, project=None, json=False, out=None, level=0.95
    )
    with pytest.raises(TableError) as caught:
        cli.run_trend(args)
    message = str(caught.value)
    assert message.startswith(str(counts))
    for word in words:
        assert word in message


def test_unknown_unit_and_bad_level(tmp_path):
    counts = write_csv(tmp_path / "in", TWO_UNITS)
    args = argparse.Namespace(
        counts=counts, unit="Z", project=None, json=False, out=None, level=0.95
    )
    with pytest.raises(TableError, match="unit 'Z'.*expected one of A, B"):
        cli.run_trend(args)
    args.unit, args.level = None, 95.0
    with pytest.raises(InputError, match="--level"):
        cli.run_trend(args)


def test_out_writes_trend_json_and_leaves_no_temporary_file(tmp_path, capsys):
    counts = write_csv(tmp_path / "in", TWO_UNITS)
    printed = json.loads(run_trend([counts, "--json", "--out", tmp_path / "results"], capsys))
    written = json.loads((tmp_path / "results" / "trend.json").read_text(encoding="utf-8"))
    assert written == printed
    assert [path.name for path in (tmp_path / "results").iterdir()] == ["trend.json"]


def test_a_full_disk_names_trend_json_and_leaves_nothing(tmp_path, monkeypatch):
    counts = write_csv(tmp_path / "in", TWO_UNITS)
    real_fdopen = os.fdopen

    class FullDisk:
        """A file whose write fails as write(2) does on a full disk (ENOSPC, no file name)."""

        def __init__(self, *args, **kwargs):
            self.stream = real_fdopen(*args, **kwargs)

        def __enter__(self):
            return self

        def __exit__(self, *exc):
            self.stream.close()

        def write(self, text):
            raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))

    monkeypatch.setattr(trend_text.os, "fdopen", FullDisk)
    out = tmp_path / "results"
    args = argparse.Namespace(
        counts=counts, unit=None, project=None, json=True, out=out, level=0.95
    )
    with pytest.raises(OutputError, match=r"trend\.json: cannot write the results: No space left"):
        cli.run_trend(args)
    assert list(out.iterdir()) == []


def test_trend_json_added_to_results_keeps_them_replaceable(tmp_path, capsys):
    # trend.json written into an estimate's output folder joins its list of outputs, so that a
    # later --overwrite may replace the folder; the file follows the umask (not mkstemp's 0600).
    out = tmp_path / "results"
    out.mkdir()
    outputs.write_outputs_list(out)
    counts = write_csv(tmp_path / "in", TWO_UNITS)
    previous = os.umask(0o022)
    try:
        run_trend([counts, "--out", out], capsys)
    finally:
        os.umask(previous)
    assert (out / "trend.json").stat().st_mode & 0o777 == 0o644  # 0666 minus umask 022 (POSIX)
    assert outputs.foreign_files(out) == []
    (out / "trend.json").write_text("{}\n")
    assert outputs.foreign_files(out) == ["trend.json (changed since nutricap wrote it)"]


def test_out_refuses_the_counts_folder(tmp_path):
    counts = write_csv(tmp_path / "in", TWO_UNITS)
    args = argparse.Namespace(
        counts=counts, unit=None, project=None, json=True, out=tmp_path / "in", level=0.95
    )
    with pytest.raises(OutputError, match="input folder"):
        cli.run_trend(args)
    assert not (tmp_path / "in" / "trend.json").exists()


# --- beside NCC and ECC (the workflow is replaced by a fake) ----------------------------

CAPACITY = pd.DataFrame(
    {
        "unit_id": ["A", "B", "C"],
        "ncc_animals": [150.0, 100.0, 40.0],
        "ecc_animals": [300.0, 250.0, 90.0],
        "area_ha": [1.0, 1.0, 1.0],
    }
)


@pytest.fixture
def fake_workflow(tmp_path, monkeypatch):
    """Replace load_project and estimate by mocks; return (project file, estimate mock)."""
    project_file = tmp_path / "project" / "project.toml"
    project = types.SimpleNamespace(path=project_file, input_paths=lambda: {})
    load = mock.Mock(return_value=project)
    estimate = mock.Mock(return_value=types.SimpleNamespace(by_unit=CAPACITY))
    monkeypatch.setitem(
        sys.modules, "nutricap.inputs.project", types.SimpleNamespace(load_project=load)
    )
    monkeypatch.setitem(sys.modules, "nutricap.workflow", types.SimpleNamespace(estimate=estimate))
    return project_file, load, estimate, project


def test_latest_count_beside_ncc_and_ecc(tmp_path, capsys, fake_workflow):
    project_file, load, estimate, project = fake_workflow
    counts = write_csv(tmp_path / "in", TWO_UNITS)
    payload = json.loads(run_trend([counts, "--json", "--project", project_file], capsys))
    load.assert_called_once_with(project_file)
    estimate.assert_called_once_with(project)
    # Total of the counted units A and B: latest 200 + 120 = 320; NCC 150 + 100 = 250;
    # ECC 300 + 250 = 550 (unit C is not counted and not summed).
    total = payload["capacity"]
    assert total["units"] == ["A", "B"]
    assert total["ncc_animals"] == 250.0 and total["ecc_animals"] == 550.0
    assert total["latest_minus_ncc"] == 70.0 and total["latest_minus_ecc"] == -230.0
    assert total["statement"] == (
        "latest count 320 (2018) is 70 above NCC (250) and 230 below ECC (550)"
    )
    unit_a = payload["units"]["A"]["capacity"]
    assert unit_a["latest_minus_ncc"] == 50.0 and unit_a["latest_minus_ecc"] == -100.0
    text = run_trend([counts, "--project", project_file], capsys)
    assert "is 20 above NCC (100) and 130 below ECC (250)" in text  # unit B: 120 vs 100, 250


def test_counts_without_units_use_the_chosen_unit_or_all(tmp_path, capsys, fake_workflow):
    project_file = fake_workflow[0]
    counts = write_csv(tmp_path / "in", "year,count\n2016,30\n2017,35\n2018,40\n")
    chosen = json.loads(
        run_trend([counts, "--json", "--unit", "C", "--project", project_file], capsys)
    )
    assert chosen["series"] == "C"
    assert chosen["capacity"]["statement"] == (
        "latest count 40 (2018) is equal to NCC (40) and 50 below ECC (90)"
    )
    everything = json.loads(run_trend([counts, "--json", "--project", project_file], capsys))
    assert everything["capacity"]["ncc_animals"] == 290.0  # 150 + 100 + 40


def test_counted_unit_missing_from_capacity(tmp_path, fake_workflow):
    counts = write_csv(tmp_path / "in", TWO_UNITS.replace("B,", "D,"))
    args = argparse.Namespace(
        counts=counts, unit=None, project=fake_workflow[0], json=True, out=None, level=0.95
    )
    with pytest.raises(InputError, match="unit 'D'.*not in the capacity estimate"):
        cli.run_trend(args)


def test_out_refuses_the_project_folder(tmp_path, fake_workflow):
    counts = write_csv(tmp_path / "in", TWO_UNITS)
    args = argparse.Namespace(
        counts=counts,
        unit=None,
        project=fake_workflow[0],
        json=True,
        out=fake_workflow[0].parent,
        level=0.95,
    )
    with pytest.raises(OutputError):
        cli.run_trend(args)


def test_rows_in_any_order_give_the_same_figures(tmp_path, capsys):
    lines = TWO_UNITS.splitlines()
    shuffled = "\n".join([lines[0]] + lines[:0:-1]) + "\n"  # header, then rows reversed
    ordered = json.loads(run_trend([write_csv(tmp_path / "a", TWO_UNITS), "--json"], capsys))
    reversed_ = json.loads(run_trend([write_csv(tmp_path / "b", shuffled), "--json"], capsys))
    for key in ("years", "counts", "r_mean", "r_ci", "K", "r_max"):
        assert reversed_[key] == ordered[key]
    assert list(reversed_["units"]) == ["B", "A"]  # units in the order the file gives them


def test_help_shows_row_convention_and_cautions():
    parser = argparse.ArgumentParser(prog="nutricap trend", epilog="CAUTION: general.")
    cli.add_trend_arguments(parser)
    shown = " ".join(parser.format_help().split())
    assert "CAUTION: general." in shown
    for words in ("header is row 1", "indices", "weak evidence of K", "entered if known"):
        assert words in shown
