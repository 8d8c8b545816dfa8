"""Current use of forage: demand, its allocation to forage classes, utilization, flags.

Pure, vectorised functions over units × forage classes.

The allocation rule (our stated choice, documented in docs/methods.md): the
herd's demand falls on each class in proportion to its *usable* forage
(allowable use × available), weighted by a per-class preference (1 for every
class by default). Allowable use is the range-management expression of how
heavily a class can be taken relative to the others (Holechek 1988), so under
equal preference every class is used to the same fraction of its allowable
use, and a herd exactly at the allowable-use capacity uses every class exactly
to its allowable level.
"""

from __future__ import annotations

import numpy as np


def seasonal_demand_kg(animals, intake_kg_per_day, season_days):
    """Dry forage the animals eat in the season [kg].

    Parameters
    ----------
    animals : numeric
        Number of animals (per unit).
    intake_kg_per_day : numeric
        Dry-matter intake of the average animal [kg DM/animal/day].
    season_days : numeric
        Length of the season [days].

    Returns
    -------
    numeric
        ``animals × intake × days`` [kg DM].
    """
    return np.asarray(animals, dtype=float) * intake_kg_per_day * season_days


def allocate_demand_kg(demand_kg, available_kg, allowable_use, preference=None):
    """Split each unit's demand over forage classes.

    Parameters
    ----------
    demand_kg : array, shape (units,)
        Seasonal demand [kg DM].
    available_kg : array, shape (units, classes)
        Available forage [kg DM].
    allowable_use : array, shape (classes,) or (units, classes)
        Allowable use [fraction, 0–1].
    preference : array, shape (classes,), optional
        Relative preference weights [-], default 1 for every class.

    Returns
    -------
    array, shape (units, classes)
        Demand falling on each class [kg DM]:
        ``D · w_c / Σ w`` with ``w_c = preference_c · allowable_use_c · available_c``.
        A unit with no usable forage gets no allocation (its demand is unmet).
    """
    available = np.asarray(available_kg, dtype=float)
    weights = np.asarray(allowable_use, dtype=float) * available
    if preference is not None:
        weights = weights * np.asarray(preference, dtype=float)
    total = weights.sum(axis=-1, keepdims=True)
    share = np.divide(weights, total, out=np.zeros_like(weights), where=total > 0)
    return np.asarray(demand_kg, dtype=float)[..., None] * share


def utilization_fraction(eaten_kg, available_kg):
    """Fraction of the available forage that is eaten [-]; 0 where nothing is available."""
    eaten = np.asarray(eaten_kg, dtype=float)
    available = np.asarray(available_kg, dtype=float)
    return np.divide(eaten, available, out=np.zeros_like(eaten), where=available > 0)


def animals_at_use_limit(current_animals, use_fraction, allowable_use):
    """Animals at which the most used class reaches its allowable use.

    Use is proportional to the number of animals under a fixed allocation, so
    the limit is ``current × min_c(allowable_use_c / use_c)`` over the classes
    considered (those with ``use_c > 0``).

    Parameters
    ----------
    current_animals : array, shape (units,)
    use_fraction : array, shape (units, classes)
        Use of each class by the current animals [-]; classes that must not be
        considered (e.g. not key) should be given as 0.
    allowable_use : array, shape (classes,) or (units, classes) [-]
        The use the herd may make of each class: its allowable use, less what other
        herbivores use already; 0 where they use it all (or more).

    Returns
    -------
    array, shape (units,)
        Animals at the limit; ``inf`` where no considered class is used (among them every
        unit without animals: no use, so no limit is reached).
    """
    use = np.asarray(use_fraction, dtype=float)
    allowed = np.broadcast_to(np.maximum(np.asarray(allowable_use, dtype=float), 0.0), use.shape)
    ratio = np.divide(allowed, use, out=np.full_like(use, np.inf), where=use > 0).min(axis=-1)
    current = np.broadcast_to(np.asarray(current_animals, dtype=float), ratio.shape)
    return np.multiply(current, ratio, out=np.full_like(ratio, np.inf), where=np.isfinite(ratio))


UNMET_TOLERANCE = 1e-12
"""Unmet demand up to this fraction of the demand is rounding, and counts as met [-]."""


