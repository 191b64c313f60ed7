"""Intervals for the median and other quantiles (estimands ``median``, ``quantile``).

``order-statistic``
    The distribution-free interval [X_(j), X_(k)] between two order
    statistics. With B ~ Binomial(n, q) the number of values below the true
    quantile, P(X_(j) <= xi_q <= X_(k)) = P(j <= B <= k - 1) for every
    continuous law; j is the largest rank with P(B <= j - 1) <= alpha / 2 and
    k the smallest with P(B >= k) <= alpha / 2 (equal tails, each at most
    alpha / 2, so coverage is at least the confidence). When no such rank
    exists (n too small, e.g. the 95% median interval below n = 6) the limit
    is -inf or +inf. Exact path: coverage and misses from the binomial law,
    the same for every continuous model; the half-width (X_(k) - X_(j)) / 2
    from the joint law of two uniform order statistics mapped through the
    model's quantile function (numerical integration). With ties (discrete
    data) the coverage is at least nominal but not exact: no exact path.
``maritz-jarrett``
    X_(m) ± z SE with m = floor(q n + 0.5) and the Maritz-Jarrett standard
    error sqrt(C2 - C1^2), C_r = sum_i W_i X_(i)^r, W_i = P((i - 1)/n < U <= i/n)
    with U ~ Beta(m, n - m + 1), the law of the m-th uniform order statistic
    (the weights are the exact bootstrap law of the resampled X_(m)).

References
----------
.. [1] Conover, W. J. (1999). Practical Nonparametric Statistics, 3rd ed.
   Wiley, sec. 3.2 (confidence interval for a quantile; from memory).
.. [2] David, H. A. & Nagaraja, H. N. (2003). Order Statistics, 3rd ed.
   Wiley, sec. 7.1 (distribution-free confidence intervals for quantiles;
   section from memory).
.. [3] Maritz, J. S. & Jarrett, R. G. (1978). A note on estimating the
   variance of the sample median. JASA 73, 194-196.
.. [4] Wilcox, R. R. (2012). Introduction to Robust Estimation and Hypothesis
   Testing, 3rd ed. Academic Press, sec. 3.5 (the Maritz-Jarrett estimate for
   any quantile, m = [q n + 0.5]; from memory).
"""

from __future__ import annotations

import functools
import math

import numpy as np
from scipy import stats

from simcheck.models.laws import is_discrete_law, law_of
from simcheck.intervals.base import Method, Sample, register
from simcheck.intervals.order_law import half_width_measures

_CONOVER = "Conover (1999), Practical Nonparametric Statistics, 3rd ed., sec. 3.2 (from memory)"
_DAVID = "David & Nagaraja (2003), Order Statistics, 3rd ed., sec. 7.1 (from memory)"
_MJ = "Maritz & Jarrett (1978), JASA 73:194-196"
_WILCOX = "Wilcox (2012), Introduction to Robust Estimation and Hypothesis Testing, 3rd ed., sec. 3.5 (from memory)"


def _level(s: Sample) -> float:
    return float(s.params.get("quantile", 0.5))


@functools.lru_cache(maxsize=4096)
def order_statistic_ranks(n: int, q: float, confidence: float) -> tuple[int, int]:
    """Ranks (j, k), 1-based, of the equal-tailed order-statistic interval; j = 0 / k = n + 1 mean unbounded."""
    half = (1.0 - confidence) / 2.0
    i = np.arange(n)
    law = stats.binom(n, q)
    # the allowance keeps a tail equal to alpha / 2 in exact arithmetic from being lost to rounding
    j = int(np.count_nonzero(law.cdf(i) <= half * (1 + 1e-12)))
    k = int(np.count_nonzero(law.sf(i) > half * (1 + 1e-12))) + 1
    return j, k


