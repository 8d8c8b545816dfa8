"""Capacity solvers per management unit: nutritional, ecological and allowable-use capacity.

Every function takes the forage available in each unit as an array ``(units, items)`` [kg DM]
and returns one figure per unit [animal-days]. Quality values may be given per item
``(items,)`` (broadcast over the units) or per unit and item ``(units, items)``. A 1-D
``available_kg`` of shape ``(items,)`` is one unit: results then have shape ``(1,)`` (and
``eaten_kg`` shape ``(1, items)``).

Nutritional carrying capacity (NCC) is the largest amount of forage that can be eaten while the
mixed diet still meets a minimum digestible-energy (DE) content and, optionally, a minimum
digestible-protein (DP) content (Hobbs & Swift 1985; Hanley & Rogers 1989):

    maximise   sum_i x_i                          [kg DM]
    subject to 0 <= x_i <= c_i a_i
               sum_i x_i (q_i - T) >= 0           (diet DE >= T)
               sum_i x_i (p_i - P) >= 0           (diet DP >= P, optional)

    animal-days = sum_i x_i / intake

With one nutrient the problem is a fractional knapsack solved exactly by sorting the items by
quality and accumulating (:func:`nutritional_capacity`, Notes). With two nutrients the
single-nutrient optima are tried first; the remaining units are solved exactly from the vertices
of the two-multiplier dual, and any unit that vertex search cannot certify goes to
``scipy.optimize.linprog`` (HiGHS). ``docs/methods.md`` derives each step.

References
----------
Hobbs, N.T. & Swift, D.M. 1985. Estimates of habitat carrying capacity incorporating explicit
    nutritional constraints. J. Wildl. Manage. 49:814-822. Abstract read (scilit.net): "an
    algorithm for estimating supportable densities of herbivores consuming diets at different
    levels of nutritional quality", forage amount and quality treated together; the linear
    programme above is written from that description and checked by LP duality and HiGHS, not
    against the paper's own equations, which were not read.
Hanley, T.A. & Rogers, J.J. 1989. Estimating carrying capacity with simultaneous nutritional
    constraints. USDA Forest Service Research Note PNW-RN-485.
Holechek, J.L. 1988. An approach for setting the stocking rate. Rangelands 10:10-14.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike

from nutricap.errors import InputError
from nutricap.science.diet_lp import (
    CompositionRows,
    composition_labels,
    composition_rows,
    meets_rows,
    solve_homogeneous_lp,
)

#: Items whose quality is within this distance of the threshold count as meeting it
#: [kcal/g for DE, % for DP]. Also the tolerance on the diet quality of a certified solution.
QUALITY_TOL = 1e-12

#: Grams per kilogram (exact).
G_PER_KG = 1000.0

#: Limiting-factor labels. The first six are those of a problem without diet-composition
#: limits, indexed by the integer codes used inside this module; then "diet_mix" (no diet
#: that meets the composition limits and the diet quality), then the binding limits joined
#: by "+" in the order energy, protein, diet_share, diet_group.
_BASE_FACTORS = ("no_forage", "intake", "quantity", "energy", "protein", "energy+protein")
_COMPOSITION_FACTORS = ("diet_share", "diet_group", "diet_share+diet_group")
LIMITING_FACTORS = (
    *_BASE_FACTORS,
    "diet_mix",
    *(
        f"{quality}+{limit}" if quality else limit
        for quality in ("", "energy", "protein", "energy+protein")
        for limit in _COMPOSITION_FACTORS
    ),
)
_NO_FORAGE, _INTAKE, _QUANTITY, _ENERGY, _PROTEIN, _BOTH = range(6)
_LABELS = np.array(_BASE_FACTORS)

#: Tolerances of the two-nutrient vertex solution: box bounds (relative), duality gap (relative,
#: plus QUALITY_TOL times the allowed forage as an absolute floor for capacities near 0), and the
#: multiplier size above which a constraint counts as limiting.
_BOX_TOL = 1e-9
_GAP_TOL = 1e-10
_MULTIPLIER_TOL = 1e-9

#: Largest number of float64 values in one block of the vertex search (about 8 MB).
_VERTEX_BLOCK = 1_000_000


@dataclass(frozen=True)
class NutritionalCapacity:
    """Result of :func:`nutritional_capacity`, one entry per unit.

    Attributes
    ----------
    animal_days : ndarray, shape (units,)
        Nutritional carrying capacity [animal-days].
    eaten_kg : ndarray, shape (units, items)
        Forage eaten at capacity [kg DM].
    limiting_factor : ndarray of str, shape (units,)
        One of :data:`LIMITING_FACTORS`: ``"energy"``, ``"protein"`` or ``"energy+protein"``
        (the diet-quality constraint(s) with a positive Lagrange multiplier: relaxing them would
        raise capacity); ``"quantity"`` (everything allowed is eaten, quality not binding);
        ``"intake"`` (no mix of the available forage reaches the target diet quality, so
        capacity is 0); ``"no_forage"`` (nothing available after use caps). With
        diet-composition limits also ``"diet_mix"`` (some diet meets the quality targets,
        none that also meets the composition limits: capacity 0) and the binding limits
        joined by "+" in the order energy, protein, diet_share, diet_group (e.g.
        ``"protein+diet_group"``); see :data:`LIMITING_FACTORS`.
    diet_de_kcal_per_g : ndarray, shape (units,)
        Mass-weighted DE of the eaten diet [kcal/g DM]; 0.0 when nothing is eaten.
    diet_dp_pct : ndarray, shape (units,), or None
        Mass-weighted DP of the eaten diet [% DM]; 0.0 when nothing is eaten; None when no
        protein constraint was given.
    marginal_item : ndarray of int, shape (units,)
        Index of the partially eaten item whose quality sets the limit; -1 if none (nothing
        eaten, or everything allowed eaten). With one limiting nutrient it is the item where
        accumulation stops (eaten in part; 0 kg in the degenerate case where the surplus is
        used up exactly at an item boundary). With both constraints binding two items can be
        partial; the one with the lower DE is reported.
    """

    animal_days: np.ndarray
    eaten_kg: np.ndarray
    limiting_factor: np.ndarray
    diet_de_kcal_per_g: np.ndarray
    diet_dp_pct: np.ndarray | None
    marginal_item: np.ndarray


# --- input validation ------------------------------------------------------------------------


def _as_float_array(value: ArrayLike, name: str) -> np.ndarray:
    """Convert to a float64 array or raise InputError naming the argument."""
    try:
        return np.asarray(value, dtype=float)
    except (TypeError, ValueError) as exc:
        raise InputError(
            "must be numeric", source=name, expected="numbers", found=repr(value)[:60]
        ) from exc


def _check_range(
    arr: np.ndarray, name: str, axes: tuple[str, ...], low: float, high: float, low_open: bool
) -> None:
    """Raise InputError at the first value that is NaN, infinite or outside [low, high]."""
    bad = ~np.isfinite(arr) | (arr > high) | ((arr <= low) if low_open else (arr < low))
    if not bad.any():
        return
    index = tuple(np.argwhere(bad)[0]) if arr.ndim else ()
    location = ", ".join(f"{axis} {int(k)}" for axis, k in zip(axes, index, strict=True))
    interval = f"{'(' if low_open else '['}{low:g}, {high:g}]"
    raise InputError(
        "value is missing or out of range",
        source=name,
        location=location or None,
        expected=f"a finite number in {interval}",
        found=repr(float(arr[index])),
    )


def _forage(available_kg: ArrayLike) -> np.ndarray:
    """Available forage as a checked (units, items) array [kg DM]."""
    arr = _as_float_array(available_kg, "available_kg")
    if arr.ndim == 1:
        arr = arr[np.newaxis, :]
    if arr.ndim != 2:
        raise InputError(
            "wrong number of dimensions",
            source="available_kg",
            expected="shape (items,) or (units, items)",
            found=f"shape {arr.shape}",
        )
    _check_range(arr, "available_kg", ("unit", "item"), 0.0, np.inf, False)
    return arr


def _per_item(
    value: ArrayLike, name: str, shape: tuple[int, int], low: float, high: float
) -> np.ndarray:
    """A scalar, (items,) or (units, items) value, checked and broadcast to ``shape``."""
    arr = _as_float_array(value, name)
    axes = {0: (), 1: ("item",), 2: ("unit", "item")}.get(arr.ndim)
    if axes is None or arr.shape != shape[2 - arr.ndim :]:
        raise InputError(
            "shape does not match available_kg",
            source=name,
            expected=f"a scalar, shape ({shape[1]},) or {shape}",
            found=f"shape {arr.shape}",
        )
    _check_range(arr, name, axes, low, high, False)
    return np.broadcast_to(arr, shape)


def _per_unit(
    value: ArrayLike, name: str, n_units: int, low: float, high: float, low_open: bool = False
) -> np.ndarray:
    """A scalar or (units,) value, checked and broadcast to (units,)."""
    arr = _as_float_array(value, name)
    if arr.ndim > 1 or (arr.ndim == 1 and arr.shape[0] != n_units):
        raise InputError(
            "shape does not match the units of available_kg",
            source=name,
            expected=f"a scalar or shape ({n_units},)",
            found=f"shape {arr.shape}",
        )
    _check_range(arr, name, ("unit",) if arr.ndim else (), low, high, low_open)
    return np.broadcast_to(arr, (n_units,))


def _allowed_kg(available: np.ndarray, use_cap: ArrayLike | None) -> np.ndarray:
    """Forage that may be eaten, c_i a_i [kg DM]; the cap defaults to 1 (all of it)."""
    if use_cap is None:
        return available
    return available * _per_item(use_cap, "use_cap", available.shape, 0.0, 1.0)


# --- one nutrient: sort and accumulate -------------------------------------------------------


def _quality_surplus(quality: np.ndarray, threshold: np.ndarray) -> np.ndarray:
    """Item quality minus the per-unit threshold, with |difference| <= QUALITY_TOL set to 0."""
    surplus = quality - threshold[:, np.newaxis]
    return np.where((surplus < 0.0) & (surplus >= -QUALITY_TOL), 0.0, surplus)


def _fill_to_threshold(allowed: np.ndarray, surplus: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Exact one-constraint optimum, vectorised over units (Hobbs & Swift 1985).

    Items are taken in descending ``surplus`` (quality minus threshold); each is eaten in full
    while the running nutrient balance ``sum(surplus * eaten)`` stays >= 0; the first item that
    would drive it negative is eaten in part so that the balance ends at exactly 0.

    Parameters
    ----------
    allowed : ndarray, shape (units, items)
        Upper bound of what may be eaten [kg DM].
    surplus : ndarray, shape (units, items)
        Item quality minus the unit's threshold [kcal/g or %].

    Returns
    -------
    eaten : ndarray, shape (units, items)
        Optimal eaten amounts [kg DM].
    marginal : ndarray of int, shape (units,)
        Index of the item eaten in part (0 kg in the degenerate case where the balance is
        used up exactly at an item boundary); -1 where every allowed item is eaten in full.
    """
    n_units, n_items = allowed.shape
    order = np.argsort(surplus, axis=1)[:, ::-1]  # descending; faster than argsort(-surplus)
    flat = (order + (np.arange(n_units) * n_items)[:, np.newaxis]).ravel()
    allowed_sorted = np.take(allowed, flat).reshape(allowed.shape)
    surplus_sorted = np.take(surplus, flat).reshape(allowed.shape)
    # Non-negative items come first, so the running balance rises, then falls monotonically
    # (floating-point addition of a non-positive term never increases a sum): the items with
    # balance >= 0 form a prefix, and they are eaten in full.
    balance = np.cumsum(surplus_sorted * allowed_sorted, axis=1)
    full = balance >= 0.0
    eaten_sorted = np.where(full, allowed_sorted, 0.0)
    n_full = full.sum(axis=1)
    rows = np.flatnonzero(n_full < n_items)
    k = n_full[rows]
    before = np.where(k > 0, balance[rows, k - 1], 0.0)
    # balance[k] < 0 <= balance[k-1], hence surplus_sorted[rows, k] < 0: no division by zero.
    eaten_sorted[rows, k] = before / -surplus_sorted[rows, k]
    eaten = np.empty_like(eaten_sorted)
    eaten.ravel()[flat] = eaten_sorted.ravel()
    marginal = np.full(n_units, -1, dtype=np.intp)
    marginal[rows] = order[rows, k]
    return eaten, marginal


