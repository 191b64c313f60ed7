"""Continuous data models: normal, lognormal, gamma, exponential, Weibull, beta,
uniform, truncated normal and Student t.

Each model is built from its scenario ``[data]`` table (without ``model``) by
the factory registered under its name; the constructor validates every
parameter at once and raises one :class:`simcheck.errors.InputError`. Draws
fill the caller's float64 buffer in place wherever numpy offers ``out=``
(normal, lognormal, gamma, exponential, Weibull, uniform, truncated normal),
so drawing costs what numpy's generator costs.

This module also holds the small parameter-table helpers (:class:`ParamTable`)
shared by :mod:`simcheck.models.discrete` and :mod:`simcheck.models.composite`.
"""

from __future__ import annotations

import difflib
import math
from numbers import Real
from typing import Any, Iterable, Sequence

import numpy as np
from scipy import special, stats

from simcheck.errors import Collector, InputError
from simcheck.files import VALUE_LIMIT as FILE_VALUE_LIMIT
from simcheck.models.base import Model, StoredMoments, register

__all__ = [
    "ParamTable",
    "event_args",
    "moments_ok",
    "bound_ok",
    "prob_ok",
    "VALUE_LIMIT",
    "PROB_MIN",
    "Normal",
    "Lognormal",
    "Gamma",
    "Exponential",
    "Weibull",
    "Beta",
    "Uniform",
    "TruncatedNormal",
    "StudentT",
]


# ---------------------------------------------------------------------------
# parameter-table helpers (shared by the other model modules)
# ---------------------------------------------------------------------------


def suggest(key: str, known: Iterable[str]) -> str:
    """Text pointing to the known key nearest to ``key`` (or listing them all)."""
    known = list(known)
    near = difflib.get_close_matches(str(key), known, n=1, cutoff=0.5)
    if near:
        return f"did you mean {near[0]!r}?"
    return f"known keys: {', '.join(known)}" if known else "this model takes no parameters"


