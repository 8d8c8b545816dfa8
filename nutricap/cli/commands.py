"""The commands on a project file: ``estimate``, ``compare`` (a treatment scenario beside the
baseline) and ``check`` (validate, write nothing)."""

from __future__ import annotations

import argparse
from pathlib import Path

from nutricap.cautions import CAUTION
from nutricap.cli.console import StepPrinter, print_summary, say
from nutricap.cli.options import EXIT_OK, QUIET_HELP, add_output_options, pdf_browser, subparser


def add_estimate(commands) -> None:
    """The ``estimate`` command and its options."""
    parser = subparser(commands, "estimate", "Estimate capacity per unit for a project file.")
    parser.add_argument("project", type=Path, help="project file (TOML)")
    add_output_options(parser)
    parser.set_defaults(handler=run_estimate_command)


def add_compare(commands) -> None:
    """The ``compare`` command and its options."""
    parser = subparser(
        commands, "compare", "Compare a treatment scenario with the baseline over its years."
    )
    parser.add_argument("project", type=Path, help="project file (TOML)")
    parser.add_argument(
        "--scenario",
        required=True,
        action="append",
        help="name of a [scenarios.NAME] section; repeat to compare several in one report",
    )
    add_output_options(parser)
    parser.set_defaults(handler=run_compare_command)


def add_check(commands) -> None:
    """The ``check`` command and its options."""
    parser = subparser(commands, "check", "Validate a project and its inputs; write nothing.")
    parser.add_argument("project", type=Path, help="project file (TOML)")
    parser.add_argument("--quiet", action="store_true", help=QUIET_HELP)
    parser.set_defaults(handler=run_check)


def run_estimate_command(args: argparse.Namespace) -> int:
    from nutricap.inputs.project import load_project
    from nutricap.report.manifest import BackgroundChecksums

    browser = pdf_browser(args)
    progress = StepPrinter(args.quiet)
    project = load_project(args.project)
    checksums = BackgroundChecksums(project.files())  # while the libraries are imported
    from nutricap.workflow import run_estimate

    result = run_estimate(
        project,
        args.out,
        overwrite=args.overwrite,
        report=not args.no_report,
        progress=progress,
        checksums=checksums,
        pdf_browser=browser,
        figure_files=not args.no_figures,
    )
    print_summary(result, args.out, quiet=args.quiet)
    return EXIT_OK


def run_compare_command(args: argparse.Namespace) -> int:
    from nutricap.inputs.project import load_project
    from nutricap.report.manifest import BackgroundChecksums

    browser = pdf_browser(args)
    progress = StepPrinter(args.quiet)
    project = load_project(args.project)
    checksums = BackgroundChecksums(project.files())  # while the libraries are imported
    from nutricap.workflow import run_compare

    result, table = run_compare(
        project,
        args.scenario,
        args.out,
        overwrite=args.overwrite,
        report=not args.no_report,
        progress=progress,
        checksums=checksums,
        pdf_browser=browser,
        figure_files=not args.no_figures,
    )
    if args.quiet:
        return EXIT_OK
    for name, rows in table.groupby("scenario", sort=False):
        totals = rows.groupby("year")[["ncc_animals_baseline", "ncc_animals_scenario"]].sum()
        say(f"Scenario {name!r}: total NCC by year (baseline → scenario)")
        for year, row in totals.iterrows():
            before, after = row["ncc_animals_baseline"], row["ncc_animals_scenario"]
            say(f"  {year}: {before:,.0f} → {after:,.0f}")
    say(f"Table: {Path(args.out) / 'scenario_by_unit.csv'}")
    say(f"CAUTION: {CAUTION}")
    return EXIT_OK


def run_check(args: argparse.Namespace) -> int:
    from nutricap.inputs.project import load_project
    from nutricap.workflow import estimate

    project = load_project(args.project)
    result = estimate(project, StepPrinter(args.quiet))
    if args.quiet:
        return EXIT_OK
    units = len(result.by_unit)
    strata = len(result.supply.strata)
    plots = int(result.supply.n_plots.sum())
    say(f"{project.path}: OK — {units} units, {strata} strata, {plots} plots; nothing written.")
    for note in result.notes:
        say(f"note: {note}")
    return EXIT_OK
