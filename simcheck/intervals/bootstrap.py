"""Bootstrap intervals for a mean and a difference of two means.

Kinds ``sample`` and ``sample2`` of :mod:`simcheck.intervals.base`: the
functions receive raw replicate samples as a float (R, n) block, a numpy
Generator owned by the caller for this block, and the number of resamples.
They return ``(lower, upper, degenerate)``.

How the work is organised (why it is fast)
------------------------------------------
A coverage study needs R x B resample means of n observations each
(2,000 x 1,999 x 50 = 2e8 gathered values for a typical study). Three things
keep that cheap without changing what is computed:

* **Pair tables.** The sum of n indices drawn uniformly with replacement is
  the sum of n/2 *pair sums*, and one uniform integer on [0, n^2) is exactly
  a pair of independent uniform indices on [0, n). So each replicate gets a
  table of its n^2 pair sums (n <= ``_PAIR_MAX_N``; a single-value tail
  serves odd n) and a resample costs n/2 gathers instead of n. The joint law
  of the resample sums is exactly that of ordinary resampling.
* **Exact bounded integers from raw bits.** Indices come from 16-bit (or
  32-bit) raw words of ``rng`` by threshold rejection and division by a
  constant, which is exactly uniform and about three times faster than
  ``Generator.integers`` with a bound.
* **Chunking.** Replicates are processed a few at a time and long resample
  runs are tiled, so the working set stays near ``_TILE_ELEMS`` values and
  the peak extra memory stays below ``MEMORY_BOUND`` whatever R, n and B.

* **Threads.** The replicates of a call are split into *tasks* of a fixed
  number of rows that depends only on (n, B) (never on the thread count),
  and task i resamples with its own generator, seeded from entropy drawn
  once from ``rng`` at the start of the call with spawn key (i,). Tasks run
  on a thread pool (numpy releases the GIL in the gathers, reductions,
  sorts, integer divisions and bulk draws that make up the work), each
  thread with its own buffers. So the intervals are bitwise identical for
  any thread count. The count is :func:`bootstrap_threads` (environment
  variable ``SIMCHECK_THREADS``, default ``min(4, cpu count)``) unless the
  keyword ``threads`` is given; at most ``MAX_THREADS`` (fewer for very
  long resample runs) run at once so that the memory bound holds.

Each replicate has its own independent resamples (no resampling plan is
shared between replicates), so replicate intervals are independent and the
engine's Monte Carlo standard errors are valid.

Quantiles are those of :func:`scipy.stats.bootstrap` (which calls
``scipy.stats.quantile`` with its default ``method='linear'``, i.e. the
linear interpolation of the sorted resample statistics also used by
``np.percentile``). They are read from rows sorted with ``np.sort``: numpy's
SIMD sort of a (k, B) block was measured faster than ``np.partition`` at the
needed order statistics on the target machine (see
``tests/benchmarks/bench_bootstrap.py``, which prints both timings), and
BCa needs different order statistics in each row anyway.

Two deliberate differences from scipy.stats.bootstrap: (1) with
``vectorized=True`` scipy applies one resampling plan to every replicate,
here each replicate gets its own; (2) the BCa bias share counts a resample
statistic equal to the sample statistic *within rounding* as a tie (a
resample that permutes the sample sums its values in another order), where
scipy's exact comparison splits such ties by the last bit.

Results are a pure function of the block, ``resamples`` and the state of
``rng``: the same block with the same stream gives the same intervals,
whatever the number of threads.

Degenerate samples
------------------
A sample whose values are all equal has a degenerate bootstrap distribution.
Its interval is the zero-width interval at the sample mean (for two samples:
both groups constant, at the difference of means) and its ``degenerate``
flag is set; it is counted, never dropped, and never raises or warns.

Zero-SD resamples (bootstrap-t)
-------------------------------
A resample whose values are all equal has s* = 0. Its studentised value is
taken as the limit t* = +inf when mean* > mean, -inf when mean* < mean and 0
when mean* = mean (both within rounding). Quantiles interpolate with the
rule that an interpolation touching -inf (+inf) on the side it leans to is
-inf (+inf), so an interval endpoint can be infinite when more than alpha/2
of the resamples are constant - the honest answer for such samples. "All
equal" for a resample is decided with a rounding tolerance (sum of squared
deviations below ``16 eps n^2 max d^2``), since sums of squares of a
constant resample are not exactly zero in floating point.

References
----------
Efron, B. and Tibshirani, R. J. (1993). *An Introduction to the Bootstrap*.
Chapman & Hall. Ch. 12 (bootstrap-t), ch. 13 (percentile), ch. 14 (BCa,
sec. 14.3: acceleration from the jackknife), ch. 11 (jackknife).
"""

