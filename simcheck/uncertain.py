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
    kind: str  # "pilot" | "range"
    point: float
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
        if self.kind == "pilot":
            return (f"{self.key}: sigma^2 = {self.pilot_sd:g}^2 ({self.pilot_n} - 1) / chi2({self.pilot_n - 1}) "
                    f"(pilot of {self.pilot_n}, SD {self.pilot_sd:g})")
        return f"{self.key}: uniform on [{self.lower:g}, {self.upper:g}] (point value {self.point:g})"

    def to_dict(self) -> dict[str, Any]:
        d = {"key": self.key, "kind": self.kind, "point": self.point}
        if self.kind == "pilot":
            d.update(pilot_n=self.pilot_n, pilot_sd=self.pilot_sd)
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


def _walk(c: Collector, table: dict[str, Any], prefix: str, out: list[Uncertain]) -> dict[str, Any]:
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


def draw_values(specs: Sequence[Uncertain], draws: int, root: np.random.SeedSequence) -> np.ndarray:
    """(draws, len(specs)) parameter values from the stream ``(STAGE_PLANNING, 0)``.

    Replicated Latin hypercube draws: the draws fall in :data:`GROUPS`
    independent groups (draw k is in group ``k % GROUPS``); within a group
    of size g, the j-th draw of each parameter sits at a uniform level in
    ((p_j + U) / g) for a random permutation p, then goes through the
    parameter's quantile function. Every draw is marginally from the
    parameter's law, so averages are unbiased; the groups are independent,
    so the spread of the group means gives an honest Monte Carlo SE
    (:func:`predictive_check`), much smaller than with independent draws.

    References
    ----------
    McKay, M. D., Beckman, R. J. and Conover, W. J. (1979). A comparison of
    three methods for selecting values of input variables in the analysis of
    output from a computer code. Technometrics 21, 239-245.
    Iman, R. L. (1981). Statistical methods for including uncertainties
    associated with the geologic isolation of radioactive waste which allow
    for a comparison with licensing criteria. In Proceedings of the
    Symposium on Uncertainties Associated with the Regulation of the
    Geologic Disposal of High-Level Radioactive Waste (replicated Latin
    hypercube sampling).
    """
    gen = rngmod.generator(root, rngmod.STAGE_PLANNING, 0)
    group = np.arange(draws) % GROUPS
    out = np.empty((draws, len(specs)))
    for i, s in enumerate(specs):
        u = np.empty(draws)
        for g in range(GROUPS):
            idx = np.flatnonzero(group == g)
            u[idx] = (gen.permutation(idx.size) + gen.random(idx.size)) / idx.size
        out[:, i] = s.from_uniform(np.clip(u, 1e-12, 1 - 1e-12))
    return out


def point_designs(point_table: dict[str, Any], specs: Sequence[Uncertain], values: np.ndarray,
                  *, source: str | None = None, base_dir: str | None = None) -> list[Any]:
    """One validated Design per row of ``values`` (the parameters set at their keys)."""
    from simcheck.scenario import scenario_from_dict, set_dotted

    designs = []
    for row in values:
        t = point_table
        for s, v in zip(specs, row):
            t = set_dotted(t, s.key, float(v))
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
