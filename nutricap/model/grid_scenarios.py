"""Treatment scenarios on the raster grid: every year from the sums of one streamed pass.

The treatment polygons are burnt onto the grid as one more part of the key (unit × stratum ×
treatment polygon, :class:`~nutricap.landscape.grid.supply.TreatedSums`), so the first pass
gives, beside the baseline's sums by unit × stratum, the forage the availability rules leave
in the treated cells of each unit, stratum and polygon. A year only changes which response
applies to a treated key's forage (:func:`nutricap.model.scenarios.response_factors`):

- before the treatment year, or in a year whose response is the identity (every multiplier
  1, no shift, no new stratum), the treated forage stays where it is: the year's problem is
  the baseline's;
- otherwise the treated forage leaves its stratum's items and forms a patch type of its own,
  ``"treatment year"`` in its new stratum (when ``new_stratum`` is set) or its stratum, with
  the shifted quality (:func:`nutricap.model.scenarios.respond`): its forage of each class is
  the response's multiplier × what the rules left of the current biomass; for a class taken
  from the plots of a new stratum, that stratum's plot mean × the share the rules keep.

The rules are proportional to the biomass (exclusions, accessible fraction, snow share,
slope and water reductions), so "multiplier × forage left" equals the rules applied to the
treated biomass; the minimum-forage test is the exception, made on the current forage.
"""

from __future__ import annotations

from dataclasses import dataclass

import geopandas as gpd
import numpy as np
import pandas as pd

from nutricap.inputs.project import ScenarioSection
from nutricap.landscape.grid.supply import GridResult, key_problem
from nutricap.model.problem import CapacityProblem, ForageItems
from nutricap.model.scenarios import respond, response_factors


@dataclass(frozen=True)
class GridScenario:
    """A scenario read for the grid path: polygons in the order they were burnt (codes 1, 2,
    …) with ``treatment``, ``year`` and ``new_stratum``, and the response table."""

    name: str
    section: ScenarioSection
    treatments: gpd.GeoDataFrame
    responses: pd.DataFrame


@dataclass
class _Variant:
    """The treated forage of one patch type in one year: (units, classes) [kg]."""

    stratum: int
    treatment: str
    years_since: int
    forage_kg: np.ndarray
    units: set


def grid_scenario_year(
    grid: GridResult, scenario: GridScenario, year: int, mode: str
) -> tuple[CapacityProblem, np.ndarray]:
    """The capacity problem of ``scenario`` in ``year`` on the grid, and per unit the years
    since its latest treatment so far (NaN where none yet)."""
    treated = grid.treated
    base_items = grid.problem.items
    strata = grid.full_supply.strata
    n_units, n_strata, n_classes = grid.key_available_kg.shape
    entry_pair, entry_stratum = np.nonzero(treated.cells > 0)
    polygon = treated.pair_polygon[entry_pair]
    unit = treated.pair_unit[entry_pair]
    treated_year = scenario.treatments["year"].to_numpy()[polygon]
    done = treated_year <= year
    since = np.full(n_units, np.inf)
    np.minimum.at(since, unit[done], year - treated_year[done])
    entries = pd.DataFrame(
        {
            "entry": np.flatnonzero(done),
            "treatment": scenario.treatments["treatment"].to_numpy()[polygon[done]],
            "year": treated_year[done],
            "new_stratum": scenario.treatments["new_stratum"].to_numpy()[polygon[done]],
            "stratum": entry_stratum[done],
        }
    )
    available = grid.key_available_kg.copy()
    variants: dict[tuple[str, str], _Variant] = {}
    plot_classes = np.isin(grid.classes, grid.supply.classes)
    means = np.nan_to_num(base_items.biomass_kg_per_ha.reshape(n_strata, n_classes))
    for (treatment, treated_in, new, stratum), group in entries.groupby(
        ["treatment", "year", "new_stratum", "stratum"], sort=True
    ):
        target = strata.index(new) if new else int(stratum)
        items = base_items.subset(base_items.stratum == strata[target])
        responses = scenario.responses[scenario.responses["treatment"] == treatment]
        multiplier, de_shift, cp_shift = response_factors(items, responses, year - treated_in)
        if target == stratum and (multiplier == 1).all() and not (de_shift.any() or cp_shift.any()):
            continue  # the identity: the treated forage stays as it is
        rows = group["entry"].to_numpy()
        pairs, owners = entry_pair[rows], unit[rows]
        left = treated.left_kg[pairs, stratum]
        moved = left.copy()
        if target != stratum:  # plot classes: the new stratum's means where the rules keep
            moved[:, plot_classes] = (means[target] * treated.kept_ha[pairs, stratum])[
                :, plot_classes
            ]
        np.add.at(available[:, stratum], owners, -left)
        label = f"{treatment} {treated_in}"
        variant = variants.setdefault(
            (strata[target], label),
            _Variant(target, treatment, year - treated_in, np.zeros((n_units, n_classes)), set()),
        )
        np.add.at(variant.forage_kg, owners, moved * multiplier[None, :])
        variant.units.update(owners.tolist())
    problem = _problem(grid, np.maximum(available, 0.0), variants, scenario.responses, mode)
    return problem, np.where(np.isfinite(since), since, np.nan)


