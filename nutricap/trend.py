"""The ``trend`` command: population trend from yearly counts, beside NCC and ECC.

Reads a counts table (``year, count``; optional ``unit_id`` and ``removals``),
validates it, calls :mod:`nutricap.science.population` for every series (each
unit and their total, or the one unit chosen) and prints the figures as text or
JSON. With ``--project`` the area's NCC and ECC from the forage estimate are set
beside the latest count and the fitted K.

Rows in messages are spreadsheet rows: the header is row 1, the first data row
is row 2.
"""

from __future__ import annotations

import argparse
import json
import math
import os
import textwrap
from pathlib import Path

import numpy as np
import pandas as pd

from nutricap.cautions import CAUTION
from nutricap.errors import InputError, TableError, printable
from nutricap.manifest import package_versions, sha256_of_file
from nutricap.outputs import check_output_folder, record_output
from nutricap.science import population
from nutricap.tables import Column, read_csv_table, spreadsheet_row

COUNT_COLUMNS = [
    Column("unit_id", "text", required=False, meaning="management unit the count belongs to"),
    Column("year", meaning="calendar year of the count, a whole number such as 2019"),
    Column("count", above=0, meaning="animals counted (or a count index) that year, > 0"),
    Column(
        "removals",
        required=False,
        minimum=0,
        meaning="animals removed after that year's count and before the next; 0 when none",
    ),
]

TREND_CAUTIONS = (
    "Counts are usually indices: animals missed (detection below 1) and counting error make "
    "every figure here approximate, and a change in survey method breaks the series.",
    "A logistic fit on a short or unmanipulated series is weak evidence of K: count error "
    "alone can make growth appear to slow with density.",
    "Removals (harvest, culls, translocations) must be entered if known; without them the "
    "fit mistakes removals for density dependence and K and r_max are biased.",
    CAUTION,
)

JSON_NAME = "trend.json"
TOTAL_LABEL = "total"
ROW_CONVENTION = "rows are spreadsheet rows: the header is row 1, the first data row is row 2"


def add_arguments(parser: argparse.ArgumentParser) -> None:
    """Add the ``trend`` command's arguments to ``parser``."""
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


def run(args: argparse.Namespace) -> int:
    """Run the ``trend`` command; return 0, raise :class:`InputError` on bad input."""
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
    out = _check_out(args.out, counts_path, project)
    result = {label: analyse_series(frame, args.level) for label, frame in series.items()}
    if project is not None:
        _add_capacity(result, _capacity_table(project), project.path)
    payload = build_payload(result, counts_path, args.level)
    text = json.dumps(payload, indent=2, ensure_ascii=False, allow_nan=False)
    if out is not None:
        _write_atomically(out / JSON_NAME, text + "\n")
        record_output(out, JSON_NAME)
    if args.json:  # JSON escapes what is unprintable as \\uXXXX; the newlines are its layout
        print("\n".join(printable(line, json_escapes=True) for line in text.split("\n")))
    else:
        print("\n".join(printable(line) for line in format_text(payload).split("\n")))
    return 0


# --- reading -------------------------------------------------------------------------


def read_counts(path: Path) -> pd.DataFrame:
    """Read and validate the counts table.

    Returns
    -------
    pandas.DataFrame
        Columns ``unit_id`` (text, "" when the file has none), ``year`` (int), ``count``
        [animals], ``removals`` [animals] (NaN when the file has none) and ``row`` (the
        spreadsheet row), in file order.
    """
    table = read_csv_table(path, COUNT_COLUMNS, what="counts table")
    if table.empty:
        raise TableError(
            "counts table has no data rows",
            source=path,
            expected="one row per year counted",
            found="only a header",
        )
    table["row"] = [spreadsheet_row(index) for index in range(len(table))]
    _check_whole_years(table, path)
    if "unit_id" not in table.columns:
        table["unit_id"] = ""
    if "removals" not in table.columns:
        table["removals"] = np.nan
    _check_one_count_per_year(table, path)
    return table


def _check_whole_years(table: pd.DataFrame, path: Path) -> None:
    years = table["year"].to_numpy()
    fractional = years != np.round(years)
    if fractional.any():
        index = int(np.flatnonzero(fractional)[0])
        raise TableError(
            "year is not a whole number",
            source=path,
            location=f"row {table['row'].iloc[index]}, column 'year'",
            expected="a calendar year such as 2019",
            found=repr(float(years[index])),
        )
    table["year"] = years.astype(int)