class ParamTable:
    """Validation of one model's parameter table with a shared :class:`Collector`.

    Unknown keys are recorded at construction (with the nearest known key
    suggested), so a misspelt key and a bad value are reported together.

    Parameters
    ----------
    model : str
        Registry name, used in messages.
    params : dict
        The table without ``model``.
    known : sequence of str
        Every key the model accepts.
    """

    def __init__(self, model: str, params: Any, known: Sequence[str]) -> None:
        self.model = model
        self.c = Collector()
        self.known = list(known)
        if not isinstance(params, dict):
            self.c.add("", f"the parameters of model {model!r} must be a table, got {params!r}")
            params = {}
        self.p: dict[str, Any] = dict(params)
        for k in self.p:
            if k not in self.known:
                if k == "sd" and "cv" in self.known:
                    # a skewed model takes its spread as cv = sd / mean, not sdlog (issue 12)
                    m = self.p.get("mean")
                    v = self.p.get("sd")
                    eg = ""
                    if all(isinstance(x, (int, float)) and not isinstance(x, bool) for x in (m, v)) and m:
                        eg = f" (here cv = {v!r} / {m!r} = {v / m:.4g})"
                    self.c.add("sd", f"unknown key for model {model!r}; give cv = sd / mean{eg}")
                    continue
                self.c.add(str(k), f"unknown key for model {model!r}; {suggest(k, self.known)}")

    def has(self, key: str) -> bool:
        return key in self.p

    def number(self, key: str, *, required: bool = True, default: float | None = None, **rng: Any) -> float | None:
        """A finite number in range, or None after recording a problem (or when absent and optional)."""
        if key not in self.p:
            if required:
                self.c.add(key, f"missing; model {self.model!r} needs it")
            return default
        return self.c.number(key, self.p[key], **rng)

    def numbers(self, key: str, *, min_len: int = 1, **rng: Any) -> list[float] | None:
        """A list of finite numbers (each checked like :meth:`number`), or None."""
        if key not in self.p:
            self.c.add(key, f"missing; model {self.model!r} needs a list of numbers")
            return None
        v = self.p[key]
        if isinstance(v, (str, bytes, dict)) or not isinstance(v, (list, tuple, np.ndarray)):
            self.c.add(key, f"must be a list of numbers, got {v!r}")
            return None
        if len(v) < min_len:
            self.c.add(key, f"needs at least {min_len} value{'s' if min_len > 1 else ''}, got {len(v)}")
            return None
        out: list[float] = []
        ok = True
        for i, x in enumerate(v):
            got = self.c.number(f"{key}[{i}]", x, **rng)
            if got is None:
                ok = False
            else:
                out.append(float(got))
        return out if ok else None

    def text(self, key: str) -> str | None:
        if key not in self.p:
            self.c.add(key, f"missing; model {self.model!r} needs it")
            return None
        v = self.p[key]
        if not isinstance(v, str) or not v.strip():
            self.c.add(key, f"must be a non-empty text, got {v!r}")
            return None
        return v

    def choose(self, *groups: tuple[str, ...]) -> int | None:
        """Index of the one parameterisation fully given; records a problem otherwise.

        Exactly one group of keys must be present, completely, with no key
        from another group.
        """
        present = [[k for k in g if k in self.p] for g in groups]
        used = [i for i, ks in enumerate(present) if ks]
        alts = " or ".join(", ".join(g) for g in groups)
        if not used:
            self.c.add(groups[0][0], f"missing; model {self.model!r} needs {alts}")
            return None
        if len(used) > 1:
            first, second = used[0], used[1]
            self.c.add(
                present[second][0],
                f"give one parameterisation of {self.model!r} ({alts}), not both: "
                f"found {', '.join(present[first])} and {', '.join(present[second])}",
            )
            return None
        i = used[0]
        missing = [k for k in groups[i] if k not in self.p]
        if missing:
            for k in missing:
                self.c.add(k, f"missing; given {', '.join(present[i])}, model {self.model!r} also needs {k}")
            return None
        return i

    def given(self) -> dict[str, Any]:
        """The known keys as given (for :meth:`Model.params`)."""
        return {k: _plain(v) for k, v in self.p.items() if k in self.known}

    def done(self) -> None:
        self.c.raise_if_any()


def _plain(v: Any) -> Any:
    """JSON-friendly copy of a parameter value."""
    if isinstance(v, (list, tuple, np.ndarray)):
        return [_plain(x) for x in v]
    if isinstance(v, dict):
        return {k: _plain(x) for k, x in v.items()}
    if isinstance(v, (np.integer, np.floating)):
        return v.item()
    return v


def event_args(values: Any = None, above: Any = None) -> tuple[np.ndarray | None, float | None]:
    """Validate the arguments of :meth:`Model.event_probability`.

    Returns the distinct event values as a float array (or None) and the
    threshold (or None); exactly one of them is given. Field names are those
    of the scenario's ``[target]`` table.
    """
    c = Collector()
    if (values is None) == (above is None):
        c.add("event_values", "give exactly one of event_values (values that count) or event_above (a threshold)")
        c.raise_if_any()
    if above is not None:
        a = c.number("event_above", above)
        c.raise_if_any()
        return None, float(a)
    if isinstance(values, (str, bytes, dict)) or not isinstance(values, (list, tuple, np.ndarray)):
        if isinstance(values, Real) and not isinstance(values, bool):
            values = [values]
        else:
            raise InputError("event_values", f"must be a list of numbers, got {values!r}")
    if len(values) == 0:
        raise InputError("event_values", "must list at least one value")
    vals = [c.number(f"event_values[{i}]", v) for i, v in enumerate(values)]
    c.raise_if_any()
    return np.unique(np.asarray(vals, dtype=np.float64)), None


