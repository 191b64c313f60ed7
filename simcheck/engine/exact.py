"""Exact coverage and achieved-margin measures of proportion intervals by enumeration.

For a binomial count the interval depends only on x, so every measure the
simulation estimates is a finite sum over x = 0..n weighted by the binomial
probabilities: no Monte Carlo error at all. The same holds for two
independent binomials (double sum over (xa, xb)) and for sampling without
replacement from a finite population (hypergeometric weights).

Conventions, shared with the simulation engine:

* coverage counts ``lower <= true <= upper``; ``miss_low`` is the probability
  that the interval lies wholly below the true value (``upper < true``) and
  ``miss_high`` wholly above (``lower > true``);
* the achieved margin is the half-width ``(upper - lower) / 2``;
* ``margin_median`` and ``margin_p90`` are weighted quantiles of the
  half-width under the sampling distribution, defined as the smallest
  support value whose cumulative probability is >= q (q = 0.5, 0.9): the
  inverse-CDF definition (Hyndman & Fan 1996, definition 1), the same as
  on the simulated paths; the cumulative probability is normalised by the
  total weight enumerated;
* ``assurance`` is P(half-width <= margin, not degenerate) (None when no
  margin is given), with a relative allowance of 1e-12 for rounding
  (:data:`MARGIN_RTOL`); ``degenerate_share`` is the probability of a
  zero-width interval that misses the true value, which never counts as
  meeting the margin;
* ``margin_values`` / ``margin_weights`` hold the half-width distribution:
  values in ascending order with their probabilities (ties not merged);
* binomial tails of probability below :data:`TAIL_TRIM` (1e-17 each) are not
  enumerated, which makes large n cheap; the probability left out is
  reported as ``omitted_weight`` (at most 2e-17 per binomial, below the
  rounding of sums near 1, so the measures equal those of the full
  enumeration x = 0..n to floating-point accuracy). Set ``TAIL_TRIM = 0``
  for the full enumeration.

Only :mod:`simcheck.intervals` and scipy are used; no data models.

References
----------
Brown, L. D., Cai, T. T. and DasGupta, A. (2001). Interval estimation for a
binomial proportion. *Statistical Science* 16(2), 101-133 (coverage by
enumeration, section 2).
Newcombe, R. G. (1998). Interval estimation for the difference between
independent proportions: comparison of eleven methods. *Statistics in
Medicine* 17, 873-890 (exact evaluation over the two binomials).
"""

from __future__ import annotations

import functools
from numbers import Integral, Real
from typing import Callable, Iterable, Iterator, NamedTuple

import numpy as np
from scipy import stats

from simcheck.errors import Collector
from simcheck.intervals.base import Method
from simcheck.intervals.law_measures import MARGIN_RTOL, weighted_measures
from simcheck.intervals.law_measures import weighted_quantile as _weighted_quantile

#: Largest number of (x, n) or (xa, xb) cells evaluated at once; bounds memory.
CHUNK_CELLS = 1 << 21
#: Each binomial tail carrying less than this probability is left out of the
#: double enumeration (4 tails: at most 4e-17 in all, below double rounding of
#: sums near 1), which keeps n ~ 5000 per group cheap.
TAIL_TRIM = 1e-17

#: A half-width equal to the margin up to rounding meets it (same rule as the
#: simulation path of the engine).

Interval = Callable[..., tuple[np.ndarray, np.ndarray]]


def _func(method_func: Interval | Method, kind: str, field: str = "method_func") -> Interval:
    if isinstance(method_func, Method):
        if method_func.kind != kind:
            c = Collector()
            c.add(field, f"needs a {kind!r} interval method, got {method_func.name!r} of kind {method_func.kind!r}")
            c.raise_if_any()
        return method_func.func
    if not callable(method_func):
        c = Collector()
        c.add(field, f"must be an interval function or Method, got {method_func!r}")
        c.raise_if_any()
    return method_func


def _check_common(c: Collector, confidence, margin) -> None:
    c.number("confidence", confidence, low=0.0, high=1.0, low_open=True, high_open=True)
    if margin is not None:
        c.number("margin", margin, low=0.0, low_open=True)


