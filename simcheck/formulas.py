"""Closed-form sample sizes for a target confidence-interval half-width.

These are the textbook margin-of-error formulas that simcheck checks by
simulation: they assume a normal sampling distribution, a known (planning)
standard deviation or proportion and independent observations, corrected for
a finite population and for clustering by a design effect. The result is the
baseline that :mod:`simcheck.search` starts from and compares against.

Order of the corrections (one-sample): the simple-random-sampling size
``n0 = m^2 V / B^2`` (``m`` the z or t multiple, ``V`` the unit variance) is
multiplied by the design effect, then reduced by the finite population
correction (:func:`fpc_n`: ``n0 / (1 + n0 / N)`` for a mean planned with
Cochran's S, ``n0 / (1 + (n0 - 1) / N)`` for a proportion), then rounded up.

Two-sample estimands (difference a - b) allocate ``n_b = ceil(ratio * n_a)``
with ``n_a = m^2 deff (V_a + V_b / ratio) / B^2``. With ``multiplier="t"`` a
difference of means iterates on the Welch--Satterthwaite degrees of freedom
computed from the planning SDs and the rounded group sizes; one-sample ``t``
iterates on ``n - 1`` degrees of freedom (also when clustered: the formula
does not switch to cluster degrees of freedom).

This module depends only on numpy, scipy and :mod:`simcheck.errors`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, replace
from typing import Any, Callable

import numpy as np

from simcheck.errors import Collector, InputError

__all__ = [
    "ESTIMANDS",
    "TWO_SAMPLE",
    "ESTIMAND_FORMULAS",
    "EstimandFormula",
    "FormulaResult",
    "sample_size",
    "total_sample_size",
    "finite_clusters",
    "ceil_robust",
    "z_value",
    "t_value",
    "design_effect_from_icc",
    "fpc_n",
    "fpc_variance_factor",
    "FPC_UNIT_VARIANCE",
    "welch_df",
    "BOUNDS",
    "multiplier_confidence",
    "relative_sample_size",
    "PlanResult",
    "demonstration_plan",
    "pass_probability",
]

MULTIPLIERS = ("z", "t")

#: Largest n the formulas report; beyond it the inputs are almost surely a unit mistake.
N_LIMIT = 1e15


# ---------------------------------------------------------------------------
# small pure helpers


def ceil_robust(x: Any, rel: float = 1e-9) -> Any:
    """Round up, treating values within ``rel`` (relative) of an integer as that integer.

    Floating-point arithmetic turns an exact 100 into 100.0000000001 now and
    then; a plain ``ceil`` would then ask for one unit too many. Values
    further than ``rel * max(1, |x|)`` from the nearest integer are rounded up.

    Parameters
    ----------
    x : float or array_like
        Finite value(s).
    rel : float
        Relative tolerance, >= 0.

    Returns
    -------
    int or numpy.ndarray of int64
        A Python int for a scalar input, an int64 array otherwise.

    Examples
    --------
    >>> ceil_robust(100.0000000001), ceil_robust(384.15), ceil_robust(99.9999999999)
    (100, 385, 100)
    """
    if not (rel >= 0 and math.isfinite(rel)):
        raise ValueError(f"rel must be a finite number >= 0, got {rel!r}")
    arr = np.asarray(x, dtype=float)
    if not np.all(np.isfinite(arr)):
        raise ValueError(f"ceil_robust needs finite values, got {x!r}")
    nearest = np.round(arr)
    close = np.abs(arr - nearest) <= rel * np.maximum(1.0, np.abs(arr))
    out = np.where(close, nearest, np.ceil(arr))
    if out.ndim == 0:
        return int(out)
    return out.astype(np.int64)


def _stats():
    """scipy.stats, imported on first use: it is slow to import and the command line
    builds every sub-command's parser (importing this module) on each start."""
    from scipy import stats

    return stats


def _check_confidence(confidence: float) -> float:
    c = Collector()
    v = c.number("confidence", confidence, low=0, high=1, low_open=True, high_open=True)
    c.raise_if_any()
    return float(v)


def z_value(confidence: float) -> float:
    """Two-sided standard normal multiple: the ``(1 + confidence) / 2`` quantile.

    Computed as the upper ``(1 - confidence) / 2`` tail point so that levels
    close to 1 keep their precision.
    """
    c = _check_confidence(confidence)
    return float(_stats().norm.isf((1.0 - c) / 2.0))


def t_value(confidence: float, df: float) -> float:
    """Two-sided Student t multiple with ``df`` degrees of freedom (df > 0, may be fractional)."""
    c = _check_confidence(confidence)
    col = Collector()
    d = col.number("df", df, low=0, low_open=True)
    col.raise_if_any()
    return float(_stats().t.isf((1.0 - c) / 2.0, d))


def design_effect_from_icc(icc: float, m: float, cv: float = 0.0) -> float:
    """Design effect of cluster sampling from the intracluster correlation.

    ``1 + ((cv^2 + 1) m - 1) icc``; with ``cv = 0`` (equal cluster sizes) this is
    Kish's ``1 + (m - 1) icc``.

    Parameters
    ----------
    icc : float
        Intracluster correlation, in [0, 1).
    m : float
        (Mean) cluster size, >= 1.
    cv : float
        Coefficient of variation of the cluster sizes, SD computed with
        divisor k (the number of clusters), >= 0.

    References
    ----------
    .. [1] Kish, L. (1965). *Survey Sampling*. Wiley, New York.
    .. [2] Eldridge, S. M., Ashby, D. and Kerry, S. (2006). Sample size for
       cluster randomized trials: effect of coefficient of variation of
       cluster size and analysis method. *International Journal of
       Epidemiology* 35, 1292-1300.
    """
    c = Collector()
    r = c.number("icc", icc, low=0, high=1, high_open=True)
    mm = c.number("cluster_size", m, low=1)
    v = c.number("cluster_size_cv", cv, low=0)
    c.raise_if_any()
    return 1.0 + ((v * v + 1.0) * mm - 1.0) * r


#: unit variance each one-sample estimand plans with: a mean's planning SD is
#: Cochran's S (divisor N - 1), a proportion's planning variance is P Q (divisor N)
FPC_UNIT_VARIANCE = {"mean": "S2", "proportion": "PQ"}


def fpc_variance_factor(n: Any, N: float, unit_variance: str = "S2") -> Any:
    """Factor by which sampling n of N units without replacement multiplies a variance.

    The one finite population correction of simcheck; the closed-form n, the
    engine and the exact enumeration all use it. Which form applies depends on
    the unit variance the factor multiplies:

    ``"S2"``: ``1 - n / N``
        for Cochran's S^2 (divisor N - 1), under which Var(sample mean) =
        (1 - n/N) S^2 / n exactly ([1]_, section 2.5). Used for the planning SD
        of a mean, and for every interval, whose variance is estimated from
        the sample: s^2 estimates S^2 without bias, and for a proportion the
        unbiased estimate is (1 - n/N) p q / (n - 1) ([1]_, section 3.2), so
        an interval's own variance estimate is multiplied by 1 - n/N.
    ``"PQ"``: ``(N - n) / (N - 1)``
        for the variance P Q (divisor N) of a planning proportion, under
        which Var(p) = (N - n)/(N - 1) P Q / n exactly ([1]_, section 3.2).

    Both are the same law: P Q = S^2 (N - 1) / N for 0/1 values. Accepts
    arrays for ``n``; values of n above N give 0.

    References
    ----------
    .. [1] Cochran, W. G. (1977). *Sampling Techniques*, 3rd ed. Wiley, New
       York; section 2.5 (variance of the mean), section 3.2 (variance of a
       proportion and its estimate). Section numbers from memory.
    """
    if unit_variance not in ("S2", "PQ"):
        raise InputError("unit_variance", f"must be 'S2' or 'PQ', got {unit_variance!r}")
    Nf = float(N)
    na = np.asarray(n, dtype=float)
    if unit_variance == "S2":
        out = 1.0 - na / Nf
    else:
        out = (Nf - na) / (Nf - 1.0)
    out = np.maximum(out, 0.0)
    return float(out) if out.ndim == 0 else out