#: Largest |mean| and SD of a model: larger values make the engine's sums of
#: squares over up to 10**6 values overflow (same bound as data files).
VALUE_LIMIT = FILE_VALUE_LIMIT
#: Smallest SD of a model: smaller spreads underflow when squared.
SPREAD_MIN = 1e-150
#: Smallest SD relative to |mean|: below it the spread is lost in the rounding of
#: the values themselves (float64 keeps about 16 digits).
RESOLUTION = 1e-12
#: Smallest positive probability or weight: numpy draws uniforms on a 2**-53 grid,
#: so a smaller chance could never (or only by rounding) be drawn.
PROB_MIN = 2.0**-53
LOG_VALUE_LIMIT = math.log(FILE_VALUE_LIMIT)


def moments_ok(c: Collector, field: str, mean: float, sd: float, what: str) -> bool:
    """Record a problem when the implied moments cannot be simulated in floating point.

    Refused: a mean or SD that is not finite; |mean| or SD above
    :data:`VALUE_LIMIT` (the simulation's sums of squares would overflow); an
    SD below :data:`SPREAD_MIN` (its square underflows) or below
    :data:`RESOLUTION` times |mean| (the spread is lost in rounding).
    """
    if not (math.isfinite(mean) and math.isfinite(sd)):
        c.add(field, f"these parameters give a {what} with no finite mean or SD (mean={mean:g}, sd={sd:g})")
        return False
    if abs(mean) > VALUE_LIMIT or sd > VALUE_LIMIT:
        c.add(field, f"these parameters give a {what} with mean {mean:g} and SD {sd:g}: values this large overflow "
                     f"floating point in the simulation's sums of squares (|mean| and SD must be <= {VALUE_LIMIT:g})")
        return False
    if sd < SPREAD_MIN:
        c.add(field, f"these parameters give a {what} with SD {sd:g}: a spread this small underflows floating point "
                     f"when squared (SD must be >= {SPREAD_MIN:g}); rescale the data's units")
        return False
    if sd < RESOLUTION * abs(mean):
        c.add(field, f"these parameters give a {what} with SD {sd:g} at mean {mean:g}: the spread is below "
                     f"floating-point resolution (SD must be >= {RESOLUTION:g} x |mean|); shift or rescale the data's units")
        return False
    return True


def bound_ok(c: Collector, field: str, value: float | None) -> bool:
    """Record a problem when a bound of the values lies beyond +/- :data:`VALUE_LIMIT`."""
    if value is not None and math.isfinite(value) and abs(value) > VALUE_LIMIT:
        c.add(field, f"must lie within +/-{VALUE_LIMIT:g}: larger values overflow floating point in the "
                     f"simulation's sums of squares, got {value:g}")
        return False
    return True


def prob_ok(c: Collector, field: str, p: float | None, *, upper: bool = False) -> bool:
    """Record a problem when a positive probability is below :data:`PROB_MIN` (or, with ``upper``, within it of 1)."""
    if p is None:
        return True
    if 0 < p < PROB_MIN or (upper and 1 - PROB_MIN < p < 1):
        side = f"at most 1 - {PROB_MIN:.2g}" if p > 0.5 else f"at least {PROB_MIN:.2g} (2^-53)"
        c.add(field, f"must be 0 or {side}: a chance this close to {'1' if p > 0.5 else '0'} is below the resolution "
                     f"of the random number generator, so the draws would not follow it; got {p:g}")
        return False
    return True


class _Continuous(Model):
    """Shared behaviour of continuous models: point events have probability 0."""

    discrete = False

    def _sf(self, x: float) -> float:
        raise NotImplementedError

    def event_probability(self, *, values=None, above=None) -> float:
        vals, a = event_args(values, above)
        if vals is not None:
            # A continuous law puts probability 0 on any finite set of values.
            return 0.0
        return float(self._sf(a))

    def params(self) -> dict[str, Any]:
        return dict(self._given)


# ---------------------------------------------------------------------------
# models
# ---------------------------------------------------------------------------