# --- two nutrients ---------------------------------------------------------------------------


def _meets(eaten: np.ndarray, surplus: np.ndarray) -> np.ndarray:
    """True where the diet meets the threshold within QUALITY_TOL: sum(s x) >= -tol sum(x)."""
    return np.einsum("ij,ij->i", eaten, surplus) >= -QUALITY_TOL * eaten.sum(axis=1)


def _best_dual_vertex(
    allowed: np.ndarray, d: np.ndarray, e: np.ndarray, pair_i: np.ndarray, pair_j: np.ndarray
) -> tuple[np.ndarray, ...]:
    """Best crossing of two lines 1 + lam d_i + mu e_i = 0 in the quadrant lam, mu >= 0.

    The dual of the LP is min over lam, mu >= 0 of g = sum_i A_i max(0, 1 + lam d_i + mu e_i);
    where both constraints bind its minimum lies at such a crossing. Evaluates g at every
    crossing of two items with A > 0 and returns, per unit, lam, mu, g, the 2x2 determinant
    and the two crossing items (i, j) at the smallest g (g = inf if no crossing qualifies).
    """
    di, dj, ei, ej = d[:, pair_i], d[:, pair_j], e[:, pair_i], e[:, pair_j]
    det = di * ej - dj * ei
    with np.errstate(divide="ignore", invalid="ignore"):
        lam = (ei - ej) / det
        mu = (dj - di) / det
    valid = (lam >= 0.0) & (mu >= 0.0) & np.isfinite(lam) & np.isfinite(mu)
    valid &= (allowed[:, pair_i] > 0.0) & (allowed[:, pair_j] > 0.0)
    lam, mu = np.where(valid, lam, 0.0), np.where(valid, mu, 0.0)
    reduced = 1.0 + lam[:, :, None] * d[:, None, :] + mu[:, :, None] * e[:, None, :]
    dual = np.where(valid, np.einsum("mpn,mn->mp", np.maximum(reduced, 0.0), allowed), np.inf)
    best = np.argmin(dual, axis=1)
    rows = np.arange(len(allowed))
    pick = (rows, best)
    return lam[pick], mu[pick], dual[pick], det[pick], pair_i[best], pair_j[best]