def fpc_n(n0: Any, N: float, unit_variance: str = "PQ") -> Any:
    """Finite population correction of a sample size, solving ``n = n0 * factor(n)``.

    With :func:`fpc_variance_factor`: ``"PQ"`` (a planning proportion) gives
    ``n0 / (1 + (n0 - 1) / N)`` ([1]_, section 4.4); ``"S2"`` (a planning SD
    of a mean) gives ``n0 / (1 + n0 / N)`` ([1]_, section 4.6). Accepts
    arrays for ``n0``.

    References
    ----------
    .. [1] Cochran, W. G. (1977). *Sampling Techniques*, 3rd ed. Wiley, New
       York; section 4.4 (n for proportions), section 4.6 (n for continuous
       data). Section numbers from memory.
    """
    if not (isinstance(N, (int, float, np.integer, np.floating)) and not isinstance(N, bool)):
        raise InputError("population_size", f"must be a number, got {N!r}")
    if not (math.isfinite(float(N)) and N >= 1):
        raise InputError("population_size", f"must be a finite number >= 1, got {N!r}")
    if unit_variance not in ("S2", "PQ"):
        raise InputError("unit_variance", f"must be 'S2' or 'PQ', got {unit_variance!r}")
    n0a = np.asarray(n0, dtype=float)
    if unit_variance == "S2":
        out = n0a / (1.0 + n0a / float(N))
    else:
        out = n0a / (1.0 + (n0a - 1.0) / float(N))
    return float(out) if out.ndim == 0 else out


def welch_df(var_a: float, n_a: float, var_b: float, n_b: float) -> float:
    """Welch--Satterthwaite degrees of freedom for ``var_a / n_a + var_b / n_b``.

    References
    ----------
    .. [1] Welch, B. L. (1947). The generalization of "Student's" problem when
       several different population variances are involved. *Biometrika* 34, 28-35.
    .. [2] Satterthwaite, F. E. (1946). An approximate distribution of estimates
       of variance components. *Biometrics Bulletin* 2, 110-114.
    """
    a = var_a / n_a
    b = var_b / n_b
    return (a + b) ** 2 / (a * a / (n_a - 1) + b * b / (n_b - 1))


# ---------------------------------------------------------------------------
# the result


@dataclass(frozen=True)
class FormulaResult:
    """A closed-form sample size and how it was obtained.

    ``n`` is the size of the one sample, or of group a for a two-sample
    estimand (then ``n_b = ceil(ratio * n)``). ``n_unrounded`` is the value
    before rounding up (for ``t``, at the final degrees of freedom).
    ``multiplier`` is the z or t value used; ``multiplier_kind`` says which.
    ``clusters`` (and ``clusters_b``) are ``ceil(n / cluster_size)`` when a
    cluster size is known, else None.
    """

    estimand: str
    n: int
    n_b: int | None
    n_unrounded: float
    multiplier: float
    multiplier_kind: str
    design_effect: float
    clusters: int | None
    clusters_b: int | None
    confidence: float
    margin: float
    ratio: float | None
    df: float | None
    iterations: int | None
    n_before_fpc: float | None
    population_size: int | None
    cluster_size: float | None
    sd: float | None
    sd_b: float | None
    p: float | None
    p_b: float | None
    assumptions: tuple[str, ...]
    formula: str
    dropout: float = 0.0
    bound: str = "two-sided"
    relative_margin: float | None = None
    cv: float | None = None

    @property
    def n_total(self) -> int:
        return self.n + (self.n_b or 0)

    @property
    def n_enrolled(self) -> int:
        """n to enrol so that n remain after the dropout share is lost (n itself without dropout)."""
        return enrolled_n(self.n, self.dropout)

    @property
    def n_b_enrolled(self) -> int | None:
        return None if self.n_b is None else enrolled_n(self.n_b, self.dropout)

    def to_dict(self) -> dict[str, Any]:
        """The JSON object of ``simcheck formula --json`` (contract keys first)."""
        d = {
            "n": self.n,
            "n_b": self.n_b,
            "n_total": self.n_total,
            "n_unrounded": self.n_unrounded,
            "multiplier": self.multiplier,
            "design_effect": self.design_effect,
            "clusters": self.clusters,
            "estimand": self.estimand,
            "confidence": self.confidence,
            "margin": self.margin,
            "multiplier_kind": self.multiplier_kind,
            "df": self.df,
            "iterations": self.iterations,
            "ratio": self.ratio,
            "clusters_b": self.clusters_b,
            "clusters_total": None if self.clusters is None else self.clusters + (self.clusters_b or 0),
            "cluster_size": self.cluster_size,
            "population_size": self.population_size,
            "n_before_fpc": self.n_before_fpc,
            "sd": self.sd,
            "sd_b": self.sd_b,
            "p": self.p,
            "p_b": self.p_b,
            "assumptions": list(self.assumptions),
            "formula": self.formula,
            "dropout": self.dropout,
            "n_enrolled": self.n_enrolled,
            "n_b_enrolled": self.n_b_enrolled,
            "n_total_enrolled": self.n_enrolled + (self.n_b_enrolled or 0),
            "bound": self.bound,
        }
        if self.relative_margin is not None:
            d["relative_margin"] = self.relative_margin
            d["cv"] = self.cv
        # JSON-safe without importing simcheck.results: non-finite floats become None
        return {k: (None if isinstance(x, float) and not math.isfinite(x) else x) for k, x in d.items()}

    def to_frame(self):
        """One-row pandas DataFrame of :meth:`to_dict` (assumptions joined by " | ")."""
        import pandas as pd

        d = self.to_dict()
        d["assumptions"] = " | ".join(d["assumptions"])
        return pd.DataFrame([d])


# ---------------------------------------------------------------------------
# validation


def _opt(c: Collector, field: str, value: Any, **kw) -> Any:
    """Check an optional number; None stays None."""
    if value is None:
        return None
    return c.number(field, value, **kw)


def _proportion(c: Collector, field: str, value: Any) -> float | None:
    if value is None:
        return None
    if isinstance(value, bool) or not isinstance(value, (int, float, np.integer, np.floating)):
        c.add(field, f"must be a number, got {value!r}")
        return None
    v = float(value)
    if math.isfinite(v) and v in (0.0, 1.0):
        c.add(
            field,
            f"a proportion of {v:g} has no sampling variance; give the value you expect, e.g. "
            f"{'0.01' if v == 0.0 else '0.99'}",
        )
        return None
    return c.number(field, value, low=0, high=1, low_open=True, high_open=True)


