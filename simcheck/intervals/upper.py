"""Upper confidence limits for the mean of positively skewed data.

One-sided methods used by environmental regulators and auditors: each is
registered with ``bounds = ("upper",)``, is called at the one-sided level
1 - alpha and returns ``(-inf, upper)``. simcheck's point is to show which of
them holds its coverage at the planned n (see :mod:`simcheck.engine.onesided`).

``land``               Land's exact H-based limit for a lognormal mean (:mod:`simcheck.intervals.land`)
``chen-modified-t``    Chen's skewness-adjusted limit
``chebyshev``          the one-sided Chebyshev (Cantelli) inequality limit
``grice-bain``         the gamma-based limit with the chi-square approximation

Hall's bootstrap-t is the existing ``bootstrap-t`` method with
``bound = "upper"``: its one-sided limit is the studentised (percentile-t)
bootstrap limit x̄ - t*_alpha s / sqrt(n) of Hall (1988).
"""

from __future__ import annotations

import functools

import numpy as np
from scipy import stats

from simcheck.intervals.base import Method, Summary, register
from simcheck.intervals.land import land_offset

__all__ = ["land_upper", "chen_upper", "chebyshev_upper", "grice_bain_upper"]


@functools.lru_cache(maxsize=64)
def _z(q: float) -> float:
    return float(stats.norm.ppf(q))


