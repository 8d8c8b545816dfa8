"""The self-contained HTML report of an estimate.

:func:`render_report` formats an :class:`~nutricap.model.estimate.Estimate` (and optional
scenario, sensitivity and trend results) into one HTML file: figures are
embedded as base64 ``data:image/png`` URIs and the style sheet is inline, so the
file opens anywhere with no network and no other file. The template is
``nutricap/report/templates/report.html.j2`` (Jinja2, autoescaping on).

Nothing here computes capacity: the modules arrange and format the numbers they are
handed, including the forage-class and animal-class tables as the estimate read them (to
list every parameter with its provenance). The parts:

- :mod:`nutricap.report.formatting`: cell formatters, the generic :func:`table`, figures
  as data URIs;
- :mod:`nutricap.report.sections`: the sections drawn from the estimate (header, inputs,
  capacity, per-unit table, supply), :mod:`nutricap.report.diet_section` (target diet, herd,
  diet-composition limits) and :mod:`nutricap.report.use_section` (use and overuse);
- :mod:`nutricap.report.raster_section`: grid, rules, models and maps of a raster run;
- :mod:`nutricap.report.extra_sections`: sensitivity, treatment scenarios, population trend;
- :mod:`nutricap.report.methods_text`: every equation with its source;
- :mod:`nutricap.report.provenance`: the parameter tables and the run manifest.
"""

from __future__ import annotations

from dataclasses import dataclass
from importlib.resources import files
from pathlib import Path
from typing import TYPE_CHECKING, Any

import jinja2
import pandas as pd

from nutricap.cautions import CAUTION
from nutricap.report import (
    diet_section,
    extra_sections,
    figures,
    provenance,
    raster_section,
    references,
    sections,
    use_section,
)
from nutricap.report.formatting import (
    FigureFiles,
    embedded_figure,
    hand_ahead,
    render_embedded,
)
from nutricap.report.methods_text import methods
from nutricap.report.sections import INTERVAL_COLUMNS, has_interval, unit_table
from nutricap.report.use_section import is_flag

if TYPE_CHECKING:
    from matplotlib.figure import Figure

    from nutricap.inputs.project import Project
    from nutricap.model.estimate import Estimate
    from nutricap.report.figure_process import FigureProcess

__all__ = ["ReportExtras", "is_flag", "methods", "render_report", "unit_table", "write_report"]

TEMPLATE = "report.html.j2"


@dataclass(frozen=True)
class ReportExtras:
    """Optional results shown in the report when given.

    Attributes
    ----------
    scenario_table : pandas.DataFrame, optional
        ``unit_id, scenario, year, years_since_treatment, ncc_animals_baseline,
        ncc_animals_scenario, change_animals`` [animals].
    sensitivity_table : pandas.DataFrame, optional
        ``input, low_change_animals, high_change_animals`` [animals] (more columns are shown).
    trend : mapping or dataclass, optional
        ``years`` and ``counts`` [animals]; optional ``fitted_years``, ``fitted_counts``, ``K``,
        ``K_ci``, ``r_mean``, ``r_ci``, ``lambda_mean``, ``lambda_ci``, ``r_max``, ``r_max_ci``,
        ``msy_level``, ``msy_yield``, ``phase``, ``ceiling_reason``, ``series``, and the forage
        capacity of the counted area as ``ncc_animals``/``ecc_animals`` or under ``capacity``
        (the output of :func:`nutricap.model.trend.analyse_series` fits).
    interval_level : float, optional
        Level of the ``*_lo``/``*_hi`` intervals in the per-unit table, e.g. 0.9.
    sensitivity_change : float, optional
        The fractional change behind ``sensitivity_table`` (0.1 for ±10 %).
    scenarios : list of nutricap.model.scenarios.Scenario, optional
        The scenarios behind ``scenario_table``: description, treated land, responses.
    """

    scenario_table: pd.DataFrame | None = None
    sensitivity_table: pd.DataFrame | None = None
    trend: Any = None
    interval_level: float | None = None
    sensitivity_change: float | None = None
    scenarios: list | None = None


def render_report(
    estimate: Estimate,
    *,
    project: Project,
    manifest: dict,
    extras: ReportExtras | None = None,
) -> str:
    """The HTML report of ``estimate`` as one self-contained document (see :func:`report_parts`)."""
    return report_parts(estimate, project=project, manifest=manifest, extras=extras)[0]


