"""The pipeline: the estimate in one straight line, the scenario comparison, and the runs that
write their outputs.

supply (plots × strata map) → availability (accessible hectares) → pool by unit → solve
(NCC, ECC, allowable use) → uncertainty → current use → trend. :mod:`.reading` reads the
project's inputs, :mod:`.pipeline` holds :func:`estimate`, :mod:`.solving` the one solve with the
project's settings, :mod:`.assess` the steps after it, :mod:`.comparison` the treatment scenarios
and :mod:`.runs` :func:`run_estimate` / :func:`run_compare` (the safe writing of outputs).

The names below are loaded on first use (PEP 562), from the module that defines them.
"""

from importlib import import_module

_EXPORTS = {
    "Inputs": "nutricap.workflow.reading",
    "Progress": "nutricap.workflow.reading",
    "on_grid": "nutricap.workflow.reading",
    "read_inputs": "nutricap.workflow.reading",
    "solve": "nutricap.workflow.solving",
    "assess_current_use": "nutricap.workflow.assess",
    "assess_uncertainty": "nutricap.workflow.assess",
    "counts_trend": "nutricap.workflow.assess",
    "current_animals": "nutricap.workflow.assess",
    "plot_sampled_classes": "nutricap.workflow.assess",
    "sensitivity_table": "nutricap.workflow.assess",
    "build_supply": "nutricap.workflow.pipeline",
    "estimate": "nutricap.workflow.pipeline",
    "compare": "nutricap.workflow.comparison",
    "compare_scenarios": "nutricap.workflow.comparison",
    "run_compare": "nutricap.workflow.runs",
    "run_estimate": "nutricap.workflow.runs",
}

__all__ = sorted(_EXPORTS)


def __getattr__(name: str):
    if name in _EXPORTS:
        return getattr(import_module(_EXPORTS[name]), name)
    raise AttributeError(f"module 'nutricap.workflow' has no attribute {name!r}")


def __dir__() -> list[str]:
    return sorted([*globals(), *_EXPORTS])
