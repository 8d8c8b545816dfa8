"""The availability rules' arithmetic on arrays of cells (capability 3): snow burial, slope in
percent, and :func:`apply_rules`, which applies a run's rules
(:class:`~nutricap.landscape.availability.CellRules`) to a set of cells.

Pure, vectorised functions; the rules' order, their settings, the reduction tables and the
report of what each removed are in :mod:`nutricap.landscape.availability`, the streaming that
calls :func:`apply_rules` window by window in :mod:`nutricap.landscape.grid.window_pass`. All
per-cell arithmetic is float32 (7 significant digits, far below the sampling error of the
inputs); sums over cells are accumulated in float64 by the caller.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from nutricap.landscape.availability import SNOW_BURIAL_METHODS, CellRules


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
        1.0 in cells with data where the rule removed forage, else 0.0.
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
        np.copyto(affected, (removed > 0) & self.valid)  # as snow: where it removed forage
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
