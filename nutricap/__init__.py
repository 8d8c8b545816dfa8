"""nutricap: nutritional carrying capacity of ungulate range, per management unit.

The science core (pure, vectorised functions with their sources) is in
:mod:`nutricap.science`; the most used functions are exported here. They are loaded on
first use (PEP 562), so that ``import nutricap.inputs.project`` or ``nutricap --help`` does not pay
for numpy and pandas.
"""

from importlib import import_module

__version__ = "0.1.0"

_EXPORTS = {
    "allowable_use_capacity": "nutricap.science.capacity",
    "ecological_capacity": "nutricap.science.capacity",
    "nutritional_capacity": "nutricap.science.capacity",
    "basal_metabolic_rate_kcal_per_day": "nutricap.science.energetics",
}

__all__ = ["__version__", *sorted(_EXPORTS)]


def __getattr__(name: str):
    if name in _EXPORTS:
        return getattr(import_module(_EXPORTS[name]), name)
    raise AttributeError(f"module 'nutricap' has no attribute {name!r}")


def __dir__() -> list[str]:
    return sorted([*globals(), *_EXPORTS])
