"""The runs that write their outputs: :func:`run_estimate` and :func:`run_compare` (the
estimate or comparison, then every output written into the folder atomically)."""

from __future__ import annotations

from collections.abc import Callable, Iterator, Sequence
from contextlib import contextmanager
from pathlib import Path

import pandas as pd

from nutricap.inputs.project import Project
from nutricap.model.estimate import Estimate
from nutricap.model.scenarios import treatment_years
from nutricap.report.bundle import ReportPreload, write_estimate
from nutricap.report.manifest import BackgroundChecksums
from nutricap.report.output_folder import check_output_folder, staged_folder
from nutricap.report.tables import write_csv
from nutricap.workflow.comparison import compare_scenarios
from nutricap.workflow.pipeline import estimate
from nutricap.workflow.reading import Progress, on_grid

# Matplotlib (the report) takes about half a second to import; it is imported where a report
# or chart is written (SciPy likewise, inside the science functions that need it).


def run_estimate(
    project: Project,
    out: Path,
    *,
    overwrite: bool = False,
    report: bool = True,
    progress: Progress | None = None,
    checksums: BackgroundChecksums | None = None,
    pdf_browser: Path | None = None,
    figure_files: bool = False,
) -> Estimate:
    """Estimate ``project`` and write every output into ``out`` atomically.

    ``checksums`` of :meth:`Project.files` for the manifest may be started by the caller
    (as early as possible); otherwise they start here, beside the estimate.
    ``pdf_browser``: also print the report to ``report.pdf`` with this browser;
    ``figure_files``: also write its figures as PNG and SVG files into ``figures/``.
    """
    say = progress or (lambda message: None)
    out = check_output_folder(out, project.files(), overwrite=overwrite)
    checksums = checksums or BackgroundChecksums(project.files())
    with _report_preload(project, report) as started:
        result = estimate(project, progress, streaming_started=started)
    say(f"writing outputs to {out}")
    with staged_folder(out, overwrite=overwrite) as staging:
        write_estimate(
            result,
            project,
            staging,
            report=report,
            checksums=checksums,
            pdf_browser=pdf_browser,
            figure_files=figure_files,
        )
    return result


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


def run_compare(
    project: Project,
    scenario_name: str | Sequence[str],
    out: Path,
    *,
    overwrite: bool = False,
    report: bool = True,
    progress: Progress | None = None,
    checksums: BackgroundChecksums | None = None,
    pdf_browser: Path | None = None,
    figure_files: bool = False,
) -> tuple[Estimate, pd.DataFrame]:
    """Estimate, run the scenario, and write everything (plus the scenario table and chart).

    ``checksums``, ``pdf_browser`` and ``figure_files`` as in :func:`run_estimate`.
    """
    say = progress or (lambda message: None)
    out = check_output_folder(out, project.files(), overwrite=overwrite)
    checksums = checksums or BackgroundChecksums(project.files())
    with _report_preload(project, report) as started:
        result, table, scenarios = compare_scenarios(
            project, scenario_name, progress, streaming_started=started
        )
    say(f"writing outputs to {out}")
    with staged_folder(out, overwrite=overwrite) as staging:
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
        )
        write_csv(table, staging / "scenario_by_unit.csv")
        from nutricap.report.figures import figure_png, scenario_figure

        chart = figure_png(
            scenario_figure(table, per_unit=True, treatment_years=treatment_years(scenarios))
        )
        (staging / "scenario_by_unit.png").write_bytes(chart)
    return result, table
