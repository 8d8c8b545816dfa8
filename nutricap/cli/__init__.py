"""Command line: ``nutricap demo | init | estimate | compare | check | trend``.

A thin layer over :mod:`nutricap.workflow`: :mod:`.app` holds the parser, :func:`main` and the
console command, :mod:`.options` what the commands share, :mod:`.console` what they print, and
one module each the commands on a project file (:mod:`.commands`: estimate, compare, check),
:mod:`.demo`, :mod:`.template` (init) and :mod:`.trend`. A user's mistake
(:class:`~nutricap.errors.InputError`) is printed as one message and exits with code 2; no
traceback.
"""

from nutricap.cli.app import build_parser, main, run_and_exit
from nutricap.cli.console import StepPrinter, say
from nutricap.cli.trend import add_trend_arguments, run_trend

__all__ = ["StepPrinter", "add_trend_arguments", "build_parser", "main", "run_and_exit"]
__all__ += ["run_trend", "say"]