@register("normal")
class Normal(_Continuous):
    """Normal(mean, sd).

    Parameters (table keys)
    -----------------------
    mean : float
    sd : float, > 0
    """

    name = "normal"

    def __init__(self, params: dict[str, Any]) -> None:
        t = ParamTable(self.name, params, ["mean", "sd"])
        mu = t.number("mean")
        sd = t.number("sd", low=0, low_open=True)
        if mu is not None and sd is not None:
            moments_ok(t.c, "sd", mu, sd, "normal")
        t.done()
        self._given = t.given()
        self._mean, self._sd = float(mu), float(sd)

    @property
    def mean(self) -> float:
        return self._mean

    @property
    def sd(self) -> float:
        return self._sd

    @property
    def skewness(self) -> float:
        return 0.0

    def normal_params(self) -> tuple[float, float]:
        return (self._mean, self._sd)

    def _sf(self, x: float) -> float:
        return stats.norm.sf(x, loc=self._mean, scale=self._sd)

    def law(self):
        return stats.norm(loc=self._mean, scale=self._sd)

    def _draw(self, rng, size, out) -> None:
        rng.standard_normal(out=out)
        out *= self._sd
        out += self._mean


@register("lognormal")
class Lognormal(_Continuous):
    """Lognormal, by arithmetic mean and CV (the trade's way) or by meanlog, sdlog.

    With ``mean`` and ``cv``: ``sdlog**2 = log(1 + cv**2)`` and
    ``meanlog = log(mean) - sdlog**2 / 2``, so the values have exactly that
    mean and coefficient of variation. Attributes ``meanlog`` and ``sdlog``
    describe the normal law of ``log(X)``.

    Parameters (table keys)
    -----------------------
    mean : float, > 0  and  cv : float, > 0
    or meanlog : float  and  sdlog : float, > 0

    References
    ----------
    Johnson, N. L., Kotz, S. and Balakrishnan, N. (1994). Continuous Univariate
    Distributions, Vol. 1, 2nd ed., ch. 14 (moments of the lognormal).
    """

    name = "lognormal"

    def __init__(self, params: dict[str, Any]) -> None:
        t = ParamTable(self.name, params, ["mean", "cv", "meanlog", "sdlog"])
        which = t.choose(("mean", "cv"), ("meanlog", "sdlog"))
        ok = False
        if which == 0:
            m = t.number("mean", low=0, low_open=True)
            cv = t.number("cv", low=0, low_open=True)
            if m is not None and cv is not None:
                s2 = math.log1p(cv * cv)
                self.sdlog = math.sqrt(s2)
                self.meanlog = math.log(m) - s2 / 2
                ok = True
        elif which == 1:
            ml = t.number("meanlog")
            sl = t.number("sdlog", low=0, low_open=True)
            if ml is not None and sl is not None:
                self.meanlog, self.sdlog = float(ml), float(sl)
                ok = True
        if ok:
            s2 = self.sdlog**2
            with np.errstate(over="ignore"):
                self._mean = float(np.exp(self.meanlog + s2 / 2))
                self.cv = float(np.sqrt(np.expm1(s2)))
                self._sd = self._mean * self.cv
            field = "sdlog" if which == 1 else "cv"
            if moments_ok(t.c, field, self._mean, self._sd, "lognormal") and self.meanlog + 9 * self.sdlog > LOG_VALUE_LIMIT:
                # exp(meanlog + 9 sdlog) is passed once in about 10**19 draws
                t.c.add(field, f"gives a lognormal whose upper tail (meanlog + 9 sdlog = {self.meanlog + 9 * self.sdlog:.4g}) "
                               f"reaches values beyond {VALUE_LIMIT:g}, which overflow the simulation's sums of squares")
        t.done()
        self._given = t.given()

    @property
    def mean(self) -> float:
        return self._mean

    @property
    def sd(self) -> float:
        return self._sd

    @property
    def skewness(self) -> float:
        cv = self.cv
        return (cv * cv + 3.0) * cv

    def _sf(self, x: float) -> float:
        if x <= 0:
            return 1.0
        return stats.norm.sf((math.log(x) - self.meanlog) / self.sdlog)

    def law(self):
        return stats.lognorm(self.sdlog, scale=math.exp(self.meanlog))

    def _draw(self, rng, size, out) -> None:
        rng.standard_normal(out=out)
        out *= self.sdlog
        out += self.meanlog
        np.exp(out, out=out)


