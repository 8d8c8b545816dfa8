"""What the commands print: numbered progress steps on stderr, lines on stdout (escaped), and
the summary of an estimate."""

from __future__ import annotations

import sys
import time
from pathlib import Path

from nutricap.cautions import CAUTION
from nutricap.errors import printable

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


def say(text: str) -> None:
    """Print ``text`` on one line of stdout, every unprintable character (newlines too) escaped."""
    print(printable(text))


def print_summary(result, out: Path, *, caution: bool = True, quiet: bool = False) -> None:
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
    print_flags(table)
    for note in result.notes:
        say(f"note: {note}")
    report = Path(out) / "report.html"
    if report.exists():
        say(f"Report: {report}")
    if caution:
        say(f"CAUTION: {CAUTION}")


def print_flags(table) -> None:
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
