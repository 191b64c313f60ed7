"""Intervals for a binomial proportion and a difference of two proportions.

Functions take success counts and sample sizes as arrays that broadcast
together (leading axis: replicates) and return ``(lower, upper)`` float arrays.

Conventions (the same for every method, so that half-widths
``(upper - lower) / 2`` compare like with like):

* one proportion: limits are clipped to [0, 1]; the lower limit is exactly 0
  at x = 0 and the upper limit exactly 1 at x = n for the methods whose
  definition says so (Wilson, Clopper–Pearson, Jeffreys). Wald and
  Agresti–Coull are simply clipped (so Wald is the degenerate [0, 0] at x = 0);
* a difference: limits are clipped to [-1, 1].

No warnings are raised at x = 0 or x = n.
"""

from __future__ import annotations

import numpy as np
from scipy import stats

from simcheck.intervals.base import Method, register

_BROWN = (
    "Brown, L. D., Cai, T. T. and DasGupta, A. (2001). Interval estimation for a "
    "binomial proportion. Statistical Science 16(2), 101-133."
)


def _z(confidence) -> np.ndarray:
    return stats.norm.ppf(1.0 - (1.0 - np.asarray(confidence, dtype=float)) / 2.0)


def _counts(x, n) -> tuple[np.ndarray, np.ndarray]:
    x = np.asarray(x, dtype=float)
    n = np.asarray(n, dtype=float)
    return np.broadcast_arrays(x, n)


def _clip01(lo, hi) -> tuple[np.ndarray, np.ndarray]:
    return np.clip(lo, 0.0, 1.0), np.clip(hi, 0.0, 1.0)


# ---------------------------------------------------------------- one proportion


def wald(x, n, confidence: float) -> tuple[np.ndarray, np.ndarray]:
    """Wald interval ``p ± z sqrt(p (1 - p) / n)``, clipped to [0, 1].

    Parameters
    ----------
    x, n : array_like
        Successes and trials.
    confidence : float
        Confidence level in (0, 1).

    Returns
    -------
    lower, upper : ndarray

    References
    ----------
    Brown, L. D., Cai, T. T. and DasGupta, A. (2001). Interval estimation for a
    binomial proportion. *Statistical Science* 16(2), 101-133, section 2.1.
    """
    p, half = wald_centre_half(x, n, confidence)
    return _clip01(p - half, p + half)


def wald_centre_half(x, n, confidence: float) -> tuple[np.ndarray, np.ndarray]:
    """Centre ``p = x / n`` and half-width ``z sqrt(p (1 - p) / n)`` of the Wald
    interval before clipping (a finite population correction scales the
    half-width first and clips once)."""
    x, n = _counts(x, n)
    p = x / n
    return p, _z(confidence) * np.sqrt(p * (1.0 - p) / n)


def wilson(x, n, confidence: float) -> tuple[np.ndarray, np.ndarray]:
    """Wilson score interval.

    ``(x + z^2/2)/(n + z^2) ± z sqrt(n)/(n + z^2) sqrt(p q + z^2/(4n))``;
    lower limit 0 at x = 0 and upper 1 at x = n (exact in theory; set so that
    rounding cannot push them off the boundary).

    Parameters
    ----------
    x, n : array_like
        Successes and trials.
    confidence : float
        Confidence level in (0, 1).

    Returns
    -------
    lower, upper : ndarray

    References
    ----------
    Wilson, E. B. (1927). Probable inference, the law of succession, and
    statistical inference. *JASA* 22, 209-212.
    Brown, Cai and DasGupta (2001), *Statistical Science* 16, 101-133, section 4.1.1.
    """
    x, n = _counts(x, n)
    z = _z(confidence)
    z2 = z * z
    p = x / n
    centre = (x + z2 / 2.0) / (n + z2)
    half = z * np.sqrt(n) / (n + z2) * np.sqrt(p * (1.0 - p) + z2 / (4.0 * n))
    lo, hi = _clip01(centre - half, centre + half)
    lo = np.where(x <= 0, 0.0, lo)
    hi = np.where(x >= n, 1.0, hi)
    return lo, hi


def agresti_coull(x, n, confidence: float) -> tuple[np.ndarray, np.ndarray]:
    """Agresti–Coull interval, clipped to [0, 1].

    With ``n~ = n + z^2`` and ``p~ = (x + z^2/2) / n~``: ``p~ ± z sqrt(p~ q~ / n~)``
    (Brown et al. 2001, eq. 5, with kappa = z).

    Parameters
    ----------
    x, n : array_like
        Successes and trials.
    confidence : float
        Confidence level in (0, 1).

    Returns
    -------
    lower, upper : ndarray

    References
    ----------
    Agresti, A. and Coull, B. A. (1998). Approximate is better than "exact" for
    interval estimation of binomial proportions. *The American Statistician*
    52(2), 119-126.
    Brown, Cai and DasGupta (2001), *Statistical Science* 16, 101-133, section 4.1.3.
    """
    pt, half = agresti_coull_centre_half(x, n, confidence)
    return _clip01(pt - half, pt + half)


