"""Diet-composition limits of the NCC linear programme, and its batched exact solver.

:func:`nutricap.science.capacity.nutritional_capacity` adds diet-composition constraints
(common practice in diet linear programmes) to the NCC programme of Hobbs & Swift (1985) and
Hanley & Rogers (1989): a largest share of the diet for each item, and a smallest and largest
share for groups of items. Every constraint of the programme is then homogeneous,

    maximise sum_i x_i   subject to   0 <= x_i <= A_i,   K x <= 0,

with one row of K per constraint (:func:`composition_rows`). This module solves many such
programmes at once, exactly: a bounded-variable primal simplex on a dense tableau, vectorised
over the units (:func:`solve_homogeneous_lp`), each answer certified by LP duality; a unit the
simplex does not certify is solved by HiGHS (``scipy.optimize.linprog``), all such units in one
block-diagonal sparse programme. ``docs/methods.md`` derives the method.

References
----------
Hobbs, N.T. & Swift, D.M. 1985. J. Wildl. Manage. 49:814-822.
Hanley, T.A. & Rogers, J.J. 1989. USDA For. Serv. Res. Note PNW-RN-485.
Dantzig's simplex method with bounded variables and Bland's anti-cycling rule, and LP duality:
    standard results of linear programming (any operations-research textbook).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike

from nutricap.errors import InputError

#: Row families of the composition constraints, in the order of the limiting-factor labels.
SHARE, GROUP = "diet_share", "diet_group"

#: Tolerances: reduced costs that count as positive, smallest pivot, box bounds (relative),
#: composition and quality rows (relative to the diet), duality gap (relative).
_COST_TOL = 1e-11
_PIVOT_TOL = 1e-11
_BOX_TOL = 1e-9
_ROW_TOL = 1e-12
_GAP_TOL = 1e-10

#: Pivots with Dantzig's rule before a unit switches to Bland's rule (anti-cycling), and the
#: pivot limit after which a unit is handed to HiGHS, as multiples of the number of variables.
_DANTZIG_PIVOTS = 4
_MAX_PIVOTS = 20

#: Largest number of float64 values in one block of tableaux (about 16 MB).
_TABLEAU_BLOCK = 2_000_000


@dataclass(frozen=True)
class CompositionRows:
    """Diet-composition constraints as rows of K (K x <= 0), with the family of each row.

    Attributes
    ----------
    rows : ndarray, shape (units or 1, rows, items)
        Coefficients of each constraint [-]; x_i - s_i sum(x) for a share cap,
        sum_{i in g} x_i - M_g sum(x) and m_g sum(x) - sum_{i in g} x_i for a group.
    family : ndarray of str, shape (rows,)
        :data:`SHARE` or :data:`GROUP`.
    """

    rows: np.ndarray
    family: np.ndarray


def _shares(value: ArrayLike, name: str, shape: tuple[int, ...], axes: tuple[str, ...]):
    """A share array of exactly ``shape`` in [0, 1], or InputError naming the argument."""
    try:
        arr = np.asarray(value, dtype=float)
    except (TypeError, ValueError) as exc:
        raise InputError(
            "must be numeric", source=name, expected="numbers", found=repr(value)[:60]
        ) from exc
    if arr.shape != shape:
        raise InputError(
            "wrong shape",
            source=name,
            expected=f"shape {shape}",
            found=f"shape {arr.shape}",
        )
    bad = ~np.isfinite(arr) | (arr < 0.0) | (arr > 1.0)
    if bad.any():
        index = tuple(np.argwhere(bad)[0])
        raise InputError(
            "value is missing or out of range",
            source=name,
            location=", ".join(f"{a} {int(k)}" for a, k in zip(axes, index, strict=True)),
            expected="a finite number in [0, 1]",
            found=repr(float(arr[index])),
        )
    return arr


def _share_rows(max_diet_share: ArrayLike, shape: tuple[int, int]) -> np.ndarray:
    """Rows x_i - s_i sum(x) <= 0 for the items whose share cap is below 1 in some unit."""
    n_units, n_items = shape
    if np.ndim(max_diet_share) == 2:
        shares = _shares(max_diet_share, "max_diet_share", shape, ("unit", "item"))
    else:
        shares = _shares(max_diet_share, "max_diet_share", (n_items,), ("item",))[np.newaxis]
    capped = np.flatnonzero(np.any(shares < 1.0, axis=0))
    rows = -shares[:, capped, np.newaxis] * np.ones(n_items)
    rows[:, np.arange(capped.size), capped] += 1.0
    return rows


def _group_rows(
    diet_groups: ArrayLike,
    min_group_share: ArrayLike | None,
    max_group_share: ArrayLike | None,
    n_items: int,
) -> np.ndarray:
    """Rows for every group bound that can bind (a minimum above 0, a maximum below 1)."""
    groups = np.asarray(diet_groups)
    if groups.ndim != 2 or groups.shape[1] != n_items or groups.dtype != bool:
        raise InputError(
            "diet groups must be a boolean membership array",
            source="diet_groups",
            expected=f"booleans of shape (groups, {n_items})",
            found=f"{groups.dtype} of shape {groups.shape}",
        )
    n_groups = len(groups)
    low = np.zeros(n_groups) if min_group_share is None else min_group_share
    high = np.ones(n_groups) if max_group_share is None else max_group_share
    low = _shares(low, "min_group_share", (n_groups,), ("group",))
    high = _shares(high, "max_group_share", (n_groups,), ("group",))
    if np.any(low > high):
        g = int(np.argmax(low > high))
        raise InputError(
            "the minimum share of a group exceeds its maximum",
            source="min_group_share",
            location=f"group {g}",
            expected=f"at most max_group_share[{g}] = {high[g]:g}",
            found=repr(float(low[g])),
        )
    member = groups.astype(float)
    upper = member[high < 1.0] - high[high < 1.0, np.newaxis]
    lower = low[low > 0.0, np.newaxis] - member[low > 0.0]
    return np.concatenate([upper, lower])[np.newaxis]


def composition_rows(
    shape: tuple[int, int],
    max_diet_share: ArrayLike | None = None,
    diet_groups: ArrayLike | None = None,
    min_group_share: ArrayLike | None = None,
    max_group_share: ArrayLike | None = None,
) -> CompositionRows | None:
    """Checked diet-composition constraints for problems of ``shape`` (units, items).

    Returns None when no argument is given. Raises InputError for a share outside [0, 1], a
    wrong shape, group bounds without groups, or a group minimum above its maximum.
    """
    n_units, n_items = shape
    if diet_groups is None and (min_group_share is not None or max_group_share is not None):
        raise InputError(
            "group share bounds given without diet_groups",
            source="min_group_share" if min_group_share is not None else "max_group_share",
            expected="diet_groups as well",
            found="diet_groups=None",
        )
    parts, families = [], []
    if max_diet_share is not None:
        parts.append(_share_rows(max_diet_share, shape))
        families += [SHARE] * parts[-1].shape[1]
    if diet_groups is not None:
        parts.append(_group_rows(diet_groups, min_group_share, max_group_share, n_items))
        families += [GROUP] * parts[-1].shape[1]
    if not parts:
        return None
    n_rows = max(len(p) for p in parts)
    rows = np.concatenate([np.broadcast_to(p, (n_rows, *p.shape[1:])) for p in parts], axis=1)
    return CompositionRows(rows=rows, family=np.array(families, dtype=object))


def meets_rows(eaten: np.ndarray, rows: np.ndarray) -> np.ndarray:
    """True per unit where every row holds within _ROW_TOL of the diet: K x <= tol sum(x)."""
    if rows.shape[-2] == 0:
        return np.ones(len(eaten), dtype=bool)
    lhs = np.einsum("urn,un->ur", np.broadcast_to(rows, (len(eaten), *rows.shape[1:])), eaten)
    return np.all(lhs <= _ROW_TOL * eaten.sum(axis=1)[:, np.newaxis], axis=1)


def composition_labels(
    allowed: np.ndarray,
    eaten: np.ndarray,
    multipliers: np.ndarray,
    family: np.ndarray,
    tolerance: float,
) -> np.ndarray:
    """Limiting-factor labels of units solved with composition limits, from the multipliers.

    A constraint binds when its multiplier exceeds ``tolerance`` (the threshold used for
    energy and protein); the label joins the families that bind, in the order of ``family``.
    """
    names = np.array(["energy", "protein", "diet_share", "diet_group"])
    binds = np.stack([np.any(multipliers[:, family == n] > tolerance, axis=1) for n in names])
    # Rounding can leave every multiplier at or below the threshold although the diet is not
    # everything allowed: the family with the largest multiplier is then named.
    largest = np.stack(
        [np.max(multipliers[:, family == n], axis=1, initial=-np.inf) for n in names]
    )
    none = ~binds.any(axis=0)
    binds[np.argmax(largest, axis=0)[none], np.flatnonzero(none)] = True
    labels = np.array(["+".join(names[b]) for b in binds.T], dtype=object)
    total = eaten.sum(axis=1)
    labels[np.all(eaten >= allowed, axis=1)] = "quantity"
    labels[total <= 0.0] = "diet_mix"
    return labels.astype(str)


# --- the batched simplex ---------------------------------------------------------------------


@dataclass
class _Tableaux:
    """Condensed simplex tableaux of a block of units, variables z = (x, w), K x + w = 0.

    ``tab[u]`` (rows x items) expresses the basic variables through the nonbasic ones,
    z_B = -tab z_N around the current point; ``cost`` holds the reduced costs of the nonbasic
    variables; ``value_*``, ``upper_*`` and ``var_*`` the values, upper bounds (A_i for x,
    inf for the slacks w; every lower bound is 0) and indices (x_i = i, w_r = items + r) of
    the basic (``_b``) and nonbasic (``_n``) variables; ``unit`` the unit of each tableau.
    """

    tab: np.ndarray
    cost: np.ndarray
    value_b: np.ndarray
    value_n: np.ndarray
    upper_b: np.ndarray
    upper_n: np.ndarray
    var_b: np.ndarray
    var_n: np.ndarray
    at_upper: np.ndarray
    unit: np.ndarray

    @classmethod
    def start(cls, allowed: np.ndarray, rows: np.ndarray) -> _Tableaux:
        """The origin x = 0, w = 0 (feasible: every row is homogeneous), slacks basic."""
        n_units, n_rows, n_items = rows.shape
        return cls(
            tab=rows.copy(),
            cost=np.ones((n_units, n_items)),
            value_b=np.zeros((n_units, n_rows)),
            value_n=np.zeros((n_units, n_items)),
            upper_b=np.full((n_units, n_rows), np.inf),
            upper_n=allowed.copy(),
            var_b=np.tile(np.arange(n_items, n_items + n_rows), (n_units, 1)),
            var_n=np.tile(np.arange(n_items), (n_units, 1)),
            at_upper=np.zeros((n_units, n_items), dtype=bool),
            unit=np.arange(n_units),
        )

    def subset(self, keep: np.ndarray) -> _Tableaux:
        """The tableaux of the units where ``keep`` is True."""
        return _Tableaux(**{k: v[keep] for k, v in vars(self).items()})


def _entering(t: _Tableaux, bland: bool) -> np.ndarray:
    """Entering column per unit (-1 when optimal): Dantzig's rule, or Bland's rule."""
    gain = np.where(t.at_upper, -t.cost, np.where(t.upper_n > 0.0, t.cost, 0.0))
    can = gain > _COST_TOL
    if bland:
        column = np.argmin(np.where(can, t.var_n, np.iinfo(np.intp).max), axis=1)
    else:
        column = np.argmax(np.where(can, gain, -np.inf), axis=1)
    return np.where(can.any(axis=1), column, -1)


def _ratio_test(t: _Tableaux, k: np.ndarray, col: np.ndarray, bland: bool):
    """Step length, leaving row (-1 for a bound flip), direction and basic-value change rate."""
    direction = np.where(t.at_upper[k, col], -1.0, 1.0)
    alpha = t.tab[k, :, col] * direction[:, np.newaxis]
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        ratio = np.where(
            alpha > _PIVOT_TOL,
            t.value_b / alpha,
            np.where(alpha < -_PIVOT_TOL, (t.upper_b - t.value_b) / -alpha, np.inf),
        )
    ratio = np.maximum(ratio, 0.0)
    step = ratio.min(axis=1, initial=np.inf)
    # Ties: the largest pivot (stability), or the smallest variable index (Bland).
    tied = ratio <= step[:, np.newaxis]
    if bland:
        row = np.argmin(np.where(tied, t.var_b, np.iinfo(np.intp).max), axis=1)
    else:
        row = np.argmax(np.where(tied, np.abs(alpha), -1.0), axis=1)
    flip = t.upper_n[k, col]
    return np.minimum(step, flip), np.where(flip <= step, -1, row), direction, alpha


def _exchange(t: _Tableaux, p: np.ndarray, col: np.ndarray, row: np.ndarray, alpha) -> None:
    """Swap the basic variable ``row`` and the nonbasic ``col`` of units ``p`` (values too)."""
    to_upper = alpha[p, row] < 0.0
    leaving_value = np.where(to_upper, t.upper_b[p, row], 0.0)
    t.value_b[p, row], t.value_n[p, col] = t.value_n[p, col], leaving_value
    t.upper_b[p, row], t.upper_n[p, col] = t.upper_n[p, col], t.upper_b[p, row]
    t.var_b[p, row], t.var_n[p, col] = t.var_n[p, col], t.var_b[p, row]
    t.at_upper[p, col] = to_upper


def _pivot(
    t: _Tableaux,
    k: np.ndarray,
    col: np.ndarray,
    row: np.ndarray,
    piv: np.ndarray,
    scratch: np.ndarray,
) -> None:
    """Pivot the tableaux where ``piv`` on (row, col); the others are left unchanged."""
    r = np.where(piv, row, 0)
    pivot = np.where(piv, t.tab[k, r, col], 1.0)
    pivot_row = np.where(piv[:, np.newaxis], t.tab[k, r, :] / pivot[:, np.newaxis], 0.0)
    column = t.tab[k, :, col]
    # In place, through a scratch buffer reused from step to step (fresh pages for a large
    # temporary at every step would cost more than the arithmetic).
    update = scratch[: len(k)]
    np.multiply(column[:, :, np.newaxis], pivot_row[:, np.newaxis, :], out=update)
    t.tab -= update
    cost_col = t.cost[k, col]
    t.cost -= cost_col[:, np.newaxis] * pivot_row
    p, r, c = k[piv], row[piv], col[piv]
    t.tab[p, r, :] = pivot_row[piv]
    t.tab[p, :, c] = -column[piv] / pivot[piv, np.newaxis]
    t.tab[p, r, c] = 1.0 / pivot[piv]
    t.cost[p, c] = -cost_col[piv] / pivot[piv]


def _step(
    t: _Tableaux, col: np.ndarray, running: np.ndarray, bland: bool, scratch: np.ndarray
) -> np.ndarray:
    """One simplex step in each running tableau; returns which still run afterwards."""
    k = np.arange(len(col))
    col = np.where(running, col, 0)
    step, row, direction, alpha = _ratio_test(t, k, col, bland)
    # An unbounded step cannot occur in a bounded programme; where rounding produces one the
    # unit stops here and its certificate fails (HiGHS then solves it).
    running = running & np.isfinite(step)
    step = np.where(running, step, 0.0)
    t.value_b -= alpha * step[:, np.newaxis]
    t.value_n[k, col] += direction * step
    flip = running & (row < 0)
    t.at_upper[k[flip], col[flip]] ^= True
    piv = running & (row >= 0)
    _pivot(t, k, col, row, piv, scratch)
    _exchange(t, k[piv], col[piv], row[piv], alpha)
    return running


def _simplex(allowed: np.ndarray, rows: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Run the simplex on every unit; return the eaten x and the row multipliers y."""
    n_units, n_rows, n_items = rows.shape
    n_vars = n_items + n_rows
    values, costs = np.zeros((n_units, n_vars)), np.zeros((n_units, n_vars))
    t = _Tableaux.start(allowed, rows)
    scratch = np.empty_like(t.tab)
    running = np.ones(n_units, dtype=bool)
    for pivots in range(_MAX_PIVOTS * n_vars + 1):
        bland = pivots >= _DANTZIG_PIVOTS * n_vars
        col = _entering(t, bland)
        running &= col >= 0
        last = pivots == _MAX_PIVOTS * n_vars
        if last or 8 * np.count_nonzero(~running) >= len(running):
            _store(t, ~running | last, values, costs)
            t, col, running = t.subset(running), col[running], running[running]
        if last or not running.size:
            break
        running = _step(t, col, running, bland, scratch)
    # Reduced cost of a nonbasic slack w_r is -y_r; a basic slack has y_r = 0.
    return values[:, :n_items], -costs[:, n_items:]