def report_parts(
    estimate: Estimate,
    *,
    project: Project,
    manifest: dict,
    extras: ReportExtras | None = None,
    print_figures: bool = False,
    figure_process: FigureProcess | None = None,
) -> tuple[str, dict[str, Figure], dict[str, FigureFiles]]:
    """The HTML report of ``estimate``, its figures by file name and their files' images.

    Parameters
    ----------
    estimate : nutricap.model.estimate.Estimate
        The results to report.
    project : nutricap.inputs.project.Project
        The project that was estimated (names, settings, input tables).
    manifest : dict
        The run manifest (:func:`nutricap.report.manifest.build_manifest`), shown and used for the
        input files' SHA-256, the area CRS and the run date.
    extras : ReportExtras, optional
        Scenario, sensitivity and trend results; each section appears only when given.
    print_figures : bool, default False
        Also draw each figure at the print resolution (the report's images are then reduced
        from those drawings, see :func:`nutricap.report.formatting.render_embedded`).
    figure_process : FigureProcess, optional
        A second process for the figures, started ahead by the caller (None: started here
        when there are enough figures to share).

    Returns
    -------
    html : str
        The HTML text.
    figures : dict of str → matplotlib.figure.Figure
        Every figure of the report by its file name (no extension).
    drawn : dict of str → nutricap.report.formatting.FigureFiles
        The print PNG (being encoded) and, for the figures the second process drew, the SVG
        of every figure by file name (empty unless ``print_figures``).
    """
    extras = extras or ReportExtras()
    animals, forage = estimate.animals, estimate.forage_classes
    intervals = any(has_interval(estimate.by_unit, name) for name in INTERVAL_COLUMNS)
    method_list = methods(
        intervals=intervals,
        sensitivity=extras.sensitivity_table is not None,
        trend=extras.trend is not None,
        grid=estimate.grid is not None,
        diet_limits=estimate.target.composition is not None,
        other_herbivores=bool(estimate.other_herds),
        current_use=estimate.use_by_class is not None,
        scenarios=extras.scenario_table is not None,
    ) + raster_section.raster_methods(estimate, intervals=intervals)
    raster = raster_section.raster_landscape(estimate, project.config.project.species)
    # the second process starts on the first raster map while the other sections are built
    ahead = hand_ahead(_figure_parts(raster), figure_process if print_figures else None)
    context = {
        "caution": CAUTION,
        "header": sections.header(estimate, project, manifest),
        "inputs": sections.inputs(estimate, project, manifest, n_animal_classes=len(animals)),
        "diet": diet_section.diet(estimate),
        "map": embedded_figure(
            figures.ncc_density_map(estimate.units, estimate.by_unit),
            "Map of the management units shaded by NCC per square kilometre.",
            "ncc_density_map",
        ),
        "capacity": sections.capacity(estimate, extras.interval_level),
        "sensitivity": extra_sections.sensitivity(
            extras.sensitivity_table, extras.sensitivity_change
        ),
        "use": use_section.use(estimate.by_unit, estimate.use_by_class),
        "shared_range": extra_sections.shared_range(estimate.shared_range, estimate.by_unit),
        "scenario": extra_sections.scenario(
            extras.scenario_table, extras.scenarios, estimate.units
        ),
        "trend": extra_sections.trend(extras.trend, estimate.by_unit),
        "unit_table": unit_table(estimate.by_unit, extras.interval_level),
        "supply": sections.supply(estimate),
        "raster": raster,
        "methods": [
            {**vars(method), "source": references.short_citation(method.source)}
            for method in method_list
        ],
        "parameters": provenance.parameter_tables(estimate, project, animals, forage),
        "references": _reference_list(estimate, project, method_list),
        "to_verify": references.values_to_verify(reductions=_reductions_used(estimate)),
        "manifest": provenance.manifest_summary(manifest),
    }
    parts = _figure_parts(context)
    drawn = render_embedded(parts, print_files=print_figures, process=figure_process, ahead=ahead)
    shown = {part["name"]: part["figure"] for part in parts}
    return _template().render(**context), shown, drawn


def _figure_parts(value: Any) -> list[dict]:
    """The embedded figures (dicts with a ``figure``) anywhere in the template context."""
    if isinstance(value, dict):
        if "figure" in value and "src" in value:
            return [value]
        return [part for item in value.values() for part in _figure_parts(item)]
    if isinstance(value, list | tuple):
        return [part for item in value for part in _figure_parts(item)]
    return []


def _reference_list(estimate: Estimate, project: Project, method_list) -> dict:
    texts = [method.source for method in method_list]
    texts += provenance.source_texts(estimate, project)
    if estimate.grid is not None and estimate.grid.rules is not None:
        for reduction in (estimate.grid.rules.slope_table, estimate.grid.rules.water_table):
            texts += list(reduction.row_sources) if reduction is not None else []
    return {"entries": references.cited(texts), "note": references.REFERENCE_NOTE}


def _reductions_used(estimate: Estimate) -> bool:
    rules = estimate.grid.rules if estimate.grid is not None else None
    return rules is not None and (rules.slope_table is not None or rules.water_table is not None)


def write_report(
    path: Path,
    estimate: Estimate,
    *,
    project: Project,
    manifest: dict,
    extras: ReportExtras | None = None,
    figure_files: bool = True,
    figure_process: FigureProcess | None = None,
) -> None:
    """Write :func:`render_report` to ``path`` as UTF-8 (into a staging folder, normally).

    ``figure_files``: also write each figure beside it as ``figures/NAME.png``
    (:data:`figures.PRINT_DPI` dpi) and ``figures/NAME.svg``, for a report author to place;
    ``figure_process``: see :func:`report_parts`.
    """
    html, shown, drawn = report_parts(
        estimate,
        project=project,
        manifest=manifest,
        extras=extras,
        print_figures=figure_files,
        figure_process=figure_process,
    )
    Path(path).write_text(html, encoding="utf-8")
    if figure_files:
        figures.write_figures(shown, Path(path).parent / figures.FIGURES_FOLDER, drawn)


def _template() -> jinja2.Template:
    text = (files("nutricap.report") / "templates" / TEMPLATE).read_text(encoding="utf-8")
    environment = jinja2.Environment(
        autoescape=True, undefined=jinja2.StrictUndefined, trim_blocks=True, lstrip_blocks=True
    )
    return environment.from_string(text)
