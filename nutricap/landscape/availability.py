"""Availability rules applied to every raster cell before forage is pooled (capability 3).

The rules' names and order, the settings of a run (:class:`CellRules`), the reduction tables
of the slope and distance-to-water rules, and the table that reports what each rule removed.
The arithmetic on arrays of cells (snow burial, ``apply_rules``) is in
:mod:`nutricap.landscape.rules_on_cells`; file access lives in
:mod:`nutricap.landscape.grid.layers`, the streaming in :mod:`nutricap.landscape.grid.window_pass`.

Rules are applied in a fixed order, and the forage each removes is counted against the forage
left by the rules before it (so the per-rule amounts add up to the total removed):

1. ``nodata``: a cell where any layer has no data counts no forage (its forage is unknown);
2. ``exclusions``: cells whose centre lies in an exclusion polygon count no forage;
3. ``accessible_fraction``: the stratum's accessible share (strata attribute, default 1);
4. ``snow``: each forage class keeps only what stands above the snow;
5. ``min_forage``: a cell whose forage above the snow is below the minimum density is not
   foraged at all;
6. ``slope`` and 7. ``distance_to_water``: the share of grazing capacity removed by the
   range-management reduction tables (Holechek 1988 by default).

References
----------
Holechek, J.L. 1988. An approach for setting the stocking rate. Rangelands 10:10-14.
"""

from __future__ import annotations

from dataclasses import dataclass
from importlib.resources import files
from pathlib import Path

import numpy as np
import pandas as pd

from nutricap.errors import TableError
from nutricap.inputs.columns import Column, read_csv_table, spreadsheet_row

RULES = (
    "nodata",
    "exclusions",
    "accessible_fraction",
    "snow",
    "min_forage",
    "slope",
    "distance_to_water",
)
"""The rules in the order they are applied."""

RULE_MEANING = {
    "nodata": "cells where an input layer has no data (their forage is unknown and not counted)",
    "exclusions": "cells whose centre lies in an exclusion polygon",
    "accessible_fraction": "share of a stratum animals cannot reach (strata accessible_fraction)",
    "snow": "forage buried by snow (class height against snow depth)",
    "min_forage": "cells whose forage above the snow is below the minimum density",
    "slope": "reduction of use on steep ground (slope table)",
    "distance_to_water": "reduction of use far from water (distance-to-water table)",
}

SNOW_BURIAL_METHODS = ("exposed_fraction", "all_or_none")
HOLECHEK_FILE = "holechek_reductions.csv"
"""Packaged default reduction tables (nutricap/data), Holechek (1988)."""

REDUCTION_COLUMNS = [
    Column("lower", minimum=0, meaning="lower bound of the class (exclusive, except 0)"),
    Column("upper", allow_blank=True, above=0, meaning="upper bound (inclusive); blank: none"),
    Column("reduction", minimum=0, maximum=1, meaning="share of grazing capacity removed, 0-1"),
]


@dataclass(frozen=True)
class ReductionTable:
    """A step table of reductions in use by a terrain factor (slope or distance to water).

    Attributes
    ----------
    factor : str
        ``"slope"`` [%] or ``"distance_to_water"`` [m].
    upper : ndarray, shape (classes,)
        Upper bound of each class (inclusive), ascending; the last is +inf.
    reduction : ndarray, shape (classes,)
        Share of grazing capacity removed in each class [0–1].
    source : str
        Where the values come from (every row's source, once each).
    row_sources : tuple of str
        The source of each class (the table's ``source`` column, else the file).
    """

    factor: str
    upper: np.ndarray
    reduction: np.ndarray
    source: str
    row_sources: tuple[str, ...] = ()

    def reduction_of(self, values) -> np.ndarray:
        """Reduction [0–1] of each value (float32)."""
        return reduction_fraction(values, self.upper, self.reduction)


def reduction_fraction(values, upper_bounds, reductions):
    """Look up the reduction of each value in a step table.

    Parameters
    ----------
    values : array_like
        Terrain values (slope [%] or distance to water [m]).
    upper_bounds : array_like, shape (classes,)
        Inclusive upper bound of each class, ascending; the last may be +inf.
    reductions : array_like, shape (classes,)
        Reduction of each class [0–1].

    Returns
    -------
    ndarray (float32)
        ``reductions[i]`` for the first class i with ``value ≤ upper_bounds[i]``; values above
        the last bound take the last class.

    Examples
    --------
    >>> reduction_fraction([5, 10, 10.5, 45, 80], [10, 30, 60, np.inf], [0, .3, .6, 1]).tolist()
    [0.0, 0.0, 0.30000001192092896, 0.6000000238418579, 1.0]
    """
    values = np.asarray(values, dtype=np.float32)
    bounds = np.asarray(upper_bounds, dtype=np.float32)
    lookup = np.asarray(reductions, dtype=np.float32)
    index = np.searchsorted(bounds, values, side="left")
    return lookup[np.minimum(index, lookup.size - 1)]


