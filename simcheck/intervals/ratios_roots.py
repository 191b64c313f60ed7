"""Roots of many monotone functions at once: the score and exact intervals of the ratios.

Each interval limit of :mod:`simcheck.intervals.ratios_score` and
:mod:`simcheck.intervals.ratios_conditional` is the root, on the log scale
of the ratio, of a decreasing function of one table. The functions of all
tables of a call are solved together (vectorised), each element to its own
tolerance, so a limit never depends on the other tables of the call.

References
----------
.. [1] Dowell, M. & Jarratt, P. (1971). A modified regula falsi method for
   computing the root of an equation. BIT 11, 168-174 (the Illinois
   method; from memory).
"""

from __future__ import annotations

import numpy as np
from scipy import stats

#: bisection bracket for the log ratio of the score intervals: ratios beyond
#: e^±40 (about 2e17) are read as 0 or infinity
LOG_BRACKET = 40.0
#: bisection steps before the Illinois steps (bracket width 80 / 2^6)
BISECT_FIRST = 6
#: a root is found when its bracket on the log scale is this narrow (relative 1e-12 on the ratio)
ROOT_TOL = 1e-12
#: ... or when the statistic at a point is within this of its target (rounding level of the statistic)
F_TOL = 1e-13
#: most steps of one root (every fifth bisects: 80 / 2^40 < ROOT_TOL within 200)
MAX_STEPS = 200


def two_sided_z(confidence: float) -> float:
    """The normal quantile z_{1 - alpha/2}."""
    return float(stats.norm.ppf(0.5 + confidence / 2.0))


def count_arrays(*values):
    """Counts and group sizes as float arrays broadcast together."""
    return np.broadcast_arrays(*(np.asarray(v, dtype=np.float64) for v in values))


def score_limits(statistic, z: float, args):
    """Limits exp(t) where a decreasing score statistic T(t) crosses +z (lower) and -z (upper).

    ``statistic(t, *args)`` takes arrays of log ratios and of the counts
    ``args`` (broadcast together); see :func:`decreasing_roots`.
    """
    args = np.broadcast_arrays(*args)
    flat = [a.ravel() for a in args]
    out = []
    for target in (z, -z):
        roots = decreasing_roots(lambda t, idx: statistic(t, *(a[idx] for a in flat)) - target, flat[0].size)
        out.append(roots.reshape(args[0].shape))
    return out[0], out[1]


def decreasing_roots(f, size: int) -> np.ndarray:
    """exp(t) at the roots of decreasing functions ``f(t, idx)`` of the log ratio, one per element.

    A function still <= 0 at t = -LOG_BRACKET gives 0, one still >= 0 at
    t = LOG_BRACKET gives infinity; the others are solved by
    :func:`_crossing`, each element on its own (so a limit does not depend
    on the other tables of the call).
    """
    every = np.arange(size)
    f_lo = f(np.full(size, -LOG_BRACKET), every)
    f_hi = f(np.full(size, LOG_BRACKET), every)
    below_all = f_lo <= 0   # the root lies below the bracket
    above_all = f_hi >= 0   # ... or above it
    limit = np.where(below_all, 0.0, np.inf)
    todo = np.flatnonzero(~below_all & ~above_all)
    if todo.size:
        limit[todo] = np.exp(_crossing(lambda t, idx: f(t, todo[idx]), f_lo[todo], f_hi[todo]))
    return limit


def _crossing(f, f_lo, f_hi):
    """Roots of decreasing functions on [-LOG_BRACKET, LOG_BRACKET] with f_lo > 0 > f_hi, to ROOT_TOL.

    A few bisection steps, then the Illinois variant of regula falsi
    (Dowell & Jarratt 1971), each element until its bracket is narrower
    than ROOT_TOL or the function is within F_TOL of 0; every fifth step
    bisects, which bounds the steps where the secant stalls. ``f(t, idx)``
    evaluates the elements ``idx``.
    """
    a = np.full(f_lo.shape, -LOG_BRACKET)
    b = np.full(f_lo.shape, LOG_BRACKET)
    fa, fb = f_lo.copy(), f_hi.copy()
    last = np.zeros(f_lo.shape, np.int8)   # side replaced last: -1 lower end, +1 upper end
    active = np.arange(a.size)
    for step in range(MAX_STEPS):
        if active.size == 0:
            break
        aa, bb, ffa, ffb = a[active], b[active], fa[active], fb[active]
        mid = 0.5 * (aa + bb)
        bisect = step < BISECT_FIRST or step % 5 == 4
        if bisect:
            c = mid
        else:
            with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
                c = bb - ffb * (bb - aa) / (ffb - ffa)
            c = np.where(np.isfinite(c) & (c > aa) & (c < bb), c, mid)
        fc = f(c, active)
        right = fc > 0                      # the root lies above c: c replaces the lower end
        # Illinois: an end kept twice in a row has its value halved, so the next secant moves it
        keep = 1.0 if bisect else 0.5
        a[active] = np.where(right, c, aa)
        fa[active] = np.where(right, fc, np.where(last[active] == 1, keep * ffa, ffa))
        b[active] = np.where(right, bb, c)
        fb[active] = np.where(right, np.where(last[active] == -1, keep * ffb, ffb), fc)
        last[active] = np.where(right, -1, 1)
        # |f(c)| at rounding level: c is the root (within ~1e-13 / slope of the statistic)
        at_root = np.abs(fc) <= F_TOL
        a[active[at_root]] = b[active[at_root]] = c[at_root]
        active = active[(b[active] - a[active] > ROOT_TOL) & ~at_root]
    return 0.5 * (a + b)
