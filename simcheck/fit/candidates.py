"""Candidate models fitted to pilot values, one function per family.

Each function takes the pilot values (a finite float64 array) and returns a
:class:`Candidate`: the fitted law as a frozen scipy.stats distribution (with
a point mass at zero for zero-inflated forms), the simcheck ``[data]`` table
in simcheck's own parameterisation, the number of estimated parameters and
how they were estimated. Functions return ``None`` when the family does not
apply to the values (e.g. a lognormal for values that are not all positive).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from scipy import stats

MLE = "maximum likelihood (scipy.stats.{}.fit)"
CLOSED = "maximum likelihood (closed form)"
MOMENTS = "method of moments (scipy.stats.{} has no fit)"


@dataclass(frozen=True)
class Candidate:
    """One fitted family.

    ``dist`` is the frozen scipy law of the non-zero part (the whole law when
    ``zero_prob`` is 0); ``zero_prob`` is the weight of the point mass at 0.
    ``discrete`` says whether ``dist`` has a probability mass function.
    """

    model: str
    table: dict[str, Any]
    dist: Any
    k: int
    method: str
    discrete: bool = False
    zero_prob: float = 0.0
    notes: tuple[str, ...] = field(default=())

    def logpdf(self, x: np.ndarray) -> np.ndarray:
        """Log density (continuous), log mass (discrete), or log of the mixed law with an atom at 0."""
        base = self.dist.logpmf(x) if self.discrete else self.dist.logpdf(x)
        pi = self.zero_prob
        if pi == 0.0:
            return base
        zero = x == 0.0
        with np.errstate(divide="ignore"):
            out = np.log1p(-pi) + base
            if self.discrete:
                out = np.where(zero, np.logaddexp(math.log(pi), np.log1p(-pi) + base), out)
            else:
                # an atom at 0 beside a density on (0, inf): zeros carry the atom's mass only
                out = np.where(zero, math.log(pi), out)
        return out

    def cdf(self, x: np.ndarray) -> np.ndarray:
        pi = self.zero_prob
        return pi * (np.asarray(x) >= 0) + (1 - pi) * self.dist.cdf(x)

    def ppf(self, q: np.ndarray) -> np.ndarray:
        pi = self.zero_prob
        if pi == 0.0:
            return self.dist.ppf(q)
        inner = self.dist.ppf(np.clip((q - pi) / (1 - pi), 0.0, 1.0))
        return np.where(q <= pi, 0.0, np.maximum(inner, 0.0))


def _r(x: float) -> float:
    # six significant digits: a table a person reads and pastes, not a checksum
    return float(f"{x:.6g}")


def normal(x: np.ndarray) -> Candidate:
    loc, scale = stats.norm.fit(x)
    return Candidate(
        "normal", {"mean": _r(loc), "sd": _r(scale)}, stats.norm(loc, scale), 2, MLE.format("norm"),
        notes=("the fitted sd is the maximum-likelihood value (divisor n)",),
    )


def lognormal(x: np.ndarray) -> Candidate | None:
    if not np.all(x > 0):
        return None
    s, _, scale = stats.lognorm.fit(x, floc=0)
    meanlog = math.log(scale)
    mean = math.exp(meanlog + s * s / 2)
    cv = math.sqrt(math.expm1(s * s))
    return Candidate(
        "lognormal", {"mean": _r(mean), "cv": _r(cv)}, stats.lognorm(s, scale=scale), 2,
        MLE.format("lognorm") + " with loc = 0",
        notes=(f"meanlog {meanlog:.6g}, sdlog {s:.6g}",),
    )


def gamma(x: np.ndarray) -> Candidate | None:
    if not np.all(x > 0):
        return None
    a, _, scale = stats.gamma.fit(x, floc=0)
    return Candidate(
        "gamma", {"mean": _r(a * scale), "cv": _r(1 / math.sqrt(a))}, stats.gamma(a, scale=scale), 2,
        MLE.format("gamma") + " with loc = 0",
        notes=(f"shape {a:.6g}, scale {scale:.6g}",),
    )


def weibull(x: np.ndarray) -> Candidate | None:
    if not np.all(x > 0):
        return None
    c, _, scale = stats.weibull_min.fit(x, floc=0)
    return Candidate(
        "weibull", {"shape": _r(c), "scale": _r(scale)}, stats.weibull_min(c, scale=scale), 2,
        MLE.format("weibull_min") + " with loc = 0",
    )


def beta(x: np.ndarray, lower: float, upper: float, source: str) -> Candidate | None:
    if not np.all((x > lower) & (x < upper)):
        return None
    w = upper - lower
    a, b, _, _ = stats.beta.fit(x, floc=lower, fscale=w)
    d = stats.beta(a, b, loc=lower, scale=w)
    mean, sd = float(d.mean()), float(d.std())
    table = {"mean": _r(mean), "sd": _r(sd), "lower": lower, "upper": upper}
    return Candidate(
        "beta", table, d, 2, MLE.format("beta") + f" on [{lower:g}, {upper:g}]",
        notes=(f"range [{lower:g}, {upper:g}] {source}", f"a {a:.6g}, b {b:.6g}"),
    )


def zero_inflated(x: np.ndarray, inner: Candidate) -> Candidate:
    """Wrap a fit of the positive values with the share of zeros (its maximum-likelihood value)."""
    pi = float(np.mean(x == 0.0))
    table = {"zero_prob": _r(pi), "inner": {"model": inner.model, **inner.table}}
    return Candidate(
        f"zero-inflated {inner.model}", table, inner.dist, inner.k + 1,
        f"zero_prob = share of zeros; the non-zero values by {inner.method}",
        zero_prob=pi, notes=inner.notes,
    )


def poisson(x: np.ndarray) -> Candidate:
    m = float(x.mean())
    return Candidate("poisson", {"mean": _r(m)}, stats.poisson(m), 1, CLOSED + ": the sample mean", discrete=True)


def bernoulli(x: np.ndarray) -> Candidate | None:
    if not np.all((x == 0.0) | (x == 1.0)):
        return None
    p = float(x.mean())
    return Candidate("bernoulli", {"p": _r(p)}, stats.bernoulli(p), 1, CLOSED + ": the share of ones", discrete=True)


def negative_binomial(x: np.ndarray) -> Candidate | None:
    m, v = float(x.mean()), float(x.var(ddof=1))
    if not v > m or m <= 0:
        return None  # no overdispersion: the moments give no finite dispersion
    k = m * m / (v - m)
    d = stats.nbinom(k, k / (k + m))
    return Candidate(
        "negative-binomial", {"mean": _r(m), "dispersion": _r(k)}, d, 2,
        MOMENTS.format("nbinom") + ": dispersion = mean^2 / (variance - mean), variance with divisor n - 1",
        discrete=True,
    )


def zero_inflated_poisson(x: np.ndarray) -> Candidate | None:
    m, v = float(x.mean()), float(x.var(ddof=1))
    if not v > m or m <= 0:
        return None
    # ZIP moments: mean = (1 - pi) lam, variance = mean (1 + pi lam)
    lam = m + v / m - 1
    pi = 1 - m / lam
    if not 0 < pi < 1:
        return None
    table = {"zero_prob": _r(pi), "inner": {"model": "poisson", "mean": _r(lam)}}
    return Candidate(
        "zero-inflated poisson", table, stats.poisson(lam), 2,
        MOMENTS.format("poisson") + " for the zero-inflated form: lam = mean + variance / mean - 1, "
        "zero_prob = 1 - mean / lam",
        discrete=True, zero_prob=pi,
    )


def _refit_beta(x: np.ndarray, lower: float = 0.0, upper: float = 1.0) -> dict[str, Any]:
    got = beta(np.clip(x, lower + 1e-12 * (upper - lower), upper - 1e-12 * (upper - lower)), lower, upper, "given")
    return got.table


def _refit_poisson(x: np.ndarray) -> dict[str, Any]:
    # a simulated pilot of all zeros has ML mean 0, which no Poisson model takes: floor it
    return {"mean": max(poisson(x).table["mean"], 1e-9)}


def _refit_negative_binomial(x: np.ndarray) -> dict[str, Any]:
    got = negative_binomial(x)
    if got is None:  # no overdispersion in this simulated pilot: the moments say Poisson
        return {"mean": max(float(x.mean()), 1e-9), "dispersion": 1e6}
    return got.table


#: model name -> function(values, **bounds) -> the simcheck table of the refitted parameters
#: (used by the parametric bootstrap of :mod:`simcheck.uncertain`)
REFIT = {
    "normal": lambda x: normal(x).table,
    "lognormal": lambda x: lognormal(x).table,
    "gamma": lambda x: gamma(x).table,
    "weibull": lambda x: weibull(x).table,
    "beta": _refit_beta,
    "poisson": _refit_poisson,
    "negative-binomial": _refit_negative_binomial,
}
