"""What one simulation evaluates: the frozen :class:`Design`.

A Design fixes everything except n and the random stream: the data model(s),
the estimand, the interval method, the confidence level and the target
margin. It is the object the Python API and the scenario files share; its
constructor is the one place where the combination is validated.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, replace
from typing import Any

from simcheck.errors import Collector
from simcheck.estimands import REGISTRY as ESTIMAND_SPECS
from simcheck.estimands import spec_for
from simcheck.models.base import Model

#: the estimands built into the engine and formulas; the others come from
#: the registry in :mod:`simcheck.estimands`
BUILT_IN = ("mean", "proportion", "mean-diff", "proportion-diff", "total")
ESTIMANDS = BUILT_IN + tuple(ESTIMAND_SPECS)
#: two independent groups (n_b = ceil(ratio n))
TWO_SAMPLE = ("mean-diff", "proportion-diff") + tuple(k for k, v in ESTIMAND_SPECS.items() if v.data == "two")
#: n pairs of two correlated measurements ([data.a], [data.b], data.correlation)
PAIRED = tuple(k for k, v in ESTIMAND_SPECS.items() if v.data == "paired")
#: estimands whose data come as [data.a] and [data.b]
TWO_GROUP_DATA = TWO_SAMPLE + PAIRED
#: design keys that only some registered estimands use (scenario key -> attribute)
ESTIMAND_PARAMS = {"target.quantile": "quantile", "target.exposure": "exposure", "data.correlation": "correlation"}
BOUNDS = ("two-sided", "upper", "lower")
#: interval methods of stratified designs (computed by the stratified evaluator); "bootstrap" is
#: Rao & Wu's (1988) rescaling bootstrap, percentile interval (simcheck.intervals.stratified_bootstrap)
STRATIFIED_METHODS = {"mean": ("t", "z", "bootstrap"), "total": ("t", "z", "bootstrap"),
                      "proportion": ("t", "wald", "bootstrap")}


@dataclass(frozen=True)
class ClusterSpec:
    """Two-level data: n counts clusters of ``size`` (or ``size_mean`` with CV ``size_cv``) observations."""

    icc: float
    size: int | None = None
    size_mean: float | None = None
    size_cv: float | None = None
    #: distribution of the cluster effect for continuous models: "normal" or "gamma"
    effect: str = "normal"
    #: clusters in the population (M): n clusters are drawn without replacement
    #: from M clusters drawn once, with the first-stage correction sqrt(1 - n/M)
    count: int | None = None

    def to_dict(self) -> dict[str, Any]:
        d = {"icc": self.icc, "size": self.size, "size_mean": self.size_mean, "size_cv": self.size_cv, "effect": self.effect,
             "count": self.count}
        return {k: v for k, v in d.items() if v is not None}


@dataclass(frozen=True)
class PopulationSpec:
    """A finite population of ``size`` units sampled without replacement."""

    size: int
    #: apply the finite population correction in the interval
    fpc: bool = True
    #: optional CSV file and column holding the population values
    file: str | None = None
    column: str | None = None
    #: optional unit values given directly (``population.values``; from Python an array or Series)
    values: tuple[float, ...] | None = field(default=None, repr=False)
    #: a 0/1 population with exactly this many events (units of value 1)
    events: int | None = None

    def to_dict(self) -> dict[str, Any]:
        d = {"size": self.size, "fpc": self.fpc, "file": self.file, "column": self.column,
             "values": None if self.values is None else list(self.values), "events": self.events}
        return {k: v for k, v in d.items() if v is not None}


@dataclass(frozen=True)
class StrataSpec:
    """A stratified design: H strata of known sizes, each with its own data model.

    ``n`` then counts the whole sample, shared among the strata by ``rule``
    (see :mod:`simcheck.strata`); each stratum is sampled without replacement.
    """

    names: tuple[str, ...]
    sizes: tuple[int, ...]
    models: tuple[Model, ...]
    rule: str = "proportional"
    costs: tuple[float, ...] | None = None
    given: tuple[int, ...] | None = None
    minimum: int = 2
    #: apply the finite population correction in each stratum
    fpc: bool = True

    @property
    def population_size(self) -> int:
        return int(sum(self.sizes))

    @property
    def weights(self) -> tuple[float, ...]:
        N = self.population_size
        return tuple(s / N for s in self.sizes)

    def to_dict(self) -> dict[str, Any]:
        out = []
        for i, (name, size, m) in enumerate(zip(self.names, self.sizes, self.models)):
            d: dict[str, Any] = {"name": name, "size": size, "data": m.to_dict()}
            if self.costs is not None:
                d["cost"] = self.costs[i]
            if self.given is not None:
                d["n"] = self.given[i]
            out.append(d)
        return {"strata": out, "allocation": {"rule": self.rule, "minimum": self.minimum}, "fpc": self.fpc}


@dataclass(frozen=True)
class Design:
    """Data model, estimand, interval method, confidence and target margin.

    Parameters
    ----------
    model : Model
        Data model of the (only, or first) group. For proportion estimands it
        must produce 0/1 values (``bernoulli`` or an event model).
    estimand : {"mean", "proportion", "mean-diff", "proportion-diff", "total"}
        ``total`` needs ``strata`` or ``population``: N times the mean (or
        the proportion, for 0/1 data: the number of events), its interval N
        times the mean's; or ``clusters`` with ``count`` M and ``cluster-t``:
        M times the mean cluster total.
    method : str
        Interval method name (see :func:`simcheck.intervals.methods_for`).
    confidence : float
        Nominal confidence level in (0, 1).
    margin : float, optional
        Target half-width; needed for assurance.
    model_b : Model, optional
        Group b for two-sample estimands (difference a - b).
    ratio : float
        Allocation ratio n_b / n_a (two-sample); n_b = ceil(ratio * n_a).
    resamples : int
        Bootstrap resamples.
    clusters, population : optional
        Clustered sampling or a finite population.
    bound : {"two-sided", "upper", "lower"}
        A two-sided interval or a one-sided confidence limit. For a one-sided
        limit coverage is the share of limits on the right side of the true
        value and the achieved margin is the distance from the point
        estimate to the limit.
    relative_margin : float, optional
        Target half-width as a share of the true value (instead of
        ``margin``); the absolute margin ``relative_margin * |true value|``
        is then filled in ``margin``.
    units : str, optional
        Units of the data (text for tables, figures and the methods paragraph).
    limit, events_allowed : optional
        Demonstration plan for a proportion with an upper bound: at most
        ``events_allowed`` events must still bound p below ``limit``.
    assurance : float
        Required share of samples whose half-width stays within the margin;
        gives ``margin_at_assurance``.
    strata : StrataSpec, optional
        A stratified design; ``model`` is then the mixture of the strata
        models weighted by stratum size (the population as a whole).
    """

    model: Model
    estimand: str = "mean"
    method: str = "t"
    confidence: float = 0.95
    margin: float | None = None
    model_b: Model | None = None
    ratio: float = 1.0
    resamples: int = 1999
    clusters: ClusterSpec | None = None
    population: PopulationSpec | None = None
    strata: StrataSpec | None = None
    extra: dict[str, Any] = field(default_factory=dict, compare=False)
    bound: str = "two-sided"
    relative_margin: float | None = None
    units: str | None = None
    limit: float | None = None
    events_allowed: int | None = None
    assurance: float = 0.5
    #: the quantile estimated (estimand ``quantile``), in (0, 1)
    quantile: float | None = None
    #: exposure of each observation unit (rates: person-years, litres), > 0
    exposure: float | None = None
    #: correlation of the two measurements of a pair (paired estimands), in (-1, 1)
    correlation: float | None = None

    def __post_init__(self) -> None:
        c = Collector()
        self._check_bounds(c)
        if not isinstance(self.model, Model):
            c.add("data", f"must be a simcheck model, got {type(self.model).__name__}")
        if self.estimand not in ESTIMANDS:
            c.add("target.estimand", f"must be one of {', '.join(ESTIMANDS)}, got {self.estimand!r}")
        c.number("target.confidence", self.confidence, low=0, high=1, low_open=True, high_open=True)
        if self.margin is not None:
            c.number("target.margin", self.margin, low=0, low_open=True)
        c.number("simulation.ratio", self.ratio, low=0, low_open=True)
        c.number("method.resamples", self.resamples, low=99, integer=True)
        if self.estimand in TWO_GROUP_DATA and self.model_b is None:
            c.add("data.b", f"estimand {self.estimand!r} needs two groups ([data.a] and [data.b])")
        if self.estimand not in TWO_GROUP_DATA and self.model_b is not None:
            c.add("data.b", f"estimand {self.estimand!r} is one-sample; a second group makes no sense")
        if self.estimand in ("proportion", "proportion-diff"):
            for label, m in (("data", self.model), ("data.b", self.model_b)):
                if isinstance(m, Model) and not m.zero_one:
                    c.add(label, "a proportion estimand needs 0/1 data: model 'bernoulli', or event_values / event_above in [target]")
        spec = spec_for(self.estimand)
        self._check_estimand_params(c, spec)
        if spec is not None:
            self._check_registered(c, spec)
        elif self.strata is not None:
            self._check_strata(c)
        elif self.estimand == "total" and self.population is None and self.clusters is None:
            c.add("target.estimand", "'total' needs the population size: a [population] table, [[strata]] tables with "
                  "their sizes, or [clusters] with clusters.count")
        elif self.estimand in ESTIMANDS:
            from simcheck.intervals import methods_for
            from simcheck.intervals.base import lookup

            m = lookup(self.estimand, self.method)
            if m is None:
                c.add("method.interval", f"unknown interval {self.method!r} for estimand {self.estimand!r}; choose one of {', '.join(methods_for(self.estimand))}")
            elif self.bound in BOUNDS and self.bound not in m.bounds:
                c.add("method.interval", f"{self.method!r} is a one-sided {'/'.join(m.bounds)} limit; set target.bound = \"{m.bounds[0]}\"")
            else:
                self._check_finite(c, m)
        c.raise_if_any()

    def _check_estimand_params(self, c: Collector, spec) -> None:
        """Keys only some estimands use: given to another estimand they are a mistake."""
        used = spec.params if spec is not None else ()
        for key, attr in ESTIMAND_PARAMS.items():
            if getattr(self, attr) is not None and attr not in used:
                users = [k for k, v in ESTIMAND_SPECS.items() if attr in v.params]
                c.add(key, f"is only for estimand {' / '.join(users) or '(none)'}; estimand is {self.estimand!r}")

    def _check_registered(self, c: Collector, spec) -> None:
        """Rules of an estimand from the registry (simple random samples, two-sided)."""
        for label, what in (("clusters", self.clusters), ("population", self.population), ("strata", self.strata)):
            if what is not None:
                c.add(label, f"estimand {self.estimand!r} is planned for simple random samples; [{label}] is not available with it")
        if self.bound != "two-sided":
            c.add("target.bound", f"estimand {self.estimand!r} has two-sided intervals only, got {self.bound!r}")
        if spec.ratio_scale:
            if self.margin is not None and not (isinstance(self.margin, (int, float)) and self.margin > 1):
                c.add("target.margin", f"for {spec.label} the margin is a factor > 1 (1.2: the interval lies within "
                                       f"the estimate divided and multiplied by 1.2), got {self.margin!r}")
            if self.relative_margin is not None:
                c.add("target.relative_margin", f"for {spec.label} the margin is a factor already; give target.margin")
        for label, m in (("data.a" if self.model_b is not None else "data", self.model), ("data.b", self.model_b)):
            if not isinstance(m, Model):
                continue
            if spec.zero_one and not m.zero_one:
                c.add(label, f"{spec.label} needs 0/1 data: model 'bernoulli'")
            if spec.counts and not _counts_model(m):
                c.add(label, f"{spec.label} needs counts (whole numbers >= 0): model 'poisson' or 'negative-binomial'")
        from simcheck.intervals.base import lookup

        if lookup(self.estimand, self.method) is None:
            from simcheck.intervals import methods_for

            c.add("method.interval", f"unknown interval {self.method!r} for estimand {self.estimand!r}; "
                                     f"choose one of {', '.join(methods_for(self.estimand))}")
        if spec.check is not None and not c.problems:
            spec.check(self, c)

    def _check_finite(self, c: Collector, method) -> None:
        """Rules of finite-population methods and of totals without strata."""
        if method.needs_population_size and self.population is None:
            c.add("method.interval", f"{self.method!r} needs the population size: use it with a [population] table")
        if method.needs_population_size and self.clusters is not None:
            c.add("method.interval", f"{self.method!r} is for units drawn from a finite population, not with [clusters]")
        if self.estimand == "total":
            if self.clusters is not None and self.clusters.count is None:
                c.add("clusters.count", "missing: a total with [clusters] needs the number of clusters in the "
                      "population (the total is M times the mean cluster total)")
            if self.clusters is not None and method.kind != "cluster":
                c.add("method.interval", f"a total with [clusters] uses cluster-t (M x the mean cluster total), not {self.method!r}")
            if self.clusters is None and method.kind == "cluster":
                c.add("method.interval", f"{self.method!r} for a total needs [clusters] with clusters.count")
            if self.base_estimand == "proportion" and isinstance(self.model, Model) and not self.model.zero_one:
                c.add("method.interval", f"{self.method!r} is a proportion interval: a total with it needs 0/1 data")

    def _check_bounds(self, c: Collector) -> None:
        """Bound, relative margin, units and demonstration plan (new target keys)."""
        if self.bound not in BOUNDS:
            c.add("target.bound", f"must be one of {', '.join(BOUNDS)}, got {self.bound!r}")
        if self.units is not None and (not isinstance(self.units, str) or not self.units.strip()):
            c.add("target.units", f"must be a non-empty text such as \"mg/L\", got {self.units!r}")
        c.number("target.assurance", self.assurance, low=0, high=1, low_open=True, high_open=True)
        if self.relative_margin is not None:
            r = c.number("target.relative_margin", self.relative_margin, low=0, low_open=True)
            if r is not None and isinstance(self.model, Model) and (self.model_b is not None or self.estimand not in TWO_SAMPLE):
                truth = self.true_value
                if truth == 0 or not math.isfinite(truth):
                    c.add("target.relative_margin", f"the true value is {truth:g}, so a share of it gives no margin; give target.margin instead")
                else:
                    want = r * abs(truth)
                    if self.margin is None:
                        object.__setattr__(self, "margin", want)
                    elif not math.isclose(self.margin, want, rel_tol=1e-9):
                        c.add("target.relative_margin", "give target.margin or target.relative_margin, not both")
        if self.limit is not None or self.events_allowed is not None:
            if self.limit is None:
                c.add("target.events_allowed", "needs target.limit (the proportion the plan must bound)")
            else:
                c.number("target.limit", self.limit, low=0, high=1, low_open=True, high_open=True)
            if self.events_allowed is not None:
                c.number("target.events_allowed", self.events_allowed, low=0, high=10**6, integer=True)
            if self.estimand != "proportion":
                c.add("target.limit", f"a demonstration plan bounds a proportion; estimand is {self.estimand!r}")
            if self.bound != "upper":
                c.add("target.bound", f"a demonstration plan (target.limit) needs bound = \"upper\", got {self.bound!r}")

    @property
    def one_sided(self) -> bool:
        return self.bound != "two-sided"

    def _check_strata(self, c: Collector) -> None:
        st = self.strata
        allowed = STRATIFIED_METHODS.get(self.estimand)
        if allowed is None:
            c.add("target.estimand", f"stratified designs estimate a mean, a proportion or a total, not {self.estimand!r}")
        elif self.method not in allowed:
            c.add("method.interval", f"stratified {self.estimand} intervals: {', '.join(allowed)}; got {self.method!r}")
        elif self.method == "bootstrap" and self.one_sided:
            c.add("target.bound", "a one-sided limit is not available with the stratified bootstrap (a percentile "
                  "interval, not symmetric); use t or z")
        if self.clusters is not None or self.population is not None:
            c.add("strata", "cannot be combined with [clusters] or [population] (each stratum is its own finite population)")
        if len(st.sizes) < 2:
            c.add("strata", f"needs at least two strata, got {len(st.sizes)}")
        if not (len(st.names) == len(st.sizes) == len(st.models)):
            c.add("strata", "names, sizes and models must have one entry per stratum")
        if len(set(st.names)) != len(st.names):
            c.add("strata", f"stratum names must differ, got {list(st.names)}")
        if self.estimand == "proportion":
            for i, m in enumerate(st.models):
                if not m.zero_one:
                    c.add(f"strata[{i}].data", "a proportion estimand needs 0/1 data: model 'bernoulli', or event_values / event_above in [target]")
        from simcheck.strata import check_strata

        check_strata(c, st.sizes, st.rule, st.costs, st.given, st.minimum)

    @property
    def base_estimand(self) -> str:
        """What a total is N times (one-stage finite population): its method's mean or proportion."""
        if self.estimand != "total" or self.strata is not None:
            return self.estimand
        from simcheck.intervals import REGISTRY

        return "mean" if ("mean", self.method) in REGISTRY else "proportion"

    @property
    def two_sample(self) -> bool:
        return self.estimand in TWO_SAMPLE

    @property
    def paired(self) -> bool:
        """n pairs of two correlated measurements (paired estimands)."""
        return self.estimand in PAIRED

    @property
    def ratio_scale(self) -> bool:
        """The margin is a factor > 1 (ratio-scale estimands from the registry)."""
        spec = spec_for(self.estimand)
        return spec is not None and spec.ratio_scale

    @property
    def true_value(self) -> float:
        spec = spec_for(self.estimand)
        if spec is not None:
            return float(spec.true_value(self))
        if self.strata is not None:
            # the planning value; an evaluation reports its finite populations' value
            mean = sum(w * m.mean for w, m in zip(self.strata.weights, self.strata.models))
            return mean * self.strata.population_size if self.estimand == "total" else mean
        a = self.model.mean
        if self.estimand == "total" and self.clusters is not None:
            # planning value: M clusters of mean size m; an evaluation reports its cluster population's total
            cl = self.clusters
            return a * (cl.size if cl.size is not None else (cl.size_mean or 1.0)) * (cl.count or 1)
        if self.estimand == "total" and self.population is not None:
            return a * self.population.size  # the planning value; an evaluation reports its population's
        return a - self.model_b.mean if self.two_sample else a

    def n_b(self, n: int) -> int | None:
        """Size of group b for group-a size n (ceil(ratio * n), robust to float error)."""
        if not self.two_sample:
            return None
        import math

        v = self.ratio * n
        r = round(v)
        return int(r) if abs(v - r) <= 1e-9 * max(1.0, abs(v)) else int(math.ceil(v))

    def with_method(self, method: str) -> "Design":
        return replace(self, method=method)

    def to_dict(self) -> dict[str, Any]:
        d: dict[str, Any] = {
            "estimand": self.estimand,
            "method": self.method,
            "confidence": self.confidence,
            "margin": self.margin,
            "true_value": self.true_value,
        }
        if self.bound != "two-sided":
            d["bound"] = self.bound
        if self.relative_margin is not None:
            d["relative_margin"] = self.relative_margin
        if self.units is not None:
            d["units"] = self.units
        if self.limit is not None:
            d["limit"] = self.limit
            d["events_allowed"] = self.events_allowed or 0
        for attr in ESTIMAND_PARAMS.values():
            if getattr(self, attr) is not None:
                d[attr] = getattr(self, attr)
        if self.ratio_scale:
            d["scale"] = "ratio"
        if self.two_sample or self.paired:
            d["data_a"] = self.model.to_dict()
            d["data_b"] = self.model_b.to_dict()
        if self.two_sample:
            d["ratio"] = self.ratio
        elif self.strata is None:
            d["data"] = self.model.to_dict()
        if self.method.startswith("bootstrap"):
            d["resamples"] = self.resamples
        if self.clusters is not None:
            d["clusters"] = self.clusters.to_dict()
        if self.population is not None:
            d["population"] = self.population.to_dict()
        if self.strata is not None:
            d.update(self.strata.to_dict())
        return d


def _counts_model(m: Model) -> bool:
    """Counts: a discrete law on whole numbers >= 0."""
    law = m.law()
    if law is None or not m.discrete:
        return False
    lo = law.support()[0]
    return lo >= 0
