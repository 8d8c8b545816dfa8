"""The runs that write their outputs: :func:`run_estimate` and :func:`run_compare` (the
estimate or comparison, then every output written into the folder atomically)."""

from __future__ import annotations

from collections.abc import Callable, Iterator, Sequence
from contextlib import contextmanager
from pathlib import Path
from typing import TYPE_CHECKING, TypedDict, Unpack

import pandas as pd

from nutricap.inputs.project import Project
from nutricap.model.estimate import Estimate
from nutricap.model.scenarios import Scenario, treatment_years
from nutricap.report.bundle import ReportPreload, write_estimate
from nutricap.report.manifest import BackgroundChecksums
from nutricap.report.output_folder import check_output_folder, staged_folder
from nutricap.report.tables import write_csv
from nutricap.workflow.comparison import compare_scenarios
from nutricap.workflow.pipeline import estimate
from nutricap.workflow.reading import Progress, on_grid

if TYPE_CHECKING:
    from nutricap.report.figure_process import FigureProcess

# Matplotlib (the report) takes about half a second to import; it is imported where a report
# or chart is written (SciPy likewise, inside the science functions that need it).


class RunOptions(TypedDict, total=False):
    """The keyword options of :func:`run_estimate` and :func:`run_compare`.

    Attributes
    ----------
    overwrite : bool
        Replace an existing output folder (only an earlier run's outputs, unchanged); default
        False.
    report : bool
        Write ``report.html``; default True.
    progress : callable, optional
        Told each step of the run (a message).
    checksums : BackgroundChecksums, optional
        SHA-256 of :meth:`Project.files` for the manifest, started by the caller as early as
        possible; otherwise they start here, beside the estimate.
    pdf_browser : Path, optional
        Also print the report to ``report.pdf`` with this browser.
    figure_files : bool
        Also write the report's figures as PNG and SVG files into ``figures/``; default False.
    """

    overwrite: bool
    report: bool
    progress: Progress | None
    checksums: BackgroundChecksums | None
    pdf_browser: Path | None
    figure_files: bool


def run_estimate(project: Project, out: Path, **options: Unpack[RunOptions]) -> Estimate:
    """Estimate ``project`` and write every output into ``out`` atomically (``options``: see
    :class:`RunOptions`)."""
    return _run_and_write(project, out, None, **options)[0]


def run_compare(
    project: Project, scenario_name: str | Sequence[str], out: Path, **options: Unpack[RunOptions]
) -> tuple[Estimate, pd.DataFrame]:
    """Estimate, run the scenario, and write everything (plus the scenario table and chart);
    ``options`` as in :func:`run_estimate`."""
    return _run_and_write(project, out, scenario_name, **options)


def _run_and_write(
    project: Project,
    out: Path,
    scenario_names: str | Sequence[str] | None,
    *,
    overwrite: bool = False,
    report: bool = True,
    progress: Progress | None = None,
    checksums: BackgroundChecksums | None = None,
    pdf_browser: Path | None = None,
    figure_files: bool = False,
) -> tuple[Estimate, pd.DataFrame | None]:
    """The estimate (with ``scenario_names``: the comparison) and its outputs written into
    ``out`` atomically; returns the estimate and the scenario table (None without scenarios)."""
    say = progress or (lambda message: None)
    out = check_output_folder(out, project.files(), overwrite=overwrite)
    checksums = checksums or BackgroundChecksums(project.files())
    table, scenarios = None, None
    figures = report and figure_files
    before = figures and not on_grid(project)  # off the grid the estimate keeps one core busy
    with _figure_process_ahead(before) as early_process:
        with _report_preload(project, report) as started:
            if scenario_names is None:
                result = estimate(project, progress, streaming_started=started)
            else:
                result, table, scenarios = compare_scenarios(
                    project, scenario_names, progress, streaming_started=started
                )
        say(f"writing outputs to {out}")
        with (
            _figure_process_ahead(figures and not before) as late_process,
            staged_folder(out, overwrite=overwrite) as staging,
        ):
            write_estimate(
                result,
                project,
                staging,
                report=report,
                scenario_table=table,
                scenarios=scenarios,
                checksums=checksums,
                pdf_browser=pdf_browser,
                figure_files=figure_files,
                figure_process=early_process or late_process,
            )
            if table is not None:
                _write_scenario_outputs(table, scenarios, staging)
    return result, table


@contextmanager
def _figure_process_ahead(wanted: bool) -> Iterator[FigureProcess | None]:
    """The report's second process for figures (:mod:`nutricap.report.figure_process`),
    started now (None when not ``wanted``): it starts and imports matplotlib while this one
    works on. Off the grid it starts before the estimate, which keeps one core busy; on the
    grid after it (started before, it slowed the first pass by as much as it saved:
    benchmarks/README.md, seventh session)."""
    if not wanted:
        yield None
        return
    from nutricap.report.figure_process import FigureProcess

    with FigureProcess() as process:
        yield process


def _write_scenario_outputs(table: pd.DataFrame, scenarios: list[Scenario], folder: Path) -> None:
    """``scenario_by_unit.csv`` and its chart ``scenario_by_unit.png``."""
    write_csv(table, folder / "scenario_by_unit.csv")
    from nutricap.report.figures import figure_png, scenario_figure

    chart = figure_png(
        scenario_figure(table, per_unit=True, treatment_years=treatment_years(scenarios))
    )
    (folder / "scenario_by_unit.png").write_bytes(chart)


@contextmanager
def _report_preload(project: Project, report: bool) -> Iterator[Callable[[], None] | None]:
    """What starts the import of the report's modules once the grid's first pass runs (its
    workers leave the GIL free most of the time); None for a run without report or grid."""
    if not (report and on_grid(project)):
        yield None
        return
    preload = ReportPreload()
    try:
        yield preload.start
    finally:
        preload.wait()
