"""Cluster-robust interval for a mean (or proportion) from clustered samples.

Kind ``cluster``: ``func(s: ClusterSums, confidence) -> (lo, hi)``.

The engine hands the method running sums over the first k clusters of each
replicate (see :class:`ClusterSums`), so one draw of k_max clusters serves
every k <= k_max along a curve. Arrays broadcast together; the leading axis
runs over replicates, a trailing axis (if any) over numbers of clusters.

The estimator is the ratio estimator ``r = sum(y_j) / sum(m_j)`` (y_j the
total of cluster j, m_j its size): the observation-weighted mean. Its
linearisation (Taylor) variance estimate is

    v(r) = sum_j (y_j - r m_j)^2 / (k (k - 1) mbar^2),   mbar = sum(m_j) / k,

and the interval is ``r ± t_{k-1} sqrt(v(r))``. With equal cluster sizes
``y_j - r m_j = m (ybar_j - r)``, so ``v(r)`` is the sample variance of the
cluster means over k and the interval is exactly Student's t interval on the
k cluster means.

The sum of squares is computed from running sums
``sum y^2 - 2 r sum y m + r^2 sum m^2``; the engine centres continuous values
on the true mean first, which keeps the cancellation harmless.

References
----------
.. [1] Kish, L. (1965). *Survey Sampling*. Wiley, New York (cluster sampling,
   chapters 5-6; the mean of cluster means and its variance).
.. [2] Cochran, W. G. (1977). *Sampling Techniques*, 3rd ed. Wiley, chapter 6
   (the ratio estimator and its variance estimate, eq. 6.13) and chapter 9
   (cluster sampling with unequal sizes treated as a ratio).
.. [3] Donner, A. & Klar, N. (2000). *Design and Analysis of Cluster
   Randomization Trials in Health Research*. Arnold, London (analysis at the
   cluster level with k - 1 degrees of freedom).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from simcheck.intervals.base import Method, register
from simcheck.intervals.mean import t_ppf

__all__ = ["ClusterSums", "cluster_sums", "ratio_estimate", "cluster_t_interval", "cluster_t_proportion",
           "cluster_total_interval"]


@dataclass(frozen=True)
class ClusterSums:
    """Running sums over the first ``k`` clusters of each replicate.

    Attributes
    ----------
    k : int or ndarray
        Number of clusters (>= 2 for a variance).
    sum_y, sum_m : ndarray
        Sum of the cluster totals y_j and of the cluster sizes m_j.
    sum_yy, sum_ym, sum_mm : ndarray
        Sums of y_j^2, y_j m_j and m_j^2.
    """

    k: int | np.ndarray
    sum_y: np.ndarray
    sum_m: np.ndarray
    sum_yy: np.ndarray
    sum_ym: np.ndarray
    sum_mm: np.ndarray


def cluster_sums(totals, sizes) -> ClusterSums:
    """:class:`ClusterSums` over all clusters from totals and sizes of shape (R, k).

    Parameters
    ----------
    totals : array_like
        Cluster totals y_j, shape (R, k).
    sizes : array_like
        Cluster sizes m_j, broadcastable to ``totals``.
    """
    y = np.asarray(totals, dtype=float)
    m = np.broadcast_to(np.asarray(sizes, dtype=float), y.shape)
    return ClusterSums(
        k=y.shape[-1],
        sum_y=y.sum(axis=-1),
        sum_m=m.sum(axis=-1),
        sum_yy=np.einsum("...j,...j->...", y, y),
        sum_ym=np.einsum("...j,...j->...", y, m),
        sum_mm=np.einsum("...j,...j->...", m, m),
    )


def ratio_estimate(s: ClusterSums) -> tuple[np.ndarray, np.ndarray]:
    """Ratio estimate r = sum(y)/sum(m) and its linearisation standard error.

    References
    ----------
    Cochran (1977), *Sampling Techniques*, 3rd ed., chapter 6, eq. (6.13)
    without the finite population correction.
    """
    k = np.asarray(s.k, dtype=float)
    r = s.sum_y / s.sum_m
    ss = s.sum_yy - 2.0 * r * s.sum_ym + r * r * s.sum_mm
    mbar = s.sum_m / k
    var = np.maximum(ss, 0.0) / (k * (k - 1.0) * mbar * mbar)
    return r, np.sqrt(var)


def cluster_t_interval(s: ClusterSums, confidence: float) -> tuple[np.ndarray, np.ndarray]:
    """Cluster-level t interval: r ± t_{k-1} se(r) (ratio estimator, linearisation SE).

    Parameters
    ----------
    s : ClusterSums
        Running sums of cluster totals and sizes (k >= 2).
    confidence : float
        Confidence level in (0, 1).

    Returns
    -------
    lower, upper : ndarray

    References
    ----------
    .. [1] Kish (1965), *Survey Sampling*, chapter 6.
    .. [2] Cochran (1977), *Sampling Techniques*, chapter 6 (ratio estimator variance).
    .. [3] Donner & Klar (2000), *Design and Analysis of Cluster Randomization Trials*.
    """
    r, se = ratio_estimate(s)
    k = np.asarray(s.k, dtype=float)
    t = t_ppf(0.5 + 0.5 * float(confidence), k - 1.0)
    half = t * se
    return r - half, r + half


def cluster_t_proportion(s: ClusterSums, confidence: float) -> tuple[np.ndarray, np.ndarray]:
    """:func:`cluster_t_interval` for a proportion (0/1 data), clipped to [0, 1].

    Clipping follows the Wald interval of :mod:`simcheck.intervals.proportion`.

    References
    ----------
    .. [1] Donner & Klar (2000), *Design and Analysis of Cluster Randomization Trials*.
    .. [2] Cochran (1977), *Sampling Techniques*, chapter 6.
    """
    lo, hi = cluster_t_interval(s, confidence)
    return np.clip(lo, 0.0, 1.0), np.clip(hi, 0.0, 1.0)


def cluster_total_interval(s: ClusterSums, confidence: float, cluster_count: int | None = None):
    """Interval for a population total from k of M clusters drawn without replacement.

    The unbiased expansion estimator ``Y_hat = M ybar_c`` (ybar_c the mean of
    the k sampled cluster totals y_j) with ``v(Y_hat) = M^2 (1 - k/M) s_c^2 / k``,
    ``s_c^2`` the sample variance of the cluster totals (divisor k - 1): simple
    random sampling of clusters, the cluster totals being the units (Cochran
    1977, section 9A.2; the estimator and its variance are those of
    sections 2.4-2.5 with the cluster totals as units). The interval is
    ``Y_hat ± t_{k-1} sqrt(v)``. Only the cluster totals and M are used, not
    the number of units in the population.

    Parameters
    ----------
    s : ClusterSums
        Running sums of the cluster totals (``sum_y``, ``sum_yy``) over k >= 2
        clusters; the size sums are not used.
    confidence : float
        Confidence level in (0, 1).
    cluster_count : int, optional
        M, clusters in the population. Without it the interval is that of the
        mean cluster total ``Y / M`` without the finite population correction
        (the engine then applies ``sqrt(1 - k/M)`` and the factor M itself).

    Returns
    -------
    lower, upper : ndarray

    References
    ----------
    .. [1] Cochran, W. G. (1977). *Sampling Techniques*, 3rd ed. Wiley,
       sections 2.4-2.5 (the estimated total and its variance) and 9A.2
       (clusters of unequal sizes: the unbiased estimate of the total). Section
       numbers from memory.
    """
    k = np.asarray(s.k, dtype=float)
    mean = s.sum_y / k
    ss = np.maximum(s.sum_yy - s.sum_y * mean, 0.0)
    var = ss / (k * (k - 1.0))
    scale = 1.0
    if cluster_count is not None:
        M = float(cluster_count)
        scale = M
        var = var * np.maximum(1.0 - k / M, 0.0)
    half = t_ppf(0.5 + 0.5 * float(confidence), k - 1.0) * np.sqrt(var) * scale
    return scale * mean - half, scale * mean + half


_REFS = (
    "Kish (1965), Survey Sampling, Wiley, ch. 6",
    "Cochran (1977), Sampling Techniques, 3rd ed., Wiley, ch. 6 (ratio estimator variance)",
    "Donner & Klar (2000), Design and Analysis of Cluster Randomization Trials in Health Research, Arnold",
)

register(Method(
    name="cluster-t", estimand="mean", kind="cluster", func=cluster_t_interval, shift_equivariant=True,
    summary="t interval at the cluster level: ratio estimator sum(y)/sum(m), linearisation SE, k - 1 df",
    references=_REFS,
))
register(Method(
    name="cluster-t", estimand="proportion", kind="cluster", func=cluster_t_proportion, shift_equivariant=False,
    summary="t interval at the cluster level for a proportion (ratio estimator, k - 1 df), clipped to [0, 1]",
    references=_REFS,
))
register(Method(
    name="cluster-t", estimand="total", kind="cluster", func=cluster_total_interval, shift_equivariant=True,
    summary="total of M clusters: M x the mean cluster total ± t_{k-1} M sqrt((1 - k/M) s_c^2 / k) (needs clusters.count)",
    references=("Cochran (1977), Sampling Techniques, 3rd ed., Wiley, sections 2.4-2.5 and 9A.2 (from memory)",),
    one_sided="M ybar_c ± t_{1-alpha, k-1} M sqrt((1 - k/M) s_c^2 / k), the one-sided limit of the expansion estimator",
    one_sided_references=("Cochran (1977), Sampling Techniques, ch. 2 and 9A (from memory)",), symmetric=True,
))
