"""What one simulation evaluates: the frozen :class:`Design`.

A Design fixes everything except n and the random stream: the data model(s),
the estimand, the interval method, the confidence level and the target
margin. It is the object the Python API and the scenario files share; its
constructor is the one place where the combination is validated.
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace
from typing import Any

from simcheck.errors import Collector
from simcheck.models.base import Model

ESTIMANDS = ("mean", "proportion", "mean-diff", "proportion-diff")
TWO_SAMPLE = ("mean-diff", "proportion-diff")


@dataclass(frozen=True)
class ClusterSpec:
    """Two-level data: n counts clusters of ``size`` (or ``size_mean`` with CV ``size_cv``) observations."""

    icc: float
    size: int | None = None
    size_mean: float | None = None
    size_cv: float | None = None
    #: distribution of the cluster effect for continuous models: "normal" or "gamma"
    effect: str = "normal"

    def to_dict(self) -> dict[str, Any]:
        d = {"icc": self.icc, "size": self.size, "size_mean": self.size_mean, "size_cv": self.size_cv, "effect": self.effect}
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

    def to_dict(self) -> dict[str, Any]:
        d = {"size": self.size, "fpc": self.fpc, "file": self.file, "column": self.column,
             "values": None if self.values is None else list(self.values)}
        return {k: v for k, v in d.items() if v is not None}


@dataclass(frozen=True)
class Design:
    """Data model, estimand, interval method, confidence and target margin.

    Parameters
    ----------
    model : Model
        Data model of the (only, or first) group. For proportion estimands it
        must produce 0/1 values (``bernoulli`` or an event model).
    estimand : {"mean", "proportion", "mean-diff", "proportion-diff"}
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
    extra: dict[str, Any] = field(default_factory=dict, compare=False)

    def __post_init__(self) -> None:
        c = Collector()
        if not isinstance(self.model, Model):
            c.add("data", f"must be a simcheck model, got {type(self.model).__name__}")
        if self.estimand not in ESTIMANDS:
            c.add("target.estimand", f"must be one of {', '.join(ESTIMANDS)}, got {self.estimand!r}")
        c.number("target.confidence", self.confidence, low=0, high=1, low_open=True, high_open=True)
        if self.margin is not None:
            c.number("target.margin", self.margin, low=0, low_open=True)
        c.number("simulation.ratio", self.ratio, low=0, low_open=True)
        c.number("method.resamples", self.resamples, low=99, integer=True)
        if self.estimand in TWO_SAMPLE and self.model_b is None:
            c.add("data.b", f"estimand {self.estimand!r} needs two groups ([data.a] and [data.b])")
        if self.estimand not in TWO_SAMPLE and self.model_b is not None:
            c.add("data.b", f"estimand {self.estimand!r} is one-sample; a second group makes no sense")
        if self.estimand in ("proportion", "proportion-diff"):
            for label, m in (("data", self.model), ("data.b", self.model_b)):
                if isinstance(m, Model) and not m.zero_one:
                    c.add(label, "a proportion estimand needs 0/1 data: model 'bernoulli', or event_values / event_above in [target]")
        if self.estimand in ESTIMANDS:
            from simcheck.intervals import REGISTRY, methods_for

            if (self.estimand, self.method) not in REGISTRY:
                c.add("method.interval", f"unknown interval {self.method!r} for estimand {self.estimand!r}; choose one of {', '.join(methods_for(self.estimand))}")
        c.raise_if_any()

    @property
    def two_sample(self) -> bool:
        return self.estimand in TWO_SAMPLE

    @property
    def true_value(self) -> float:
        a = self.model.mean
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
        if self.two_sample:
            d["data_a"] = self.model.to_dict()
            d["data_b"] = self.model_b.to_dict()
            d["ratio"] = self.ratio
        else:
            d["data"] = self.model.to_dict()
        if self.method.startswith("bootstrap"):
            d["resamples"] = self.resamples
        if self.clusters is not None:
            d["clusters"] = self.clusters.to_dict()
        if self.population is not None:
            d["population"] = self.population.to_dict()
        return d