def _check_n(c: Collector, field: str, n, low: int = 1) -> None:
    if isinstance(n, bool) or not isinstance(n, (Integral, Real)):
        c.add(field, f"must be a whole number, got {n!r}")
        return
    c.number(field, n, low=low, integer=True)


def _binomial_support(n: np.ndarray, p: float) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Per n: first and last x kept, and the binomial probability left out.

    Drops each tail whose probability is below :data:`TAIL_TRIM`. The upper
    tail is found through the mirrored count n - X ~ Bin(n, 1 - p) because
    ``binom.isf`` is not accurate that far out.
    """
    n = np.asarray(n, dtype=np.int64)
    if TAIL_TRIM <= 0:
        return np.zeros_like(n), n.copy(), np.zeros(n.shape)
    x_lo = stats.binom.ppf(TAIL_TRIM, n, p).astype(np.int64)
    x_hi = n - stats.binom.ppf(TAIL_TRIM, n, 1.0 - p).astype(np.int64)
    x_lo = np.clip(x_lo, 0, n)
    x_hi = np.clip(x_hi, x_lo, n)
    omitted = stats.binom.cdf(x_lo - 1, n, p) + stats.binom.cdf(n - x_hi - 1, n, 1.0 - p)
    return x_lo, x_hi, omitted


# ---------------------------------------------------------------- one binomial


def binomial_curve(
    method_func: Interval | Method,
    n_values: Iterable[int],
    p: float,
    confidence: float,
    margin: float | None = None,
) -> list[dict]:
    """Exact measures of a proportion interval for each n in ``n_values``.

    The interval function is called on all (x, n) cells of many n at once
    (in chunks of at most :data:`CHUNK_CELLS` cells), so a few hundred n up to
    several thousand cost well under a second for the closed-form methods.

    Parameters
    ----------
    method_func : callable or Method
        ``func(x, n, confidence) -> (lower, upper)`` (kind ``count``).
    n_values : iterable of int
        Sample sizes (>= 1).
    p : float
        True proportion in [0, 1].
    confidence : float
        Confidence level in (0, 1).
    margin : float, optional
        Target half-width for the assurance.

    Returns
    -------
    list of dict
        One dict per n, in the order given, with the keys of
        :func:`binomial_measures`.

    References
    ----------
    Brown, Cai and DasGupta (2001), *Statistical Science* 16, 101-133, section 2.
    """
    func = _func(method_func, "count")
    c = Collector()
    try:
        ns = list(n_values)
    except TypeError:
        ns = None
        c.add("n_values", f"must be a list of whole numbers, got {n_values!r}")
    if ns is not None:
        if not ns:
            c.add("n_values", "must not be empty")
        for i, n in enumerate(ns):
            _check_n(c, f"n_values[{i}]", n)
    c.number("p", p, low=0.0, high=1.0)
    _check_common(c, confidence, margin)
    c.raise_if_any()
    ns = [int(n) for n in ns]
    p = float(p)
    margin = None if margin is None else float(margin)

    out: list[dict] = []
    ns_arr = np.asarray(ns, dtype=np.int64)
    x_lo, x_hi, omitted = _binomial_support(ns_arr, p)
    # grouped by the full support n + 1, the trimmed tails still count against a chunk
    for ch in _support_chunks(func, ns_arr, x_lo, x_hi - x_lo + 1, confidence, cost=ns_arr + 1):
        w = stats.binom.pmf(ch.x_cells, ch.n_cells, p)
        for j, n in enumerate(ch.group):
            sl = slice(ch.offsets[j], ch.offsets[j + 1])
            out.append({"n": int(n), "omitted_weight": float(omitted[ch.start + j]),
                        **weighted_measures(ch.lo[sl], ch.hi[sl], w[sl], p, margin)})
    return out


class _Chunk(NamedTuple):
    """Interval limits on the support cells of consecutive n (``group`` = ns[start:stop])."""

    start: int
    group: np.ndarray
    x_lo: np.ndarray  # first x of each n's support
    offsets: np.ndarray  # n j's cells are offsets[j]:offsets[j + 1]
    n_cells: np.ndarray
    x_cells: np.ndarray
    lo: np.ndarray
    hi: np.ndarray


def _support_chunks(func, ns: np.ndarray, x_lo: np.ndarray, sizes: np.ndarray, confidence: float,
                    cost: np.ndarray) -> Iterator[_Chunk]:
    """One vectorised interval call per group of consecutive n, each group at most
    :data:`CHUNK_CELLS` by ``cost`` (or one n alone), on every x of each n's support."""
    start = 0
    while start < ns.size:
        stop, cells = start, 0
        while stop < ns.size and (stop == start or cells + cost[stop] <= CHUNK_CELLS):
            cells += int(cost[stop])
            stop += 1
        group, lo_g, sz = ns[start:stop], x_lo[start:stop], sizes[start:stop]
        offsets = np.concatenate(([0], np.cumsum(sz)))
        n_cells = np.repeat(group, sz)
        x_cells = np.arange(offsets[-1], dtype=np.int64) - np.repeat(offsets[:-1] - lo_g, sz)
        lo, hi = func(x_cells, n_cells, confidence)
        lo = np.broadcast_to(np.asarray(lo, dtype=float), x_cells.shape)
        hi = np.broadcast_to(np.asarray(hi, dtype=float), x_cells.shape)
        yield _Chunk(start, group, lo_g, offsets, n_cells, x_cells, lo, hi)
        start = stop


