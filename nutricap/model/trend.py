"""Population trend figures of count series, and the latest count and K beside NCC and ECC.

The figures come from :mod:`nutricap.science.population`; this module gathers them for one
series into a JSON-ready dictionary (formatted by :mod:`nutricap.report.trend_text`).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from nutricap.errors import InputError
from nutricap.inputs.counts import TOTAL_LABEL
from nutricap.science import population


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


def capacity_table(by_unit: pd.DataFrame) -> pd.DataFrame:
    """NCC and ECC [animals] of each unit of an estimate's per-unit table, indexed by unit id."""
    capacity = by_unit[["unit_id", "ncc_animals", "ecc_animals"]].copy()
    capacity["unit_id"] = capacity["unit_id"].astype(str)
    return capacity.set_index("unit_id")


def add_capacity(result: dict, capacity: pd.DataFrame, source: Path) -> None:
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
        f"latest count {animals_text(latest)} ({figures['latest_year']}) is "
        f"{above_below(latest - ncc)} NCC ({animals_text(ncc)}) and "
        f"{above_below(latest - ecc)} ECC ({animals_text(ecc)})"
    )
    return comparison


def above_below(difference: float) -> str:
    """``"12 above"``, ``"12 below"`` or ``"equal to"`` for a difference [animals]."""
    if round(difference) == 0:
        return "equal to"
    return f"{animals_text(abs(difference))} {'above' if difference > 0 else 'below'}"


def animals_text(value: float) -> str:
    """A number of animals rounded to a whole one, with thousands separators."""
    return f"{value:,.0f}"
