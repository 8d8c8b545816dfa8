"""The report's use-and-overuse section: current numbers against capacity, the key forage
classes' demand as a multiple of their allowable use, flags and advisory reductions.

Formats the per-unit columns :mod:`nutricap.model.use` wrote; computes no capacity.
"""

from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd

from nutricap.report.formatting import (
    UNIT,
    Column,
    is_missing,
    numeric_column,
    table,
)

# --- 6. use and overuse -----------------------------------------------------------------------

USE_COLUMNS = ("current_animals", "overuse", "key_use_fraction")

#: Columns of the use table, shown when present (written by :mod:`nutricap.model.use`).
USE_TABLE_COLUMNS = [
    UNIT,
    numeric_column("current_animals", "Current animals [animals]"),
    numeric_column("ncc_animals", "NCC [animals]"),
    numeric_column("allowable_use_animals", "Allowable-use capacity [animals]"),
    numeric_column("demand_kg", "Season demand of current animals [kg DM]"),
    Column("key_pressure", "Demand on the key forage classes [× their allowable use]"),
    Column("overuse", "Use above allowable"),
    numeric_column(
        "reduction_for_key_use_animals",
        "Fewer animals to bring use to allowable [animals, advisory]",
    ),
    Column("above_ncc", "Numbers above NCC"),
    numeric_column("reduction_for_ncc_animals", "Fewer animals to reach NCC [animals, advisory]"),
]

NO_USE_LEFT = 1e-9
"""Allowable use [fraction of a class's forage] below which none is left for the herd (other
herbivores took it, or rounding left a trace): no ratio is worth writing."""
NONE_LEFT = "none left within allowable use"

WITHIN_INTERVAL = "yes, within the NCC interval"
"""A unit's numbers above NCC but not above the upper end of its bootstrap interval."""

SAME_PRESSURE = 1e-6
"""Relative difference below which key classes' use ÷ allowable use are reported as one."""


def use(by_unit: pd.DataFrame, use_by_class: pd.DataFrame | None = None) -> dict:
    """The use section: demand against the key classes' allowable use, when assessed."""
    if not set(USE_COLUMNS) <= set(by_unit.columns):
        state = "current_only" if "current_animals" in by_unit.columns else "none"
        return {"state": state, "table": None, "flagged": 0, "key_classes": "", "others": False}
    flags = by_unit["overuse"].map(is_flag)
    if "above_ncc" in by_unit.columns:
        flags = flags | by_unit["above_ncc"].map(is_flag)
    frame = by_unit.copy()
    if "above_ncc" in frame.columns and "ncc_animals_hi" in frame.columns:
        within = frame["above_ncc"].map(is_flag) & (
            frame["current_animals"] <= frame["ncc_animals_hi"]
        )
        frame["above_ncc"] = frame["above_ncc"].astype(object).mask(within, WITHIN_INTERVAL)
    pressure, key_classes = key_pressure(frame, use_by_class)
    frame["key_pressure"] = pressure
    return {
        "state": "assessed",
        "table": table(frame, USE_TABLE_COLUMNS, flag=flags),
        "flagged": int(flags.sum()),
        "key_classes": key_classes,
        "others": "other_herbivores_taken_aum" in by_unit.columns,
    }


def key_pressure(by_unit: pd.DataFrame, use_by_class: pd.DataFrame | None) -> tuple[list, str]:
    """Per unit, the key classes' use ÷ allowable use as text ("2.30 ×"); the classes named.

    With equal preference every class is used to the same fraction of its allowable use, so
    the classes are reported together; a unit whose classes differ lists each one.
    """
    if use_by_class is None or "key" not in use_by_class.columns:
        ratio = by_unit["key_use_fraction"] / by_unit["key_allowable_use"]
        named = by_unit["key_class"] if "key_class" in by_unit.columns else pd.Series([], dtype=str)
        names = ", ".join(map(str, named.unique())) or "not named"
        return [_times(value) for value in ratio], names
    watched = use_by_class[use_by_class["key"].map(is_flag)]
    if not (watched["allowable_use"] > 0).any():  # no key class: every class is watched
        watched = use_by_class  # (nutricap.model.use)
    key = watched[watched["allowable_use"] > NO_USE_LEFT]
    key = key.assign(ratio=key["use_fraction"] / key["allowable_use"])
    cells = []
    for unit in by_unit["unit_id"]:
        rows = key[key["unit_id"] == unit]
        ratios = rows["ratio"].to_numpy(dtype=float)
        if ratios.size == 0:
            used_up = (watched["unit_id"] == unit) & (watched["allowable_use"] > 0)
            cells.append(NONE_LEFT if used_up.any() else "–")
        elif np.ptp(ratios) <= SAME_PRESSURE * max(float(ratios.max()), 1e-12):
            cells.append(_times(ratios.max()))
        else:
            cells.append(
                "; ".join(f"{name} {_times(r)}" for name, r in zip(rows["forage_class"], ratios))
            )
    return cells, ", ".join(map(str, dict.fromkeys(key["forage_class"])))


def _times(ratio: float) -> str:
    return "–" if is_missing(ratio) else f"{float(ratio):,.2f} ×"


def is_flag(value: Any) -> bool:
    """Whether an ``overuse`` cell raises a flag: True, or a non-empty text other than no."""
    if is_missing(value):
        return False
    if isinstance(value, str):
        return value.strip().lower() not in ("", "no", "false", "none", "0", "ok")
    return bool(value)
