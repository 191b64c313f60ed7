"""Estimates and limits for samples drawn with probability proportional to size.

Pure numpy/scipy functions on blocks of draws (rows are replicates, columns
the n draws of one sample), used by :mod:`simcheck.engine.pps`:

* :func:`hansen_hurwitz` - the Hansen-Hurwitz estimator of a population
  total from n draws with replacement, item i drawn with probability
  ``p_i`` at each draw: ``Y_hat = (1/n) sum y_i / p_i`` and its unbiased
  variance estimator ``v = sum (y_i/p_i - Y_hat)^2 / (n (n - 1))``;
  :func:`hh_interval` the t (n - 1 df) or z interval about it;
* monetary-unit sampling (each draw a monetary unit of the book value BV, so
  ``p_i = x_i / BV`` and ``y_i / p_i = BV t_i`` with the *taint*
  ``t_i = d_i / x_i`` of the item holding the unit): upper limits on the
  total misstatement -
  :func:`stringer_bound` (the Stringer bound), :func:`count_bound` (the
  binomial or Poisson limit on the share of misstated monetary units,
  every taint counted as 100%: conservative for taints in [0, 1]);
* :func:`monetary_unit_n`, the Poisson-based sample size for zero expected
  errors, ``n = BV R / TM`` with ``R = -ln(1 - confidence)``.

The registered methods (estimand ``total``, kind ``selection``) name the
limits for scenario files; only the selection evaluator computes them.

References
----------
.. [1] Hansen, M. H. & Hurwitz, W. N. (1943). On the theory of sampling from
   finite populations. Annals of Mathematical Statistics 14, 333-362.
.. [2] Cochran, W. G. (1977). Sampling Techniques, 3rd ed. Wiley, section
   9A.2-9A.4 (selection with probability proportional to size, with
   replacement; section numbers from memory).
.. [3] Stringer, K. W. (1963). Practical aspects of statistical sampling in
   auditing. Proceedings of the Business and Economic Statistics Section,
   American Statistical Association, 405-411 (the bound as written here is
   from memory).
.. [4] Leslie, D. A., Teitlebaum, A. D. & Anderson, R. J. (1979).
   Dollar-Unit Sampling: A Practical Guide for Auditors. Copp Clark Pitman
   (Poisson factors, taints; from memory).
.. [5] de Jager, N. G., Pap, G. & van Zuijlen, M. C. A. (1997). Facts,
   phantasies, and a new proposal concerning the Stringer bound. Computers
   and Mathematics with Applications 33(5), 37-54 (the bound is widely used
   and conservative in practice, with no general proof of its level).
.. [6] Clopper, C. J. & Pearson, E. S. (1934). The use of confidence or
   fiducial limits illustrated in the case of the binomial. Biometrika 26,
   404-413.
"""

from __future__ import annotations

import math

import numpy as np
from scipy import special, stats

from simcheck.intervals.base import Method, register

__all__ = [
    "hansen_hurwitz", "hh_interval", "binomial_upper", "poisson_factor", "stringer_bound", "count_bound",
    "monetary_unit_n", "MUS_BOUNDS", "HH_METHODS", "SELECTION_METHODS",
]

#: the upper limits of monetary-unit sampling (method name -> (kind, factors))
MUS_BOUNDS = {
    "stringer": ("stringer", "binomial"),
    "stringer-poisson": ("stringer", "poisson"),
    "binomial-bound": ("count", "binomial"),
    "poisson-bound": ("count", "poisson"),
}
#: the Hansen-Hurwitz intervals (t with n - 1 df, z)
HH_METHODS = ("t", "z")
#: interval methods of each selection rule
SELECTION_METHODS = {"pps": HH_METHODS, "monetary-unit": HH_METHODS + tuple(MUS_BOUNDS)}


