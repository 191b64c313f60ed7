"""One-sided confidence limits, and the target figures every row carries.

A one-sided limit at level 1 - alpha of an equal-tailed method is the
matching limit of its two-sided interval at level 1 - 2 alpha (t, z, Wilson,
Jeffreys, Clopper-Pearson, Agresti-Coull, Welch, Newcombe, the bootstrap
percentile, BCa and bootstrap-t limits, ...). The engine therefore evaluates
a one-sided design through the two-sided machinery, unchanged and exact where
it is exact, and reads the measures of one side:

* coverage = share of limits on the right side of the true value, i.e. the
  two-sided coverage plus the misses on the side that cannot miss;
* the achieved margin is the distance from the point estimate to the limit.
  For symmetric methods (estimate ± half-width) that is the two-sided
  half-width, so nothing else changes. Other methods are evaluated through a
  *reflected* interval ``(2 e - U, U)`` (upper) or ``(L, 2 e - L)`` (lower)
  around the point estimate ``e``, whose half-width is exactly ``U - e`` or
  ``e - L`` and whose miss on the bound's side is the limit's miss; the miss
  on the other side is then added back to the coverage.

Point estimates: the sample mean (summary, bootstrap kinds), x / n
(counts), the difference of the two (two-sample kinds) and, for methods on
the logs of lognormal data, exp(ȳ + s²/2). Methods that exist only as a
one-sided limit (``Method.bounds == ("upper",)``) are called at the
one-sided level 1 - alpha itself.

:func:`finish_rows` then adds to every row what the target asks for:
``margin_at_assurance`` (the assurance quantile of the achieved margin),
the achieved margin relative to the true value when the target is a
relative margin, and the probability of passing a demonstration plan.

References
----------
.. [1] Brown, L. D., Cai, T. T. & DasGupta, A. (2001). Interval estimation
   for a binomial proportion. Statistical Science 16, 101-133 (one-sided
   limits as the limits of equal-tailed intervals, sec. 4.1).
.. [2] Morris, T. P., White, I. R. & Crowther, M. J. (2019). Using simulation
   studies to evaluate statistical methods. Statistics in Medicine 38,
   2074-2102 (Monte Carlo standard errors).
"""

from __future__ import annotations

import copy
from dataclasses import replace
from typing import Callable, Sequence

import numpy as np

from simcheck.design import Design
from simcheck.engine.measures import quantiles_with_mcse, share_mcse
from simcheck.errors import InputError
from simcheck.intervals.base import DERIVED, Method, get_method
from simcheck.results import CheckResult

__all__ = ["evaluation_design", "one_sided_rows", "finish_rows", "evaluation_confidence", "margin_quantile"]

#: kinds whose point estimate the reflected interval can form
_REFLECTABLE = ("summary", "log", "summary2", "count", "count2", "sample", "sample2")


def evaluation_confidence(method: Method, confidence: float, bound: str) -> float:
    """The level at which to call ``method`` for a limit at ``confidence``."""
    if bound == "two-sided" or method.one_sided_only:
        return confidence
    return 2.0 * confidence - 1.0


def evaluation_design(design: Design, simple_kind: bool) -> Design:
    """The two-sided design whose evaluation gives the one-sided measures."""
    if getattr(design, "strata", None) is not None:
        # stratified intervals are estimate ± t (or z) SE, unclipped: symmetric
        if design.confidence <= 0.5:
            raise InputError("target.confidence", f"a one-sided limit needs confidence > 0.5, got {design.confidence:g}")
        return replace(design, confidence=2.0 * design.confidence - 1.0, bound="two-sided", limit=None, events_allowed=None)
    method = get_method(design.estimand, design.method)
    if design.confidence <= 0.5 and not method.one_sided_only:
        raise InputError("target.confidence", f"a one-sided limit needs confidence > 0.5, got {design.confidence:g}")
    conf = evaluation_confidence(method, design.confidence, design.bound)
    name = design.method
    if not method.symmetric:
        if not simple_kind or method.kind not in _REFLECTABLE:
            raise InputError("target.bound", f"a one-sided limit with {design.method!r} is available for simple random "
                             "samples only; use a symmetric method such as t or cluster-t")
        name = reflected(method, design.bound).name
    return replace(design, method=name, confidence=conf, bound="two-sided", limit=None, events_allowed=None)