def _fields(c: Collector) -> set[str]:
    """The fields that already have a problem (a follow-up message would repeat it)."""
    return {pr.field for pr in c.problems}


def _check_estimand(c: Collector, estimand: Any) -> str | None:
    if estimand is None:
        c.add("--estimand", f"is required: one of {', '.join(ESTIMANDS)}")
    elif estimand not in ESTIMANDS:
        c.add("--estimand", f"must be one of {', '.join(ESTIMANDS)}, got {estimand!r}")
        return None
    return estimand


def _check_margin(c: Collector, margin: Any, is_prop: bool) -> float | None:
    if margin is None:
        c.add("--margin", "is required: the target half-width of the interval, > 0")
        return None
    margin = c.number("--margin", margin, low=0, low_open=True)
    if margin is not None and is_prop and margin >= 1:
        c.add("--margin", f"must be < 1 for a proportion (0.05 means 5 percentage points), got {margin!r}")
        return None
    return margin


def _check_multiplier(c: Collector, multiplier: Any, is_prop: bool) -> str | None:
    if multiplier not in MULTIPLIERS:
        c.add("--multiplier", f"must be z or t, got {multiplier!r}")
        return None
    if multiplier == "t" and is_prop:
        c.add("--multiplier", "t applies to means only; proportions use z")
    return multiplier


def _check_numbers(c: Collector, sd, sd_b, p, p_b, population_size, design_effect, icc, cluster_size,
                   cluster_size_cv, ratio) -> dict[str, Any]:
    """Each optional number on its own (ranges only; combinations come after)."""
    return dict(
        sd=_opt(c, "--sd", sd, low=0, low_open=True),
        sd_b=_opt(c, "--sd-b", sd_b, low=0, low_open=True),
        p=_proportion(c, "--p", p),
        p_b=_proportion(c, "--p-b", p_b),
        population_size=_opt(c, "--population-size", population_size, low=2, integer=True),
        design_effect=_opt(c, "--design-effect", design_effect, low=0, low_open=True),
        icc=_opt(c, "--icc", icc, low=0, high=1, high_open=True),
        cluster_size=_opt(c, "--cluster-size", cluster_size, low=1),
        cluster_size_cv=_opt(c, "--cluster-size-cv", cluster_size_cv, low=0),
        ratio=_opt(c, "--ratio", ratio, low=0, low_open=True),
    )


def _refuse_values(c: Collector, estimand: str, v: dict[str, Any], keys: tuple[str, str],
                   instead: tuple[str, str]) -> None:
    """The planning values ``keys`` (group a, b) that do not apply, naming the options to give ``instead``."""
    two = estimand in TWO_SAMPLE
    for key, give in zip(keys, (instead[0], instead[1] if two else instead[0])):
        if v[key] is not None:
            c.add("--" + key.replace("_", "-"), f"does not apply to a {estimand} estimand (give {give})")


def _check_mean_values(c: Collector, estimand: str, v: dict[str, Any]) -> None:
    """mean, mean-diff: planned by SDs (required), not by proportions."""
    _refuse_values(c, estimand, v, ("p", "p_b"), ("--sd", "--sd-b"))
    if v["sd"] is None and "--sd" not in _fields(c):
        c.add("--sd", f"is required for a {estimand} estimand: the planning standard deviation")
    if estimand not in TWO_SAMPLE and v["sd_b"] is not None:
        c.add("--sd-b", "applies to two-sample estimands only (mean-diff)")


def _check_proportion_values(c: Collector, estimand: str, v: dict[str, Any]) -> None:
    """proportion, proportion-diff: planned by proportions (default 0.5), not by SDs."""
    _refuse_values(c, estimand, v, ("sd", "sd_b"), ("--p", "--p-b"))
    if estimand not in TWO_SAMPLE and v["p_b"] is not None:
        c.add("--p-b", "applies to two-sample estimands only (proportion-diff)")


def _check_groups(c: Collector, two: bool, v: dict[str, Any]) -> None:
    """Options that belong to one sample or to two."""
    if not two and v["ratio"] is not None and v["ratio"] != 1.0:
        c.add("--ratio", "applies to two-sample estimands only (mean-diff, proportion-diff)")
    if two and v["population_size"] is not None:
        c.add("--population-size", "applies to one-sample estimands only (mean, proportion)")


def _check_clusters(c: Collector, v: dict[str, Any]) -> None:
    """The design effect comes either directly or from the ICC with a cluster size."""
    icc, m, deff = v["icc"], v["cluster_size"], v["design_effect"]
    if deff is not None and icc is not None:
        c.add("--design-effect", "give either --design-effect or --icc with --cluster-size, not both")
    if icc is not None and m is None and "--cluster-size" not in _fields(c):
        c.add("--icc", "needs --cluster-size (the mean number of observations per cluster)")
    if v["cluster_size_cv"] is not None and icc is None and "--icc" not in _fields(c):
        c.add("--cluster-size-cv", "needs --icc and --cluster-size (it enters the design effect through the ICC)")
    if m is not None and icc is None and deff is None and not {"--icc", "--design-effect"} & _fields(c):
        c.add("--cluster-size", "needs --icc (or --design-effect) to say how alike observations in a cluster are")


def _validate(
    estimand, margin, confidence, sd, sd_b, p, p_b, multiplier, population_size,
    design_effect, icc, cluster_size, cluster_size_cv, ratio,
) -> dict[str, Any]:
    """All problems with the inputs of :func:`sample_size` at once; the checked values by name."""
    c = Collector()
    estimand = _check_estimand(c, estimand)
    entry = ESTIMAND_FORMULAS.get(estimand) if estimand is not None else None
    is_prop = entry is not None and entry.proportion
    v = dict(estimand=estimand, margin=_check_margin(c, margin, is_prop))
    v["confidence"] = c.number("--confidence", confidence, low=0, high=1, low_open=True, high_open=True)
    v["multiplier"] = _check_multiplier(c, multiplier, is_prop)
    v.update(_check_numbers(c, sd, sd_b, p, p_b, population_size, design_effect, icc, cluster_size,
                            cluster_size_cv, ratio))
    # combinations (only when the estimand is known)
    if entry is not None:
        entry.check(c, estimand, v)
        _check_groups(c, entry.two_sample, v)
    _check_clusters(c, v)
    c.raise_if_any()
    return v


# ---------------------------------------------------------------------------
# the computation


def _g(x: float) -> str:
    """Short number text for formulas."""
    return f"{x:.6g}"


def _too_large(value: float) -> None:
    if not math.isfinite(value) or value > N_LIMIT:
        raise InputError(
            "--margin",
            f"gives n = {value:.3g}, too large to be a sample size; check the units of --margin and --sd",
        )


