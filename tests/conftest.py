"""Shared fixtures: the invented example landscape, written once per test session."""

import shutil
from pathlib import Path

import pytest
from hypothesis import settings

from nutricap.example import write_example_landscape

# No per-example deadline: CI machines are shared and timing is not what these tests check.
# Derandomised so that a CI run is reproducible.
settings.register_profile("nutricap", deadline=None, derandomize=True)
settings.load_profile("nutricap")


@pytest.fixture(scope="session")
def example_project(tmp_path_factory) -> Path:
    """Path of the example project file (inputs invented for the example)."""
    folder = tmp_path_factory.mktemp("example") / "landscape"
    return write_example_landscape(folder)


@pytest.fixture()
def project(example_project, tmp_path) -> Path:
    """A private copy of the example project, safe to break (inputs invented for the example)."""
    folder = tmp_path / "inputs"
    shutil.copytree(example_project.parent, folder)
    return folder / example_project.name


@pytest.fixture(scope="session")
def example_estimate(example_project):
    """The estimate of the example project (computed once)."""
    from nutricap.inputs.project import load_project
    from nutricap.workflow import estimate

    return estimate(load_project(example_project))


BAD_INPUT_COUNT = "bad_input_cases_run"
"""Key under which each pytest-xdist worker hands its count of bad-input cases back."""


def pytest_sessionfinish(session):
    """On a pytest-xdist worker, hand the count of bad-input cases run to the controller."""
    from bad_inputs import CASES_RUN

    output = getattr(session.config, "workeroutput", None)
    if output is not None:
        output[BAD_INPUT_COUNT] = len(session.config.stash.get(CASES_RUN, []))


@pytest.hookimpl(optionalhook=True)
def pytest_testnodedown(node, error):
    """On the pytest-xdist controller, add up the workers' counts (see pytest_sessionfinish)."""
    from bad_inputs import CASES_RUN

    count = getattr(node, "workeroutput", {}).get(BAD_INPUT_COUNT, 0)
    node.config.stash.setdefault(CASES_RUN, []).extend(["(worker)"] * count)


def pytest_terminal_summary(terminalreporter, exitstatus, config):
    """Report how many bad-input cases (tests/bad_inputs/cases.py) were run."""
    from bad_inputs import CASES_RUN

    ran = config.stash.get(CASES_RUN, [])
    if ran:
        terminalreporter.write_line(f"bad-input cases run: {len(ran)}")


@pytest.fixture()
def estimate_error(tmp_path, capsys):
    """Run ``nutricap estimate`` on a project text written into a folder and return its one
    error line, after checking exit code 2, exactly one line on stderr and no output folder."""
    from nutricap.cli import main

    def run(folder: Path, text: str) -> str:
        (folder / "cli.toml").write_text(text)
        out = tmp_path / "results"
        code = main(["estimate", str(folder / "cli.toml"), "--out", str(out), "--quiet"])
        error = capsys.readouterr().err
        assert code == 2
        assert len(error.strip().splitlines()) == 1
        assert not out.exists()
        return error

    return run