def reflected(method: Method, bound: str) -> Method:
    """``method`` seen as the interval reflected about the point estimate (cached)."""
    name = f"{method.name}|{bound}"
    key = (method.estimand, name)
    if key not in DERIVED:
        DERIVED[key] = replace(method, name=name, func=_reflect(method, bound), centre_half=None, bounds=("two-sided",))
    return DERIVED[key]


def _reflect(method: Method, bound: str) -> Callable:
    f, kind = method.func, method.kind

    def out(lo, hi, e):
        lo, hi, e = np.asarray(lo, float), np.asarray(hi, float), np.asarray(e, float)
        if bound == "upper":
            return 2.0 * e - hi, hi
        return lo, 2.0 * e - lo

    if kind in ("summary", "log"):
        def g(s, confidence):
            lo, hi = f(s, confidence)
            e = s.mean if kind == "summary" else np.exp(s.mean + 0.5 * np.maximum(s.var, 0.0))
            return out(lo, hi, e)
    elif kind == "summary2":
        def g(a, b, confidence):
            lo, hi = f(a, b, confidence)
            return out(lo, hi, np.asarray(a.mean) - np.asarray(b.mean))
    elif kind == "count":
        def g(x, n, confidence):
            lo, hi = f(x, n, confidence)
            return out(lo, hi, np.asarray(x, float) / np.asarray(n, float))
    elif kind == "count2":
        def g(xa, na, xb, nb, confidence):
            lo, hi = f(xa, na, xb, nb, confidence)
            return out(lo, hi, np.asarray(xa, float) / np.asarray(na, float) - np.asarray(xb, float) / np.asarray(nb, float))
    elif kind == "sample":
        def g(x, confidence, **kw):
            e = x.mean(axis=-1)  # before the method: it may reuse the buffer
            lo, hi, deg = f(x, confidence, **kw)
            lo, hi = out(lo, hi, e.reshape(np.shape(hi)))
            return lo, hi, deg
    else:  # sample2
        def g(xa, xb, confidence, **kw):
            e = xa.mean(axis=-1) - xb.mean(axis=-1)
            lo, hi, deg = f(xa, xb, confidence, **kw)
            lo, hi = out(lo, hi, e.reshape(np.shape(hi)))
            return lo, hi, deg
    return g


def one_sided_rows(design: Design, rows: Sequence[CheckResult]) -> list[CheckResult]:
    """Rows of the evaluation design, read as the one-sided limit of ``design``."""
    out = []
    for r in rows:
        if design.bound == "upper":
            cov, low, high = r.coverage + r.miss_high, r.miss_low, 0.0
        else:
            cov, low, high = r.coverage + r.miss_low, 0.0, r.miss_high
        cov = min(1.0, cov)
        kw = {}
        if r.path == "exact-binomial" and r.degenerate_share:
            kw = _zero_margin_covering(design, r)
        out.append(replace(
            r, coverage=cov, miss_low=low, miss_high=high, method=design.method, confidence=design.confidence,
            coverage_mcse=0.0 if r.exact else share_mcse(cov, r.replicates), **kw,
        ))
    return out