def allocate_within_caps_kg(demand_kg, headroom_kg, preference=None):
    """Split each unit's demand over forage items, no item beyond its headroom.

    The allocation of another herd that eats before the target species' capacity is solved:
    demand falls on each item in proportion to preference × headroom (as
    :func:`allocate_demand_kg`), and an item that would receive more than its headroom
    is filled to it and the rest goes to the others in the same proportions.

    Parameters
    ----------
    demand_kg : array, shape (units,)
        The herd's seasonal demand in each unit [kg DM]; >= 0.
    headroom_kg : array, shape (units, items)
        Forage each item may still lose within its allowable use [kg DM]; >= 0.
    preference : array, shape (items,) or (units, items), optional
        The herd's preference weights [-], >= 0 (0: not eaten); default 1 for every item.

    Returns
    -------
    taken : array, shape (units, items)
        Forage taken from each item [kg DM], ``0 <= taken <= headroom``.
    unmet : array, shape (units,)
        Demand the headroom of the preferred items cannot meet [kg DM], >= 0 (0 where it
        is within :data:`UNMET_TOLERANCE` of the demand: rounding).

    Notes
    -----
    ``taken_i = h_i · min(1, λ · p_i)``, with one fill level ``λ >= 0`` per unit such that
    ``Σ_i taken_i = min(D, Σ_{p_i > 0} h_i)``. ``λ`` is found exactly: ``f(λ) = Σ h_i min(1,
    λ p_i)`` is piecewise linear and increasing with breakpoints ``1 / p_i``, so the items
    are sorted by breakpoint and the segment holding the target is solved for ``λ``. Below
    every breakpoint this is the proportional rule ``D · p_i h_i / Σ p h``. Where the demand
    reaches the preferred items' whole headroom every one of them is filled to exactly its
    headroom (``λ p_i`` computed in floating point may fall an ulp short of 1, and the
    residue, 1e-16 of the headroom, would count as forage still usable). The same
    allocation minimises ``Σ taken_i² / (p_i h_i)`` subject to the demand and the caps
    (its KKT conditions), which is how the tests check it independently. Our stated rule
    (docs/methods.md), not taken from a publication.
    """
    headroom = np.asarray(headroom_kg, dtype=float)
    demand = np.asarray(demand_kg, dtype=float)
    weight = np.ones_like(headroom) if preference is None else np.asarray(preference, float)
    weight = np.broadcast_to(weight, headroom.shape)
    level = _fill_level(demand, headroom, weight)
    fill = np.where(weight > 0, np.minimum(1.0, level[..., None] * weight), 0.0)
    full = demand >= np.where(weight > 0, headroom, 0.0).sum(axis=-1)
    fill[full] = weight[full] > 0
    taken = headroom * fill
    unmet = demand - taken.sum(axis=-1)
    return taken, np.where(unmet > UNMET_TOLERANCE * demand, unmet, 0.0)


def _fill_level(demand_kg, headroom_kg, weight):
    """The fill level λ per unit of :func:`allocate_within_caps_kg`."""
    with np.errstate(divide="ignore"):
        breakpoint = np.where(weight > 0, 1.0 / np.where(weight > 0, weight, 1.0), np.inf)
    order = np.argsort(breakpoint, axis=-1, kind="stable")
    b = np.take_along_axis(breakpoint, order, axis=-1)
    h = np.where(np.isfinite(b), np.take_along_axis(headroom_kg, order, axis=-1), 0.0)
    ph = np.take_along_axis(weight, order, axis=-1) * h
    zero = np.zeros((*h.shape[:-1], 1))
    before = np.concatenate([zero, np.cumsum(h, axis=-1)[..., :-1]], axis=-1)
    from_here = np.cumsum(ph[..., ::-1], axis=-1)[..., ::-1]
    after = np.concatenate([from_here[..., 1:], zero], axis=-1)
    target = np.minimum(demand_kg, before[..., -1] + h[..., -1])
    with np.errstate(invalid="ignore"):
        at_break = np.where(np.isfinite(b), before + h + b * after, np.inf)
    segment = np.argmax(at_break >= target[..., None], axis=-1)[..., None]
    filled = np.take_along_axis(before, segment, axis=-1)[..., 0]
    slope = np.take_along_axis(from_here, segment, axis=-1)[..., 0]
    level = np.divide(target - filled, slope, out=np.zeros_like(slope), where=slope > 0)
    return np.maximum(level, 0.0)