def _iterate(
    needed: Callable[[int], float], start: int, lo: int, n_min: int, n_max: int | None = None
) -> tuple[int, float, int]:
    """Smallest n >= n_min with ceil_robust(needed(n)) <= n, for ``needed`` non-increasing in n.

    ``needed(n)`` is the unrounded n the formula asks for when the multiple is
    evaluated at the degrees of freedom of n. First the fixed-point iteration
    n <- ceil(needed(n)) from ``start`` (a lower bound such as the z answer),
    which converges in a step or two for all but tiny n; then bisection
    between the last failing and the first passing n guarantees that n - 1
    fails. ``lo`` is an n known to fail (or n_min - 1).

    Returns (n, needed(n), number of evaluations of the multiple).
    """
    cache: dict[int, float] = {}

    def need(n: int) -> float:
        if n not in cache:
            cache[n] = needed(n)
        return cache[n]

    def ok(n: int) -> bool:
        v = need(n)
        # a tiny df gives a huge (even infinite) requirement: a plain failure
        return v <= n + 1 and ceil_robust(v) <= n

    n = max(start, n_min, lo + 1)
    if n_max is not None:
        n = min(n, n_max)
    while not ok(n):
        lo = n
        _too_large(need(n))
        n = max(ceil_robust(need(n)), n + 1)
        if n_max is not None and n >= n_max:
            n = n_max
            break
    hi = n
    while hi - lo > 1:
        mid = (lo + hi) // 2
        if ok(mid):
            hi = mid
        else:
            lo = mid
    return hi, need(hi), len(cache)


@dataclass(frozen=True)
class _Plan:
    """Checked inputs of :func:`sample_size` and what every estimand's solver shares."""

    v: dict[str, Any]  # the checked values by name (:func:`_validate`)
    estimand: str
    margin: float  # B
    confidence: float
    mconf: float  # the two-sided level of the multiple (one-sided limits: 2 c - 1)
    kind: str  # "z" or "t"
    bound: str
    N: int | None  # population size
    m: float | None  # cluster size
    deff: float
    deff_notes: tuple[str, ...]
    deff_steps: tuple[str, ...]
    K: float  # allocation ratio n_b / n_a (1 for one sample)
    z: float


@dataclass(frozen=True)
class _Solution:
    """One estimand's answer before the steps every estimand shares (clusters, dropout)."""

    n: int
    n_un: float
    mult: float
    notes: tuple[str, ...]  # planning values assumed
    steps: tuple[str, ...]  # the formula up to the rounded n
    n_b: int | None = None
    df: float | None = None
    iterations: int | None = None
    n_before_fpc: float | None = None
    sd: float | None = None
    sd_b: float | None = None
    p: float | None = None
    p_b: float | None = None


@dataclass(frozen=True)
class EstimandFormula:
    """How one estimand's closed-form n is checked and solved (an entry of :data:`ESTIMAND_FORMULAS`).

    ``check(collector, estimand, values)`` adds the problems of the planning
    values that do or do not apply; ``solve(plan)`` returns the n.
    ``two_sample`` estimands are differences a - b with an allocation ratio;
    ``proportion`` ones take margins below 1 and the z multiple only.
    """

    check: Callable[[Collector, str, dict[str, Any]], None]
    solve: Callable[[_Plan], _Solution]
    two_sample: bool = False
    proportion: bool = False


def _design_effect(v: dict[str, Any]) -> tuple[float, tuple[str, ...], tuple[str, ...]]:
    """The design effect given, from the ICC (Kish; Eldridge, Ashby & Kerry 2006) or 1; notes and steps."""
    if v["design_effect"] is not None:
        deff = v["design_effect"]
        notes = (f"design effect {_g(deff)} < 1 as given (gain over simple random sampling)",) if deff < 1 else ()
        return deff, notes, ()
    if v["icc"] is None:
        return 1.0, (), ()
    m, icc, cv = v["cluster_size"], v["icc"], v["cluster_size_cv"] or 0.0
    deff = design_effect_from_icc(icc, m, cv)
    if v["cluster_size_cv"] is None:
        step = f"deff = 1 + (m - 1) ICC = 1 + ({_g(m)} - 1) * {_g(icc)} = {_g(deff)} (Kish)"
    else:
        step = (f"deff = 1 + ((cv^2 + 1) m - 1) ICC = 1 + (({_g(cv)}^2 + 1) * {_g(m)} - 1) * {_g(icc)}"
                f" = {_g(deff)} (Eldridge, Ashby & Kerry 2006)")
    return deff, (), (step,)


def _plan(v: dict[str, Any], bound: str) -> _Plan:
    # the multiples' level: a one-sided limit at 1 - alpha is the two-sided multiple at 1 - 2 alpha
    mconf = multiplier_confidence(v["confidence"], bound)
    deff, deff_notes, deff_steps = _design_effect(v)
    two = ESTIMAND_FORMULAS[v["estimand"]].two_sample
    return _Plan(
        v=v, estimand=v["estimand"], margin=v["margin"], confidence=v["confidence"], mconf=mconf,
        kind=v["multiplier"], bound=bound, N=v["population_size"], m=v["cluster_size"], deff=deff,
        deff_notes=deff_notes, deff_steps=deff_steps,
        K=1.0 if not two else (v["ratio"] if v["ratio"] is not None else 1.0), z=z_value(mconf),
    )


def _smallest_n(pl: _Plan, at_z: float, needed: Callable[[int], float],
                n_max: int | None = None) -> tuple[int, float, int | None]:
    """(n, unrounded n, t iterations): z rounds up the n at the z multiple; t iterates
    ``needed(n)``, the n asked for at the t multiple of n's degrees of freedom, from there."""
    _too_large(at_z)
    if pl.kind == "z":
        return max(1, ceil_robust(at_z)), at_z, None  # a margin far above the SD gives n0 near 0 (or 0 after underflow)
    nz = ceil_robust(at_z)
    return _iterate(needed, nz, lo=max(1, nz - 1), n_min=2, n_max=n_max)


# --- one sample


def _one_sample(pl: _Plan, u: float, var: float, vname: str, unit_variance: str,
                notes: tuple[str, ...], **values: float) -> _Solution:
    """n0 = m^2 V / B^2, times deff, then the FPC; t iterates on n - 1 df. ``u`` = sqrt(V)."""
    B, deff, N = pl.margin, pl.deff, pl.N

    # ratios of SDs to B first: sd^2 or B^2 alone may overflow or underflow
    def base(mult: float) -> float:
        r = mult * u / B
        return r * r * deff

    def final(mult: float) -> float:
        x = base(mult)
        return fpc_n(x, N, unit_variance) if N is not None else x

    n, n_un, iterations = _smallest_n(pl, final(pl.z), lambda n_: final(t_value(pl.mconf, n_ - 1)), n_max=N)
    df = None if pl.kind == "z" else float(n - 1)
    mult = pl.z if pl.kind == "z" else t_value(pl.mconf, df)
    x0 = base(mult) / deff
    n_before_fpc = x0 * deff if N is not None else None
    steps = _one_sample_steps(pl, n, n_un, mult, x0, var, vname, unit_variance)
    return _Solution(n=n, n_un=n_un, mult=mult, notes=notes, steps=steps, df=df, iterations=iterations,
                     n_before_fpc=n_before_fpc, **values)