def _vertex_block(
    allowed: np.ndarray, d: np.ndarray, e: np.ndarray, pair_i: np.ndarray, pair_j: np.ndarray
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Primal solution at the best dual vertex, with its optimality certificate.

    Complementary slackness: items with positive reduced value 1 + lam d + mu e are eaten in
    full, negative ones not at all, and the two crossing items are set so that both
    constraints hold with equality. The result is certified optimal when it is feasible and
    its total equals the dual value g (weak duality then makes both optimal).

    Returns eaten (m, n), certified (m,) bool, lam (m,), mu (m,).
    """
    lam, mu, dual, det, i, j = _best_dual_vertex(allowed, d, e, pair_i, pair_j)
    rows = np.arange(len(allowed))
    eaten = np.where(1.0 + lam[:, None] * d + mu[:, None] * e > 0.0, allowed, 0.0)
    eaten[rows, i] = 0.0
    eaten[rows, j] = 0.0
    d_rest = np.einsum("ij,ij->i", d, eaten)
    e_rest = np.einsum("ij,ij->i", e, eaten)
    with np.errstate(divide="ignore", invalid="ignore"):
        eaten[rows, i] = (d[rows, j] * e_rest - e[rows, j] * d_rest) / det
        eaten[rows, j] = (e[rows, i] * d_rest - d[rows, i] * e_rest) / det
    lower, upper = -_BOX_TOL * allowed, (1.0 + _BOX_TOL) * allowed
    in_box = np.all((eaten >= lower) & (eaten <= upper), axis=1)
    eaten = np.clip(np.nan_to_num(eaten), 0.0, allowed)
    total = eaten.sum(axis=1)
    gap_tol = _GAP_TOL * np.maximum(dual, total) + QUALITY_TOL * allowed.sum(axis=1)
    certified = in_box & (np.abs(dual - total) <= gap_tol)
    certified &= _meets(eaten, d) & _meets(eaten, e)
    return eaten, certified, lam, mu


def _vertex_solution(
    allowed: np.ndarray, d: np.ndarray, e: np.ndarray
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """:func:`_vertex_block` over blocks of units small enough to bound memory."""
    n_units, n_items = allowed.shape
    pair_i, pair_j = np.triu_indices(n_items, 1)
    eaten = np.zeros_like(allowed)
    certified = np.zeros(n_units, dtype=bool)
    lam, mu = np.zeros(n_units), np.zeros(n_units)
    if pair_i.size == 0:
        return eaten, certified, lam, mu
    step = max(1, _VERTEX_BLOCK // (pair_i.size * n_items))
    for start in range(0, n_units, step):
        block = slice(start, start + step)
        eaten[block], certified[block], lam[block], mu[block] = _vertex_block(
            allowed[block], d[block], e[block], pair_i, pair_j
        )
    return eaten, certified, lam, mu


def _linprog_solution(
    allowed: np.ndarray, d: np.ndarray, e: np.ndarray
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Solve each unit's two-constraint LP with HiGHS; return eaten, lam, mu.

    Each unit is scaled by its largest allowed amount so that HiGHS's absolute tolerances act
    on numbers of order 1; the multipliers lam, mu are those of the scaled problem.
    """
    # Imported here: SciPy's optimizer costs ~0.4 s to import and is needed only for the
    # rare units the exact vertex method cannot settle (tied qualities).
    from scipy.optimize import linprog

    eaten = np.zeros_like(allowed)
    lam, mu = np.zeros(len(allowed)), np.zeros(len(allowed))
    for u in range(len(allowed)):
        scale = allowed[u].max()
        res = linprog(
            -np.ones(allowed.shape[1]),
            A_ub=-np.vstack([d[u], e[u]]),
            b_ub=np.zeros(2),
            bounds=np.column_stack([np.zeros(allowed.shape[1]), allowed[u] / scale]),
            method="highs",
        )
        if res.status != 0:
            raise RuntimeError(f"HiGHS failed on unit {u}: {res.message}")
        eaten[u] = np.clip(res.x, 0.0, allowed[u] / scale) * scale
        lam[u], mu[u] = -res.ineqlin.marginals
    return eaten, lam, mu


def _lowest_de_partial(eaten: np.ndarray, allowed: np.ndarray, de: np.ndarray) -> np.ndarray:
    """Index of the partially eaten item with the lowest DE per unit, -1 if none."""
    partial = (eaten > _BOX_TOL * allowed) & (eaten < (1.0 - _BOX_TOL) * allowed)
    masked = np.where(partial, de, np.inf)
    return np.where(partial.any(axis=1), np.argmin(masked, axis=1), -1)


def _solve_both(
    allowed: np.ndarray, d: np.ndarray, e: np.ndarray, de: np.ndarray
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Units where neither single-nutrient optimum meets the other constraint.

    Returns eaten, marginal item and limiting-factor code for each unit.
    """
    eaten, certified, lam, mu = _vertex_solution(allowed, d, e)
    rest = np.flatnonzero(~certified)
    if rest.size:
        eaten[rest], lam[rest], mu[rest] = _linprog_solution(allowed[rest], d[rest], e[rest])
    energy, protein = lam > _MULTIPLIER_TOL, mu > _MULTIPLIER_TOL
    code = np.where(protein & ~energy, _PROTEIN, np.where(energy & ~protein, _ENERGY, _BOTH))
    return eaten, _lowest_de_partial(eaten, allowed, de), code


def _two_nutrients(
    allowed: np.ndarray, d: np.ndarray, e: np.ndarray, de: np.ndarray
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Exact optimum with DE and DP constraints; return eaten, marginal and code per unit.

    A single-nutrient optimum that also meets the other constraint is optimal, because the
    single-nutrient problem is a relaxation of the two-nutrient one.
    """
    eaten, marginal = _fill_to_threshold(allowed, d)
    code = np.full(len(allowed), _ENERGY)
    energy_ok = _meets(eaten, e)
    protein_eaten, protein_marginal = _fill_to_threshold(allowed, e)
    protein_ok = ~energy_ok & _meets(protein_eaten, d)
    eaten[protein_ok] = protein_eaten[protein_ok]
    marginal[protein_ok] = protein_marginal[protein_ok]
    code[protein_ok] = _PROTEIN
    both = np.flatnonzero(~energy_ok & ~protein_ok)
    if both.size:
        eaten[both], marginal[both], code[both] = _solve_both(
            allowed[both], d[both], e[both], de[both]
        )
    return eaten, marginal, code


# --- results ---------------------------------------------------------------------------------


def _mean_quality(eaten: np.ndarray, total: np.ndarray, quality: np.ndarray) -> np.ndarray:
    """Mass-weighted diet quality; 0.0 where nothing is eaten (never NaN)."""
    weighted = np.einsum("ij,ij->i", eaten, quality)
    return np.divide(weighted, total, out=np.zeros_like(total), where=total > 0.0)


def _assemble(
    allowed: np.ndarray,
    eaten: np.ndarray,
    marginal: np.ndarray,
    code: np.ndarray,
    de: np.ndarray,
    dp: np.ndarray | None,
    intake: np.ndarray,
) -> NutritionalCapacity:
    """Totals, limiting-factor labels and diet quality from a solved problem."""
    total = eaten.sum(axis=1)
    everything = np.all(eaten >= allowed, axis=1)
    code = np.where(everything, _QUANTITY, code)
    code = np.where(total > 0.0, code, _INTAKE)
    code = np.where(allowed.sum(axis=1) > 0.0, code, _NO_FORAGE)
    marginal = np.where((total > 0.0) & ~everything, marginal, -1)
    return NutritionalCapacity(
        animal_days=total / intake,
        eaten_kg=eaten,
        limiting_factor=_LABELS[code],
        diet_de_kcal_per_g=_mean_quality(eaten, total, de),
        diet_dp_pct=None if dp is None else _mean_quality(eaten, total, dp),
        marginal_item=marginal,
    )


# --- diet-composition limits ----------------------------------------------------------------


def _with_composition(
    result: NutritionalCapacity,
    allowed: np.ndarray,
    quality_rows: np.ndarray,
    limits: CompositionRows,
    de: np.ndarray,
    intake: np.ndarray,
    dp: np.ndarray | None,
) -> NutritionalCapacity:
    """Re-solve, with the composition limits, the units whose diet breaks one of them.

    The problem without them is a relaxation: where its optimum meets every composition
    limit it is optimal, and that unit keeps its result unchanged.
    """
    eaten = result.eaten_kg
    redo = np.flatnonzero((eaten.sum(axis=1) > 0.0) & ~meets_rows(eaten, limits.rows))
    if redo.size == 0:
        return result
    n_rows = limits.rows.shape[1]
    composition = np.broadcast_to(limits.rows, (len(eaten), n_rows, eaten.shape[1]))[redo]
    rows = np.concatenate([quality_rows[redo], composition], axis=1)
    family = np.array(["energy", "protein"][: len(quality_rows[0])] + list(limits.family))
    solved, multipliers, _ = solve_homogeneous_lp(allowed[redo], rows)
    eaten, marginal = eaten.copy(), result.marginal_item.copy()
    eaten[redo] = solved
    marginal[redo] = _lowest_de_partial(solved, allowed[redo], de[redo])
    labels = result.limiting_factor.astype(np.array(LIMITING_FACTORS).dtype)
    labels[redo] = composition_labels(allowed[redo], solved, multipliers, family, _MULTIPLIER_TOL)
    total = eaten.sum(axis=1)
    marginal[redo] = np.where(np.isin(labels[redo], ["quantity", "diet_mix"]), -1, marginal[redo])
    return NutritionalCapacity(
        animal_days=total / intake,
        eaten_kg=eaten,
        limiting_factor=labels,
        diet_de_kcal_per_g=_mean_quality(eaten, total, de),
        diet_dp_pct=None if dp is None else _mean_quality(eaten, total, dp),
        marginal_item=marginal,
    )


# --- public API ------------------------------------------------------------------------------


def nutritional_capacity(
    available_kg: ArrayLike,
    de_kcal_per_g: ArrayLike,
    intake_kg_per_day: ArrayLike,
    de_min_kcal_per_g: ArrayLike,
    *,
    dp_pct: ArrayLike | None = None,
    dp_min_pct: ArrayLike | None = None,
    use_cap: ArrayLike | None = None,
    max_diet_share: ArrayLike | None = None,
    diet_groups: ArrayLike | None = None,
    min_group_share: ArrayLike | None = None,
    max_group_share: ArrayLike | None = None,
) -> NutritionalCapacity:
    """Nutritional carrying capacity per unit at a minimum diet DE (and optionally DP).

    Parameters
    ----------
    available_kg : array_like, shape (units, items) or (items,)
        Available dry forage of each item in each unit [kg DM]; >= 0.
    de_kcal_per_g : array_like, shape (items,) or (units, items)
        Digestible energy of each item [kcal/g DM]; >= 0.
    intake_kg_per_day : array_like, scalar or shape (units,)
        Dry-matter intake of one animal [kg DM/(animal day)]; > 0.
    de_min_kcal_per_g : array_like, scalar or shape (units,)
        Minimum DE of the mixed diet for the target nutritional state, T [kcal/g DM]; >= 0.
    dp_pct : array_like, shape (items,) or (units, items), optional
        Digestible protein of each item [% DM]; may be negative (low-protein forage).
    dp_min_pct : array_like, scalar or shape (units,), optional
        Minimum DP of the mixed diet, P [% DM]. Give it together with ``dp_pct``.
    use_cap : array_like, scalar, (items,) or (units, items), optional
        Largest fraction of each item that may be eaten, c in [0, 1]; default 1.
    max_diet_share : array_like, shape (items,) or (units, items), optional
        Largest share of each item in the diet, s in [0, 1] [-]; 1 sets no limit.
    diet_groups : array_like of bool, shape (groups, items), optional
        Membership of items in groups (e.g. growth forms); an item may be in several groups.
    min_group_share, max_group_share : array_like, shape (groups,), optional
        Smallest and largest share of each group in the diet, m <= M in [0, 1] [-];
        defaults 0 and 1. Only with ``diet_groups``.

    Returns
    -------
    NutritionalCapacity
        Animal-days, eaten forage, limiting factor, diet quality and marginal item per unit.

    Raises
    ------
    nutricap.errors.InputError
        For a wrong shape, a NaN or infinite value, negative forage or DE, intake <= 0, a cap
        or share outside [0, 1], only one of ``dp_pct``/``dp_min_pct``, group shares without
        ``diet_groups``, non-boolean groups, or a group minimum above its maximum.

    Notes
    -----
    The linear programme (Hobbs & Swift 1985; with DP, Hanley & Rogers 1989), with allowed
    forage A_i = c_i a_i [kg]:

    .. math::

        \\max \\sum_i x_i \\quad \\text{s.t.} \\quad 0 \\le x_i \\le A_i,\\quad
        \\sum_i x_i (q_i - T) \\ge 0,\\quad \\sum_i x_i (p_i - P) \\ge 0

    and animal-days = sum_i x_i / intake. With DE only it is a fractional knapsack: items with
    q_i >= T are eaten in full, then items below T in descending q while the accumulated
    surplus sum (q_i - T) x_i stays >= 0; the marginal item k is eaten in part,

    .. math:: x_k = \\frac{\\sum_{j \\text{ before } k} (q_j - T) A_j}{T - q_k}

    so that the diet DE equals T exactly. An item whose DE is within ``QUALITY_TOL`` of T
    counts as meeting T. With DP as well, see ``docs/methods.md``.

    Diet-composition constraints (common practice in diet linear programmes), with
    X = sum_j x_j:

    .. math::

        x_i \\le s_i X, \\qquad m_g X \\le \\sum_{i \\in g} x_i \\le M_g X

    All constraints but the box are homogeneous, so x = 0 is always feasible. A unit whose
    optimum without them already meets them keeps it (a relaxation's optimum that is feasible
    is optimal); the others are solved by a batched bounded-variable simplex, each answer
    certified by LP duality, or else by HiGHS (:mod:`nutricap.science.diet_lp`). A limit
    binds when its Lagrange multiplier exceeds 1e-9, as for energy and protein; the label
    joins the binding families (``"energy+diet_share"``). ``"diet_mix"``: a diet meets the
    quality targets without the composition limits, but only x = 0 meets them all.

    References
    ----------
    Hobbs, N.T. & Swift, D.M. 1985. J. Wildl. Manage. 49:814-822.
    Hanley, T.A. & Rogers, J.J. 1989. USDA For. Serv. Res. Note PNW-RN-485.

    Examples
    --------
    Three forages (numbers invented for the example), diet DE at least 2.6 kcal/g:

    >>> r = nutritional_capacity([100.0, 200.0, 300.0], [3.0, 2.5, 2.2], 2.0, 2.6)
    >>> r.animal_days, r.limiting_factor, r.marginal_item
    (array([175.]), array(['energy'], dtype='<U14'), array([2]))
    """
    available = _forage(available_kg)
    shape = available.shape
    de = _per_item(de_kcal_per_g, "de_kcal_per_g", shape, 0.0, np.inf)
    intake = _per_unit(intake_kg_per_day, "intake_kg_per_day", shape[0], 0.0, np.inf, True)
    de_min = _per_unit(de_min_kcal_per_g, "de_min_kcal_per_g", shape[0], 0.0, np.inf)
    allowed = _allowed_kg(available, use_cap)
    d = _quality_surplus(de, de_min)
    if (dp_pct is None) != (dp_min_pct is None):
        raise InputError(
            "give both or neither of the item DP and the minimum diet DP",
            source="dp_pct" if dp_pct is None else "dp_min_pct",
            expected="a value",
            found="None",
        )
    limits = composition_rows(shape, max_diet_share, diet_groups, min_group_share, max_group_share)
    dp = None
    if dp_pct is None:
        eaten, marginal = _fill_to_threshold(allowed, d)
        code = np.full(shape[0], _ENERGY)
        surpluses = [d]
    else:
        dp = _per_item(dp_pct, "dp_pct", shape, -np.inf, 100.0)
        dp_min = _per_unit(dp_min_pct, "dp_min_pct", shape[0], -np.inf, 100.0)
        e = _quality_surplus(dp, dp_min)
        eaten, marginal, code = _two_nutrients(allowed, d, e, de)
        surpluses = [d, e]
    result = _assemble(allowed, eaten, marginal, code, de, dp, intake)
    if limits is None:
        return result
    quality_rows = -np.stack(surpluses, axis=1)
    return _with_composition(result, allowed, quality_rows, limits, de, intake, dp)


def ecological_capacity(
    available_kg: ArrayLike,
    de_kcal_per_g: ArrayLike,
    de_requirement_kcal_per_day: ArrayLike,
    *,
    use_cap: ArrayLike | None = None,
) -> np.ndarray:
    """Ecological carrying capacity: available DE over the daily DE requirement.

    Parameters
    ----------
    available_kg : array_like, shape (units, items) or (items,)
        Available dry forage [kg DM]; >= 0.
    de_kcal_per_g : array_like, shape (items,) or (units, items)
        Digestible energy of each item [kcal/g DM]; >= 0.
    de_requirement_kcal_per_day : array_like, scalar or shape (units,)
        DE requirement of one animal, usually at maintenance [kcal/(animal day)]; > 0.
    use_cap : array_like, scalar, (items,) or (units, items), optional
        Largest fraction of each item that may be eaten, in [0, 1]; default 1.

    Returns
    -------
    ndarray, shape (units,)
        Capacity [animal-days].

    Notes
    -----
    No diet-quality constraint: every allowed kilogram counts, whatever its DE.

    .. math:: \\mathrm{ECC} = \\frac{1000 \\sum_i c_i a_i q_i}{R}

    with 1000 g/kg converting [kg] x [kcal/g] to [kcal].

    References
    ----------
    Hobbs, N.T. & Swift, D.M. 1985. J. Wildl. Manage. 49:814-822 (capacity without a
    diet-quality constraint, the figure NCC is set against).

    Examples
    --------
    >>> ecological_capacity([100.0, 200.0], [3.0, 2.5], 4000.0)
    array([200.])
    """
    available = _forage(available_kg)
    de = _per_item(de_kcal_per_g, "de_kcal_per_g", available.shape, 0.0, np.inf)
    name = "de_requirement_kcal_per_day"
    requirement = _per_unit(de_requirement_kcal_per_day, name, len(available), 0.0, np.inf, True)
    allowed = _allowed_kg(available, use_cap)
    return np.einsum("ij,ij->i", allowed, de) * G_PER_KG / requirement


def allowable_use_capacity(
    available_kg: ArrayLike, allowable_use: ArrayLike, intake_kg_per_day: ArrayLike
) -> np.ndarray:
    """Range-management capacity: forage usable at allowable use over daily intake.

    Parameters
    ----------
    available_kg : array_like, shape (units, items) or (items,)
        Available dry forage [kg DM]; >= 0.
    allowable_use : array_like, scalar, (items,) or (units, items)
        Allowable use of each item, the fraction that may be removed, in [0, 1].
    intake_kg_per_day : array_like, scalar or shape (units,)
        Dry-matter intake of one animal [kg DM/(animal day)]; > 0.

    Returns
    -------
    ndarray, shape (units,)
        Capacity [animal-days].

    Notes
    -----
    .. math:: \\mathrm{AUC} = \\frac{\\sum_i u_i a_i}{I}

    References
    ----------
    Holechek, J.L. 1988. An approach for setting the stocking rate. Rangelands 10:10-14
    (form of the equation from memory; no readable copy of the paper was found, so it is
    still unchecked).

    Examples
    --------
    >>> allowable_use_capacity([1000.0, 500.0], [0.5, 0.3], 2.5)
    array([260.])
    """
    available = _forage(available_kg)
    use = _per_item(allowable_use, "allowable_use", available.shape, 0.0, 1.0)
    intake = _per_unit(intake_kg_per_day, "intake_kg_per_day", len(available), 0.0, np.inf, True)
    return np.einsum("ij,ij->i", available, use) / intake
