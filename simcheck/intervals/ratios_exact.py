"""Exact measures of risk-ratio and odds-ratio intervals by double enumeration.

Every interval for a ratio of two binomial proportions depends on the data
only through (x_a, x_b), so coverage, misses and the distribution of the
achieved margin are finite sums over the two binomial laws: the approach of
the exact path of the difference of two proportions
(:mod:`simcheck.engine.exact`), with the same conventions:

* binomial tails of probability below :data:`TAIL_TRIM` (1e-17 each) are not
  enumerated, and the sums are normalised by the weight enumerated;
* outcome pairs are evaluated in chunks of at most :data:`CHUNK_CELLS`;
  more than :data:`PAIRS_MAX` pairs in one n are refused (memory) before any
  work, with the advice to simulate;
* the ratio-scale margin is the factor exp((log upper - log lower) / 2), as
  on the simulated path (:mod:`simcheck.engine.raw`): the margin mean is the
  geometric mean of the factors (exp of the mean log half-width), quantiles
  are inverse-CDF quantiles (smallest value with cumulative probability >= q);
* an interval with a NaN limit (not computed) counts as not covering and not
  within the margin, and is left out of the mean and quantiles; an infinite
  limit makes an unbounded margin (infinite factor); a zero-width interval
  that misses the true value is degenerate and never within the margin.

This module sits beside the interval functions and uses only numpy and
scipy; the engine calls it through ``Method.exact``.

References
----------
Newcombe, R. G. (1998). Interval estimation for the difference between
independent proportions: comparison of eleven methods. Statistics in
Medicine 17, 873-890 (exact evaluation over the two binomials).
"""

from __future__ import annotations

import math
from typing import Callable

import numpy as np
from scipy import stats

from simcheck.errors import InputError
from simcheck.intervals.law_measures import MARGIN_RTOL

#: each binomial tail below this probability is not enumerated (as in engine.exact)
TAIL_TRIM = 1e-17
#: largest number of (x_a, x_b) pairs of one n held at once: the cap of the
#: exact two-proportion path (``simcheck.engine.EXACT2_PAIRS_MAX``, about 0.5 GB)
PAIRS_MAX = 5_000_000
#: outcome pairs evaluated per call of the interval function
CHUNK_CELLS = 1 << 21
#: a half-width equal to the margin up to rounding meets it (engine.measures)


def exact_applies(design) -> bool:
    """Both groups are iid Bernoulli: the double enumeration is exact."""
    return design.model.bernoulli_p() is not None and design.model_b.bernoulli_p() is not None


def support(n: int, p: float) -> tuple[int, int]:
    """First and last count kept of Bin(n, p), tails below :data:`TAIL_TRIM` left out."""
    lo = int(stats.binom.ppf(TAIL_TRIM, n, p))
    hi = n - int(stats.binom.ppf(TAIL_TRIM, n, 1.0 - p))  # upper tail through n - X ~ Bin(n, 1 - p)
    lo = min(max(lo, 0), n)
    return lo, min(max(hi, lo), n)


def pairs_needed(n: int, p: float, nb: int, pb: float) -> int:
    """Outcome pairs the enumeration at (n, n_b) holds."""
    a_lo, a_hi = support(n, p)
    b_lo, b_hi = support(nb, pb)
    return (a_hi - a_lo + 1) * (b_hi - b_lo + 1)


def exact_path(func: Callable) -> Callable:
    """``Method.exact`` for an interval on counts ``func(xa, na, xb, nb, confidence) -> (lo, hi)``."""
    def exact(design, ns) -> list[dict]:
        pa, pb = design.model.bernoulli_p(), design.model_b.bernoulli_p()
        for n in ns:
            pairs = pairs_needed(n, pa, design.n_b(n), pb)
            if pairs > PAIRS_MAX:
                raise InputError(
                    "n", f"the exact enumeration of {design.estimand} at n = {n} (n_b = {design.n_b(n)}) would hold "
                         f"about {pairs:.2g} outcome pairs, over the limit of {PAIRS_MAX:.0e}; use a smaller n "
                         "(simulation.n_max, --n-max, --n) or simulate (simulation.path = \"nested\" or \"full\")")
        return [grid_measures(func, design, int(n)) for n in ns]

    return exact