def _one_sample_steps(pl: _Plan, n: int, n_un: float, mult: float, x0: float, var: float, vname: str,
                      unit_variance: str) -> tuple[str, ...]:
    B, deff, N = pl.margin, pl.deff, pl.N
    mname = "z" if pl.kind == "z" else f"t({n - 1})"
    steps = [f"n0 = {mname}^2 {vname} / B^2 = {_g(mult)}^2 * {_g(var)} / {_g(B)}^2 = {_g(x0)}", *pl.deff_steps]
    if deff != 1.0:
        steps.append(f"n0 * deff = {_g(x0)} * {_g(deff)} = {_g(x0 * deff)}")
    if N is not None:
        nb = x0 * deff
        if unit_variance == "S2":
            steps.append(f"FPC: n0 / (1 + n0 / N) = {_g(nb)} / (1 + {_g(nb)} / {N})"
                         f" = {_g(n_un)} (Cochran 1977, mean)")
        else:
            steps.append(f"FPC: n0 / (1 + (n0 - 1) / N) = {_g(nb)} / (1 + ({_g(nb)} - 1) / {N})"
                         f" = {_g(n_un)} (Cochran 1977, proportion)")
    steps.append(f"n = ceil({_g(n_un)}) = {n}" + (" (at least 1)" if n == 1 and n_un <= 0.5 else ""))
    return tuple(steps)


def _mean_n(pl: _Plan) -> _Solution:
    sd = pl.v["sd"]
    return _one_sample(pl, sd, sd * sd, "sd^2", FPC_UNIT_VARIANCE["mean"], (), sd=sd)


def _proportion_n(pl: _Plan) -> _Solution:
    p, notes = pl.v["p"], ()
    if p is None:
        p, notes = 0.5, ("p = 0.5 assumed (most conservative)",)
    var = p * (1 - p)
    return _one_sample(pl, math.sqrt(var), var, "p (1 - p)", FPC_UNIT_VARIANCE["proportion"], notes, p=p)


# --- two samples (difference a - b)


def _two_sample(pl: _Plan, u_a: float, u_b: float, var_a: float, var_b: float, vnames: tuple[str, str],
                notes: tuple[str, ...], **values: float) -> _Solution:
    """n_a = m^2 deff (V_a + V_b / K) / B^2, n_b = ceil(K n_a); t iterates on the Welch df."""
    K, deff, mconf = pl.K, pl.deff, pl.mconf
    ra, rb = u_a / pl.margin, u_b / pl.margin

    def base_a(mult: float) -> float:
        return mult * mult * deff * (ra * ra + rb * rb / K)

    def needed(n_: int) -> float:
        nb_ = ceil_robust(K * n_)
        if nb_ < 2:
            # group b needs two observations for an SD: not yet enough
            return float(n_ + 1)
        return base_a(t_value(mconf, welch_df(ra * ra, n_, rb * rb, nb_)))

    n, n_un, iterations = _smallest_n(pl, base_a(pl.z), needed)
    df = None if pl.kind == "z" else welch_df(ra * ra, n, rb * rb, ceil_robust(K * n))
    mult = pl.z if pl.kind == "z" else t_value(mconf, df)
    n_b = max(1, ceil_robust(K * n))
    mname = "z" if pl.kind == "z" else f"t({_g(df)})"
    va, vb = vnames
    steps = (*pl.deff_steps,
             f"n_a = {mname}^2{' deff' if deff != 1.0 else ''} ({va} + {vb} / K) / B^2 = {_g(mult)}^2"
             + (f" * {_g(deff)}" if deff != 1.0 else "")
             + f" * ({_g(var_a)} + {_g(var_b)} / {_g(K)}) / {_g(pl.margin)}^2 = {_g(n_un)}",
             f"n_a = ceil({_g(n_un)}) = {n}; n_b = ceil(K n_a) = ceil({_g(K)} * {n}) = {n_b}"
             + (" (at least 1 each)" if min(n_un, K * n) <= 0.5 else ""))
    return _Solution(n=n, n_un=n_un, mult=mult, notes=notes, steps=steps, n_b=n_b, df=df,
                     iterations=iterations, **values)


def _mean_diff_n(pl: _Plan) -> _Solution:
    sa = pl.v["sd"]
    sb = pl.v["sd_b"] if pl.v["sd_b"] is not None else sa
    notes = () if pl.v["sd_b"] is not None else (f"sd_b = sd_a = {_g(sa)} assumed (not given)",)
    return _two_sample(pl, sa, sb, sa * sa, sb * sb, ("sd_a^2", "sd_b^2"), notes, sd=sa, sd_b=sb)


def _proportion_diff_n(pl: _Plan) -> _Solution:
    pa, pb = pl.v["p"], pl.v["p_b"]
    if pa is None and pb is None:
        notes, pa, pb = ("p_a = p_b = 0.5 assumed (most conservative)",), 0.5, 0.5
    elif pa is None:
        notes, pa = ("p_a = 0.5 assumed (most conservative)",), 0.5
    elif pb is None:
        notes, pb = (f"p_b = p_a = {_g(pa)} assumed (not given)",), pa
    else:
        notes = ()
    var_a, var_b = pa * (1 - pa), pb * (1 - pb)
    return _two_sample(pl, math.sqrt(var_a), math.sqrt(var_b), var_a, var_b, ("p_a (1 - p_a)", "p_b (1 - p_b)"),
                       notes, p=pa, p_b=pb)


#: The closed form of each estimand, in the order the options list them: adding an estimand is
#: one entry (its check of the planning values and its solver; the shared steps come after).
ESTIMAND_FORMULAS: dict[str, EstimandFormula] = {
    "mean": EstimandFormula(_check_mean_values, _mean_n),
    "proportion": EstimandFormula(_check_proportion_values, _proportion_n, proportion=True),
    "mean-diff": EstimandFormula(_check_mean_values, _mean_diff_n, two_sample=True),
    "proportion-diff": EstimandFormula(_check_proportion_values, _proportion_diff_n, two_sample=True,
                                       proportion=True),
}
ESTIMANDS = tuple(ESTIMAND_FORMULAS)
TWO_SAMPLE = tuple(k for k, e in ESTIMAND_FORMULAS.items() if e.two_sample)


# --- what every estimand shares


def _multiplier_notes(pl: _Plan) -> list[str]:
    entry = ESTIMAND_FORMULAS[pl.estimand]
    if pl.kind == "t":
        notes = ["t multiple with Welch-Satterthwaite degrees of freedom from the planning SDs" if entry.two_sample
                 else "t multiple with n - 1 degrees of freedom"]
        if pl.deff != 1.0:
            notes.append("degrees of freedom counted in observations, not clusters (a cluster-level "
                         "analysis has fewer)")
        return notes
    if not entry.proportion:
        return ["SD known (z multiple)"]
    return ["normal approximation to the sampling distribution (z multiple)"]


def _assumptions(pl: _Plan, sol: _Solution, drop: float) -> tuple[str, ...]:
    notes = [*sol.notes, *pl.deff_notes, *_multiplier_notes(pl)]
    if pl.v["design_effect"] is None and pl.v["icc"] is None:
        notes.append("independent observations (simple random sampling, design effect 1)")
    if pl.bound != "two-sided":
        notes.append(f"one-sided {pl.bound} limit: multiple at {_g(pl.mconf)} two-sided, "
                     f"i.e. the {_g(pl.confidence)} quantile")
    if drop:
        notes.append(f"a share {_g(drop)} of enrolled units is lost before analysis, independently of "
                     "their values; n counts the units analysed")
    return tuple(notes)


