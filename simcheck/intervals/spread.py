"""Intervals for the standard deviation of one sample (estimand ``sd``).

``chi-square``
    s sqrt((n - 1) / chi2_{1-a/2}) to s sqrt((n - 1) / chi2_{a/2}): exact for
    normal data, and known to lose coverage under heavy tails; an exact path
    through the chi-square law of s^2 when the model is normal.
``bonett``
    Bonett's (2006) interval: exp(ln(c s^2) ± z se) for sigma^2 with a
    kurtosis estimate around a trimmed mean, then square roots.

References
----------
.. [1] Bonett, D. G. (2006). Approximate confidence interval for standard
   deviation of nonnormal distributions. Computational Statistics & Data
   Analysis 50, 775-782.
"""

from __future__ import annotations

import math

import numpy as np
from scipy import stats

from simcheck.intervals.base import Method, Sample, register

_BONETT = "Bonett (2006), Computational Statistics & Data Analysis 50:775-782"


def _sd(x: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Row means and unbiased variances."""
    m = x.mean(axis=1)
    d = x - m[:, None]
    return m, np.einsum("ij,ij->i", d, d) / (x.shape[1] - 1)


def chi_square(s: Sample, confidence: float):
    """The chi-square interval for sigma."""
    n = s.n
    _, v = _sd(s.x)
    a = 1.0 - confidence
    lo_q, hi_q = stats.chi2.ppf([a / 2, 1 - a / 2], n - 1)
    sd = np.sqrt(np.maximum(v, 0.0))
    return sd * math.sqrt((n - 1) / hi_q), sd * math.sqrt((n - 1) / lo_q)


def bonett(s: Sample, confidence: float):
    """Bonett's (2006) interval for sigma; NaN below n = 5 (the trimmed mean needs it)."""
    x, n = s.x, s.n
    R = x.shape[0]
    if n < 5:
        nan = np.full(R, np.nan)
        return nan, nan
    z = float(stats.norm.ppf(0.5 + confidence / 2))
    mean, v = _sd(x)
    # trimmed mean with trim proportion 1 / (2 sqrt(n - 4)); scipy.stats.trim_mean cuts int(p n) per end
    k = int(n / (2.0 * math.sqrt(n - 4.0)))
    srt = np.sort(x, axis=1)
    m = srt[:, k:n - k].mean(axis=1)
    d4 = x - m[:, None]
    d4 *= d4
    num = n * np.einsum("ij,ij->i", d4, d4)
    ss = v * (n - 1)
    with np.errstate(divide="ignore", invalid="ignore"):
        g4 = num / (ss * ss)
        c = n / (n - z)
        se = c * np.sqrt(np.maximum(g4 - (n - 3.0) / n, 0.0) / (n - 1.0))
        centre = np.log(c * v)
        lo = np.sqrt(np.exp(centre - z * se))
        hi = np.sqrt(np.exp(centre + z * se))
    zero = v <= 0  # equal values: a zero-width interval at 0
    lo[zero] = 0.0
    hi[zero] = 0.0
    return lo, hi


def _exact_applies(design) -> bool:
    return design.model.normal_params() is not None


def chi_square_exact(design, ns) -> list[dict]:
    """Measures of the chi-square interval on normal data from the law s^2 ~ sigma^2 chi2(n-1)/(n-1)."""
    conf, margin, sigma = design.confidence, design.margin, design.model.sd
    a = 1.0 - conf
    probs = (np.arange(400) + 0.5) / 400
    out = []
    for n in ns:
        df = n - 1
        lo_q, hi_q = stats.chi2.ppf([a / 2, 1 - a / 2], df)
        # half-width = k s with k = (sqrt(df/lo_q) - sqrt(df/hi_q)) / 2 and s = sigma sqrt(W / df)
        k = 0.5 * (math.sqrt(df / lo_q) - math.sqrt(df / hi_q)) * sigma
        law = stats.chi2(df)
        mean_s = math.exp(0.5 * math.log(2.0 / df) + math.lgamma((df + 1) / 2) - math.lgamma(df / 2))
        values = k * np.sqrt(law.ppf(probs) / df)
        out.append({
            "coverage": conf, "miss_low": a / 2, "miss_high": a / 2,
            "margin_mean": k * mean_s,
            "margin_median": k * math.sqrt(law.ppf(0.5) / df),
            "margin_p90": k * math.sqrt(law.ppf(0.9) / df),
            "assurance": None if margin is None else float(law.cdf(df * (margin / k) ** 2)),
            "margin_at_assurance": k * math.sqrt(law.ppf(design.assurance) / df),
            "margin_values": values, "margin_weights": np.full(len(probs), 1 / len(probs)),
        })
    return out


register(Method(
    "chi-square", "sd", "raw", chi_square,
    summary="s sqrt((n-1)/chi2 quantiles): exact for normal data, fragile under heavy tails",
    references=("common practice (the chi-square law of (n - 1) s^2 / sigma^2 for normal data)",),
    exact=chi_square_exact, exact_applies=_exact_applies, exact_monotone=True,
    exact_text="from the chi-square law of the sample variance of normal data",
))
register(Method(
    "bonett", "sd", "raw", bonett,
    summary="Bonett's log-scale interval with a kurtosis estimate; robust to non-normal data",
    references=(_BONETT,), prose="Bonett",
))