@register("gamma")
class Gamma(_Continuous):
    """Gamma, by mean and CV or by shape and scale.

    ``shape = 1 / cv**2``, ``scale = mean * cv**2``; skewness ``2 * cv``.

    Parameters (table keys)
    -----------------------
    mean : float, > 0  and  cv : float, > 0
    or shape : float, > 0  and  scale : float, > 0
    """

    name = "gamma"

    def __init__(self, params: dict[str, Any]) -> None:
        t = ParamTable(self.name, params, ["mean", "cv", "shape", "scale"])
        which = t.choose(("mean", "cv"), ("shape", "scale"))
        if which == 0:
            m = t.number("mean", low=0, low_open=True)
            cv = t.number("cv", low=0, low_open=True)
            if m is not None and cv is not None:
                self.shape, self.scale = 1.0 / (cv * cv), m * cv * cv
        elif which == 1:
            k = t.number("shape", low=0, low_open=True)
            s = t.number("scale", low=0, low_open=True)
            if k is not None and s is not None:
                self.shape, self.scale = float(k), float(s)
        if not t.c.problems:
            if not (self.shape > 0 and math.isfinite(self.shape)):
                t.c.add("cv", f"gives a gamma shape of {self.shape:g}, which numpy cannot draw from")
            else:
                moments_ok(t.c, "scale" if which == 1 else "cv", self.shape * self.scale,
                           math.sqrt(self.shape) * self.scale, "gamma")
        t.done()
        self._given = t.given()

    @property
    def mean(self) -> float:
        return self.shape * self.scale

    @property
    def sd(self) -> float:
        return math.sqrt(self.shape) * self.scale

    @property
    def skewness(self) -> float:
        return 2.0 / math.sqrt(self.shape)

    def _sf(self, x: float) -> float:
        return stats.gamma.sf(x, self.shape, scale=self.scale)

    def law(self):
        return stats.gamma(self.shape, scale=self.scale)

    def _draw(self, rng, size, out) -> None:
        rng.standard_gamma(self.shape, out=out)
        out *= self.scale


@register("exponential")
class Exponential(_Continuous):
    """Exponential(mean): sd = mean, skewness 2.

    Parameters (table keys)
    -----------------------
    mean : float, > 0
    """

    name = "exponential"

    def __init__(self, params: dict[str, Any]) -> None:
        t = ParamTable(self.name, params, ["mean"])
        m = t.number("mean", low=0, low_open=True)
        if m is not None:
            moments_ok(t.c, "mean", m, m, "exponential")
        t.done()
        self._given = t.given()
        self._mean = float(m)

    @property
    def mean(self) -> float:
        return self._mean

    @property
    def sd(self) -> float:
        return self._mean

    @property
    def skewness(self) -> float:
        return 2.0

    def _sf(self, x: float) -> float:
        return stats.expon.sf(x, scale=self._mean)

    def law(self):
        return stats.expon(scale=self._mean)

    def _draw(self, rng, size, out) -> None:
        rng.standard_exponential(out=out)
        out *= self._mean


