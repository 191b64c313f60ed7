"""Exact paths of the rate intervals: enumeration over the law of the total count.

The total of n independent Poisson(mu) counts is Poisson(n mu); the total of
n negative-binomial counts NB(k, p) (``scipy.stats.nbinom``, mean
k (1 - p) / p) is NB(n k, p). Every rate interval here is a function of the
total count(s) and the exposure, so its coverage and half-width law follow
by summing over the total's support: one sum for ``rate``, a double sum over
the two independent totals for ``rate-ratio``.

Tails of probability below :data:`TAIL_TRIM` (1e-17 each, as the binomial
enumerations in :mod:`simcheck.engine.exact`) are left out: at most 2e-17 per
total, below the rounding of sums near 1. Supports beyond
:data:`SUPPORT_MAX` values (one total) or :data:`PAIRS_MAX` pairs (two) are
refused with one line pointing to the simulated paths.

Measures follow :func:`simcheck.intervals.law_measures.weighted_measures` (the same
definitions as simulation; the margin mean over bounded intervals); intervals with a NaN limit (the Wald rate ratio
with a zero count) count as not covering and are left out of the half-width
summaries, as on the simulated paths. Ratio-scale estimands are measured on
the log scale and their margins reported as factors exp(half-width).
"""

from __future__ import annotations

import math
import threading

import numpy as np
from scipy import stats

from simcheck.errors import InputError
from simcheck.intervals.law_measures import weighted_measures, weighted_quantile

#: each tail of a total's law with less probability than this is not enumerated
TAIL_TRIM = 1e-17
#: largest support of one total enumerated (about 16 MB per array)
SUPPORT_MAX = 2_000_000
#: largest number of (x_a, x_b) pairs enumerated at one n (about 32 MB per array)
PAIRS_MAX = 4_000_000
#: largest table of conditional limits kept between n (two float64 tables: about 32 MB)
GRID_CACHE_MAX = 2_000_000
#: models whose total over n units has a closed-form law
COUNT_LAWS = ("poisson", "negative-binomial")


def totals_law_applies(design) -> bool:
    """True when every group's model is Poisson or negative binomial (the totals' laws are known)."""
    models = [design.model] + ([design.model_b] if design.model_b is not None else [])
    return all(getattr(m, "name", None) in COUNT_LAWS for m in models)


def total_law(model, n: int):
    """The scipy law of the total of ``n`` independent counts of ``model``."""
    law = model.law()
    if law.dist.name == "poisson":
        return stats.poisson(n * float(law.args[0]))
    if law.dist.name == "nbinom":
        k, p = (float(v) for v in law.args)
        return stats.nbinom(n * k, p)
    raise ValueError(f"no closed-form law for the total of {law.dist.name} counts")


def _upper_end(law) -> int:
    """Smallest x with P(X > x) < TAIL_TRIM (bisection on the survival function)."""
    hi = int(math.ceil(law.mean() + 10.0 * law.std() + 20.0))
    lo = -1
    while law.sf(hi) >= TAIL_TRIM:
        lo, hi = hi, 2 * hi
    while hi - lo > 1:
        mid = (lo + hi) // 2
        if law.sf(mid) < TAIL_TRIM:
            hi = mid
        else:
            lo = mid
    return hi


def support_bounds(law) -> tuple[int, int]:
    """First and last count enumerated (tails below TAIL_TRIM left out)."""
    lo = int(law.ppf(TAIL_TRIM))
    return max(lo, 0), _upper_end(law)


def exposure(design) -> float:
    return 1.0 if design.exposure is None else float(design.exposure)


