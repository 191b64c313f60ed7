"""Coverage and achieved margin of an interval method, at one n or along a curve.

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
from typing import Callable, Iterable, Sequence

import numpy as np
from scipy import special, stats

from simcheck import rng as rngmod
from simcheck.design import Design
from simcheck.errors import InputError
from simcheck.intervals import Summary, get_method
from simcheck.intervals.base import Method
from simcheck.results import CheckResult, CurveResult

PATHS = ("auto", "exact", "sufficient", "nested", "full")

#: draw-buffer budget of one chunk; temporaries add a small multiple of it
CHUNK_BYTES = 4 << 20
#: cap on stored half-widths (float32) used for the median and 90th percentile
QUANTILE_BYTES = 64 << 20
#: half-width values kept in a CheckResult for figures
KEEP_MARGINS = 10_000
#: along a curve, the margin median and 90th percentile come from this many
#: replicates per n (partitioning every replicate at every n would cost more
#: than the simulation itself); mean and assurance always use all replicates
CURVE_QUANTILE_REPLICATES = 2_000

Progress = Callable[[int, int], None] | None


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

    Returns
    -------
    CheckResult

    References
    ----------
    .. [1] Morris, White & Crowther (2019), Statistics in Medicine 38:2074-2102.
    """
    rows = _evaluate(design, [n], replicates, rng, path, progress, chunk_bytes, curve=False)
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
) -> CurveResult:
    """:func:`check` for every n in ``n_values`` (sorted, duplicates dropped).

    Methods that work on sufficient statistics share one nested draw of the
    largest n (common random numbers); bootstrap methods are evaluated at
    each n separately, so give them a coarse grid.
    """
    ns = sorted({_as_n(v) for v in n_values})
    if not ns:
        raise InputError("n", "no sample sizes to evaluate")
    rows = _evaluate(design, ns, replicates, rng, path, progress, chunk_bytes, curve=True)
    return CurveResult(rows=tuple(rows))


def available_paths(design: Design) -> list[str]:
    """The paths valid for ``design``, cheapest first."""
    if design.clusters is not None or design.population is not None:
        from simcheck import engine_clustered

        return engine_clustered.available_paths(design)
    method = get_method(design.estimand, design.method)
    out = []
    if _exact_kind(design, method):
        out.append("exact")
    if _sufficient_ok(design, method):
        out.append("sufficient")
    if method.kind in ("summary", "log", "summary2", "count", "count2"):
        out.append("nested")
    out.append("full")
    return out


# --------------------------------------------------------------------------
# dispatch
# --------------------------------------------------------------------------
def exact_kind(design: Design) -> str | None:
    """Which exact law evaluates ``design`` (``"binomial"``, ``"binomial2"``,
    ``"normal1"``, ``"normal2"``), or None; simple random samples only."""
    return _exact_kind(design, get_method(design.estimand, design.method))


def mcse(share: float, replicates: int) -> float:
    """Monte Carlo SE of a share (Morris, White & Crowther 2019)."""
    return _mcse(share, replicates)


def _as_n(v) -> int:
    if isinstance(v, bool) or not float(v).is_integer():
        raise InputError("n", f"must be a whole number, got {v!r}")
    return int(v)


def _evaluate(design, ns, replicates, rng, path, progress, chunk_bytes, curve):
    if path not in PATHS:
        raise InputError("simulation.path", f"must be one of {', '.join(PATHS)}, got {path!r}")
    if isinstance(replicates, bool) or not isinstance(replicates, (int, np.integer)) or replicates < 1:
        raise InputError("simulation.replicates", f"must be a whole number >= 1, got {replicates!r}")
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
    if design.clusters is not None or design.population is not None:
        from simcheck import engine_clustered

        return engine_clustered.evaluate(design, ns, replicates, rng, path, progress, chunk_bytes)

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
        return _exact(design, method, ns, seed)
    if chosen == "sufficient":
        return [_sufficient(design, method, n, replicates, root, seed, progress, chunk_bytes) for n in ns]
    if chosen == "nested":
        return _simulate(design, method, ns, replicates, root, seed, progress, chunk_bytes, nested=True)
    rows = []
    for n in ns:
        rows.extend(_simulate(design, method, [n], replicates, root, seed, progress, chunk_bytes, nested=False))
    return rows


# --------------------------------------------------------------------------
# exact path
# --------------------------------------------------------------------------
def _normal(model):
    return model.normal_params() if model is not None else None


