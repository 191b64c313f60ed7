"""Intervals for event rates per unit of exposure (estimands ``rate``, ``rate-ratio``).

Data: each of the n units contributes a count; every unit has the same
exposure t (``target.exposure``, person-years, litres, m^2; 1 when not
given). The rate is estimated by the total count over the total exposure,
X / E with E = n t; the rate ratio by (X_a / E_a) / (X_b / E_b).

``rate`` (limits for the Poisson mean of the total X, divided by E):

``garwood``
    exact (equal-tailed, Poisson test inverted): lower Gamma_{a/2}(X, 1)
    (0 at X = 0), upper Gamma_{1-a/2}(X + 1, 1), i.e. chi2_{a/2}(2X) / 2 and
    chi2_{1-a/2}(2X + 2) / 2 (Garwood 1936; Ulm 1990).
``byar``
    Byar's cube-root approximation of the exact limits: lower
    X (1 - 1/(9X) - z/(3 sqrt X))^3, upper (X + 1)(1 - 1/(9(X + 1)) +
    z/(3 sqrt(X + 1)))^3 (Breslow & Day 1987, vol. II).
``score``
    the score (Wilson-type) interval: the roots of (X - mu)^2 / mu = z^2,
    X + z^2/2 ± z sqrt(X + z^2/4).
``wald``
    X ± z sqrt(X), lower limit cut at 0; zero width at X = 0 (degenerate).
``mid-p``
    the mid-p exact limits: P(X > x) + P(X = x)/2 = a/2 (lower), P(X < x) +
    P(X = x)/2 = a/2 (upper), by bisection inside Garwood's interval (Berry &
    Armitage 1995).
``t``
    the t interval of the mean count per unit over t (variance estimated
    from the counts, so over-dispersion does not break it; no exact path).

``rate-ratio`` (conditional on the total N = X_a + X_b, X_a is binomial with
pi = RR E_a / (RR E_a + E_b) for Poisson counts; limits for pi map to
RR = pi / (1 - pi) E_b / E_a):

``conditional-exact``
    Clopper-Pearson limits for pi (Breslow & Day 1987, vol. II, sec. 2.3,
    from memory); (0, inf) when N = 0, upper limit inf when X_b = 0.
``score``
    the Wilson score limits for pi, mapped the same way (Graham, Mengersen
    & Morton 2003).
``wald``
    log RR ± z sqrt(1/X_a + 1/X_b); not computable (NaN) when a count is 0.

The conditional argument and the exact laws hold for Poisson counts; with
over-dispersed (negative-binomial) counts every method here under-covers,
which the exact paths show (:mod:`simcheck.intervals.rates_exact`).

References
----------
.. [1] Garwood, F. (1936). Fiducial limits for the Poisson distribution.
   Biometrika 28, 437-442.
.. [2] Ulm, K. (1990). Simple method to calculate the confidence interval of
   a standardized mortality ratio (SMR). American Journal of Epidemiology
   131, 373-375.
.. [3] Breslow, N. E. & Day, N. E. (1987). Statistical Methods in Cancer
   Research, vol. II: The Design and Analysis of Cohort Studies. IARC,
   Lyon (Byar's approximation; the conditional binomial interval).
.. [4] Graham, P. L., Mengersen, K. & Morton, A. P. (2003). Confidence
   limits for the ratio of two rates based on likelihood scores:
   non-iterative method. Statistics in Medicine 22, 2071-2083.
"""

from __future__ import annotations

import numpy as np
from scipy import special, stats

from simcheck.intervals.base import Method, Sample, register
from simcheck.intervals.rates_exact import rate_exact_path, two_totals_exact_path, totals_law_applies

_GARWOOD = "Garwood (1936), Biometrika 28:437-442"
_ULM = "Ulm (1990), American Journal of Epidemiology 131:373-375"
_BD = "Breslow & Day (1987), Statistical Methods in Cancer Research vol. II, IARC (Byar's approximation, from memory)"
_BD_COND = "Breslow & Day (1987), Statistical Methods in Cancer Research vol. II, IARC (conditional binomial interval, from memory)"
_MIDP = "Berry & Armitage (1995), The Statistician 44:417-423 (mid-P confidence intervals; from memory)"
_GMM = "Graham, Mengersen & Morton (2003), Statistics in Medicine 22:2071-2083"


