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
