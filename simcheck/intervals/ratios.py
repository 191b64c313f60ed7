"""Intervals for the risk ratio and the odds ratio of two independent groups of 0/1 data.

Group a has ``x_a`` events in ``n_a`` units, group b ``x_b`` in ``n_b``; the
risk ratio is (x_a / n_a) / (x_b / n_b), the odds ratio
x_a (n_b - x_b) / ((n_a - x_a) x_b). Every method depends on the data only
through the four counts, so the functions below take counts (vectorised,
broadcasting) and the registered ``raw`` methods count the events of the
drawn 0/1 values first.

Risk ratio (estimand ``risk-ratio``):

``katz``
    log RR ± z sqrt(1/x_a - 1/n_a + 1/x_b - 1/n_b) [1]_. With x_a = 0 or
    x_b = 0 the log ratio or its variance is infinite: the interval is not
    computed (NaN limits; no correction is added behind the user's back).
``adjusted-log``
    The same with 0.5 added to every count and every group size, always:
    ((x_a + .5)/(n_a + .5)) / ((x_b + .5)/(n_b + .5)), variance
    1/(x_a + .5) - 1/(n_a + .5) + 1/(x_b + .5) - 1/(n_b + .5) [2]_ [3]_.
    Defined for every table except x_a = x_b = 0, where it is (0, inf)
    (both groups without events say nothing about the ratio).
``koopman``
    The asymptotic score interval [4]_: the ratios phi whose Pearson
    chi-square with the maximum-likelihood proportions under
    p_a = phi p_b stays below z^2; solved numerically (vectorised
    bisection on log phi). x_a = 0 gives the lower limit 0, x_b = 0 the
    upper limit infinity.
``miettinen-nurminen``
    Koopman's score statistic with its variance multiplied by N / (N - 1),
    N = n_a + n_b [5]_ (Koopman's statistic equals Miettinen and
    Nurminen's without that factor [6]_).

Odds ratio (estimand ``odds-ratio``):

``woolf``
    log OR ± z sqrt(1/a + 1/b + 1/c + 1/d) over the four cells [7]_; not
    computed (NaN) when a cell is zero.
``woolf-haldane``
    Woolf's interval with 0.5 added to all four cells when (and only when)
    a cell is zero: the Haldane-Anscombe correction [8]_ [9]_ as commonly
    applied (common practice for the "only when a cell is zero" rule).
``gart``
    Gart's adjusted logit interval: 0.5 added to all four cells always [10]_.
``miettinen-nurminen``
    The score interval for the odds ratio with the N / (N - 1) variance
    correction [5]_, solved numerically like ``koopman``.
``exact-conditional``
    Cornfield's exact interval [11]_: the odds ratios not rejected by the
    two one-sided conditional tests at alpha/2 given the event total
    (Fisher's noncentral hypergeometric law of x_a); conservative, like
    every exact interval of discrete data.

Infinite limits (a lower limit 0 or an upper limit infinity) give an
unbounded margin on the ratio scale; NaN limits count as not computed
(see :mod:`simcheck.engine.measures`).

References
----------
.. [1] Katz, D., Baptista, J., Azen, S. P. & Pike, M. C. (1978). Obtaining
   confidence intervals for the risk ratio in cohort studies. Biometrics
   34, 469-474.
.. [2] Walter, S. D. (1975). The distribution of Levin's measure of
   attributable risk. Biometrika 62, 371-374.
.. [3] Pettigrew, H. M., Gart, J. J. & Thomas, D. G. (1986). The bias and
   higher cumulants of the logarithm of a binomial variate. Biometrika 73,
   425-435.
.. [4] Koopman, P. A. R. (1984). Confidence intervals for the ratio of two
   binomial proportions. Biometrics 40, 513-517.
.. [5] Miettinen, O. & Nurminen, M. (1985). Comparative analysis of two
   rates. Statistics in Medicine 4, 213-226.
.. [6] Fagerland, M. W., Lydersen, S. & Laake, P. (2015). Recommended
   confidence intervals for two independent binomial proportions.
   Statistical Methods in Medical Research 24, 224-254.
.. [7] Woolf, B. (1955). On estimating the relation between blood group and
   disease. Annals of Human Genetics 19, 251-253.
.. [8] Haldane, J. B. S. (1956). The estimation and significance of the
   logarithm of a ratio of frequencies. Annals of Human Genetics 20, 309-311.
.. [9] Anscombe, F. J. (1956). On estimating binomial response relations.
   Biometrika 43, 461-464.
.. [10] Gart, J. J. (1966). Alternative analyses of contingency tables.
   Journal of the Royal Statistical Society B 28, 164-179.
.. [11] Cornfield, J. (1956). A statistical problem arising from
   retrospective studies. Proceedings of the Third Berkeley Symposium on
   Mathematical Statistics and Probability 4, 135-148.
"""

