"""The ``trend`` command: population trend from yearly counts, beside NCC and ECC of a project
when one is named."""

from __future__ import annotations

import argparse
import textwrap
from pathlib import Path

from nutricap.cli.options import subparser
from nutricap.errors import InputError, printable


def add_trend(commands) -> None:
    """The ``trend`` command and its arguments."""
    parser = subparser(
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
