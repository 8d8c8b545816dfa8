"""nutricap: nutritional carrying capacity of ungulate range, per management unit.

The science core (pure, vectorised functions with their sources) is in
:mod:`nutricap.science`; the most used functions are exported here.
"""

from nutricap.science.capacity import (
    allowable_use_capacity,
    ecological_capacity,
    nutritional_capacity,
)
from nutricap.science.energetics import basal_metabolic_rate_kcal_per_day

__version__ = "0.1.0"

__all__ = [
    "__version__",
    "allowable_use_capacity",
    "basal_metabolic_rate_kcal_per_day",
    "ecological_capacity",
    "nutritional_capacity",
]