def _check_one_count_per_year(table: pd.DataFrame, path: Path) -> None:
    repeated = table.duplicated(["unit_id", "year"], keep="first").to_numpy()
    if repeated.any():
        second = table.iloc[int(np.flatnonzero(repeated)[0])]
        same = table[(table["unit_id"] == second["unit_id"]) & (table["year"] == second["year"])]
        unit = f" for unit {second['unit_id']!r}" if second["unit_id"] else ""
        raise TableError(
            f"year {int(second['year'])} appears twice{unit}",
            source=path,
            location=f"rows {int(same['row'].iloc[0])} and {int(second['row'])}, column 'year'",
            expected="one count per unit and year",
            found="two rows",
        )


def select_series(table: pd.DataFrame, path: Path, unit: str | None) -> dict[str, pd.DataFrame]:
    """Split the table into the series to analyse: one unit, or each unit and their total.

    The total sums counts (and removals) over units in the years in which every unit was
    counted; other years are left out of the total.
    """
    if (table["unit_id"] == "").all():
        return {unit or TOTAL_LABEL: _checked_length(table, path, "the file")}
    units = list(dict.fromkeys(table["unit_id"]))
    if TOTAL_LABEL in units and len(units) > 1:
        raise TableError(
            f"unit id {TOTAL_LABEL!r} is kept for the sum over units",
            source=path,
            location="column 'unit_id'",
            expected="another unit id",
            found=repr(TOTAL_LABEL),
        )
    if unit is not None:
        if unit not in units:
            raise TableError(
                f"unit {unit!r} is not in the counts table",
                source=path,
                location="column 'unit_id'",
                expected="one of " + ", ".join(units),
                found=repr(unit),
            )
        units = [unit]
    series = {
        name: _checked_length(table[table["unit_id"] == name], path, f"unit {name!r}")
        for name in units
    }
    if len(series) > 1:
        series[TOTAL_LABEL] = _checked_length(
            _total(table), path, "the total over units (years in which every unit was counted)"
        )
    return series


def _total(table: pd.DataFrame) -> pd.DataFrame:
    n_units = table["unit_id"].nunique()
    grouped = table.groupby("year").agg(
        count=("count", "sum"),
        removals=("removals", "sum"),
        units=("unit_id", "nunique"),
        row=("row", "min"),
    )
    complete = grouped[grouped["units"] == n_units].reset_index()
    complete["unit_id"] = TOTAL_LABEL
    if table["removals"].isna().all():
        complete["removals"] = np.nan
    return complete


def _checked_length(frame: pd.DataFrame, path: Path, what: str) -> pd.DataFrame:
    frame = frame.sort_values("year", kind="stable")
    if len(frame) < population.MIN_COUNTS_TREND:
        years = ", ".join(str(year) for year in frame["year"]) or "none"
        raise TableError(
            f"too few counts for a trend in {what}",
            source=path,
            location="column 'count'",
            expected=f"at least {population.MIN_COUNTS_TREND} yearly counts "
            f"({population.MIN_COUNTS_LOGISTIC} for the logistic fit)",
            found=f"{len(frame)} (years {years})",
        )
    return frame.reset_index(drop=True)


# --- science -------------------------------------------------------------------------


def analyse_series(frame: pd.DataFrame, level: float) -> dict:
    """Every trend figure of one series, as a JSON-ready dictionary."""
    years = frame["year"].to_numpy(dtype=float)
    counts = frame["count"].to_numpy(dtype=float)
    removals = frame["removals"].to_numpy(dtype=float)
    has_removals = not np.isnan(removals).all()
    lam = population.finite_rate_of_increase(years, counts)
    growth = population.mean_growth_rate(years, counts, level=level)
    figures = {
        "years": frame["year"].tolist(),
        "counts": counts.tolist(),
        "removals": removals.tolist() if has_removals else None,
        "latest_year": int(years[-1]),
        "latest_count": float(counts[-1]),
        "intervals": [
            {
                "from_year": int(a),
                "to_year": int(b),
                "lambda_per_year": float(x),
                "r_per_year": float(r),
            }
            for a, b, x, r in zip(
                years[:-1], years[1:], lam, population.exponential_rate(lam), strict=True
            )
        ],
        "r_mean": growth.r_mean,
        "r_ci": list(growth.r_ci),
        "lambda_mean": growth.lambda_mean,
        "lambda_ci": list(growth.lambda_ci),
    }
    figures.update(_logistic_figures(years, counts, removals if has_removals else None, level))
    return figures