def _clusters(m: float | None, n: int, n_b: int | None) -> tuple[int | None, int | None, list[str]]:
    """ceil(n / m) clusters per group when the cluster size is known."""
    if m is None:
        return None, None, []
    clusters = max(1, ceil_robust(n / m))
    clusters_b = None if n_b is None else max(1, ceil_robust(n_b / m))
    return clusters, clusters_b, [
        f"clusters = ceil(n / m) = ceil({n} / {_g(m)}) = {clusters}"
        + (f", group b ceil({n_b} / {_g(m)}) = {clusters_b}" if clusters_b is not None else "")]


def _closing_steps(sol: _Solution, drop: float) -> list[str]:
    steps = []
    if sol.iterations is not None:
        steps.append(f"t iteration: {sol.iterations} evaluations of the t multiple")
    if drop:
        nb_text = "" if sol.n_b is None else f"; n_b_enrolled = {enrolled_n(sol.n_b, drop)}"
        steps.append(f"n_enrolled = ceil(n / (1 - dropout)) = ceil({sol.n} / {_g(1 - drop)}) = "
                     f"{enrolled_n(sol.n, drop)}{nb_text}")
    return steps


def _result(pl: _Plan, sol: _Solution, drop: float) -> FormulaResult:
    clusters, clusters_b, cluster_steps = _clusters(pl.m, sol.n, sol.n_b)
    two = ESTIMAND_FORMULAS[pl.estimand].two_sample
    return FormulaResult(
        estimand=pl.estimand,
        n=int(sol.n),
        n_b=None if sol.n_b is None else int(sol.n_b),
        n_unrounded=float(sol.n_un),
        multiplier=float(sol.mult),
        multiplier_kind=pl.kind,
        design_effect=float(pl.deff),
        clusters=clusters,
        clusters_b=clusters_b,
        confidence=float(pl.confidence),
        margin=float(pl.margin),
        ratio=float(pl.K) if two else None,
        df=sol.df,
        iterations=sol.iterations,
        n_before_fpc=sol.n_before_fpc,
        population_size=pl.N,
        cluster_size=pl.m,
        sd=sol.sd,
        sd_b=sol.sd_b,
        p=sol.p,
        p_b=sol.p_b,
        assumptions=_assumptions(pl, sol, drop),
        formula="; ".join([*sol.steps, *cluster_steps, *_closing_steps(sol, drop)]),
        dropout=drop,
        bound=pl.bound,
    )


def sample_size(
    estimand: str,
    margin: float,
    *,
    confidence: float = 0.95,
    sd: float | None = None,
    sd_b: float | None = None,
    p: float | None = None,
    p_b: float | None = None,
    multiplier: str = "z",
    population_size: int | None = None,
    design_effect: float | None = None,
    icc: float | None = None,
    cluster_size: float | None = None,
    cluster_size_cv: float | None = None,
    ratio: float | None = 1.0,
    dropout: float | None = None,
    bound: str = "two-sided",
) -> FormulaResult:
    """Closed-form n for a confidence interval of half-width at most ``margin``.

    Parameters
    ----------
    estimand : {"mean", "proportion", "mean-diff", "proportion-diff"}
        Two-sample estimands are the difference a - b.
    margin : float
        Target half-width B, > 0 (< 1 for proportions).
    confidence : float
        Confidence level in (0, 1).
    sd, sd_b : float, optional
        Planning SDs of group a and b (b defaults to a). Required for means.
    p, p_b : float, optional
        Planning proportions in (0, 1); p = 0.5 (the largest variance) is
        assumed when none is given, and p_b defaults to p.
    multiplier : {"z", "t"}
        ``z``: normal multiple (known SD). ``t``: smallest n with
        ``t(n-1) * sd * sqrt(deff) / sqrt(n) <= B`` (times the FPC factor);
        for mean-diff the Welch--Satterthwaite df of the planned groups.
        Means only.
    population_size : int, optional
        Finite population size N >= 2 (one-sample): n0 / (1 + n0 / N) for a
        mean, n0 / (1 + (n0 - 1) / N) for a proportion (Cochran 1977,
        sections 4.6 and 4.4; :func:`fpc_n`).
    design_effect : float, optional
        Design effect given directly (> 0). Not together with ``icc``.
    icc, cluster_size, cluster_size_cv : float, optional
        Design effect from the ICC and the (mean) cluster size, and the CV of
        cluster sizes. ``cluster_size`` also gives the number of clusters
        ``ceil(n / cluster_size)``, also with a direct ``design_effect``.
    ratio : float
        Allocation ratio n_b / n_a for two-sample estimands, > 0.
    dropout : float, optional
        Share of enrolled units lost before analysis, in [0, 1): the result
        also gives ``n_enrolled = ceil(n / (1 - dropout))`` (:func:`enrolled_n`);
        n stays the number analysed.
    bound : {"two-sided", "upper", "lower"}
        A one-sided limit uses the one-sided multiple z_{1-alpha} (t_{1-alpha})
        instead of z_{1-alpha/2}: the margin is then the distance from the
        estimate to the limit (:func:`multiplier_confidence`).

    Returns
    -------
    FormulaResult

    Raises
    ------
    InputError
        All problems with the inputs at once; fields are the option names
        (``--margin``).

    Notes
    -----
    One-sample: ``n0 = m^2 V / B^2`` with V = sd^2 or p (1 - p); then
    ``n0 * deff``; then the FPC; then rounded up by :func:`ceil_robust`.
    Two-sample: ``n_a = m^2 deff (V_a + V_b / ratio) / B^2`` and
    ``n_b = ceil(ratio * n_a)``; for ``t`` the Welch--Satterthwaite df of
    (sd_a^2, n_a, sd_b^2, n_b).

    References
    ----------
    .. [1] Cochran, W. G. (1977). *Sampling Techniques*, 3rd ed. Wiley, New York.
    .. [2] Kish, L. (1965). *Survey Sampling*. Wiley, New York.
    .. [3] Eldridge, S. M., Ashby, D. and Kerry, S. (2006). Sample size for
       cluster randomized trials: effect of coefficient of variation of
       cluster size and analysis method. *International Journal of
       Epidemiology* 35, 1292-1300.
    .. [4] Welch, B. L. (1947). The generalization of "Student's" problem when
       several different population variances are involved. *Biometrika* 34, 28-35.
    """
    dc = Collector()
    drop = check_dropout(dc, "--dropout", dropout)
    try:
        v = _validate(
            estimand, margin, confidence, sd, sd_b, p, p_b, multiplier, population_size,
            design_effect, icc, cluster_size, cluster_size_cv, ratio,
        )
    except InputError as e:
        dc.extend(e)  # report a bad --dropout together with every other problem
    dc.raise_if_any()
    plan = _plan(v, bound)
    return _result(plan, ESTIMAND_FORMULAS[plan.estimand].solve(plan), drop)


def check_dropout(c: Collector, field: str, value: Any) -> float:
    """A dropout share in [0, 1) (0 when None); records a problem in ``c`` otherwise."""
    if value is None:
        return 0.0
    got = c.number(field, value, low=0, high=1, high_open=True)
    return 0.0 if got is None else float(got)


def enrolled_n(n: int, dropout: float) -> int:
    """The n to enrol so that ``n`` remain when a share ``dropout`` is lost: ceil(n / (1 - dropout)).

    Common practice: inflate by 1 / (1 - dropout), not by (1 + dropout),
    which enrols too few. The number retained out of the enrolled is
    binomial, so the n analysed is n on average or more, not always.
    """
    if not dropout:
        return int(n)
    return int(ceil_robust(n / (1.0 - dropout)))


