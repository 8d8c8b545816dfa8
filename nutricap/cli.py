"""Command line: ``nutricap demo | init | estimate | compare | check | trend``.

A thin layer over :mod:`nutricap.workflow`. A user's mistake
(:class:`~nutricap.errors.InputError`) is printed as one message and exits
with code 2; no traceback.
"""

from __future__ import annotations

import argparse
import gc
import sys
import textwrap
import time
import warnings
from collections.abc import Sequence
from pathlib import Path

from nutricap import __version__
from nutricap.cautions import CAUTION
from nutricap.errors import InputError, printable

EXIT_OK = 0
EXIT_BAD_INPUT = 2
EXIT_INTERRUPTED = 130  # 128 + SIGINT, the shell's convention
DEMO_PARTS = ("example_landscape", "results", "results_rasters")
"""What ``demo`` writes into its folder (each part staged, with its list of outputs)."""
DEMO_GRID_SCENARIO = "juniper_thinning"
"""The scenario the demo's raster run compares (``compare`` on project_rasters.toml)."""
OVERWRITE_HELP = (
    "replace an existing output folder, only if it holds nothing but an earlier run's "
    "outputs, unchanged (files added or changed since are never deleted: the run is refused)"
)

QUIET_HELP = "print nothing but errors (no progress, no summary, no warnings)"
NO_FIGURES_HELP = (
    "do not write the report's figures as files (by default each is also written as PNG at "
    "300 dpi and SVG into figures/ beside report.html, for placing in a document)"
)
PDF_HELP = (
    "also write report.pdf, the report printed by headless Chromium or Chrome (found on the "
    "PATH, or named by $NUTRICAP_BROWSER)"
)
DESCRIPTION = (
    "Nutritional carrying capacity (NCC) of ungulate range per management unit, beside the "
    "forage-quantity ceiling (ECC) and the capacity at allowable use."
)
EPILOG = f"CAUTION: {CAUTION}"
SHOWN_UNITS = 20
"""Units (the largest by NCC) and flags printed at most; the tables hold every unit."""


class StepPrinter:
    """Prints numbered steps with elapsed seconds to stderr (the progress of a run)."""

    def __init__(self, quiet: bool = False) -> None:
        self.quiet = quiet
        self.start = time.perf_counter()
        self.count = 0

    def __call__(self, message: str) -> None:
        self.count += 1
        if not self.quiet:
            elapsed = time.perf_counter() - self.start
            line = f"[{self.count}] {elapsed:6.1f} s  {printable(message)}"
            print(line, file=sys.stderr, flush=True)