def grid_measures(func: Callable, design, n: int) -> dict:
    """Measures of one n: the interval on every kept (x_a, x_b), weighted by the two binomial laws."""
    pa, pb, nb = design.model.bernoulli_p(), design.model_b.bernoulli_p(), design.n_b(n)
    a_lo, a_hi = support(n, pa)
    b_lo, b_hi = support(nb, pb)
    xa = np.arange(a_lo, a_hi + 1, dtype=np.float64)
    xb = np.arange(b_lo, b_hi + 1, dtype=np.float64)
    wa = stats.binom.pmf(xa, n, pa)
    wb = stats.binom.pmf(xb, nb, pb)
    rows = max(1, CHUNK_CELLS // xb.size)
    los, his, ws = [], [], []
    for i in range(0, xa.size, rows):
        lo, hi = func(xa[i:i + rows, None], n, xb[None, :], nb, design.confidence)
        shape = (min(rows, xa.size - i), xb.size)
        los.append(np.broadcast_to(np.asarray(lo, np.float64), shape).ravel())
        his.append(np.broadcast_to(np.asarray(hi, np.float64), shape).ravel())
        ws.append((wa[i:i + rows, None] * wb[None, :]).ravel())
    return log_scale_measures(np.concatenate(los), np.concatenate(his), np.concatenate(ws),
                              float(design.true_value), design.margin, design.assurance)


def _quantile(sorted_values: np.ndarray, sorted_weights: np.ndarray, q: float) -> float:
    """Smallest value whose normalised cumulative weight is >= q (inverse CDF)."""
    if sorted_values.size == 0:
        return math.nan
    cum = np.cumsum(sorted_weights)
    idx = int(np.searchsorted(cum / cum[-1], q - 1e-12, side="left"))
    return float(sorted_values[min(idx, sorted_values.size - 1)])


def log_scale_measures(lo, hi, w, truth: float, margin: float | None, assurance: float) -> dict:
    """Measures of intervals (lo, hi) for a positive ratio, the margin as a factor.

    ``w`` are the probabilities of the intervals; ``margin`` the target
    factor (> 1) or None; ``assurance`` the level of ``margin_at_assurance``.
    """
    total = float(w.sum())
    with np.errstate(divide="ignore", invalid="ignore"):
        hw = 0.5 * (np.log(hi) - np.log(lo))
    computed = ~np.isnan(hw)
    covered = (lo <= truth) & (truth <= hi)
    zero = (hw <= 0) & ~covered
    w_ok, hw_ok = w[computed], hw[computed]
    order = np.argsort(hw_ok, kind="stable")
    hw_s, w_s = hw_ok[order], w_ok[order]
    ok_total = float(w_ok.sum())
    # the mean over bounded intervals: an unbounded one (probability often 1e-17) would make it infinite
    finite = np.isfinite(hw_ok)
    fin_total = float(w_ok[finite].sum())
    mean = (float(np.dot(w_ok[finite], np.where(w_ok[finite] > 0, hw_ok[finite], 0.0)) / fin_total)
            if fin_total > 0 else math.nan)
    assured = None
    if margin is not None:
        assured = float(w[(hw <= math.log(margin) * MARGIN_RTOL) & ~zero].sum() / total)
    notes = []
    nan_share = 1.0 - ok_total / total
    if nan_share > 0:
        notes.append(f"probability {nan_share:.4g} of an interval that cannot be computed (NaN limits): it counts as "
                     "not covering and not meeting the margin, and is left out of the margin mean and quantiles")
    unbounded = float(w_ok[np.isinf(hw_ok)].sum() / total)
    if unbounded > 0:
        notes.append(f"probability {unbounded:.4g} of an unbounded interval (limit 0 or infinity): its margin "
                     "factor is infinite; it never meets the margin and is left out of the margin mean")
    return {
        "true_value": truth,
        "coverage": float(w[covered].sum() / total),
        "miss_low": float(w[hi < truth].sum() / total),
        "miss_high": float(w[lo > truth].sum() / total),
        "margin_mean": math.exp(mean) if not math.isnan(mean) else math.nan,
        "margin_median": math.exp(_quantile(hw_s, w_s, 0.5)),
        "margin_p90": math.exp(_quantile(hw_s, w_s, 0.9)),
        "margin_at_assurance": math.exp(_quantile(hw_s, w_s, assurance)),
        "assurance": assured,
        "degenerate_share": float(w[zero].sum() / total),
        "margin_values": np.exp(hw_s),
        "margin_weights": w_s,
        "notes": tuple(notes),
    }
