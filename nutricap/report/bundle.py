"""Writing an estimate: every table, the density raster, the manifest and the report.

Formats and writes what the workflow computed, into a folder the caller
provides (a staging folder, see :mod:`nutricap.report.output_folder`).
"""

from __future__ import annotations

import importlib
import sys
import threading
from dataclasses import asdict
from pathlib import Path
from typing import TYPE_CHECKING

import pandas as pd

from nutricap.inputs.project import Project
from nutricap.landscape.density import piece_density, write_piece_density
from nutricap.landscape.grid.outputs import GIL_TURN_S, grid_outputs_alongside
from nutricap.model.requirements import DietTarget
from nutricap.model.results import totals_table
from nutricap.report.formatting import crs_label
from nutricap.report.manifest import BackgroundChecksums, build_manifest
from nutricap.report.tables import markdown_table, write_csv, write_geopackage, write_json

if TYPE_CHECKING:
    from nutricap.model.estimate import Estimate
    from nutricap.report.figure_process import FigureProcess
    from nutricap.report.html import ReportExtras

# Matplotlib takes about a second to import: the report modules are imported only when a
# report or chart is written (ahead, in a background thread, by ReportPreload).
REPORT_MODULES = ("nutricap.report.html",)
"""What the HTML report imports (matplotlib and Jinja2 with them)."""


class ReportPreload:
    """Imports the report's modules (:data:`REPORT_MODULES`) in a background thread.

    Started (:meth:`start`) as the grid's first pass starts: its worker threads spend their
    time in GDAL and numpy with the GIL released, so the import (Python code, about 0.7 s of
    one core) moves off the critical path of the report. While it runs, a thread waiting for
    the GIL gets it within ``switch_interval_s`` (Python's default turn of 5 ms would stall
    the workers at each numpy call). An import that fails here fails again, with its message,
    where the report imports the module.
    """

    def __init__(self, switch_interval_s: float = GIL_TURN_S) -> None:
        self.switch_interval_s = switch_interval_s
        self._before = sys.getswitchinterval()
        self._thread = threading.Thread(
            target=self._run, name="nutricap-report-import", daemon=True
        )

    def start(self) -> None:
        """Start the import (once; later calls do nothing)."""
        if self._thread.ident is None:
            self._before = sys.getswitchinterval()
            sys.setswitchinterval(self.switch_interval_s)
            self._thread.start()

    def _run(self) -> None:
        try:
            for name in REPORT_MODULES:
                importlib.import_module(name)
        except Exception:  # raised again by the report's own import
            pass
        finally:
            sys.setswitchinterval(self._before)

    def wait(self) -> None:
        """Wait for the import to end, if started (the GIL turn is then back to what it was)."""
        if self._thread.ident is not None:
            self._thread.join()


def write_estimate(
    result: Estimate,
    project: Project,
    folder: Path,
    *,
    report: bool = True,
    scenario_table: pd.DataFrame | None = None,
    scenarios: list | None = None,
    checksums: BackgroundChecksums | None = None,
    pdf_browser: Path | None = None,
    figure_files: bool = True,
    figure_process: FigureProcess | None = None,
) -> None:
    """Write the tables, the manifest and (unless ``report=False``) the HTML report.

    ``checksums`` of the inputs, when started ahead; otherwise computed here. With a
    ``scenario_table`` (a ``compare`` run) the manifest's command is ``compare`` and
    ``scenarios`` (:class:`nutricap.model.scenarios.Scenario`) are described in the report.
    ``pdf_browser``: also print the report to ``report.pdf`` with this browser
    (:func:`nutricap.report.pdf.find_browser`). ``figure_files``: also write the report's
    figures as PNG (300 dpi) and SVG files into ``figures/`` (False: the report only), some
    of them drawn by ``figure_process`` when the caller started one ahead (see
    :func:`nutricap.report.formatting.render_embedded`).
    """
    config = project.config
    totals = _write_tables(result, folder)
    eaten_kg, intake = result.solution.ncc.eaten_kg, result.herd.intake_kg_per_day
    # Raster outputs (capacity_density.tif: a second streamed pass) are written alongside.
    available = result.problem.available_kg
    with grid_outputs_alongside(result.grid, available, eaten_kg, intake, folder):
        _write_markdown(result, project, totals, folder)
        manifest = build_manifest(
            command="estimate" if scenario_table is None else "compare",
            project_path=project.path,
            input_paths=project.input_paths(),
            settings=config.model_dump(mode="json"),
            derived=_derived_values(result, scenarios),
            checksums=None if checksums is None else checksums.result(),
            column_names=project.column_names(),
        )
        write_json(manifest, folder / "run.json")
        if report:
            from nutricap.report.html import write_report

            write_report(
                folder / "report.html",
                result,
                project=project,
                manifest=manifest,
                extras=report_extras(result, project, scenario_table, scenarios),
                figure_files=figure_files,
                figure_process=figure_process,
            )
            if pdf_browser is not None:
                from nutricap.report.pdf import write_pdf

                write_pdf(folder / "report.html", pdf_browser)


