"""What the commands share: the exit code of success, help texts, the subparser and the
output options, and the browser that prints ``--pdf``."""

from __future__ import annotations

import argparse
from pathlib import Path

from nutricap.cautions import CAUTION
from nutricap.errors import InputError

EXIT_OK = 0
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
EPILOG = f"CAUTION: {CAUTION}"


def subparser(commands, name: str, summary: str) -> argparse.ArgumentParser:
    """The parser of command ``name``, ``summary`` its help and description."""
    return commands.add_parser(
        name,
        help=summary,
        description=summary,
        epilog=EPILOG,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )


def add_output_options(parser: argparse.ArgumentParser) -> None:
    """The options of a command that writes an output folder (``estimate``, ``compare``)."""
    parser.add_argument(
        "--out", type=Path, required=True, help="output folder (not an input folder)"
    )
    parser.add_argument("--overwrite", action="store_true", help=OVERWRITE_HELP)
    parser.add_argument("--no-report", action="store_true", help="skip report.html")
    parser.add_argument("--pdf", action="store_true", help=PDF_HELP)
    parser.add_argument("--no-figures", action="store_true", help=NO_FIGURES_HELP)
    parser.add_argument("--quiet", action="store_true", help=QUIET_HELP)


def pdf_browser(args: argparse.Namespace):
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
