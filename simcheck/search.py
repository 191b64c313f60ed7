"""The smallest n that meets the coverage and assurance targets, under Monte Carlo noise.

Targets. An n *passes* when its coverage is at least ``confidence -
coverage_tolerance`` and (when the design has a target margin) its assurance,
the share of samples whose half-width is at most the margin, is at least the
``assurance`` target. Every result names the criterion that defines its
``n`` (``criterion``, ``criterion_text``) and its ``decision`` (``clear`` or
``undecided``); ``n_first`` is the first n seen to pass.

Criteria: ``window`` on exact paths (the targets hold at every n in ``[n,
ceil(window n)]``, :mod:`simcheck.window`; ``first`` when window = 1) and
``crossing`` on simulated paths (below).

Stages of a simulated search (each stage draws from its own spawn key below
the root, so no stage reuses another's replicates):

1. *start* at the closed-form n (:func:`formula_n`), clipped to
   ``[n_min, n_max]``;
2. *bracket* with single-n checks on a tenth of the replicates, halving or
   doubling n until one n fails and a larger one passes;
3. *locate* the crossing on an eighth of the replicates: one whole-curve
   evaluation of every n in the bracket for methods on sufficient
   statistics (nested draws, common random numbers), coarse-to-fine grids of
   four n per round for methods evaluated n by n (bootstrap, clustered);
4. *confirm* on fresh replicates (spawn key ``(STAGE_CONFIRM, round)``) a
   window around the located n: on the whole-curve paths every n the locate
   stage could not tell from the boundary (score within 3 full-replicate
   MCSE), padded by ``max(3, precision n / 2)``; n by n, the four n
   ``n - w, n - 1, n, n + w`` with ``w = ceil(precision n / 2)``. The answer
   is read off the confirmation, not off the noise that placed the window.
   If the decision is not clear, the replicates are doubled (a new round on
   a new key, pooled with the earlier rounds) until it is, or until the
   replicate budget would be exceeded. A window that misses the crossing
   is moved; one that cuts an end of ``n_range`` off is widened while
   ``n_range`` could still come out narrow enough.

Decision rules (Monte Carlo error, MCSE = sqrt(p (1 - p) / R), Morris et al.
2019):

* the *score* of an n is the smaller of ``(coverage - target) / MCSE`` and
  ``(assurance - target) / MCSE``; an n *clearly fails* when its score is
  below -bar and *clearly passes* when above +bar, with bar = 2 or the
  two-sided 5 % Bonferroni bar over the confirmed n if larger, and
  :data:`EXPLORE_Z` = 3.5 for rows of the exploration stages;
* ``n_range = [low, high]`` is read off every simulated evaluation of the
  search (each n at its row with the most replicates; confirmation rounds
  pooled): ``low`` is one above the largest n that clearly fails, ``high``
  the smallest larger n that clearly passes (``n_max`` if none does). These
  are the n the Monte Carlo error cannot tell from the boundary;
* ``n = high``, the conservative end (criterion ``crossing``);
* the decision is *clear* when ``high - low <= max(1, round(precision *
  n))`` (default precision 0.1: n is pinned down to about +-5 %; planning
  inputs such as an SD or CV are rarely known better), else *undecided*,
  and ``replicates_needed`` estimates the replicates per n that would
  settle it. With a steep boundary (n - 1 fails and n passes, each by more
  than 2 MCSE) ``n_range`` is ``[n, n]``.

Exact paths (proportion methods on 0/1 data by enumeration; normal data with
z or t by exact laws) have no Monte Carlo error: ``n_range = [n, n]``. Count
data are scanned exactly for the window criterion (:class:`WindowScan`), so
the answer does not depend on ``n_max`` once ``n_max >= ceil(window n)``;
normal data are monotone in n and bisected.

``replicates_used`` counts simulated samples: a whole-curve (nested)
evaluation draws each replicate once at its largest n and counts R; an
evaluation n by n counts R per n; exact paths count 0.

References
----------
.. [1] Morris, T. P., White, I. R. & Crowther, M. J. (2019). Using simulation
   studies to evaluate statistical methods. Statistics in Medicine 38,
   2074-2102 (Monte Carlo standard errors).
.. [2] Brown, L. D., Cai, T. T. & DasGupta, A. (2001). Interval estimation for
   a binomial proportion. Statistical Science 16, 101-133 (oscillating
   coverage of proportion intervals in n).
.. [3] Kupper, L. L. & Hafner, K. B. (1989). How appropriate are popular
   sample size formulas? The American Statistician 43, 101-105 (assurance
   of the achieved half-width).
"""

from __future__ import annotations

import math
from dataclasses import replace
from typing import Any, Callable, Sequence

import numpy as np
from scipy import stats

from simcheck import engine
from simcheck import rng as rngmod
from simcheck.design import Design
from simcheck.estimands import REGISTRY as ESTIMAND_SPECS
from simcheck.errors import Collector, InputError
from simcheck.intervals import get_method
from simcheck.results import CheckResult, CurveResult, MethodComparison, SearchResult
from simcheck.window import DEFAULT_WINDOW, WINDOW_MAX, ScanOutcome, WindowScan, window_top

__all__ = ["formula_n", "formula_result", "find_n", "compare", "criterion_for", "DEFAULT_WINDOW"]

#: full rows (with the half-width distribution) kept for figures after an exact scan
SHOWN_ROWS = 41
#: spawn keys of the search stages below the root (STAGE_CONFIRM from rng)
#: resamples of bootstrap methods while bracketing and locating
EXPLORE_RESAMPLES = 499
#: default replicate budget of a bootstrap search, in multiples of the replicates
#: (each replicate costs resamples x n draws, so the usual 80x would take hours)
RESAMPLING_BUDGET = 6

STAGE_BRACKET = 101
STAGE_LOCATE = 102
STAGE_OTHERS = 103
#: scores beyond this many MCSE count as a clear pass or a clear fail
CLEAR_Z = 2.0
#: exploration rows (bracket, locate: up to LOCATE_MAX n on few replicates) count as clear
#: evidence only beyond this many MCSE: Bonferroni over 100 n at two-sided 5 % (z = 3.48)
EXPLORE_Z = 3.5
#: confirmation windows cover the n within this many full-replicate MCSE (seen at the locate stage)
LOCATE_Z = 3.0
#: largest number of n values of the locate stage's whole-curve evaluation
LOCATE_MAX = 100
#: largest number of n values of one whole-curve evaluation
DENSE_MAX = 400
#: window moves allowed when the confirmation finds the crossing outside it
MAX_SHIFTS = 6
#: default starting n when no closed form applies
DEFAULT_START = 30

Progress = Callable[[int, int], None] | None


