"""Intervals for the geometric mean and the ratio of two geometric means.

Each is a t interval on the natural logs of the data, back-transformed by
exp (common practice for log-normal data; Olsson 2005 shows it covers the
geometric mean, i.e. the lognormal median, and not the arithmetic mean):

``log-t`` (estimand ``geometric-mean``)
    exp(ȳ ± t_{n-1} s_y / sqrt(n)), y = log x.
``log-t`` (estimand ``geometric-mean-ratio``)
    exp(ȳ_a - ȳ_b ± t_{n_a+n_b-2} s_p sqrt(1/n_a + 1/n_b)), pooled SD of the logs.
``log-welch`` (estimand ``geometric-mean-ratio``)
    exp(ȳ_a - ȳ_b ± t_nu sqrt(s_a^2/n_a + s_b^2/n_b)), Welch-Satterthwaite nu.
``bootstrap-percentile`` (both estimands)
    exp of the percentile bootstrap interval of the mean log (of the
    difference of mean logs, groups resampled separately): the percentile
    interval respects monotone maps, so it is the percentile interval of the
    resampled geometric means (Efron & Tibshirani 1993, ch. 13).

Exact paths: on lognormal data the logs are normal, so the log-t interval
covers with probability exactly the confidence and its log-scale half-width
is t s / sqrt(n) with (n - 1) s^2 / sigma^2 ~ chi2(n - 1) (for the pooled
interval, when both groups have the same sdlog: n_a + n_b - 2 degrees of
freedom). Values <= 0 give NaN limits (no interval).

References
----------
.. [1] Olsson, U. (2005). Confidence intervals for the mean of a log-normal
   distribution. Journal of Statistics Education 13(1) (from memory).
.. [2] Student (1908). The probable error of a mean. Biometrika 6, 1-25.
.. [3] Welch, B. L. (1947). The generalization of "Student's" problem when
   several different population variances are involved. Biometrika 34, 28-35.
.. [4] Efron, B. & Tibshirani, R. J. (1993). An Introduction to the
   Bootstrap. Chapman & Hall, ch. 13.
"""

from __future__ import annotations

import math

import numpy as np
from scipy import stats

from simcheck.intervals.base import Method, Sample, Summary, register
from simcheck.intervals.bootstrap import percentile_diff, percentile_mean
from simcheck.intervals.mean import t_diff_interval, t_interval, t_ppf, welch_interval

_OLSSON = ("common practice; Olsson (2005), Journal of Statistics Education 13(1): the back-transformed log-scale "
           "t interval covers the geometric mean (the lognormal median), not the mean (from memory)")
_STUDENT = "Student (1908), Biometrika 6:1-25"
_WELCH = "Welch (1947), Biometrika 34:28-35"


def log_summary(x: np.ndarray) -> Summary:
    """Means and unbiased variances of the logs of each row (NaN where a value is <= 0)."""
    y = _logs(x)
    n = y.shape[1]
    m = y.mean(axis=1)
    d = y - m[:, None]
    return Summary(n=n, mean=m, var=np.einsum("ij,ij->i", d, d) / (n - 1))


def _back(lo, hi):
    with np.errstate(over="ignore", invalid="ignore"):
        return np.exp(lo), np.exp(hi)


def log_t(s: Sample, confidence: float):
    """The log-scale t interval for the geometric mean."""
    return _back(*t_interval(log_summary(s.x), confidence))


def log_t_ratio(s: Sample, confidence: float):
    """The pooled log-scale t interval for the ratio of geometric means a / b."""
    return _back(*t_diff_interval(log_summary(s.x), log_summary(s.xb), confidence))


def log_welch_ratio(s: Sample, confidence: float):
    """The Welch log-scale interval for the ratio of geometric means a / b."""
    return _back(*welch_interval(log_summary(s.x), log_summary(s.xb), confidence))


def _logs(x: np.ndarray) -> np.ndarray:
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.log(np.where(x > 0, x, np.nan))


def bootstrap_gm(s: Sample, confidence: float):
    """exp of the percentile bootstrap interval for the mean of the logs."""
    lo, hi, deg = percentile_mean(_logs(s.x), confidence, rng=s.rng, resamples=s.resamples)
    return (*_back(lo, hi), deg)