def measures(lo, hi, w, truth: float, margin: float | None, assurance: float, ratio: bool) -> dict:
    """Measures of intervals (lo, hi) with probabilities w; NaN limits count as not covering."""
    if ratio:
        with np.errstate(divide="ignore", invalid="ignore"):
            lo, hi = np.log(lo), np.log(hi)
        truth = math.log(truth)
        margin = None if margin is None else math.log(margin)
    ok = ~(np.isnan(lo) | np.isnan(hi)) & (w > 0)
    total = float(w.sum())
    if not ok.any():
        nan = math.nan
        return {"coverage": 0.0, "miss_low": 0.0, "miss_high": 0.0, "margin_mean": nan, "margin_median": nan,
                "margin_p90": nan, "assurance": None if margin is None else 0.0, "margin_at_assurance": nan}
    m = weighted_measures(lo[ok], hi[ok], w[ok], truth, margin)
    share = float(w[ok].sum()) / total
    m["notes"] = _notes(1.0 - share, float(w[ok][np.isinf(hi[ok] - lo[ok])].sum()) / total)
    # the mean over bounded intervals, as the simulated paths: an unbounded one (no events in a
    # group, often of probability 1e-17) would make it infinite
    hw, wv = m["margin_values"], m["margin_weights"]
    fin = np.isfinite(hw)
    m["margin_mean"] = float(np.dot(wv[fin], hw[fin]) / wv[fin].sum()) if wv[fin].sum() > 0 else math.nan
    for key in ("coverage", "miss_low", "miss_high", "degenerate_share"):
        m[key] *= share
    if m["assurance"] is not None:
        m["assurance"] *= share
    m["margin_at_assurance"] = weighted_quantile(m["margin_values"], m["margin_weights"], assurance)
    if ratio:
        for key in ("margin_mean", "margin_median", "margin_p90", "margin_at_assurance"):
            m[key] = math.exp(m[key]) if math.isfinite(m[key]) else m[key]
        m["margin_values"] = np.exp(m["margin_values"])
    return m


def _notes(nan_share: float, unbounded: float) -> list[str]:
    out = []
    if unbounded > 0:
        out.append(f"probability {unbounded:.4g} of an unbounded interval (an infinite limit, e.g. no events "
                   "in a group): it never meets the margin and is left out of the margin mean")
    if nan_share > 1e-15:
        out.append(f"probability {nan_share:.4g} of an interval that cannot be computed (e.g. a zero count for the "
                   "Wald rate ratio): it counts as not covering and is left out of the half-width summaries")
    return out


def rate_exact_path(total_func):
    """``exact(design, ns)`` for a one-rate interval ``total_func(x, e, confidence)``."""
    def exact(design, ns) -> list[dict]:
        t, out = exposure(design), []
        for n in ns:
            law = total_law(design.model, n)
            a, b = support_bounds(law)
            if b - a + 1 > SUPPORT_MAX:
                raise InputError("n", f"the exact enumeration at n = {n} would hold {b - a + 1:.3g} totals, over "
                                      f"the limit of {SUPPORT_MAX:.0e}; use a smaller n or simulate "
                                      "(simulation.path = \"nested\" or \"full\")")
            x = np.arange(a, b + 1, dtype=np.float64)
            lo, hi = total_func(x, n * t, design.confidence)
            out.append(measures(lo, hi, law.pmf(x), design.true_value, design.margin, design.assurance, False))
        return out

    return exact


def _pairs_cap(design, ns) -> None:
    """Refuse before any work when the largest n would enumerate too many pairs."""
    n = max(ns)
    nb = design.n_b(n)
    a0, a1 = support_bounds(total_law(design.model, n))
    b0, b1 = support_bounds(total_law(design.model_b, nb))
    pairs = (a1 - a0 + 1) * (b1 - b0 + 1)
    if pairs > PAIRS_MAX:
        raise InputError("n", f"the exact enumeration of two totals at n = {n} (n_b = {nb}) would hold about "
                              f"{pairs:.2g} pairs, over the limit of {PAIRS_MAX:.0e}; use a smaller n "
                              "(simulation.n_max, --n-max, --n) or simulate (simulation.path = \"nested\" or \"full\")")