from __future__ import annotations

import numpy as np
from scipy import stats
from scipy.special import gammaln

from simcheck.intervals.base import Method, Sample, register

#: bisection bracket for the log ratio of the score intervals: ratios beyond
#: e^±40 (about 2e17) are read as 0 or infinity
LOG_BRACKET = 40.0
#: bisection steps before the Illinois steps (bracket width 80 / 2^6)
BISECT_FIRST = 6
#: a root is found when its bracket on the log scale is this narrow (relative 1e-12 on the ratio)
ROOT_TOL = 1e-12
#: padded support cells of the exact conditional interval evaluated at once (memory)
COND_CELLS = 1 << 20
#: ... or when the statistic at a point is within this of its target (rounding level of the statistic)
F_TOL = 1e-13
#: most steps of one root (every fifth bisects: 80 / 2^40 < ROOT_TOL within 200)
MAX_STEPS = 200

_KATZ = "Katz, Baptista, Azen & Pike (1978), Biometrics 34:469-474"
_ADJLOG = ("Walter (1975), Biometrika 62:371-374",
           "Pettigrew, Gart & Thomas (1986), Biometrika 73:425-435")
_KOOPMAN = "Koopman (1984), Biometrics 40:513-517"
_MN = "Miettinen & Nurminen (1985), Statistics in Medicine 4:213-226"
_FLL = "Fagerland, Lydersen & Laake (2015), Statistical Methods in Medical Research 24:224-254"
_WOOLF = "Woolf (1955), Annals of Human Genetics 19:251-253"
_HALDANE = ("Haldane (1956), Annals of Human Genetics 20:309-311", "Anscombe (1956), Biometrika 43:461-464")
_CORNFIELD = "Cornfield (1956), Proceedings of the Third Berkeley Symposium 4:135-148"
_GART = "Gart (1966), Journal of the Royal Statistical Society B 28:164-179"


def _z(confidence: float) -> float:
    return float(stats.norm.ppf(0.5 + confidence / 2.0))


def _arrays(*values):
    return np.broadcast_arrays(*(np.asarray(v, dtype=np.float64) for v in values))


def _log_interval(log_est, var, z):
    """exp(log_est ± z sqrt(var)); NaN where either is NaN."""
    half = z * np.sqrt(var)
    with np.errstate(over="ignore", invalid="ignore"):
        return np.exp(log_est - half), np.exp(log_est + half)


# ----------------------------------------------------------------------------- risk ratio
def katz_limits(xa, na, xb, nb, confidence: float):
    """Katz's log interval for p_a / p_b; NaN where x_a or x_b is 0."""
    xa, na, xb, nb = _arrays(xa, na, xb, nb)
    ok = (xa > 0) & (xb > 0)
    with np.errstate(divide="ignore", invalid="ignore"):
        log_rr = np.log(xa / na) - np.log(xb / nb)
        var = 1.0 / xa - 1.0 / na + 1.0 / xb - 1.0 / nb
    lo, hi = _log_interval(np.where(ok, log_rr, np.nan), np.where(ok, np.maximum(var, 0.0), np.nan),
                           _z(confidence))
    return lo, hi


def adjusted_log_limits(xa, na, xb, nb, confidence: float):
    """The adjusted log interval: 0.5 added to every count and group size; (0, inf) when x_a = x_b = 0."""
    xa, na, xb, nb = _arrays(xa, na, xb, nb)
    a, m, b, n = xa + 0.5, na + 0.5, xb + 0.5, nb + 0.5
    lo, hi = _log_interval(np.log(a / m) - np.log(b / n), np.maximum(1 / a - 1 / m + 1 / b - 1 / n, 0.0),
                           _z(confidence))
    none = (xa == 0) & (xb == 0)
    return np.where(none, 0.0, lo), np.where(none, np.inf, hi)