def _exact_kind(design: Design, method: Method) -> str | None:
    if design.estimand == "proportion" and method.kind == "count" and design.model.bernoulli_p() is not None:
        return "binomial"
    if design.estimand == "proportion-diff" and method.kind == "count2":
        if design.model.bernoulli_p() is not None and design.model_b.bernoulli_p() is not None:
            return "binomial2"
    if design.estimand == "mean" and method.kind == "summary" and _normal(design.model):
        if design.method in ("z", "t"):
            return "normal1"
    if design.estimand == "mean-diff" and method.kind == "summary2":
        na, nb = _normal(design.model), _normal(design.model_b)
        if na and nb:
            if design.method == "z":
                return "normal2"
            if design.method == "t" and math.isclose(na[1], nb[1], rel_tol=1e-12):
                return "normal2"
    return None


def _exact(design: Design, method: Method, ns: Sequence[int], seed) -> list[CheckResult]:
    from simcheck import exact as exactmod

    kind = _exact_kind(design, method)
    conf, margin = design.confidence, design.margin
    rows = []
    if kind == "binomial":
        p = design.model.bernoulli_p()
        measures = exactmod.binomial_curve(method.func, ns, p, conf, margin)
        for n, m in zip(ns, measures):
            rows.append(_row_from_measures(design, n, m, seed, "exact-binomial"))
        return rows
    if kind == "binomial2":
        pa, pb = design.model.bernoulli_p(), design.model_b.bernoulli_p()
        for n in ns:
            m = exactmod.two_binomial_measures(method.func, n, pa, design.n_b(n), pb, conf, margin)
            rows.append(_row_from_measures(design, n, m, seed, "exact-binomial"))
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
        rows.append(_row_from_measures(design, n, m, seed, "exact-normal"))
    return rows


def _row_from_measures(design, n, m, seed, path) -> CheckResult:
    nb = design.n_b(n)
    a = m.get("assurance")
    return CheckResult(
        n=int(n),
        replicates=0,
        true_value=float(design.true_value),
        coverage=float(m["coverage"]),
        coverage_mcse=0.0,
        miss_low=float(m["miss_low"]),
        miss_high=float(m["miss_high"]),
        margin_mean=float(m["margin_mean"]),
        margin_median=float(m["margin_median"]),
        margin_p90=float(m["margin_p90"]),
        assurance=None if a is None else float(a),
        assurance_mcse=None if a is None else 0.0,
        method=design.method,
        seed=seed,
        exact=True,
        estimand=design.estimand,
        confidence=design.confidence,
        target_margin=design.margin,
        n_b=nb,
        observations=int(n + (nb or 0)),
        path=path,
        notes=_notes(design),
        margin_values=np.asarray(m.get("margin_values")) if m.get("margin_values") is not None else None,
        margin_weights=np.asarray(m.get("margin_weights")) if m.get("margin_weights") is not None else None,
    )


def _notes(design: Design) -> tuple[str, ...]:
    out = []
    for m in (design.model, design.model_b):
        if m is not None and m.true_value_note:
            out.append(m.true_value_note)
    return tuple(out)


