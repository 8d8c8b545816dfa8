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

    Returns
    -------
    array, shape (units,)
        Animals at the limit; ``inf`` where no considered class is used (among them every
        unit without animals: no use, so no limit is reached).
    """
    use = np.asarray(use_fraction, dtype=float)
    allowed = np.broadcast_to(np.asarray(allowable_use, dtype=float), use.shape)
    ratio = np.divide(allowed, use, out=np.full_like(use, np.inf), where=use > 0).min(axis=-1)
    current = np.broadcast_to(np.asarray(current_animals, dtype=float), ratio.shape)
    return np.multiply(current, ratio, out=np.full_like(ratio, np.inf), where=np.isfinite(ratio))
