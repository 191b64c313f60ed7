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
    bad = ~np.isfinite(out)
    if bad.any() and not model.discrete:
        # some scipy laws give up far in the tails (student-t beyond about 1e-100): those nodes carry
        # quadrature weights below 1e-14, so the value at |z| = 8 serves
        zc = np.clip(z[bad], -8.0, 8.0)
        out[bad] = np.where(zc <= 0, law.ppf(special.ndtr(zc)), law.isf(special.ndtr(-zc)))
    return out


#: Gauss-Hermite nodes per axis of :func:`pearson_correlation`
QUADRATURE_NODES = 160


def pearson_correlation(model_a: Model, model_b: Model, rho: float, nodes: int = QUADRATURE_NODES) -> float:
    """The Pearson correlation of a pair drawn by :func:`draw_pairs` (NaN for margins it cannot integrate).

    Cov(X, Y) = E[(Y - mu_b)(m_a(Z2) - mu_a)] with Y = F_b^{-1}(Phi(Z2)) and
    m_a(u) = E[X | Z2 = u], X = F_a^{-1}(Phi(Z1)), Z1 = rho Z2 + sqrt(1 - rho^2) W:

    * continuous margins: m_a by a Gauss-Hermite rule over W, the outer
      expectation by a Gauss-Hermite rule over Z2 (means and SDs from the
      same rule, so its error partly cancels). The lognormal pair agrees with
      its closed form (exp(rho s_a s_b) - 1) / sqrt((exp(s_a^2) - 1)(exp(s_b^2) - 1))
      to about 1e-15 (tests/test_est_pairs.py);
    * a count margin (integer steps: bernoulli, poisson, negative-binomial)
      is a sum of steps, X = L + sum_k 1[Z > c_k] with c_k = Phi^{-1}(F(k - 1)),
      so m_a(u) = L + sum_k Phi((rho u - c_k) / sqrt(1 - rho^2)) is smooth;
      a count margin b is integrated piecewise (Gauss-Legendre between its
      steps). Means and SDs of counts come from their laws.

    Two normal margins give ``rho`` itself.

    References
    ----------
    .. [1] Abramowitz, M. & Stegun, I. A. (1964). Handbook of Mathematical
       Functions, 25.4.46 (Gauss-Hermite) and 25.4.29 (Gauss-Legendre; from memory).
    """
    r = float(rho)
    if model_a.normal_params() is not None and model_b.normal_params() is not None:
        return r
    if model_b.discrete and not model_a.discrete:
        model_a, model_b = model_b, model_a  # integrate over the continuous one where there is one
    steps_a = _steps(model_a) if model_a.discrete else None
    steps_b = _steps(model_b) if model_b.discrete else None
    if (model_a.discrete and steps_a is None) or (model_b.discrete and steps_b is None):
        return math.nan
    t, w = np.polynomial.hermite_e.hermegauss(int(nodes))
    w = w / math.sqrt(2.0 * math.pi)
    s = math.sqrt(max(1.0 - r * r, 0.0))
    if steps_b is None:
        u, wu, vb = t, w, margin_values(model_b, t)
    else:
        u, wu, vb = _piecewise_nodes(steps_b)
    if steps_a is None:
        ma = margin_values(model_a, r * u[:, None] + s * t[None, :]) @ w
        ga = margin_values(model_a, t)
        mu_a = float(w @ ga)
        var_a = float(w @ (ga - mu_a) ** 2)
    else:
        low, cuts = steps_a
        ma = low + special.ndtr((r * u[:, None] - cuts[None, :]) / s).sum(axis=1)
        law = model_a.law()
        mu_a, var_a = float(law.mean()), float(law.var())
    if steps_b is None:
        mu_b = float(w @ vb)
        var_b = float(w @ (vb - mu_b) ** 2)
    else:
        law = model_b.law()
        mu_b, var_b = float(law.mean()), float(law.var())
    cov = float(np.sum(wu * (vb - mu_b) * (ma - mu_a)))
    if not (var_a > 0 and var_b > 0):
        return math.nan
    return max(-1.0, min(1.0, cov / math.sqrt(var_a * var_b)))


#: tail probability beyond which the steps of a count margin are ignored
_STEP_TAIL = 1e-15
#: Gauss-Legendre nodes per segment between the steps of a count margin
_SEGMENT_NODES = 24


def _steps(model: Model):
    """(lowest value L, cut points c_k) of a count margin X = L + sum_k 1[Z > c_k]; None if not unit steps."""
    law = model.law()
    lo, hi = law.support()
    first = max(float(lo), float(law.ppf(_STEP_TAIL)))
    last = float(law.isf(_STEP_TAIL))
    if not (math.isfinite(first) and math.isfinite(last)) or last - first > 100_000:
        return None
    ks = np.arange(first, last)  # X >= k + 1  <=>  Z > Phi^{-1}(F(k))
    if not math.isclose(law.pmf(np.arange(first, last + 1)).sum() + law.cdf(first - 1) + law.sf(last), 1.0, abs_tol=1e-9):
        return None  # values between the integers: not a unit-step law
    sf = law.sf(ks)
    cdf = law.cdf(ks)
    cuts = np.where(sf < 0.5, -special.ndtri(sf), special.ndtri(cdf))
    return first, cuts


def _piecewise_nodes(steps) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Nodes, weights (with the normal density) and values of a count margin over its constant pieces."""
    low, cuts = steps
    edges = np.concatenate([[-12.0], np.clip(cuts, -12.0, 12.0), [12.0]])
    x, wx = np.polynomial.legendre.leggauss(_SEGMENT_NODES)
    a, b = edges[:-1], edges[1:]
    keep = b > a
    a, b = a[keep], b[keep]
    vals = low + np.flatnonzero(keep).astype(np.float64)  # value on piece i: low + number of cuts below it
    half = (b - a)[:, None] / 2.0
    u = (a[:, None] + b[:, None]) / 2.0 + half * x[None, :]
    wu = half * wx[None, :] * np.exp(-0.5 * u * u) / math.sqrt(2.0 * math.pi)
    return u.ravel(), wu.ravel(), np.repeat(vals, _SEGMENT_NODES)
