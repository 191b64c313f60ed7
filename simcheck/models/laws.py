"""The law of one observation of a model, for true values and planning values.

Most models give it through :meth:`~simcheck.models.base.Model.law`; the
empirical model (pilot values resampled with replacement) has the discrete
law with mass 1/n on each pilot value, and a model built from a frozen
scipy distribution has that distribution. Models without a law (mixtures,
zero-inflated, categorical) give None: estimands that need a law refuse them.

Log moments (mean and SD of log X) have closed forms for the lognormal,
gamma, exponential and Weibull laws (Johnson, Kotz & Balakrishnan 1994,
Continuous Univariate Distributions vol. 1, ch. 14, 17, 19, 21; from memory);
other laws are integrated numerically.
"""

from __future__ import annotations

import math

import numpy as np
from scipy import special, stats

#: Euler-Mascheroni constant: E[log E] = -gamma for E standard exponential
EULER_GAMMA = 0.5772156649015329


def law_of(model):
    """The frozen scipy law of one observation of ``model``, or None."""
    law = model.law()
    if law is not None:
        return law
    values = getattr(model, "values", None)
    if getattr(model, "name", None) == "empirical" and values is not None:
        xk, counts = np.unique(np.asarray(values, np.float64), return_counts=True)
        return stats.rv_discrete(values=(xk, counts / counts.sum()))()  # frozen, like model.law()
    dist = getattr(model, "dist", None)
    if getattr(model, "name", None) == "scipy" and dist is not None:
        return dist
    return None


def is_discrete_law(law) -> bool:
    """True for a scipy discrete law (ties occur in the data)."""
    return isinstance(getattr(law, "dist", None), stats.rv_discrete)


def has_ties(model) -> bool:
    """True when values repeat with positive probability (discrete models, pilot values resampled)."""
    law = law_of(model)
    return bool(getattr(model, "discrete", False)) or (law is not None and is_discrete_law(law))


def positive_problem(model) -> str | None:
    """Why the model's values are not all > 0 (logs undefined), or None when they are."""
    law = law_of(model)
    if law is None:
        return f"model {model.name!r} has no known law of one observation; use a model such as lognormal, gamma or weibull"
    if is_discrete_law(law):
        p0 = float(law.cdf(0.0))
        if p0 > 0:
            return f"values must be > 0 (logs are taken); model {model.name!r} gives values <= 0 with probability {p0:.4g}"
        return None
    lower = float(law.support()[0])
    if lower < 0:
        return f"values must be > 0 (logs are taken); model {model.name!r} gives negative values (its support starts at {lower:g})"
    return None


def log_moments(model) -> tuple[float, float]:
    """Mean and SD of log X under ``model`` (values > 0: see :func:`positive_problem`)."""
    name = getattr(model, "name", None)
    if name == "lognormal":
        return float(model.meanlog), float(model.sdlog)
    if name == "gamma":
        k = float(model.shape)
        return math.log(model.scale) + float(special.digamma(k)), math.sqrt(float(special.polygamma(1, k)))
    if name == "exponential":
        return math.log(model.mean) - EULER_GAMMA, math.pi / math.sqrt(6.0)
    if name == "weibull":
        k = float(model.shape)
        return math.log(model.scale) - EULER_GAMMA / k, math.pi / (k * math.sqrt(6.0))
    law = law_of(model)
    if is_discrete_law(law):
        xk, pk = _support_points(law)
        lx = np.log(xk)
        m = float(np.dot(pk, lx))
        return m, math.sqrt(max(float(np.dot(pk, (lx - m) ** 2)), 0.0))
    # log of the quantile function integrated over (0, 1): no density singularities to meet
    from scipy import integrate

    def log_q(u: float) -> float:
        # a quantile that underflows to 0 sits in a tail of negligible probability
        return math.log(max(float(law.ppf(u)), 5e-324))

    def moment(f):
        val, _ = integrate.quad(lambda u: f(log_q(u)), 0.0, 1.0, limit=200)
        return val

    m = moment(lambda y: y)
    v = moment(lambda y: (y - m) ** 2)
    return float(m), math.sqrt(max(float(v), 0.0))


def _support_points(law) -> tuple[np.ndarray, np.ndarray]:
    """Points and masses of a discrete law (the points holding all but 1e-12 of the mass)."""
    xk = getattr(law.dist, "xk", None)
    if xk is not None:
        return np.asarray(xk, np.float64), np.asarray(law.dist.pk, np.float64)
    lo, hi = law.ppf(1e-12), law.ppf(1 - 1e-12)
    pts = np.arange(max(lo, law.support()[0]), hi + 1)
    pk = law.pmf(pts)
    return pts, pk / pk.sum()