# --------------------------------------------------------------------------
# closed form
# --------------------------------------------------------------------------
def formula_result(design: Design):
    """``(FormulaResult, n)`` behind :func:`formula_n`, or None (see there)."""
    return _formula(design)


def formula_n(design: Design) -> int | None:
    """The closed-form n of the design (z multiple), or None where none applies.

    The SD is the model's true SD; for 0/1 models p is the model's mean.
    Two-sample designs use ``design.ratio`` (n counts group a). Clustered
    designs: the number of clusters, ``ceil(n_formula * deff / m)`` with the
    design effect of Kish (``1 + (m - 1) ICC``) or, with a cluster-size CV,
    of Eldridge, Ashby & Kerry (2006). A finite population with
    ``fpc = true`` applies the finite population correction (one-sample).

    Returns None when the design has no target margin or the formula does
    not apply (e.g. p = 0 or 1, SD 0).

    References
    ----------
    .. [1] Cochran, W. G. (1977). Sampling Techniques, 3rd ed. Wiley.
    .. [2] Kish, L. (1965). Survey Sampling. Wiley.
    .. [3] Eldridge, S. M., Ashby, D. & Kerry, S. (2006). Sample size for
       cluster randomized trials: effect of coefficient of variation of
       cluster size and analysis method. Int. J. Epidemiology 35, 1292-1300.
    """
    out = _formula(design)
    return None if out is None else out[1]


def _formula(design: Design):
    from simcheck import formulas

    if design.margin is None:
        return None
    if design.strata is not None:
        return _stratified_formula(design)
    if design.estimand == "total":
        return _total_formula(design)
    if design.estimand in ESTIMAND_SPECS:
        return _registered_formula(design)
    kw: dict[str, Any] = {"confidence": design.confidence, "multiplier": "z", "bound": design.bound}
    try:
        if design.estimand in ("mean", "mean-diff"):
            kw["sd"] = float(design.model.sd)
            if design.two_sample:
                kw["sd_b"] = float(design.model_b.sd)
        else:
            kw["p"] = float(design.model.mean)
            if design.two_sample:
                kw["p_b"] = float(design.model_b.mean)
        if design.two_sample:
            kw["ratio"] = float(design.ratio)
        cl = design.clusters
        if cl is not None:
            m = cl.size if cl.size is not None else cl.size_mean
            kw["icc"] = float(cl.icc)
            kw["cluster_size"] = float(m)
            if cl.size is None and cl.size_cv:
                kw["cluster_size_cv"] = float(cl.size_cv)
        pop = design.population
        if pop is not None and pop.fpc and not design.two_sample:
            # the FPC counts units; clustered designs sample clusters of units
            kw["population_size"] = int(pop.size)
        res = formulas.sample_size(design.estimand, float(design.margin), **kw)
        if cl is not None and cl.count is not None:  # clusters drawn from M: first-stage correction
            res = formulas.finite_clusters(res, cl.count)
    except (InputError, ValueError, ZeroDivisionError, OverflowError, TypeError):
        return None
    n = res.clusters if cl is not None else res.n
    return None if n is None else (res, int(n))


def _registered_formula(design: Design):
    """The closed-form baseline of an estimand from the registry, from the design's planning values."""
    spec = ESTIMAND_SPECS[design.estimand]
    if spec.formula is None or spec.planning is None:
        return None
    try:
        res = spec.formula(float(design.margin), design.confidence, **spec.planning(design))
    except (InputError, ValueError, ZeroDivisionError, OverflowError, TypeError):
        return None
    return res, int(res.n)


def _stratified_formula(design: Design):
    from simcheck.strata import stratified_sample_size

    st = design.strata
    prop = design.estimand == "proportion"
    try:
        res = stratified_sample_size(
            design.estimand, float(design.margin), names=st.names, sizes=st.sizes,
            sds=None if prop else [m.sd for m in st.models], ps=[m.mean for m in st.models] if prop else None,
            means=[m.mean for m in st.models], rule=st.rule, costs=st.costs, given=st.given,
            minimum=st.minimum, confidence=design.confidence)
    except (InputError, ValueError, ZeroDivisionError, OverflowError):
        return None
    return res, int(res.n)


def _total_formula(design: Design):
    """A total without strata: one stage (the mean's n at margin B / N), or M clusters (simcheck.cluster_total)."""
    from simcheck import formulas
    from simcheck.cluster_total import cluster_total_sample_size

    m = design.model
    try:
        cl = design.clusters
        if cl is not None:
            kw: dict[str, Any] = {"p": float(m.mean)} if m.zero_one else {"sd": float(m.sd), "mean": float(m.mean)}
            res = cluster_total_sample_size(
                float(design.margin), cl.count, cl.size if cl.size is not None else cl.size_mean, cl.icc,
                cluster_size_cv=None if cl.size is not None else cl.size_cv, confidence=design.confidence,
                bound=design.bound, **kw)
            return res, int(res.clusters)
        kw = {"sd": float(m.sd)} if design.base_estimand == "mean" else {"p": float(m.mean)}
        res = formulas.total_sample_size(float(design.margin), int(design.population.size),
                                         confidence=formulas.multiplier_confidence(design.confidence, design.bound), **kw)
    except (InputError, ValueError, ZeroDivisionError, OverflowError, TypeError):
        return None
    return res, int(res.n)


# --------------------------------------------------------------------------
# helpers on rows
# --------------------------------------------------------------------------
class _Targets:
    def __init__(self, confidence: float, tolerance: float, assurance: float | None) -> None:
        self.coverage = confidence - tolerance
        self.assurance = assurance

    def passes(self, r: CheckResult) -> bool:
        if not r.coverage >= self.coverage - 1e-12:
            return False
        if self.assurance is not None:
            return r.assurance is not None and r.assurance >= self.assurance - 1e-12
        return True

    def passes_arrays(self, coverage: np.ndarray, assurance: np.ndarray | None) -> np.ndarray:
        """:meth:`passes` on arrays of exact coverage and assurance (same allowance)."""
        ok = np.asarray(coverage) >= self.coverage - 1e-12
        if self.assurance is not None:
            ok &= np.asarray(assurance) >= self.assurance - 1e-12
        return ok

    def score(self, r: CheckResult) -> float:
        """Smallest margin of pass of the targets, in MCSE (+-inf on exact rows)."""
        z = _z(r.coverage - self.coverage, r.coverage, r.replicates, r.exact)
        if self.assurance is not None:
            a = r.assurance if r.assurance is not None else 0.0
            z = min(z, _z(a - self.assurance, a, r.replicates, r.exact))
        return z

    def failing(self, r: CheckResult) -> list[str]:
        out = []
        if not r.coverage >= self.coverage - 1e-12:
            out.append(f"coverage {r.coverage:.4f} < {self.coverage:.4f}")
        if self.assurance is not None and not (r.assurance is not None and r.assurance >= self.assurance - 1e-12):
            out.append(f"assurance {_f(r.assurance)} < {self.assurance:.4f}")
        return out


