"""Simple random samples: coverage and achieved margin at one n or along a curve.

Paths (chosen by ``path="auto"``, or forced):

``exact``
    No simulation. Proportion methods on iid 0/1 data by binomial
    enumeration (double enumeration for two proportions); normal data with
    the z interval, the t interval (one sample) or the pooled t interval with
    equal SDs through the exact laws of the sample mean and variance.
``sufficient``
    Normal data with methods that need only the sample mean and variance:
    two draws per replicate (a normal mean and a chi-square variance)
    instead of n.
``nested`` (curves)
    One draw of ``n_max`` values per replicate; running sums give the
    sufficient statistics of every prefix length, so the whole curve costs
    about one simulation at ``n_max`` and all n share the same draws (common
    random numbers).
``full``
    Plain simulation of (replicates, n) blocks.

Randomness: replicates are cut into fixed blocks whose size depends only on
the number of columns drawn; block ``i`` of group a draws from the stream at
spawn key ``(STAGE_MAIN, i)`` below the root (group b ``(STAGE_GROUP_B, i)``,
bootstrap resampling ``(STAGE_BOOTSTRAP, i)``). Chunks group whole blocks to
bound memory, so results do not depend on the chunk size.

References
----------
.. [1] Morris, T. P., White, I. R. & Crowther, M. J. (2019). Using simulation
   studies to evaluate statistical methods. Statistics in Medicine 38,
   2074-2102 (Monte Carlo standard errors of coverage-type measures).
.. [2] Kupper, L. L. & Hafner, K. B. (1989). How appropriate are popular
   sample size formulas? The American Statistician 43, 101-105; Beal, S. L.
   (1989). Sample size determination for confidence intervals on the
   population mean and on the difference between two population means.
   Biometrics 45, 969-977 (exact law of the t interval's half-width).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace
from typing import Sequence

import numpy as np
from scipy import special, stats

from simcheck import rng as rngmod
from simcheck.design import Design
from simcheck.errors import InputError
from simcheck.intervals import Summary, get_method
from simcheck.intervals.base import Method
from simcheck.engine.measures import Accumulator, Partial, Reducer, block_starts, row_from_measures
from simcheck.results import CheckResult
from simcheck.threads import ordered_map

PATHS = ("auto", "exact", "sufficient", "nested", "full")

#: draw-buffer budget of one chunk; temporaries add a small multiple of it
CHUNK_BYTES = 4 << 20



# --------------------------------------------------------------------------
# the simple-random-sample design kind
# --------------------------------------------------------------------------
def applies(design: Design) -> bool:
    """True for simple random samples (no clusters, no finite population)."""
    return design.clusters is None and design.population is None


def available_paths(design: Design) -> list[str]:
    """The paths valid for a simple-random-sample ``design``, cheapest first."""
    method = get_method(design.estimand, design.method)
    out = []
    if exact_kind_for(design, method):
        out.append("exact")
    if sufficient_ok(design, method):
        out.append("sufficient")
    if method.kind in ("summary", "log", "summary2", "count", "count2"):
        out.append("nested")
    out.append("full")
    return out


def evaluate(design: Design, ns: Sequence[int], replicates: int, rng, path: str, progress, chunk_bytes: int,
             curve: bool, threads: int = 1) -> list[CheckResult]:
    """One :class:`CheckResult` per n in ``ns`` for a simple random sample.

    ``curve`` is False for a single check: the nested path then gives way to
    the full one (a nested draw pays off only across several n).
    """
    method = get_method(design.estimand, design.method)
    valid = available_paths(design)
    if path == "auto":
        chosen = valid[0]
        if chosen == "nested" and (not curve or len(ns) == 1):
            chosen = "full"
    else:
        chosen = path
        if chosen == "nested" and not curve:
            chosen = "full"
        if chosen not in valid:
            raise InputError("simulation.path", f"path {path!r} is not available for this design; available: {', '.join(valid)}")
    root, seed = rngmod.root_sequence(rng)
    if chosen == "exact":
        return exact_rows(design, method, ns, seed)
    if chosen == "sufficient":
        return [_sufficient(design, method, n, replicates, root, seed, progress, chunk_bytes, threads) for n in ns]
    if chosen == "nested":
        return _simulate(design, method, ns, replicates, root, seed, progress, chunk_bytes, nested=True, threads=threads)
    rows = []
    for n in ns:
        rows.extend(_simulate(design, method, [n], replicates, root, seed, progress, chunk_bytes, nested=False, threads=threads))
    return rows


# --------------------------------------------------------------------------
# exact path
# --------------------------------------------------------------------------
def normal_params_of(model):
    return model.normal_params() if model is not None else None


def exact_kind_for(design: Design, method: Method) -> str | None:
    if design.estimand == "proportion" and method.kind == "count" and design.model.bernoulli_p() is not None:
        return "binomial"
    if design.estimand == "proportion-diff" and method.kind == "count2":
        if design.model.bernoulli_p() is not None and design.model_b.bernoulli_p() is not None:
            return "binomial2"
    if design.estimand == "mean" and method.kind == "summary" and normal_params_of(design.model):
        if design.method in ("z", "t"):
            return "normal1"
    if design.estimand == "mean-diff" and method.kind == "summary2":
        na, nb = normal_params_of(design.model), normal_params_of(design.model_b)
        if na and nb:
            if design.method == "z":
                return "normal2"
            if design.method == "t" and math.isclose(na[1], nb[1], rel_tol=1e-12):
                return "normal2"
    return None


def exact_rows(design: Design, method: Method, ns: Sequence[int], seed) -> list[CheckResult]:
    from simcheck.engine import exact as exactmod

    kind = exact_kind_for(design, method)
    conf, margin = design.confidence, design.margin
    rows = []
    if kind == "binomial":
        p = design.model.bernoulli_p()
        measures = exactmod.binomial_curve(method.func, ns, p, conf, margin)
        for n, m in zip(ns, measures):
            rows.append(row_from_measures(design, n, m, seed, "exact-binomial"))
        return rows
    if kind == "binomial2":
        pa, pb = design.model.bernoulli_p(), design.model_b.bernoulli_p()
        for n in ns:
            m = exactmod.two_binomial_measures(method.func, n, pa, design.n_b(n), pb, conf, margin)
            rows.append(row_from_measures(design, n, m, seed, "exact-binomial"))
        return rows
    # normal data: the half-width is c * s with s^2 ~ sigma^2 chi2(df) / df
    alpha = 1.0 - conf
    z = stats.norm.ppf(1 - alpha / 2)
    for n in ns:
        if kind == "normal1":
            mu, sd = design.model.normal_params()
            scale, df = sd / math.sqrt(n), n - 1
        else:
            nb = design.n_b(n)
            _, sda = design.model.normal_params()
            _, sdb = design.model_b.normal_params()
            if design.method == "z":
                scale, df = math.sqrt(sda**2 / n + sdb**2 / nb), None
            else:
                scale, df = sda * math.sqrt(1 / n + 1 / nb), n + nb - 2
        if design.method == "z":
            hw = z * scale
            values, weights = np.array([hw]), np.array([1.0])
            mean_hw = med = p90 = hw
            assurance = None if margin is None else float(hw <= margin * (1 + 1e-12))
            at_assurance = hw
        else:
            if df is None:
                df = n - 1
            tq = stats.t.ppf(1 - alpha / 2, df)
            c = tq * scale  # hw = c * sqrt(W / df), W ~ chi2(df)
            log_c4 = 0.5 * math.log(2.0 / df) + special.gammaln((df + 1) / 2) - special.gammaln(df / 2)
            mean_hw = c * math.exp(log_c4)
            med = c * math.sqrt(stats.chi2.ppf(0.5, df) / df)
            p90 = c * math.sqrt(stats.chi2.ppf(0.9, df) / df)
            assurance = None if margin is None else float(stats.chi2.cdf(df * (margin / c) ** 2, df))
            at_assurance = c * math.sqrt(stats.chi2.ppf(design.assurance, df) / df)
            probs = (np.arange(400) + 0.5) / 400
            values = c * np.sqrt(stats.chi2.ppf(probs, df) / df)
            weights = np.full(400, 1 / 400)
        m = {
            "coverage": conf,
            "miss_low": alpha / 2,
            "miss_high": alpha / 2,
            "margin_mean": mean_hw,
            "margin_median": med,
            "margin_p90": p90,
            "assurance": assurance,
            "margin_values": values,
            "margin_weights": weights,
        }
        rows.append(replace(row_from_measures(design, n, m, seed, "exact-normal"), margin_at_assurance=at_assurance))
    return rows


# --------------------------------------------------------------------------
# blocks and chunks
# --------------------------------------------------------------------------
#: values per drawing piece: a piece is drawn and reduced while it sits in the
#: per-core L2 cache, which keeps a check close to the cost of the draws
PIECE_VALUES = 1 << 15
#: pieces per random block (one generator per block amortises its creation)
PIECES_PER_BLOCK = 4
#: values per work unit on buffered paths
UNIT_VALUES = 1 << 17
#: values per slab of a nested unit: a slab's running sums, limits and counts
#: stay in cache between passes. Measured on the work after the draw of one
#: 324 x 400 unit (t interval), quiet machine: slabs of 24-128 rows took
#: 2.1-3.1 ms against 3.8-5.7 ms for the whole unit; whole curve n = 2..400 /
#: one check at load average 9 (best of 8, alternating): 2.53 with 32 Ki
#: values, 2.42 with 64 Ki and 2.42 with 128 Ki (whole units). Smaller slabs
#: lose to Python's overhead per slab (about 60 microseconds). No number
#: depends on it.
SLAB_VALUES = 1 << 16


def piece_rows(columns: int) -> int:
    """Replicates per drawing piece for rows of ``columns`` values."""
    return int(max(1, PIECE_VALUES // max(columns, 1)))


def block_size(columns: int) -> int:
    """Replicates per random block for draws of ``columns`` values (fixed by design).

    A block's generator is consumed in fixed steps: ``piece_rows`` replicates
    at a time on the full path, ``unit_rows`` on buffered paths (nested
    curves, bootstrap). Both depend only on ``columns``, so the numbers depend
    on the root, the block index and ``columns`` -- never on chunking.
    """
    return piece_rows(columns) * PIECES_PER_BLOCK


def slab_rows(columns: int) -> int:
    """Rows per slab when a nested unit is reduced (does not affect any number)."""
    return int(max(1, SLAB_VALUES // max(columns, 1)))


def unit_rows(columns: int) -> int:
    """Replicates per work unit on buffered paths (nested curves, bootstrap).

    A unit lies inside one block and is drawn from the block's generator in
    order; about 1 MiB of values, so the prefix sums and intervals that follow
    the draw work on cache-resident data. Fixed by ``columns`` alone.
    """
    return int(max(1, min(block_size(columns), UNIT_VALUES // max(columns, 1))))


def _plan(total: int, columns: int, chunk_bytes: int, arrays: int) -> tuple[list[tuple[int, int]], int, int]:
    """Blocks, blocks per chunk and rows of the chunk buffer."""
    bs = block_size(columns)
    blocks = rngmod.blocks(total, bs)
    per_chunk = max(1, chunk_bytes // max(1, bs * columns * 8 * arrays))
    rows = min(total, per_chunk * bs)
    return blocks, per_chunk, rows


def _chunks(blocks: list[tuple[int, int]], per_chunk: int):
    """Yield (index of first block, blocks) for groups of whole blocks."""
    for i in range(0, len(blocks), per_chunk):
        yield i, blocks[i : i + per_chunk]


def _piece_sums(model, root, stage: int, first: int, blocks, columns: int, transform, need_m3: bool):
    """Power sums per replicate, reducing each piece right after drawing it.

    Each block's generator is consumed ``piece_rows(columns)`` replicates at
    a time; only the (rows, 1) sums are kept.
    """
    rows = blocks[-1][1] - blocks[0][0]
    off = blocks[0][0]
    pr = piece_rows(columns)
    piece = np.empty((min(pr, rows), columns))
    s1 = np.empty((rows, 1))
    s2 = np.empty((rows, 1))
    s3 = np.empty((rows, 1)) if need_m3 else None
    for bi, (s, e) in enumerate(blocks):
        g = rngmod.generator(root, stage, first + bi)
        for ps in range(s, e, pr):
            pe = min(ps + pr, e)
            x = model.draw(g, (pe - ps, columns), out=piece[: pe - ps])
            if transform is not None:
                transform(x)
            sl = slice(ps - off, pe - off)
            np.einsum("ij->i", x, out=s1[sl, 0])  # faster than sum(axis=1) on short rows
            np.einsum("ij,ij->i", x, x, out=s2[sl, 0])
            if need_m3:
                np.einsum("ij,ij,ij->i", x, x, x, out=s3[sl, 0])
    return s1, s2, s3


# --------------------------------------------------------------------------
# sufficient statistics for normal data
# --------------------------------------------------------------------------
def sufficient_ok(design: Design, method: Method) -> bool:
    if method.kind == "summary" and not method.needs_m3 and method.shift_equivariant:
        return normal_params_of(design.model) is not None
    if method.kind == "summary2":
        return normal_params_of(design.model) is not None and normal_params_of(design.model_b) is not None
    return False


def _suff_draw(model, n, root, stage, first, blocks):
    _, sd = model.normal_params()
    rows = blocks[-1][1] - blocks[0][0]
    mean = np.empty(rows)
    var = np.empty(rows)
    off = blocks[0][0]
    for bi, (s, e) in enumerate(blocks):
        g = rngmod.generator(root, stage, first + bi)
        g.standard_normal(out=mean[s - off : e - off])
        g.standard_gamma((n - 1) / 2.0, out=var[s - off : e - off])
    mean *= sd / math.sqrt(n)  # centred on the true mean
    var *= 2.0 * sd * sd / (n - 1)  # sigma^2 chi2(n-1) / (n-1)
    return Summary(n=n, mean=mean, var=var, sd_true=sd)


def _sufficient(design, method, n, replicates, root, seed, progress, chunk_bytes, threads=1) -> CheckResult:
    """Normal data: a normal mean and a chi-square variance per replicate, in groups of blocks."""
    acc = Accumulator(1, replicates, design.margin)
    blocks = rngmod.blocks(replicates, block_size(2))
    per = max(1, (1 << 17) // block_size(2))
    items = [(i, blocks[i : i + per]) for i in range(0, len(blocks), per)]

    def work(item) -> Partial:
        # the measures are reduced here, in the worker thread; the calling thread only merges
        i, grp = item
        starts = [s - grp[0][0] for s, _ in grp]
        a = _suff_draw(design.model, n, root, rngmod.STAGE_MAIN, i, grp)
        if method.kind == "summary" and method.centre_half is not None:
            c, h = method.centre_half(a, design.confidence)
            lim = _Limits(np.broadcast_to(c, a.mean.shape), np.broadcast_to(h, a.mean.shape), None, starts, symmetric=True)
        else:
            if method.kind == "summary":
                lo, hi = method.func(a, design.confidence)
            else:
                b = _suff_draw(design.model_b, design.n_b(n), root, rngmod.STAGE_GROUP_B, i, grp)
                lo, hi = method.func(a, b, design.confidence)
            lim = _Limits(np.asarray(lo).reshape(-1, 1), np.asarray(hi).reshape(-1, 1), None, starts)
        red = acc.reducer(0.0, grp[0][0])
        lim.reduce_into(red)
        return red.partial()

    for (_, grp), part in zip(items, ordered_map(work, items, threads)):
        acc.merge(part)
        if progress:
            progress(grp[-1][1], replicates)
    acc.finish()
    r = acc.row(0, design, n, replicates, seed, "sufficient")
    if design.assurance in (0.5, 0.9):  # the median / 90th percentile already computed
        return r
    return replace(r, margin_at_assurance=float(acc.quantiles(design.assurance)[0]))


# --------------------------------------------------------------------------
# simulation (full and nested)
# --------------------------------------------------------------------------
def prefix_moments(d: np.ndarray, ns: Sequence[int], nested: bool, need_m3: bool, cols=None, shift: float = 0.0):
    """Prefix sums of d - shift, (d - shift)^2 (and cubes) at each n in ns; d is (b, n_max).

    ``cols``: :func:`prefix_columns` of ``ns``, when the caller has it already.
    ``d`` may be overwritten.
    """
    if not nested:
        if shift:
            d -= shift
        s1 = d.sum(axis=1, keepdims=True)
        s2 = np.einsum("ij,ij->i", d, d)[:, None]
        s3 = np.einsum("ij,ij,ij->i", d, d, d)[:, None] if need_m3 else None
        return s1, s2, s3
    cols = prefix_columns(ns) if cols is None else cols
    # Both running sums in one pass: d in the real and d^2 in the imaginary
    # part of a complex array. A complex add is two independent IEEE double
    # adds, so the sums are the very bits of two real running sums, while a
    # running sum's speed is set by the chain from one element to the next
    # (about 3.3 ns per element on the project machine): the pair costs about
    # 60% of two real cumsums (measured on 81 x 400 slabs, packing included).
    z = np.empty(d.shape, dtype=np.complex128)
    np.subtract(d, shift, out=z.real)  # centring and packing in one pass
    np.multiply(z.real, z.real, out=z.imag)
    cube = np.multiply(z.imag, z.real) if need_m3 else None
    np.cumsum(z, axis=1, out=z)
    # columns kept with gaps between them are copied to contiguous arrays, on
    # which the many element-wise passes that follow run two to three times
    # faster than on strided views; consecutive columns are read in place
    keep = (lambda a: a) if isinstance(cols, slice) and cols.step == 1 else np.ascontiguousarray
    s1 = keep(z.real[:, cols])
    s2 = keep(z.imag[:, cols])
    s3 = keep(np.cumsum(cube, axis=1, out=cube)[:, cols]) if need_m3 else None
    return s1, s2, s3


def prefix_columns(ns) -> slice | np.ndarray:
    """Column index of each prefix length; a view-making slice when evenly spaced."""
    idx = np.asarray(ns, dtype=np.int64) - 1
    if len(idx) > 1:
        step = idx[1] - idx[0]
        if step > 0 and np.all(np.diff(idx) == step):
            return slice(int(idx[0]), int(idx[-1]) + 1, int(step))
    elif len(idx) == 1:
        return slice(int(idx[0]), int(idx[0]) + 1)
    return idx


def summary_from_sums(s1, s2, s3, n, sd_true) -> Summary:
    """Summary from power sums (centred data); may overwrite s1 in place.

    Strided views (the running sums of :func:`prefix_moments`) are read, not
    written: the results go to new contiguous arrays in as many passes.
    """
    nf = np.asarray(n, dtype=np.float64)
    inv_n = 1.0 / nf
    mean = np.multiply(s1, inv_n, out=s1 if s1.flags.c_contiguous and s1.flags.writeable else None)
    m3 = None
    if s3 is not None:
        m3 = s3 * inv_n - 3.0 * mean * (s2 * inv_n) + 2.0 * mean**3
    tmp = mean * mean
    tmp *= nf
    var = np.subtract(s2, tmp, out=tmp)
    var *= 1.0 / (nf - 1.0)
    # rounding can leave a tiny negative variance; every method clips it
    return Summary(n=n, mean=mean, var=var, m3=m3, sd_true=sd_true)


@dataclass(frozen=True)
class _SimPlan:
    """What every work item of one simulation shares (read-only across threads)."""

    design: Design
    method: Method
    ns: list
    nbs: list | None
    ncol_a: int
    ncol_b: int
    nested: bool
    fused: bool
    root: np.random.SeedSequence
    log_shift: float
    threads: int = 1
    #: the true value the limits are compared with (0 for shift-equivariant methods on centred data)
    truth: float = 0.0
    #: replicates (from the first) whose half-widths the accumulator keeps
    keep: int = 0
    #: prefix_columns of ns and nbs, and ns as an array (computed once, not per slab)
    cols_a: object = None
    cols_b: object = None
    n_eval: np.ndarray | None = None

    def reducer(self, first_row: int) -> Reducer:
        return Reducer(len(self.ns), self.truth, self.design.margin, self.keep - first_row)

    @property
    def two(self) -> bool:
        return self.nbs is not None


@dataclass(frozen=True)
class _Limits:
    """Interval limits of one piece of work, in the order the accumulator takes them.

    ``symmetric``: ``lo`` holds the centres and ``hi`` the half-widths.
    """

    lo: np.ndarray
    hi: np.ndarray
    degenerate: np.ndarray | None
    starts: list
    symmetric: bool = False

    def reduce_into(self, red: Reducer, more: bool = False) -> None:
        """Counts and sums of these limits into ``red`` (``more``: they continue its last unit)."""
        if self.symmetric:
            red.add_symmetric(self.lo, self.hi, starts=self.starts, more=more)
        else:
            red.add(self.lo, self.hi, self.degenerate, starts=self.starts, more=more)


_FUSED_KINDS = ("summary", "summary2", "log", "count", "count2")


def _simulate(design, method, ns, replicates, root, seed, progress, chunk_bytes, nested, threads=1) -> list[CheckResult]:
    """Simulated measures at every n in ``ns``: work items on ``threads`` threads, accumulated in order."""
    two = design.two_sample
    nbs = [design.n_b(n) for n in ns] if two else None
    ncol_a = int(max(ns))
    ncol_b = int(max(nbs)) if two else 0
    columns = ncol_a + ncol_b
    fused = not nested and method.kind in _FUSED_KINDS
    mu_a = design.model.mean
    acc = Accumulator(len(ns), replicates, design.margin)
    plan = _SimPlan(design, method, list(ns), nbs, ncol_a, ncol_b, nested, fused, root,
                    math.log(mu_a) if method.kind == "log" and mu_a > 0 else 0.0, threads,
                    truth=0.0 if method.shift_equivariant else design.true_value, keep=acc.keep,
                    cols_a=prefix_columns(ns), cols_b=prefix_columns(nbs) if two else None,
                    n_eval=np.asarray(ns, dtype=np.int64))
    all_blocks, per_chunk, _ = _plan(replicates, columns, chunk_bytes, 4 if nested else 1)
    if fused:
        items = [(first, blocks) for first, blocks in _chunks(all_blocks, per_chunk)]
        work = lambda item: _fused_item(plan, *item)  # noqa: E731
    else:
        items = [(bi, [block]) for bi, block in enumerate(all_blocks)]
        work = lambda item: _block_item(plan, item[0], item[1][0], unit_rows(columns))  # noqa: E731
    # bootstrap methods run their own thread pool inside each call
    n_threads = 1 if method.kind in ("sample", "sample2") else threads
    # every work item reduces its limits to counts and sums in its own thread;
    # here they are only merged, in item order (so the thread count changes no bit)
    for (_, blocks), part in zip(items, ordered_map(work, items, n_threads)):
        acc.merge(part)
        if progress:
            progress(blocks[-1][1], replicates)
    acc.finish()
    path = "nested" if nested else "simulation"
    rows = []
    # the median and 90th percentile are computed already; other levels in one pass
    at_assurance = None if design.assurance in (0.5, 0.9) else acc.quantiles(design.assurance)
    for j, n in enumerate(ns):
        r = acc.row(j, design, n, replicates, seed, path)
        if at_assurance is not None:
            r = replace(r, margin_at_assurance=float(at_assurance[j]))
        rows.append(r)
    return rows


def _centre_by(mu: float):
    def f(x):
        x -= mu
    return f


def _log_transform(plan: _SimPlan):
    def f(x):
        if np.any(x <= 0):
            d = plan.design
            raise InputError("method.interval", f"{d.method} needs strictly positive data; model {d.model.describe()} gave values <= 0")
        np.log(x, out=x)
        x -= plan.log_shift
    return f


def summary_shift(design: Design, method: Method) -> float:
    """The value subtracted from one-sample summary data: the true mean for
    shift-equivariant methods (precision), 0 for the others (e.g. grice-bain
    needs the raw values)."""
    return design.model.mean if method.shift_equivariant else 0.0


def _fused_item(plan: _SimPlan, first: int, blocks) -> Partial:
    """A chunk of whole blocks, each piece reduced to power sums as it is drawn, then to measures."""
    d, kind = plan.design, plan.method.kind
    tr_a = {"summary": _centre_by(summary_shift(d, plan.method)), "summary2": _centre_by(d.model.mean),
            "log": _log_transform(plan)}.get(kind)
    ma = _piece_sums(d.model, plan.root, rngmod.STAGE_MAIN, first, blocks, plan.ncol_a, tr_a, plan.method.needs_m3)
    mb = None
    if plan.two:
        tr_b = _centre_by(d.model_b.mean) if kind == "summary2" else None
        mb = _piece_sums(d.model_b, plan.root, rngmod.STAGE_GROUP_B, first, blocks, plan.ncol_b, tr_b, False)
    red = plan.reducer(blocks[0][0])
    _limits(plan, ma, mb, None, None, None, block_starts(blocks)).reduce_into(red)
    return red.partial()


def _block_item(plan: _SimPlan, bi: int, block: tuple[int, int], rows: int) -> Partial:
    """One random block drawn unit by unit from its own generators (nested curves, bootstrap).

    Each unit is reduced to measures right after its draw; nested curves work
    through a unit in slabs of rows small enough to stay in the core's cache
    (the draws, running sums, limits and counts of a slab), and the float sums
    continue from slab to slab in row order, so the unit's sums are the same
    bits as if it were reduced at once.
    """
    d = plan.design
    g_a = rngmod.generator(plan.root, rngmod.STAGE_MAIN, bi)
    g_b = rngmod.generator(plan.root, rngmod.STAGE_GROUP_B, bi) if plan.two else None
    g_boot = rngmod.generator(plan.root, rngmod.STAGE_BOOTSTRAP, bi) if plan.method.kind in ("sample", "sample2") else None
    s, e = block
    ur = min(rows, e - s)
    buf_a = np.empty((ur, plan.ncol_a))
    buf_b = np.empty((ur, plan.ncol_b)) if plan.two else None
    red = plan.reducer(s)
    # slabs only where rows are independent (not bootstrap: its resampling stream is consumed per call)
    # and with two or more n (one column's float sums are pairwise, not row by row)
    slab = slab_rows(plan.ncol_a + plan.ncol_b) if plan.nested and len(plan.ns) > 1 else ur
    for us in range(s, e, rows):
        ue = min(us + rows, e)
        xa = d.model.draw(g_a, (ue - us, plan.ncol_a), out=buf_a[: ue - us])
        xb = d.model_b.draw(g_b, (ue - us, plan.ncol_b), out=buf_b[: ue - us]) if plan.two else None
        for i in range(0, ue - us, slab):
            j = min(i + slab, ue - us)
            lim = _limits(plan, None, None, xa[i:j], None if xb is None else xb[i:j], g_boot, [0])
            lim.reduce_into(red, more=i > 0)
    return red.partial()


def _limits(plan: _SimPlan, ma, mb, xa, xb, g_boot, starts) -> _Limits:
    """Interval limits from power sums (``ma``/``mb``, fused) or raw draws (``xa``/``xb``)."""
    d, method, kind = plan.design, plan.method, plan.method.kind
    conf, nested = d.confidence, plan.nested
    n_eval = plan.n_eval
    degenerate = None
    if kind in ("summary", "summary2"):
        if ma is None:
            shift = summary_shift(d, method) if kind == "summary" else d.model.mean
            ma = prefix_moments(xa, plan.ns, nested, method.needs_m3, plan.cols_a, shift=shift)
        sa = summary_from_sums(*ma, n_eval, d.model.sd)
        if kind == "summary" and method.centre_half is not None:
            c, h = method.centre_half(sa, conf)
            shape = np.shape(sa.mean)
            if np.shape(c) != shape or np.shape(h) != shape:  # e.g. z: one half-width per n
                c, h = np.broadcast_to(c, shape), np.broadcast_to(h, shape)
            return _Limits(c, h, None, starts, symmetric=True)
        if kind == "summary":
            lo, hi = method.func(sa, conf)
        else:
            if mb is None:
                mb = prefix_moments(xb, plan.nbs, nested, False, plan.cols_b, shift=d.model_b.mean)
            sb = summary_from_sums(*mb, np.asarray(plan.nbs), d.model_b.sd)
            lo, hi = method.func(sa, sb, conf)
    elif kind == "log":
        if ma is None:
            _log_transform(plan)(xa)
            ma = prefix_moments(xa, plan.ns, nested, False, plan.cols_a)
        s = summary_from_sums(*ma, n_eval, None)
        lo, hi = method.func(Summary(n=s.n, mean=s.mean + plan.log_shift, var=s.var), conf)
    elif kind in ("count", "count2"):
        ca = ma[0] if ma is not None else prefix_counts(xa, plan.ns, nested, plan.cols_a)
        if kind == "count":
            lo, hi = method.func(ca, n_eval, conf)
        else:
            cb = mb[0] if mb is not None else prefix_counts(xb, plan.nbs, nested, plan.cols_b)
            lo, hi = method.func(ca, n_eval, cb, np.asarray(plan.nbs), conf)
    elif kind in ("sample", "sample2"):
        xa -= d.model.mean
        if plan.two:
            xb -= d.model_b.mean
            lo, hi, degenerate = method.func(xa, xb, conf, rng=g_boot, resamples=d.resamples, threads=plan.threads)
        else:
            lo, hi, degenerate = method.func(xa, conf, rng=g_boot, resamples=d.resamples, threads=plan.threads)
    else:  # pragma: no cover - registry kinds are fixed
        raise InputError("method.interval", f"method kind {kind!r} cannot be simulated here")
    lo = np.asarray(lo, dtype=np.float64)
    hi = np.asarray(hi, dtype=np.float64)
    if lo.ndim == 1:
        lo, hi = lo[:, None], hi[:, None]
    deg = None if degenerate is None else np.asarray(degenerate).reshape(-1, 1)
    return _Limits(lo, hi, deg, starts)


def prefix_counts(x: np.ndarray, ns, nested: bool, cols=None) -> np.ndarray:
    if not nested:
        return x.sum(axis=1, keepdims=True)
    return np.cumsum(x, axis=1, out=x)[:, prefix_columns(ns) if cols is None else cols]

