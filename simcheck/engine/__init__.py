"""Coverage and achieved margin of an interval method, at one n or along a curve.

The engine's public face. :func:`check` and :func:`curve` validate what every
design shares, then hand the design to its *design kind* (see
:mod:`simcheck.engine.kinds`):

``simple`` (:mod:`simcheck.engine.simple`)
    simple random samples: exact laws, sufficient statistics, nested curves
    and plain simulation;
``clustered`` / ``population`` (:mod:`simcheck.engine.clustered`)
    clustered samples and samples without replacement from a finite population;
``selection`` (:mod:`simcheck.engine.pps`)
    selection with probability proportional to size, with replacement
    (Hansen-Hurwitz; monetary-unit sampling and its upper limits).
``raw`` (:mod:`simcheck.engine.raw`)
    the estimands of :mod:`simcheck.estimands` (median, SD, rates, ratios,
    correlation, ...), whose methods take the drawn values.

Every evaluator turns interval limits into measures through
:mod:`simcheck.engine.measures`; exact enumerations live in
:mod:`simcheck.engine.exact`.

References
----------
.. [1] Morris, T. P., White, I. R. & Crowther, M. J. (2019). Using simulation
   studies to evaluate statistical methods. Statistics in Medicine 38,
   2074-2102 (Monte Carlo standard errors of coverage-type measures).
"""

from __future__ import annotations

from typing import Callable, Iterable

import numpy as np

from simcheck import rng as rngmod
from simcheck.design import Design
from simcheck.engine import clustered, onesided, pps, raw, simple, stratified
from simcheck.engine.kinds import KINDS, DesignKind, kind_for, register_kind
from simcheck.engine.measures import share_mcse
from simcheck.engine.simple import CHUNK_BYTES, PATHS, block_size, piece_rows, unit_rows
from simcheck.errors import InputError
from simcheck.intervals import get_method
from simcheck.results import CheckResult, CurveResult
from simcheck.threads import thread_count

Progress = Callable[[int, int], None] | None

#: Largest number of (x_a, x_b) outcome pairs the exact two-proportion
#: enumeration may hold (about 100 bytes each while it runs, measured: 0.5 GB).
EXACT2_PAIRS_MAX = 5_000_000

register_kind(DesignKind("selection", pps.applies, pps.available_paths, pps.evaluate, self_contained=True))
register_kind(DesignKind("raw", raw.applies, raw.available_paths, raw.evaluate))
register_kind(DesignKind("stratified", stratified.applies, stratified.available_paths, stratified.evaluate))
register_kind(DesignKind("clustered-or-population", clustered.applies, clustered.available_paths, clustered.evaluate))
register_kind(DesignKind("simple", simple.applies, simple.available_paths, simple.evaluate, fallback=True))

__all__ = [
    "check", "curve", "available_paths", "exact_kind", "mcse", "PATHS", "CHUNK_BYTES", "EXACT2_PAIRS_MAX",
    "block_size", "piece_rows", "unit_rows", "KINDS", "DesignKind", "register_kind", "kind_for",
]


# --------------------------------------------------------------------------
# public API
# --------------------------------------------------------------------------
def check(
    design: Design,
    n: int,
    *,
    replicates: int = 10_000,
    rng: rngmod.RngLike = None,
    path: str = "auto",
    progress: Progress = None,
    chunk_bytes: int = CHUNK_BYTES,
    threads: int | None = None,
) -> CheckResult:
    """Coverage, misses, achieved margin and assurance of ``design`` at ``n``.

    Parameters
    ----------
    design : Design
        Data model(s), estimand, interval method, confidence, target margin.
    n : int
        Sample size of group a (two-sample: group b has ``design.n_b(n)``).
    replicates : int
        Number of simulated samples (ignored by the exact path).
    rng : int, SeedSequence or Generator, optional
        Root of all random streams (SPEC 7).
    path : {"auto", "exact", "sufficient", "full"}
        Computation path; "auto" takes the cheapest valid one.
    progress : callable, optional
        ``progress(done, total)`` called after each chunk of replicates.
    chunk_bytes : int
        Memory budget of one chunk's draw buffer; does not change results.
    threads : int, optional
        Threads for this computation; default ``SIMCHECK_THREADS``, else the
        cores available to the process. Does not change results.

    Returns
    -------
    CheckResult

    References
    ----------
    .. [1] Morris, White & Crowther (2019), Statistics in Medicine 38:2074-2102.
    """
    rows = _evaluate(design, [n], replicates, rng, path, progress, chunk_bytes, curve=False, threads=threads)
    return rows[0]