def exposure_of(params: dict) -> float:
    """The exposure of one unit: ``target.exposure``, 1 when not given."""
    t = params.get("exposure")
    return 1.0 if t is None else float(t)


def _z(confidence: float) -> float:
    return float(stats.norm.ppf(0.5 + confidence / 2.0))


# --------------------------------------------------------------------------
# one rate: functions of the total count x and the total exposure e
# --------------------------------------------------------------------------
def garwood_total(x, e, confidence: float):
    """Garwood's exact limits for the rate from the total count ``x`` over exposure ``e``."""
    x = np.asarray(x, np.float64)
    a = 1.0 - confidence
    with np.errstate(invalid="ignore", divide="ignore"):
        lo = np.where(x > 0, special.gammaincinv(np.maximum(x, 1.0), a / 2), 0.0)
        hi = special.gammaincinv(x + 1.0, 1.0 - a / 2)
    return lo / e, hi / e


def byar_total(x, e, confidence: float):
    """Byar's approximation to the exact limits (lower 0 at x = 0)."""
    x = np.asarray(x, np.float64)
    z = _z(confidence)
    with np.errstate(invalid="ignore", divide="ignore"):
        xs = np.maximum(x, 1.0)
        lo = np.where(x > 0, xs * (1.0 - 1.0 / (9.0 * xs) - z / (3.0 * np.sqrt(xs))) ** 3, 0.0)
        x1 = x + 1.0
        hi = x1 * (1.0 - 1.0 / (9.0 * x1) + z / (3.0 * np.sqrt(x1))) ** 3
    return np.maximum(lo, 0.0) / e, hi / e


def score_total(x, e, confidence: float):
    """The score interval for a Poisson mean: x + z^2/2 ± z sqrt(x + z^2/4), over e."""
    x = np.asarray(x, np.float64)
    z = _z(confidence)
    c = x + z * z / 2.0
    h = z * np.sqrt(x + z * z / 4.0)
    return np.maximum(c - h, 0.0) / e, (c + h) / e


def wald_total(x, e, confidence: float):
    """x / e ± z sqrt(x) / e, the lower limit cut at 0."""
    x = np.asarray(x, np.float64)
    h = _z(confidence) * np.sqrt(x)
    return np.maximum(x - h, 0.0) / e, (x + h) / e


#: bisection halvings of the mid-p limits inside Garwood's interval (2^-50 of its width)
MIDP_HALVINGS = 50


def _poisson_pmf(x, mu):
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.exp(special.xlogy(x, mu) - mu - special.gammaln(x + 1.0))


def midp_total(x, e, confidence: float):
    """The mid-p exact limits: P(X > x) + P(X = x)/2 = alpha/2 at the lower limit,
    P(X < x) + P(X = x)/2 = alpha/2 at the upper (lower 0 at x = 0); found by
    bisection inside Garwood's interval, which contains them."""
    x = np.asarray(x, np.float64)
    a2 = (1.0 - confidence) / 2.0
    g_lo, g_hi = garwood_total(x, 1.0, confidence)

    def low_tail(mu):  # P(X >= x) - P(X = x)/2, rising in mu
        return 1.0 - np.where(x > 0, special.pdtr(np.maximum(x - 1.0, 0.0), mu), 0.0) - 0.5 * _poisson_pmf(x, mu)

    def high_tail(mu):  # P(X <= x) - P(X = x)/2, falling in mu
        return special.pdtr(x, mu) - 0.5 * _poisson_pmf(x, mu)

    lo = _bisect(low_tail, g_lo, np.maximum(x, g_lo), a2, rising=True)
    hi = _bisect(high_tail, np.maximum(x, 1e-300), g_hi, a2, rising=False)
    return np.where(x > 0, lo, 0.0) / e, hi / e


def _bisect(f, left, right, target: float, rising: bool):
    """The root of f(mu) = target in [left, right], vectorised (f monotone)."""
    left, right = left.copy(), right.copy()
    for _ in range(MIDP_HALVINGS):
        mid = 0.5 * (left + right)
        above = f(mid) > target
        go_left = above if rising else ~above
        right = np.where(go_left, mid, right)
        left = np.where(go_left, left, mid)
    return 0.5 * (left + right)