def _write_markdown(result: Estimate, project: Project, totals: pd.DataFrame, folder: Path) -> None:
    """capacity_by_unit.md: the per-unit table with the season, target diet and totals."""
    config = project.config
    context = [
        f"{config.project.species}, {config.project.name}; season of {result.season_days:g} days.",
        f"Target diet: {target_words(result.target)}.",
        *[_total_words(row) for row in totals.itertuples()],
    ]
    markdown = markdown_table(result.by_unit, title="Capacity by unit", context_lines=context)
    (folder / "capacity_by_unit.md").write_text(markdown, encoding="utf-8")


def _write_tables(result: Estimate, folder: Path) -> pd.DataFrame:
    """Every table of ``result`` (CSV, JSON, the GeoPackage) and, on the polygon path,
    capacity_density.tif; returns the totals table."""
    totals = totals_table(result)
    write_csv(result.by_unit, folder / "capacity_by_unit.csv")
    write_csv(totals, folder / "capacity_totals.csv")
    write_csv(result.by_unit_class, folder / "capacity_by_unit_class.csv")
    write_csv(result.supply.table(), folder / "supply_by_stratum.csv")
    if result.use_by_class is not None:
        write_csv(result.use_by_class, folder / "use_by_unit_class.csv")
    if result.shared_range is not None:
        write_csv(result.shared_range.by_herd, folder / "other_herbivores_by_unit.csv")
        write_csv(result.shared_range.by_unit_class, folder / "other_herbivores_by_unit_class.csv")
    if result.trend is not None:
        write_json(result.trend, folder / "trend.json")
    if result.uncertainty.sensitivity is not None:
        write_csv(result.uncertainty.sensitivity, folder / "sensitivity.csv")
    write_geopackage(result.by_unit, result.units, folder / "capacity_by_unit.gpkg")
    eaten_kg, intake = result.solution.ncc.eaten_kg, result.herd.intake_kg_per_day
    if result.grid is None and result.areas.pieces is not None:
        density = piece_density(result.problem, eaten_kg, result.areas.pieces, intake)
        write_piece_density(
            result.areas.pieces, density, result.units, folder / "capacity_density.tif"
        )
    if result.grid is not None:
        write_csv(result.grid.rules_report, folder / "availability_rules.csv")
        if result.grid.calibration_report is not None:
            write_csv(result.grid.calibration_report, folder / "calibration.csv")
    return totals


def report_extras(
    result: Estimate,
    project: Project,
    scenario_table: pd.DataFrame | None,
    scenarios: list | None = None,
) -> ReportExtras:
    """What the report shows beside the estimate: sensitivity, intervals, scenario."""
    uncertainty = result.uncertainty
    from nutricap.report.html import ReportExtras

    return ReportExtras(
        scenario_table=scenario_table,
        scenarios=scenarios,
        sensitivity_table=uncertainty.sensitivity,
        interval_level=uncertainty.bootstrap.level if uncertainty.bootstrap else None,
        trend=result.trend,
        sensitivity_change=uncertainty.change or None,
    )


def target_words(target: DietTarget) -> str:
    """The target diet in words: thresholds and how they were obtained."""
    protein = f", DP ≥ {target.dp_min_pct:.2f} %" if target.dp_min_pct is not None else ""
    return f"DE ≥ {target.de_min_kcal_per_g:.3f} kcal/g DM{protein} ({target.derivation})"


def _total_words(row) -> str:
    names = {"ncc": "NCC", "ecc": "ECC", "allowable_use": "Capacity at allowable use"}
    words = f"{names[row.figure]}, all units: {row.total_animals:,.0f} animals"
    if hasattr(row, "total_animals_lo"):
        words += (
            f" ({row.interval_level:.0%} bootstrap interval "
            f"{row.total_animals_lo:,.0f}–{row.total_animals_hi:,.0f})"
        )
    return words + "."


def _derived_values(result: Estimate, scenarios: list | None = None) -> dict:
    compared = {"scenarios": [scenario.name for scenario in scenarios]} if scenarios else {}
    return {
        **compared,
        "diet_de_min_kcal_per_g": result.target.de_min_kcal_per_g,
        "diet_dp_min_pct": result.target.dp_min_pct,
        "target_derivation": result.target.derivation,
        "herd": asdict(result.herd),
        "season_days": result.season_days,
        "area_crs": crs_label(result.areas.area_crs),
        "area_crs_reason": result.areas.area_crs_reason,
        "notes": result.notes,
        **({"raster_path": result.grid.describe()} if result.grid is not None else {}),
    }