def binomial_measures(
    method_func: Interval | Method,
    n: int,
    p: float,
    confidence: float,
    margin: float | None = None,
) -> dict:
    """Exact coverage and achieved-margin measures of a proportion interval at one n.

    Enumerates x = 0..n (less tails below :data:`TAIL_TRIM`) with weights
    ``scipy.stats.binom.pmf(x, n, p)``.

    Parameters
    ----------
    method_func : callable or Method
        ``func(x, n, confidence) -> (lower, upper)`` (kind ``count``).
    n : int
        Sample size (>= 1).
    p : float
        True proportion in [0, 1].
    confidence : float
        Confidence level in (0, 1).
    margin : float, optional
        Target half-width for the assurance.

    Returns
    -------
    dict
        ``n``, ``omitted_weight``, ``true_value``, ``coverage``, ``miss_low``, ``miss_high``,
        ``margin_mean``, ``margin_median``, ``margin_p90``, ``assurance``
        (None without margin), ``margin_values``, ``margin_weights``; see the
        module docstring for the definitions.

    References
    ----------
    Brown, Cai and DasGupta (2001), *Statistical Science* 16, 101-133, section 2.
    """
    c = Collector()
    _check_n(c, "n", n)
    c.raise_if_any()
    return binomial_curve(method_func, [n], p, confidence, margin)[0]


def _assured(lo, hi, covered, margin: float) -> np.ndarray:
    """Half-width within the margin, as :func:`weighted_measures` counts it (a zero-width
    interval that misses never is; NaN limits never are)."""
    hw = (hi - lo) / 2.0
    return (hw <= margin * MARGIN_RTOL) & ~((hw <= 0) & ~covered)


def _binomial_block_pmf(x, n, group, x_lo, starts, p: float) -> np.ndarray:
    """Binomial probabilities of consecutive x per n, from one ``logpmf`` per n.

    Within a block, ``log pmf(x + 1) - log pmf(x) = log((n - x) / (x + 1)) +
    log(p / (1 - p))``; a running sum of these steps from each block's first
    x is about eight times cheaper than ``binom.pmf`` per cell and keeps
    relative errors near 1e-13.
    """
    if p <= 0.0 or p >= 1.0:
        return stats.binom.pmf(x, n, p)
    with np.errstate(divide="ignore"):
        # the step out of x = n is -inf; it lands on the next block's start, which is reset
        step = np.log((n - x) / (x + 1.0)) + (np.log(p) - np.log1p(-p))
    step = np.concatenate(([0.0], step[:-1]))
    step[starts] = 0.0
    run = np.cumsum(step)
    base = stats.binom.logpmf(x_lo, group, p) - run[starts]
    return np.exp(run + np.repeat(base, np.diff(np.append(starts, x.size))))


