"""The bad-input corpus (tests/bad_inputs/cases.py) through the command line.

Each case breaks a fresh copy of the invented example project. ``check`` and ``estimate`` must
then exit 2 with exactly one line on stderr that names the file (in full) and the row, column,
feature or key, show no traceback, warn nothing, write no output folder and leave every input
file as it was. Cases marked valid must exit 0 and pass their own check of the table: ``check
--quiet`` must print nothing at all, and ``estimate`` (without ``--quiet``, so that its summary
is printed) only progress lines on stderr. A case that prepares the output folder
(``prepare_out``) is an output-folder problem: only ``estimate`` runs (``check`` writes
nothing), the message names the output folder, and the folder must be left as it was.
"""

import hashlib
import re
import shutil
import warnings

import pandas as pd
import pytest
from bad_inputs import CASES_RUN
from bad_inputs.cases import CASES

from nutricap.cli import main

# Warnings the command line does not show by default (Python's default warning filters).
HIDDEN_WARNINGS = (DeprecationWarning, PendingDeprecationWarning, ImportWarning, ResourceWarning)
PROGRESS = re.compile(r"\[\d+\] +\d+\.\d s  |[a-z ]+: +\d+%\|")
"""A progress line on stderr: a step (cli.StepPrinter) or a raster pass's bar (tqdm)."""
NO_FIGURES = "--no-figures"
"""The cases check tables and messages, not the report's figure files (test_cli.py does)."""


def _run(capsys, argv):
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        code = main([str(arg) for arg in argv])
    shown = [w for w in caught if not issubclass(w.category, HIDDEN_WARNINGS)]
    captured = capsys.readouterr()
    return code, captured.out, captured.err, shown


def _snapshot(folder):
    return {
        path.relative_to(folder): hashlib.sha256(path.read_bytes()).hexdigest()
        for path in sorted(folder.rglob("*"))
        if path.is_file()
    }


@pytest.fixture(scope="module")
def reference_table(example_project, tmp_path_factory):
    """capacity_by_unit.csv of the unbroken example (inputs invented for the example)."""
    out = tmp_path_factory.mktemp("reference") / "results"
    assert main(["estimate", str(example_project), "--out", str(out), NO_FIGURES, "--quiet"]) == 0
    return pd.read_csv(out / "capacity_by_unit.csv")


def test_corpus_is_large_and_named_once():
    names = [case.name for case in CASES]
    assert len(names) >= 30
    assert len(set(names)) == len(names)


def _param(case):
    if case.known_gap is None:
        return pytest.param(case, id=case.name)
    # Only a failed assertion counts as the gap; a broken recipe must fail the test.
    reason = f"known gap: {case.known_gap}"
    gap = pytest.mark.xfail(strict=True, raises=AssertionError, reason=reason)
    return pytest.param(case, id=case.name, marks=gap)


@pytest.mark.parametrize("case", [_param(case) for case in CASES])
def test_case(case, example_project, tmp_path, capsys, request):
    if case.needs is not None:
        pytest.importorskip(case.needs)
    request.config.stash.setdefault(CASES_RUN, []).append(case.name)
    folder = (tmp_path / "inputs").resolve()
    shutil.copytree(example_project.parent, folder)
    case.recipe(folder)
    project, out = folder / case.project, tmp_path / "results"
    tail = (NO_FIGURES, "--quiet")  # --quiet last: a valid case's estimate runs without it
    runs = [("check", project, "--quiet"), ("estimate", project, "--out", out, *tail)]
    if case.scenario is not None:
        runs = [("compare", project, "--scenario", case.scenario, "--out", out, *tail)]
    if case.prepare_out is not None:
        case.prepare_out(out)
        runs = [("estimate", project, "--out", out, "--overwrite", *tail)]
    before, out_before = _snapshot(folder), _snapshot(out) if out.exists() else None
    capsys.readouterr()
    messages = []
    for argv in runs:
        if case.exit_code == 0 and argv[0] == "estimate":
            argv = argv[:-1]  # without --quiet: the summary the pattern is searched in
        code, stdout, stderr, shown = _run(capsys, argv)
        assert code == case.exit_code, (argv[0], stderr or stdout)
        assert "Traceback" not in stderr + stdout
        assert not shown, [str(w.message) for w in shown]
        if case.exit_code == 0:
            if argv[0] == "check":
                assert stdout == stderr == "", "--quiet prints nothing on success"
                continue
            assert all(PROGRESS.match(line) for line in stderr.splitlines() if line), stderr
            assert re.search(case.pattern, stdout), stdout
            continue
        lines = stderr.splitlines()
        assert len(lines) == 1, stderr
        assert lines[0].startswith("nutricap: error: "), lines[0]
        assert re.search(case.pattern, lines[0]), lines[0]
        named = out if case.prepare_out is not None else folder
        assert str(named) in lines[0], "the file is named in full"
        messages.append(lines[0])
    assert _snapshot(folder) == before, "inputs changed"
    if case.exit_code == 0:
        table = pd.read_csv(out / "capacity_by_unit.csv")
        case.verify(folder, table, request.getfixturevalue("reference_table"))
    elif case.prepare_out is not None:
        assert _snapshot(out) == out_before, "the output folder was left as it was"
        assert sorted(p.name for p in tmp_path.iterdir()) == ["inputs", "results"]
    else:
        assert not out.exists()
        assert len(set(messages)) == 1, "check and estimate say the same"
        assert [p.name for p in tmp_path.iterdir()] == ["inputs"], "nothing written beside"