def _problem(grid: GridResult, available, variants: dict, responses, mode: str):
    """The baseline's rows and items with the treated forage moved to its variants."""
    base, _ = key_problem(grid.areas.units, available, grid.mapped_ha, grid.problem.items, mode)
    if not variants:
        return base
    parts, blocks = [base.items], []
    for (stratum, label), variant in sorted(variants.items()):
        items = base.items.subset(base.items.stratum == stratum)
        own = responses[responses["treatment"] == variant.treatment]
        parts.append(respond(items, own, variant.years_since, label))
        blocks.append(variant.forage_kg)
    items = ForageItems.concatenate(parts)
    n_base = base.items.size
    width = sum(block.shape[1] for block in blocks)
    if mode == "unit":
        matrix = np.hstack([base.available_kg, *blocks])
        return CapacityProblem(base.unit_ids, base.row_unit, items, matrix)
    rows = [np.hstack([base.available_kg, np.zeros((base.available_kg.shape[0], width))])]
    row_unit = [base.row_unit]
    start = n_base
    for ((_, _), variant), block in zip(sorted(variants.items()), blocks):
        owners = np.array(sorted(variant.units))
        part = np.zeros((owners.size, n_base + width))
        part[:, start : start + block.shape[1]] = block[owners]
        rows.append(part)
        row_unit.append(owners)
        start += block.shape[1]
    return CapacityProblem(base.unit_ids, np.concatenate(row_unit), items, np.vstack(rows))


def treated_pieces(grid: GridResult, scenario: GridScenario) -> pd.DataFrame:
    """The treated land of ``scenario`` on the grid, as the polygon path's overlay gives it:
    ``unit_id, stratum, new_stratum, treatment, year, accessible_ha`` (treated cells × cell
    area [ha]) per unit × stratum × treatment polygon, for the report."""
    treated = grid.treated
    pair, stratum = np.nonzero(treated.cells > 0)
    polygon = treated.pair_polygon[pair]
    attributes = scenario.treatments.iloc[polygon]
    return pd.DataFrame(
        {
            "unit_id": grid.problem.unit_ids[treated.pair_unit[pair]],
            "stratum": np.asarray(grid.full_supply.strata, dtype=object)[stratum],
            "new_stratum": attributes["new_stratum"].to_numpy(),
            "treatment": attributes["treatment"].to_numpy(),
            "year": attributes["year"].to_numpy(),
            "accessible_ha": treated.cells[pair, stratum] * grid.grid.cell_area_ha,
        }
    )