def _z(diff: float, p: float, reps: int, exact: bool) -> float:
    if exact or reps <= 0:
        return math.inf if diff >= -1e-12 else -math.inf
    # floor on p(1-p): a share of 0 or 1 in R replicates is not known exactly
    q = min(max(p, 0.5 / reps), 1 - 0.5 / reps)
    return diff / math.sqrt(q * (1 - q) / reps)


def _f(x) -> str:
    return "-" if x is None else f"{x:.4f}"


def _pool(a: CheckResult, b: CheckResult) -> CheckResult:
    """Two evaluations of the same n on independent replicates, as one."""
    from simcheck.engine.measures import pool_checks

    return pool_checks(a, b)


# --------------------------------------------------------------------------
# evaluation bookkeeping
# --------------------------------------------------------------------------
class _Runner:
    """Runs engine evaluations on stage keys and counts replicates."""

    def __init__(self, design: Design, root, path: str, progress: Progress, dense: bool) -> None:
        self.design, self.root, self.path, self.progress, self.dense = design, root, path, progress, dense
        self.used = 0
        self.rows: list[CheckResult] = []

    def cost(self, k: int, reps: int) -> int:
        return reps if (self.dense and k > 1) else reps * k

    def curve(self, ns: Sequence[int], reps: int, *key: int) -> list[CheckResult]:
        ns = sorted(set(int(n) for n in ns))
        seq = rngmod.child(self.root, *key)
        design = self.design
        if key and key[0] in (STAGE_BRACKET, STAGE_LOCATE) and _resampling(design):
            # bracketing and locating only propose a candidate: a bootstrap with
            # fewer resamples is a close, four times cheaper stand-in; every
            # confirmation uses the design's own resamples
            design = replace(design, resamples=min(design.resamples, EXPLORE_RESAMPLES))
        if len(ns) == 1:
            rows = [engine.check(design, ns[0], replicates=reps, rng=seq, path=self.path, progress=self.progress)]
        else:
            rows = list(engine.curve(design, ns, replicates=reps, rng=seq, path=self.path, progress=self.progress).rows)
        if not all(r.exact for r in rows):
            self.used += self.cost(len(ns), reps)
        self.rows.extend(rows)
        return rows


def _resampling(design: Design) -> bool:
    if design.strata is not None:  # stratified methods are not in the registry
        return design.method == "bootstrap"
    m = get_method(design.estimand, design.method)
    return m.kind in ("sample", "sample2") or m.resampling


def _dense_paths(design: Design, path: str) -> tuple[bool, bool]:
    """(exact, whole-curve) for the design and requested path."""
    valid = engine.available_paths(design)
    if path == "auto":
        if valid[0] == "exact":
            return True, True
        return False, valid[0] in ("sufficient", "nested")
    if path == "exact":
        return True, True
    return False, path in ("sufficient", "nested")


# --------------------------------------------------------------------------
# the search
# --------------------------------------------------------------------------
def find_n(
    design: Design,
    *,
    assurance: float = 0.5,
    coverage_tolerance: float = 0.005,
    replicates: int = 10_000,
    rng: rngmod.RngLike = None,
    n_min: int = 2,
    n_max: int = 5000,
    budget: int | None = None,
    progress: Progress = None,
    path: str = "auto",
    precision: float = 0.1,
    window: float = DEFAULT_WINDOW,
    listed: Sequence[str] | None = None,
) -> SearchResult:
    """The smallest n whose coverage and assurance meet the targets.

    Parameters
    ----------
    design : Design
        Data model(s), estimand, method, confidence and target margin. With
        no margin, only coverage counts.
    assurance : float
        Required share of samples whose half-width is at most the margin.
    coverage_tolerance : float
        Accepted shortfall of coverage below the confidence level.
    replicates : int
        Replicates of one confirmation round (exploration uses fewer).
    rng : int, SeedSequence or Generator, optional
        Root of all random streams (SPEC 7).
    n_min, n_max : int
        Search range (group a for two-sample designs; clusters when clustered).
    budget : int, optional
        Cap on the replicates the whole search may simulate (see the module
        notes for how they are counted); default ``20 * replicates``,
        ``80 * replicates`` for other methods evaluated n by n (clustered
        designs), whose confirmation rounds evaluate about four n each, and
        ``6 * replicates`` for bootstrap methods (each replicate costs
        resamples x n draws; they bracket and locate with 499 resamples).
    progress : callable, optional
        ``progress(done, total)`` passed to each engine evaluation.
    path : str
        Engine path ("auto" takes the cheapest valid one).
    precision : float
        Largest width of ``n_range``, relative to n, at which the decision
        counts as clear (default 0.1, i.e. about +-5 %).
    window : float
        Exact paths: the targets must hold at every n in ``[n, ceil(window
        n)]`` (default 1.25; 1 gives the first n meeting them). See
        :mod:`simcheck.window`.
    listed : sequence of str, optional
        The methods the user listed; suggestions of other methods say
        "not among your methods".

    Returns
    -------
    SearchResult
        ``n`` (None when not reached by ``n_max``), ``n_range``,
        ``n_formula``, coverage and assurance at n with MCSE (from the
        confirmation), ``stop_reason`` ("decision clear", "replicate budget
        spent", "exact", "not reached"), ``curve`` (the confirmation window,
        or the exact scan) and ``at_n``.

    References
    ----------
    .. [1] Morris, White & Crowther (2019), Statistics in Medicine 38:2074-2102.
    .. [2] Brown, Cai & DasGupta (2001), Statistical Science 16:101-133.
    """
    a_t, tol, R, lo_n, hi_n = _validate(design, assurance, coverage_tolerance, replicates, n_min, n_max,
                                        budget, precision, window)
    exact, dense = _dense_paths(design, path)
    if budget is None:
        # n-by-n searches confirm about four n per round
        budget = RESAMPLING_BUDGET * R if _resampling(design) else 20 * R * (1 if dense else 4)
    budget = int(budget)

    root, seed = rngmod.root_sequence(rng)
    if seed is None and not root.spawn_key and isinstance(root.entropy, int):
        seed = int(root.entropy)
    targets, targets_d = _targets(design, a_t, tol, window)
    nf = formula_n(design)
    start = nf if nf is not None else DEFAULT_START
    start = min(max(start, lo_n), hi_n)
    run = _Runner(design, root, path, progress, dense)
    if not exact and (design.clusters is not None or design.population is not None) and path in ("auto", "exact"):
        # the clustered engine decides exactness itself: ask it once, cheaply
        exact = run.curve([start], min(R, 100), STAGE_BRACKET, 0)[0].exact
    ctx = dict(design=design, targets=targets, targets_d=targets_d, nf=nf, seed=seed, lo_n=lo_n, hi_n=hi_n, R=R,
               window=float(window), listed=tuple(listed) if listed is not None else (design.method,))
    if exact:
        return _exact_search(run, start, **ctx)
    return _simulated_search(run, start, budget, precision, **ctx)