@register("weibull")
class Weibull(_Continuous):
    """Weibull(shape, scale): ``P(X > x) = exp(-(x / scale)**shape)``.

    Drawn as ``scale * E**(1/shape)`` with E standard exponential, in place.

    Parameters (table keys)
    -----------------------
    shape : float, > 0
    scale : float, > 0
    """

    name = "weibull"

    def __init__(self, params: dict[str, Any]) -> None:
        t = ParamTable(self.name, params, ["shape", "scale"])
        k = t.number("shape", low=0, low_open=True)
        s = t.number("scale", low=0, low_open=True)
        if k is not None and s is not None:
            self.shape, self.scale = float(k), float(s)
            with np.errstate(all="ignore"):
                m, v, g = stats.weibull_min(self.shape, scale=self.scale).stats(moments="mvs")
            self._mean, self._sd = float(m), float(np.sqrt(v))
            self._skew = float(g) if np.isfinite(g) else None
            moments_ok(t.c, "shape", self._mean, self._sd, "Weibull")
        t.done()
        self._given = t.given()

    @property
    def mean(self) -> float:
        return self._mean

    @property
    def sd(self) -> float:
        return self._sd

    @property
    def skewness(self) -> float | None:
        return self._skew

    def _sf(self, x: float) -> float:
        return stats.weibull_min.sf(x, self.shape, scale=self.scale)

    def law(self):
        return stats.weibull_min(self.shape, scale=self.scale)

    def _draw(self, rng, size, out) -> None:
        rng.standard_exponential(out=out)
        np.power(out, 1.0 / self.shape, out=out)
        out *= self.scale


@register("beta")
class Beta(_Continuous):
    """Beta on [lower, upper] (default [0, 1]), by mean and SD or by shapes a, b.

    With ``mean`` and ``sd``: on the unit scale ``m = (mean - lower) / w``,
    ``v = sd**2 / w**2`` (``w = upper - lower``), ``a = m k``, ``b = (1 - m) k``
    with ``k = m (1 - m) / v - 1``. A beta law exists only when
    ``sd**2 < (mean - lower) (upper - mean)``.

    Parameters (table keys)
    -----------------------
    mean : float in (lower, upper)  and  sd : float, > 0
    or a : float, > 0  and  b : float, > 0
    lower, upper : float, optional (default 0 and 1)
    """

    name = "beta"

    def __init__(self, params: dict[str, Any]) -> None:
        t = ParamTable(self.name, params, ["mean", "sd", "a", "b", "lower", "upper"])
        lo = t.number("lower", required=False, default=0.0)
        hi = t.number("upper", required=False, default=1.0)
        bounds = bound_ok(t.c, "lower", lo) & bound_ok(t.c, "upper", hi) and lo is not None and hi is not None
        if bounds and not lo < hi:
            t.c.add("upper", f"must be > lower ({lo:g}), got {hi:g}")
            bounds = False
        which = t.choose(("mean", "sd"), ("a", "b"))
        if which == 0:
            m = t.number("mean")
            s = t.number("sd", low=0, low_open=True)
            if m is not None and s is not None and bounds:
                if not lo < m < hi:
                    t.c.add("mean", f"must lie strictly between lower ({lo:g}) and upper ({hi:g}), got {m:g}")
                else:
                    limit = (m - lo) * (hi - m)
                    if not s * s < limit:
                        t.c.add(
                            "sd",
                            f"too large for a beta with mean {m:g} on [{lo:g}, {hi:g}]: sd^2 must be "
                            f"< (mean - lower)(upper - mean) = {limit:g}, i.e. sd < {math.sqrt(limit):g}; got {s:g}",
                        )
                    else:
                        w = hi - lo
                        mu = (m - lo) / w
                        k = mu * (1 - mu) / (s * s / (w * w)) - 1
                        self.a, self.b = mu * k, (1 - mu) * k
        elif which == 1:
            a = t.number("a", low=0, low_open=True)
            b = t.number("b", low=0, low_open=True)
            if a is not None and b is not None:
                self.a, self.b = float(a), float(b)
        if not t.c.problems:
            self.lower, self.upper = float(lo), float(hi)
            moments_ok(t.c, "sd" if which == 0 else "b", self.mean, self.sd, "beta")
        t.done()
        self._given = t.given()
        self.lower, self.upper = float(lo), float(hi)

    @property
    def _w(self) -> float:
        return self.upper - self.lower

    @property
    def mean(self) -> float:
        return self.lower + self._w * self.a / (self.a + self.b)

    @property
    def sd(self) -> float:
        # written as mu (1 - mu) / (a + b + 1), which neither underflows nor divides 0 by 0 for tiny a, b
        a, b = self.a, self.b
        mu = a / (a + b)
        return self._w * math.sqrt(mu * (b / (a + b)) / (a + b + 1))

    @property
    def skewness(self) -> float:
        a, b = self.a, self.b
        return 2 * (b - a) * math.sqrt(a + b + 1) / ((a + b + 2) * math.sqrt(a) * math.sqrt(b))

    def _sf(self, x: float) -> float:
        return stats.beta.sf(x, self.a, self.b, loc=self.lower, scale=self._w)

    def law(self):
        return stats.beta(self.a, self.b, loc=self.lower, scale=self._w)

    def _draw(self, rng, size, out) -> None:
        # numpy's beta has no out=; one temporary, then scaled in place.
        out[...] = rng.beta(self.a, self.b, size=size)
        if self.lower != 0.0 or self.upper != 1.0:
            out *= self._w
            out += self.lower