def _lower_inf(hi: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    return np.full(np.shape(hi), -np.inf), hi


def _sd(s: Summary) -> np.ndarray:
    return np.sqrt(np.maximum(np.asarray(s.var, dtype=float), 0.0))


def land_upper(s: Summary, confidence: float) -> tuple[np.ndarray, np.ndarray]:
    """Land's exact upper limit exp(ȳ + g(s)) for a lognormal mean.

    ``s`` summarises the logs; ``confidence`` is the one-sided level. g(s) =
    s^2/2 + s H_{1-alpha}(s, n) / sqrt(n - 1), computed by inverting the
    exact conditional law (:mod:`simcheck.intervals.land`).

    References
    ----------
    .. [1] Land, C. E. (1971). Confidence intervals for linear functions of the
       normal mean and variance. Annals of Mathematical Statistics 42, 1187-1205.
    .. [2] Land, C. E. (1975). Tables of confidence limits for linear functions
       of the normal mean and variance. Selected Tables in Mathematical
       Statistics III, 385-419.
    """
    mean = np.asarray(s.mean, dtype=float)
    sd = np.broadcast_to(_sd(s), mean.shape)
    n = np.broadcast_to(np.asarray(s.n), mean.shape)
    g = np.empty(mean.shape)
    for k in np.unique(n):
        # nested curves pass one n per column: one table per n
        sel = n == k
        g[sel] = land_offset(sd[sel], int(k), float(confidence))
    with np.errstate(over="ignore"):
        return _lower_inf(np.exp(mean + g))


def chen_upper(s: Summary, confidence: float) -> tuple[np.ndarray, np.ndarray]:
    """Chen's skewness-adjusted upper limit x̄ + [z + a (1 + 2 z^2)] s / sqrt(n).

    ``a = beta / (6 sqrt(n))`` with the sample skewness ``beta = k3 / s^3``,
    ``k3 = n^2 m3 / ((n - 1)(n - 2))``; the first-order inversion of Chen's
    modified t statistic t + a (1 + 2 t^2) for right-skewed data. Needs n >= 3.

    References
    ----------
    .. [1] Chen, L. (1995). Testing the mean of skewed distributions. Journal
       of the American Statistical Association 90, 767-772.
    """
    n = np.asarray(s.n, dtype=float)
    sd = _sd(s)
    m3 = np.asarray(s.m3, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        k3 = n * n * m3 / ((n - 1.0) * (n - 2.0))
        beta = np.where(sd > 0, k3 / sd**3, 0.0)
    z = _z(float(confidence))
    a = beta / (6.0 * np.sqrt(n))
    return _lower_inf(np.asarray(s.mean, dtype=float) + (z + a * (1.0 + 2.0 * z * z)) * sd / np.sqrt(n))


def chebyshev_upper(s: Summary, confidence: float) -> tuple[np.ndarray, np.ndarray]:
    """One-sided Chebyshev (Cantelli) limit x̄ + sqrt(1/alpha - 1) s / sqrt(n).

    Holds for any distribution with finite variance if the SD were known;
    with the sample SD it is a conservative rule of thumb, not a guarantee.

    References
    ----------
    .. [1] Cantelli, F. P. (1928). Sui confini della probabilità. Atti del
       Congresso Internazionale dei Matematici, Bologna, 47-59.
    .. [2] Singh, A. K., Singh, A. & Engelhardt, M. (1997). The lognormal
       distribution in environmental applications. EPA/600/R-97/006 (the
       Chebyshev mean-SD upper limit).
    """
    n = np.asarray(s.n, dtype=float)
    k = np.sqrt(1.0 / (1.0 - float(confidence)) - 1.0)
    return _lower_inf(np.asarray(s.mean, dtype=float) + k * _sd(s) / np.sqrt(n))


def grice_bain_upper(s: Summary, confidence: float) -> tuple[np.ndarray, np.ndarray]:
    """Gamma-based upper limit 2 n k x̄ / chi2_alpha(2 n k) for a gamma mean.

    With the shape k known, 2 n k x̄ / mu ~ chi2(2 n k) exactly; Grice & Bain
    (1980) put an estimate of k in its place. Here k = x̄^2 / s^2 (method of
    moments, from the mean and variance the engine provides; Grice & Bain use
    the maximum-likelihood shape). Positive data only (x̄ > 0).

    References
    ----------
    .. [1] Grice, J. V. & Bain, L. J. (1980). Inferences concerning the mean of
       the gamma distribution. Journal of the American Statistical
       Association 75, 929-933.
    """
    n = np.asarray(s.n, dtype=float)
    mean = np.asarray(s.mean, dtype=float)
    var = np.maximum(np.asarray(s.var, dtype=float), 0.0)
    with np.errstate(divide="ignore", invalid="ignore"):
        k = np.where(var > 0, mean * mean / var, np.inf)
        df = 2.0 * n * k
        alpha = 1.0 - float(confidence)
        q = stats.chi2.ppf(alpha, np.where(np.isfinite(df), df, 1.0))
        hi = np.where(np.isfinite(df), df * mean / q, mean)
    hi = np.where(mean > 0, hi, np.nan)  # not defined for a non-positive mean
    return _lower_inf(hi)


_UP = ("upper",)
register(Method(
    name="land", estimand="mean", kind="log", func=land_upper, shift_equivariant=False,
    summary="Land's exact H-based upper limit for a lognormal mean (from the logs)",
    references=("Land (1971), Annals of Mathematical Statistics 42:1187-1205",
                "Land (1975), Selected Tables in Mathematical Statistics III:385-419"),
    one_sided="exp(ȳ + s^2/2 + s H_{1-alpha}(s, n) / sqrt(n - 1)), H from the exact conditional law (one-sided only)",
    one_sided_references=("Land (1971)", "Land (1975)"), bounds=_UP,
))
register(Method(
    name="chen-modified-t", estimand="mean", kind="summary", func=chen_upper, shift_equivariant=True, needs_m3=True,
    summary="Chen's skewness-adjusted upper limit x̄ + [z + a(1 + 2z^2)] s/sqrt(n), a = skewness/(6 sqrt(n))",
    references=("Chen (1995), JASA 90:767-772",),
    one_sided="x̄ + [z_{1-alpha} + a (1 + 2 z_{1-alpha}^2)] s / sqrt(n) (one-sided only)",
    one_sided_references=("Chen (1995), JASA 90:767-772",), bounds=_UP,
))
register(Method(
    name="chebyshev", estimand="mean", kind="summary", func=chebyshev_upper, shift_equivariant=True,
    summary="one-sided Chebyshev (Cantelli) limit x̄ + sqrt(1/alpha - 1) s/sqrt(n)",
    references=("Cantelli (1928)", "Singh, Singh & Engelhardt (1997), EPA/600/R-97/006"),
    one_sided="x̄ + sqrt(1/alpha - 1) s / sqrt(n) (one-sided only)",
    one_sided_references=("Cantelli (1928)",), bounds=_UP,
))
register(Method(
    name="grice-bain", estimand="mean", kind="summary", func=grice_bain_upper, shift_equivariant=False,
    summary="gamma-based upper limit 2nk x̄ / chi2_alpha(2nk), shape k by moments",
    references=("Grice & Bain (1980), JASA 75:929-933",),
    one_sided="2 n k x̄ / chi2_{alpha}(2 n k) with k = x̄^2 / s^2 (one-sided only)",
    one_sided_references=("Grice & Bain (1980), JASA 75:929-933",), bounds=_UP,
))