from __future__ import annotations

import threading
from concurrent.futures import ThreadPoolExecutor

import numpy as np
from scipy.special import ndtr, ndtri

from simcheck.errors import Collector, InputError
from simcheck.intervals.base import Method, register
from simcheck.threads import thread_count

#: Upper bound on the extra memory (bytes) one call allocates, whatever R, n, B
#: and the number of threads.
MEMORY_BOUND = 64 * 2**20
#: Most threads one call runs at once; each holds its own buffers (about
#: ``MEMORY_BOUND / 8`` of tile buffers plus as much for per-chunk
#: statistics), so MEMORY_BOUND holds for any requested count.
MAX_THREADS = 4
#: Resampling chunks per task: a task's rows are fixed by (n, B) alone, and
#: a few chunks per task keep the per-task generator set-up negligible while
#: leaving enough tasks to balance the threads.
_CHUNKS_PER_TASK = 4
#: Gathered values per tile (about 10 MB of work buffers); larger tiles were
#: measured no faster, smaller ones slower (per-call overhead).
_TILE_ELEMS = 2**19
#: Largest n that uses pair tables (the table of n^2 sums stays in cache).
_PAIR_MAX_N = 128
_EPS = np.finfo(np.float64).eps

REFERENCE = (
    "Efron, B. and Tibshirani, R. J. (1993). An Introduction to the Bootstrap. Chapman & Hall."
)


# ------------------------------------------------------------------ threads


def _positive_threads(value, name: str) -> int:
    if isinstance(value, (bool, np.bool_)) or not isinstance(value, (int, np.integer)) or value < 1:
        raise InputError(name, f"expected a positive whole number of threads, got {value!r}")
    return int(value)


def bootstrap_threads() -> int:
    """Threads for bootstrap calls: ``SIMCHECK_THREADS`` if set, else the cores
    available to the process (:func:`simcheck.threads.thread_count`).

    Raises
    ------
    InputError
        (a ValueError) ``SIMCHECK_THREADS`` is set but is not a positive
        whole number; the message names the variable.
    """
    return thread_count()


def _resolve_threads(threads) -> int:
    return bootstrap_threads() if threads is None else _positive_threads(threads, "threads")


def _task_entropy(rng: np.random.Generator) -> int:
    """Entropy for the task generators, drawn once per call from ``rng``."""
    return np.random.SeedSequence([int(v) for v in rng.integers(0, 2**63, size=4)]).entropy


def _task_generator(entropy: int, i: int) -> np.random.Generator:
    return np.random.Generator(np.random.PCG64(np.random.SeedSequence(entropy, spawn_key=(i,))))


def _thread_bytes(rows: int, resamples: int, groups: int) -> int:
    """Rough peak memory of one thread: tile buffers (indices, gathered
    values, flags and raw words: about 21 bytes per tile element) and about
    eight (rows, B) float arrays per group."""
    return 21 * _TILE_ELEMS + 8 * 8 * groups * rows * resamples