def bootstrap_gmr(s: Sample, confidence: float):
    """exp of the percentile bootstrap interval for the difference of the mean logs."""
    lo, hi, deg = percentile_diff(_logs(s.x), _logs(s.xb), confidence, rng=s.rng, resamples=s.resamples)
    return (*_back(lo, hi), deg)


def scaled_chi_measures(confidence: float, margin: float | None, assurance: float, k: float, df: int) -> dict:
    """Measures of an exact interval whose log-scale half-width is k sqrt(W / df), W ~ chi2(df).

    Coverage is the confidence; margins are factors exp(half-width); the
    margin mean is exp of the mean half-width (the geometric mean of the factors).
    """
    a = 1.0 - confidence
    law = stats.chi2(df)
    probs = (np.arange(400) + 0.5) / 400
    mean_root = math.exp(0.5 * math.log(2.0 / df) + math.lgamma((df + 1) / 2) - math.lgamma(df / 2))

    def factor(p):
        return math.exp(k * math.sqrt(float(law.ppf(p)) / df))

    return {
        "coverage": confidence, "miss_low": a / 2, "miss_high": a / 2,
        "margin_mean": math.exp(k * mean_root),
        "margin_median": factor(0.5), "margin_p90": factor(0.9),
        "assurance": None if margin is None else float(law.cdf(df * (math.log(margin) / k) ** 2)),
        "margin_at_assurance": factor(assurance),
        "margin_values": np.exp(k * np.sqrt(law.ppf(probs) / df)),
        "margin_weights": np.full(len(probs), 1 / len(probs)),
    }


def _lognormal(model) -> bool:
    return getattr(model, "name", None) == "lognormal" and model.law() is not None


def log_t_exact(design, ns) -> list[dict]:
    """The log-t interval on lognormal data: the t interval on normal logs."""
    sdlog = float(design.model.sdlog)
    out = []
    for n in ns:
        t = float(t_ppf(0.5 + design.confidence / 2, n - 1))
        out.append(scaled_chi_measures(design.confidence, design.margin, design.assurance,
                                       t * sdlog / math.sqrt(n), n - 1))
    return out


def _equal_lognormals(design) -> bool:
    a, b = design.model, design.model_b
    return _lognormal(a) and _lognormal(b) and math.isclose(a.sdlog, b.sdlog, rel_tol=1e-12)


def log_t_ratio_exact(design, ns) -> list[dict]:
    """The pooled log-t interval on two lognormal groups with one sdlog: the pooled t interval on normal logs."""
    sdlog = float(design.model.sdlog)
    out = []
    for n in ns:
        nb = design.n_b(n)
        df = n + nb - 2
        t = float(t_ppf(0.5 + design.confidence / 2, df))
        out.append(scaled_chi_measures(design.confidence, design.margin, design.assurance,
                                       t * sdlog * math.sqrt(1.0 / n + 1.0 / nb), df))
    return out


register(Method(
    "log-t", "geometric-mean", "raw", log_t,
    summary="t interval on the logs, back-transformed: exact for lognormal data",
    references=(_OLSSON, _STUDENT),
    exact=log_t_exact, exact_applies=lambda d: _lognormal(d.model), exact_monotone=True, prose="log-scale t",
    exact_text="from the sampling laws of the mean and variance of the logs (normal for lognormal data)",
))
register(Method(
    "log-t", "geometric-mean-ratio", "raw", log_t_ratio,
    summary="pooled t interval on the logs, back-transformed: exact for lognormal groups with one sdlog",
    references=(_OLSSON, _STUDENT),
    exact=log_t_ratio_exact, exact_applies=_equal_lognormals, exact_monotone=True,
    prose="log-scale t",
    exact_text="from the sampling laws of the group means and pooled variance of the logs (normal for lognormal data)",
))
register(Method(
    "log-welch", "geometric-mean-ratio", "raw", log_welch_ratio,
    summary="Welch interval on the logs, back-transformed (unequal log-scale SDs)",
    references=(_OLSSON, _WELCH), prose="log-scale Welch",
))
for _estimand, _func in (("geometric-mean", bootstrap_gm), ("geometric-mean-ratio", bootstrap_gmr)):
    register(Method(
        "bootstrap-percentile", _estimand, "raw", _func,
        summary="percentile bootstrap of the mean log(s), back-transformed",
        references=("Efron & Tibshirani (1993), An Introduction to the Bootstrap, Chapman & Hall, ch. 13",),
        resampling=True,
    ))