def load_reduction_table(path: Path | None, factor: str) -> ReductionTable:
    """Read a reduction table: the packaged Holechek (1988) table, or a user's CSV.

    A user's table has columns ``lower, upper, reduction`` (``upper`` blank in the last,
    open class) and optionally ``factor`` (rows of other factors are ignored) and ``source``.
    Classes must start at 0 and follow each other without gaps.
    """
    source_path = path if path is not None else Path(str(files("nutricap.data") / HOLECHEK_FILE))
    table = read_csv_table(source_path, REDUCTION_COLUMNS, what=f"{factor} reduction table")
    if "factor" in table.columns:
        table = table[table["factor"] == factor]
    if table.empty:
        raise TableError(
            f"no rows for {factor}",
            source=source_path,
            location="column 'factor'",
            expected=f"rows with factor {factor!r}",
            found="none",
        )
    _check_classes(table, source_path)
    upper = table["upper"].fillna(np.inf).to_numpy(dtype=float)
    sources = table["source"] if "source" in table.columns else pd.Series(dtype=str)
    source = "; ".join(dict.fromkeys(s for s in sources if s)) or str(source_path)
    rows = tuple(
        str(s) if s else str(source_path) for s in sources.reindex(table.index, fill_value="")
    )
    return ReductionTable(factor, upper, table["reduction"].to_numpy(dtype=float), source, rows)


def _check_classes(table: pd.DataFrame, path: Path) -> None:
    lower = table["lower"].to_numpy()
    upper = table["upper"].fillna(np.inf).to_numpy()
    problems = [
        (0, "the first class starts at 0", f"lower {lower[0]:g}") if lower[0] != 0 else None,
        *(
            (i, f"lower = upper of the previous class ({upper[i - 1]:g})", f"lower {lower[i]:g}")
            for i in range(1, len(table))
            if lower[i] != upper[i - 1]
        ),
        *(
            (i, "upper greater than lower", f"upper {upper[i]:g}")
            for i in range(len(table))
            if upper[i] <= lower[i]
        ),
    ]
    problems = [p for p in problems if p is not None]
    if not np.isinf(upper[-1]):
        problems.append((len(table) - 1, "the last class open (upper left blank)", "a bound"))
    if problems:
        index, expected, found = problems[0]
        raise TableError(
            "reduction classes do not follow each other",
            source=path,
            location=f"row {spreadsheet_row(table.index[index])}",
            expected=expected,
            found=found,
        )


@dataclass(frozen=True)
class CellRules:
    """The availability rules of a run (constants shared by every window).

    Attributes
    ----------
    height_cm : ndarray (classes,) or None
        Height of each forage class [cm]; None when there is no snow rule.
    snow_method : str
        One of :data:`SNOW_BURIAL_METHODS`.
    min_forage_kg_per_ha : float or None
        Minimum forage density above the snow [kg/ha]; None: no such rule.
    slope_table, water_table : ReductionTable or None
    slope_in_degrees : bool
        Whether the slope raster holds degrees (converted to percent) rather than percent.
    partial_access : bool
        Whether some strata polygons are only partly accessible (``accessible_fraction``).
    exclusions : bool
        Whether exclusion polygons are given.
    """

    height_cm: np.ndarray | None = None
    snow_method: str = "exposed_fraction"
    min_forage_kg_per_ha: float | None = None
    slope_table: ReductionTable | None = None
    water_table: ReductionTable | None = None
    slope_in_degrees: bool = False
    partial_access: bool = False
    exclusions: bool = False

    def active(self) -> list[str]:
        """Names of the rules this run applies (``nodata`` always), in order."""
        flags = {
            "nodata": True,
            "exclusions": self.exclusions,
            "accessible_fraction": self.partial_access,
            "snow": self.height_cm is not None,
            "min_forage": self.min_forage_kg_per_ha is not None,
            "slope": self.slope_table is not None,
            "distance_to_water": self.water_table is not None,
        }
        return [rule for rule in RULES if flags[rule]]


def rules_report(
    unit_ids: np.ndarray,
    active: list[str],
    area_ha: np.ndarray,
    removed_kg: np.ndarray,
    gross_kg: np.ndarray,
) -> pd.DataFrame:
    """The per-unit report of what each rule removed.

    Parameters
    ----------
    unit_ids : array (units,)
    active : list of str
        Rules applied, in order (a subset of :data:`RULES`).
    area_ha : ndarray (units, rules)
        Area where each rule removed something [ha].
    removed_kg : ndarray (units, rules)
        Forage each rule removed [kg DM]; NaN for ``nodata`` (the forage there is unknown).
    gross_kg : ndarray (units,)
        Standing forage of the mapped cells with data, before any rule [kg DM].

    Returns
    -------
    DataFrame
        ``unit_id, rule, area_ha, forage_removed_kg, forage_removed_pct, meaning``; one row
        per unit and rule, then one ``all units`` row per rule.
    """
    n_units, n_rules = len(unit_ids), len(active)
    table = pd.DataFrame(
        {
            "unit_id": np.repeat(np.asarray(unit_ids, dtype=object), n_rules),
            "rule": np.tile(active, n_units),
            "area_ha": area_ha.ravel(),
            "forage_removed_kg": removed_kg.ravel(),
            "gross_kg": np.repeat(gross_kg, n_rules),
        }
    )
    totals = table.groupby("rule", sort=False)[["area_ha", "forage_removed_kg", "gross_kg"]].sum(
        min_count=1
    )
    totals = totals.reset_index().assign(unit_id="all units")
    table = pd.concat([table, totals[table.columns]], ignore_index=True)
    with np.errstate(invalid="ignore", divide="ignore"):
        table["forage_removed_pct"] = 100.0 * table["forage_removed_kg"] / table["gross_kg"]
    table["meaning"] = table["rule"].map(RULE_MEANING)
    return table.drop(columns="gross_kg")