def _score_rr(log_phi, xa, na, xb, nb, correction):
    """Signed score statistic for p_a / p_b = phi (decreasing in phi).

    The proportions under the constraint p_a = phi p_b maximise the
    likelihood: p_b is the root in [0, min(1, 1/phi)] of
    N phi p^2 - (n_a phi + x_a + n_b + x_b phi) p + (x_a + x_b) = 0
    (Miettinen & Nurminen 1985), taken in the form free of cancellation.
    """
    phi = np.exp(log_phi)
    n_tot = na + nb
    b_coef = na * phi + xa + nb + xb * phi
    disc = np.maximum(b_coef * b_coef - 4.0 * n_tot * phi * (xa + xb), 0.0)
    pb = 2.0 * (xa + xb) / (b_coef + np.sqrt(disc))
    pa = np.minimum(phi * pb, 1.0)
    num = xa / na - phi * xb / nb
    var = (pa * (1.0 - pa) / na + phi * phi * pb * (1.0 - pb) / nb) * correction
    return _signed_ratio(num, var)


def _signed_ratio(num, var):
    """num / sqrt(var), with 0/0 = 0 and x/0 = ±inf."""
    with np.errstate(divide="ignore", invalid="ignore"):
        t = num / np.sqrt(var)
        t = np.where(num == 0, 0.0, t)
        return np.where((var <= 0) & (num != 0), np.sign(num) * np.inf, t)


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
    than ROOT_TOL or the statistic hits its target to F_TOL; every fifth step bisects, which bounds the steps even
    where the secant stalls. ``f(t, idx)`` evaluates the elements ``idx``.
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


def _score_rr_limits(xa, na, xb, nb, confidence, correction):
    xa, na, xb, nb = _arrays(xa, na, xb, nb)
    corr = np.asarray(correction(na + nb), dtype=np.float64)
    return score_limits(_score_rr, _z(confidence), (xa, na, xb, nb, corr))


def koopman_limits(xa, na, xb, nb, confidence: float):
    """Koopman's (1984) score interval for p_a / p_b."""
    return _score_rr_limits(xa, na, xb, nb, confidence, lambda n: 1.0)


def _mn_factor(n_tot):
    return n_tot / (n_tot - 1.0)


def mn_ratio_limits(xa, na, xb, nb, confidence: float):
    """Miettinen and Nurminen's (1985) score interval for p_a / p_b (variance times N / (N - 1))."""
    return _score_rr_limits(xa, na, xb, nb, confidence, _mn_factor)


# ----------------------------------------------------------------------------- odds ratio
def _woolf(a, b, c, d, z):
    """Log interval for a d / (b c): a, b events and non-events of group a; c, d of group b."""
    with np.errstate(divide="ignore", invalid="ignore"):
        log_or = np.log(a) - np.log(b) - np.log(c) + np.log(d)
        var = 1 / a + 1 / b + 1 / c + 1 / d
    return _log_interval(log_or, var, z)


def woolf_limits(xa, na, xb, nb, confidence: float):
    """Woolf's logit interval for the odds ratio; NaN where a cell is 0."""
    xa, na, xb, nb = _arrays(xa, na, xb, nb)
    cells = (xa, na - xa, xb, nb - xb)
    ok = np.logical_and.reduce([c > 0 for c in cells])
    a, b, c, d = (np.where(ok, x, np.nan) for x in cells)
    return _woolf(a, b, c, d, _z(confidence))


def woolf_haldane_limits(xa, na, xb, nb, confidence: float):
    """Woolf's interval with 0.5 added to all four cells when a cell is 0."""
    xa, na, xb, nb = _arrays(xa, na, xb, nb)
    a, b, c, d = xa, na - xa, xb, nb - xb
    add = np.where((a == 0) | (b == 0) | (c == 0) | (d == 0), 0.5, 0.0)
    return _woolf(a + add, b + add, c + add, d + add, _z(confidence))


def gart_limits(xa, na, xb, nb, confidence: float):
    """Gart's adjusted logit interval: 0.5 added to all four cells."""
    xa, na, xb, nb = _arrays(xa, na, xb, nb)
    return _woolf(xa + 0.5, na - xa + 0.5, xb + 0.5, nb - xb + 0.5, _z(confidence))