class GridCache:
    """Values of ``func(xa, xb, confidence)`` on a rectangle of counts, kept from one n to the next.

    Conditional limits (Clopper-Pearson for X_a given X_a + X_b) depend on the
    two counts alone; a curve or a search asks for overlapping rectangles n
    after n. The kept table grows to the union of the rectangles asked for,
    and only cells not kept yet are computed; past :data:`GRID_CACHE_MAX`
    cells it is cut back to the rectangle asked for (its overlap with the old
    table still copied).
    """

    def __init__(self, func) -> None:
        self.func = func
        self.lock = threading.Lock()
        self.key = None
        self.box = (0, -1, 0, -1)
        self.table: tuple[np.ndarray, ...] = ()

    def get(self, a: tuple[int, int], b: tuple[int, int], confidence: float):
        with self.lock:
            (a0, a1), (b0, b1) = a, b
            c0, c1, d0, d1 = self.box
            if self.key != confidence:
                self._rebuild((a0, a1, b0, b1), confidence, keep=False)
            elif not (c0 <= a0 and a1 <= c1 and d0 <= b0 and b1 <= d1):
                union = (min(a0, c0), max(a1, c1), min(b0, d0), max(b1, d1))
                cells = (union[1] - union[0] + 1) * (union[3] - union[2] + 1)
                self._rebuild(union if cells <= GRID_CACHE_MAX else (a0, a1, b0, b1), confidence, keep=True)
            c0, _, d0, _ = self.box
            return tuple(t[a0 - c0:a1 - c0 + 1, b0 - d0:b1 - d0 + 1] for t in self.table)

    def _rebuild(self, box, confidence, keep: bool) -> None:
        b0, b1, d0, d1 = box
        c0, c1, e0, e1 = self.box
        o = (max(b0, c0), min(b1, c1), max(d0, e0), min(d1, e1))  # overlap with the kept table
        have = keep and o[0] <= o[1] and o[2] <= o[3]
        strips = [box] if not have else [  # the cells of box outside the overlap
            (b0, o[0] - 1, d0, d1), (o[1] + 1, b1, d0, d1), (o[0], o[1], d0, o[2] - 1), (o[0], o[1], o[3] + 1, d1)]
        new = None
        for r0, r1, q0, q1 in strips:
            if r0 > r1 or q0 > q1:
                continue
            ga, gb = np.meshgrid(np.arange(r0, r1 + 1, dtype=np.float64), np.arange(q0, q1 + 1, dtype=np.float64),
                                 indexing="ij")
            vals = [np.asarray(v) for v in self.func(ga, gb, confidence)]
            if new is None:
                new = [np.empty((b1 - b0 + 1, d1 - d0 + 1)) for _ in vals]
            for t, v in zip(new, vals):
                t[r0 - b0:r1 - b0 + 1, q0 - d0:q1 - d0 + 1] = v
        if have:
            if new is None:
                new = [np.empty((b1 - b0 + 1, d1 - d0 + 1)) for _ in self.table]
            for t, old in zip(new, self.table):
                t[o[0] - b0:o[1] - b0 + 1, o[2] - d0:o[3] - d0 + 1] = old[o[0] - c0:o[1] - c0 + 1, o[2] - e0:o[3] - e0 + 1]
        self.table, self.box, self.key = tuple(new), box, confidence


def two_totals_exact_path(totals_func, conditional=None):
    """``exact(design, ns)`` for a two-rate interval ``totals_func(xa, ea, xb, eb, confidence)``
    (rate ratio: measured on the log scale; rate difference: as it is).

    ``conditional = (pair_func, mapper)``: the limits are ``mapper(*pair_func(xa, xb,
    confidence), ea, eb)``, with the values of ``pair_func`` kept in a :class:`GridCache`.
    """
    cache = None if conditional is None else GridCache(conditional[0])

    def limits(a, b, ea, eb, confidence):
        if cache is not None:
            lo, hi = cache.get(a, b, confidence)
            return conditional[1](lo.ravel(), hi.ravel(), ea, eb)
        xa = np.arange(a[0], a[1] + 1, dtype=np.float64)
        xb = np.arange(b[0], b[1] + 1, dtype=np.float64)
        ga, gb = np.meshgrid(xa, xb, indexing="ij")
        return totals_func(ga.ravel(), ea, gb.ravel(), eb, confidence)

    def exact(design, ns) -> list[dict]:
        _pairs_cap(design, ns)
        t, out = exposure(design), []
        for n in ns:
            nb = design.n_b(n)
            la, lb = total_law(design.model, n), total_law(design.model_b, nb)
            a, b = support_bounds(la), support_bounds(lb)
            w = np.outer(la.pmf(np.arange(a[0], a[1] + 1)), lb.pmf(np.arange(b[0], b[1] + 1))).ravel()
            lo, hi = limits(a, b, n * t, nb * t, design.confidence)
            out.append(measures(lo, hi, w, design.true_value, design.margin, design.assurance, design.ratio_scale))
        return out

    return exact
