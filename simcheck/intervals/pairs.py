"""Intervals for paired measurements: the mean paired difference and the Pearson correlation.

``paired-mean-diff``
    ``t``: the paired t interval, d̄ ± t_{1-alpha/2, n-1} s_d / sqrt(n) on the
    differences d = a - b (Student 1908); exact path for two normal margins,
    whose differences are normal with SD sqrt(sa^2 + sb^2 - 2 rho sa sb).
    ``bootstrap-percentile``: resampling pairs, which for the mean difference
    is resampling the differences (Efron & Tibshirani 1993, ch. 13).
``correlation``
    ``fisher-z``: tanh(atanh r ± z_{1-alpha/2} / sqrt(n - 3)) (Fisher 1921);
    exact path for two normal margins through the exact law of r
    (:mod:`simcheck.intervals.pairs_law`). ``bootstrap-percentile``: the
    alpha/2 and 1 - alpha/2 quantiles of r over B resamples of the pairs.

References
----------
.. [1] Student (1908). The probable error of a mean. Biometrika 6, 1-25.
.. [2] Fisher, R. A. (1921). On the "probable error" of a coefficient of
   correlation deduced from a small sample. Metron 1, 3-32.
.. [3] Efron, B. & Tibshirani, R. J. (1993). An Introduction to the Bootstrap.
   Chapman & Hall, ch. 13 (percentile interval; the law school correlation
   example of ch. 6 resamples pairs).
"""

from __future__ import annotations

import math

import numpy as np
from scipy import stats

from simcheck.intervals.base import Method, Sample, register
from simcheck.intervals.bootstrap import percentile_mean
from simcheck.intervals.pairs_law import fisher_z_measures

_STUDENT = "Student (1908), Biometrika 6:1-25 (the paired t interval: the one-sample t interval of the differences)"
_FISHER = "Fisher (1921), Metron 1:3-32 (the z transformation); Hotelling (1953), JRSS B 15:193-232 (exact law of r)"
_ET = "Efron & Tibshirani (1993), An Introduction to the Bootstrap, Chapman & Hall, ch. 13 (percentile), resampling pairs"
#: resampled indices (replicates x resamples x n) drawn at once by the correlation bootstrap (bounds its memory)
CHUNK_VALUES = 1 << 19
#: levels of the half-width quantiles exact paths report for figures
_PROBS = (np.arange(400) + 0.5) / 400


def paired_t(s: Sample, confidence: float):
    """The paired t interval: the one-sample t interval of d = x - y."""
    n = s.n
    d = s.x - s.y
    m = d.mean(axis=1)
    e = d - m[:, None]
    sd = np.sqrt(np.einsum("ij,ij->i", e, e) / (n - 1))
    half = float(stats.t.ppf(0.5 + confidence / 2.0, n - 1)) * sd / math.sqrt(n)
    return m - half, m + half


def paired_percentile(s: Sample, confidence: float):
    """Percentile bootstrap of the mean difference over resampled pairs (= resampled differences)."""
    return percentile_mean(s.x - s.y, confidence, rng=s.rng, resamples=s.resamples)


def pearson_r(x: np.ndarray, y: np.ndarray) -> np.ndarray:
    """Row-wise Pearson correlations of (R, n) blocks; NaN where a row has no spread."""
    xc = x - x.mean(axis=1, keepdims=True)
    yc = y - y.mean(axis=1, keepdims=True)
    sxy = np.einsum("ij,ij->i", xc, yc)
    sxx = np.einsum("ij,ij->i", xc, xc)
    syy = np.einsum("ij,ij->i", yc, yc)
    with np.errstate(divide="ignore", invalid="ignore"):
        r = sxy / np.sqrt(sxx * syy)
    return np.clip(r, -1.0, 1.0)


def fisher_z(s: Sample, confidence: float):
    """tanh(atanh r ± z / sqrt(n - 3)); NaN below n = 4 pairs or without spread (flagged degenerate)."""
    r = pearson_r(s.x, s.y)
    if s.n < 4:
        nan = np.full(r.shape, np.nan)
        return nan, nan
    c = float(stats.norm.ppf(0.5 + confidence / 2.0)) / math.sqrt(s.n - 3.0)
    with np.errstate(divide="ignore"):
        z = np.arctanh(r)
    return np.tanh(z - c), np.tanh(z + c), np.isnan(r)


def _resampled_r(cols: np.ndarray, idx: np.ndarray) -> np.ndarray:
    """r of each resample of one replicate: ``cols`` (5, n) holds x, y, x^2, y^2, xy of the centred
    pairs, ``idx`` (B, n) the resampled pair indices."""
    n = idx.shape[1]
    # one gather of the five columns at once, then the resample means (measured faster than
    # resample counts by bincount and a matrix product)
    sums = np.take(cols, idx, axis=1).sum(axis=2) / n  # (5, B)
    mx, my = sums[0], sums[1]
    vx = sums[2] - mx * mx
    vy = sums[3] - my * my
    cov = sums[4] - mx * my
    with np.errstate(divide="ignore", invalid="ignore"):
        r = cov / np.sqrt(vx * vy)
    # a resample of one repeated pair has no spread: left out of the quantiles (NaN sorts last)
    r[~((vx > 0) & (vy > 0))] = np.nan
    return np.clip(r, -1.0, 1.0)