def _zero_margin_covering(design: Design, r: CheckResult) -> dict:
    """Take back the outcomes whose one-sided limit equals the estimate *and* covers.

    The engine's measures count a zero-width interval that misses the true
    value as degenerate and never within the margin. A reflected interval of
    zero width "misses" on its artificial side when the limit itself covers
    (a lower limit 0 at x = 0, an upper limit 1 at x = n): such a limit is
    exact, not degenerate, and meets any margin. Limits equal to the estimate
    occur at the edges of the count space, so the edge outcomes are
    enumerated here (x = 0 and n; the four corners for two proportions).
    """
    from scipy import stats

    m = get_method(design.estimand, design.method)
    conf = evaluation_confidence(m, design.confidence, design.bound)
    n, truth = r.n, r.true_value
    if design.estimand == "proportion":
        p = design.model.bernoulli_p()
        xs = np.array([0, n], dtype=float) if n > 0 else np.array([0.0])
        lo, hi = m.func(xs, np.full(xs.shape, float(n)), conf)
        e, w = xs / n, stats.binom.pmf(xs, n, p)
    else:
        nb = design.n_b(n)
        pa, pb = design.model.bernoulli_p(), design.model_b.bernoulli_p()
        xa = np.array([0, 0, n, n], dtype=float)
        xb = np.array([0, nb, 0, nb], dtype=float)
        lo, hi = m.func(xa, np.full(4, float(n)), xb, np.full(4, float(nb)), conf)
        e = xa / n - xb / nb
        w = stats.binom.pmf(xa, n, pa) * stats.binom.pmf(xb, nb, pb)
    lim = np.asarray(hi if design.bound == "upper" else lo, dtype=float)
    covers = lim >= truth if design.bound == "upper" else lim <= truth
    gone = float(w[(np.abs(lim - e) <= 1e-15) & covers & (e != truth)].sum())
    if gone <= 0:
        return {}
    deg = max(0.0, r.degenerate_share - gone)
    notes = tuple(t for t in r.notes if "zero-width (degenerate)" not in t)
    if deg > 0:
        notes += (f"probability {deg:.4g} of a zero-width (degenerate) limit that misses, which never counts as "
                  "meeting the margin",)
    out = {"degenerate_share": deg, "notes": notes}
    if r.assurance is not None:
        out["assurance"] = min(1.0, r.assurance + gone)
    return out


def margin_quantile(values, weights, q: float) -> float | None:
    """The q quantile of the achieved margin: exact support points with weights
    (smallest value whose cumulative probability reaches q), or simulated
    values (the inverse empirical CDF, as for the median)."""
    if values is None or len(values) == 0:
        return None
    v = np.asarray(values, dtype=float)
    if weights is None:
        # the engine's one quantile definition (inverse empirical CDF)
        return float(quantiles_with_mcse(v[:, None], (q,))[0][0, 0])
    w = np.asarray(weights, dtype=float)
    order = np.argsort(v, kind="stable")
    v, w = v[order], w[order]
    cum = np.cumsum(w) / w.sum()
    i = int(np.searchsorted(cum, q - 1e-12, side="left"))
    return float(v[min(i, len(v) - 1)])


def finish_rows(design: Design, rows: Sequence[CheckResult]) -> list[CheckResult]:
    """Add bound, margin at assurance, relative margins and plan figures to each row."""
    out = []
    plan_n = None
    if design.limit is not None:
        from simcheck.formulas import demonstration_plan

        plan_n = demonstration_plan(design.limit, int(design.events_allowed or 0), confidence=design.confidence).n
    for r in rows:
        kw: dict = {"bound": design.bound, "units": design.units}
        maa = r.margin_at_assurance
        if maa is None and not r.exact and design.assurance in (0.5, 0.9):
            # simulated rows: the same quantile of the same kept half-widths
            maa = r.margin_median if design.assurance == 0.5 else r.margin_p90
        if maa is None:
            maa = margin_quantile(r.margin_values, r.margin_weights, design.assurance)
        kw["margin_at_assurance"] = maa
        kw["assurance_level"] = design.assurance
        if design.relative_margin is not None and r.true_value != 0:
            t = abs(r.true_value)
            kw.update(
                target_relative_margin=design.relative_margin,
                relative_margin_mean=r.margin_mean / t,
                relative_margin_median=r.margin_median / t,
                relative_margin_p90=r.margin_p90 / t,
                relative_margin_at_assurance=None if maa is None else maa / t,
            )
        if design.limit is not None:
            kw.update(limit=design.limit, events_allowed=int(design.events_allowed or 0), plan_n=plan_n)
            p = design.model.bernoulli_p()
            if p is not None:
                from simcheck.formulas import pass_probability

                kw["pass_probability"] = pass_probability(r.n, int(design.events_allowed or 0), p)
        out.append(_with(r, kw))
    return out


def _with(r: CheckResult, kw: dict) -> CheckResult:
    """``replace(r, **kw)`` for fields that need no validation, without re-running
    ``__init__`` (a curve has hundreds of rows; the copy is new, so nothing shared changes)."""
    new = copy.copy(r)
    for k, v in kw.items():
        object.__setattr__(new, k, v)
    return new
