"""Estimands beyond a mean and a proportion (see :mod:`simcheck.estimands.base`).

Each module defines and registers the estimands of one family; importing
this package fills :data:`REGISTRY`.
"""

from simcheck.estimands.base import (
    DATA_KINDS, PLANNING_VALUES, REGISTRY, SCALES, EstimandFormula, EstimandSpec, formula_for, formula_result,
    register_estimand, spec_for, z_two_sided,
)

# Importing the family modules fills REGISTRY.
from simcheck.estimands import spread as _spread  # noqa: F401,E402
from simcheck.estimands import rates as _rates  # noqa: F401,E402
from simcheck.estimands import ratios as _ratios  # noqa: F401,E402
from simcheck.estimands import geometric as _geometric  # noqa: F401,E402
from simcheck.estimands import quantile as _quantile  # noqa: F401,E402
from simcheck.estimands import pairs as _pairs  # noqa: F401,E402

__all__ = [
    "DATA_KINDS", "PLANNING_VALUES", "REGISTRY", "SCALES", "EstimandFormula", "EstimandSpec", "formula_for",
    "formula_result", "register_estimand", "spec_for", "z_two_sided",
]