def _run_tasks(r_total: int, task_rows: int, rng: np.random.Generator, threads: int, make_state, work,
               thread_bytes: int = 0) -> None:
    """Run ``work(r0, r1, generator, state)`` for consecutive row ranges of
    ``task_rows`` rows; ``state`` (buffers, from ``make_state()``) belongs to
    the running thread. Task i always gets generator i, whichever thread
    runs it, so the results do not depend on ``threads``. At most
    ``MAX_THREADS`` threads, and no more than ``MEMORY_BOUND // thread_bytes``
    (very long resample runs), run at once."""
    entropy = _task_entropy(rng)
    starts = range(0, r_total, task_rows)
    local = threading.local()

    def task(i: int) -> None:
        state = getattr(local, "state", None)
        if state is None:
            state = local.state = make_state()
        r0 = starts[i]
        # np.errstate is per thread (a context variable), so set it in the task
        with np.errstate(divide="ignore", invalid="ignore"):
            work(r0, min(r_total, r0 + task_rows), _task_generator(entropy, i), state)

    workers = min(threads, MAX_THREADS, len(starts), max(1, MEMORY_BOUND // max(1, thread_bytes)))
    if workers <= 1:
        for i in range(len(starts)):
            task(i)
        return
    with ThreadPoolExecutor(max_workers=workers) as pool:
        for _ in pool.map(task, range(len(starts))):
            pass


# ----------------------------------------------------------- random indices


class _IndexSource:
    """Exactly uniform integers on [0, s) from raw words of ``rng``.

    Threshold rejection on raw 16- or 32-bit words: with q = 2^L // s, a
    word u < q s is accepted and gives u // q, which takes each value in
    [0, s) for exactly q words (common practice). The comparison and the
    division by a constant run as SIMD passes over contiguous words, which
    was measured faster than ``Generator.integers`` with a bound and than
    multiply-and-shift variants. The flag buffer is kept between calls
    (fresh large temporaries cost page faults).
    """

    def __init__(self, rng: np.random.Generator, capacity: int) -> None:
        self.rng = rng
        self._flag = np.empty(capacity, dtype=bool)

    def _raw(self, k: int, word) -> np.ndarray:
        per = 8 // np.dtype(word).itemsize
        return self.rng.integers(0, 2**64, size=-(-k // per), dtype=np.uint64).view(word)[:k]

    def fill(self, out: np.ndarray, s: int) -> None:
        """Fill the intp array ``out`` (any shape, size <= capacity)."""
        size = out.size
        if s <= 1:
            out[...] = 0
            return
        # 16-bit words when the rejection share is small (<= 1/64), else 32-bit.
        if s <= 2**16 and (2**16 % s) * 64 <= 2**16:
            word, bits = np.uint16, 16
        elif s <= 2**32:
            word, bits = np.uint32, 32
        else:
            out[...] = self.rng.integers(0, s, size=out.shape, dtype=np.int64)
            return
        q = (2**bits) // s
        lim = word(q * s) if q * s < 2**bits else None
        u = self._raw(size, word)
        if lim is not None:
            flag = self._flag[:size]
            np.greater_equal(u, lim, out=flag)
            bad = np.flatnonzero(flag)
            while bad.size:
                fresh = self._raw(bad.size, word)
                u[bad] = fresh
                bad = bad[fresh >= lim]
        np.floor_divide(u.reshape(out.shape), word(q), out=out, casting="unsafe")


class _Resampler:
    """Resample sums (and sums of squares) of chunks of replicate samples.

    One instance serves every chunk of one call and keeps its buffers, so
    the arrays returned by :meth:`run` are overwritten by the next call.

    Parameters
    ----------
    n : int
        Sample size.
    rows : int
        Largest chunk (replicates per call of :meth:`run`).
    resamples : int
        Resamples per replicate.
    squares : bool
        Also return the resample sums of squares.
    rng : numpy.random.Generator or None
        Source of the resampling indices; :meth:`reseed` replaces it (each
        task of a call brings its own generator).
    tile : int, optional
        Gathered values per tile (default ``_TILE_ELEMS``); two-sample calls
        give each group half, so one thread's buffers stay the same size.
    """

    def __init__(self, n: int, rows: int, resamples: int, squares: bool, rng: np.random.Generator | None,
                 tile: int | None = None) -> None:
        self.n, self.rows, self.b, self.squares = n, rows, resamples, squares
        self.pairs = 2 <= n <= _PAIR_MAX_N
        if self.pairs:
            self.m, self.odd = divmod(n, 2)
            self.units = self.m + self.odd
        else:
            self.m, self.odd, self.units = 0, 0, n
        tile = _TILE_ELEMS if tile is None else tile
        self.nb = max(1, min(resamples, tile // max(1, rows * self.units)))
        self._s = np.empty((rows, resamples))
        self._q = np.empty((rows, resamples)) if squares else None
        self._g = np.empty((self.units, self.nb))
        self._idx = np.empty((rows, self.units, self.nb), dtype=np.intp)
        self._src = _IndexSource(rng, rows * self.units * self.nb)

    def reseed(self, rng: np.random.Generator) -> None:
        """Draw the following indices from ``rng``."""
        self._src.rng = rng

    def _table(self, v: np.ndarray) -> np.ndarray:
        if not self.pairs:
            return np.ascontiguousarray(v)
        k, n = v.shape
        t = (v[:, :, None] + v[:, None, :]).reshape(k, n * n)
        return np.concatenate([t, v], axis=1) if self.odd else t

    def _indices(self, idx: np.ndarray) -> None:
        n, src = self.n, self._src
        if not self.pairs:
            src.fill(idx, n)
            return
        src.fill(idx[:, : self.m, :], n * n)
        if self.odd:
            # the single-value tail sits after the n^2 pair sums in the table
            tail = idx[:, self.m, :]
            src.fill(tail, n)
            tail += n * n

    def run(self, x: np.ndarray) -> tuple[np.ndarray, np.ndarray | None]:
        """Sums (k, B) and, if wanted, sums of squares of B resamples of
        each row of ``x`` (k <= rows)."""
        k = x.shape[0]
        table = self._table(x)
        table2 = self._table(x * x) if self.squares else None
        s = self._s[:k]
        q = self._q[:k] if self.squares else None
        for b0 in range(0, self.b, self.nb):
            b1 = min(self.b, b0 + self.nb)
            idx = self._idx[:k, :, : b1 - b0]
            self._indices(idx)
            gv = self._g[:, : b1 - b0]
            for j in range(k):
                np.take(table[j], idx[j], out=gv, mode="clip")
                np.add.reduce(gv, axis=0, out=s[j, b0:b1])
                if q is not None:
                    np.take(table2[j], idx[j], out=gv, mode="clip")
                    np.add.reduce(gv, axis=0, out=q[j, b0:b1])
        return s, q


def _rows_per_chunk(units: int, resamples: int, groups: int) -> int:
    """Replicates per chunk: about one tile of gathers, and per-chunk
    statistic arrays (a handful of (k, B) float arrays per group) within one
    thread's share of the memory bound (half of ``MEMORY_BOUND / MAX_THREADS``;
    the tile buffers take the other half)."""
    by_tile = _tile(groups) // max(1, units * resamples)
    by_memory = (MEMORY_BOUND // (2 * MAX_THREADS) // 8) // (16 * groups * resamples)
    return int(max(1, min(by_tile if by_tile >= 1 else 1, by_memory, 4096)))


def _tile(groups: int) -> int:
    """Gathered values per tile for each of ``groups`` resamplers of a thread."""
    return max(1, _TILE_ELEMS // groups)


def _units(n: int) -> int:
    """Gathers per resample (pair tables halve them)."""
    return (n // 2 + n % 2) if 2 <= n <= _PAIR_MAX_N else n


# ----------------------------------------------------------------- helpers


def _check(confidence: float, resamples: int) -> float:
    c = Collector()
    c.number("target.confidence", confidence, low=0, high=1, low_open=True, high_open=True)
    c.number("method.resamples", resamples, low=1, integer=True)
    c.raise_if_any()
    return (1.0 - float(confidence)) / 2.0


def _block(x, name: str) -> np.ndarray:
    a = np.asarray(x, dtype=np.float64)
    if a.ndim == 1:
        a = a[None, :]
    if a.ndim != 2 or a.shape[1] < 1:
        raise ValueError(f"{name}: expected an (R, n) block of samples with n >= 1, got shape {a.shape}")
    return a


def _lerp(lo: np.ndarray, hi: np.ndarray, g: np.ndarray) -> np.ndarray:
    """lo + g (hi - lo), with the limits for infinite neighbours."""
    v = lo + g * (hi - lo) if np.isfinite(lo).all() and np.isfinite(hi).all() else None
    if v is not None:
        return v
    with np.errstate(invalid="ignore"):
        v = lo + g * (hi - lo)
    v = np.where((g == 0) | (lo == hi), lo, v)
    v = np.where(np.isneginf(lo) & (g < 1), -np.inf, v)
    return np.where(np.isposinf(hi) & (g > 0), np.inf, v)


def _quantiles_sorted(a: np.ndarray, p_lo, p_hi) -> tuple[np.ndarray, np.ndarray]:
    """Linear-interpolation quantiles (scipy.stats.quantile 'linear', the
    np.percentile default) of rows of ``a`` that are already sorted, at the
    levels ``p_lo`` and ``p_hi`` (scalars or one per row)."""
    k, b = a.shape
    p = np.empty((k, 2))
    p[:, 0], p[:, 1] = p_lo, p_hi
    h = (b - 1) * np.clip(p, 0.0, 1.0)
    f = np.floor(h)
    g = h - f
    flat = a.reshape(-1)
    at = f.astype(np.intp) + (np.arange(k, dtype=np.intp) * b)[:, None]
    v = _lerp(flat[at], flat[np.minimum(at + 1, at - f.astype(np.intp) + b - 1)], g)
    return v[:, 0], v[:, 1]


def _bca_levels(share: np.ndarray, accel: np.ndarray, alpha: float) -> tuple[np.ndarray, np.ndarray]:
    """BCa adjusted levels (Efron & Tibshirani 1993, eq. 14.10), computed as
    scipy.stats.bootstrap does; a bias share of 0 or 1 (z0 = -inf or +inf)
    takes its limit, levels 0 or 1 (the interval collapses to the extreme
    resample)."""
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        z0 = ndtri(share)
        za = float(ndtri(alpha))
        num1 = z0 + za
        a1 = ndtr(z0 + num1 / (1 - accel * num1))
        num2 = z0 - za
        a2 = ndtr(z0 + num2 / (1 - accel * num2))
    lim = np.where(share >= 1, 1.0, 0.0)
    edge = (share <= 0) | (share >= 1)
    return np.where(edge, lim, a1), np.where(edge, lim, a2)


def _bias_share(stat_b: np.ndarray, stat: np.ndarray, tol: np.ndarray) -> np.ndarray:
    """Share of resample statistics below the sample statistic, ties counted
    half (scipy.stats.bootstrap: (#(< t) + #(<= t)) / 2B). Ties are decided
    within a rounding tolerance, so exact ties of discrete data (equal sums
    summed in another order) count as ties."""
    b = stat_b.shape[1]
    below = np.count_nonzero(stat_b < (stat - tol)[:, None], axis=1)
    upto = np.count_nonzero(stat_b <= (stat + tol)[:, None], axis=1)
    return (below + upto) / (2.0 * b)


def _constant(x: np.ndarray) -> np.ndarray:
    return x.min(axis=1) == x.max(axis=1)


def _sum_tol(x: np.ndarray) -> np.ndarray:
    """Rounding bound for a resample sum of x (row-wise)."""
    n = x.shape[1]
    return 4.0 * n * n * _EPS * np.abs(x).max(axis=1)


# ------------------------------------------------------------- one sample


def _one_sample(x, confidence, rng, resamples, method, threads):
    alpha = _check(confidence, resamples)
    x = _block(x, "x")
    nthreads = _resolve_threads(threads)
    r_total, n = x.shape
    b = int(resamples)
    mean = x.mean(axis=1)
    lower = np.empty(r_total)
    upper = np.empty(r_total)
    rows = _rows_per_chunk(_units(n), b, 1)

    def work(t0, t1, g, res):
        res.reseed(g)
        for r0 in range(t0, t1, rows):
            r1 = min(t1, r0 + rows)
            xc = x[r0:r1]
            mc = mean[r0:r1]
            if method == "t":
                lower[r0:r1], upper[r0:r1] = _t_chunk(xc, mc, res, alpha)
                continue
            s_b, _ = res.run(xc)
            if method == "bca":
                tot = xc.sum(axis=1)
                share = _bias_share(s_b, tot, _sum_tol(xc))
                e = xc - mc[:, None]
                ss = (e**2).sum(axis=1)
                # constant samples (ss = 0) are degenerate and overwritten below
                accel = np.where(ss > 0, (e**3).sum(axis=1) / (6.0 * np.where(ss > 0, ss, 1.0) ** 1.5), 0.0)
                p_lo, p_hi = _bca_levels(share, accel, alpha)
            else:
                p_lo, p_hi = alpha, 1.0 - alpha
            s_b.sort(axis=1)
            lo_s, hi_s = _quantiles_sorted(s_b, p_lo, p_hi)
            lower[r0:r1] = lo_s / n
            upper[r0:r1] = hi_s / n

    def state():
        return _Resampler(n, max(1, min(r_total, rows)), b, method == "t", None)

    _run_tasks(r_total, rows * _CHUNKS_PER_TASK, rng, nthreads, state, work, _thread_bytes(rows, b, 1))
    degenerate = _constant(x)
    lower[degenerate] = mean[degenerate]
    upper[degenerate] = mean[degenerate]
    return lower, upper, degenerate


def _t_chunk(xc, mc, res, alpha):
    n = xc.shape[1]
    d = xc - mc[:, None]
    s_b, q_b = res.run(d)
    dmax2 = (d * d).max(axis=1)
    ss_b = np.maximum(q_b - s_b * s_b / n, 0.0)
    zero = ss_b <= (16.0 * _EPS * n * n * dmax2)[:, None]
    dev_b = s_b / n
    se_b = np.sqrt(ss_b / (max(n - 1, 1) * n))
    t_b = _studentise(dev_b, se_b, zero, (4.0 * n * _EPS * np.sqrt(dmax2))[:, None])
    t_b.sort(axis=1)
    se = np.sqrt((d * d).sum(axis=1) / (max(n - 1, 1) * n))
    t_lo, t_hi = _quantiles_sorted(t_b, alpha, 1.0 - alpha)
    return _endpoints(mc, se, t_lo, t_hi)


def _studentise(dev_b, se_b, zero, dev_tol):
    """t* = dev*/se*, with the limits for zero-SD resamples (module docstring)."""
    t_b = dev_b / np.where(zero, 1.0, se_b)
    lim = np.where(dev_b > dev_tol, np.inf, np.where(dev_b < -dev_tol, -np.inf, 0.0))
    return np.where(zero, lim, t_b)


def _endpoints(est, se, t_lo, t_hi):
    # se > 0 for every non-degenerate sample; inf * se keeps the sign
    with np.errstate(invalid="ignore"):
        lo = est - t_hi * se
        hi = est - t_lo * se
    return lo, hi


def percentile_mean(x, confidence, *, rng, resamples, threads=None):
    """Bootstrap percentile interval for the mean.

    Parameters
    ----------
    x : array_like, shape (R, n)
        R replicate samples of n values.
    confidence : float
        Confidence level in (0, 1).
    rng : numpy.random.Generator
        Stream owned by the caller for this block.
    resamples : int
        Bootstrap resamples per sample (B).
    threads : int, optional
        Threads to use; default :func:`bootstrap_threads`. The result does
        not depend on it.

    Returns
    -------
    lower, upper : ndarray, shape (R,)
        The alpha/2 and 1 - alpha/2 quantiles of the B resample means.
    degenerate : ndarray of bool, shape (R,)
        Samples with all values equal (zero-width interval at the mean).

    References
    ----------
    Efron, B. and Tibshirani, R. J. (1993). *An Introduction to the
    Bootstrap*. Chapman & Hall, ch. 13.
    """
    return _one_sample(x, confidence, rng, resamples, "percentile", threads)


def bca_mean(x, confidence, *, rng, resamples, threads=None):
    """Bias-corrected and accelerated (BCa) bootstrap interval for the mean.

    The bias correction z0 is the normal quantile of the share of resample
    means below the sample mean (ties counted half, as scipy.stats.bootstrap
    does); the acceleration is the closed-form jackknife value for the mean,
    a = sum(e^3) / (6 (sum e^2)^1.5) with e = x - mean (the leave-one-out
    means are (sum - x_i)/(n - 1), so no loop over observations).

    Parameters and returns as :func:`percentile_mean`; the quantile levels
    are the adjusted alpha1, alpha2.

    References
    ----------
    Efron, B. and Tibshirani, R. J. (1993). *An Introduction to the
    Bootstrap*. Chapman & Hall, ch. 14 (sec. 14.3).
    """
    return _one_sample(x, confidence, rng, resamples, "bca", threads)


def t_mean(x, confidence, *, rng, resamples, threads=None):
    """Bootstrap-t (studentised) interval for the mean.

    t* = (mean* - mean) / (s*/sqrt(n)); the interval is
    (mean - t*_{1-alpha/2} s/sqrt(n), mean - t*_{alpha/2} s/sqrt(n)).
    Zero-SD resamples follow the rules in the module docstring.

    Parameters and returns as :func:`percentile_mean`.

    References
    ----------
    Efron, B. and Tibshirani, R. J. (1993). *An Introduction to the
    Bootstrap*. Chapman & Hall, ch. 12.
    """
    return _one_sample(x, confidence, rng, resamples, "t", threads)


# ------------------------------------------------------------- two samples


def _two_sample(xa, xb, confidence, rng, resamples, method, threads):
    alpha = _check(confidence, resamples)
    xa = _block(xa, "xa")
    xb = _block(xb, "xb")
    if xa.shape[0] != xb.shape[0]:
        raise ValueError(f"xa and xb must hold the same number of replicates, got {xa.shape[0]} and {xb.shape[0]}")
    nthreads = _resolve_threads(threads)
    r_total, na = xa.shape
    nb = xb.shape[1]
    b = int(resamples)
    ma, mb = xa.mean(axis=1), xb.mean(axis=1)
    diff = ma - mb
    lower = np.empty(r_total)
    upper = np.empty(r_total)
    rows = _rows_per_chunk(max(_units(na), _units(nb)), b, 2)

    def work(t0, t1, g, state):
        res_a, res_b = state
        res_a.reseed(g)
        res_b.reseed(g)
        for r0 in range(t0, t1, rows):
            sl = slice(r0, min(t1, r0 + rows))
            a, c = xa[sl], xb[sl]
            if method == "t":
                lower[sl], upper[sl] = _t2_chunk(a, c, ma[sl], mb[sl], res_a, res_b, alpha)
                continue
            sa, _ = res_a.run(a)
            sb, _ = res_b.run(c)
            sa /= na
            sb /= nb
            sa -= sb  # resample differences of means
            if method == "bca":
                tol = _sum_tol(a) / na + _sum_tol(c) / nb
                share = _bias_share(sa, a.sum(axis=1) / na - c.sum(axis=1) / nb, tol)
                ea = a - ma[sl, None]
                ec = c - mb[sl, None]
                # scipy.stats.bootstrap's multi-sample jackknife: each group's
                # leave-one-out values enter with weight 1/n_j^3 and 1/n_j^2;
                # group b's deviations enter with the opposite sign.
                num = (ea**3).sum(axis=1) / na**3 - (ec**3).sum(axis=1) / nb**3
                den = (ea**2).sum(axis=1) / na**2 + (ec**2).sum(axis=1) / nb**2
                accel = np.where(den > 0, num / (6.0 * np.where(den > 0, den, 1.0) ** 1.5), 0.0)
                p_lo, p_hi = _bca_levels(share, accel, alpha)
            else:
                p_lo, p_hi = alpha, 1.0 - alpha
            sa.sort(axis=1)
            lower[sl], upper[sl] = _quantiles_sorted(sa, p_lo, p_hi)

    def state():
        k = max(1, min(r_total, rows))
        sq = method == "t"
        return (_Resampler(na, k, b, sq, None, _tile(2)), _Resampler(nb, k, b, sq, None, _tile(2)))

    _run_tasks(r_total, rows * _CHUNKS_PER_TASK, rng, nthreads, state, work, _thread_bytes(rows, b, 2))
    degenerate = _constant(xa) & _constant(xb)
    lower[degenerate] = diff[degenerate]
    upper[degenerate] = diff[degenerate]
    return lower, upper, degenerate


def _t2_chunk(a, c, ma, mb, res_a, res_b, alpha):
    na, nb = a.shape[1], c.shape[1]
    da = a - ma[:, None]
    dc = c - mb[:, None]
    sa, qa = res_a.run(da)
    sb, qb = res_b.run(dc)
    da2, dc2 = (da * da).max(axis=1), (dc * dc).max(axis=1)
    ssa = np.maximum(qa - sa * sa / na, 0.0)
    ssb = np.maximum(qb - sb * sb / nb, 0.0)
    zero = (ssa <= (16.0 * _EPS * na * na * da2)[:, None]) & (ssb <= (16.0 * _EPS * nb * nb * dc2)[:, None])
    dev_b = sa / na - sb / nb
    se_b = np.sqrt(ssa / (max(na - 1, 1) * na) + ssb / (max(nb - 1, 1) * nb))
    tol = (4.0 * na * _EPS * np.sqrt(da2) + 4.0 * nb * _EPS * np.sqrt(dc2))[:, None]
    t_b = _studentise(dev_b, se_b, zero, tol)
    t_b.sort(axis=1)
    se = np.sqrt((da * da).sum(axis=1) / (max(na - 1, 1) * na) + (dc * dc).sum(axis=1) / (max(nb - 1, 1) * nb))
    return _endpoints(ma - mb, se, *_quantiles_sorted(t_b, alpha, 1.0 - alpha))


def percentile_diff(xa, xb, confidence, *, rng, resamples, threads=None):
    """Bootstrap percentile interval for mean_a - mean_b.

    Each group is resampled independently (stratified resampling).

    Parameters
    ----------
    xa : array_like, shape (R, na)
    xb : array_like, shape (R, nb)
        Replicate samples of the two groups.
    confidence : float
        Confidence level in (0, 1).
    rng : numpy.random.Generator
        Stream owned by the caller for this block.
    resamples : int
        Bootstrap resamples per replicate.
    threads : int, optional
        Threads to use; default :func:`bootstrap_threads`. The result does
        not depend on it.

    Returns
    -------
    lower, upper : ndarray, shape (R,)
    degenerate : ndarray of bool, shape (R,)
        Both groups constant (zero-width interval at the difference).

    References
    ----------
    Efron, B. and Tibshirani, R. J. (1993). *An Introduction to the
    Bootstrap*. Chapman & Hall, ch. 13; ch. 8 for resampling two samples
    separately (from memory).
    """
    return _two_sample(xa, xb, confidence, rng, resamples, "percentile", threads)


def bca_diff(xa, xb, confidence, *, rng, resamples, threads=None):
    """BCa bootstrap interval for mean_a - mean_b (stratified resampling).

    The acceleration combines both groups' closed-form jackknife terms as
    scipy.stats.bootstrap does for multi-sample statistics.

    Parameters and returns as :func:`percentile_diff`.

    References
    ----------
    Efron, B. and Tibshirani, R. J. (1993). *An Introduction to the
    Bootstrap*. Chapman & Hall, ch. 14.
    """
    return _two_sample(xa, xb, confidence, rng, resamples, "bca", threads)


def t_diff(xa, xb, confidence, *, rng, resamples, threads=None):
    """Bootstrap-t interval for mean_a - mean_b with the unpooled standard
    error sqrt(s_a^2/n_a + s_b^2/n_b) (stratified resampling).

    Parameters and returns as :func:`percentile_diff`.

    References
    ----------
    Efron, B. and Tibshirani, R. J. (1993). *An Introduction to the
    Bootstrap*. Chapman & Hall, ch. 12.
    """
    return _two_sample(xa, xb, confidence, rng, resamples, "t", threads)


_REFS = {
    "bootstrap-percentile": (REFERENCE + " Ch. 13 (percentile interval).",),
    "bootstrap-bca": (REFERENCE + " Ch. 14 (BCa interval).",),
    "bootstrap-t": (REFERENCE + " Ch. 12 (bootstrap-t interval).",),
}
_SUMMARIES = {
    "bootstrap-percentile": "bootstrap percentile interval",
    "bootstrap-bca": "bias-corrected and accelerated (BCa) bootstrap interval",
    "bootstrap-t": "studentised bootstrap (bootstrap-t) interval",
}

for _name, _one, _two in (
    ("bootstrap-percentile", percentile_mean, percentile_diff),
    ("bootstrap-bca", bca_mean, bca_diff),
    ("bootstrap-t", t_mean, t_diff),
):
    register(Method(_name, "mean", "sample", _one, shift_equivariant=True,
                    summary=_SUMMARIES[_name] + " for a mean", references=_REFS[_name]))
    register(Method(_name, "mean-diff", "sample2", _two, shift_equivariant=True,
                    summary=_SUMMARIES[_name] + " for a difference of two means (groups resampled separately)",
                    references=_REFS[_name]))
