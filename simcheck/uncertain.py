"""Planning values given as distributions: parse them, draw them, evaluate predictively.

A scenario's model table may give a numeric parameter a distribution instead
of a number:

``sd = { pilot_n = 20, pilot_sd = 12 }``
    an SD estimated by a pilot of ``pilot_n`` values: the unknown sigma^2 is
    drawn as ``pilot_sd^2 (pilot_n - 1) / X`` with ``X ~ chi2(pilot_n - 1)``,
    the scaled chi-square law of the pilot s^2 turned round (the posterior of
    sigma^2 under the reference prior 1 / sigma^2); point value ``pilot_sd``.
``cv = { lower = 0.4, upper = 0.9 }`` (optionally ``point = 0.6``)
    a stated range: uniform on [lower, upper]; point value ``point`` or the
    midpoint.
``pilot_n = 20`` inside a model table (e.g. the table that ``simcheck fit``
    printed)
    every parameter of the model was fitted to a pilot of ``pilot_n`` values:
    each draw refits the model (the same fitting as ``simcheck fit``) to
    ``pilot_n`` values simulated from it, a parametric bootstrap of the
    fitted model; point values: the table as given.

:func:`split` replaces each such table by its point value (so the scenario
validates as usual: the *conditional* answer is the one at the point values)
and returns the :class:`Uncertain` specifications. :func:`predictive_check`
evaluates the *unconditional* (predictive) coverage and assurance: the
parameters are drawn first, ``draws`` sets of them from the stream
``(STAGE_PLANNING, 0)`` (replicated Latin hypercube, :func:`draw_values`); draw k owns the child stream
``(STAGE_PLANNING, 1, k)`` from which the engine spawns its block streams for
a block of ``replicates_per_draw`` replicates. Every n uses the same draws and
streams (common random numbers), so the predictive curve is smooth in n. The
MCSE comes from the spread of the means of independent groups of draws.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any, Sequence

import numpy as np
from scipy import stats

from simcheck import rng as rngmod
from simcheck.errors import Collector
from simcheck.formulas import upper_sd_limit

__all__ = ["Uncertain", "PredictiveCheck", "split", "draw_values", "point_designs",
           "predictive_check", "upper_sd_limit"]

PILOT_KEYS = ("pilot_n", "pilot_sd")
RANGE_KEYS = ("lower", "upper", "point")


@dataclass(frozen=True)
class Uncertain:
    """One planning value given as a distribution, at its dotted scenario key."""

    key: str
    kind: str  # "pilot" | "range" | "bootstrap"
    point: Any  # a number; for "bootstrap" the model table
    pilot_n: int | None = None
    pilot_sd: float | None = None
    lower: float | None = None
    upper: float | None = None

    def from_uniform(self, u: np.ndarray) -> np.ndarray:
        """The parameter at probability levels ``u`` in (0, 1) (its quantile function)."""
        if self.kind == "pilot":
            df = self.pilot_n - 1
            return self.pilot_sd * np.sqrt(df / stats.chi2.ppf(u, df))
        return self.lower + u * (self.upper - self.lower)

    def describe(self) -> str:
        if self.kind == "bootstrap":
            return (f"{self.key}: every parameter of the {self.point['model']} model refitted to {self.pilot_n} "
                    "values simulated from it (parametric bootstrap of a pilot fit)")
        if self.kind == "pilot":
            return (f"{self.key}: sigma^2 = {self.pilot_sd:g}^2 ({self.pilot_n} - 1) / chi2({self.pilot_n - 1}) "
                    f"(pilot of {self.pilot_n}, SD {self.pilot_sd:g})")
        return f"{self.key}: uniform on [{self.lower:g}, {self.upper:g}] (point value {self.point:g})"

    def to_dict(self) -> dict[str, Any]:
        d = {"key": self.key, "kind": self.kind, "point": self.point}
        if self.kind == "pilot":
            d.update(pilot_n=self.pilot_n, pilot_sd=self.pilot_sd)
        elif self.kind == "bootstrap":
            d.update(pilot_n=self.pilot_n)
        else:
            d.update(lower=self.lower, upper=self.upper)
        return d


def _is_spec(value: Any) -> bool:
    return isinstance(value, dict) and "model" not in value and bool(value) and (
        set(value) <= set(PILOT_KEYS) | set(RANGE_KEYS))


def _parse(c: Collector, key: str, leaf: str, spec: dict[str, Any]) -> Uncertain | None:
    if set(spec) & set(PILOT_KEYS):
        if set(spec) - set(PILOT_KEYS):
            c.add(key, "give either pilot_n and pilot_sd, or lower and upper (and point), not both")
            return None
        if leaf != "sd":
            c.add(key, f"pilot_n / pilot_sd describe a standard deviation (key sd), not {leaf}")
            return None
        m = c.number(f"{key}.pilot_n", spec.get("pilot_n"), low=3, high=10**7, integer=True)
        s = c.number(f"{key}.pilot_sd", spec.get("pilot_sd"), low=0, low_open=True)
        if m is None or s is None:
            return None
        return Uncertain(key, "pilot", float(s), pilot_n=int(m), pilot_sd=float(s))
    lo = c.number(f"{key}.lower", spec.get("lower"))
    hi = c.number(f"{key}.upper", spec.get("upper"))
    if lo is None or hi is None:
        return None
    if not lo < hi:
        c.add(f"{key}.upper", f"must be > lower ({lo:g}), got {hi:g}")
        return None
    point = (lo + hi) / 2
    if "point" in spec:
        p = c.number(f"{key}.point", spec["point"], low=lo, high=hi)
        if p is None:
            return None
        point = p
    return Uncertain(key, "range", float(point), lower=float(lo), upper=float(hi))


def _bootstrap(c: Collector, table: dict[str, Any], prefix: str, out: list[Uncertain]) -> dict[str, Any]:
    from simcheck.fit.candidates import REFIT

    point = {k: v for k, v in table.items() if k != "pilot_n"}
    m = c.number(f"{prefix}.pilot_n", table["pilot_n"], low=3, high=10**6, integer=True)
    if point.get("model") not in REFIT:
        c.add(f"{prefix}.pilot_n", f"a parametric bootstrap refits {', '.join(sorted(REFIT))} models only, "
                                   f"got model {point.get('model')!r}")
    elif any(_is_spec(v) for v in point.values()):
        c.add(f"{prefix}.pilot_n", "give either pilot_n for the whole model or distributions for single "
                                   "parameters, not both")
    elif m is not None:
        out.append(Uncertain(prefix, "bootstrap", point, pilot_n=int(m)))
    return point


def _walk(c: Collector, table: dict[str, Any], prefix: str, out: list[Uncertain]) -> dict[str, Any]:
    if "model" in table and "pilot_n" in table:
        return _bootstrap(c, table, prefix, out)
    result = {}
    for k, v in table.items():
        key = f"{prefix}.{k}"
        if _is_spec(v):
            u = _parse(c, key, k, v)
            if u is not None:
                out.append(u)
                result[k] = u.point
            else:
                result[k] = v
        elif isinstance(v, dict) and ("model" in v or k in ("a", "b")):
            result[k] = _walk(c, v, key, out)
        else:
            result[k] = v
    return result


def split(table: dict[str, Any], source: str | None = None) -> tuple[dict[str, Any], tuple[Uncertain, ...]]:
    """The scenario table at its point values, and the planning values given as distributions.

    Raises
    ------
    InputError
        Every malformed distribution table at once.
    """
    c = Collector()
    out: list[Uncertain] = []
    point = dict(table)
    data = table.get("data")
    if isinstance(data, dict):
        point["data"] = _walk(c, data, "data", out)
    c.raise_if_any(source)
    return point, tuple(out)


GROUPS = 10


def draw_values(specs: Sequence[Uncertain], draws: int, root: np.random.SeedSequence) -> list[dict[str, Any]]:
    """``draws`` sets of parameter values, each a dict dotted key -> value, from ``(STAGE_PLANNING, 0)``.

    Replicated Latin hypercube draws: the draws fall in :data:`GROUPS`
    independent groups (draw k is in group ``k % GROUPS``); within a group
    of size g, the j-th draw of each single parameter sits at a uniform level
    in ((p_j + U) / g) for a random permutation p, then goes through the
    parameter's quantile function. A whole model (``pilot_n`` in its table)
    is drawn by parametric bootstrap, independently per draw. Every draw is
    marginally from the parameters' law, so averages are unbiased; the
    groups are independent, so the spread of the group means gives an honest
    Monte Carlo SE (:func:`predictive_check`).

    References
    ----------
    McKay, M. D., Beckman, R. J. and Conover, W. J. (1979). A comparison of
    three methods for selecting values of input variables in the analysis of
    output from a computer code. Technometrics 21, 239-245.
    Efron, B. and Tibshirani, R. J. (1993). An Introduction to the Bootstrap,
    Chapman & Hall, ch. 6 (the parametric bootstrap).
    """
    gen = rngmod.generator(root, rngmod.STAGE_PLANNING, 0)
    group = np.arange(draws) % GROUPS
    out: list[dict[str, Any]] = [{} for _ in range(draws)]
    for s in specs:
        if s.kind == "bootstrap":
            for row, table in zip(out, bootstrap_tables(s, draws, gen)):
                row[s.key] = table
            continue
        u = np.empty(draws)
        for g in range(GROUPS):
            idx = np.flatnonzero(group == g)
            u[idx] = (gen.permutation(idx.size) + gen.random(idx.size)) / idx.size
        for row, v in zip(out, s.from_uniform(np.clip(u, 1e-12, 1 - 1e-12))):
            row[s.key] = float(v)
    return out


def bootstrap_tables(spec: Uncertain, draws: int, gen: np.random.Generator) -> list[dict[str, Any]]:
    """Model tables refitted to ``pilot_n`` values simulated from the point model, one per draw."""
    from simcheck.fit.candidates import REFIT
    from simcheck.models import make_model

    model = make_model(spec.point)
    sims = model.draw(gen, (draws, spec.pilot_n))
    refit = REFIT[spec.point["model"]]
    keep = {k: spec.point[k] for k in ("lower", "upper") if k in spec.point}
    return [{"model": spec.point["model"], **refit(x, **keep)} for x in sims]


def point_designs(point_table: dict[str, Any], specs: Sequence[Uncertain], values: Sequence[dict[str, Any]],
                  *, source: str | None = None, base_dir: str | None = None) -> list[Any]:
    """One validated Design per row of ``values`` (the parameters set at their keys)."""
    from simcheck.scenario import scenario_from_dict, set_dotted

    designs = []
    for row in values:
        t = point_table
        for key, v in row.items():
            t = set_dotted(t, key, v)
        designs.append(scenario_from_dict(t, source=source, base_dir=base_dir).design)
    return designs


@dataclass(frozen=True)
class PredictiveCheck:
    """Unconditional (predictive) coverage and assurance at one n: averages over parameter draws.

    ``exact_given_parameters`` is True when each draw's measures come from an
    exact law (then the only Monte Carlo error is that of the draws).
    """

    n: int
    draws: int
    replicates_per_draw: int
    coverage: float
    coverage_mcse: float
    miss_low: float
    miss_high: float
    assurance: float | None
    assurance_mcse: float | None
    margin_mean: float
    exact_given_parameters: bool

    def to_dict(self) -> dict[str, Any]:
        from simcheck.results import clean_json

        return clean_json(dict(self.__dict__))

    def to_frame(self):
        import pandas as pd

        return pd.DataFrame([self.to_dict()])


def _mean_se(x: np.ndarray) -> tuple[float, float]:
    """Mean of the per-draw values and its MCSE from the :data:`GROUPS` independent group means."""
    group = np.arange(x.size) % GROUPS
    means = np.array([x[group == g].mean() for g in range(min(GROUPS, x.size))])
    sizes = np.array([np.sum(group == g) for g in range(min(GROUPS, x.size))])
    mean = float(np.sum(means * sizes) / sizes.sum())
    se = float(means.std(ddof=1) / math.sqrt(means.size)) if means.size > 1 else math.nan
    return mean, se


def predictive_check(designs: Sequence[Any], n: int, *, replicates_per_draw: int,
                     root: np.random.SeedSequence, path: str = "auto") -> PredictiveCheck:
    """Average :func:`simcheck.engine.check` over the per-draw designs at ``n``.

    Draw k is evaluated on ``replicates_per_draw`` replicates from the child
    stream ``(STAGE_PLANNING, 1, k)`` of ``root`` (the same at every n).
    """
    from simcheck import engine

    rows = [engine.check(d, n, replicates=replicates_per_draw,
                         rng=rngmod.child(root, rngmod.STAGE_PLANNING, 1, k), path=path)
            for k, d in enumerate(designs)]
    cov, cov_se = _mean_se(np.array([r.coverage for r in rows]))
    ass = se = None
    if all(r.assurance is not None for r in rows):
        ass, se = _mean_se(np.array([r.assurance for r in rows]))
    return PredictiveCheck(
        n=int(n), draws=len(rows), replicates_per_draw=int(replicates_per_draw),
        coverage=cov, coverage_mcse=cov_se,
        miss_low=float(np.mean([r.miss_low for r in rows])),
        miss_high=float(np.mean([r.miss_high for r in rows])),
        assurance=ass, assurance_mcse=se,
        margin_mean=float(np.mean([r.margin_mean for r in rows])),
        exact_given_parameters=all(r.exact for r in rows),
    )
