"""Pairs of correlated measurements (paired estimands).

Two margins (one data model per measurement) joined by a Gaussian copula:
normal scores (Z1, Z2) with correlation ``rho``, each turned into its margin
by the margin's quantile function, X = F^{-1}(Phi(Z)). With two normal
margins this is the bivariate normal law and ``rho`` is the Pearson
correlation of the pair; with other margins the Pearson correlation is
smaller in size (see :func:`pearson_correlation`).

References
----------
.. [1] Nelsen, R. B. (2006). An Introduction to Copulas, 2nd ed. Springer,
   section 2.3 (the Gaussian copula; section from memory).
"""

from __future__ import annotations

import math

import numpy as np
from scipy import special

from simcheck.errors import InputError
from simcheck.models.base import Model


def _to_margin(model: Model, z: np.ndarray, which: str) -> np.ndarray:
    """Normal scores z (in place where possible) to values of ``model``."""
    np_ = model.normal_params()
    if np_ is not None:
        z *= np_[1]
        z += np_[0]
        return z
    law = model.law()
    if law is None:
        raise InputError(which, f"model {model.describe()} has no quantile function, so it cannot be one "
                                "measurement of a pair; choose a model with a closed-form law")
    return np.asarray(law.ppf(special.ndtr(z)), dtype=np.float64)


def draw_pairs(model_a: Model, model_b: Model, rho: float | None, rng: np.random.Generator,
               size: tuple[int, int]) -> tuple[np.ndarray, np.ndarray]:
    """Draw (replicates, n) values of the two measurements of n pairs.

    Parameters
    ----------
    model_a, model_b : Model
        Margins of the first and second measurement.
    rho : float
        Correlation of the normal scores, in (-1, 1) (None: 0).
    rng : numpy.random.Generator
        The stream (the engine owns stream bookkeeping).
    size : tuple of int
        ``(replicates, n)``.
    """
    r = 0.0 if rho is None else float(rho)
    z1 = rng.standard_normal(size)
    z2 = rng.standard_normal(size)
    z2 *= math.sqrt(max(1.0 - r * r, 0.0))
    z2 += r * z1
    return _to_margin(model_a, z1, "data.a"), _to_margin(model_b, z2, "data.b")


def drawable(model: Model) -> bool:
    """True when ``model`` can be one measurement of a pair (normal, or a closed-form law)."""
    return model.normal_params() is not None or model.law() is not None


def margin_values(model: Model, z: np.ndarray) -> np.ndarray:
    """F^{-1}(Phi(z)) for normal scores ``z``, accurate in both tails.

    Upper-tail scores go through the survival function (``isf(Phi(-z))``),
    because Phi(z) rounds to 1 beyond z of about 8 and the quantile there is
    infinite.
    """
    z = np.asarray(z, dtype=np.float64)
    np_ = model.normal_params()
    if np_ is not None:
        return np_[0] + np_[1] * z
    law = model.law()
    if model.discrete:
        # scipy's discrete quantiles return NaN at tail probabilities below about 1e-100;
        # beyond |z| = 8 (probability 6e-16) a step function is constant for this purpose
        z = np.clip(z, -8.0, 8.0)
    out = np.empty_like(z)
    low = z <= 0
    out[low] = law.ppf(special.ndtr(z[low]))
    out[~low] = law.isf(special.ndtr(-z[~low]))
    return out


#: Gauss-Hermite nodes per axis of :func:`pearson_correlation`
QUADRATURE_NODES = 160


def pearson_correlation(model_a: Model, model_b: Model, rho: float, nodes: int = QUADRATURE_NODES) -> float:
    """The Pearson correlation of a pair drawn by :func:`draw_pairs`.

    E[(X - mu_a)(Y - mu_b)] / (sigma_a sigma_b) with X = F_a^{-1}(Phi(Z1)),
    Y = F_b^{-1}(Phi(Z2)) and corr(Z1, Z2) = rho, by a product Gauss-Hermite
    rule on Z1 and the independent part of Z2 (Z2 = rho Z1 + sqrt(1 - rho^2)
    W). Means and SDs come from the same rule, so its error partly cancels.
    Two normal margins give ``rho`` itself. Smooth margins (lognormal, gamma,
    Weibull, beta, ...) converge fast: the lognormal pair agrees with its
    closed form (exp(rho s_a s_b) - 1) / sqrt((exp(s_a^2) - 1)(exp(s_b^2) - 1))
    to about 1e-9 for log-scale SDs up to 1 (tests/test_est_pairs.py); the
    step functions of discrete margins converge slowly (error about 1e-3).

    References
    ----------
    .. [1] Abramowitz, M. & Stegun, I. A. (1964). Handbook of Mathematical
       Functions, 25.4.46 (Gauss-Hermite quadrature; from memory).
    """
    r = float(rho)
    if model_a.normal_params() is not None and model_b.normal_params() is not None:
        return r
    t, w = np.polynomial.hermite_e.hermegauss(int(nodes))
    w = w / math.sqrt(2.0 * math.pi)
    ga = margin_values(model_a, t)
    hb = margin_values(model_b, r * t[:, None] + math.sqrt(max(1.0 - r * r, 0.0)) * t[None, :])
    wij = w[:, None] * w[None, :]
    mu_a = float(w @ ga)
    mu_b = float(np.sum(wij * hb))
    da = ga - mu_a
    db = hb - mu_b
    cov = float(np.sum(wij * da[:, None] * db))
    var_a = float(w @ (da * da))
    var_b = float(np.sum(wij * db * db))
    if not (var_a > 0 and var_b > 0):
        return math.nan
    return max(-1.0, min(1.0, cov / math.sqrt(var_a * var_b)))