def _logistic_figures(years, counts, removals, level) -> dict:
    if counts.size < population.MIN_COUNTS_LOGISTIC:
        reason = (
            f"logistic not fitted: at least {population.MIN_COUNTS_LOGISTIC} counts are "
            f"needed, found {counts.size}"
        )
        return {
            "K": None,
            "K_ci": None,
            "r_max": None,
            "r_max_ci": None,
            "ceiling_evidence": False,
            "ceiling_reason": reason,
            "logistic_method": None,
            "msy_level": None,
            "msy_yield": None,
            "phase": None,
        }
    fit = population.fit_logistic(years, counts, removals=removals, level=level)
    ceiling = fit.K is not None
    return {
        "K": fit.K,
        "K_ci": list(fit.K_ci) if ceiling else None,
        "r_max": fit.r_max,
        "r_max_ci": list(fit.r_max_ci) if fit.r_max_ci is not None else None,
        "ceiling_evidence": fit.ceiling_evidence,
        "ceiling_reason": fit.reason,
        "logistic_method": fit.method,
        "residual_sd_log": fit.residual_sd_log,
        "msy_level": float(population.msy_level(fit.K)) if ceiling else None,
        "msy_yield": float(population.msy_yield(fit.r_max, fit.K)) if ceiling else None,
        "phase": population.population_phase(counts[-1], fit.K) if ceiling else None,
    }


# --- capacity beside the counts --------------------------------------------------------


def _load_project(path: Path):
    from nutricap.project import load_project

    return load_project(path)


def _capacity_table(project) -> pd.DataFrame:
    from nutricap.workflow import estimate

    table = estimate(project).by_unit
    capacity = table[["unit_id", "ncc_animals", "ecc_animals"]].copy()
    capacity["unit_id"] = capacity["unit_id"].astype(str)
    return capacity.set_index("unit_id")


def _add_capacity(result: dict, capacity: pd.DataFrame, source: Path) -> None:
    """Put NCC and ECC of each series' units beside its latest count and K.

    A unit's series is compared with that unit; the total with the counted units, or with
    every unit of the project when the counts have no ``unit_id`` and no ``--unit``.
    """
    counted_units = [label for label in result if label != TOTAL_LABEL]
    for label, figures in result.items():
        units = (counted_units or list(capacity.index)) if label == TOTAL_LABEL else [label]
        figures["capacity"] = capacity_comparison(figures, _rows(capacity, units, source), units)


def _rows(capacity: pd.DataFrame, units: list[str], source: Path) -> pd.DataFrame:
    missing = [name for name in units if name not in capacity.index]
    if missing:
        raise InputError(
            f"unit {missing[0]!r} of the counts is not in the capacity estimate",
            source=source,
            location="units layer, column 'unit_id'",
            expected="one of " + ", ".join(capacity.index),
            found=repr(missing[0]),
        )
    return capacity.loc[units]


def capacity_comparison(figures: dict, rows: pd.DataFrame, units: list[str]) -> dict:
    """Latest count and K against NCC and ECC summed over ``rows`` [animals]."""
    ncc = float(rows["ncc_animals"].sum())
    ecc = float(rows["ecc_animals"].sum())
    latest = figures["latest_count"]
    comparison = {
        "units": units,
        "ncc_animals": ncc,
        "ecc_animals": ecc,
        "latest_minus_ncc": latest - ncc,
        "latest_minus_ecc": latest - ecc,
        "K_minus_ecc": figures["K"] - ecc if figures["K"] is not None else None,
    }
    comparison["statement"] = (
        f"latest count {_animals(latest)} ({figures['latest_year']}) is "
        f"{_above_below(latest - ncc)} NCC ({_animals(ncc)}) and "
        f"{_above_below(latest - ecc)} ECC ({_animals(ecc)})"
    )
    return comparison


def _above_below(difference: float) -> str:
    if round(difference) == 0:
        return "equal to"
    return f"{_animals(abs(difference))} {'above' if difference > 0 else 'below'}"


# --- output --------------------------------------------------------------------------


def build_payload(result: dict, counts_path: Path, level: float) -> dict:
    """The JSON object: the main series' figures at the top, each unit under ``units``."""
    main = TOTAL_LABEL if TOTAL_LABEL in result and len(result) > 1 else next(iter(result))
    payload = {"series": main, **result[main]}
    if len(result) > 1:
        payload["units"] = {
            label: figures for label, figures in result.items() if label != TOTAL_LABEL
        }
    payload.update(
        {
            "level": level,
            "counts_file": str(counts_path),
            "counts_sha256": sha256_of_file(counts_path),
            "versions": package_versions(),
            "cautions": list(TREND_CAUTIONS),
        }
    )
    return _json_ready(payload)


