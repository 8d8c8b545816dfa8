"""The ``init`` command: a template project to fill in."""

from __future__ import annotations

import argparse
from pathlib import Path

from nutricap.cli.console import say
from nutricap.cli.options import EXIT_OK, subparser


def add_init(commands) -> None:
    """The ``init`` command and its argument."""
    parser = subparser(
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
