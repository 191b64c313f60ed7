"""Interval methods as pure vectorised functions (see :mod:`simcheck.intervals.base`)."""

from simcheck.intervals.base import ESTIMANDS, REGISTRY, Method, Summary, get_method, methods_for, register

# Importing the submodules fills REGISTRY.
from simcheck.intervals import mean as _mean  # noqa: F401
from simcheck.intervals import proportion as _proportion  # noqa: F401
from simcheck.intervals import bootstrap as _bootstrap  # noqa: F401
from simcheck.intervals import cluster as _cluster  # noqa: F401
from simcheck.intervals import upper as _upper  # noqa: F401
from simcheck.intervals import hypergeometric as _hypergeometric  # noqa: F401
from simcheck.intervals import total as _total  # noqa: F401  (after the mean and proportion methods)
from simcheck.intervals import spread as _spread  # noqa: F401
from simcheck.intervals import rates as _rates  # noqa: F401
from simcheck.intervals import rate_diff as _rate_diff  # noqa: F401
from simcheck.intervals import ratios as _ratios  # noqa: F401
from simcheck.intervals import pps as _pps  # noqa: F401  (monetary-unit limits: selection designs only)
from simcheck.intervals import geometric as _geometric  # noqa: F401
from simcheck.intervals import quantile as _quantile  # noqa: F401
from simcheck.intervals import pairs as _pairs  # noqa: F401

__all__ = ["ESTIMANDS", "REGISTRY", "Method", "Summary", "get_method", "methods_for", "register"]