def _one_rate(total_func):
    def func(s: Sample, confidence: float):
        x = s.x.sum(axis=1)
        return total_func(x, s.n * exposure_of(s.params), confidence)

    func.__name__ = total_func.__name__.replace("_total", "")
    func.__doc__ = f"{total_func.__doc__} The raw-sample form: totals of the rows of ``s.x``."
    return func


def t_units(s: Sample, confidence: float):
    """The t interval of the mean count per unit, over the exposure t, lower limit cut at 0.

    Its variance comes from the counts themselves (no Poisson assumption),
    so it stays valid under over-dispersion, at the price of n - 1 degrees
    of freedom and the t approximation to a skewed mean.
    """
    x, n = s.x, s.n
    m = x.mean(axis=1)
    d = x - m[:, None]
    var = np.einsum("ij,ij->i", d, d) / (n - 1)
    h = float(stats.t.ppf(0.5 + confidence / 2.0, n - 1)) * np.sqrt(var / n)
    e = exposure_of(s.params)
    return np.maximum(m - h, 0.0) / e, (m + h) / e


garwood = _one_rate(garwood_total)
byar = _one_rate(byar_total)
score = _one_rate(score_total)
wald = _one_rate(wald_total)
midp = _one_rate(midp_total)


# --------------------------------------------------------------------------
# rate ratio: functions of the totals xa, xb and exposures ea, eb
# --------------------------------------------------------------------------
def pi_to_ratio(lo_pi, hi_pi, ea, eb):
    """Limits for pi = RR ea / (RR ea + eb) mapped to RR = pi / (1 - pi) eb / ea."""
    with np.errstate(divide="ignore", invalid="ignore"):
        lo = np.where(lo_pi > 0, lo_pi / (1.0 - lo_pi), 0.0) * (eb / ea)
        hi = np.where(hi_pi < 1, hi_pi / (1.0 - hi_pi), np.inf) * (eb / ea)
    return lo, hi


def clopper_pearson_pi(xa, xb, confidence: float):
    """Clopper-Pearson limits for pi from xa of xa + xb ((0, 1) when both are 0)."""
    xa, xb = np.asarray(xa, np.float64), np.asarray(xb, np.float64)
    m = xa + xb
    a = 1.0 - confidence
    with np.errstate(invalid="ignore", divide="ignore"):
        lo_pi = np.where(xa > 0, special.betaincinv(np.maximum(xa, 1.0), xb + 1.0, a / 2), 0.0)
        hi_pi = np.where(xb > 0, special.betaincinv(xa + 1.0, np.maximum(xb, 1.0), 1.0 - a / 2), 1.0)
    return np.where(m > 0, lo_pi, 0.0), np.where(m > 0, hi_pi, 1.0)


def conditional_exact_totals(xa, ea, xb, eb, confidence: float):
    """Clopper-Pearson limits for pi from xa of xa + xb, mapped to the rate ratio."""
    return pi_to_ratio(*clopper_pearson_pi(xa, xb, confidence), ea, eb)


def score_ratio_totals(xa, ea, xb, eb, confidence: float):
    """Wilson score limits for pi from xa of xa + xb, mapped to the rate ratio; (0, inf) when both are 0."""
    xa, xb = np.asarray(xa, np.float64), np.asarray(xb, np.float64)
    m = xa + xb
    z = _z(confidence)
    z2 = z * z
    with np.errstate(invalid="ignore", divide="ignore"):
        p = xa / m
        centre = (xa + z2 / 2.0) / (m + z2)
        half = z * np.sqrt(m * p * (1.0 - p) + z2 / 4.0) / (m + z2)
    # the score limits are exactly 0 (1) when xa = 0 (xb = 0); rounding must not move them
    lo_pi = np.where((m > 0) & (xa > 0), np.clip(centre - half, 0.0, 1.0), 0.0)
    hi_pi = np.where((m > 0) & (xb > 0), np.clip(centre + half, 0.0, 1.0), 1.0)
    return pi_to_ratio(lo_pi, hi_pi, ea, eb)