def agresti_coull_centre_half(x, n, confidence: float) -> tuple[np.ndarray, np.ndarray]:
    """Centre ``p~`` and half-width of the Agresti–Coull interval before clipping."""
    x, n = _counts(x, n)
    z = _z(confidence)
    z2 = z * z
    nt = n + z2
    pt = (x + z2 / 2.0) / nt
    return pt, z * np.sqrt(pt * (1.0 - pt) / nt)


def clopper_pearson(x, n, confidence: float) -> tuple[np.ndarray, np.ndarray]:
    """Clopper–Pearson ("exact") interval from beta quantiles.

    Lower ``Beta(alpha/2; x, n - x + 1)`` (0 at x = 0), upper
    ``Beta(1 - alpha/2; x + 1, n - x)`` (1 at x = n).

    Parameters
    ----------
    x, n : array_like
        Successes and trials.
    confidence : float
        Confidence level in (0, 1).

    Returns
    -------
    lower, upper : ndarray

    References
    ----------
    Clopper, C. J. and Pearson, E. S. (1934). The use of confidence or fiducial
    limits illustrated in the case of the binomial. *Biometrika* 26, 404-413.
    Brown, Cai and DasGupta (2001), *Statistical Science* 16, 101-133, section 4.2.1.
    """
    x, n = _counts(x, n)
    a2 = (1.0 - np.asarray(confidence, dtype=float)) / 2.0
    # safe shape parameters at the boundaries; the value there is replaced
    x_lo = np.where(x > 0, x, 1.0)
    x_hi = np.where(x < n, x, n - 1.0)
    lo = stats.beta.ppf(a2, x_lo, n - x_lo + 1.0)
    hi = stats.beta.isf(a2, x_hi + 1.0, n - x_hi)
    lo = np.where(x > 0, lo, 0.0)
    hi = np.where(x < n, hi, 1.0)
    return _clip01(lo, hi)


def jeffreys(x, n, confidence: float) -> tuple[np.ndarray, np.ndarray]:
    """Jeffreys interval: equal-tailed Beta(x + 1/2, n - x + 1/2) quantiles.

    As Brown et al. (2001) define it, the lower limit is set to 0 at x = 0 and
    the upper limit to 1 at x = n.

    Parameters
    ----------
    x, n : array_like
        Successes and trials.
    confidence : float
        Confidence level in (0, 1).

    Returns
    -------
    lower, upper : ndarray

    References
    ----------
    Brown, Cai and DasGupta (2001), *Statistical Science* 16, 101-133, section 4.1.2.
    """
    x, n = _counts(x, n)
    a2 = (1.0 - np.asarray(confidence, dtype=float)) / 2.0
    lo = stats.beta.ppf(a2, x + 0.5, n - x + 0.5)
    hi = stats.beta.isf(a2, x + 0.5, n - x + 0.5)
    lo = np.where(x > 0, lo, 0.0)
    hi = np.where(x < n, hi, 1.0)
    return _clip01(lo, hi)


# ---------------------------------------------------------------- difference


def _clip11(lo, hi) -> tuple[np.ndarray, np.ndarray]:
    return np.clip(lo, -1.0, 1.0), np.clip(hi, -1.0, 1.0)


def wald_diff(xa, na, xb, nb, confidence: float) -> tuple[np.ndarray, np.ndarray]:
    """Wald interval for p_a - p_b, clipped to [-1, 1].

    ``pa - pb ± z sqrt(pa qa / na + pb qb / nb)``.

    Parameters
    ----------
    xa, na, xb, nb : array_like
        Successes and trials of groups a and b.
    confidence : float
        Confidence level in (0, 1).

    Returns
    -------
    lower, upper : ndarray

    References
    ----------
    Newcombe, R. G. (1998). Interval estimation for the difference between
    independent proportions: comparison of eleven methods. *Statistics in
    Medicine* 17, 873-890 (method 1).
    """
    xa, na = _counts(xa, na)
    xb, nb = _counts(xb, nb)
    pa, pb = xa / na, xb / nb
    half = _z(confidence) * np.sqrt(pa * (1.0 - pa) / na + pb * (1.0 - pb) / nb)
    d = pa - pb
    return _clip11(d - half, d + half)


