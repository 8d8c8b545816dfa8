"""The pipeline: the estimate in one straight line, the scenario comparison, and the runs that
write their outputs.

supply (plots × strata map) → availability (accessible hectares) → pool by unit → solve
(NCC, ECC, allowable use) → uncertainty → current use → trend. :mod:`.reading` reads the
project's inputs, :mod:`.pipeline` holds :func:`estimate`, :mod:`.solving` the one solve with
the project's settings, :mod:`.assess` the steps after it, :mod:`.comparison` the treatment
scenarios and :mod:`.runs` :func:`run_estimate` / :func:`run_compare` (the safe writing of
outputs). No module of the package imports this one: each names the module it takes from.
"""

from nutricap.workflow.assess import (
    assess_current_use,
    assess_uncertainty,
    counts_trend,
    current_animals,
    plot_sampled_classes,
    sensitivity_table,
)
from nutricap.workflow.comparison import compare, compare_scenarios
from nutricap.workflow.pipeline import build_supply, estimate
from nutricap.workflow.reading import Inputs, Progress, on_grid, read_inputs
from nutricap.workflow.runs import run_compare, run_estimate
from nutricap.workflow.solving import solve

__all__ = ["Inputs", "Progress", "assess_current_use", "assess_uncertainty", "build_supply"]
__all__ += ["compare", "compare_scenarios", "counts_trend", "current_animals", "estimate"]
__all__ += ["on_grid", "plot_sampled_classes", "read_inputs", "run_compare", "run_estimate"]
__all__ += ["sensitivity_table", "solve"]
