"""Clip plots → dry forage per stratum and forage class (capability 1a).

A plot with no record of a class carries zero of that class, not a missing
value: the plots table is long (one row per plot × class found) and is
completed with zeros before means are taken. A bare plot (no forage at all) is
one row with an empty ``forage_class`` and mass 0: it counts as zero of every
class in its stratum (leaving it out would bias the stratum's means upward).
"""

from __future__ import annotations

import difflib
from dataclasses import dataclass

import numpy as np
import pandas as pd

from nutricap.errors import TableError
from nutricap.inputs.columns import Source, check_known
from nutricap.science.supply import stratum_mean_and_standard_error

BARE_PLOT_CLASS = ""
"""The ``forage_class`` of a bare plot's one row (no forage clipped)."""


@dataclass(frozen=True)
class StratumSupply:
    """Dry forage per stratum and forage class.

    Attributes
    ----------
    strata, classes : list of str
        Row and column labels.
    mean_kg_per_ha, se_kg_per_ha : arrays, shape (strata, classes) [kg/ha]
        Mean and standard error over plots (zero and NaN for strata declared
        to carry no forage).
    n_plots : int array, shape (strata,)
    """

    strata: list[str]
    classes: list[str]
    mean_kg_per_ha: np.ndarray
    se_kg_per_ha: np.ndarray
    n_plots: np.ndarray

    def table(self) -> pd.DataFrame:
        """Long table ``stratum, forage_class, mean_kg_per_ha, se_kg_per_ha, n_plots``."""
        strata = np.repeat(self.strata, len(self.classes))
        classes = np.tile(self.classes, len(self.strata))
        return pd.DataFrame(
            {
                "stratum": strata,
                "forage_class": classes,
                "mean_kg_per_ha": self.mean_kg_per_ha.ravel(),
                "se_kg_per_ha": self.se_kg_per_ha.ravel(),
                "n_plots": np.repeat(self.n_plots, len(self.classes)),
            }
        )


def plot_biomass_matrix(plots: pd.DataFrame, classes: list[str]) -> pd.DataFrame:
    """Plots × classes biomass [kg/ha], zero where a plot has no record of a class.

    The index is ``plot_id``; a ``stratum`` column comes first.
    """
    wide = plots.pivot_table(
        index="plot_id",
        columns="forage_class",
        values="biomass_kg_per_ha",
        aggfunc="sum",
        fill_value=0.0,
    ).reindex(columns=classes, fill_value=0.0)
    strata = plots.groupby("plot_id")["stratum"].first()
    wide.insert(0, "stratum", strata.reindex(wide.index))
    return wide


def stratum_supply(
    plots: pd.DataFrame,
    classes: list[str],
    map_strata: list[str],
    *,
    plots_path: Source,
    strata_path: Source,
    strata_without_forage: list[str],
) -> StratumSupply:
    """Mean, standard error and n of biomass per stratum of the map and forage class.

    Raises :class:`TableError` for a plot class not in the forage-class table,
    a plot stratum not on the map, and a mapped stratum with no plots that is
    not declared in ``strata_without_forage``.
    """
    check_known(
        plots,
        "forage_class",
        set(classes) | {BARE_PLOT_CLASS},
        plots_path,
        known_from="the forage-class table (or empty on a bare plot)",
    )
    check_known(
        plots, "stratum", set(map_strata), plots_path, known_from=f"the strata map {strata_path}"
    )
    _require_plots_everywhere(plots, map_strata, strata_path, strata_without_forage)
    wide = plot_biomass_matrix(plots, classes)
    strata = sorted(set(map_strata))
    stratum_index = pd.Index(strata).get_indexer(wide["stratum"])
    mean, se, n_plots = stratum_mean_and_standard_error(
        wide[classes].to_numpy(), stratum_index, len(strata)
    )
    bare = np.isin(strata, strata_without_forage) & (n_plots == 0)
    mean[bare] = 0.0
    return StratumSupply(strata, list(classes), mean, se, n_plots)


def _require_plots_everywhere(
    plots: pd.DataFrame,
    map_strata: list[str],
    strata_path: Source,
    strata_without_forage: list[str],
) -> None:
    sampled = set(plots["stratum"])
    missing = sorted(set(map_strata) - sampled - set(strata_without_forage))
    if missing:
        close = difflib.get_close_matches(missing[0], sorted(sampled), n=1)
        hint = f" (plots use {close[0]!r}; a spelling difference?)" if close else ""
        raise TableError(
            f"stratum {missing[0]!r} is on the map but has no plots{hint}",
            source=strata_path,
            location="attribute 'stratum'",
            expected=(
                "clip plots in every mapped stratum, or the stratum listed in "
                "[supply] strata_without_forage of the project file"
            ),
            found=f"{len(missing)} stratum(s) without plots: " + ", ".join(map(repr, missing)),
        )
