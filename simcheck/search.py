"""The smallest n that meets the coverage and assurance targets, under Monte Carlo noise.

Targets. An n *passes* when its coverage is at least ``confidence -
coverage_tolerance`` and (when the design has a target margin) its assurance,
the share of samples whose half-width is at most the margin, is at least the
``assurance`` target. The answer ``n`` is the smallest n from which every
larger evaluated n passes (discrete data can make coverage oscillate in n;
``n_first``, the first passing n, is reported when it differs).

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
  below -2 and *clearly passes* when above +2;
* ``n_range = [low, high]``: ``low`` is one above the largest confirmed n
  below the answer that clearly fails, ``high`` the smallest confirmed n
  from which every confirmed n clearly passes. These are the n consistent
  with the Monte Carlo error: the boundary may lie anywhere in between;
* the decision is *clear* when both ends of ``n_range`` were found inside the
  confirmation window (or at ``n_min`` / ``n_max``) and
  ``high - low <= max(1, round(precision * n))`` (default precision 0.1:
  n is pinned down to about +-5 %; planning inputs such as an SD or CV are
  rarely known better). With the example of a steep boundary
  (n - 1 fails and n passes, each by more than 2 MCSE) ``n_range`` is
  ``[n, n]``.

Exact paths (proportion methods on iid 0/1 data by binomial enumeration;
normal data with z or t) have no Monte Carlo error: the answer is exact,
``n_range = [n, n]``. Binomial enumeration scans every n from ``n_min`` to
``n_max`` (up to :data:`EXACT_SCAN_MAX` values), so the answer is the
smallest n from which the target holds for every larger n up to ``n_max``.

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

from simcheck import engine
from simcheck import rng as rngmod
from simcheck.design import Design
from simcheck.errors import Collector, InputError
from simcheck.intervals import get_method
from simcheck.results import CheckResult, CurveResult, MethodComparison, SearchResult

__all__ = ["formula_n", "find_n", "compare", "EXACT_SCAN_MAX"]

#: at most this many n values are enumerated exactly in one binomial scan
EXACT_SCAN_MAX = 10_000
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
    kw: dict[str, Any] = {"confidence": design.confidence, "multiplier": "z"}
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
    except (InputError, ValueError, ZeroDivisionError, OverflowError, TypeError):
        return None
    n = res.clusters if cl is not None else res.n
    return None if n is None else (res, int(n))


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
    ra, rb = a.replicates, b.replicates
    R = ra + rb

    def w(x, y):
        if x is None or y is None:
            return None
        return (x * ra + y * rb) / R

    cov = w(a.coverage, b.coverage)
    ass = w(a.assurance, b.assurance)
    vals = None
    med, p90 = w(a.margin_median, b.margin_median), w(a.margin_p90, b.margin_p90)
    if a.margin_values is not None and b.margin_values is not None:
        vals = np.concatenate([a.margin_values, b.margin_values])
        if vals.size:
            med, p90 = (float(v) for v in np.quantile(vals, [0.5, 0.9]))
    notes = list(a.notes)
    notes += [t for t in b.notes if t not in notes]
    return replace(
        a,
        replicates=R,
        coverage=float(cov),
        coverage_mcse=engine.mcse(cov, R),
        miss_low=float(w(a.miss_low, b.miss_low)),
        miss_high=float(w(a.miss_high, b.miss_high)),
        margin_mean=float(w(a.margin_mean, b.margin_mean)),
        margin_median=float(med),
        margin_p90=float(p90),
        assurance=None if ass is None else float(ass),
        assurance_mcse=None if ass is None else engine.mcse(ass, R),
        degenerate=a.degenerate + b.degenerate,
        notes=tuple(notes),
        margin_values=vals,
        margin_weights=None,
    )


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
    return get_method(design.estimand, design.method).kind in ("sample", "sample2")


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
    c.raise_if_any()
    exact, dense = _dense_paths(design, path)
    if budget is None:
        # n-by-n searches confirm about four n per round
        budget = RESAMPLING_BUDGET * R if _resampling(design) else 20 * R * (1 if dense else 4)
    budget = int(budget)

    method = get_method(design.estimand, design.method)
    floor = 1 if method.kind in ("count", "count2") else 2
    lo_n = max(lo_n, floor)
    while design.two_sample and design.n_b(lo_n) < floor:
        lo_n += 1
    if hi_n <= lo_n:
        raise InputError("n_max", f"must be > {lo_n} (the smallest n the {design.method} interval accepts here), got {n_max}")

    root, seed = rngmod.root_sequence(rng)
    if seed is None and not root.spawn_key and isinstance(root.entropy, int):
        seed = int(root.entropy)
    targets = _Targets(design.confidence, tol, a_t if design.margin is not None else None)
    targets_d = {
        "confidence": design.confidence,
        "coverage_tolerance": tol,
        "coverage_target": targets.coverage,
        "margin": design.margin,
        "assurance": targets.assurance,
    }
    nf = formula_n(design)
    start = nf if nf is not None else DEFAULT_START
    start = min(max(start, lo_n), hi_n)
    run = _Runner(design, root, path, progress, dense)
    if not exact and (design.clusters is not None or design.population is not None) and path in ("auto", "exact"):
        # the clustered engine decides exactness itself: ask it once, cheaply
        exact = run.curve([start], min(R, 100), STAGE_BRACKET, 0)[0].exact
    ctx = dict(design=design, targets=targets, targets_d=targets_d, nf=nf, seed=seed, lo_n=lo_n, hi_n=hi_n, R=R)
    if exact:
        return _exact_search(run, start, **ctx)
    return _simulated_search(run, start, budget, precision, **ctx)


def _result(run: _Runner, *, design, targets_d, nf, seed, n, reached, n_range, at, stop, exact,
            n_first=None, notes=(), curve_rows=None, best=None, others=()) -> SearchResult:
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
        n_first=n_first if (n_first is not None and n_first != n) else None,
        stop_reason=stop,
        exact=exact,
        best_coverage=None if best is None else best.coverage,
        best_coverage_n=None if best is None else best.n,
        methods_that_reach=tuple(others),
        notes=tuple(notes),
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
        notes.append(f"methods that reach the targets at n = {hi_n}: {', '.join(others)}")
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
        if m.kind in ("sample", "sample2"):
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
    design, targets, lo_n, hi_n = ctx["design"], ctx["targets"], ctx["lo_n"], ctx["hi_n"]
    # counts (binomial, beta-binomial, hypergeometric) make coverage oscillate in n
    scan = design.estimand == "proportion"
    notes: list[str] = []
    if scan:
        # binomial coverage oscillates in n: enumerate every n up to the ceiling
        top = min(hi_n, lo_n + EXACT_SCAN_MAX - 1)
        if top < hi_n:
            notes.append(f"exact enumeration covered n = {lo_n}..{top}; 'for every larger n' is checked up to {top}")
        rows = run.curve(range(lo_n, top + 1), 1, 0)
        ok = np.array([targets.passes(r) for r in rows])
        ns = np.array([r.n for r in rows])
        n_first = int(ns[ok][0]) if ok.any() else None
        n = None
        if ok[-1]:
            bad = np.flatnonzero(~ok)
            n = int(ns[bad[-1] + 1]) if bad.size else int(ns[0])
        if n is None:
            return _not_reached(run, ctx, rows[-1], n_first)
        at = rows[int(n - ns[0])]
        if n_first is not None and n_first != n:
            notes.append(
                f"coverage oscillates in n (discrete data): the targets first hold at n = {n_first}, "
                f"but hold for every n up to n_max = {top} only from n = {n}; n is the latter"
            )
        if n_first != n and top - n < max(10, 0.1 * (top - lo_n)):
            notes.append(
                f"n = {n} lies close to the search ceiling n_max = {top}: the 'every larger n' rule was "
                "checked only that far; raise simulation.n_max to see whether the targets keep holding"
            )
        notes = _formula_note(ctx["nf"], n) + notes
        return _result(run, design=design, targets_d=ctx["targets_d"], nf=ctx["nf"], seed=ctx["seed"], n=n,
                       reached=True, n_range=(n, n), at=at, stop="exact", exact=True, n_first=n_first,
                       notes=notes, curve_rows=rows)

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
    # a short exact window for figures and to see an earlier pass, if any
    win = run.curve(range(max(lo_n, n - 20), min(hi_n, n + 5) + 1), 1, 0)
    n_first = next((r.n for r in win if targets.passes(r)), n)
    if n_first != n:
        notes.append(f"the targets first hold at n = {n_first}, and for every larger n checked from n = {n}")
    notes = _formula_note(ctx["nf"], n) + notes
    notes.append("exact: computed from the exact law of the sample mean and variance (no Monte Carlo error)")
    return _result(run, design=design, targets_d=ctx["targets_d"], nf=ctx["nf"], seed=ctx["seed"], n=n,
                   reached=True, n_range=(n, n), at=ev(n), stop="exact", exact=True, n_first=n_first,
                   notes=notes, curve_rows=win)


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
    design, targets, lo_n, hi_n, R = ctx["design"], ctx["targets"], ctx["lo_n"], ctx["hi_n"], ctx["R"]
    r_pilot = max(min(R, 200), R // 10)
    r_locate = max(min(R, 500), R // 8)
    notes: list[str] = []

    # -- bracket (pilot replicates, one stream per step)
    step = [0]

    def pilot(n: int) -> bool:
        step[0] += 1
        return targets.passes(run.curve([n], r_pilot, STAGE_BRACKET, step[0])[0])

    top_checked: CheckResult | None = None
    if not pilot(start):
        lo = start
        while True:
            m = min(hi_n, lo * 2)
            if pilot(m):
                hi = m
                break
            if m == hi_n:
                # the ceiling fails on the pilot: check it on full, fresh replicates
                top_checked = run.curve([hi_n], R, rngmod.STAGE_CONFIRM, 0)[0]
                if not targets.passes(top_checked):
                    extra = []
                    if targets.score(top_checked) > -CLEAR_Z:
                        extra.append(f"at n_max the shortfall is within {CLEAR_Z:g} MCSE: more replicates may show it reached")
                    return _not_reached(run, ctx, top_checked, None, extra)
                hi = hi_n
                break
            lo = m
    else:
        hi, lo = start, None
        while hi > lo_n:
            m = max(lo_n, hi // 2)
            if pilot(m):
                hi = m
            else:
                lo = m
                break
    if lo is None:
        lo = lo_n  # lo_n passes on the pilot; the window starts there

    # -- locate (an eighth of the replicates)
    if run.dense:
        top = min(hi_n, max(hi + 1, int(math.ceil(hi * 1.1))))
        span = top - lo + 1
        stride = max(1, int(math.ceil(span / LOCATE_MAX)))
        grid = list(range(lo, top + 1, stride))
        if grid[-1] != top:
            grid.append(top)
        rows = run.curve(grid, r_locate, STAGE_LOCATE, 0)
        cand = _crossing(rows, targets)
        if cand is None:
            cand = top
        # the window covers every n the locate stage could not tell from the
        # boundary, plus a pad: |score| <= 3 sqrt(r_locate / R) at the locate
        # stage is about 3 MCSE at the full replicates
        lz = LOCATE_Z * math.sqrt(r_locate / R)
        band = _band(rows, targets, cand, lz)
        w = max(3, int(math.ceil(precision * cand / 2)), stride)
        window = _dense_window(max(lo_n, min(band) - w), min(hi_n, max(band) + w))
    else:
        it = 0
        a, b = lo, hi
        b_checked = False
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
                if o:
                    new_b = g
                else:
                    break
            fails_below = [g for g, o in zip(grid, ok) if not o and g < new_b]
            a = max(fails_below) if fails_below else a
            b = new_b
        cand = b
        w = max(1, int(math.ceil(precision * cand / 2)))
        window = _sparse_window(cand, w, lo_n, hi_n)

    # -- confirm on fresh replicates, doubling until clear or the budget is spent
    rnd = 0
    moves = 0
    pooled: dict[int, CheckResult] = {}
    reps = R
    stop = ""
    while True:
        rows = run.curve(window, reps, rngmod.STAGE_CONFIRM, rnd)
        rnd += 1
        for r in rows:
            pooled[r.n] = r if r.n not in pooled else _pool(pooled[r.n], r)
        cur = [pooled[k] for k in window]
        ana = _analyse(cur, targets, lo_n, hi_n, precision)
        if ana["clear"]:
            stop = "decision clear"
            break
        # widening only pays while n_range could still come out narrow enough
        widen = any(ana["extend"]) and ana["n_range"] is not None and (
            ana["n_range"][1] - ana["n_range"][0] <= max(1, round(precision * ana["n"])))
        new = None
        if moves < MAX_SHIFTS and (ana["shift"] or widen):
            # the crossing or an end of n_range lies outside the window: move or widen it
            new = _move(window, ana["shift"], ana["extend"], lo_n, hi_n, run.dense, precision)
        if new is not None and new != window:
            moves += 1
            # n not yet confirmed start at R; the others keep to the doubling schedule
            next_reps = max(R, min((pooled[k].replicates for k in new if k in pooled), default=R))
        else:
            new = window
            next_reps = max(pooled[k].replicates for k in window)  # doubling: match the pooled total
        if run.used + run.cost(len(new), next_reps) > budget:
            stop = "replicate budget spent"
            break
        window, reps = new, next_reps
    cur = [pooled[k] for k in window]
    ana = _analyse(cur, targets, lo_n, hi_n, precision)
    n = ana["n"]
    if n is None:
        # no n of the window holds the targets on the confirmation
        if window[-1] >= hi_n:
            return _not_reached(run, ctx, cur[-1], ana["n_first"])
        above = [r for r in run.rows if r.n > window[-1] and targets.passes(r)]
        if not above:
            return _result(run, design=design, targets_d=ctx["targets_d"], nf=ctx["nf"], seed=ctx["seed"], n=None,
                           reached=False, n_range=None, at=None, stop="replicate budget spent", exact=False,
                           notes=[f"undecided: the replicate budget ({budget}) was spent before any n was confirmed "
                                  f"to meet the targets (none of n = {window[0]}..{window[-1]} does on the "
                                  "confirmation); the targets may still be reached at a larger n: raise the budget"],
                           curve_rows=cur)
        best_above = min(above, key=lambda r: (r.n, -r.replicates))
        n = best_above.n
        pooled[n] = best_above
        notes.append("the confirmation found no passing n inside its window before the budget was spent; "
                     f"n = {n} is the smallest larger n that passed in the exploration, and is uncertain")
        ana["n_range"] = (window[-1] + 1, n)
        ana["truncated"] = True
    if ana["truncated"]:
        notes.append(f"n_range reaches the edge of the confirmed window ({window[0]}-{window[-1]}): "
                     "the n consistent with the Monte Carlo error may extend beyond it")
    pooled_rows = cur
    at = pooled[n]
    low, high = ana["n_range"]
    notes = _formula_note(ctx["nf"], n) + notes
    total = at.replicates
    notes.append(
        f"confirmed on {total} fresh replicates per n, independent of the exploration stages; "
        f"n_range {low}-{high}: n whose coverage/assurance are within {CLEAR_Z:g} MCSE of the targets"
    )
    if stop == "replicate budget spent":
        notes.append(f"replicate budget ({budget}) spent before the decision was clear "
                     f"(n_range wider than {max(1, round(precision * n))}); raise the budget or the replicates")
    if ana["n_first"] is not None and ana["n_first"] != n:
        notes.append(
            f"the targets first hold at n = {ana['n_first']} but hold for every larger confirmed n only from n = {n}"
            " (coverage oscillates in n); n is the latter"
        )
    below = [r for r in pooled_rows if r.n < n and not targets.passes(r)]
    if below:
        r = below[-1]
        notes.append(f"at n = {r.n} the targets are missed: {'; '.join(targets.failing(r))}")
    return _result(run, design=design, targets_d=ctx["targets_d"], nf=ctx["nf"], seed=ctx["seed"], n=n,
                   reached=True, n_range=(low, high), at=at, stop=stop, exact=False, n_first=ana["n_first"],
                   notes=notes, curve_rows=pooled_rows)


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
    out = [find_n(design.with_method(m), rng=root, **kwargs) for m in methods]
    reached = [r for r in out if r.reached and r.n is not None]
    best = None
    if reached:
        best = min(reached, key=lambda r: (r.n, -(r.coverage or 0.0))).method
    return MethodComparison(by_method=tuple(out), best=best)