def newcombe(xa, na, xb, nb, confidence: float) -> tuple[np.ndarray, np.ndarray]:
    """Newcombe's hybrid score interval for p_a - p_b (method 10).

    From the Wilson limits ``(la, ua)`` and ``(lb, ub)`` of each proportion:
    lower ``d - sqrt((pa - la)^2 + (ub - pb)^2)``, upper
    ``d + sqrt((ua - pa)^2 + (pb - lb)^2)``, with ``d = pa - pb``.

    Parameters
    ----------
    xa, na, xb, nb : array_like
        Successes and trials of groups a and b.
    confidence : float
        Confidence level in (0, 1).

    Returns
    -------
    lower, upper : ndarray

    References
    ----------
    Newcombe, R. G. (1998). Interval estimation for the difference between
    independent proportions: comparison of eleven methods. *Statistics in
    Medicine* 17, 873-890 (method 10).
    """
    xa, na = _counts(xa, na)
    xb, nb = _counts(xb, nb)
    pa, pb = xa / na, xb / nb
    la, ua = wilson(xa, na, confidence)
    lb, ub = wilson(xb, nb, confidence)
    d = pa - pb
    lo = d - np.sqrt((pa - la) ** 2 + (ub - pb) ** 2)
    hi = d + np.sqrt((ua - pa) ** 2 + (pb - lb) ** 2)
    return _clip11(lo, hi)


def agresti_caffo(xa, na, xb, nb, confidence: float) -> tuple[np.ndarray, np.ndarray]:
    """Agresti–Caffo interval: Wald after adding 1 success and 1 failure per group.

    With ``pa~ = (xa + 1)/(na + 2)``, ``pb~ = (xb + 1)/(nb + 2)``:
    ``pa~ - pb~ ± z sqrt(pa~ qa~ / (na + 2) + pb~ qb~ / (nb + 2))``, clipped to [-1, 1].

    Parameters
    ----------
    xa, na, xb, nb : array_like
        Successes and trials of groups a and b.
    confidence : float
        Confidence level in (0, 1).

    Returns
    -------
    lower, upper : ndarray

    References
    ----------
    Agresti, A. and Caffo, B. (2000). Simple and effective confidence intervals
    for proportions and differences of proportions result from adding two
    successes and two failures. *The American Statistician* 54(4), 280-288.
    """
    xa, na = _counts(xa, na)
    xb, nb = _counts(xb, nb)
    ma, mb = na + 2.0, nb + 2.0
    pa, pb = (xa + 1.0) / ma, (xb + 1.0) / mb
    half = _z(confidence) * np.sqrt(pa * (1.0 - pa) / ma + pb * (1.0 - pb) / mb)
    d = pa - pb
    return _clip11(d - half, d + half)


# ---------------------------------------------------------------- registry

for _name, _func, _text, _refs in (
    ("wald", wald, "Wald interval p ± z sqrt(pq/n), clipped to [0, 1]", (_BROWN,)),
    ("wilson", wilson, "Wilson score interval", ("Wilson (1927), JASA 22:209-212", _BROWN)),
    ("agresti-coull", agresti_coull, "Agresti-Coull interval, clipped to [0, 1]",
     ("Agresti & Coull (1998), The American Statistician 52:119-126", _BROWN)),
    ("clopper-pearson", clopper_pearson, "Clopper-Pearson interval from beta quantiles",
     ("Clopper & Pearson (1934), Biometrika 26:404-413", _BROWN)),
    ("jeffreys", jeffreys, "Jeffreys interval (Beta(x+1/2, n-x+1/2) quantiles)", (_BROWN,)),
):
    register(Method(name=_name, estimand="proportion", kind="count", func=_func,
                    shift_equivariant=False, summary=_text, references=_refs,
                    centre_half={"wald": wald_centre_half, "agresti-coull": agresti_coull_centre_half}.get(_name)))

_NEWCOMBE = "Newcombe (1998), Statistics in Medicine 17:873-890"
for _name, _func, _text, _refs in (
    ("wald", wald_diff, "Wald interval for a difference, clipped to [-1, 1]", (_NEWCOMBE + ", method 1",)),
    ("newcombe", newcombe, "Newcombe hybrid score interval (method 10)", (_NEWCOMBE + ", method 10",)),
    ("agresti-caffo", agresti_caffo, "Agresti-Caffo interval (add 1 success and 1 failure per group)",
     ("Agresti & Caffo (2000), The American Statistician 54:280-288",)),
):
    register(Method(name=_name, estimand="proportion-diff", kind="count2", func=_func,
                    shift_equivariant=False, summary=_text, references=_refs))