def curve(
    design: Design,
    n_values: Iterable[int],
    *,
    replicates: int = 10_000,
    rng: rngmod.RngLike = None,
    path: str = "auto",
    progress: Progress = None,
    chunk_bytes: int = CHUNK_BYTES,
    threads: int | None = None,
) -> CurveResult:
    """:func:`check` for every n in ``n_values`` (sorted, duplicates dropped).

    Methods that work on sufficient statistics share one nested draw of the
    largest n (common random numbers); bootstrap methods are evaluated at
    each n separately, so give them a coarse grid.
    """
    ns = sorted({_as_n(v) for v in n_values})
    if not ns:
        raise InputError("n", "no sample sizes to evaluate")
    rows = _evaluate(design, ns, replicates, rng, path, progress, chunk_bytes, curve=True, threads=threads)
    return CurveResult(rows=tuple(rows))


def available_paths(design: Design) -> list[str]:
    """The paths valid for ``design``, cheapest first."""
    return kind_for(design).available_paths(design)


# --------------------------------------------------------------------------
# dispatch
# --------------------------------------------------------------------------
def exact_kind(design: Design) -> str | None:
    """Which exact law evaluates ``design`` (``"binomial"``, ``"binomial2"``,
    ``"normal1"``, ``"normal2"``), or None; simple random samples only."""
    return simple.exact_kind_for(design, get_method(design.estimand, design.method))


def mcse(share: float, replicates: int) -> float:
    """Monte Carlo SE of a share (Morris, White & Crowther 2019)."""
    return share_mcse(share, replicates)


def _as_n(v) -> int:
    if isinstance(v, bool) or not float(v).is_integer():
        raise InputError("n", f"must be a whole number, got {v!r}")
    return int(v)


def _exact_pairs_cap(design: Design, ns, path: str) -> None:
    # Refused before any work: the double enumeration holds every outcome pair
    # it keeps (binomial tails below exact.TAIL_TRIM are left out) at once.
    if path not in ("auto", "exact") or design.clusters is not None or design.population is not None:
        return
    if exact_kind(design) != "binomial2" or "exact" not in available_paths(design):
        return
    from scipy import stats

    from simcheck.engine.exact import TAIL_TRIM

    pa, pb = design.model.bernoulli_p(), design.model_b.bernoulli_p()

    def kept(n: int, p: float) -> int:
        if TAIL_TRIM <= 0:
            return n + 1
        lo = stats.binom.ppf(TAIL_TRIM, n, p)
        hi = n - stats.binom.ppf(TAIL_TRIM, n, 1.0 - p)
        return int(max(hi - lo, 0)) + 1

    n = max(ns)
    pairs = kept(n, pa) * kept(design.n_b(n), pb)
    if pairs > EXACT2_PAIRS_MAX:
        raise InputError(
            "n",
            f"the exact enumeration of two proportions at n = {n} (n_b = {design.n_b(n)}) would hold about "
            f"{pairs:.2g} outcome pairs in memory, over the limit of {EXACT2_PAIRS_MAX:.0e} (about 0.5 GB); "
            f"use a smaller n (simulation.n_max, --n-max, --n) or simulate (simulation.path = \"nested\" or \"full\")",
        )


def _evaluate(design, ns, replicates, rng, path, progress, chunk_bytes, curve, threads=None):
    if path not in PATHS:
        raise InputError("simulation.path", f"must be one of {', '.join(PATHS)}, got {path!r}")
    if isinstance(replicates, bool) or not isinstance(replicates, (int, np.integer)) or replicates < 1:
        raise InputError("simulation.replicates", f"must be a whole number >= 1, got {replicates!r}")
    kind = kind_for(design)
    if kind.self_contained:
        rows = kind.evaluate(design, ns, replicates, rng, path, progress, chunk_bytes, curve, thread_count(threads))
        return onesided.finish_rows(design, rows)
    if design.one_sided:
        kind = kind_for(design)
        work = onesided.evaluation_design(design, simple_kind=kind.name == "simple")
        rows = _evaluate(work, ns, replicates, rng, path, progress, chunk_bytes, curve, threads)
        return onesided.finish_rows(design, onesided.one_sided_rows(design, rows))
    if design.strata is None:
        _check_simple_n(design, ns)
        _exact_pairs_cap(design, ns, path)
    n_threads = thread_count(threads)
    rows = kind_for(design).evaluate(design, ns, replicates, rng, path, progress, chunk_bytes, curve, n_threads)
    return onesided.finish_rows(design, rows)


def _check_simple_n(design: Design, ns) -> None:
    """n checks that depend on the registered interval method (every non-stratified design)."""
    method = get_method(design.estimand, design.method)
    min_n = 1 if method.kind in ("count", "count2") else 2
    for n in ns:
        if n < min_n:
            raise InputError("n", f"must be >= {min_n} for the {design.method} interval, got {n}")
    if design.two_sample:
        for n in ns:
            if design.n_b(n) < min_n:
                raise InputError("simulation.ratio", f"gives group b only {design.n_b(n)} observations at n = {n}")
    if method.kind == "cluster" and design.clusters is None:
        raise InputError("method.interval", f"{design.method!r} needs a [clusters] table (n then counts clusters)")
