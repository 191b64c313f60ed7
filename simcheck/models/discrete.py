"""Discrete data models: categorical, Bernoulli, Poisson, negative binomial.

All set ``discrete = True`` (coverage of an interval may oscillate in n).
Bernoulli, and a categorical whose values are 0 and 1, set ``zero_one`` and
report :meth:`bernoulli_p`, so proportion estimands can use them directly and
the engine can enumerate binomial outcomes exactly.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np
from scipy import stats

from simcheck.models.base import Model, ZeroOneMoments, register
from simcheck.models.continuous import ParamTable, bound_ok, event_args, moments_ok, prob_ok

__all__ = ["Categorical", "Bernoulli", "Poisson", "NegativeBinomial"]

#: Allowed |sum - 1| of a list of probabilities or weights (float rounding of
#: entries such as 0.1 + 0.2 + 0.7).
SUM_TOL = 1e-9
#: numpy's largest Poisson rate inside its negative-binomial sampler
#: (``POISSON_LAM_MAX`` in numpy's generator: int64 max minus 10 of its square roots)
NB_LAM_MAX = float(np.iinfo(np.int64).max) - 10 * math.sqrt(float(np.iinfo(np.int64).max))


class _Discrete(Model):
    discrete = True

    def params(self) -> dict[str, Any]:
        return dict(self._given)


@register("categorical")
class Categorical(_Discrete):
    """A finite set of values with given probabilities.

    Parameters (table keys)
    -----------------------
    values : list of float, distinct
    probs : list of float in [0, 1], same length, summing to 1
    """

    name = "categorical"

    def __init__(self, params: dict[str, Any]) -> None:
        t = ParamTable(self.name, params, ["values", "probs"])
        vals = t.numbers("values")
        probs = t.numbers("probs", low=0, high=1)
        if vals is not None:
            seen: set[float] = set()
            for i, v in enumerate(vals):
                if v in seen:
                    t.c.add(f"values[{i}]", f"repeats the value {v:g}; list each value once")
                seen.add(v)
                bound_ok(t.c, f"values[{i}]", v)
        if probs is not None:
            for i, q in enumerate(probs):
                prob_ok(t.c, f"probs[{i}]", q)
        if vals is not None and probs is not None:
            if len(vals) != len(probs):
                t.c.add("probs", f"has {len(probs)} entries but values has {len(vals)}; give one probability per value")
            else:
                s = math.fsum(probs)
                if abs(s - 1.0) > SUM_TOL:
                    t.c.add("probs", f"must sum to 1, got {s:.12g}")
                elif sum(1 for p in probs if p > 0) < 2:
                    t.c.add("probs", "puts all probability on one value; the data would not vary")
        if not t.c.problems:
            m, sd, _ = self._moments(np.asarray(vals, dtype=np.float64), np.asarray(probs, dtype=np.float64))
            moments_ok(t.c, "probs", m, sd, "categorical law")
        t.done()
        self._given = t.given()
        v = np.asarray(vals, dtype=np.float64)
        p = np.asarray(probs, dtype=np.float64)
        p = p / p.sum()
        self.values, self.probs = v, p
        cum = np.cumsum(p)
        cum[-1] = 1.0  # u < 1 always finds an index
        self._cum = cum
        self._mean, self._sd, self._skew = self._moments(v, p)
        self.zero_one = bool(np.all((v == 0.0) | (v == 1.0)))

    @staticmethod
    def _moments(v: np.ndarray, p: np.ndarray) -> tuple[float, float, float]:
        p = p / p.sum()
        m = float(np.dot(p, v))
        with np.errstate(all="ignore"):
            sd = math.sqrt(float(np.dot(p, (v - m) ** 2)))
            # scaled before cubing, so a tiny SD does not underflow to 0
            skew = float(np.dot(p, ((v - m) / sd) ** 3)) if sd > 0 else math.nan
        return m, sd, skew

    @property
    def mean(self) -> float:
        return self._mean

    @property
    def sd(self) -> float:
        return self._sd

    @property
    def skewness(self) -> float:
        return self._skew

    def bernoulli_p(self) -> float | None:
        return self._mean if self.zero_one else None

    def event_probability(self, *, values=None, above=None) -> float:
        vals, a = event_args(values, above)
        if vals is not None:
            return float(self.probs[np.isin(self.values, vals)].sum())
        return float(self.probs[self.values > a].sum())

    def _draw(self, rng, size, out) -> None:
        rng.random(out=out)
        idx = np.searchsorted(self._cum, out, side="right")
        np.take(self.values, idx, out=out)


@register("bernoulli")
class Bernoulli(ZeroOneMoments, _Discrete):
    """0/1 values with P(1) = p.

    Parameters (table keys)
    -----------------------
    p : float in (0, 1)
    """

    name = "bernoulli"
    zero_one = True

    def __init__(self, params: dict[str, Any]) -> None:
        t = ParamTable(self.name, params, ["p"])
        p = t.number("p", low=0, high=1, low_open=True, high_open=True)
        prob_ok(t.c, "p", p, upper=True)
        t.done()
        self._given = t.given()
        self.p = float(p)

    def bernoulli_p(self) -> float:
        return self.p

    def law(self):
        return stats.bernoulli(self.p)

    def event_probability(self, *, values=None, above=None) -> float:
        vals, a = event_args(values, above)
        if vals is not None:
            return float((1 - self.p) * (0.0 in vals) + self.p * (1.0 in vals))
        return float((1 - self.p) * (0.0 > a) + self.p * (1.0 > a))

    def _draw(self, rng, size, out) -> None:
        rng.random(out=out)
        np.less(out, self.p, out=out)


@register("poisson")
class Poisson(_Discrete):
    """Poisson(mean): sd = sqrt(mean), skewness 1/sqrt(mean).

    Parameters (table keys)
    -----------------------
    mean : float, > 0
    """

    name = "poisson"

    def __init__(self, params: dict[str, Any]) -> None:
        t = ParamTable(self.name, params, ["mean"])
        m = t.number("mean", low=0, low_open=True)
        if m is not None and m > 1e15:
            # numpy refuses larger means (int64 counts would lose exactness).
            t.c.add("mean", f"must be <= 1e15, got {m:g}")
        t.done()
        self._given = t.given()
        self._mean = float(m)

    @property
    def mean(self) -> float:
        return self._mean

    @property
    def sd(self) -> float:
        return math.sqrt(self._mean)

    @property
    def skewness(self) -> float:
        return 1.0 / math.sqrt(self._mean)

    def event_probability(self, *, values=None, above=None) -> float:
        vals, a = event_args(values, above)
        d = stats.poisson(self._mean)
        if vals is not None:
            return float(d.pmf(vals).sum())
        return float(d.sf(a))

    def _draw(self, rng, size, out) -> None:
        out[...] = rng.poisson(self._mean, size=size)

    def law(self):
        return stats.poisson(self._mean)


@register("negative-binomial")
class NegativeBinomial(_Discrete):
    """Overdispersed counts with ``var = mean + mean**2 / dispersion``.

    The "NB2" parameterisation: as ``dispersion`` grows the law tends to
    Poisson(mean); small ``dispersion`` means heavy overdispersion. It is the
    count of failures before ``dispersion`` successes with success probability
    ``dispersion / (dispersion + mean)`` (scipy's ``nbinom(n, p)``; ``n`` need
    not be whole).

    Parameters (table keys)
    -----------------------
    mean : float, > 0
    dispersion : float, > 0

    References
    ----------
    Cameron, A. C. and Trivedi, P. K. (2013). Regression Analysis of Count
    Data, 2nd ed., sec. 3.3 (the NB2 variance function).
    """

    name = "negative-binomial"

    def __init__(self, params: dict[str, Any]) -> None:
        t = ParamTable(self.name, params, ["mean", "dispersion"])
        m = t.number("mean", low=0, low_open=True)
        k = t.number("dispersion", low=0, low_open=True)
        if m is not None and k is not None:
            self.n, self.p = float(k), k / (k + m)
            if not 0 < self.p < 1:
                t.c.add("dispersion", f"with mean {m:g} gives a success probability of {self.p:g}, "
                                      f"outside (0, 1) in floating point")
            elif moments_ok(t.c, "dispersion", m, math.sqrt(m + m * m / k), "negative binomial"):
                # numpy draws Poisson(Gamma) counts and refuses a Gamma scale whose
                # tail may pass its Poisson limit: mean + 10 mean / sqrt(dispersion)
                if m + 10 * m / math.sqrt(k) > NB_LAM_MAX:
                    t.c.add("dispersion", f"{k:g} with mean {m:g} is too small for numpy's negative-binomial sampler "
                                          f"(it needs mean + 10 mean / sqrt(dispersion) <= {NB_LAM_MAX:.3g})")
        t.done()
        self._given = t.given()
        self._mean, self.dispersion = float(m), float(k)

    @property
    def mean(self) -> float:
        return self._mean

    @property
    def sd(self) -> float:
        m = self._mean
        return math.sqrt(m + m * m / self.dispersion)

    @property
    def skewness(self) -> float:
        return (2 - self.p) / math.sqrt(self.n * (1 - self.p))

    def event_probability(self, *, values=None, above=None) -> float:
        vals, a = event_args(values, above)
        d = stats.nbinom(self.n, self.p)
        if vals is not None:
            return float(d.pmf(vals).sum())
        return float(d.sf(a))

    def _draw(self, rng, size, out) -> None:
        out[...] = rng.negative_binomial(self.n, self.p, size=size)

    def law(self):
        return stats.nbinom(self.n, self.p)