@register("uniform")
class Uniform(_Continuous):
    """Uniform on [lower, upper].

    Parameters (table keys)
    -----------------------
    lower : float
    upper : float, > lower
    """

    name = "uniform"

    def __init__(self, params: dict[str, Any]) -> None:
        t = ParamTable(self.name, params, ["lower", "upper"])
        lo = t.number("lower")
        hi = t.number("upper")
        if bound_ok(t.c, "lower", lo) & bound_ok(t.c, "upper", hi) and lo is not None and hi is not None:
            if not lo < hi:
                t.c.add("upper", f"must be > lower ({lo:g}), got {hi:g}")
            else:
                moments_ok(t.c, "upper", 0.5 * (lo + hi), (hi - lo) / math.sqrt(12.0), "uniform")
        t.done()
        self._given = t.given()
        self.lower, self.upper = float(lo), float(hi)

    @property
    def mean(self) -> float:
        return 0.5 * (self.lower + self.upper)

    @property
    def sd(self) -> float:
        return (self.upper - self.lower) / math.sqrt(12.0)

    @property
    def skewness(self) -> float:
        return 0.0

    def _sf(self, x: float) -> float:
        return stats.uniform.sf(x, loc=self.lower, scale=self.upper - self.lower)

    def law(self):
        return stats.uniform(loc=self.lower, scale=self.upper - self.lower)

    def _draw(self, rng, size, out) -> None:
        rng.random(out=out)
        out *= self.upper - self.lower
        out += self.lower


