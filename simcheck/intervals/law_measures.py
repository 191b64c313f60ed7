"""Measures of an interval method from an enumerated law (exact paths).

Every exact path (binomial, hypergeometric, Poisson and two-sample
enumerations) turns the intervals of each outcome and the outcome's
probability into the measures of :func:`simcheck.engine.measures.row_from_measures`
with :func:`weighted_measures`; quantiles use one definition on every path
(the smallest value whose cumulative probability reaches q). It sits in the
interval layer so that interval families with exact paths and the engine
share it without an upward import.
"""

from __future__ import annotations

import numpy as np

#: a half-width equal to the margin up to rounding meets it (as on simulated paths)
MARGIN_RTOL = 1.0 + 1e-12


def weighted_quantile(sorted_values: np.ndarray, sorted_weights: np.ndarray, q: float) -> float:
    """Smallest value whose normalised cumulative weight is >= q."""
    if sorted_values.size == 0:
        return float("nan")
    cum = np.cumsum(sorted_weights)
    total = cum[-1]
    if total <= 0:
        return float("nan")
    # the allowance keeps a cumulative probability equal to q up to rounding at q,
    # as the rank ceil(m q) does on the simulated paths (one definition)
    idx = int(np.searchsorted(cum / total, q - 1e-12, side="left"))
    return float(sorted_values[min(idx, sorted_values.size - 1)])


def weighted_measures(lo: np.ndarray, hi: np.ndarray, w: np.ndarray, true: float, margin: float | None) -> dict:
    """All measures for one enumerated support with probabilities ``w``."""
    hw = (hi - lo) / 2.0
    total = float(w.sum())
    covered = (lo <= true) & (true <= hi)
    order = np.argsort(hw, kind="stable")
    hw_s, w_s = hw[order], w[order]
    # a zero-width interval that misses (Wald at x = 0 or x = n) does not
    # deliver the promised precision: counted apart, never within the margin
    zero = (hw <= 0) & ~covered
    return {
        "true_value": float(true),
        "coverage": float(w[covered].sum() / total),
        "miss_low": float(w[hi < true].sum() / total),
        "miss_high": float(w[lo > true].sum() / total),
        "margin_mean": float(np.dot(w, hw) / total),
        "margin_median": weighted_quantile(hw_s, w_s, 0.5),
        "margin_p90": weighted_quantile(hw_s, w_s, 0.9),
        "assurance": None if margin is None else float(w[(hw <= margin * MARGIN_RTOL) & ~zero].sum() / total),
        "degenerate_share": float(w[zero].sum() / total),
        "margin_values": hw_s,
        "margin_weights": w_s,
    }
