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
  diet, capacity, per-unit table, use, supply);
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
from nutricap.report import extra_sections, figures, provenance, raster_section, sections
from nutricap.report.formatting import embedded_figure
from nutricap.report.methods_text import methods
from nutricap.report.sections import INTERVAL_COLUMNS, has_interval, is_flag, unit_table

if TYPE_CHECKING:
    from nutricap.inputs.project import Project
    from nutricap.model.estimate import Estimate

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
    """

    scenario_table: pd.DataFrame | None = None
    sensitivity_table: pd.DataFrame | None = None
    trend: Any = None
    interval_level: float | None = None
    sensitivity_change: float | None = None


def render_report(
    estimate: Estimate,
    *,
    project: Project,
    manifest: dict,
    extras: ReportExtras | None = None,
) -> str:
    """The HTML report of ``estimate`` as one self-contained document.

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

    Returns
    -------
    str
        The HTML text.
    """
    extras = extras or ReportExtras()
    animals, forage = estimate.animals, estimate.forage_classes
    intervals = any(has_interval(estimate.by_unit, name) for name in INTERVAL_COLUMNS)
    context = {
        "caution": CAUTION,
        "header": sections.header(estimate, project, manifest),
        "inputs": sections.inputs(estimate, project, manifest, n_animal_classes=len(animals)),
        "diet": sections.diet(estimate),
        "map": embedded_figure(
            figures.ncc_density_map(estimate.units, estimate.by_unit),
            "Map of the management units shaded by NCC per square kilometre.",
        ),
        "capacity": sections.capacity(estimate, extras.interval_level),
        "sensitivity": extra_sections.sensitivity(
            extras.sensitivity_table, extras.sensitivity_change
        ),
        "use": sections.use(estimate.by_unit),
        "shared_range": extra_sections.shared_range(estimate.shared_range, estimate.by_unit),
        "scenario": extra_sections.scenario(extras.scenario_table),
        "trend": extra_sections.trend(extras.trend, estimate.by_unit),
        "unit_table": unit_table(estimate.by_unit, extras.interval_level),
        "supply": sections.supply(estimate),
        "raster": raster_section.raster_landscape(estimate),
        "methods": methods(
            intervals=intervals,
            sensitivity=extras.sensitivity_table is not None,
            trend=extras.trend is not None,
            grid=estimate.grid is not None,
        )
        + raster_section.raster_methods(estimate, intervals=intervals),
        "parameters": provenance.parameter_tables(estimate, project, animals, forage),
        "manifest": provenance.manifest_summary(manifest),
    }
    return _template().render(**context)


def write_report(
    path: Path,
    estimate: Estimate,
    *,
    project: Project,
    manifest: dict,
    extras: ReportExtras | None = None,
) -> None:
    """Write :func:`render_report` to ``path`` as UTF-8 (into a staging folder, normally)."""
    html = render_report(estimate, project=project, manifest=manifest, extras=extras)
    Path(path).write_text(html, encoding="utf-8")


def _template() -> jinja2.Template:
    text = (files("nutricap.report") / "templates" / TEMPLATE).read_text(encoding="utf-8")
    environment = jinja2.Environment(
        autoescape=True, undefined=jinja2.StrictUndefined, trim_blocks=True, lstrip_blocks=True
    )
    return environment.from_string(text)