def _score_or(log_psi, xa, na, xb, nb, correction):
    """Signed score statistic for the odds ratio psi (decreasing in psi).

    Under the odds ratio psi the maximum-likelihood proportions keep the
    event total m = x_a + x_b: p_b is the root in [0, 1] of
    n_b (psi - 1) p^2 + (n_a psi + n_b - m (psi - 1)) p - m = 0, written
    as 2 m / (B + sqrt(B^2 + 4 n_b (psi - 1) m)), free of cancellation and
    valid at psi = 1; p_a = psi p_b / (1 + p_b (psi - 1)).
    """
    psi = np.exp(log_psi)
    m = xa + xb
    b_coef = na * psi + nb - m * (psi - 1.0)
    disc = np.maximum(b_coef * b_coef + 4.0 * nb * (psi - 1.0) * m, 0.0)
    with np.errstate(divide="ignore", invalid="ignore"):
        pb = np.where(m > 0, 2.0 * m / (b_coef + np.sqrt(disc)), 0.0)
        pb = np.clip(pb, 0.0, 1.0)
        pa = np.clip(psi * pb / (1.0 + pb * (psi - 1.0)), 0.0, 1.0)
        u = xa - na * pa
        # Var(x_a - n_a p_a) under the constraint: 1 / (1/(n_a pa qa) + 1/(n_b pb qb)), times N/(N-1)
        inv = 1.0 / (na * pa * (1.0 - pa)) + 1.0 / (nb * pb * (1.0 - pb))
        var = correction / inv
    return _signed_ratio(u, np.where(np.isfinite(inv), var, 0.0))


def mn_odds_limits(xa, na, xb, nb, confidence: float):
    """Miettinen and Nurminen's (1985) score interval for the odds ratio."""
    xa, na, xb, nb = _arrays(xa, na, xb, nb)
    corr = _mn_factor(na + nb)
    return score_limits(_score_or, _z(confidence), (xa, na, xb, nb, corr))