@register("truncated-normal")
class TruncatedNormal(StoredMoments, _Continuous):
    """A normal(mean, sd) parent truncated to [lower, upper].

    ``mean`` and ``sd`` are the parent's; the true mean and SD of the values
    (``.mean``, ``.sd``) come from :data:`scipy.stats.truncnorm`. Either bound
    may be omitted (meaning -inf or +inf), but not both.

    Draws use the inverse CDF in place: ``u`` uniform on
    ``[Phi(alpha), Phi(beta)]`` then ``Phi^{-1}(u)``. When the interval lies
    in the parent's upper tail it is mirrored to the lower tail, where
    ``Phi`` keeps full relative precision.

    Parameters (table keys)
    -----------------------
    mean : float
    sd : float, > 0
    lower, upper : float, optional (at least one; lower < upper)
    """

    name = "truncated-normal"

    def __init__(self, params: dict[str, Any]) -> None:
        t = ParamTable(self.name, params, ["mean", "sd", "lower", "upper"])
        mu = t.number("mean")
        sd = t.number("sd", low=0, low_open=True)
        lo = t.number("lower", required=False, default=-math.inf)
        hi = t.number("upper", required=False, default=math.inf)
        if not t.has("lower") and not t.has("upper"):
            t.c.add("lower", "missing; a truncated normal needs lower, upper or both")
        elif lo is not None and hi is not None and not lo < hi:
            t.c.add("upper", f"must be > lower ({lo:g}), got {hi:g}")
        elif (mu is not None and sd is not None and lo is not None and hi is not None and not t.c.problems
              and moments_ok(t.c, "sd", mu, sd, "parent normal")):
            alpha, beta = (lo - mu) / sd, (hi - mu) / sd
            # Mirror an upper-tail interval so the CDF values are small, not near 1.
            self._flip = alpha > 0
            if self._flip:
                alpha, beta = -beta, -alpha
            self._pa, self._pb = float(special.ndtr(alpha)), float(special.ndtr(beta))
            if not self._pb > self._pa:
                t.c.add("lower", f"[lower, upper] = [{lo:g}, {hi:g}] has (numerically) zero probability "
                                 f"under the parent normal({mu:g}, {sd:g}); widen it or move the mean")
            else:
                d = stats.truncnorm((lo - mu) / sd, (hi - mu) / sd, loc=mu, scale=sd)
                m, v, g = d.stats(moments="mvs")
                self._dist = d
                self._m, self._s = float(m), float(np.sqrt(v))
                self._g = float(g) if np.isfinite(g) else None
                moments_ok(t.c, "lower", self._m, self._s, "truncated normal")
        t.done()
        self._given = t.given()
        self.parent_mean, self.parent_sd = float(mu), float(sd)
        self.lower, self.upper = float(lo), float(hi)

    def _sf(self, x: float) -> float:
        return float(self._dist.sf(x))

    def law(self):
        return self._dist

    def _draw(self, rng, size, out) -> None:
        rng.random(out=out)
        out *= self._pb - self._pa
        out += self._pa
        special.ndtri(out, out=out)
        out *= -self.parent_sd if self._flip else self.parent_sd
        out += self.parent_mean
        # Rounding in Phi^{-1} can step a hair outside the bounds.
        np.clip(out, self.lower, self.upper, out=out)


@register("student-t")
class StudentT(_Continuous):
    """Location-scale Student t: ``mean + scale * T(df)``.

    SD ``scale * sqrt(df / (df - 2))`` exists only for ``df > 2``; skewness is
    0 for ``df > 3`` and undefined (None) otherwise.

    Parameters (table keys)
    -----------------------
    df : float, > 2
    mean : float
    scale : float, > 0
    """

    name = "student-t"

    def __init__(self, params: dict[str, Any]) -> None:
        t = ParamTable(self.name, params, ["df", "mean", "scale"])
        df = t.number("df")
        if df is not None and not df > 2:
            t.c.add("df", f"must be > 2: with df <= 2 the t distribution has no finite SD, so no interval "
                          f"for its mean can be judged; got {df:g}")
        mu = t.number("mean")
        sc = t.number("scale", low=0, low_open=True)
        if df is not None and df > 2 and mu is not None and sc is not None:
            moments_ok(t.c, "scale", mu, sc * math.sqrt(df / (df - 2.0)), "Student t")
        t.done()
        self._given = t.given()
        self.df, self._mean, self.scale = float(df), float(mu), float(sc)

    @property
    def mean(self) -> float:
        return self._mean

    @property
    def sd(self) -> float:
        return self.scale * math.sqrt(self.df / (self.df - 2.0))

    @property
    def skewness(self) -> float | None:
        return 0.0 if self.df > 3 else None

    def _sf(self, x: float) -> float:
        return stats.t.sf(x, self.df, loc=self._mean, scale=self.scale)

    def law(self):
        return stats.t(self.df, loc=self._mean, scale=self.scale)

    def _draw(self, rng, size, out) -> None:
        out[...] = rng.standard_t(self.df, size=size)
        out *= self.scale
        out += self._mean