def build_parser() -> argparse.ArgumentParser:
    """The argument parser with every subcommand."""
    parser = argparse.ArgumentParser(
        prog="nutricap",
        description=DESCRIPTION,
        epilog=EPILOG,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    parser.add_argument("--version", action="version", version=f"nutricap {__version__}")
    commands = parser.add_subparsers(dest="command", required=True, metavar="COMMAND")
    _add_demo(commands)
    _add_init(commands)
    _add_estimate(commands)
    _add_compare(commands)
    _add_check(commands)
    _add_trend(commands)
    return parser


def _subparser(commands, name: str, summary: str) -> argparse.ArgumentParser:
    return commands.add_parser(
        name,
        help=summary,
        description=summary,
        epilog=EPILOG,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )


def _add_demo(commands) -> None:
    parser = _subparser(
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


def _add_init(commands) -> None:
    parser = _subparser(
        commands,
        "init",
        "Write a template project to fill in: a commented project file, the tables with their "
        "headers and an example row, and a README.",
    )
    parser.add_argument("folder", type=Path, help="a new or empty folder")
    parser.set_defaults(handler=run_init)


def run_init(args: argparse.Namespace) -> int:
    """Write the template project into ``args.folder``; return 0."""
    from nutricap.inputs.template import PROJECT_FILE, README, write_template

    written = write_template(args.folder)
    say(f"Template project written to {args.folder}: " + ", ".join(p.name for p in written))
    say(f"Next: fill in the tables and {PROJECT_FILE}, add your units and strata layers")
    say(f"({args.folder / README} says how), then run: nutricap check {args.folder / PROJECT_FILE}")
    return EXIT_OK


def _add_estimate(commands) -> None:
    parser = _subparser(commands, "estimate", "Estimate capacity per unit for a project file.")
    parser.add_argument("project", type=Path, help="project file (TOML)")
    _add_output_options(parser)
    parser.set_defaults(handler=run_estimate_command)


def _add_compare(commands) -> None:
    parser = _subparser(
        commands, "compare", "Compare a treatment scenario with the baseline over its years."
    )
    parser.add_argument("project", type=Path, help="project file (TOML)")
    parser.add_argument(
        "--scenario",
        required=True,
        action="append",
        help="name of a [scenarios.NAME] section; repeat to compare several in one report",
    )
    _add_output_options(parser)
    parser.set_defaults(handler=run_compare_command)


def _add_output_options(parser: argparse.ArgumentParser) -> None:
    parser.add_argument(
        "--out", type=Path, required=True, help="output folder (not an input folder)"
    )
    parser.add_argument("--overwrite", action="store_true", help=OVERWRITE_HELP)
    parser.add_argument("--no-report", action="store_true", help="skip report.html")
    parser.add_argument("--pdf", action="store_true", help=PDF_HELP)
    parser.add_argument("--no-figures", action="store_true", help=NO_FIGURES_HELP)
    parser.add_argument("--quiet", action="store_true", help=QUIET_HELP)


def _add_check(commands) -> None:
    parser = _subparser(commands, "check", "Validate a project and its inputs; write nothing.")
    parser.add_argument("project", type=Path, help="project file (TOML)")
    parser.add_argument("--quiet", action="store_true", help=QUIET_HELP)
    parser.set_defaults(handler=run_check)


def _add_trend(commands) -> None:
    parser = _subparser(
        commands, "trend", "Population trend (λ, r, logistic K, MSY) from yearly counts."
    )
    add_trend_arguments(parser)
    parser.set_defaults(handler=run_trend)


def add_trend_arguments(parser: argparse.ArgumentParser) -> None:
    """Add the ``trend`` command's arguments to ``parser``."""
    from nutricap.inputs.counts import ROW_CONVENTION
    from nutricap.report.trend_text import JSON_NAME, TREND_CAUTIONS

    parser.add_argument(
        "counts", type=Path, help="counts CSV with columns year, count (optional unit_id, removals)"
    )
    parser.add_argument(
        "--unit", metavar="ID", help="analyse this unit only (default: each unit and their total)"
    )
    parser.add_argument(
        "--project",
        metavar="PROJECT.toml",
        type=Path,
        help="set the figures beside the NCC and ECC estimated for this project",
    )
    parser.add_argument("--json", action="store_true", help="print one JSON object, not text")
    parser.add_argument(
        "--out",
        metavar="DIR",
        type=Path,
        help=f"also write {JSON_NAME} into DIR (never an input folder)",
    )
    parser.add_argument(
        "--level", type=float, default=0.95, help="confidence level of the intervals (default 0.95)"
    )
    shown = parser.epilog or ""
    notes = [ROW_CONVENTION[0].upper() + ROW_CONVENTION[1:] + "."]
    notes += [caution for caution in TREND_CAUTIONS if caution not in shown]
    text = "\n".join(
        textwrap.fill(note, 88, initial_indent="- ", subsequent_indent="  ") for note in notes
    )
    parser.epilog = f"{shown}\n\n{text}" if shown else text


def run_trend(args: argparse.Namespace) -> int:
    """Run the ``trend`` command; return 0, raise :class:`InputError` on bad input."""
    from nutricap.inputs.counts import read_counts, select_series
    from nutricap.model.trend import add_capacity, analyse_series, capacity_table
    from nutricap.report.output_folder import record_output
    from nutricap.report.trend_text import (
        JSON_NAME,
        build_payload,
        format_text,
        json_text,
        write_atomically,
    )

    if not 0.0 < args.level < 1.0:
        raise InputError(
            "confidence level out of range",
            source="--level",
            expected="a number between 0 and 1, e.g. 0.95",
            found=repr(args.level),
        )
    counts_path = Path(args.counts)
    table = read_counts(counts_path)
    series = select_series(table, counts_path, args.unit)
    project = _load_project(args.project) if args.project is not None else None
    out = _check_trend_out(args.out, counts_path, project)
    result = {label: analyse_series(frame, args.level) for label, frame in series.items()}
    if project is not None:
        add_capacity(result, capacity_table(_estimate(project).by_unit), project.path)
    payload = build_payload(result, counts_path, args.level)
    text = json_text(payload)
    if out is not None:
        write_atomically(out / JSON_NAME, text + "\n")
        record_output(out, JSON_NAME)
    if args.json:  # JSON escapes what is unprintable as \\uXXXX; the newlines are its layout
        print("\n".join(printable(line, json_escapes=True) for line in text.split("\n")))
    else:
        print("\n".join(printable(line) for line in format_text(payload).split("\n")))
    return 0


def _load_project(path: Path):
    from nutricap.inputs.project import load_project

    return load_project(path)


def _estimate(project):
    from nutricap.workflow import estimate

    return estimate(project)


def _check_trend_out(out: Path | None, counts_path: Path, project) -> Path | None:
    from nutricap.report.output_folder import check_output_folder

    if out is None:
        return None
    inputs = [counts_path]
    if project is not None:
        inputs += [project.path, *project.input_paths().values()]
    return check_output_folder(out, inputs, overwrite=True, whole=False)


def run_estimate_command(args: argparse.Namespace) -> int:
    from nutricap.inputs.project import load_project
    from nutricap.report.manifest import BackgroundChecksums

    browser = _pdf_browser(args)
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
    _print_summary(result, args.out, quiet=args.quiet)
    return EXIT_OK


def run_compare_command(args: argparse.Namespace) -> int:
    from nutricap.inputs.project import load_project
    from nutricap.report.manifest import BackgroundChecksums

    browser = _pdf_browser(args)
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


def _pdf_browser(args: argparse.Namespace):
    """The browser that prints ``--pdf`` (looked for before any work), or None without it.

    ``--pdf`` comes with the report: beside ``--no-report`` it is refused (without the report
    there are no figure files either).
    """
    if getattr(args, "pdf", False) and getattr(args, "no_report", False):
        raise InputError(
            "needs the HTML report, which --no-report leaves out",
            source="--pdf",
            expected="--pdf or --no-report, not both",
        )
    if not getattr(args, "pdf", False):
        return None
    from nutricap.report.pdf import find_browser

    return find_browser()


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


def run_demo(args: argparse.Namespace) -> int:
    from nutricap.example import write_example_landscape
    from nutricap.inputs.project import load_project
    from nutricap.report.output_folder import check_output_folder, staged_folder
    from nutricap.workflow import run_compare, run_estimate

    browser = _pdf_browser(args)
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
    _print_summary(result, results, caution=False, quiet=args.quiet)
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


def say(text: str) -> None:
    """Print ``text`` on one line of stdout, every unprintable character (newlines too) escaped."""
    print(printable(text))


def _print_summary(result, out: Path, *, caution: bool = True, quiet: bool = False) -> None:
    """The largest units (at most :data:`SHOWN_UNITS`), the totals and where the tables are."""
    if quiet:
        return
    table = result.by_unit
    table_path = Path(out) / "capacity_by_unit.csv"
    columns = ["unit_id", "ncc_animals", "ecc_animals", "allowable_use_animals", "limiting_factor"]
    shown = table[columns]
    heading = f"Capacity by unit ({result.season_days:g}-day season)"
    if len(table) > SHOWN_UNITS:
        shown = shown.sort_values("ncc_animals", ascending=False, kind="stable")[:SHOWN_UNITS]
        heading += f", the {SHOWN_UNITS} largest of {len(table)} units by NCC"
    say(heading + ":")
    shown = shown.assign(unit_id=shown["unit_id"].map(printable))
    for line in shown.to_string(index=False, float_format=lambda v: f"{v:,.0f}").split("\n"):
        say(line)
    if len(table) > SHOWN_UNITS:
        say(f"... and {len(table) - SHOWN_UNITS} more units in the table")
    ncc, ecc = table["ncc_animals"].sum(), table["ecc_animals"].sum()
    say(f"Total NCC {ncc:,.0f} animals; ECC {ecc:,.0f}.")
    say(f"Table of every unit: {table_path}")
    _print_flags(table)
    for note in result.notes:
        say(f"note: {note}")
    report = Path(out) / "report.html"
    if report.exists():
        say(f"Report: {report}")
    if caution:
        say(f"CAUTION: {CAUTION}")


def _print_flags(table) -> None:
    """One line per unit whose current numbers exceed NCC or over-use a key forage class."""
    if "current_animals" not in table.columns:
        return
    flagged = table[table["overuse"] | table["above_ncc"]]
    for row in flagged[:SHOWN_UNITS].itertuples():
        reasons = []
        if row.above_ncc:
            reasons.append(f"{row.current_animals:,.0f} animals > NCC {row.ncc_animals:,.0f}")
        if row.overuse:
            reasons.append(
                f"{row.key_class} used {row.key_use_fraction:.0%} > allowable "
                f"{row.key_allowable_use:.0%}"
            )
        say(f"flag: unit {row.unit_id}: " + "; ".join(reasons) + " (advisory)")
    if len(flagged) > SHOWN_UNITS:
        say(
            f"flag: {len(flagged) - SHOWN_UNITS} more units flagged "
            "(columns above_ncc and overuse of the table)"
        )


def main(argv: Sequence[str] | None = None, *, quiet_warnings: bool = False) -> int:
    """Entry point; returns the exit code.

    ``quiet_warnings``: with ``--quiet``, Python warnings are not shown either (unless asked
    for with ``-W`` or ``PYTHONWARNINGS``); the console command sets it. Left off, warnings
    reach the caller (the tests assert there are none).
    """
    parser = build_parser()
    args = parser.parse_args(argv)
    if quiet_warnings and getattr(args, "quiet", False) and not sys.warnoptions:
        warnings.simplefilter("ignore")
    try:
        return args.handler(args)
    except InputError as exc:
        print(f"nutricap: error: {exc.formatted()}", file=sys.stderr)
        return EXIT_BAD_INPUT
    except BrokenPipeError:
        # The reader (e.g. `| head`) closed the pipe: stop quietly, as Unix tools do.
        sys.stderr.close()
        return EXIT_OK
    except OSError as exc:
        # The file system refused (permission denied, disk full, ...): the path and the reason.
        where = f"{exc.filename}: " if exc.filename else ""
        print(f"nutricap: error: {printable(f'{where}{exc.strerror or exc}')}", file=sys.stderr)
        return EXIT_BAD_INPUT
    except KeyboardInterrupt:
        print("nutricap: interrupted; earlier results were left as they were", file=sys.stderr)
        return EXIT_INTERRUPTED


def run_and_exit() -> None:
    """The ``nutricap`` command: :func:`main`, then exit with its code.

    The process ends here, so Python's last garbage collection over every object of the
    libraries loaded (about a quarter of a second) is skipped with :func:`gc.freeze`; files
    are closed and temporary files removed before (context managers, ``atexit`` finalizers).
    """
    code = main(quiet_warnings=True)
    gc.freeze()
    sys.exit(code)


if __name__ == "__main__":
    run_and_exit()
