"""Checks at the public boundary of the science functions, shared by its modules."""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike

from nutricap.errors import InputError

FloatOrArray = float | np.ndarray


def checked_array(
    values: ArrayLike,
    name: str,
    *,
    minimum: float | None = None,
    maximum: float | None = None,
    minimum_exclusive: bool = False,
) -> np.ndarray:
    """Return ``values`` as a float array, or raise InputError naming ``name``.

    Values must be finite and within ``[minimum, maximum]`` (``(minimum, maximum]`` when
    ``minimum_exclusive``). Shared by the science modules for their public-boundary checks.
    """
    try:
        array = np.asarray(values, dtype=float)
    except (TypeError, ValueError) as error:
        raise InputError(f"{name} must be numeric", found=repr(values)) from error
    bad = ~np.isfinite(array)
    if minimum is not None:
        bad |= (array <= minimum) if minimum_exclusive else (array < minimum)
    if maximum is not None:
        bad |= array > maximum
    if np.any(bad):
        raise InputError(
            f"{name} is out of range",
            expected=range_text(minimum, maximum, minimum_exclusive),
            found=f"{array[bad].flat[0]:g}",
        )
    return array


def range_text(minimum: float | None, maximum: float | None, exclusive: bool) -> str:
    """Describe the accepted range in words for an error message."""
    parts = []
    if minimum is not None:
        parts.append(f"{'>' if exclusive else '>='} {minimum:g}")
    if maximum is not None:
        parts.append(f"<= {maximum:g}")
    return "a finite number " + " and ".join(parts) if parts else "a finite number"


def as_output(array: np.ndarray) -> FloatOrArray:
    """Return a Python float for a 0-d result, the array otherwise."""
    return float(array) if np.ndim(array) == 0 else array