# --------------------------------------------------------------------------
# measures accumulated over replicates
# --------------------------------------------------------------------------
class _Acc:
    """Counts and half-widths for k sample sizes, accumulated chunk by chunk."""

    def __init__(self, k: int, total: int, margin: float | None) -> None:
        self.k, self.total, self.margin = k, total, margin
        self.covered = np.zeros(k, np.int64)
        self.low = np.zeros(k, np.int64)
        self.high = np.zeros(k, np.int64)
        self.assured = np.zeros(k, np.int64)
        self.block_sums: list[np.ndarray] = []
        self.degenerate = np.zeros(k, np.int64)
        self.nan = np.zeros(k, np.int64)
        self.unbounded = np.zeros(k, np.int64)
        cap = QUANTILE_BYTES // (4 * k) if k == 1 else CURVE_QUANTILE_REPLICATES
        self.keep = int(min(total, cap))
        self.hw = np.empty((self.keep, k), np.float32)
        self.seen = 0

    def add(self, lo: np.ndarray, hi: np.ndarray, truth, degenerate=None, starts=None) -> None:
        """lo, hi of shape (b, k); truth broadcastable to them.

        ``starts`` are the row offsets of the random blocks in this chunk: float
        sums are taken per block and added in block order at the end, so they
        do not depend on how blocks were grouped into chunks.
        """
        # bool sums along axis 0 are about twice as fast as count_nonzero(axis=0)
        self.low += (hi < truth).sum(axis=0)
        self.high += (lo > truth).sum(axis=0)
        hw = np.subtract(hi, lo)
        hw *= 0.5
        # always reduceat: the same summation whatever the grouping of blocks
        sums = np.add.reduceat(hw, starts if starts is not None else [0], axis=0)
        if np.isnan(sums).any():
            # an interval that could not be computed: counted, never covering
            bad = np.isnan(lo) | np.isnan(hi)
            self.nan += bad.sum(axis=0)
            hw = np.where(bad, 0.0, hw)
            sums = np.add.reduceat(hw, starts if starts is not None else [0], axis=0)
        if np.isinf(sums).any():
            self.unbounded += np.isinf(hw).sum(axis=0)
        self.block_sums.append(sums)
        if self.margin is not None:
            # tolerance for half-widths equal to the margin in exact arithmetic
            self.assured += (hw <= self.margin * (1 + 1e-12)).sum(axis=0)
        if degenerate is not None:
            self.degenerate += np.count_nonzero(degenerate, axis=0)
        b = hw.shape[0]
        if self.seen < self.keep:
            take = min(b, self.keep - self.seen)
            self.hw[self.seen : self.seen + take] = hw[:take]
        self.seen += b

    def add_symmetric(self, centre: np.ndarray, half: np.ndarray, truth, starts=None) -> None:
        """As :meth:`add` for intervals centre ± half (fewer passes over the data)."""
        if np.ndim(centre) == 1:
            centre, half = centre[:, None], half[:, None]
        dev = centre - truth if truth != 0 else centre
        n_low = (dev + half < 0).sum(axis=0)
        n_high = (dev > half).sum(axis=0)
        self.low += n_low
        self.high += n_high
        sums = np.add.reduceat(half, starts if starts is not None else [0], axis=0)
        if np.isnan(sums).any():  # a NaN centre comes with a NaN half here
            lo, hi = centre - half, centre + half
            self.low -= n_low
            self.high -= n_high
            self.add(lo, hi, truth, starts=starts)
            return
        self.block_sums.append(sums)
        if self.margin is not None:
            self.assured += (half <= self.margin * (1 + 1e-12)).sum(axis=0)
        b = half.shape[0]
        if self.seen < self.keep:
            take = min(b, self.keep - self.seen)
            self.hw[self.seen : self.seen + take] = half[:take]
        self.seen += b

    def finish(self) -> None:
        # coverage = not missed on either side; NaN limits are neither and are
        # taken off the covered count by the caller
        self.covered = self.total - self.low - self.high
        self.hw_sum = np.concatenate(self.block_sums).sum(axis=0) if self.block_sums else np.zeros(self.k)
        kept = self.hw[: min(self.keep, self.seen)]
        if kept.shape[0]:
            # one partition pass for all columns (column slices are strided)
            with np.errstate(invalid="ignore"):  # unbounded intervals (inf) interpolate to NaN
                q = np.quantile(kept, [0.5, 0.9], axis=0).astype(np.float64)
            if np.isnan(q).any():
                q = np.where(np.isnan(q) & np.isinf(kept).any(axis=0), np.inf, q)
            self.q50, self.q90 = q[0], q[1]
        else:
            self.q50 = self.q90 = np.full(self.k, np.nan)

    def row(self, j: int, design: Design, n: int, replicates: int, seed, path: str, nan_count: int = 0) -> CheckResult:
        R = replicates
        cov = (self.covered[j] - nan_count) / R
        med, p90 = float(self.q50[j]), float(self.q90[j])
        assurance = None if self.margin is None else self.assured[j] / R
        nb = design.n_b(n)
        notes = list(_notes(design))
        if self.keep < R:
            notes.append(f"margin median and 90th percentile from the first {self.keep} replicates")
        if self.unbounded[j]:
            notes.append(f"{int(self.unbounded[j])} intervals were unbounded (infinite half-width), so the margin mean is infinite")
        if self.degenerate[j]:
            notes.append(f"{int(self.degenerate[j])} samples had all values equal (degenerate; zero-width interval)")
        return CheckResult(
            n=int(n),
            replicates=int(R),
            true_value=float(design.true_value),
            coverage=float(cov),
            coverage_mcse=_mcse(cov, R),
            miss_low=float(self.low[j] / R),
            miss_high=float(self.high[j] / R),
            margin_mean=float(self.hw_sum[j] / R),
            margin_median=med,
            margin_p90=p90,
            assurance=None if assurance is None else float(assurance),
            assurance_mcse=None if assurance is None else _mcse(assurance, R),
            method=design.method,
            seed=seed,
            exact=False,
            estimand=design.estimand,
            confidence=design.confidence,
            target_margin=design.margin,
            n_b=nb,
            observations=int(n + (nb or 0)),
            degenerate=int(self.degenerate[j]),
            path=path,
            notes=tuple(notes),
            # curve rows carry no half-width sample (figures use a check at the chosen n)
            margin_values=self.hw[: min(self.seen, KEEP_MARGINS), j].astype(np.float64) if self.k == 1 else None,
            margin_weights=None,
        )