def order_statistic(s: Sample, confidence: float):
    """[X_(j), X_(k)], the distribution-free interval for the q-quantile."""
    x, n = s.x, s.n
    j, k = order_statistic_ranks(n, _level(s), confidence)
    R = x.shape[0]
    kth = [r - 1 for r in (j, k) if 1 <= r <= n]
    part = np.partition(x, kth, axis=1) if kth else x
    lo = part[:, j - 1].copy() if j >= 1 else np.full(R, -np.inf)
    hi = part[:, k - 1].copy() if k <= n else np.full(R, np.inf)
    return lo, hi


def order_statistic_coverage(n: int, q: float, confidence: float) -> dict:
    """Coverage and misses of the interval for any continuous law (binomial law of the count below xi_q)."""
    j, k = order_statistic_ranks(n, q, confidence)
    law = stats.binom(n, q)
    miss_high = float(law.cdf(j - 1)) if j >= 1 else 0.0  # X_(j) > xi: fewer than j values below
    miss_low = float(law.sf(k - 1)) if k <= n else 0.0  # X_(k) < xi: at least k values below
    return {"coverage": 1.0 - miss_low - miss_high, "miss_low": miss_low, "miss_high": miss_high, "ranks": (j, k)}


def _continuous(design) -> bool:
    law = law_of(design.model)
    return law is not None and not is_discrete_law(law) and not getattr(design.model, "discrete", False)


def order_statistic_exact(design, ns) -> list[dict]:
    """Exact measures on a continuous model."""
    q = 0.5 if design.quantile is None else float(design.quantile)
    law = law_of(design.model)
    out = []
    for n in ns:
        cov = order_statistic_coverage(n, q, design.confidence)
        j, k = cov.pop("ranks")
        out.append({**cov, **half_width_measures(law, n, j, k, design.margin, design.assurance)})
    return out


@functools.lru_cache(maxsize=1024)
def maritz_jarrett_weights(n: int, q: float) -> tuple[int, int, np.ndarray]:
    """m, and the weights W_(a+1)..W_b of the Maritz-Jarrett standard error that are not negligible.

    Weights outside [a, b) are below 1e-15 of the largest one: they change C1
    and C2 by less than the rounding of the sums, and leaving them out spares
    sorting the whole sample (only ranks a..b-1 are put in order).
    """
    m = int(min(max(math.floor(q * n + 0.5), 1), n))
    cdf = stats.beta.cdf(np.arange(n + 1) / n, m, n - m + 1)
    w = np.diff(cdf)
    keep = np.flatnonzero(w > 1e-15 * w.max())
    a, b = int(min(keep[0], m - 1)), int(max(keep[-1] + 1, m))
    w = w[a:b].copy()
    w.flags.writeable = False
    return m, a, w


def maritz_jarrett(s: Sample, confidence: float):
    """X_(m) ± z SE_MJ."""
    n = s.n
    m, a, w = maritz_jarrett_weights(n, _level(s))
    b = a + w.size
    kth = sorted({a, b - 1})
    part = np.partition(s.x, kth, axis=1) if (a > 0 or b < n) else s.x
    srt = np.sort(part[:, a:b], axis=1)  # the order statistics of ranks a + 1 .. b
    c1 = srt @ w
    c2 = (srt * srt) @ w
    se = np.sqrt(np.maximum(c2 - c1 * c1, 0.0))
    z = float(stats.norm.ppf(0.5 + confidence / 2))
    centre = srt[:, m - 1 - a]
    return centre - z * se, centre + z * se


for _estimand in ("median", "quantile"):
    register(Method(
        "order-statistic", _estimand, "raw", order_statistic,
        summary="distribution-free interval between two order statistics; exact coverage for continuous data",
        references=(_CONOVER, _DAVID), prose="distribution-free order-statistic",
        exact_text=("from the binomial law of the number of values below the true quantile (the same for every "
                    "continuous model; the half-width from the law of two order statistics)"),
        exact=order_statistic_exact, exact_applies=_continuous,
    ))
    register(Method(
        "maritz-jarrett", _estimand, "raw", maritz_jarrett,
        summary="sample quantile ± z times the Maritz-Jarrett standard error",
        references=(_MJ, _WILCOX), prose="Maritz-Jarrett",
    ))
