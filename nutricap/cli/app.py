"""The argument parser with every subcommand, :func:`main` and the console command.

A user's mistake (:class:`~nutricap.errors.InputError`) is printed as one message and exits
with code 2; no traceback.
"""

from __future__ import annotations

import argparse
import gc
import sys
import warnings
from collections.abc import Sequence
from typing import NoReturn

from nutricap import __version__
from nutricap.cli.commands import add_check, add_compare, add_estimate
from nutricap.cli.demo import add_demo
from nutricap.cli.options import EPILOG, EXIT_OK
from nutricap.cli.template import add_init
from nutricap.cli.trend import add_trend
from nutricap.errors import InputError, printable

EXIT_BAD_INPUT = 2
EXIT_INTERRUPTED = 130  # 128 + SIGINT, the shell's convention
DESCRIPTION = (
    "Nutritional carrying capacity (NCC) of ungulate range per management unit, beside the "
    "forage-quantity ceiling (ECC) and the capacity at allowable use."
)


class OneLineParser(argparse.ArgumentParser):
    """An argument parser whose mistakes are one line, as every other error of the command
    (argparse prints its usage lines first); the subcommands' parsers are of this class."""

    def error(self, message: str) -> NoReturn:
        self.exit(EXIT_BAD_INPUT, f"{self.prog}: error: {message} (see {self.prog} --help)\n")


def build_parser() -> argparse.ArgumentParser:
    """The argument parser with every subcommand."""
    parser = OneLineParser(
        prog="nutricap",
        description=DESCRIPTION,
        epilog=EPILOG,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    parser.add_argument("--version", action="version", version=f"nutricap {__version__}")
    commands = parser.add_subparsers(dest="command", required=True, metavar="COMMAND")
    add_demo(commands)
    add_init(commands)
    add_estimate(commands)
    add_compare(commands)
    add_check(commands)
    add_trend(commands)
    return parser


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