def _targets(design: Design, a_t: float, tol: float, window: float) -> tuple[_Targets, dict[str, Any]]:
    """The targets the search tests, and as the result reports them."""
    targets = _Targets(design.confidence, tol, a_t if design.margin is not None else None)
    targets_d = {
        "confidence": design.confidence,
        "coverage_tolerance": tol,
        "coverage_target": targets.coverage,
        "margin": design.margin,
        "assurance": targets.assurance,
        "bound": design.bound,
        "window": float(window),
    }
    if design.relative_margin is not None:
        targets_d["relative_margin"] = design.relative_margin
    return targets, targets_d


def _validate(design, assurance, coverage_tolerance, replicates, n_min, n_max, budget, precision, window):
    """All problems with find_n's arguments at once; (assurance, tolerance, R, n_min, n_max) with the
    n range raised to the smallest n the interval accepts."""
    c = Collector()
    a_t = c.number("assurance", assurance, low=0, high=1, low_open=True, high_open=True)
    tol = c.number("coverage_tolerance", coverage_tolerance, low=0, high=0.5, high_open=True)
    if tol is not None and tol >= design.confidence:
        c.add("coverage_tolerance", f"must be below the confidence ({design.confidence:g}), got {coverage_tolerance!r}")
    R = c.number("replicates", replicates, low=10, integer=True)
    lo_n = c.number("n_min", n_min, low=1, integer=True)
    hi_n = c.number("n_max", n_max, low=2, integer=True)
    if lo_n is not None and hi_n is not None and hi_n <= lo_n:
        c.add("n_max", f"must be > n_min ({lo_n}), got {n_max!r}")
    if budget is not None:
        c.number("budget", budget, low=1, integer=True)
    c.number("precision", precision, low=0, high=1, low_open=True)
    c.number("window", window, low=1, high=WINDOW_MAX)
    c.raise_if_any()
    floor = 2 if design.strata is not None else (
        1 if get_method(design.estimand, design.method).kind in ("count", "count2") else 2)
    lo_n = max(lo_n, floor)
    while design.two_sample and design.n_b(lo_n) < floor:
        lo_n += 1
    if hi_n <= lo_n:
        raise InputError("n_max", f"must be > {lo_n} (the smallest n the {design.method} interval accepts here), got {n_max}")
    return a_t, tol, int(R), int(lo_n), int(hi_n)


def criterion_for(exact: bool, window: float) -> tuple[str, str]:
    """(criterion, criterion_text): the named rule that defines a search's n."""
    if not exact:
        return ("crossing", "the smallest n above every n that clearly fails at which coverage and assurance "
                f"clearly meet the targets (by at least {CLEAR_Z:g} Monte Carlo SE, more when many n are "
                "compared); n_range holds the n the Monte Carlo error cannot tell from the boundary")
    if window <= 1.0:
        return ("first", "the smallest n at which the targets hold (exact computation)")
    return ("window", f"the smallest n at which the targets hold at every n from n to ceil({window:g} n) "
                      "(exact computation; coverage of count data oscillates in n)")


def _result(run: _Runner, *, design, targets_d, nf, seed, n, reached, n_range, at, stop, exact,
            n_first=None, notes=(), curve_rows=None, best=None, others=(), window=None,
            decision="clear", replicates_needed=None) -> SearchResult:
    crit = criterion_for(exact, targets_d.get("window", DEFAULT_WINDOW) if window is None else window)
    curve = None
    if curve_rows:
        uniq = {r.n: r for r in curve_rows}
        curve = CurveResult(rows=tuple(uniq[k] for k in sorted(uniq)))
    return SearchResult(
        n=n,
        reached=reached,
        n_formula=nf,
        n_range=n_range,
        coverage=None if at is None else at.coverage,
        coverage_mcse=None if at is None else at.coverage_mcse,
        assurance=None if at is None else at.assurance,
        assurance_mcse=None if at is None else at.assurance_mcse,
        replicates_used=int(run.used),
        targets=targets_d,
        method=design.method,
        seed=seed,
        n_b=None if n is None else design.n_b(n),
        n_first=n_first,
        stop_reason=stop,
        exact=exact,
        best_coverage=None if best is None else best.coverage,
        best_coverage_n=None if best is None else best.n,
        methods_that_reach=tuple(others),
        notes=tuple(notes),
        decision=decision,
        criterion=crit[0],
        criterion_text=crit[1],
        replicates_needed=replicates_needed,
        curve=curve,
        at_n=at,
    )


def _formula_note(nf, n) -> list[str]:
    if nf is None or n is None:
        return [] if nf is not None else ["no closed-form n applies to this design (started from n = %d)" % DEFAULT_START]
    return [f"found n = {n} is {n / nf:.2f} times the closed-form n = {nf}"]


