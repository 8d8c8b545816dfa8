"""Vegetation-treatment responses over the years after treatment.

A response table lists, for some years since treatment, a biomass multiplier
and shifts of digestible energy and crude protein. Between listed years the
response is interpolated linearly; before the first listed year the first
value holds; after the last listed year the forage is back to its untreated
state (multiplier 1, shifts 0). Interpolation of tabulated values (common
practice); the response values themselves are the user's (or, in the example,
invented for the example).
"""

from __future__ import annotations

import numpy as np


def response_at(years_listed, values, years_since, untreated: float):
    """Value of a treatment response ``years_since`` years after treatment.

    Parameters
    ----------
    years_listed : array, shape (n,)
        Years since treatment at which the response is given [years], ascending.
    values : array, shape (n,)
        The response at those years (a multiplier [-] or a shift, in its unit).
    years_since : numeric
        Years since treatment [years]; negative means not yet treated.
    untreated : float
        The value meaning "no effect" (1 for a multiplier, 0 for a shift).

    Returns
    -------
    numeric
        ``untreated`` before treatment and after the last listed year; otherwise
        the linear interpolation of ``values`` (the first value before the first
        listed year).

    Examples
    --------
    >>> float(response_at([1, 5], [2.0, 1.2], 3, untreated=1.0))
    1.6
    """
    years = np.asarray(years_listed, dtype=float)
    since = np.asarray(years_since, dtype=float)
    inside = (since >= 0) & (since <= years[-1])
    interpolated = np.interp(since, years, np.asarray(values, dtype=float))
    return np.where(inside, interpolated, untreated)
