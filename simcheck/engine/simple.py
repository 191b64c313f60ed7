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
from typing import Sequence

import numpy as np
from scipy import special, stats

from simcheck import rng as rngmod
from simcheck.design import Design
from simcheck.errors import InputError
from simcheck.intervals import Summary, get_method
from simcheck.intervals.base import Method
from simcheck.engine.measures import Accumulator, block_starts, row_from_measures
from simcheck.results import CheckResult

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
             curve: bool) -> list[CheckResult]:
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
        rows.append(row_from_measures(design, n, m, seed, "exact-normal"))
    return rows


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
def sufficient_ok(design: Design, method: Method) -> bool:
    if method.kind == "summary" and not method.needs_m3:
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


def _sufficient(design, method, n, replicates, root, seed, progress, chunk_bytes) -> CheckResult:
    acc = Accumulator(1, replicates, design.margin)
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
def prefix_moments(d: np.ndarray, ns: Sequence[int], nested: bool, need_m3: bool):
    """Prefix sums of d, d^2 (and d^3) at each n in ns; d is (b, n_max)."""
    if not nested:
        s1 = d.sum(axis=1, keepdims=True)
        s2 = np.einsum("ij,ij->i", d, d)[:, None]
        s3 = np.einsum("ij,ij,ij->i", d, d, d)[:, None] if need_m3 else None
        return s1, s2, s3
    cols = prefix_columns(ns)
    sq = d * d
    cube = sq * d if need_m3 else None
    # running sums in place (the draws are not needed afterwards); the columns
    # kept are copied to contiguous arrays, on which the many element-wise
    # passes that follow run two to three times faster than on strided views
    s1 = np.ascontiguousarray(np.cumsum(d, axis=1, out=d)[:, cols])
    s2 = np.ascontiguousarray(np.cumsum(sq, axis=1, out=sq)[:, cols])
    s3 = np.ascontiguousarray(np.cumsum(cube, axis=1, out=cube)[:, cols]) if need_m3 else None
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
    acc = Accumulator(k, replicates, design.margin)
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
                ma = prefix_moments(xa, ns, nested, method.needs_m3)
            sa = summary_from_sums(*ma, n_eval, design.model.sd)
            if kind == "summary" and method.centre_half is not None:
                c, h = method.centre_half(sa, design.confidence)
                acc.add_symmetric(np.broadcast_to(c, np.shape(sa.mean)), np.broadcast_to(h, np.shape(sa.mean)), truth, starts=block_starts(blocks))
                if progress:
                    progress(blocks[-1][1], replicates)
                continue
            if kind == "summary":
                lo, hi = method.func(sa, design.confidence)
            else:
                if not fused:
                    xb -= mu_b
                    mb = prefix_moments(xb, nbs, nested, False)
                sb = summary_from_sums(*mb, np.asarray(nbs), design.model_b.sd)
                lo, hi = method.func(sa, sb, design.confidence)
        elif kind == "log":
            if not fused:
                logs(xa)
                ma = prefix_moments(xa, ns, nested, False)
            s = summary_from_sums(*ma, n_eval, None)
            s = Summary(n=s.n, mean=s.mean + log_shift, var=s.var)
            lo, hi = method.func(s, design.confidence)
        elif kind in ("count", "count2"):
            ca = ma[0] if fused else prefix_counts(xa, ns, nested)
            if kind == "count":
                lo, hi = method.func(ca, n_eval, design.confidence)
            else:
                cb = mb[0] if fused else prefix_counts(xb, nbs, nested)
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
        acc.add(lo, hi, truth, None if degenerate is None else np.asarray(degenerate).reshape(-1, 1), starts=block_starts(blocks))
        if progress:
            progress(blocks[-1][1], replicates)
    acc.finish()
    path = "nested" if nested else "simulation"
    rows = []
    for j, n in enumerate(ns):
        rows.append(acc.row(j, design, n, replicates, seed, path))
    return rows


def prefix_counts(x: np.ndarray, ns, nested: bool) -> np.ndarray:
    if not nested:
        return x.sum(axis=1, keepdims=True)
    return np.cumsum(x, axis=1, out=x)[:, prefix_columns(ns)]