def exact_conditional_limits(xa, na, xb, nb, confidence: float):
    """Cornfield's exact conditional interval for the odds ratio.

    Given the event total m = x_a + x_b, x_a follows Fisher's noncentral
    hypergeometric law, P(x) proportional to C(n_a, x) C(n_b, m - x) psi^x
    on max(0, m - n_b) <= x <= min(n_a, m); the lower limit solves
    P(X >= x_a; psi) = alpha/2 (0 when x_a is the smallest possible count),
    the upper P(X <= x_a; psi) = alpha/2 (infinity when x_a is the
    largest). Each distinct table is solved once; the supports are padded
    into one matrix, in chunks of at most ``COND_CELLS`` cells.
    """
    xa, na, xb, nb = _arrays(xa, na, xb, nb)
    shape = xa.shape
    tables, back = np.unique(np.stack([v.ravel() for v in (xa, na, xb + xa, nb)], axis=1), axis=0,
                             return_inverse=True)
    lo, hi = np.empty(len(tables)), np.empty(len(tables))
    half = (1.0 - confidence) / 2.0
    width = int(np.max(np.minimum(tables[:, 1], tables[:, 2]) - np.maximum(0, tables[:, 2] - tables[:, 3]))) + 1
    step = max(1, COND_CELLS // width)
    for s0 in range(0, len(tables), step):
        part = slice(s0, s0 + step)
        lw, pos = _conditional_support(tables[part], width)
        lo[part] = decreasing_roots(_conditional_tail(lw, pos, half, upper=False), len(pos))
        hi[part] = decreasing_roots(_conditional_tail(lw, pos, half, upper=True), len(pos))
    back = back.ravel()
    return lo[back].reshape(shape), hi[back].reshape(shape)


def _conditional_support(tables, width):
    """Log weights log C(n_a, x) + log C(n_b, m - x) (up to a constant) on each table's
    support, padded with -inf to ``width`` columns, and the column of the observed x_a."""
    xa, na, m, nb = tables.T
    first = np.maximum(0.0, m - nb)
    xs = first[:, None] + np.arange(width)[None, :]
    valid = xs <= np.minimum(na, m)[:, None]
    xv = np.where(valid, xs, first[:, None])  # keep gammaln's arguments positive off the support
    lw = -(gammaln(xv + 1) + gammaln(na[:, None] - xv + 1) + gammaln(m[:, None] - xv + 1)
           + gammaln(nb[:, None] - m[:, None] + xv + 1))
    return np.where(valid, lw, -np.inf), (xa - first).astype(np.int64)


def _conditional_tail(lw, pos, half, *, upper: bool):
    """f(t, idx), decreasing in t = log psi: P(X <= x_a) - alpha/2, or alpha/2 - P(X >= x_a)."""
    cols = np.arange(lw.shape[1])

    def f(t, idx):
        w = lw[idx] + t[:, None] * cols[None, :]
        w -= w.max(axis=1, keepdims=True)
        cum = np.cumsum(np.exp(w), axis=1)
        total = cum[:, -1]
        p = pos[idx]
        rows = np.arange(idx.size)
        if upper:
            return cum[rows, p] / total - half
        before = np.where(p > 0, cum[rows, np.maximum(p - 1, 0)], 0.0)
        return half - (total - before) / total

    return f


# ----------------------------------------------------------------------------- registration
#: (estimand, name) -> counts function (xa, na, xb, nb, confidence) -> (lo, hi)
COUNT_FUNCS = {
    ("risk-ratio", "katz"): katz_limits,
    ("risk-ratio", "adjusted-log"): adjusted_log_limits,
    ("risk-ratio", "koopman"): koopman_limits,
    ("risk-ratio", "miettinen-nurminen"): mn_ratio_limits,
    ("odds-ratio", "woolf"): woolf_limits,
    ("odds-ratio", "woolf-haldane"): woolf_haldane_limits,
    ("odds-ratio", "gart"): gart_limits,
    ("odds-ratio", "miettinen-nurminen"): mn_odds_limits,
    ("odds-ratio", "exact-conditional"): exact_conditional_limits,
}


#: the methods' names as written in prose (reports)
PROSE = {
    "katz": "Katz log", "adjusted-log": "adjusted log", "koopman": "Koopman score",
    "miettinen-nurminen": "Miettinen–Nurminen score", "woolf": "Woolf logit",
    "woolf-haldane": "Woolf logit (Haldane–Anscombe correction)", "gart": "Gart adjusted logit",
    "exact-conditional": "Cornfield exact conditional",
}


def counts_of(s: Sample):
    """(x_a, n_a, x_b, n_b) of a sample of 0/1 values in two groups."""
    return s.x.sum(axis=1), s.n, s.xb.sum(axis=1), s.n_b


def _raw(func):
    def method(s: Sample, confidence: float):
        xa, na, xb, nb = counts_of(s)
        return func(xa, na, xb, nb, confidence)

    method.__name__ = func.__name__.replace("_limits", "")
    method.__doc__ = f"{func.__doc__} (from drawn 0/1 values)"
    return method


def _register_all() -> None:
    from simcheck.intervals.ratios_exact import exact_applies, exact_path

    info = {
        "katz": ("log RR ± z SE; not computed when a group has no events", (_KATZ,)),
        "adjusted-log": ("log interval with 0.5 added to every count and group size", _ADJLOG),
        "koopman": ("score interval (Pearson chi-square under the ratio), solved numerically", (_KOOPMAN, _FLL)),
        "woolf": ("log OR ± z SE over the four cells; not computed when a cell is zero", (_WOOLF,)),
        "woolf-haldane": ("Woolf's interval, 0.5 added to all four cells when a cell is zero", (_WOOLF,) + _HALDANE),
        "gart": ("adjusted logit interval: 0.5 added to all four cells always", (_GART, _FLL)),
        "exact-conditional": ("Cornfield's exact interval from the conditional (noncentral hypergeometric) law",
                              (_CORNFIELD, _FLL)),
    }
    for (estimand, name), func in COUNT_FUNCS.items():
        if name == "miettinen-nurminen":
            summary = "score interval with the N/(N-1) variance correction, solved numerically"
            refs = (_MN, _FLL)
        else:
            summary, refs = info[name]
        register(Method(name, estimand, "raw", _raw(func), summary=summary, references=refs, prose=PROSE[name],
                        exact=exact_path(func), exact_applies=exact_applies))


_register_all()
