"""Goodness-of-fit statistics of a fitted candidate on the pilot values.

All p-values here are descriptive: the parameters were estimated from the
same values, so the nominal null laws of the statistics do not hold (the
Kolmogorov-Smirnov and Anderson-Darling p-values are then too large, the
chi-square degrees of freedom are reduced by the parameters fitted as is
usual but the cells are pooled after seeing the data).
"""

from __future__ import annotations

import math

import numpy as np
from scipy import stats

from simcheck.fit.candidates import Candidate


def ks_statistic(x: np.ndarray, cand: Candidate) -> float:
    """Kolmogorov-Smirnov distance sup |F_n - F| of a continuous law (with an optional atom at 0).

    References
    ----------
    Kolmogorov, A. N. (1933). Sulla determinazione empirica di una legge di
    distribuzione. Giornale dell'Istituto Italiano degli Attuari 4, 83-91.
    """
    # at each distinct value u compare F_n(u) with F(u) and F_n(u-) with F(u-); ties and the atom
    # at 0 of a zero-inflated law make the left limits differ from the values
    u, counts = np.unique(x, return_counts=True)
    n = x.size
    right = np.cumsum(counts) / n
    left = right - counts / n
    f = cand.cdf(u)
    f_left = f - np.where(u == 0.0, cand.zero_prob, 0.0)
    return float(max(np.max(np.abs(right - f)), np.max(np.abs(left - f_left))))


def anderson_darling(x: np.ndarray, cand: Candidate) -> float:
    """Anderson-Darling statistic A^2 of a continuous fitted law.

    References
    ----------
    Anderson, T. W. and Darling, D. A. (1954). A test of goodness of fit.
    Journal of the American Statistical Association 49, 765-769.
    """
    xs = np.sort(x)
    n = xs.size
    f = np.clip(cand.cdf(xs), 1e-300, 1 - 1e-16)
    i = np.arange(1, n + 1)
    return float(-n - np.mean((2 * i - 1) * (np.log(f) + np.log1p(-f[::-1]))))


def chi_square(x: np.ndarray, cand: Candidate) -> tuple[float, int, float | None]:
    """Pearson chi-square of counts against a fitted count law.

    Cells are the whole numbers 0, 1, ...; from the top, cells with an
    expected count below 5 are pooled into their neighbour below, and the
    last cell takes the whole upper tail. Degrees of freedom: cells - 1 -
    fitted parameters (None p-value when that leaves none).

    References
    ----------
    Pearson, K. (1900). On the criterion that a given system of deviations ...
    Philosophical Magazine 50, 157-175. Cochran, W. G. (1954). Some methods
    for strengthening the common chi-square tests. Biometrics 10, 417-451
    (expected counts of at least 5).
    """
    n = x.size
    top = int(x.max())
    values = np.arange(top + 1)
    pmf = cand.cdf(values) - cand.cdf(values - 1)
    pmf[-1] = 1.0 - (cand.cdf(np.array([top - 1]))[0] if top > 0 else 0.0)  # the last cell is the tail
    observed = np.bincount(x.astype(np.int64), minlength=top + 1).astype(float)
    expected = n * pmf
    obs, exp = [], []
    o_acc = e_acc = 0.0
    for o, e in zip(observed[::-1], expected[::-1]):
        o_acc += o
        e_acc += e
        if e_acc >= 5:
            obs.append(o_acc)
            exp.append(e_acc)
            o_acc = e_acc = 0.0
    if e_acc > 0 or o_acc > 0:
        if exp:
            obs[-1] += o_acc
            exp[-1] += e_acc
        else:
            obs.append(o_acc)
            exp.append(e_acc)
    o_arr, e_arr = np.array(obs), np.array(exp)
    stat = float(np.sum((o_arr - e_arr) ** 2 / e_arr))
    df = len(o_arr) - 1 - cand.k
    p = float(stats.chi2.sf(stat, df)) if df >= 1 else None
    return stat, df, p


def aic(loglik: float, k: int) -> float:
    """Akaike information criterion 2k - 2 log L.

    References
    ----------
    Akaike, H. (1974). A new look at the statistical model identification.
    IEEE Transactions on Automatic Control 19, 716-723.
    """
    return 2 * k - 2 * loglik if math.isfinite(loglik) else math.inf
