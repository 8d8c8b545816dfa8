"""The pipeline: the estimate in one straight line, the scenario comparison, and the runs that
write their outputs.

supply (plots × strata map) → availability (accessible hectares) → pool by unit → solve
(NCC, ECC, allowable use) → uncertainty → current use → trend. :mod:`.reading` reads the
project's inputs, :mod:`.pipeline` holds :func:`estimate`, :mod:`.solving` the one solve with
the project's settings, :mod:`.assess` the steps after it, :mod:`.comparison` the treatment
scenarios and :mod:`.runs` :func:`run_estimate` / :func:`run_compare` (the safe writing of
outputs). The names most used are re-exported here; no module of the package imports this
one: each names the module it takes from.
"""

from nutricap.workflow.assess import assess_uncertainty, counts_trend
from nutricap.workflow.comparison import compare, compare_scenarios
from nutricap.workflow.pipeline import build_supply, estimate
from nutricap.workflow.reading import Inputs, on_grid, read_inputs
from nutricap.workflow.runs import RunOptions, run_compare, run_estimate
from nutricap.workflow.solving import solve

__all__ = ["Inputs", "RunOptions", "assess_uncertainty", "build_supply", "compare"]
__all__ += ["compare_scenarios", "counts_trend", "estimate", "on_grid", "read_inputs"]
__all__ += ["run_compare", "run_estimate", "solve"]