def binomial_targets(
    method_func: Interval | Method,
    n_values: Iterable[int],
    p: float,
    confidence: float,
    margin: float | None = None,
) -> tuple[np.ndarray, np.ndarray | None]:
    """Exact coverage and assurance only, for each n: the cheap form of :func:`binomial_curve`.

    The same enumeration and conventions as :func:`binomial_curve` (same
    tail trimming, same normalisation, same margin allowance), without the
    half-width distribution (no sorting), so a search can scan thousands of
    n. Inputs are trusted (the search validated them).

    Returns
    -------
    coverage, assurance : ndarray
        One value per n in the order given; assurance is None without a margin.

    References
    ----------
    Brown, Cai and DasGupta (2001), *Statistical Science* 16, 101-133, section 2.
    """
    func = _func(method_func, "count")
    ns = np.asarray([int(n) for n in n_values], dtype=np.int64)
    cov = np.empty(ns.size)
    ass = None if margin is None else np.empty(ns.size)
    x_lo_all, x_hi_all, _ = _binomial_support(ns, float(p))
    sizes_all = x_hi_all - x_lo_all + 1
    for ch in _support_chunks(func, ns, x_lo_all, sizes_all, confidence, cost=sizes_all):
        stop = ch.start + ch.group.size
        starts = ch.offsets[:-1]
        w = _binomial_block_pmf(ch.x_cells, ch.n_cells, ch.group, ch.x_lo, starts, float(p))
        total = np.add.reduceat(w, starts)
        covered = (ch.lo <= p) & (p <= ch.hi)
        cov[ch.start:stop] = np.add.reduceat(covered * w, starts) / total
        if ass is not None:
            ass[ch.start:stop] = np.add.reduceat(_assured(ch.lo, ch.hi, covered, margin) * w, starts) / total
    return cov, ass