def upper_sd_limit(pilot_sd: float, pilot_n: int, level: float) -> float:
    """Upper one-sided ``level`` confidence limit of sigma from a pilot SD.

    ``s sqrt((m - 1) / chi2_{1 - level}(m - 1))``, the chi2 quantile at
    ``1 - level`` (lower tail), since (m - 1) s^2 / sigma^2 ~ chi2(m - 1)
    under normality.

    References
    ----------
    Browne, R. H. (1995). On the use of a pilot sample for sample size
    determination. Statistics in Medicine 14, 1933-1940.
    """
    return float(pilot_sd * math.sqrt((pilot_n - 1) / _stats().chi2.ppf(1 - level, pilot_n - 1)))


def total_sample_size(
    margin: float,
    population_size: int,
    *,
    confidence: float = 0.95,
    sd: float | None = None,
    p: float | None = None,
    multiplier: str = "z",
) -> FormulaResult:
    """Closed-form n for the total of a finite population (one-stage simple random sample).

    The estimated total is ``N ybar`` (for 0/1 values, N times the sample share:
    the number of events), with ``Var(N ybar) = N^2 (1 - n/N) S^2 / n``
    ([1]_, chapter 2; for a proportion ``N^2 (N - n)/(N - 1) P Q / n``,
    chapter 3). A half-width of at most B on the total is a half-width of at
    most ``B / N`` on the mean, so this is :func:`sample_size` for the mean
    (``sd``) or the proportion (``p``) with margin ``B / N`` and the finite
    population correction of N, reported in the total's units.

    Parameters
    ----------
    margin : float
        Target half-width B of the total's interval, > 0, in the total's units
        (< N for a number of events).
    population_size : int
        N, a whole number >= 2.
    confidence : float
        Confidence level in (0, 1).
    sd, p : float
        Exactly one: the planning SD S of the unit values (divisor N - 1), or
        the planning share P of events (0/1 values).
    multiplier : {"z", "t"}
        As in :func:`sample_size` (``t`` with ``sd`` only).

    Returns
    -------
    FormulaResult
        ``estimand`` "total", ``margin`` B; the steps start with ``B / N``.

    Raises
    ------
    InputError
        All problems at once; fields are option names.

    References
    ----------
    .. [1] Cochran, W. G. (1977). *Sampling Techniques*, 3rd ed. Wiley, New
       York; chapters 2 and 3 (estimate of a population total and its
       variance). Chapter numbers from memory.
    """
    c = Collector()
    B = None if margin is None else c.number("--margin", margin, low=0, low_open=True)
    if margin is None:
        c.add("--margin", "is required: the target half-width of the total's interval, > 0")
    N = None
    if population_size is None:
        c.add("--population-size", "is required for a total without strata: the number of units N")
    else:
        N = c.number("--population-size", population_size, low=2, integer=True)
    if (sd is None) == (p is None):
        c.add("--sd", "a total needs exactly one of --sd (planning SD of the values) or --p (share of events, 0/1 values)")
    if p is not None and B is not None and N is not None and B >= N:
        c.add("--margin", f"must be < the population size ({N}) for a number of events, got {margin!r}")
    c.raise_if_any()
    base = "mean" if sd is not None else "proportion"
    res = sample_size(base, B / N, confidence=confidence, sd=sd, p=p, multiplier=multiplier, population_size=N)
    step = f"total = N x {base}: margin on the {base} B / N = {_g(B)} / {N} = {_g(B / N)}"
    return replace(
        res, estimand="total", margin=float(B), formula=f"{step}; {res.formula}",
        assumptions=res.assumptions + (f"the total's interval is N = {N} times the {base}'s (one-stage sample, no clusters)",),
    )


def finite_clusters(res: FormulaResult, cluster_count: int) -> FormulaResult:
    """A one-sample clustered result with n clusters drawn without replacement from M.

    The number of clusters before the correction is ``k0 = n0 deff / m`` (the
    unrounded n of ``res`` over the mean cluster size m); the cluster-level
    variance carries the first-stage factor ``1 - k/M``, so
    ``k = k0 / (1 + k0 / M)`` (the ``"S2"`` form of :func:`fpc_n`: the variance
    is estimated from the sampled clusters), rounded up; n = ceil(k m)
    observations. Cochran (1977), chapter 9 (cluster sampling; from memory).

    Raises
    ------
    InputError
        ``--cluster-count`` not a whole number >= 2, or ``res`` not a
        one-sample clustered result without a population size.
    """
    c = Collector()
    M = c.number("--cluster-count", cluster_count, low=2, integer=True)
    if res.cluster_size is None or res.n_b is not None:
        c.add("--cluster-count", "needs a one-sample clustered design: --icc and --cluster-size")
    if res.population_size is not None:
        c.add("--population-size", "counts units; with --cluster-count (clusters in the population) leave it out")
    c.raise_if_any()
    m = float(res.cluster_size)
    k0 = res.n_unrounded / m
    k_un = float(fpc_n(k0, M, "S2"))
    k = ceil_robust(k_un)
    step = (f"clusters drawn from M = {M}: k0 = n / m = {_g(res.n_unrounded)} / {_g(m)} = {_g(k0)}; "
            f"k = k0 / (1 + k0 / M) = {_g(k_un)}; clusters = ceil({_g(k_un)}) = {k}; n = ceil(k m) = {ceil_robust(k * m)}")
    return replace(res, n=int(ceil_robust(k * m)), clusters=int(k), formula=f"{res.formula}; {step}",
                   assumptions=res.assumptions + (f"clusters drawn without replacement from {M} clusters "
                                                  "(first-stage finite population correction)",))


# ---------------------------------------------------------------------------
# one-sided limits, relative precision, demonstration plans

BOUNDS = ("two-sided", "upper", "lower")


def multiplier_confidence(confidence: float, bound: str, field: str = "--bound") -> float:
    """Two-sided level whose multiple is the one-sided multiple at ``confidence``.

    A one-sided limit at 1 - alpha uses z_{1-alpha} (or t_{1-alpha}), the
    two-sided multiple at level 1 - 2 alpha; two-sided targets keep the level.
    """
    c = Collector()
    if bound not in BOUNDS:
        c.add(field, f"must be one of {', '.join(BOUNDS)}, got {bound!r}")
    conf = c.number("--confidence", confidence, low=0, high=1, low_open=True, high_open=True)
    if bound in ("upper", "lower") and conf is not None and conf <= 0.5:
        c.add("--confidence", f"a one-sided limit needs confidence > 0.5, got {conf!r}")
    c.raise_if_any()
    return float(conf) if bound == "two-sided" else 2.0 * float(conf) - 1.0


