"""Score intervals for the risk ratio (Koopman; Miettinen-Nurminen) and the odds ratio (Miettinen-Nurminen).

A score interval holds the ratios whose score statistic, with the
proportions estimated under that ratio by maximum likelihood, stays within
±z; its limits are roots found by :mod:`simcheck.intervals.ratios_roots`.

References
----------
.. [1] Koopman, P. A. R. (1984). Confidence intervals for the ratio of two
   binomial proportions. Biometrics 40, 513-517.
.. [2] Miettinen, O. & Nurminen, M. (1985). Comparative analysis of two
   rates. Statistics in Medicine 4, 213-226.
.. [3] Fagerland, M. W., Lydersen, S. & Laake, P. (2015). Recommended
   confidence intervals for two independent binomial proportions.
   Statistical Methods in Medical Research 24, 224-254.
"""

from __future__ import annotations

import numpy as np

from simcheck.intervals.ratios_roots import count_arrays, score_limits, two_sided_z


def _score_rr(log_phi, xa, na, xb, nb, correction):
    """Signed score statistic for p_a / p_b = phi (decreasing in phi).

    The proportions under the constraint p_a = phi p_b maximise the
    likelihood: p_b is the root in [0, min(1, 1/phi)] of
    N phi p^2 - (n_a phi + x_a + n_b + x_b phi) p + (x_a + x_b) = 0
    (Miettinen & Nurminen 1985), taken in the form free of cancellation.
    """
    phi = np.exp(log_phi)
    n_tot = na + nb
    b_coef = na * phi + xa + nb + xb * phi
    disc = np.maximum(b_coef * b_coef - 4.0 * n_tot * phi * (xa + xb), 0.0)
    pb = 2.0 * (xa + xb) / (b_coef + np.sqrt(disc))
    pa = np.minimum(phi * pb, 1.0)
    num = xa / na - phi * xb / nb
    var = (pa * (1.0 - pa) / na + phi * phi * pb * (1.0 - pb) / nb) * correction
    return _signed_ratio(num, var)


def _signed_ratio(num, var):
    """num / sqrt(var), with 0/0 = 0 and x/0 = ±inf."""
    with np.errstate(divide="ignore", invalid="ignore"):
        t = num / np.sqrt(var)
        t = np.where(num == 0, 0.0, t)
        return np.where((var <= 0) & (num != 0), np.sign(num) * np.inf, t)


def _score_rr_limits(xa, na, xb, nb, confidence, correction):
    xa, na, xb, nb = count_arrays(xa, na, xb, nb)
    corr = np.asarray(correction(na + nb), dtype=np.float64)
    return score_limits(_score_rr, two_sided_z(confidence), (xa, na, xb, nb, corr))


def koopman_limits(xa, na, xb, nb, confidence: float):
    """Koopman's (1984) score interval for p_a / p_b."""
    return _score_rr_limits(xa, na, xb, nb, confidence, lambda n: 1.0)


def _mn_factor(n_tot):
    return n_tot / (n_tot - 1.0)


def mn_ratio_limits(xa, na, xb, nb, confidence: float):
    """Miettinen and Nurminen's (1985) score interval for p_a / p_b (variance times N / (N - 1))."""
    return _score_rr_limits(xa, na, xb, nb, confidence, _mn_factor)


def _score_or(log_psi, xa, na, xb, nb, correction):
    """Signed score statistic for the odds ratio psi (decreasing in psi).

    Under the odds ratio psi the maximum-likelihood proportions keep the
    event total m = x_a + x_b: p_b is the root in [0, 1] of
    n_b (psi - 1) p^2 + (n_a psi + n_b - m (psi - 1)) p - m = 0, written
    as 2 m / (B + sqrt(B^2 + 4 n_b (psi - 1) m)), free of cancellation and
    valid at psi = 1; p_a = psi p_b / (1 + p_b (psi - 1)).
    """
    psi = np.exp(log_psi)
    m = xa + xb
    b_coef = na * psi + nb - m * (psi - 1.0)
    disc = np.maximum(b_coef * b_coef + 4.0 * nb * (psi - 1.0) * m, 0.0)
    with np.errstate(divide="ignore", invalid="ignore"):
        pb = np.where(m > 0, 2.0 * m / (b_coef + np.sqrt(disc)), 0.0)
        pb = np.clip(pb, 0.0, 1.0)
        pa = np.clip(psi * pb / (1.0 + pb * (psi - 1.0)), 0.0, 1.0)
        u = xa - na * pa
        # Var(x_a - n_a p_a) under the constraint: 1 / (1/(n_a pa qa) + 1/(n_b pb qb)), times N/(N-1)
        inv = 1.0 / (na * pa * (1.0 - pa)) + 1.0 / (nb * pb * (1.0 - pb))
        var = correction / inv
    return _signed_ratio(u, np.where(np.isfinite(inv), var, 0.0))


def mn_odds_limits(xa, na, xb, nb, confidence: float):
    """Miettinen and Nurminen's (1985) score interval for the odds ratio."""
    xa, na, xb, nb = count_arrays(xa, na, xb, nb)
    corr = _mn_factor(na + nb)
    return score_limits(_score_or, two_sided_z(confidence), (xa, na, xb, nb, corr))
