"""Forage quality: digestible energy and digestible protein of forage, and of a mixed diet.

Pure, vectorised functions (floats or numpy arrays; a scalar in gives a float out).

References
----------
Robbins, C.T. 1993. Wildlife Feeding and Nutrition, 2nd ed. Academic Press, San Diego.
Robbins, C.T., Hanley, T.A., Hagerman, A.E., Hjeljord, O., Baker, D.L., Schwartz, C.C. &
    Mautz, W.W. 1987. Role of tannins in defending plants against ruminants: reduction in
    protein availability. Ecology 68:98-107.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike

from nutricap.errors import InputError
from nutricap.science._checks import FloatOrArray, as_output, checked_array

#: Typical gross energy of forage dry matter [kcal/g] (Robbins 1993; from memory: most forages
#: lie near 4.4-4.5 kcal/g, more for resinous or waxy browse). Not found in a readable source;
#: one secondary deer-requirement table (scribd.com/document/229748738) assumes 4.5 kcal/g,
#: citing Robbins 1993.
GROSS_ENERGY_KCAL_PER_G_DEFAULT = 4.4

#: Coefficients of the digestible-protein equation of Robbins et al. (1987). The abstract (read,
#: scilit.net) says digestible protein is a linear function of crude protein in low-tannin
#: forages and is lowered in proportion to the tannins' protein-precipitating capacity; the
#: paper's numbers were not read. The low-tannin line DP = -3.87 + 0.9283 CP was read in a
#: secondary deer-requirement table ("Deer Metabolic Requirements", scribd.com/document/229748738),
#: which attributes it to Hanley, Robbins, Hagerman & McArthur 1992, Ecology 73:537-541. That
#: copy's font loses the digit 7: it prints "-3.8 + 0.9283 (CP)", and its own arithmetic shows
#: the loss elsewhere (36.68 x "1.6" = 61.25 only for 1.67). The BSA slope -11.82 is
#: from memory. Units: DP and CP in % of dry matter, BSA in mg/mg.
ROBBINS_1987_DP_COEFFICIENTS = {
    "intercept_pct": -3.87,
    "cp_slope": 0.9283,
    "bsa_slope_pct_per_mg_per_mg": -11.82,
    "source": (
        "Robbins et al. 1987, Ecology 68:98-107 (abstract read); -3.87 + 0.9283 CP read in a "
        "secondary table citing Hanley et al. 1992, Ecology 73:537-541; BSA slope from memory"
    ),
}


def _percent(values: ArrayLike, name: str) -> np.ndarray:
    return checked_array(values, name, minimum=0.0, maximum=100.0)


def digestible_energy_kcal_per_g(
    dmd_pct: ArrayLike, gross_energy_kcal_per_g: ArrayLike = GROSS_ENERGY_KCAL_PER_G_DEFAULT
) -> FloatOrArray:
    """Digestible energy of forage from its dry-matter digestibility.

    Parameters
    ----------
    dmd_pct : float or array_like
        Dry-matter digestibility [%], 0-100.
    gross_energy_kcal_per_g : float or array_like, default 4.4
        Gross energy of the forage dry matter [kcal/g], > 0.

    Returns
    -------
    float or numpy.ndarray
        Digestible energy [kcal/g dry matter].

    Notes
    -----
    ``DE = GE * DMD / 100``: energy digestibility is approximated by dry-matter digestibility
    (Robbins 1993, from memory). Arrays broadcast against each other.

    References
    ----------
    Robbins, C.T. 1993. Wildlife Feeding and Nutrition, 2nd ed.

    Examples
    --------
    >>> digestible_energy_kcal_per_g(50.0, 4.4)
    2.2
    """
    digestibility = _percent(dmd_pct, "dmd_pct") / 100.0
    gross = checked_array(
        gross_energy_kcal_per_g, "gross_energy_kcal_per_g", minimum=0.0, minimum_exclusive=True
    )
    return as_output(gross * digestibility)


def digestible_protein_pct(
    cp_pct: ArrayLike, tannin_bsa_mg_per_mg: ArrayLike = 0.0
) -> FloatOrArray:
    """Digestible protein of forage from crude protein and tannin protein precipitation.

    Parameters
    ----------
    cp_pct : float or array_like
        Crude protein [% of dry matter], 0-100.
    tannin_bsa_mg_per_mg : float or array_like, default 0
        Protein-precipitating capacity of the forage's tannins: bovine serum albumin
        precipitated per unit forage dry matter [mg BSA / mg forage], >= 0. Zero for
        low-tannin forage (grasses, most winter deciduous browse stems).

    Returns
    -------
    float or numpy.ndarray
        Digestible protein [% of dry matter]; negative for forage below about 4.2 % crude
        protein (or with enough tannin).

    Notes
    -----
    ``DP = -3.87 + 0.9283 * CP - 11.82 * BSA`` (Robbins et al. 1987; the CP terms read
    in a secondary source citing Hanley et al. 1992, the BSA slope from memory, see
    :data:`ROBBINS_1987_DP_COEFFICIENTS`). The relation is linear and is **not** clipped at 0:
    the negative intercept is metabolic faecal protein, lost in proportion to the dry matter
    eaten, so a forage below about 4.2 % CP costs the animal more protein than it supplies.
    A mixed diet's DP is then the mass-weighted mean of the unclipped item values
    (:func:`mixed_diet_quality`), which is what the capacity solver needs. Clipping an item
    at 0 would credit low-protein forage with protein it does not supply.

    References
    ----------
    Robbins, C.T., Hanley, T.A., Hagerman, A.E. et al. 1987. Role of tannins in defending
    plants against ruminants: reduction in protein availability. Ecology 68:98-107.

    Examples
    --------
    >>> round(digestible_protein_pct(10.0), 3)
    5.413
    >>> round(digestible_protein_pct(2.0), 4)
    -2.0134
    """
    crude = _percent(cp_pct, "cp_pct")
    tannin = checked_array(tannin_bsa_mg_per_mg, "tannin_bsa_mg_per_mg", minimum=0.0)
    c = ROBBINS_1987_DP_COEFFICIENTS
    linear = c["intercept_pct"] + c["cp_slope"] * crude + c["bsa_slope_pct_per_mg_per_mg"] * tannin
    return as_output(linear)


def mixed_diet_quality(eaten_kg: ArrayLike, quality: ArrayLike) -> FloatOrArray:
    """Quality of a mixed diet: the mass-weighted mean quality of what is eaten.

    Parameters
    ----------
    eaten_kg : array_like
        Dry mass eaten of each forage class [kg], >= 0; forage classes on the last axis.
    quality : array_like
        Quality of each forage class in any concentration unit (kcal/g, % of dry matter);
        broadcast against ``eaten_kg``. May be non-finite only where nothing is eaten.

    Returns
    -------
    float or numpy.ndarray
        Mass-weighted mean quality along the last axis, in the unit of ``quality``.
        Where nothing is eaten the result is 0.0 (no diet, no quality), never NaN.

    Notes
    -----
    ``q_diet = sum_i m_i q_i / sum_i m_i``; 0 where ``sum_i m_i = 0``.

    Raises
    ------
    nutricap.errors.InputError
        A negative or non-finite mass, or a non-finite quality for a class that is eaten.

    Examples
    --------
    >>> mixed_diet_quality([1.0, 3.0], [2.0, 3.0])
    2.75
    """
    mass = np.atleast_1d(checked_array(eaten_kg, "eaten_kg", minimum=0.0))
    try:
        value = np.asarray(quality, dtype=float)
    except (TypeError, ValueError) as error:
        raise InputError("quality must be numeric", found=repr(quality)) from error
    try:
        mass, value = np.broadcast_arrays(mass, value)
    except ValueError as error:
        raise InputError(
            "eaten_kg and quality have shapes that do not match",
            found=f"{np.shape(eaten_kg)} and {np.shape(quality)}",
        ) from error
    eaten = mass > 0.0
    if not np.all(np.isfinite(value[eaten])):
        raise InputError("quality is missing or not finite for a forage class that is eaten")
    # Masses are scaled by their largest value per diet first, so tiny (even subnormal)
    # masses cannot underflow in the products; the mean is unchanged by the scaling.
    largest = mass.max(axis=-1, keepdims=True)
    weight = np.divide(mass, largest, out=np.zeros_like(mass), where=largest > 0.0)
    total = weight.sum(axis=-1)
    weighted = (weight * np.where(eaten, value, 0.0)).sum(axis=-1)
    mean = np.divide(weighted, total, out=np.zeros_like(total), where=total > 0.0)
    return as_output(mean)