def _mcse(p: float, r: int) -> float:
    """Monte Carlo SE of a share: sqrt(p (1 - p) / R) (Morris et al. 2019, Table 6)."""
    return float(math.sqrt(max(p * (1.0 - p), 0.0) / r))


# --------------------------------------------------------------------------
# blocks and chunks
# --------------------------------------------------------------------------
#: values per drawing piece: a piece is drawn and reduced while it sits in the
#: per-core L2 cache, which keeps a check close to the cost of the draws
PIECE_VALUES = 1 << 15
#: pieces per random block (one generator per block amortises its creation)
PIECES_PER_BLOCK = 16
#: values per work unit on buffered paths
UNIT_VALUES = 1 << 17


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


def unit_rows(columns: int) -> int:
    """Replicates per work unit on buffered paths (nested curves, bootstrap).

    A unit lies inside one block and is drawn from the block's generator in
    order; about 1 MiB of values, so the prefix sums and intervals that follow
    the draw work on cache-resident data. Fixed by ``columns`` alone.
    """
    return int(max(1, min(block_size(columns), UNIT_VALUES // max(columns, 1))))


def _units(blocks, rows: int):
    """Yield (block index, [(start, stop)], is_last_unit_of_block)."""
    for bi, (s, e) in enumerate(blocks):
        for us in range(s, e, rows):
            ue = min(us + rows, e)
            yield bi, [(us, ue)], ue == e


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
def _sufficient_ok(design: Design, method: Method) -> bool:
    if method.kind == "summary" and not method.needs_m3:
        return _normal(design.model) is not None
    if method.kind == "summary2":
        return _normal(design.model) is not None and _normal(design.model_b) is not None
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


def _sufficient(design, method, n, replicates, root, seed, progress, chunk_bytes) -> CheckResult:
    acc = _Acc(1, replicates, design.margin)
    bs = block_size(2)
    blocks = rngmod.blocks(replicates, bs)
    per = max(1, (1 << 17) // bs)
    nb = design.n_b(n)
    for i in range(0, len(blocks), per):
        grp = blocks[i : i + per]
        a = _suff_draw(design.model, n, root, rngmod.STAGE_MAIN, i, grp)
        if method.kind == "summary" and method.centre_half is not None:
            c, h = method.centre_half(a, design.confidence)
            acc.add_symmetric(np.broadcast_to(c, a.mean.shape), np.broadcast_to(h, a.mean.shape), 0.0, starts=[s - grp[0][0] for s, _ in grp])
            if progress:
                progress(grp[-1][1], replicates)
            continue
        if method.kind == "summary":
            lo, hi = method.func(a, design.confidence)
        else:
            b = _suff_draw(design.model_b, nb, root, rngmod.STAGE_GROUP_B, i, grp)
            lo, hi = method.func(a, b, design.confidence)
        acc.add(np.asarray(lo).reshape(-1, 1), np.asarray(hi).reshape(-1, 1), 0.0, starts=[s - grp[0][0] for s, _ in grp])
        if progress:
            progress(grp[-1][1], replicates)
    acc.finish()
    return acc.row(0, design, n, replicates, seed, "sufficient")


# --------------------------------------------------------------------------
# simulation (full and nested)
# --------------------------------------------------------------------------
def _moments(d: np.ndarray, ns: Sequence[int], nested: bool, need_m3: bool):
    """Prefix sums of d, d^2 (and d^3) at each n in ns; d is (b, n_max)."""
    if not nested:
        s1 = d.sum(axis=1, keepdims=True)
        s2 = np.einsum("ij,ij->i", d, d)[:, None]
        s3 = np.einsum("ij,ij,ij->i", d, d, d)[:, None] if need_m3 else None
        return s1, s2, s3
    cols = _columns(ns)
    sq = d * d
    cube = sq * d if need_m3 else None
    # running sums in place (the draws are not needed afterwards); the columns
    # kept are copied to contiguous arrays, on which the many element-wise
    # passes that follow run two to three times faster than on strided views
    s1 = np.ascontiguousarray(np.cumsum(d, axis=1, out=d)[:, cols])
    s2 = np.ascontiguousarray(np.cumsum(sq, axis=1, out=sq)[:, cols])
    s3 = np.ascontiguousarray(np.cumsum(cube, axis=1, out=cube)[:, cols]) if need_m3 else None
    return s1, s2, s3


def _columns(ns) -> slice | np.ndarray:
    """Column index of each prefix length; a view-making slice when evenly spaced."""
    idx = np.asarray(ns, dtype=np.int64) - 1
    if len(idx) > 1:
        step = idx[1] - idx[0]
        if step > 0 and np.all(np.diff(idx) == step):
            return slice(int(idx[0]), int(idx[-1]) + 1, int(step))
    elif len(idx) == 1:
        return slice(int(idx[0]), int(idx[0]) + 1)
    return idx


def _summary(s1, s2, s3, n, sd_true) -> Summary:
    """Summary from power sums (centred data); overwrites s1 and s2 in place."""
    inv_n = 1.0 / np.asarray(n, dtype=np.float64)
    mean = np.multiply(s1, inv_n, out=s1)
    m3 = None
    if s3 is not None:
        m3 = s3 * inv_n - 3.0 * mean * (s2 * inv_n) + 2.0 * mean**3
    tmp = mean * mean
    tmp *= np.asarray(n, dtype=np.float64)
    var = np.subtract(s2, tmp, out=s2)
    var *= 1.0 / (np.asarray(n, dtype=np.float64) - 1.0)
    # rounding can leave a tiny negative variance; every method clips it
    return Summary(n=n, mean=mean, var=var, m3=m3, sd_true=sd_true)


def _simulate(design, method, ns, replicates, root, seed, progress, chunk_bytes, nested) -> list[CheckResult]:
    kind = method.kind
    two = design.two_sample
    ns_arr = np.asarray(ns, dtype=np.int64)
    nbs = [design.n_b(n) for n in ns] if two else None
    ncol_a = int(ns_arr.max())
    ncol_b = int(max(nbs)) if two else 0
    columns = ncol_a + ncol_b
    k = len(ns)
    acc = _Acc(k, replicates, design.margin)
    arrays = 4 if nested else 1

    mu_a = design.model.mean
    mu_b = design.model_b.mean if two else 0.0
    truth_raw = design.true_value
    # shift-equivariant methods work on values centred on the true mean
    centred = method.shift_equivariant
    all_blocks, per_chunk, rows = _plan(replicates, columns, chunk_bytes, arrays)
    fused_kinds = ("summary", "summary2", "log", "count", "count2")
    if not nested and kind in fused_kinds:
        buf_a = buf_b = None  # pieces are reduced as drawn
    else:
        ur = min(replicates, unit_rows(columns))
        buf_a = np.empty((ur, ncol_a))
        buf_b = np.empty((ur, ncol_b)) if two else None
    n_eval = ns_arr  # broadcasts over the columns of the prefix sums

    fused = not nested and kind in ("summary", "summary2", "log", "count", "count2")

    def centre(mu):
        def f(x):
            x -= mu
        return f

    def logs(x):
        if np.any(x <= 0):
            raise InputError("method.interval", f"{design.method} needs strictly positive data; model {design.model.describe()} gave values <= 0")
        np.log(x, out=x)
        x -= log_shift

    log_shift = math.log(mu_a) if kind == "log" and mu_a > 0 else 0.0

    if fused:
        work = list(_chunks(all_blocks, per_chunk))
    else:
        work = _units(all_blocks, unit_rows(columns))
    gens: dict[tuple[int, int], np.random.Generator] = {}

    def stream(stage: int, bi: int, last: bool) -> np.random.Generator:
        # one generator per (stage, block), consumed unit after unit
        g = gens.get((stage, bi))
        if g is None:
            g = gens[(stage, bi)] = rngmod.generator(root, stage, bi)
        if last:
            del gens[(stage, bi)]
        return g

    for first, blocks, *unit in work:
        xa = xb = None
        if fused:
            tr_a = {"summary": centre(mu_a), "summary2": centre(mu_a), "log": logs}.get(kind)
            ma = _piece_sums(design.model, root, rngmod.STAGE_MAIN, first, blocks, ncol_a, tr_a, method.needs_m3)
            mb = _piece_sums(design.model_b, root, rngmod.STAGE_GROUP_B, first, blocks, ncol_b, centre(mu_b) if kind == "summary2" else None, False) if two else None
        else:
            (s, e), last = blocks[0], unit[0]
            xa = design.model.draw(stream(rngmod.STAGE_MAIN, first, last), (e - s, ncol_a), out=buf_a[: e - s])
            if two:
                xb = design.model_b.draw(stream(rngmod.STAGE_GROUP_B, first, last), (e - s, ncol_b), out=buf_b[: e - s])
        degenerate = None
        truth = 0.0 if centred else truth_raw
        if kind in ("summary", "summary2"):
            if not fused:
                xa -= mu_a
                ma = _moments(xa, ns, nested, method.needs_m3)
            sa = _summary(*ma, n_eval, design.model.sd)
            if kind == "summary" and method.centre_half is not None:
                c, h = method.centre_half(sa, design.confidence)
                acc.add_symmetric(np.broadcast_to(c, np.shape(sa.mean)), np.broadcast_to(h, np.shape(sa.mean)), truth, starts=_starts(blocks))
                if progress:
                    progress(blocks[-1][1], replicates)
                continue
            if kind == "summary":
                lo, hi = method.func(sa, design.confidence)
            else:
                if not fused:
                    xb -= mu_b
                    mb = _moments(xb, nbs, nested, False)
                sb = _summary(*mb, np.asarray(nbs), design.model_b.sd)
                lo, hi = method.func(sa, sb, design.confidence)
        elif kind == "log":
            if not fused:
                logs(xa)
                ma = _moments(xa, ns, nested, False)
            s = _summary(*ma, n_eval, None)
            s = Summary(n=s.n, mean=s.mean + log_shift, var=s.var)
            lo, hi = method.func(s, design.confidence)
        elif kind in ("count", "count2"):
            ca = ma[0] if fused else _counts(xa, ns, nested)
            if kind == "count":
                lo, hi = method.func(ca, n_eval, design.confidence)
            else:
                cb = mb[0] if fused else _counts(xb, nbs, nested)
                lo, hi = method.func(ca, n_eval, cb, np.asarray(nbs), design.confidence)
        elif kind in ("sample", "sample2"):
            xa -= mu_a
            if two:
                xb -= mu_b
            g = stream(rngmod.STAGE_BOOTSTRAP, first, unit[0])
            if two:
                lo, hi, degenerate = method.func(xa, xb, design.confidence, rng=g, resamples=design.resamples)
            else:
                lo, hi, degenerate = method.func(xa, design.confidence, rng=g, resamples=design.resamples)
        else:  # pragma: no cover - registry kinds are fixed
            raise InputError("method.interval", f"method kind {kind!r} cannot be simulated here")
        lo = np.asarray(lo, dtype=np.float64)
        hi = np.asarray(hi, dtype=np.float64)
        if lo.ndim == 1:
            lo, hi = lo[:, None], hi[:, None]
        acc.add(lo, hi, truth, None if degenerate is None else np.asarray(degenerate).reshape(-1, 1), starts=_starts(blocks))
        if progress:
            progress(blocks[-1][1], replicates)
    acc.finish()
    path = "nested" if nested else "simulation"
    rows = []
    for j, n in enumerate(ns):
        r = acc.row(j, design, n, replicates, seed, path, nan_count=int(acc.nan[j]))
        if acc.nan[j]:
            r = _with_note(r, f"{int(acc.nan[j])} intervals could not be computed and count as not covering")
        rows.append(r)
    return rows


def _starts(blocks) -> list[int]:
    return [s - blocks[0][0] for s, _ in blocks]


def _with_note(r: CheckResult, note: str) -> CheckResult:
    from dataclasses import replace

    return replace(r, notes=tuple(r.notes) + (note,))


def _counts(x: np.ndarray, ns, nested: bool) -> np.ndarray:
    if not nested:
        return x.sum(axis=1, keepdims=True)
    return np.cumsum(x, axis=1, out=x)[:, _columns(ns)]

