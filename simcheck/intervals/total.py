"""Intervals for a population total from one-stage samples of a finite population.

The total of N units is N times their mean (for 0/1 values: the number of
events, N times the share), and its interval is N times the mean's interval:
``[N L, N U]`` covers ``N mu`` exactly when ``[L, U]`` covers ``mu``, so coverage
is the mean's and the half-width N times the mean's. Each summary-statistic
(``summary``) mean method and each ``count`` proportion method is registered
again under the estimand ``total`` with the same function; the finite-population
evaluator (:mod:`simcheck.engine.clustered`) computes the mean's (or the
proportion's) interval and scales it by N. Stratified totals have their own
methods (:data:`simcheck.design.STRATIFIED_METHODS`).

References
----------
.. [1] Cochran, W. G. (1977). *Sampling Techniques*, 3rd ed. Wiley, chapters 2
   and 3 (the estimated total N ybar, its variance N^2 (1 - n/N) S^2 / n).
"""

from __future__ import annotations

from dataclasses import replace

from simcheck.intervals.base import REGISTRY, register

__all__ = ["TOTAL_KINDS"]

#: method kinds that have a total form (bootstrap and log-scale methods do not)
TOTAL_KINDS = ("summary", "count")

for (_estimand, _name), _m in sorted(REGISTRY.items()):
    if (_estimand in ("mean", "proportion") and _m.kind in TOTAL_KINDS and _name != "cluster-t"
            and "two-sided" in _m.bounds):
        register(replace(_m, estimand="total", summary=f"N x the {_estimand} interval: {_m.summary}"))
