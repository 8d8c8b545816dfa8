"""The result types of an estimate: what the pipeline computed and reporting formats.

They live below both :mod:`nutricap.workflow` (which fills them) and :mod:`nutricap.report`
(which only reads them), so that reporting never imports the pipeline.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import geopandas as gpd
import pandas as pd

from nutricap.landscape.grid.supply import GridResult
from nutricap.landscape.plots import StratumSupply
from nutricap.landscape.vectors import StratumAreas
from nutricap.model.problem import CapacityProblem, Solution
from nutricap.model.requirements import DietTarget
from nutricap.model.shared_range import OtherHerd, SharedRangeResult
from nutricap.model.uncertainty import BootstrapResult
from nutricap.science import energetics


@dataclass(frozen=True)
class Uncertainty:
    """Bootstrap replicates (None when not asked for) and the sensitivity table."""

    bootstrap: BootstrapResult | None = None
    sensitivity: pd.DataFrame | None = None
    change: float = 0.0


@dataclass(frozen=True)
class Estimate:
    """Everything the estimate computed; reporting only formats it.

    ``problem`` is the forage as sampled (the supply; the density map shares it out);
    ``solution``, ``by_unit`` and ``by_unit_class`` are of :attr:`solved_problem`.
    """

    by_unit: pd.DataFrame
    use_by_class: pd.DataFrame | None
    by_unit_class: pd.DataFrame
    units: gpd.GeoDataFrame
    supply: StratumSupply
    areas: StratumAreas
    problem: CapacityProblem
    solution: Solution
    herd: energetics.HerdRequirement
    target: DietTarget
    season_days: float
    uncertainty: Uncertainty = field(default_factory=lambda: Uncertainty())
    trend: dict | None = None
    forage_classes: pd.DataFrame | None = None
    animals: pd.DataFrame | None = None
    notes: list[str] = field(default_factory=list)
    grid: GridResult | None = None
    requirement_table: pd.DataFrame = field(default_factory=lambda: energetics.NUTRITIONAL_STATES)
    other_herds: tuple[OtherHerd, ...] = ()
    shared_range: SharedRangeResult | None = None

    @property
    def solved_problem(self) -> CapacityProblem:
        """The problem the target's capacity was solved on: ``problem`` less the forage the
        other herbivores take (``problem`` itself when there are none)."""
        return self.problem if self.shared_range is None else self.shared_range.left