def _store(t: _Tableaux, done: np.ndarray, values: np.ndarray, costs: np.ndarray) -> None:
    """Write the variable values and reduced costs of the finished tableaux."""
    units = t.unit[done, np.newaxis]
    values[units, t.var_b[done]] = t.value_b[done]
    values[units, t.var_n[done]] = t.value_n[done]
    costs[units, t.var_n[done]] = t.cost[done]


def _certified(
    allowed: np.ndarray, rows: np.ndarray, eaten: np.ndarray, multipliers: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """Clip eaten into its box; True where x is feasible and sum(x) equals the dual bound.

    For any y >= 0, g(y) = sum_i A_i max(0, 1 - (K^T y)_i) bounds sum(x) over the feasible
    set (weak duality): a feasible x with sum(x) = g(y) is optimal.
    """
    in_box = np.all((eaten >= -_BOX_TOL * allowed) & (eaten <= (1 + _BOX_TOL) * allowed), axis=1)
    eaten = np.clip(eaten, 0.0, allowed)
    reduced = 1.0 - np.einsum("urn,ur->un", rows, multipliers)
    dual = np.einsum("un,un->u", allowed, np.maximum(reduced, 0.0))
    total = eaten.sum(axis=1)
    gap_ok = np.abs(dual - total) <= _GAP_TOL * np.maximum(dual, total) + _ROW_TOL * allowed.sum(
        axis=1
    )
    ok = in_box & gap_ok & meets_rows(eaten, rows) & np.all(multipliers >= -_COST_TOL, axis=1)
    return eaten, ok


def _highs(allowed: np.ndarray, rows: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """All units in one block-diagonal sparse LP solved by HiGHS; eaten x and multipliers y."""
    # Imported here: SciPy's optimizer costs ~0.4 s to import and is needed only for units
    # the simplex above does not certify (degenerate or badly conditioned ones).
    from scipy.optimize import linprog
    from scipy.sparse import block_diag

    n_units, n_rows, n_items = rows.shape
    res = linprog(
        -np.ones(n_units * n_items),
        A_ub=block_diag(list(rows), format="csr"),
        b_ub=np.zeros(n_units * n_rows),
        bounds=np.column_stack([np.zeros(allowed.size), allowed.ravel()]),
        method="highs",
    )
    if res.status != 0:
        raise RuntimeError(f"HiGHS failed on the diet-composition LP: {res.message}")
    eaten = np.clip(res.x.reshape(allowed.shape), 0.0, allowed)
    return eaten, -res.ineqlin.marginals.reshape(n_units, n_rows)


def solve_homogeneous_lp(allowed_kg: np.ndarray, rows: np.ndarray) -> tuple[np.ndarray, ...]:
    """max sum(x) s.t. 0 <= x <= A, K x <= 0, for every unit; exact (certified) optimum.

    Parameters
    ----------
    allowed_kg : ndarray, shape (units, items)
        Upper bounds A [kg DM].
    rows : ndarray, shape (units, rows, items)
        The homogeneous constraints K [any unit per row].

    Returns
    -------
    eaten : ndarray, shape (units, items)
        Optimal x [kg DM].
    multipliers : ndarray, shape (units, rows)
        Lagrange multipliers y >= 0 of the rows (of the problem scaled by max A per unit,
        which leaves them unchanged: every row is homogeneous).
    highs : ndarray of bool, shape (units,)
        Units solved by HiGHS because the simplex did not certify them.
    """
    n_units, n_rows, n_items = rows.shape
    scale = allowed_kg.max(axis=1, initial=0.0)
    scale = np.where(scale > 0.0, scale, 1.0)
    allowed = allowed_kg / scale[:, np.newaxis]
    eaten = np.zeros_like(allowed)
    multipliers = np.zeros((n_units, n_rows))
    step = max(1, _TABLEAU_BLOCK // max(1, n_rows * n_items))
    for start in range(0, n_units, step):
        block = slice(start, start + step)
        eaten[block], multipliers[block] = _simplex(allowed[block], rows[block])
    eaten, ok = _certified(allowed, rows, eaten, multipliers)
    rest = np.flatnonzero(~ok)
    if rest.size:
        eaten[rest], multipliers[rest] = _highs(allowed[rest], rows[rest])
    # Items eaten in full get exactly their bound back (no rounding from the rescaling).
    eaten_kg = np.where(
        eaten >= allowed, allowed_kg, np.minimum(eaten * scale[:, None], allowed_kg)
    )
    return eaten_kg, multipliers, ~ok
