"""Closed-form number of clusters for the total of a finite population of M clusters.

The total is estimated by the unbiased expansion estimator ``Y_hat = M ybar_c``,
``ybar_c`` the mean of the k sampled cluster totals (clusters drawn without
replacement), with ``V(Y_hat) = M^2 (1 - k/M) S_y^2 / k``, ``S_y^2`` the
variance of a cluster total (Cochran 1977, sections 2.4-2.5 with the cluster
totals as units, and 9A.2; section numbers from memory). Under the clustered
data model of :mod:`simcheck.models.clustered` (unit SD sigma, mean mu,
intracluster correlation rho, cluster size m with mean mbar and coefficient of
variation V)

    S_y^2 = sigma^2 (rho mbar^2 (1 + V^2) + (1 - rho) mbar) + mu^2 mbar^2 V^2,

which for equal sizes is ``m sigma^2 (1 + (m - 1) rho)`` (the design effect
times m sigma^2). A half-width of at most B needs ``k0 = (z M S_y / B)^2``
clusters without the correction and ``k = k0 / (1 + k0 / M)`` with it, rounded
up. With equal sizes this is exactly :func:`simcheck.formulas.sample_size`
for the mean at margin ``B / (M m)`` followed by
:func:`simcheck.formulas.finite_clusters`.

Pure functions (numpy/scipy through :mod:`simcheck.formulas`).
"""

from __future__ import annotations

import math

from simcheck.errors import Collector
from simcheck.formulas import FormulaResult, ceil_robust, multiplier_confidence, z_value

__all__ = ["cluster_total_variance", "cluster_total_sample_size"]


def cluster_total_variance(sd: float, icc: float, size_mean: float, size_cv: float = 0.0, mean: float = 0.0) -> float:
    """Variance of one cluster's total, ``S_y^2``, under the clustered data model (see the module text)."""
    m, v = float(size_mean), float(size_cv)
    return sd * sd * (icc * m * m * (1.0 + v * v) + (1.0 - icc) * m) + (mean * m * v) ** 2


def _checked(c: Collector, margin, cluster_count, cluster_size, icc, sd, p, mean, cluster_size_cv):
    B = c.number("--margin", margin, low=0, low_open=True)
    M = c.number("--cluster-count", cluster_count, low=2, integer=True)
    m = c.number("--cluster-size", cluster_size, low=1)
    rho = c.number("--icc", icc, low=0, high=1, high_open=True)
    v = 0.0 if cluster_size_cv is None else c.number("--cluster-size-cv", cluster_size_cv, low=0)
    if (sd is None) == (p is None):
        c.add("--sd", "a total needs exactly one of --sd (planning SD of the values) or --p (share of events, 0/1 values)")
    elif p is not None:
        c.number("--p", p, low=0, high=1, low_open=True, high_open=True)
    else:
        c.number("--sd", sd, low=0, low_open=True)
    if v and sd is not None and mean is None:
        c.add("--cluster-size-cv", "with --sd, a total of clusters of varying sizes also depends on the mean of the "
              "values (the term mean^2 Var(m)); give equal sizes, --p for 0/1 values, or search a scenario")
    return B, M, m, rho, v


def cluster_total_sample_size(margin: float, cluster_count: int, cluster_size: float, icc: float, *,
                              sd: float | None = None, p: float | None = None, mean: float | None = None,
                              cluster_size_cv: float | None = None, confidence: float = 0.95,
                              bound: str = "two-sided") -> FormulaResult:
    """Clusters needed for a total of M clusters with half-width at most ``margin``.

    Parameters
    ----------
    margin : float
        Target half-width B in the total's units, > 0.
    cluster_count : int
        M, clusters in the population (whole number >= 2).
    cluster_size : float
        (Mean) observations per cluster, >= 1.
    icc : float
        Intracluster correlation in [0, 1).
    sd, p : float
        Exactly one: the unit SD, or the share p of 0/1 values (SD
        sqrt(p (1 - p)), mean p).
    mean : float, optional
        Mean of the values; needed with ``sd`` when sizes vary.
    cluster_size_cv : float, optional
        Coefficient of variation of the cluster sizes, >= 0.
    confidence : float
        Confidence level in (0, 1).
    bound : {"two-sided", "upper", "lower"}
        A one-sided limit uses the one-sided multiple.

    Returns
    -------
    FormulaResult
        ``clusters`` the k found, ``n`` = ceil(k m) observations (expected),
        ``design_effect`` = S_y^2 / (m sigma^2), ``estimand`` "total".

    Raises
    ------
    InputError
        All problems at once; fields are the ``formula`` options.

    References
    ----------
    .. [1] Cochran, W. G. (1977). *Sampling Techniques*, 3rd ed. Wiley,
       sections 2.4-2.5 and 9A.2 (section numbers from memory).
    """
    c = Collector()
    B, M, m, rho, v = _checked(c, margin, cluster_count, cluster_size, icc, sd, p, mean, cluster_size_cv)
    conf = c.number("--confidence", confidence, low=0, high=1, low_open=True, high_open=True)
    c.raise_if_any()
    conf = multiplier_confidence(conf, bound)
    sigma = math.sqrt(p * (1.0 - p)) if p is not None else float(sd)
    mu = float(p) if p is not None else float(mean or 0.0)
    s2 = cluster_total_variance(sigma, rho, m, v, mu)
    z = z_value(conf)
    k0 = (z * M * math.sqrt(s2) / B) ** 2
    k_un = k0 / (1.0 + k0 / M)
    k = int(ceil_robust(k_un))
    k = max(k, 2)  # a variance needs two clusters
    n = int(ceil_robust(k * m))
    deff = s2 / (m * sigma * sigma)
    step = (f"S_y^2 = sigma^2 (rho m^2 (1 + V^2) + (1 - rho) m) + mu^2 m^2 V^2 = {s2:.6g}; "
            f"k0 = (z M S_y / B)^2 = ({z:.6g} x {M} x {math.sqrt(s2):.6g} / {B:g})^2 = {k0:.6g}; "
            f"k = k0 / (1 + k0 / M) = {k_un:.6g}; clusters = {k}; n = ceil(k m) = {n}")
    return FormulaResult(
        estimand="total", n=n, n_b=None, n_unrounded=k_un * m, multiplier=z, multiplier_kind="z",
        design_effect=deff, clusters=k, clusters_b=None, confidence=float(confidence), margin=float(B), ratio=None,
        df=None, iterations=None, n_before_fpc=k0 * m, population_size=None, cluster_size=m,
        sd=None if sd is None else float(sd), sd_b=None, p=None if p is None else float(p), p_b=None,
        assumptions=(f"total of M = {int(M)} clusters: M x the mean cluster total (unbiased expansion estimator)",
                     "clusters drawn without replacement (first-stage finite population correction 1 - k/M)",
                     "cluster sizes " + (f"equal ({m:g})" if not v else f"varying: mean {m:g}, CV {v:g}"),
                     "normal approximation with z (the engine's cluster-t uses t with k - 1 df)"),
        formula=f"V(M ybar_c) = M^2 (1 - k/M) S_y^2 / k <= (B / z)^2; {step}",
        bound=bound,
    )
