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
    p_a = phi p_b stays below z^2; solved numerically (vectorised root
    finding on log phi, :mod:`simcheck.intervals.ratios_roots`). x_a = 0
    gives the lower limit 0, x_b = 0 the upper limit infinity.
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

from simcheck.intervals.base import Method, Sample, register
from simcheck.intervals.ratios_conditional import exact_conditional_limits
from simcheck.intervals.ratios_roots import count_arrays, two_sided_z
from simcheck.intervals.ratios_score import koopman_limits, mn_odds_limits, mn_ratio_limits

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


def _log_interval(log_est, var, z):
    """exp(log_est ± z sqrt(var)); NaN where either is NaN."""
    half = z * np.sqrt(var)
    with np.errstate(over="ignore", invalid="ignore"):
        return np.exp(log_est - half), np.exp(log_est + half)


# ----------------------------------------------------------------------------- risk ratio
def katz_limits(xa, na, xb, nb, confidence: float):
    """Katz's log interval for p_a / p_b; NaN where x_a or x_b is 0."""
    xa, na, xb, nb = count_arrays(xa, na, xb, nb)
    ok = (xa > 0) & (xb > 0)
    with np.errstate(divide="ignore", invalid="ignore"):
        log_rr = np.log(xa / na) - np.log(xb / nb)
        var = 1.0 / xa - 1.0 / na + 1.0 / xb - 1.0 / nb
    lo, hi = _log_interval(np.where(ok, log_rr, np.nan), np.where(ok, np.maximum(var, 0.0), np.nan),
                           two_sided_z(confidence))
    return lo, hi


def adjusted_log_limits(xa, na, xb, nb, confidence: float):
    """The adjusted log interval: 0.5 added to every count and group size; (0, inf) when x_a = x_b = 0."""
    xa, na, xb, nb = count_arrays(xa, na, xb, nb)
    a, m, b, n = xa + 0.5, na + 0.5, xb + 0.5, nb + 0.5
    lo, hi = _log_interval(np.log(a / m) - np.log(b / n), np.maximum(1 / a - 1 / m + 1 / b - 1 / n, 0.0),
                           two_sided_z(confidence))
    none = (xa == 0) & (xb == 0)
    return np.where(none, 0.0, lo), np.where(none, np.inf, hi)


# ----------------------------------------------------------------------------- odds ratio
def _woolf(a, b, c, d, z):
    """Log interval for a d / (b c): a, b events and non-events of group a; c, d of group b."""
    with np.errstate(divide="ignore", invalid="ignore"):
        log_or = np.log(a) - np.log(b) - np.log(c) + np.log(d)
        var = 1 / a + 1 / b + 1 / c + 1 / d
    return _log_interval(log_or, var, z)


def woolf_limits(xa, na, xb, nb, confidence: float):
    """Woolf's logit interval for the odds ratio; NaN where a cell is 0."""
    xa, na, xb, nb = count_arrays(xa, na, xb, nb)
    cells = (xa, na - xa, xb, nb - xb)
    ok = np.logical_and.reduce([c > 0 for c in cells])
    a, b, c, d = (np.where(ok, x, np.nan) for x in cells)
    return _woolf(a, b, c, d, two_sided_z(confidence))


def woolf_haldane_limits(xa, na, xb, nb, confidence: float):
    """Woolf's interval with 0.5 added to all four cells when a cell is 0."""
    xa, na, xb, nb = count_arrays(xa, na, xb, nb)
    a, b, c, d = xa, na - xa, xb, nb - xb
    add = np.where((a == 0) | (b == 0) | (c == 0) | (d == 0), 0.5, 0.0)
    return _woolf(a + add, b + add, c + add, d + add, two_sided_z(confidence))


def gart_limits(xa, na, xb, nb, confidence: float):
    """Gart's adjusted logit interval: 0.5 added to all four cells."""
    xa, na, xb, nb = count_arrays(xa, na, xb, nb)
    return _woolf(xa + 0.5, na - xa + 0.5, xb + 0.5, nb - xb + 0.5, two_sided_z(confidence))


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