def _not_reached(run: _Runner, ctx: dict, at_top: CheckResult, n_first: int | None, stop_extra: Sequence[str] = ()) -> SearchResult:
    design, targets, hi_n = ctx["design"], ctx["targets"], ctx["hi_n"]
    rows = [r for r in run.rows if r.replicates >= max(1, ctx["R"] // 10) or r.exact]
    best = max(rows, key=lambda r: (r.coverage, -r.n)) if rows else at_top
    others = _methods_that_reach(run, ctx)
    why = "; ".join(targets.failing(at_top)) or "the target does not hold for every n up to n_max"
    notes = [f"not reached: the targets are not met by n_max = {hi_n} ({why} at n = {hi_n})."]
    notes += list(stop_extra)
    notes.append(f"best coverage {best.coverage:.4f} at n = {best.n} among the n evaluated")
    if n_first is not None:
        notes.append(f"the targets hold at n = {n_first} but not for every larger n up to n_max (coverage oscillates in n)")
    if others:
        mine = [m for m in others if m in ctx["listed"]]
        theirs = [m for m in others if m not in ctx["listed"]]
        said = ", ".join(mine) + ("; " if mine and theirs else "")
        said += f"not among your methods: {', '.join(theirs)}" if theirs else ""
        notes.append(f"methods that reach the targets at n = {hi_n}: {said}")
    else:
        notes.append(f"no other interval method in simcheck reaches the targets at n = {hi_n}; "
                     "a larger n_max or a different margin may be needed")
    return _result(run, design=design, targets_d=ctx["targets_d"], nf=ctx["nf"], seed=ctx["seed"], n=None,
                   reached=False, n_range=None, at=at_top, stop="not reached", exact=at_top.exact,
                   n_first=n_first, notes=notes, curve_rows=[r for r in run.rows if r.replicates >= ctx["R"] or r.exact],
                   best=best, others=others)


def _methods_that_reach(run: _Runner, ctx: dict) -> list[str]:
    """Other methods of simcheck that meet the targets at n_max (same replicates, same streams)."""
    from simcheck.intervals import get_method, methods_for

    design, targets, hi_n, R = ctx["design"], ctx["targets"], ctx["hi_n"], ctx["R"]
    out = []
    for name in methods_for(design.estimand):
        if name == design.method:
            continue
        m = get_method(design.estimand, name)
        if m.kind in ("sample", "sample2") or m.resampling:
            continue  # bootstrap: too expensive for a quick check at n_max
        try:
            d = design.with_method(name)
            r = engine.check(d, hi_n, replicates=R, rng=rngmod.child(run.root, STAGE_OTHERS), path="auto")
        except InputError:
            continue  # not valid for these data (e.g. cox on values <= 0)
        if not r.exact:
            run.used += R
        if targets.passes(r):
            out.append(name)
    return out


# --------------------------------------------------------------------------
# exact paths
# --------------------------------------------------------------------------
def _exact_search(run: _Runner, start: int, **ctx) -> SearchResult:
    # counts (binomial, beta-binomial, hypergeometric) make coverage oscillate in n;
    # the exact laws of normal data give coverage and assurance monotone in n
    design = ctx["design"]
    if design.estimand in ("proportion", "proportion-diff"):
        return _exact_scan(run, **ctx)
    method = get_method(design.estimand, design.method)
    if method.kind == "raw" and not method.exact_monotone:
        return _exact_scan(run, **ctx)  # registered estimands: monotone only where the method says so
    return _exact_monotone(run, start, **ctx)


def _count_passes(run: _Runner, design: Design, targets: _Targets) -> Callable[[Sequence[int]], np.ndarray]:
    """passes(ns) for the exact count paths: coverage and assurance only where the engine offers it."""
    from simcheck.engine import exact as exactmod

    kind = engine.exact_kind(design) if design.clusters is None and design.population is None else None
    func = get_method(design.estimand, design.method).func
    conf, margin = design.confidence, design.margin
    if kind == "binomial":
        p = design.model.bernoulli_p()
        return lambda ns: targets.passes_arrays(*exactmod.binomial_targets(func, ns, p, conf, margin))
    if kind == "binomial2":
        pa, pb = design.model.bernoulli_p(), design.model_b.bernoulli_p()
        return lambda ns: targets.passes_arrays(*exactmod.two_binomial_targets(
            func, ns, [design.n_b(n) for n in ns], pa, pb, conf, margin))

    def by_rows(ns: Sequence[int]) -> np.ndarray:
        got = {r.n: targets.passes(r) for r in run.curve(ns, 1, 0)}
        return np.array([got[int(n)] for n in ns])

    return by_rows


def _exact_scan(run: _Runner, **ctx) -> SearchResult:
    design, targets, lo_n, hi_n, window = ctx["design"], ctx["targets"], ctx["lo_n"], ctx["hi_n"], ctx["window"]
    # without replacement n cannot pass the population size: windows end there
    cap = design.population.size if design.population is not None and design.clusters is None else None
    cap = int(cap) if cap else None
    scan = WindowScan(_count_passes(run, design, targets), lo_n, hi_n, window, cap=cap)
    out = scan.run()
    if out.status == "none":
        return _not_reached(run, ctx, run.curve([hi_n], 1, 0)[0], out.n_first)
    if out.status == "window beyond n_max":
        return _window_beyond(run, ctx, out)
    n, top = out.n, scan.top(out.n)
    # full rows (half-width distribution) only where the answer is shown: n, n_first, the window
    pick = {n, top} | ({out.n_first} if out.n_first is not None else set())
    shown = SHOWN_ROWS if not design.two_sample else SHOWN_ROWS // 4  # a full two-binomial row is costly
    pick |= {int(k) for k in np.linspace(n, top, min(top - n + 1, shown))}
    rows = run.curve(sorted(pick), 1, 0)
    at = next(r for r in rows if r.n == n)
    notes = _formula_note(ctx["nf"], n)
    if out.n_first is not None and out.n_first != n:
        notes.append(f"coverage oscillates in n (discrete data): the targets first hold at n = {out.n_first}, "
                     f"and hold at every n from {n} to {top} (window {window:g}) from n = {n} on")
    notes.append(f"exact enumeration of {out.evaluated} values of n (no Monte Carlo error); "
                 "n does not depend on n_max once n_max >= ceil(window x n)")
    return _result(run, design=design, targets_d=ctx["targets_d"], nf=ctx["nf"], seed=ctx["seed"], n=n,
                   reached=True, n_range=(n, n), at=at, stop="exact", exact=True, n_first=out.n_first,
                   notes=notes, curve_rows=rows, window=window)


def _window_beyond(run: _Runner, ctx: dict, out: ScanOutcome) -> SearchResult:
    """The targets hold from a candidate n up to n_max, but its window reaches past n_max."""
    hi_n, window, cand = ctx["hi_n"], ctx["window"], out.candidate
    top = window_top(cand, window)
    rows = run.curve(sorted({cand, hi_n} | ({out.n_first} if out.n_first else set())), 1, 0)
    notes = [
        f"undecided within n_max: the targets hold at every n from {cand} to n_max = {hi_n}, but the window "
        f"criterion ({window:g}) needs them up to n = {top}; raise simulation.n_max to at least {top} to settle it "
        "(the answer is not moved to the ceiling)",
    ]
    if out.n_first is not None and out.n_first != cand:
        notes.append(f"the targets first hold at n = {out.n_first} (coverage oscillates in n)")
    return _result(run, design=ctx["design"], targets_d=ctx["targets_d"], nf=ctx["nf"], seed=ctx["seed"], n=None,
                   reached=False, n_range=None, at=rows[-1], stop="window reaches n_max", exact=True,
                   n_first=out.n_first, notes=notes, curve_rows=rows, window=window, decision="undecided")


def _exact_monotone(run: _Runner, start: int, **ctx) -> SearchResult:
    design, targets, lo_n, hi_n, window = ctx["design"], ctx["targets"], ctx["lo_n"], ctx["hi_n"], ctx["window"]
    cache: dict[int, CheckResult] = {}

    def ev(n: int) -> CheckResult:
        if n not in cache:
            cache[n] = run.curve([n], 1, 0)[0]
        return cache[n]

    top = ev(hi_n)
    if not targets.passes(top):
        return _not_reached(run, ctx, top, None)
    lo, hi = _bracket(lambda n: targets.passes(ev(n)), start, lo_n, hi_n)
    while lo is not None and hi - lo > 1:
        mid = (lo + hi) // 2
        if targets.passes(ev(mid)):
            hi = mid
        else:
            lo = mid
    n = hi
    wtop = window_top(n, window)
    if wtop <= hi_n and not targets.passes(ev(wtop)):
        # not monotone after all: fall back to the exact scan
        return _exact_scan(run, **ctx)
    # a short exact window for figures and to see an earlier pass, if any
    win = run.curve(range(max(lo_n, n - 20), min(hi_n, n + 5) + 1), 1, 0)
    n_first = next((r.n for r in win if targets.passes(r)), n)
    notes = _formula_note(ctx["nf"], n)
    if n_first != n:
        notes.append(f"the targets first hold at n = {n_first}, and for every larger n checked from n = {n}")
    law = ("the exact law of the statistic" if get_method(design.estimand, design.method).kind == "raw"
           else "the exact law of the sample mean and variance of normal data")
    notes.append(f"exact: computed from {law} (no Monte Carlo error); coverage and assurance rise monotonically "
                 "in n, so the window holds")
    return _result(run, design=design, targets_d=ctx["targets_d"], nf=ctx["nf"], seed=ctx["seed"], n=n,
                   reached=True, n_range=(n, n), at=ev(n), stop="exact", exact=True, n_first=n_first,
                   notes=notes, curve_rows=win, window=window)


def _bracket(passes: Callable[[int], bool], start: int, lo_n: int, hi_n: int) -> tuple[int | None, int]:
    """(largest n seen failing or None, smallest n seen passing); hi_n is known to pass."""
    n = start
    if passes(n):
        hi = n
        while hi > lo_n:
            m = max(lo_n, hi // 2)
            if passes(m):
                hi = m
            else:
                return m, hi
        return None, hi
    lo = n
    while True:
        m = min(hi_n, lo * 2)
        if m == hi_n or passes(m):
            return lo, m
        lo = m


# --------------------------------------------------------------------------
# simulated paths
# --------------------------------------------------------------------------
def _simulated_search(run: _Runner, start: int, budget: int, precision: float, **ctx) -> SearchResult:
    """Bracket, locate, confirm, conclude: each step below is one function."""
    found = _sim_bracket(run, start, **ctx)
    if isinstance(found, SearchResult):
        return found
    lo, hi = found
    window = _sim_locate(run, lo, hi, precision, **ctx)
    pooled, win, stop = _sim_confirm(run, window, budget, precision, **ctx)
    return _sim_conclude(run, pooled, win, stop, budget, precision, **ctx)


def _sim_bracket(run: _Runner, start: int, **ctx) -> tuple[int, int] | SearchResult:
    """(an n that fails, a larger n that passes) on pilot replicates, one stream per step."""
    targets, lo_n, hi_n, R = ctx["targets"], ctx["lo_n"], ctx["hi_n"], ctx["R"]
    r_pilot = max(min(R, 200), R // 10)
    step = [0]

    def pilot(n: int) -> bool:
        step[0] += 1
        return targets.passes(run.curve([n], r_pilot, STAGE_BRACKET, step[0])[0])

    if pilot(start):
        hi, lo = start, None
        while hi > lo_n:
            m = max(lo_n, hi // 2)
            if pilot(m):
                hi = m
            else:
                lo = m
                break
        return (lo_n if lo is None else lo), hi  # lo_n passing on the pilot: the window starts there
    lo = start
    while True:
        m = min(hi_n, lo * 2)
        if pilot(m):
            return lo, m
        if m == hi_n:
            # the ceiling fails on the pilot: check it on full, fresh replicates
            top = run.curve([hi_n], R, rngmod.STAGE_CONFIRM, 0)[0]
            if targets.passes(top):
                return lo, hi_n
            extra = []
            if targets.score(top) > -CLEAR_Z:
                extra.append(f"at n_max the shortfall is within {CLEAR_Z:g} MCSE: more replicates may show it reached")
            return _not_reached(run, ctx, top, None, extra)
        lo = m


def _sim_locate(run: _Runner, lo: int, hi: int, precision: float, **ctx) -> list[int]:
    """The confirmation window around the crossing, located on an eighth of the replicates."""
    targets, lo_n, hi_n, R = ctx["targets"], ctx["lo_n"], ctx["hi_n"], ctx["R"]
    r_locate = max(min(R, 500), R // 8)
    if run.dense:
        top = min(hi_n, max(hi + 1, int(math.ceil(hi * 1.1))))
        stride = max(1, int(math.ceil((top - lo + 1) / LOCATE_MAX)))
        grid = list(range(lo, top + 1, stride))
        if grid[-1] != top:
            grid.append(top)
        rows = run.curve(grid, r_locate, STAGE_LOCATE, 0)
        cand = _crossing(rows, targets)
        cand = top if cand is None else cand
        # the window covers every n the locate stage could not tell from the boundary, plus a pad:
        # |score| <= 3 sqrt(r_locate / R) at the locate stage is about 3 MCSE at the full replicates
        band = _band(rows, targets, cand, LOCATE_Z * math.sqrt(r_locate / R))
        w = max(3, int(math.ceil(precision * cand / 2)), stride)
        return _dense_window(max(lo_n, min(band) - w), min(hi_n, max(band) + w))
    it, a, b, b_checked = 0, lo, hi, False
    while b - a > max(1, int(precision * b / 2)) and it < 8:
        it += 1
        k = min(4, b - a - 1)
        grid = sorted(set(int(round(a + (b - a) * (i + 1) / (k + 1))) for i in range(k)) - {a, b})
        if not b_checked:
            grid.append(b)  # the pilot's passing n, once more on more replicates
        if not grid:
            break
        rows = run.curve(grid, r_locate, STAGE_LOCATE, it)
        if not b_checked:
            b_checked = True
            if not targets.passes(rows[-1]) and b < hi_n:
                a, b, b_checked = b, min(hi_n, 2 * b), False
                continue
            grid, rows = grid[:-1], rows[:-1]
            if not grid:
                continue
        ok = [targets.passes(r) for r in rows]
        new_b = b
        for g, o in zip(reversed(grid), reversed(ok)):
            if not o:
                break
            new_b = g
        fails_below = [g for g, o in zip(grid, ok) if not o and g < new_b]
        a, b = (max(fails_below) if fails_below else a), new_b
    return _sparse_window(b, max(1, int(math.ceil(precision * b / 2))), lo_n, hi_n)


def _sim_confirm(run: _Runner, win: list[int], budget: int, precision: float, **ctx):
    """Fresh replicates on the win, doubled (pooled) where the decision is not yet clear."""
    targets, lo_n, hi_n, R = ctx["targets"], ctx["lo_n"], ctx["hi_n"], ctx["R"]
    rnd = moves = 0
    pooled: dict[int, CheckResult] = {}
    reps = R
    while True:
        for r in run.curve(win, reps, rngmod.STAGE_CONFIRM, rnd):
            pooled[r.n] = r if r.n not in pooled else _pool(pooled[r.n], r)
        rnd += 1
        ana = _analyse([pooled[k] for k in win], targets, lo_n, hi_n, precision)
        ev = _evidence(run, pooled, targets, lo_n, hi_n, precision)
        if ana["clear"] and ev["clear"]:
            return pooled, win, "decision clear"
        if ana["clear"]:
            # the window looks settled, but n below it are not yet told from the boundary
            # (a flat curve): extend the window towards them
            ana["extend"] = (ev["low"] < win[0], False)
        # widening pays while n_range could still come out narrow enough, or (before any doubling)
        # when nothing below the window fails clearly yet: a flat curve, look lower first
        below_open = ana["extend"][0] and ev["low"] < win[0]
        widen = any(ana["extend"]) and ana["n_range"] is not None and (
            ana["clear"] or below_open
            or ana["n_range"][1] - ana["n_range"][0] <= max(1, round(precision * ana["n"])))
        new = None
        if moves < MAX_SHIFTS and (ana["shift"] or widen):
            new = _move(win, ana["shift"], ana["extend"], lo_n, hi_n, run.dense, precision)
        if new is not None and new != win:
            moves += 1
            # n not yet confirmed start at R; the others keep to the doubling schedule
            next_reps = max(R, min((pooled[k].replicates for k in new if k in pooled), default=R))
        else:
            new = win
            next_reps = max(pooled[k].replicates for k in win)  # doubling: match the pooled total
        if run.used + run.cost(len(new), next_reps) > budget:
            return pooled, win, "replicate budget spent"
        win, reps = new, next_reps


def _evidence(run: _Runner, pooled: dict, targets: _Targets, lo_n: int, hi_n: int, precision: float) -> dict:
    """n_range from every simulated evaluation of the search, each n at its best-supported row.

    ``low`` is one above the largest n that clearly fails (score < -2);
    ``high`` the smallest larger n that clearly passes (score > +2), ``n_max``
    when none does. Rows in between, or above ``high`` without a clear
    fail, are consistent with the boundary lying anywhere in ``[low, high]``:
    no n the evidence cannot tell from the boundary is left out.
    """
    best: dict[int, CheckResult] = {}
    for r in run.rows:
        if not r.exact and (r.n not in best or r.replicates > best[r.n].replicates):
            best[r.n] = r
    best.update(pooled)
    ns = sorted(best)
    z = {k: targets.score(best[k]) for k in ns}
    # many n scored at once: a bar against chance extremes among them (Bonferroni, two-sided 5 %,
    # over the confirmed n; the exploration's up to LOCATE_MAX n on few replicates: EXPLORE_Z)
    z_conf = max(CLEAR_Z, float(stats.norm.isf(0.025 / max(1, len(pooled)))))
    bar = {k: z_conf if k in pooled else EXPLORE_Z for k in ns}
    fails = [k for k in ns if z[k] < -bar[k]]
    low = max(fails) + 1 if fails else lo_n
    high = next((k for k in ns if k >= low and z[k] > bar[k]), None)
    high_found = high is not None
    high = hi_n if high is None else high
    low_found = True
    n_first = next((k for k in ns if targets.passes(best[k])), None)
    width_ok = high - low <= max(1, round(precision * high))
    return {"low": low, "high": high, "clear": high_found and low_found and width_ok, "rows": best,
            "high_found": high_found, "n_first": n_first}


def _replicates_needed(ev: dict, precision: float) -> int:
    """Replicates per n that would likely narrow n_range to the precision (MCSE ~ 1/sqrt(R))."""
    at = ev["rows"].get(ev["high"])
    reps = at.replicates if at is not None else max(r.replicates for r in ev["rows"].values())
    width = max(1, ev["high"] - ev["low"])
    goal = max(1, round(precision * ev["high"]))
    need = reps * max(2.0, (width / goal) ** 2)
    return int(math.ceil(need / 1000.0) * 1000)


def _sim_undecided(run: _Runner, ev: dict, cur: list, stop: str, budget: int, precision: float,
                   **ctx) -> SearchResult:
    """No evaluated n meets the targets clearly: no n is claimed, the range and the budget are said."""
    low, hi_n = ev["low"], ctx["hi_n"]
    notes = [f"undecided: no evaluated n meets the targets clearly (by {CLEAR_Z:g} MCSE or more) before the replicate "
             f"budget ({budget}) was spent; the boundary may lie anywhere from n = {low} to n_max = {hi_n}; "
             "raise the replicates or the budget (see replicates_needed)"]
    if ev["n_first"] is not None:
        notes.append(f"the point estimates first meet the targets at n = {ev['n_first']}")
    at = max(cur, key=lambda r: (ctx["targets"].score(r), r.n))  # the best-supported n of the window
    return _result(run, design=ctx["design"], targets_d=ctx["targets_d"], nf=ctx["nf"], seed=ctx["seed"], n=None,
                   reached=False, n_range=(low, hi_n), at=at, best=at, stop="replicate budget spent", exact=False,
                   n_first=ev["n_first"], notes=notes, curve_rows=cur, decision="undecided",
                   replicates_needed=_replicates_needed(ev, precision))


def _sim_conclude(run: _Runner, pooled: dict, win: list[int], stop: str, budget: int, precision: float,
                  **ctx) -> SearchResult:
    """n (the conservative end of n_range), the decision and the notes."""
    design, targets, lo_n, hi_n = ctx["design"], ctx["targets"], ctx["lo_n"], ctx["hi_n"]
    ev = _evidence(run, pooled, targets, lo_n, hi_n, precision)
    cur = [pooled[k] for k in win]
    if not ev["high_found"] and not any(targets.passes(r) for r in cur) and win[-1] >= hi_n:
        return _not_reached(run, ctx, cur[-1], ev["n_first"])
    if not ev["high_found"]:
        return _sim_undecided(run, ev, cur, stop, budget, precision, **ctx)
    low, n = ev["low"], ev["high"]
    decision = "clear" if ev["clear"] else "undecided"
    at = ev["rows"].get(n) or run.curve([n], ctx["R"], rngmod.STAGE_CONFIRM, 99)[0]
    notes = _formula_note(ctx["nf"], n)
    if decision == "undecided":
        notes.insert(0, f"undecided: the Monte Carlo error cannot tell n = {low}..{n} from the boundary; "
                        f"n = {n} is the conservative end (every evaluated n from it on meets the targets clearly)")
    notes.append(f"{at.replicates} replicates at n; n_range {low}-{n}: the n the Monte Carlo error cannot tell "
                 "from the boundary, over every n the search evaluated")
    if stop == "replicate budget spent":
        notes.append(f"replicate budget ({budget}) spent before the decision was clear "
                     f"(n_range wider than {max(1, round(precision * n))}); raise the budget or the replicates")
    if ev["n_first"] is not None and ev["n_first"] != n:
        notes.append(f"the point estimates first meet the targets at n = {ev['n_first']}; "
                     f"n = {n} is the smallest n meeting them clearly there and at every larger n evaluated")
    below = [r for k, r in sorted(ev["rows"].items()) if k < n and not targets.passes(r)]
    if below:
        notes.append(f"at n = {below[-1].n} the targets are missed: {'; '.join(targets.failing(below[-1]))}")
    return _result(run, design=design, targets_d=ctx["targets_d"], nf=ctx["nf"], seed=ctx["seed"], n=n,
                   reached=True, n_range=(low, n), at=at, stop=stop, exact=False, n_first=ev["n_first"],
                   notes=notes, curve_rows=cur + [at], decision=decision,
                   replicates_needed=None if decision == "clear" else _replicates_needed(ev, precision))


def _crossing(rows: Sequence[CheckResult], targets: _Targets) -> int | None:
    """Smallest n from which every row passes (rows in increasing n)."""
    n = None
    for r in reversed(rows):
        if targets.passes(r):
            n = r.n
        else:
            break
    return n


def _band(rows: Sequence[CheckResult], targets: _Targets, cand: int, lz: float) -> list[int]:
    """The n next to ``cand`` (contiguous on the grid) whose scores lie within +-lz."""
    ns = [r.n for r in rows]
    z = [targets.score(r) for r in rows]
    i = min(range(len(ns)), key=lambda k: abs(ns[k] - cand))
    a = b = i
    while a > 0 and z[a - 1] > -lz:
        a -= 1
    while b < len(ns) - 1 and z[b + 1] < lz:
        b += 1
    return [ns[a], ns[b], cand]


def _sparse_window(c: int, w: int, lo_n: int, hi_n: int) -> list[int]:
    pts = {c - w, c - 1, c, c + w}
    return sorted(p for p in pts if lo_n <= p <= hi_n)


def _dense_window(a: int, b: int) -> list[int]:
    """Every n of [a, b], thinned to at most DENSE_MAX values (ends kept)."""
    stride = max(1, int(math.ceil((b - a + 1) / DENSE_MAX)))
    w = list(range(a, b + 1, stride))
    if w[-1] != b:
        w.append(b)
    return w


def _move(window: list[int], shift: int, extend: tuple[bool, bool], lo_n: int, hi_n: int,
          dense: bool, precision: float) -> list[int] | None:
    """The next confirmation window: moved (shift -1/+1) or widened at the open ends."""
    a, b = window[0], window[-1]
    width = max(3, b - a)
    if shift > 0:
        a, b = b - width // 4, b + width
    elif shift < 0:
        a, b = a - width, a + width // 4
    else:
        step = max(3, width // 2)
        if extend[0]:
            a = a - step
        if extend[1]:
            b = b + step
    a, b = max(lo_n, a), min(hi_n, b)
    if b <= a:
        return None
    if dense:
        return _dense_window(a, b)
    pts = set(window) | {a, b}
    if shift:
        c = (a + b) // 2
        pts = set(_sparse_window(c, max(1, int(math.ceil(precision * c / 2))), lo_n, hi_n)) | {a, b}
    return sorted(p for p in pts if lo_n <= p <= hi_n)


def _analyse(rows: Sequence[CheckResult], targets: _Targets, lo_n: int, hi_n: int, precision: float) -> dict:
    """n, n_first, n_range and whether the decision is clear, from confirmation rows."""
    ns = [r.n for r in rows]
    ok = [targets.passes(r) for r in rows]
    z = [targets.score(r) for r in rows]
    n = _crossing(rows, targets)
    n_first = next((r.n for r, o in zip(rows, ok) if o), None)
    out: dict[str, Any] = {"n": n, "n_first": n_first, "shift": 0, "clear": False, "n_range": None,
                           "extend": (False, False), "truncated": False}
    if n is None:
        out["shift"] = +1 if ns[-1] < hi_n else 0
        return out
    if n == ns[0] and ns[0] > lo_n and z[0] > CLEAR_Z:
        # every n of the window passes clearly: the crossing lies below it
        out["shift"] = -1
    fails = [k for k, s in zip(ns, z) if k < n and s < -CLEAR_Z]
    if fails:
        low, low_found = max(fails) + 1, True
    else:
        low, low_found = ns[0], ns[0] <= lo_n
    high, high_found = ns[-1], False
    for k, s in zip(reversed(ns), reversed(z)):
        if k < n or s <= CLEAR_Z:
            break
        high, high_found = k, True
    if not high_found and ns[-1] >= hi_n:
        high_found = True
    high = max(high, n)
    low = min(low, n)
    out["n_range"] = (int(low), int(high))
    out["extend"] = (not low_found, not high_found)
    out["truncated"] = not (low_found and high_found)
    out["clear"] = low_found and high_found and (high - low) <= max(1, round(precision * n))
    return out


# --------------------------------------------------------------------------
# several methods
# --------------------------------------------------------------------------
def compare(design: Design, methods: Sequence[str], **kwargs: Any) -> MethodComparison:
    """:func:`find_n` for each method on the same random streams.

    Parameters
    ----------
    design : Design
        The design; its method is replaced by each of ``methods``.
    methods : sequence of str
        Interval method names for ``design.estimand``.
    **kwargs
        As for :func:`find_n` (``rng`` is resolved once, so every method sees
        the same streams: common random numbers).

    Returns
    -------
    MethodComparison
        ``best`` is the method needing the least n among those that reach
        the targets (ties broken by higher coverage at n); None if none does.
    """
    if not methods:
        raise InputError("method.interval", "compare needs at least one method")
    root, seed = rngmod.root_sequence(kwargs.pop("rng", None))
    kwargs.setdefault("listed", tuple(methods))
    out = [find_n(design.with_method(m), rng=root, **kwargs) for m in methods]
    reached = [r for r in out if r.reached and r.n is not None]
    best = None
    if reached:
        best = min(reached, key=lambda r: (r.n, -(r.coverage or 0.0))).method
    return MethodComparison(by_method=tuple(out), best=best)