def _finite_quantiles(srt: np.ndarray, p: float) -> np.ndarray:
    """Linear-interpolation quantile (the np.percentile default) of the finite, sorted-first values of each row."""
    m = np.sum(np.isfinite(srt), axis=1)
    h = (np.maximum(m, 1) - 1) * p
    f = np.floor(h).astype(np.intp)
    g = h - f
    rows = np.arange(srt.shape[0])
    lo = srt[rows, f]
    hi = srt[rows, np.minimum(f + 1, np.maximum(m - 1, 0))]
    out = lo + g * (hi - lo)
    return np.where(m > 0, out, np.nan)


def correlation_percentile(s: Sample, confidence: float):
    """Percentile bootstrap of Pearson's r over B resamples of the n pairs of each replicate.

    Each replicate is resampled independently; resamples without spread in
    one of the measurements (possible for tiny n) are left out. A sample
    without spread gets NaN limits and the degenerate flag.
    """
    x, y, n, b = s.x, s.y, s.n, int(s.resamples)
    rows = x.shape[0]
    alpha = (1.0 - confidence) / 2.0
    xc = x - x.mean(axis=1, keepdims=True)
    yc = y - y.mean(axis=1, keepdims=True)
    per = max(1, CHUNK_VALUES // max(1, b * n))
    rb = np.empty((rows, b))
    for r0 in range(0, rows, per):
        r1 = min(rows, r0 + per)
        idx = s.rng.integers(0, n, size=(r1 - r0, b, n), dtype=np.intp)
        for j in range(r0, r1):
            xj, yj = xc[j], yc[j]
            rb[j] = _resampled_r(np.stack([xj, yj, xj * xj, yj * yj, xj * yj]), idx[j - r0])
    rb.sort(axis=1)
    lo = _finite_quantiles(rb, alpha)
    hi = _finite_quantiles(rb, 1.0 - alpha)
    bad = np.isnan(pearson_r(x, y))
    lo[bad] = np.nan
    hi[bad] = np.nan
    return lo, hi, bad


def _both_normal(design) -> bool:
    return design.model.normal_params() is not None and design.model_b.normal_params() is not None


def paired_t_exact(design, ns) -> list[dict]:
    """Measures of the paired t interval for two normal margins: d ~ N(mu_a - mu_b, sd_d^2)."""
    conf, margin = design.confidence, design.margin
    sa, sb, rho = design.model.sd, design.model_b.sd, float(design.correlation or 0.0)
    sd_d = math.sqrt(max(sa * sa + sb * sb - 2.0 * rho * sa * sb, 0.0))
    a = 1.0 - conf
    out = []
    for n in ns:
        df = n - 1
        # half-width = t s_d / sqrt(n) with s_d = sd_d sqrt(W / df), W ~ chi2(df)
        k = float(stats.t.ppf(1 - a / 2, df)) * sd_d / math.sqrt(n)
        law = stats.chi2(df)
        mean_s = math.exp(0.5 * math.log(2.0 / df) + math.lgamma((df + 1) / 2) - math.lgamma(df / 2))
        out.append({
            "coverage": conf, "miss_low": a / 2, "miss_high": a / 2,
            "margin_mean": k * mean_s,
            "margin_median": k * math.sqrt(law.ppf(0.5) / df),
            "margin_p90": k * math.sqrt(law.ppf(0.9) / df),
            "assurance": None if margin is None else (float(law.cdf(df * (margin / k) ** 2)) if k > 0 else 1.0),
            "margin_at_assurance": k * math.sqrt(law.ppf(design.assurance) / df),
            "margin_values": k * np.sqrt(law.ppf(_PROBS) / df),
            "margin_weights": np.full(len(_PROBS), 1 / len(_PROBS)),
        })
    return out


def fisher_z_exact(design, ns) -> list[dict]:
    """Measures of the Fisher-z interval for two normal margins from the exact law of r."""
    rho = float(design.correlation or 0.0)
    return [fisher_z_measures(int(n), rho, design.confidence, design.margin, design.assurance, _PROBS) for n in ns]


register(Method(
    "t", "paired-mean-diff", "raw", paired_t,
    summary="d̄ ± t s_d / sqrt(n) on the paired differences; exact for normal margins",
    references=(_STUDENT,), exact=paired_t_exact, exact_applies=_both_normal,
    # coverage is the confidence at every n and the half-width law shrinks with n
    exact_monotone=True, prose="paired t",
    exact_text="from the chi-square law of the variance of the paired differences (normal margins)",
))
register(Method(
    "bootstrap-percentile", "paired-mean-diff", "raw", paired_percentile,
    summary="percentiles of the mean difference over resampled pairs",
    references=(_ET,), resampling=True,
))
register(Method(
    "fisher-z", "correlation", "raw", fisher_z,
    summary="tanh(atanh r ± z / sqrt(n - 3)); exact law of r for bivariate normal data",
    references=(_FISHER,), exact=fisher_z_exact, exact_applies=_both_normal,
    # the half-width law shrinks with n and coverage settles towards the confidence from n of about 10 on;
    # the search still checks the window's top n and scans every n if that fails
    exact_monotone=True, prose="Fisher z",
    exact_text="from the exact law of Pearson's r for bivariate normal pairs (Hotelling 1953)",
))
register(Method(
    "bootstrap-percentile", "correlation", "raw", correlation_percentile,
    summary="percentiles of r over resampled pairs",
    references=(_ET,), resampling=True,
))
