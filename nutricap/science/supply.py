"""Forage supply from clip plots: unit conversion and stratum statistics.

Pure functions on arrays; the plots table is read in
:mod:`nutricap.landscape.plots`.
"""

from __future__ import annotations

import numpy as np

KG_PER_HA_PER_G_PER_M2 = 10.0
"""1 g/m² = 10 kg/ha (1 ha = 10,000 m², 1 kg = 1,000 g)."""


def biomass_kg_per_ha(dry_mass_g, frame_area_m2):
    """Dry forage per hectare from the dry mass clipped in one frame.

    Parameters
    ----------
    dry_mass_g : numeric
        Oven-dry mass clipped in the frame [g].
    frame_area_m2 : numeric
        Area of the frame [m²]; must be positive.

    Returns
    -------
    numeric
        Dry biomass [kg/ha].

    Notes
    -----
    ``B = 10 · m / A`` with m in g and A in m², because
    1 g/m² × 10,000 m²/ha ÷ 1,000 g/kg = 10 kg/ha (SI definitions).

    Examples
    --------
    >>> float(biomass_kg_per_ha(12.5, 0.25))
    500.0
    """
    return (
        KG_PER_HA_PER_G_PER_M2
        * np.asarray(dry_mass_g, dtype=float)
        / np.asarray(frame_area_m2, dtype=float)
    )


def stratum_mean_and_standard_error(biomass_kg_per_ha_by_plot, stratum_index, n_strata):
    """Mean, standard error and plot count of biomass per stratum.

    Parameters
    ----------
    biomass_kg_per_ha_by_plot : array, shape (plots, classes)
        Biomass of each forage class on each plot [kg/ha]; a class not found
        on a plot is 0, not missing.
    stratum_index : int array, shape (plots,)
        Stratum of each plot, 0 … n_strata-1.
    n_strata : int
        Number of strata.

    Returns
    -------
    mean, standard_error : arrays, shape (n_strata, classes) [kg/ha]
        Sample mean and standard error of the mean (sample standard deviation
        with n−1 ÷ √n). The standard error is NaN where a stratum has fewer
        than two plots (it cannot be estimated).
    n_plots : int array, shape (n_strata,)

    Notes
    -----
    Standard sample statistics (common practice): x̄ = Σx/n,
    SE = sqrt(Σ(x−x̄)²/(n−1)) / √n.
    """
    values = np.asarray(biomass_kg_per_ha_by_plot, dtype=float)
    index = np.asarray(stratum_index, dtype=int)
    n_plots = np.bincount(index, minlength=n_strata)
    sums = np.zeros((n_strata, values.shape[1]))
    np.add.at(sums, index, values)
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = sums / n_plots[:, None]
        squares = np.zeros_like(sums)
        np.add.at(squares, index, (values - mean[index]) ** 2)
        variance = squares / (n_plots[:, None] - 1)
        standard_error = np.sqrt(variance / n_plots[:, None])
    mean = np.where(n_plots[:, None] > 0, mean, np.nan)
    standard_error = np.where(n_plots[:, None] > 1, standard_error, np.nan)
    return mean, standard_error, n_plots