def _json_ready(value):
    if isinstance(value, dict):
        return {key: _json_ready(item) for key, item in value.items()}
    if isinstance(value, list | tuple):
        return [_json_ready(item) for item in value]
    if isinstance(value, np.generic):
        value = value.item()
    if isinstance(value, float) and not math.isfinite(value):
        return None
    return value


def _write_atomically(target: Path, text: str) -> None:
    """Write ``text`` to a temporary file beside ``target``, then move it into place."""
    target.parent.mkdir(parents=True, exist_ok=True)
    temporary = target.with_name(f".{target.name}.{os.getpid()}-{os.urandom(4).hex()}.partial")
    flags = os.O_WRONLY | os.O_CREAT | os.O_EXCL
    handle = os.open(temporary, flags, 0o666)  # the user's umask applies (mkstemp: 0600)
    try:
        with os.fdopen(handle, "w", encoding="utf-8") as stream:
            stream.write(text)
        os.replace(temporary, target)
    except BaseException:
        Path(temporary).unlink(missing_ok=True)
        raise


def _check_out(out: Path | None, counts_path: Path, project) -> Path | None:
    if out is None:
        return None
    inputs = [counts_path]
    if project is not None:
        inputs += [project.path, *project.input_paths().values()]
    return check_output_folder(out, inputs, overwrite=True, whole=False)


def format_text(payload: dict) -> str:
    """The readable report of :func:`build_payload`'s object."""
    lines = [f"Population trend from {payload['counts_file']} ({ROW_CONVENTION})", ""]
    lines += _series_lines(payload["series"], payload, payload["level"])
    for label, figures in payload.get("units", {}).items():
        lines += [""] + _series_lines(f"unit {label}", figures, payload["level"])
    lines += ["", "Cautions:"] + [f"- {caution}" for caution in payload["cautions"]]
    return "\n".join(lines)


def _series_lines(label: str, f: dict, level: float) -> list[str]:
    pct = f"{100 * level:g}%"
    lines = [
        f"Series: {label}, {f['years'][0]}–{f['latest_year']}, {len(f['years'])} counts; "
        f"latest count {_animals(f['latest_count'])} ({f['latest_year']})",
        "  interval     λ per year   r per year",
    ]
    lines += [
        f"  {i['from_year']}–{i['to_year']}    {i['lambda_per_year']:8.3f}   "
        f"{i['r_per_year']:+9.3f}"
        for i in f["intervals"]
    ]
    lines.append(
        f"  mean r = {f['r_mean']:+.3f} per year ({pct} interval {f['r_ci'][0]:+.3f} to "
        f"{f['r_ci'][1]:+.3f}); λ = {f['lambda_mean']:.3f} ({f['lambda_ci'][0]:.3f} to "
        f"{f['lambda_ci'][1]:.3f})"
    )
    lines += _logistic_lines(f, pct)
    if "capacity" in f:
        lines += _capacity_lines(f["capacity"])
    return lines


def _logistic_lines(f: dict, pct: str) -> list[str]:
    if f["r_max"] is None:
        return [f"  logistic: {f['ceiling_reason']}"]
    r_ci = (
        f" ({f['r_max_ci'][0]:.3f} to {f['r_max_ci'][1]:.3f})" if f["r_max_ci"] is not None else ""
    )
    if f["K"] is None:
        return [
            f"  logistic: K = none; {f['ceiling_reason']}",
            f"  r_max = {f['r_max']:.3f} per year{r_ci} (growth at the densities seen); "
            "K/2 and the sustained yield are not given without a ceiling",
        ]
    return [
        f"  logistic: K = {_animals(f['K'])} animals ({pct} interval {_animals(f['K_ci'][0])} to "
        f"{_animals(f['K_ci'][1])}); r_max = {f['r_max']:.3f} per year{r_ci}",
        f"  {f['ceiling_reason']}",
        f"  maximum sustained yield: at K/2 = {_animals(f['msy_level'])} animals, "
        f"yield r_max·K/4 = {_animals(f['msy_yield'])} animals per year",
        f"  phase: {f['phase']} (latest count is {100 * f['latest_count'] / f['K']:.0f}% of K)",
    ]


def _capacity_lines(c: dict) -> list[str]:
    lines = [f"  forage capacity of unit(s) {', '.join(c['units'])}: {c['statement']}"]
    if c["K_minus_ecc"] is not None:
        lines.append(f"  K from the counts is {_above_below(c['K_minus_ecc'])} ECC from forage")
    return lines


def _animals(value: float) -> str:
    return f"{value:,.0f}"