def hansen_hurwitz(ratios: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Estimate and estimated variance of a total from ``ratios = y / p``.

    Parameters
    ----------
    ratios : ndarray, shape (R, n)
        ``y_i / p_i`` of each draw (n >= 2 draws with replacement).

    Returns
    -------
    estimate, variance : ndarray, shape (R,)
        ``mean(ratios)`` and ``var(ratios, ddof=1) / n``, unbiased for the
        total and for the estimator's variance.

    References
    ----------
    .. [1] Hansen & Hurwitz (1943), Annals of Mathematical Statistics 14:333-362.
    .. [2] Cochran (1977), Sampling Techniques, section 9A.3 (from memory).
    """
    z = np.asarray(ratios, dtype=np.float64)
    n = z.shape[-1]
    est = z.mean(axis=-1)
    var = z.var(axis=-1, ddof=1) / n
    return est, var


def hh_interval(ratios: np.ndarray, confidence: float, multiplier: str = "t") -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Two-sided Hansen-Hurwitz interval: ``estimate ± q sqrt(v)``.

    ``q`` is Student's t quantile with n - 1 degrees of freedom (``"t"``) or
    the normal quantile (``"z"``) at ``1 - (1 - confidence) / 2``.

    Returns
    -------
    estimate, lower, upper : ndarray, shape (R,)

    References
    ----------
    .. [1] Hansen & Hurwitz (1943), Annals of Mathematical Statistics 14:333-362.
    .. [2] Cochran (1977), Sampling Techniques, section 9A.3 (from memory).
    """
    est, var = hansen_hurwitz(ratios)
    n = np.shape(ratios)[-1]
    p = 1.0 - (1.0 - confidence) / 2.0
    q = special.stdtrit(n - 1, p) if multiplier == "t" else special.ndtri(p)
    half = q * np.sqrt(np.maximum(var, 0.0))
    return est, est - half, est + half


def binomial_upper(k, n, confidence: float) -> np.ndarray:
    """One-sided Clopper-Pearson upper limit for a share after k events in n trials.

    ``Beta_{confidence}(k + 1, n - k)``, and 1 when k = n.

    References
    ----------
    .. [1] Clopper & Pearson (1934), Biometrika 26:404-413.
    """
    k = np.asarray(k, dtype=np.float64)
    n = np.asarray(n, dtype=np.float64)
    with np.errstate(invalid="ignore", divide="ignore"):
        out = special.betaincinv(k + 1.0, np.maximum(n - k, 1e-300), confidence)
    return np.where(k >= n, 1.0, out)


def poisson_factor(k, confidence: float) -> np.ndarray:
    """Poisson upper limit of the mean count after k events: ``Gamma_{confidence}(k + 1)``.

    The "reliability factor" of monetary-unit sampling; ``-ln(1 - confidence)``
    for k = 0 (3.0 at 95%).

    References
    ----------
    .. [1] Leslie, Teitlebaum & Anderson (1979), Dollar-Unit Sampling (from memory).
    """
    return special.gammaincinv(np.asarray(k, dtype=np.float64) + 1.0, confidence)


def _limits(n: int, confidence: float, factors: str) -> np.ndarray:
    """u(0..n): the upper limit on the share of misstated units after j errors."""
    j = np.arange(n + 1, dtype=np.float64)
    if factors == "binomial":
        return binomial_upper(j, n, confidence)
    return poisson_factor(j, confidence) / n


def stringer_bound(taints: np.ndarray, book_value: float, confidence: float, factors: str = "binomial") -> np.ndarray:
    """The Stringer upper limit of the total misstatement, one per row.

    With the k positive taints of a sample of n monetary units ordered
    from the largest, ``t_(1) >= ... >= t_(k)``, and ``u(j)`` the one-sided
    upper limit on the share of misstated units after j errors in n draws,

    ``UL = BV [u(0) + sum_{j=1..k} (u(j) - u(j - 1)) t_(j)]``.

    ``factors="binomial"`` takes u from the Clopper-Pearson limit (Stringer's
    form), ``"poisson"`` from the Poisson factors ``Gamma_{c}(j + 1) / n``
    (the form in audit guides).

    Parameters
    ----------
    taints : ndarray, shape (R, n)
        Taints in [0, 1] of the drawn units (0 for units without error).
    book_value : float
        Total book value BV of the population.
    confidence : float
        One-sided level.

    Returns
    -------
    ndarray, shape (R,)

    References
    ----------
    .. [1] Stringer (1963), Proc. Business and Economic Statistics Section, ASA, 405-411 (from memory).
    .. [2] Leslie, Teitlebaum & Anderson (1979), Dollar-Unit Sampling (from memory).
    .. [3] de Jager, Pap & van Zuijlen (1997), Computers and Mathematics with Applications 33(5):37-54.
    """
    t = np.asarray(taints, dtype=np.float64)
    n = t.shape[-1]
    u = _limits(n, confidence, factors)
    steps = np.diff(u)
    ordered = -np.sort(-t, axis=-1)  # largest taint first: it takes the largest step
    return book_value * (u[0] + ordered @ steps)


def count_bound(errors, n: int, book_value: float, confidence: float, factors: str = "binomial") -> np.ndarray:
    """Upper limit of the misstatement counting every error as 100% tainted.

    ``BV u(k)`` with ``u`` the binomial (Clopper-Pearson) or Poisson
    (``Gamma_c(k + 1) / n``) upper limit on the share of misstated
    monetary units after ``k = errors`` errors in n draws: an upper limit on
    the misstated share of the book value, hence on the misstatement when
    every taint is at most 1.

    References
    ----------
    .. [1] Clopper & Pearson (1934), Biometrika 26:404-413.
    .. [2] Leslie, Teitlebaum & Anderson (1979), Dollar-Unit Sampling (from memory).
    """
    k = np.asarray(errors, dtype=np.float64)
    if factors == "binomial":
        return book_value * binomial_upper(k, n, confidence)
    return book_value * poisson_factor(k, confidence) / n


def monetary_unit_n(book_value: float, tolerable: float, confidence: float) -> tuple[int, float, float]:
    """Poisson-based sample size for zero expected errors: ``ceil(BV R / TM)``.

    ``R = -ln(1 - confidence)``, the Poisson factor for zero errors: with no
    error found, the Poisson upper limit ``BV R / n`` is then at most the
    tolerable misstatement TM.

    Returns
    -------
    n, n_unrounded, R

    References
    ----------
    .. [1] Leslie, Teitlebaum & Anderson (1979), Dollar-Unit Sampling (from memory).
    """
    R = float(poisson_factor(0, confidence))
    raw = book_value * R / tolerable
    n = int(math.ceil(raw * (1.0 - 1e-12)))
    return max(n, 1), raw, R


def _not_direct(*args, **kwargs):
    """Monetary-unit limits are computed by the selection evaluator from whole samples.

    References
    ----------
    .. [1] Stringer (1963), Proc. Business and Economic Statistics Section, ASA, 405-411 (from memory).
    """
    raise TypeError("monetary-unit limits are computed by simcheck.engine.pps from whole samples")


_LTA = "Leslie, Teitlebaum & Anderson (1979), Dollar-Unit Sampling, Copp Clark Pitman (from memory)"
_TEXT = {
    "stringer": ("Stringer bound with binomial (Clopper-Pearson) limits: BV [u(0) + sum (u(j) - u(j-1)) t_(j)], taints "
                 "largest first", ("Stringer (1963), Proc. ASA Business and Economic Statistics Section, 405-411 (from memory)",
                                   "de Jager, Pap & van Zuijlen (1997), Computers and Mathematics with Applications 33(5):37-54")),
    "stringer-poisson": ("Stringer bound with Poisson factors Gamma_c(j + 1) / n", (_LTA,)),
    "binomial-bound": ("BV x the Clopper-Pearson upper limit on the share of misstated monetary units (taints as 100%)",
                       ("Clopper & Pearson (1934), Biometrika 26:404-413",)),
    "poisson-bound": ("BV x Gamma_c(k + 1) / n, the Poisson upper limit (taints as 100%)", (_LTA,)),
}
for _name, (_summary, _refs) in _TEXT.items():
    register(Method(name=_name, estimand="total", kind="selection", func=_not_direct, summary=_summary,
                    references=_refs, one_sided=_summary + " (a one-sided upper limit only)", one_sided_references=_refs,
                    bounds=("upper",)))