def relative_sample_size(
    relative_margin: float,
    cv: float,
    *,
    confidence: float = 0.95,
    multiplier: str = "z",
    bound: str = "two-sided",
    population_size: int | None = None,
    design_effect: float | None = None,
) -> FormulaResult:
    """Closed-form n for a half-width of at most ``relative_margin`` times the mean.

    ``n = (m CV / r)^2`` with m the z (or iterated t) multiple: the margin
    formula in units of the mean (SD = CV, margin = r), so the FPC, design
    effect and t iteration of :func:`sample_size` apply unchanged.

    Parameters
    ----------
    relative_margin : float
        Target half-width as a share of the true mean, r > 0 (0.2 = ±20%).
    cv : float
        Planning coefficient of variation SD / mean, > 0.

    References
    ----------
    .. [1] Cochran, W. G. (1977). *Sampling Techniques*, 3rd ed. Wiley, sec. 4.6
       (sample size for a relative error).
    """
    c = Collector()
    r = c.number("--relative-margin", relative_margin, low=0, low_open=True)
    v = c.number("--cv", cv, low=0, low_open=True)
    c.raise_if_any()
    res = sample_size("mean", r, confidence=confidence, sd=v, multiplier=multiplier, bound=bound,
                      population_size=population_size, design_effect=design_effect)
    from dataclasses import replace

    text = res.formula.replace("sd^2", "CV^2").replace("B^2", "r^2")
    assumptions = tuple(a for a in res.assumptions if "SD known" not in a) + (
        f"relative margin r = {_g(r)} of the mean; CV = {_g(v)} taken as known (z multiple)" if multiplier == "z"
        else f"relative margin r = {_g(r)} of the mean; CV = {_g(v)}",)
    return replace(res, formula=text, relative_margin=float(r), cv=float(v), assumptions=assumptions, sd=None)


def pass_probability(n: int, events_allowed: int, p: float) -> float:
    """Probability that n trials with event probability p show at most ``events_allowed`` events.

    The binomial CDF, exact: the chance that a demonstration plan passes when
    the true proportion is p.
    """
    from scipy import stats

    return float(stats.binom.cdf(int(events_allowed), int(n), float(p)))


@dataclass(frozen=True)
class PlanResult:
    """A demonstration (acceptance) plan: n trials, at most c events, bound p below ``limit``.

    ``n`` is the smallest n for which c events still give a one-sided
    Clopper-Pearson upper limit <= ``limit`` at ``confidence``, i.e.
    ``P(X <= c | n, limit) <= 1 - confidence``.
    """

    n: int
    n_unrounded: float | None
    limit: float
    events_allowed: int
    confidence: float
    p: float | None
    pass_probability: float | None
    formula: str
    assumptions: tuple[str, ...]

    def to_dict(self) -> dict[str, Any]:
        d = {
            "n": self.n,
            "n_unrounded": self.n_unrounded,
            "estimand": "proportion",
            "bound": "upper",
            "limit": self.limit,
            "events_allowed": self.events_allowed,
            "confidence": self.confidence,
            "p": self.p,
            "pass_probability": self.pass_probability,
            "method": "clopper-pearson",
            "assumptions": list(self.assumptions),
            "formula": self.formula,
        }
        return {k: (None if isinstance(x, float) and not math.isfinite(x) else x) for k, x in d.items()}

    def to_frame(self):
        import pandas as pd

        d = self.to_dict()
        d["assumptions"] = " | ".join(d["assumptions"])
        return pd.DataFrame([d])


def demonstration_plan(limit: float, events_allowed: int = 0, *, confidence: float = 0.95,
                       p: float | None = None) -> PlanResult:
    """Smallest n such that at most ``events_allowed`` events bound p below ``limit``.

    With c = 0 this is the success-run rule ``n = ceil(ln(alpha) / ln(1 - p0))``;
    with c > 0 the smallest n with ``P(X <= c | n, p0) <= alpha`` (the one-sided
    exact binomial limit), found by doubling and bisection on the exact CDF.

    Parameters
    ----------
    limit : float
        The proportion p0 in (0, 1) the plan must bound.
    events_allowed : int
        c >= 0, events that may be observed while the plan still passes.
    confidence : float
        1 - alpha, in (0, 1).
    p : float, optional
        Planning proportion; gives the probability of passing, P(X <= c | n, p).

    References
    ----------
    .. [1] Clopper, C. J. & Pearson, E. S. (1934). The use of confidence or
       fiducial limits illustrated in the case of the binomial. Biometrika 26, 404-413.
    .. [2] Hahn, G. J. & Meeker, W. Q. (1991). *Statistical Intervals*. Wiley,
       ch. 6 (one-sided binomial limits and demonstration tests).
    """
    from scipy import stats

    c = Collector()
    p0 = c.number("--limit", limit, low=0, high=1, low_open=True, high_open=True)
    k = c.number("--events-allowed", events_allowed, low=0, high=10**6, integer=True)
    conf = c.number("--confidence", confidence, low=0, high=1, low_open=True, high_open=True)
    if p is not None:
        p = c.number("--p", p, low=0, high=1, low_open=True, high_open=True)
    c.raise_if_any()
    k = int(k)
    alpha = 1.0 - conf
    steps = []
    if k == 0:
        n_un = math.log(alpha) / math.log1p(-p0)
        _too_large_plan(n_un)
        n = ceil_robust(n_un)
        steps.append(f"success run: n = ln(alpha) / ln(1 - p0) = ln({_g(alpha)}) / ln(1 - {_g(p0)}) = {_g(n_un)}")
        steps.append(f"n = ceil({_g(n_un)}) = {n}")
    else:
        n_un = None

        def ok(n_: int) -> bool:
            return stats.binom.cdf(k, n_, p0) <= alpha * (1 + 1e-12)

        lo = k  # n = k trials always pass with k events allowed: no bound
        hi = max(k + 1, int(math.log(alpha) / math.log1p(-p0)))
        while not ok(hi):
            lo, hi = hi, hi * 2
            _too_large_plan(hi)
        while hi - lo > 1:
            mid = (lo + hi) // 2
            if ok(mid):
                hi = mid
            else:
                lo = mid
        n = hi
        steps.append(f"smallest n with P(X <= {k} | n, p0 = {_g(p0)}) <= alpha = {_g(alpha)}: "
                     f"P(X <= {k} | {n}) = {_g(stats.binom.cdf(k, n, p0))}, P(X <= {k} | {n - 1}) = {_g(stats.binom.cdf(k, n - 1, p0))}")
    pp = None if p is None else pass_probability(n, k, p)
    if pp is not None:
        steps.append(f"probability of passing at p = {_g(p)}: P(X <= {k} | {n}, {_g(p)}) = {_g(pp)}")
    assumptions = (
        "independent trials with a common event probability (binomial)",
        f"passes when at most {k} event{'s' if k != 1 else ''} occur in n trials; the one-sided exact "
        f"(Clopper-Pearson) upper limit is then <= {_g(p0)} at {_g(conf)} confidence",
    )
    return PlanResult(n=int(n), n_unrounded=None if n_un is None else float(n_un), limit=float(p0),
                      events_allowed=k, confidence=float(conf), p=p, pass_probability=pp,
                      formula="; ".join(steps), assumptions=assumptions)


def _too_large_plan(value: float) -> None:
    if not math.isfinite(value) or value > N_LIMIT:
        raise InputError("--limit", f"gives n = {value:.3g}, too large to be a sample size")


@dataclass(frozen=True)
class StratifiedFormulaResult(FormulaResult):
    """A stratified sample's closed-form total n, with its per-stratum counts."""

    allocation: dict[str, int] = field(default_factory=dict)

    def to_dict(self) -> dict[str, Any]:
        d = super().to_dict()
        d["allocation"] = dict(self.allocation)
        return d
