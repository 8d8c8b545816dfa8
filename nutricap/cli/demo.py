"""The ``demo`` command: the invented example landscape written and estimated (polygons, then
the same landscape on a raster grid with a treatment scenario)."""

from __future__ import annotations

import argparse
from pathlib import Path

from nutricap.cautions import CAUTION
from nutricap.cli.console import StepPrinter, print_summary, say
from nutricap.cli.options import (
    EXIT_OK,
    NO_FIGURES_HELP,
    OVERWRITE_HELP,
    PDF_HELP,
    QUIET_HELP,
    pdf_browser,
    subparser,
)

DEMO_PARTS = ("example_landscape", "results", "results_rasters")
"""What ``demo`` writes into its folder (each part staged, with its list of outputs)."""
DEMO_GRID_SCENARIO = "juniper_thinning"
"""The scenario the demo's raster run compares (``compare`` on project_rasters.toml)."""


def add_demo(commands) -> None:
    """The ``demo`` command and its options."""
    parser = subparser(
        commands,
        "demo",
        "Write the invented example landscape and estimate it (polygons, then rasters).",
    )
    parser.add_argument(
        "--out",
        type=Path,
        default=Path("nutricap_demo"),
        help="folder for the example inputs and results (default: nutricap_demo)",
    )
    parser.add_argument(
        "--overwrite",
        action="store_true",
        help=f"{OVERWRITE_HELP}; the demo's folder may hold only " + ", ".join(DEMO_PARTS),
    )
    parser.add_argument("--quiet", action="store_true", help=QUIET_HELP)
    parser.add_argument("--pdf", action="store_true", help=PDF_HELP)
    parser.add_argument("--no-figures", action="store_true", help=NO_FIGURES_HELP)
    parser.set_defaults(handler=run_demo)


def run_demo(args: argparse.Namespace) -> int:
    from nutricap.example import write_example_landscape
    from nutricap.inputs.project import load_project
    from nutricap.report.output_folder import check_output_folder, staged_folder
    from nutricap.workflow import run_compare, run_estimate

    browser = pdf_browser(args)
    progress = StepPrinter(args.quiet)
    overwrite = args.overwrite
    out = check_output_folder(args.out, [], overwrite=overwrite, parts=DEMO_PARTS)
    inputs, results, raster_results = (out / part for part in DEMO_PARTS)
    progress(f"writing the invented example landscape to {inputs}")
    with staged_folder(inputs, overwrite=overwrite) as staging:
        write_example_landscape(staging)
    project_file = inputs / "project.toml"
    project = load_project(project_file)
    options = {"pdf_browser": browser, "figure_files": not args.no_figures}
    result = run_estimate(project, results, overwrite=overwrite, progress=progress, **options)
    print_summary(result, results, caution=False, quiet=args.quiet)
    progress(
        "the same landscape on a 50 m grid with snow, slope and minimum-density rules, "
        f"with the scenario {DEMO_GRID_SCENARIO!r} burnt on the grid"
    )
    raster_project = load_project(project_file.with_name("project_rasters.toml"))
    on_grid, table = run_compare(
        raster_project,
        DEMO_GRID_SCENARIO,
        raster_results,
        overwrite=overwrite,
        progress=progress,
        **options,
    )
    if args.quiet:
        return EXIT_OK
    ncc, ecc = on_grid.by_unit["ncc_animals"].sum(), on_grid.by_unit["ecc_animals"].sum()
    last = table[table["year"] == table["year"].max()]
    say(
        f"On the 50 m grid with snow burial, slope and minimum-density rules "
        f"(project_rasters.toml): total NCC {ncc:,.0f} animals; ECC {ecc:,.0f}; with the "
        f"scenario {DEMO_GRID_SCENARIO!r} in {int(last['year'].iloc[0])}: NCC "
        f"{last['ncc_animals_scenario'].sum():,.0f}. "
        f"What each rule removed: {raster_results / 'availability_rules.csv'}; by year: "
        f"{raster_results / 'scenario_by_unit.csv'}; report: {raster_results / 'report.html'}"
    )
    say(f"CAUTION: {CAUTION}")
    return EXIT_OK