def wald_ratio_totals(xa, ea, xb, eb, confidence: float):
    """exp(log RR ± z sqrt(1/xa + 1/xb)); NaN limits when xa or xb is 0."""
    xa, xb = np.asarray(xa, np.float64), np.asarray(xb, np.float64)
    ok = (xa > 0) & (xb > 0)
    xa1, xb1 = np.where(ok, xa, 1.0), np.where(ok, xb, 1.0)
    centre = np.log(xa1 / ea) - np.log(xb1 / eb)
    half = _z(confidence) * np.sqrt(1.0 / xa1 + 1.0 / xb1)
    lo = np.where(ok, np.exp(centre - half), np.nan)
    hi = np.where(ok, np.exp(centre + half), np.nan)
    return lo, hi


def from_group_totals(totals_func):
    """A ``raw`` method of two groups from ``totals_func(x_a, exposure_a, x_b, exposure_b, confidence)``."""
    def func(s: Sample, confidence: float):
        t = exposure_of(s.params)
        return totals_func(s.x.sum(axis=1), s.n * t, s.xb.sum(axis=1), s.n_b * t, confidence)

    func.__name__ = totals_func.__name__.replace("_totals", "")
    func.__doc__ = f"{totals_func.__doc__} The raw-sample form: totals of the rows of ``s.x`` and ``s.xb``."
    return func


conditional_exact = from_group_totals(conditional_exact_totals)
score_ratio = from_group_totals(score_ratio_totals)
wald_ratio = from_group_totals(wald_ratio_totals)


# --------------------------------------------------------------------------
# registration
# --------------------------------------------------------------------------
#: how the exact paths compute, for the methods paragraph ("computed exactly ...")
EXACT_TEXT_ONE = ("by summing over the law of the total count (Poisson with mean n x the mean count per unit, "
                  "or negative binomial NB(n k, p) for over-dispersed counts)")
EXACT_TEXT_TWO = "by summing over the laws of the two groups' total counts (Poisson, or negative binomial)"
# the conditional-exact limits depend on the counts only: its exact path keeps them between n
_CONDITIONAL = {"conditional-exact": (clopper_pearson_pi, pi_to_ratio)}
_PROSE = {"garwood": "Garwood exact", "mid-p": "mid-p exact", "byar": "Byar", "score": "score",
          "conditional-exact": "conditional exact (Clopper–Pearson)"}

for _name, _func, _total, _summary, _refs in (
    ("garwood", garwood, garwood_total, "exact Poisson limits from the chi-square / gamma law (equal tails)",
     (_GARWOOD, _ULM)),
    ("byar", byar, byar_total, "Byar's cube-root approximation to the exact Poisson limits", (_BD,)),
    ("score", score, score_total, "score interval for a Poisson mean: x + z^2/2 ± z sqrt(x + z^2/4)",
     ("common practice (the score test of a Poisson mean inverted)",)),
    ("wald", wald, wald_total, "x ± z sqrt(x) over the exposure, cut at 0; zero width with no events",
     ("common practice",)),
    ("mid-p", midp, midp_total, "mid-p exact Poisson limits: half the probability of the observed count in each tail",
     (_MIDP,)),
):
    register(Method(
        _name, "rate", "raw", _func, summary=_summary, references=_refs, prose=_PROSE.get(_name, ""),
        exact_text=EXACT_TEXT_ONE,
        exact=rate_exact_path(_total), exact_applies=totals_law_applies,
    ))
register(Method(
    "t", "rate", "raw", t_units,
    summary="t interval of the mean count per unit over the exposure: variance from the data, robust to over-dispersion",
    references=("Student (1908), Biometrika 6:1-25 (the t interval; its use for counts: common practice)",),
))

for _name, _func, _totals, _summary, _refs in (
    ("conditional-exact", conditional_exact, conditional_exact_totals,
     "Clopper-Pearson limits for X_a given X_a + X_b, mapped to the rate ratio", (_BD_COND,)),
    ("score", score_ratio, score_ratio_totals, "Wilson score limits for X_a given X_a + X_b, mapped to the rate ratio",
     (_GMM,)),
    ("wald", wald_ratio, wald_ratio_totals, "log RR ± z sqrt(1/X_a + 1/X_b); not computable when a count is 0",
     ("common practice (the log rate ratio and its delta-method variance)",)),
):
    register(Method(
        _name, "rate-ratio", "raw", _func, summary=_summary, references=_refs, prose=_PROSE.get(_name, ""),
        exact_text=EXACT_TEXT_TWO,
        exact=two_totals_exact_path(_totals, conditional=_CONDITIONAL.get(_name)), exact_applies=totals_law_applies,
    ))