def two_binomial_targets(
    method_func: Interval | Method,
    na_values: Iterable[int],
    nb_values: Iterable[int],
    pa: float,
    pb: float,
    confidence: float,
    margin: float | None = None,
) -> tuple[np.ndarray, np.ndarray | None]:
    """Exact coverage and assurance only, for each pair (n_a, n_b): the cheap form of
    :func:`two_binomial_measures`.

    Same enumeration, trimming and conventions; each group's support and
    probabilities are computed once per n, the interval is evaluated on
    their outer product (chunks of at most :data:`CHUNK_CELLS` cells), and
    the double sums are matrix-vector products ``w_a' C w_b``, without
    sorting the half-widths. Inputs are trusted (the search validated them).

    Returns
    -------
    coverage, assurance : ndarray
        One value per pair; assurance is None without a margin.

    References
    ----------
    Newcombe, R. G. (1998). *Statistics in Medicine* 17, 873-890.
    """
    func = _func(method_func, "count2")
    na_arr = np.asarray([int(n) for n in na_values], dtype=np.int64)
    nb_arr = np.asarray([int(n) for n in nb_values], dtype=np.int64)
    a_lo, a_hi, _ = _binomial_support(na_arr, float(pa))
    b_lo, b_hi, _ = _binomial_support(nb_arr, float(pb))
    true = float(pa) - float(pb)
    cov = np.empty(na_arr.size)
    ass = None if margin is None else np.empty(na_arr.size)
    for j in range(na_arr.size):
        na, nb = int(na_arr[j]), int(nb_arr[j])
        xa = np.arange(a_lo[j], a_hi[j] + 1)
        xb = np.arange(b_lo[j], b_hi[j] + 1)
        wa = stats.binom.pmf(xa, na, pa)
        wb = stats.binom.pmf(xb, nb, pb)
        rows = max(1, CHUNK_CELLS // xb.size)
        c_sum = a_sum = 0.0
        for i in range(0, xa.size, rows):
            lo, hi = func(xa[i:i + rows, None], na, xb[None, :], nb, confidence)
            shape = (min(rows, xa.size - i), xb.size)
            lo = np.broadcast_to(np.asarray(lo, dtype=float), shape)
            hi = np.broadcast_to(np.asarray(hi, dtype=float), shape)
            wa_c = wa[i:i + rows]
            covered = (lo <= true) & (true <= hi)
            c_sum += float(wa_c @ (covered @ wb))
            if ass is not None:
                a_sum += float(wa_c @ (_assured(lo, hi, covered, margin) @ wb))
        total = float(wa.sum() * wb.sum())
        cov[j] = c_sum / total
        if ass is not None:
            ass[j] = a_sum / total
    return cov, ass


# ---------------------------------------------------------------- two binomials


def two_binomial_measures(
    method_func: Interval | Method,
    na: int,
    pa: float,
    nb: int,
    pb: float,
    confidence: float,
    margin: float | None = None,
) -> dict:
    """Exact measures of an interval for p_a - p_b by double enumeration.

    Sums over all (xa, xb) with weights ``binom.pmf(xa, na, pa) *
    binom.pmf(xb, nb, pb)``, evaluating the interval on the outer product in
    chunks of xa so that memory stays bounded. Binomial tails of probability
    below :data:`TAIL_TRIM` are left out (reported as ``omitted_weight``);
    the measures then agree with the full enumeration within floating-point
    rounding.

    Parameters
    ----------
    method_func : callable or Method
        ``func(xa, na, xb, nb, confidence) -> (lower, upper)`` (kind ``count2``).
    na, nb : int
        Group sizes (>= 1).
    pa, pb : float
        True proportions in [0, 1]; the true value is ``pa - pb``.
    confidence : float
        Confidence level in (0, 1).
    margin : float, optional
        Target half-width for the assurance.

    Returns
    -------
    dict
        ``na``, ``nb``, ``omitted_weight`` and the keys of
        :func:`binomial_measures` (``true_value = pa - pb``).

    References
    ----------
    Newcombe, R. G. (1998). *Statistics in Medicine* 17, 873-890.
    """
    func = _func(method_func, "count2")
    c = Collector()
    _check_n(c, "na", na)
    _check_n(c, "nb", nb)
    c.number("pa", pa, low=0.0, high=1.0)
    c.number("pb", pb, low=0.0, high=1.0)
    _check_common(c, confidence, margin)
    c.raise_if_any()
    na, nb, pa, pb = int(na), int(nb), float(pa), float(pb)
    margin = None if margin is None else float(margin)
    true = pa - pb

    (a_lo,), (a_hi,), (oa,) = _binomial_support(np.array([na]), pa)
    (b_lo,), (b_hi,), (ob,) = _binomial_support(np.array([nb]), pb)
    xa = np.arange(a_lo, a_hi + 1)
    xb = np.arange(b_lo, b_hi + 1)
    wa = stats.binom.pmf(xa, na, pa)
    wb = stats.binom.pmf(xb, nb, pb)
    rows = max(1, CHUNK_CELLS // xb.size)
    los, his, ws = [], [], []
    for i in range(0, xa.size, rows):
        xa_c = xa[i:i + rows, None]
        lo, hi = func(xa_c, na, xb[None, :], nb, confidence)
        shape = (xa_c.shape[0], xb.size)
        los.append(np.broadcast_to(np.asarray(lo, dtype=float), shape).ravel())
        his.append(np.broadcast_to(np.asarray(hi, dtype=float), shape).ravel())
        ws.append((wa[i:i + rows, None] * wb[None, :]).ravel())
    lo, hi, w = np.concatenate(los), np.concatenate(his), np.concatenate(ws)
    omitted = float(oa + ob - oa * ob)
    return {"na": na, "nb": nb, "omitted_weight": omitted, **weighted_measures(lo, hi, w, true, margin)}


# ---------------------------------------------------------------- finite population


def with_fpc(method_func: Interval | Method, N: int) -> Interval:
    """Wrap a ``count`` interval with the finite population correction for a population of N.

    Each limit's distance from the point estimate ``x / n`` is multiplied by
    ``sqrt(1 - n / N)`` (:func:`simcheck.formulas.fpc_variance_factor`, form
    ``"S2"``: the interval's variance is estimated from the sample), then the
    limits are clipped to [0, 1] once. Methods that clip by definition (Wald,
    Agresti--Coull) are corrected before their clipping, through the
    method's ``centre_half``: Wald becomes ``p ± z sqrt(1 - n/N) sqrt(p q / n)``
    clipped once. For score or beta intervals the correction is an
    approximation.

    Parameters
    ----------
    method_func : Method or callable
        A ``count`` method (preferred: its unclipped form is used when it has
        one) or ``func(x, n, confidence) -> (lower, upper)``.
    N : int
        Population size.

    Returns
    -------
    callable
        The corrected interval function, same signature.

    References
    ----------
    Cochran, W. G. (1977). *Sampling Techniques*, 3rd ed. Wiley, section 3.2
    (the estimated variance of a proportion carries the factor 1 - n/N).
    """
    from simcheck.formulas import fpc_variance_factor

    unclipped = getattr(method_func, "centre_half", None) if isinstance(method_func, Method) else None
    func = method_func.func if isinstance(method_func, Method) else method_func

    def corrected(x, n, confidence):
        if unclipped is not None:
            c, h = unclipped(x, n, confidence)
            lo, hi = c - h, c + h
        else:
            lo, hi = func(x, n, confidence)
        phat = np.asarray(x, dtype=float) / np.asarray(n, dtype=float)
        f = np.sqrt(fpc_variance_factor(n, N, "S2"))
        return np.clip(phat - (phat - lo) * f, 0.0, 1.0), np.clip(phat + (hi - phat) * f, 0.0, 1.0)

    return corrected


def hypergeometric_measures(
    method_func: Interval | Method,
    n: int,
    N: int,
    K: int,
    confidence: float,
    margin: float | None = None,
    fpc: bool = False,
) -> dict:
    """Exact measures of a proportion interval for sampling without replacement.

    X ~ hypergeometric: n units drawn without replacement from a population of
    N units of which K are successes; the true value is K / N. With
    ``fpc=True`` the interval is corrected by :func:`with_fpc` (factor
    ``sqrt(1 - n/N)``, clipped once).

    Parameters
    ----------
    method_func : callable or Method
        ``func(x, n, confidence) -> (lower, upper)`` (kind ``count``).
    n : int
        Sample size, 1 <= n <= N.
    N : int
        Population size (>= 2).
    K : int
        Successes in the population, 0 <= K <= N.
    confidence : float
        Confidence level in (0, 1).
    margin : float, optional
        Target half-width for the assurance.
    fpc : bool
        Apply the finite population correction.

    Returns
    -------
    dict
        ``n``, ``population_size``, ``fpc`` and the keys of :func:`binomial_measures`.
        A method with ``needs_population_size`` (the hypergeometric interval)
        is given N and never corrected (``fpc`` is then reported false).

    References
    ----------
    Cochran, W. G. (1977). *Sampling Techniques*, 3rd ed. Wiley, chapter 3.
    """
    plain = _func(method_func, "count")
    c = Collector()
    _check_n(c, "N", N, low=2)
    _check_n(c, "n", n)
    _check_n(c, "K", K, low=0)
    if not isinstance(fpc, bool):
        c.add("fpc", f"must be true or false, got {fpc!r}")
    _check_common(c, confidence, margin)
    c.raise_if_any()
    n, N, K = int(n), int(N), int(K)
    if n > N:
        c.add("n", f"must be <= the population size {N}, got {n}")
    if K > N:
        c.add("K", f"must be <= the population size {N}, got {K}")
    c.raise_if_any()
    margin = None if margin is None else float(margin)
    if isinstance(method_func, Method) and method_func.needs_population_size:
        # exact for the finite population already: N is passed, no correction applied
        func = functools.partial(plain, population_size=N)
        fpc = False
    else:
        func = with_fpc(method_func, N) if fpc else plain
    x = np.arange(max(0, n - (N - K)), min(n, K) + 1)
    w = stats.hypergeom.pmf(x, N, K, n)
    lo, hi = func(x, np.full(x.shape, n), confidence)
    lo = np.broadcast_to(np.asarray(lo, dtype=float), x.shape)
    hi = np.broadcast_to(np.asarray(hi, dtype=float), x.shape)
    return {"n": n, "population_size": N, "fpc": fpc, **weighted_measures(lo, hi, w, K / N, margin)}


__all__ = [
    "binomial_measures",
    "binomial_curve",
    "two_binomial_measures",
    "binomial_targets",
    "two_binomial_targets",
    "hypergeometric_measures",
    "with_fpc",
]
