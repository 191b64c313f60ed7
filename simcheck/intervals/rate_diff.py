"""Intervals for the difference of two event rates (estimand ``rate-diff``).

Data as for the rate ratio (:mod:`simcheck.intervals.rates`): totals X_a, X_b
over exposures E_a = n t, E_b = n_b t; the estimate is d = X_a / E_a -
X_b / E_b.

``wald``
    d ± z sqrt(X_a / E_a^2 + X_b / E_b^2); zero width when both counts are 0.
``score``
    the score interval (Miettinen & Nurminen 1985, for person-time data):
    the delta with (d - delta)^2 / V(delta) = z^2, where V(delta) =
    l_a / E_a + l_b / E_b uses the rates' maximum-likelihood estimates
    restricted to l_a - l_b = delta, l_b the positive root of
    (E_a + E_b) l^2 + ((E_a + E_b) delta - X_a - X_b) l - X_b delta = 0. The
    limits are found from a bracket (found by doubling) with the Illinois
    iteration, vectorised over replicates.

References
----------
.. [1] Miettinen, O. & Nurminen, M. (1985). Comparative analysis of two
   rates. Statistics in Medicine 4, 213-226 (from memory; no variance
   correction factor is applied here).
"""

from __future__ import annotations

import numpy as np
from scipy import stats

from simcheck.intervals.base import Method, register
from simcheck.intervals.rates import EXACT_TEXT_TWO, exposure_of, from_group_totals
from simcheck.intervals.rates_exact import two_totals_exact_path, totals_law_applies

#: Illinois (modified regula falsi) steps for each score limit
ILLINOIS_STEPS = 60
#: bisection halvings for brackets the Illinois steps left unsettled
HALVINGS = 60
#: doublings tried while looking for a bracket (far more than any finite data need)
DOUBLINGS = 200


def wald_diff_totals(xa, ea, xb, eb, confidence: float):
    """d ± z sqrt(xa / ea^2 + xb / eb^2)."""
    xa, xb = np.asarray(xa, np.float64), np.asarray(xb, np.float64)
    d = xa / ea - xb / eb
    h = float(stats.norm.ppf(0.5 + confidence / 2.0)) * np.sqrt(xa / ea ** 2 + xb / eb ** 2)
    return d - h, d + h


def _score_stat(delta, xa, ea, xb, eb, d):
    """(d - delta) / sqrt(V(delta)) with the restricted estimates of the two rates."""
    a = ea + eb
    b = a * delta - xa - xb
    disc = (a * delta + xb - xa) ** 2 + 4.0 * xa * xb  # = b^2 + 4 a xb delta, written to stay >= 0
    lb = np.maximum((-b + np.sqrt(disc)) / (2.0 * a), np.maximum(-delta, 0.0))
    la = lb + delta
    v = np.maximum(la, 0.0) / ea + lb / eb
    with np.errstate(divide="ignore", invalid="ignore"):
        return (d - delta) / np.sqrt(v)


def _score_limit(xa, ea, xb, eb, d, z, side: float):
    """The score limit on one side (+1 upper, -1 lower): bracket by doubling, then the
    Illinois (modified regula falsi) iteration; rows not settled by then are bisected."""
    def g(delta):  # > 0 inside the interval, < 0 beyond the limit
        return side * _score_stat(delta, xa, ea, xb, eb, d) + z

    step = np.sqrt((xa + 1.0) / ea ** 2 + (xb + 1.0) / eb ** 2)
    near, far = d.copy(), d + side * step
    g_near = np.full(d.shape, z)  # the statistic is 0 at the estimate
    g_far = g(far)
    for _ in range(DOUBLINGS):
        grow = ~(g_far < 0)
        if not grow.any():
            break
        near, g_near = np.where(grow, far, near), np.where(grow, g_far, g_near)
        step = np.where(grow, 2.0 * step, step)
        far = np.where(grow, d + side * step, far)
        g_far = np.where(grow, g(far), g_far)
    near, far = _illinois(g, near, far, g_near, g_far, np.sqrt((xa + 1.0) / ea ** 2 + (xb + 1.0) / eb ** 2))
    return 0.5 * (near + far)


def _illinois(g, near, far, g_near, g_far, scale):
    """Shrink brackets [near, far] with g(near) > 0 > g(far) below 1e-11 of their size, or of
    ``scale`` (the standard error's size) for limits near 0 (vectorised); closer than that
    the statistic's rounding makes further steps stall."""
    last = np.zeros(near.shape, np.int8)  # which end moved last: 1 far, -1 near
    for _ in range(ILLINOIS_STEPS):
        width = np.abs(far - near)
        live = width > 1e-11 * (np.abs(near) + np.abs(far) + scale)
        if not live.any():
            return near, far
        with np.errstate(divide="ignore", invalid="ignore"):
            x = far - g_far * (far - near) / (g_far - g_near)
        off = ~np.isfinite(x) | ((x - near) * (x - far) >= 0)  # not strictly inside: bisect
        x = np.where(off, 0.5 * (near + far), x)
        gx = np.where(live, g(x), 1.0)
        beyond = live & (gx < 0)
        inside = live & ~beyond
        g_near = np.where(beyond & (last == 1), 0.5 * g_near, g_near)
        g_far = np.where(inside & (last == -1), 0.5 * g_far, g_far)
        far, g_far = np.where(beyond, x, far), np.where(beyond, gx, g_far)
        near, g_near = np.where(inside, x, near), np.where(inside, gx, g_near)
        last = np.where(beyond, 1, np.where(inside, -1, last)).astype(np.int8)
    for _ in range(HALVINGS):  # rows the iteration left unsettled (rare)
        mid = 0.5 * (near + far)
        out = g(mid) < 0
        far, near = np.where(out, mid, far), np.where(out, near, mid)
    return near, far


def score_diff_totals(xa, ea, xb, eb, confidence: float):
    """The score interval for the rate difference (restricted maximum likelihood variance)."""
    xa, xb = np.asarray(xa, np.float64), np.asarray(xb, np.float64)
    xa, xb = np.broadcast_arrays(xa, xb)
    d = xa / ea - xb / eb
    z = float(stats.norm.ppf(0.5 + confidence / 2.0))
    return _score_limit(xa, ea, xb, eb, d, z, -1.0), _score_limit(xa, ea, xb, eb, d, z, 1.0)


wald_diff = from_group_totals(wald_diff_totals)
score_diff = from_group_totals(score_diff_totals)

register(Method(
    "wald", "rate-diff", "raw", wald_diff,
    summary="d ± z sqrt(X_a/E_a^2 + X_b/E_b^2); zero width when both counts are 0",
    references=("common practice",),
    exact=two_totals_exact_path(wald_diff_totals), exact_applies=totals_law_applies, exact_text=EXACT_TEXT_TWO,
))
register(Method(
    "score", "rate-diff", "raw", score_diff,
    summary="score interval with the rates' restricted maximum-likelihood estimates (Miettinen-Nurminen, no correction)",
    references=("Miettinen & Nurminen (1985), Statistics in Medicine 4:213-226 (from memory)",), prose="score",
    exact=two_totals_exact_path(score_diff_totals), exact_applies=totals_law_applies, exact_text=EXACT_TEXT_TWO,
))
