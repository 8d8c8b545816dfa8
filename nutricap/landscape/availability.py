"""Availability rules applied to every raster cell before forage is pooled (capability 3).

Pure, vectorised functions on arrays of cells, and the table that reports what each rule
removed. File access lives in :mod:`nutricap.landscape.grid.rasters`; the streaming that calls
:func:`apply_rules` window by window lives in :mod:`nutricap.landscape.grid.window_pass`.

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

All per-cell arithmetic is float32 (7 significant digits, far below the sampling error of the
inputs); sums over cells are accumulated in float64 by the caller.

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


def exposed_fraction_above_snow(snow_depth_cm, height_cm):
    """Share of a forage class that stands above the snow, forage spread evenly over its height.

    Parameters
    ----------
    snow_depth_cm : array_like
        Snow depth [cm]; values below 0 count as bare ground.
    height_cm : array_like
        Height of the forage class [cm].

    Returns
    -------
    ndarray (float32)
        Exposed share [0–1]: 1 on bare ground, 0 where the snow is at least as deep as the
        forage is tall.

    Notes
    -----
    ``f = clip(1 − d / h, 0, 1)``: with forage mass spread evenly from the ground to height h,
    the share above a snow surface at depth d is (h − d) / h. A class of height 0 is exposed
    only on bare ground. The even vertical spread is an assumption (common practice); use
    :func:`available_all_or_none` when a class should count fully until it is buried.

    Examples
    --------
    >>> exposed_fraction_above_snow([0.0, 30.0, 80.0], 60.0).tolist()
    [1.0, 0.5, 0.0]
    """
    return _broadcast_into(_exposed_into, snow_depth_cm, height_cm)


def available_all_or_none(snow_depth_cm, height_cm):
    """Share of a forage class available under the all-or-none burial rule.

    Parameters
    ----------
    snow_depth_cm : array_like
        Snow depth [cm].
    height_cm : array_like
        Height of the forage class [cm].

    Returns
    -------
    ndarray (float32)
        1 where the class stands above the snow (``d < h``), 0 where it is buried (``d ≥ h``).

    Notes
    -----
    The whole class stays available until the snow reaches its height, then none of it
    is (common practice for a coarse burial rule).

    Examples
    --------
    >>> available_all_or_none([0.0, 59.0, 60.0], 60.0).tolist()
    [1.0, 1.0, 0.0]
    """
    return _broadcast_into(_all_or_none_into, snow_depth_cm, height_cm)


def snow_available_fraction(snow_depth_cm, height_cm, method: str = "exposed_fraction"):
    """Share of a class available above the snow by ``method`` (one of SNOW_BURIAL_METHODS)."""
    return _broadcast_into(_snow_rule(method), snow_depth_cm, height_cm)


def _snow_rule(method: str):
    rules = {"exposed_fraction": _exposed_into, "all_or_none": _all_or_none_into}
    if method not in rules:
        raise ValueError(f"unknown snow burial method {method!r}; expected {SNOW_BURIAL_METHODS}")
    return rules[method]


def _broadcast_into(rule, snow_depth_cm, height_cm) -> np.ndarray:
    depth, height = np.broadcast_arrays(
        np.asarray(snow_depth_cm, dtype=np.float32), np.asarray(height_cm, dtype=np.float32)
    )
    out = np.empty(depth.shape, dtype=np.float32)
    rule(depth, height, out)
    return out


def _exposed_into(depth, height, out) -> None:
    """``out = clip(1 − depth / height, 0, 1)``; 1 on bare ground where height ≤ 0."""
    with np.errstate(divide="ignore", invalid="ignore"):
        np.divide(depth, height, out=out)
    np.subtract(np.float32(1.0), out, out=out)
    np.clip(out, np.float32(0.0), np.float32(1.0), out=out)
    flat = np.asarray(height) <= 0
    if flat.any():
        np.copyto(out, np.asarray(depth) <= 0, where=np.broadcast_to(flat, out.shape))


def _all_or_none_into(depth, height, out) -> None:
    """``out = 1`` where the class stands above the snow (``depth < height``), else 0."""
    np.less(depth, height, out=out)


def slope_percent_from_degrees(slope_deg):
    """Slope gradient in percent from slope angle in degrees.

    Parameters
    ----------
    slope_deg : array_like
        Slope angle [degrees], 0–90.

    Returns
    -------
    ndarray (float32)
        Slope [%] = rise over run × 100.

    Notes
    -----
    ``s = 100 · tan(θ)`` (trigonometric definition of gradient).

    Examples
    --------
    >>> round(float(slope_percent_from_degrees(45.0)), 4)
    100.0
    """
    angle = np.radians(np.asarray(slope_deg, dtype=np.float32))
    return (np.float32(100.0) * np.tan(angle)).astype(np.float32, copy=False)


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


@dataclass
class RuleOutcome:
    """What the rules left and removed in a set of cells (views into one float32 array).

    Attributes
    ----------
    available_kg_per_ha : ndarray (classes, cells)
        Forage left of each class after every rule [kg/ha of cell].
    access : ndarray (cells,)
        Share of each cell's area still used after the area rules [0–1]; 0 without data.
    removed_kg_per_ha : dict rule → ndarray (cells,)
        Forage (all classes) each rule removed [kg/ha of cell].
    affected : dict rule → ndarray (cells,)
        1.0 in cells with data where the rule removed something (or took area), else 0.0.
    """

    available_kg_per_ha: np.ndarray
    access: np.ndarray
    removed_kg_per_ha: dict[str, np.ndarray]
    affected: dict[str, np.ndarray]


def outcome_rows(n_classes: int, rules: CellRules) -> int:
    """Rows of the array :func:`apply_rules` fills: forage left by class, removed by each rule
    after ``nodata``, access, affected by each rule (the first two blocks of rows are the
    ones the report's maps sum by block, kept together)."""
    return n_classes + 1 + 2 * (len(rules.active()) - 1)


def apply_rules(
    biomass_kg_per_ha: np.ndarray,
    rules: CellRules,
    valid: np.ndarray,
    *,
    excluded: np.ndarray | None = None,
    accessible_fraction: np.ndarray | None = None,
    snow_depth_cm: np.ndarray | None = None,
    slope: np.ndarray | None = None,
    distance_to_water_m: np.ndarray | None = None,
    out: np.ndarray | None = None,
) -> RuleOutcome:
    """Apply every active rule (except ``nodata``, handled by the caller) to a set of cells.

    Parameters
    ----------
    biomass_kg_per_ha : ndarray (classes, cells), float32
        Standing forage of each class [kg/ha]; 0 in cells that are not ``valid``. Not modified.
    rules : CellRules
    valid : bool ndarray (cells,)
        Cells that are mapped and have data in every layer; the others keep nothing.
    excluded : bool ndarray (cells,), optional
        Cells inside an exclusion polygon.
    accessible_fraction : ndarray (cells,), optional
        Accessible share of each cell's stratum polygon [0–1].
    snow_depth_cm, slope, distance_to_water_m : ndarray (cells,), optional
        The layers of the snow, slope ([%] or [degrees]) and distance-to-water [m] rules
        (any finite value where ``valid`` is False).
    out : float32 ndarray (:func:`outcome_rows`, cells), optional
        Where to write the result (the outcome's arrays are views into it).

    Returns
    -------
    RuleOutcome

    Notes
    -----
    With g_c the standing forage of class c, e the product of the area rules before snow
    (exclusion 0/1 and accessible fraction), f_c the share above the snow, m the minimum-density
    test on ``E = Σ_c g_c f_c`` (1 if E ≥ minimum, else 0), and r_s, r_w the slope and water
    reductions, the forage left is ``g_c · f_c · e · m · (1 − r_s)(1 − r_w)``. Each rule's
    removed forage is the total before it minus the total after it.
    """
    n_classes, n_cells = biomass_kg_per_ha.shape
    if out is None:
        out = np.empty((outcome_rows(n_classes, rules), n_cells), dtype=np.float32)
    state = _RuleState(biomass_kg_per_ha, rules, valid, out)
    if rules.exclusions and excluded is not None:
        state.area_rule("exclusions", (~excluded).astype(np.float32))
    if rules.partial_access and accessible_fraction is not None:
        state.area_rule("accessible_fraction", accessible_fraction.astype(np.float32, copy=False))
    if rules.height_cm is not None and snow_depth_cm is not None:
        state.snow(snow_depth_cm)
    if rules.min_forage_kg_per_ha is not None:
        dense = state.exposed_total() >= np.float32(rules.min_forage_kg_per_ha)
        state.area_rule("min_forage", dense.astype(np.float32))
    if rules.slope_table is not None and slope is not None:
        percent = slope_percent_from_degrees(slope) if rules.slope_in_degrees else slope
        state.area_rule("slope", np.float32(1.0) - rules.slope_table.reduction_of(percent))
    if rules.water_table is not None and distance_to_water_m is not None:
        reduction = rules.water_table.reduction_of(distance_to_water_m)
        state.area_rule("distance_to_water", np.float32(1.0) - reduction)
    return state.finish()


class _RuleState:
    """Running state of :func:`apply_rules`: forage left, area share left, total left."""

    def __init__(self, gross: np.ndarray, rules: CellRules, valid: np.ndarray, out) -> None:
        n_classes = gross.shape[0]
        self.gross, self.rules, self.valid = gross, rules, valid
        self.available = out[:n_classes]
        n_rules = len(rules.active()) - 1
        self.access = out[n_classes + n_rules]
        np.copyto(self.access, valid)
        self.rows = {
            rule: (out[n_classes + i], out[n_classes + n_rules + 1 + i])
            for i, rule in enumerate(rules.active()[1:])
        }
        self.total = gross.sum(axis=0, dtype=np.float32)
        self.snowed = False
        self.area_rules = 0

    def area_rule(self, name: str, keep: np.ndarray) -> None:
        removed, affected = self.rows[name]
        np.subtract(np.float32(1.0), keep, out=removed)
        removed *= self.total
        np.copyto(affected, (keep < 1) & self.valid)
        self.access *= keep
        self.total *= keep
        self.area_rules += 1

    def snow(self, depth: np.ndarray) -> None:
        rule = _snow_rule(self.rules.snow_method)
        for column, height in enumerate(np.asarray(self.rules.height_cm, dtype=np.float32)):
            rule(depth, height, self.available[column])
        self.available *= self.gross
        self.snowed = True
        removed, affected = self.rows["snow"]
        after = self.exposed_total() * self.access
        np.subtract(self.total, after, out=removed)
        np.copyto(affected, removed > 0)
        self.total = after

    def exposed_total(self) -> np.ndarray:
        """Forage above the snow [kg/ha], before the area rules."""
        source = self.available if self.snowed else self.gross
        return source.sum(axis=0, dtype=np.float32)

    def finish(self) -> RuleOutcome:
        if not self.snowed:
            np.copyto(self.available, self.gross)
        if self.area_rules:
            self.available *= self.access
        removed = {rule: rows[0] for rule, rows in self.rows.items()}
        affected = {rule: rows[1] for rule, rows in self.rows.items()}
        return RuleOutcome(self.available, self.access, removed, affected)


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
