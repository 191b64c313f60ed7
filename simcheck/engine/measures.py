"""Measures accumulated over replicates: coverage, misses, half-widths, assurance.

The one seam through which every evaluator (simple random samples, clustered
samples, finite populations) turns interval limits into a :class:`CheckResult`:
:class:`Accumulator` gathers counts and half-widths chunk by chunk;
:func:`row_from_measures` builds a row from measures computed exactly;
:func:`pool_checks` joins two evaluations of one n on independent replicates.

Definitions (the exact paths in :mod:`simcheck.engine.exact` use the same):

* coverage: share with lower <= true <= upper; ``miss_low``: upper < true;
  ``miss_high``: lower > true;
* half-width (upper - lower) / 2; a *degenerate* interval has zero width and
  misses the true value (Wald [0, 0] at x = 0, a t interval on equal
  values): it never counts as meeting the margin, because it does not
  deliver the precision it promises (a zero-width interval that covers, as
  a census with the finite population correction, is exact and does count);
  an interval with a NaN limit could not be computed: it counts as not
  covering and not within the margin and is left out of the half-width
  mean and quantiles;
* assurance: share of intervals with 0 < half-width <= margin (relative
  allowance 1e-12 for rounding);
* quantiles (``margin_median``, ``margin_p90``): the inverse of the empirical
  distribution function, the smallest value v with F(v) >= q (Hyndman & Fan
  1996, definition 1; numpy ``method="inverted_cdf"``), weighted on exact
  paths;
* Monte Carlo standard errors: sqrt(p (1 - p) / R) for shares, SD / sqrt(R)
  for the mean half-width [1]_ (replicates are independent, so the batch
  means of MCMC output [3]_ are not needed; the half-width has a finite
  variance whenever the data do, because it scales with the sample SD and
  Var(s) <= sigma^2), and for a quantile the half-distance between the order
  statistics that bound its distribution-free 95% confidence interval,
  divided by 1.96 [2]_. Exact paths report 0.

References
----------
.. [1] Morris, T. P., White, I. R. & Crowther, M. J. (2019). Using simulation
   studies to evaluate statistical methods. Statistics in Medicine 38,
   2074-2102 (Monte Carlo standard errors, Table 6).
.. [2] Conover, W. J. (1999). *Practical Nonparametric Statistics*, 3rd ed.
   Wiley, section 3.2 (confidence interval for a quantile from order
   statistics; section number from memory).
.. [3] Flegal, J. M. & Jones, G. L. (2010). Batch means and spectral variance
   estimators in Markov chain Monte Carlo. Annals of Statistics 38, 1034-1070.
.. [4] Hyndman, R. J. & Fan, Y. (1996). Sample quantiles in statistical
   packages. The American Statistician 50, 361-365.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace

import numpy as np

from simcheck.design import Design
from simcheck.estimands import spec_for
from simcheck.results import CheckResult

__all__ = [
    "Accumulator", "Reducer", "Partial", "kept_rows", "row_from_measures", "design_notes", "share_mcse", "with_note", "block_starts",
    "quantiles_with_mcse", "pool_checks", "plausibility_notes", "MARGIN_RTOL", "QUANTILE_Z",
    "CV_PLAUSIBLE", "SIZE_CV_PLAUSIBLE",
    "QUANTILE_BYTES", "KEEP_MARGINS", "CURVE_QUANTILE_REPLICATES",
]

#: cap on stored half-widths (float32) used for the median and 90th percentile
QUANTILE_BYTES = 64 << 20
#: half-width values kept in a CheckResult for figures
KEEP_MARGINS = 10_000
#: along a curve, the margin median and 90th percentile come from this many
#: replicates per n (partitioning every replicate at every n would cost more
#: than the simulation itself); mean and assurance always use all replicates
CURVE_QUANTILE_REPLICATES = 2_000
#: a half-width equal to the margin up to rounding meets it
MARGIN_RTOL = 1.0 + 1e-12
#: normal quantile of the order-statistic 95% interval behind a quantile's MCSE
QUANTILE_Z = 1.959963984540054


def row_from_measures(design, n, m, seed, path) -> CheckResult:
    """A :class:`CheckResult` from measures computed exactly (all MCSEs 0)."""
    a = m.get("assurance")
    notes = list(design_notes(design))
    deg = float(m.get("degenerate_share", 0.0))
    if deg > 0:
        notes.append(f"probability {deg:.4g} of a zero-width (degenerate) interval, which never counts as "
                     "meeting the margin")
    notes.extend(m.get("notes", ()))  # an exact path's own remarks (unbounded or uncomputable intervals)
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
        exact=True,
        **design_fields(design, n, seed, path, notes),
        miss_low_mcse=0.0,
        miss_high_mcse=0.0,
        margin_mean_mcse=0.0,
        margin_median_mcse=0.0,
        margin_p90_mcse=0.0,
        degenerate_share=deg,
        degenerate_share_mcse=0.0,
        margin_values=np.asarray(m.get("margin_values")) if m.get("margin_values") is not None else None,
        margin_weights=np.asarray(m.get("margin_weights")) if m.get("margin_weights") is not None else None,
    )


def design_fields(design: Design, n: int, seed, path: str, notes) -> dict:
    """The fields of a :class:`CheckResult` that come from the design and n, not from the measures."""
    nb = design.n_b(n)
    return {"method": design.method, "seed": seed, "estimand": design.estimand, "confidence": design.confidence,
            "target_margin": design.margin, "n_b": nb, "observations": int(n + (nb or 0)), "path": path,
            "notes": tuple(notes)}


def design_notes(design: Design) -> tuple[str, ...]:
    """Notes every result of ``design`` carries: true-value notes, the estimand's own notes
    (:attr:`simcheck.estimands.EstimandSpec.notes`) and :func:`plausibility_notes`."""
    out = []
    for m in (design.model, design.model_b):
        if m is not None and m.true_value_note:
            out.append(m.true_value_note)
    spec = spec_for(design.estimand)
    if spec is not None and spec.notes is not None:
        out += list(spec.notes(design))
    return tuple(out) + plausibility_notes(design)


#: coefficient of variation (SD / mean) of positive data above which a scenario is
#: flagged: skewed costs and durations have CVs of about 0.5-3 (common practice)
CV_PLAUSIBLE = 10.0
#: CV of cluster sizes above which a scenario is flagged: cluster trials report
#: about 0.4-0.9 (Eldridge, Ashby & Kerry 2006, Int. J. Epidemiol. 35:1292; from memory)
SIZE_CV_PLAUSIBLE = 2.0
_POSITIVE_MODELS = ("lognormal", "gamma", "weibull")


def plausibility_notes(design: Design) -> tuple[str, ...]:
    """Warnings for values allowed but far outside what data show (``data.cv = 80``).

    A CV is a ratio (0.8 means 80%); values such as 80 or 40 are more likely
    percentages than intended. The computation goes on; the warning is in
    every result's notes (and the command line prints it on stderr).
    """
    out = []
    groups = [("data.a", design.model), ("data.b", design.model_b)] if design.two_sample else [("data", design.model)]
    for key, m in groups:
        if m is None or m.zero_one or getattr(m, "name", None) not in _POSITIVE_MODELS or not m.mean > 0:
            continue
        cv = m.sd / m.mean
        if math.isfinite(cv) and cv > CV_PLAUSIBLE:
            given = m.params().get("cv") if hasattr(m, "params") else None
            what = f"{key}.cv = {given:g}" if isinstance(given, (int, float)) else f"{key}: the model's CV (SD / mean) = {cv:.4g}"
            out.append(f"warning: {what} is far above the usual range (up to about {CV_PLAUSIBLE:g}); "
                       "a CV is a ratio (0.8 means 80%)")
    cs = design.clusters
    if cs is not None and cs.size_cv is not None and cs.size_cv > SIZE_CV_PLAUSIBLE:
        out.append(f"warning: clusters.size_cv = {cs.size_cv:g} is far above the usual range (up to about "
                   f"{SIZE_CV_PLAUSIBLE:g}); a CV is a ratio (0.4 means 40%)")
    return tuple(out)


# --------------------------------------------------------------------------
# quantiles of the half-width
# --------------------------------------------------------------------------
def _rank(m: int, q: float) -> int:
    """1-based rank of the inverse-CDF q-quantile of m values: the smallest j with j/m >= q."""
    # the allowance keeps m q that is a whole number in exact arithmetic from rounding up
    return int(min(max(math.ceil(m * q - 1e-9), 1), m))


def quantiles_with_mcse(values: np.ndarray, probs=(0.5, 0.9)) -> tuple[np.ndarray, np.ndarray]:
    """Inverse-CDF quantiles of each column and their Monte Carlo standard errors.

    ``values`` has shape (m, k); NaN entries are left out (per column). The
    q-quantile is the order statistic of rank ceil(m q) (Hyndman & Fan 1996,
    definition 1). Its MCSE is (x_(u) - x_(l)) / (2 * 1.96) with l, u = m q
    -/+ 1.96 sqrt(m q (1 - q)) (rounded outwards, kept in 1..m): the
    order-statistic 95% confidence interval of the quantile (Conover 1999,
    section 3.2) read as +/- 1.96 standard errors.

    Returns
    -------
    q, se : ndarray, shape (len(probs), k)
    """
    values = np.asarray(values)
    k = values.shape[1]
    q = np.full((len(probs), k), np.nan)
    se = np.full((len(probs), k), np.nan)
    if values.shape[0] == 0:
        return q, se
    # a column sum is NaN exactly when the column holds a NaN (half-widths are >= 0)
    nan_cols = np.isnan(values.sum(axis=0, dtype=np.float64))
    if not nan_cols.any():
        groups = [(np.arange(k), values)]  # no copy: the usual case
    elif nan_cols.all():
        groups = []
    else:
        groups = [(np.flatnonzero(~nan_cols), values[:, ~nan_cols])]
    groups += [(np.array([j]), values[~np.isnan(values[:, j]), j][:, None]) for j in np.flatnonzero(nan_cols)]
    for cols, v in groups:
        m = v.shape[0]
        if m == 0 or cols.size == 0:
            continue
        ranks = []
        for p in probs:
            half = QUANTILE_Z * math.sqrt(m * p * (1 - p))
            lo = int(min(max(math.floor(m * p - half), 1), m))
            hi = int(min(max(math.ceil(m * p + half), 1), m))
            ranks.append((_rank(m, p), lo, hi))
        kth = sorted({r - 1 for trio in ranks for r in trio})
        if v.shape[1] > 1:
            # many short columns (a curve's 2,000 kept replicates per n): numpy's
            # vectorised sort of contiguous rows beats selecting six order
            # statistics (about 11 against 15 ms for 2,000 x 399 values); one long
            # column: selection (14 against 38 ms for 10^6 values). Order
            # statistics are exact either way.
            part = np.sort(np.ascontiguousarray(v.T), axis=1).T
        else:
            part = np.partition(v, kth, axis=0)
        with np.errstate(invalid="ignore"):  # inf - inf: no finite error
            for i, (r, lo, hi) in enumerate(ranks):
                q[i, cols] = part[r - 1]
                se[i, cols] = (part[hi - 1].astype(np.float64) - part[lo - 1]) / (2 * QUANTILE_Z)
    return q, se


# --------------------------------------------------------------------------
# measures accumulated over replicates
# --------------------------------------------------------------------------
def _segment_sums(a: np.ndarray, starts, squares: bool = False, prev: np.ndarray | None = None) -> np.ndarray:
    """Column sums (or sums of squares) of each row segment starting at ``starts``.

    One segment per random block, summed on its own, so totals do not depend on
    how blocks were grouped into chunks. (A plain sum per segment is several
    times faster than ``np.add.reduceat`` along axis 0.)

    ``prev`` (the running sums of rows that came before, in the same segment)
    continues the first segment: the rows are summed after it, one at a time,
    which for two or more columns is exactly the order numpy sums the rows of
    a whole segment in (a reduction along axis 0 of a C-ordered array adds
    row after row), so a segment reduced slab by slab gives the same bits as
    one reduced at once. With one column numpy sums pairwise instead, so
    callers pass ``prev`` only when ``a`` has two or more columns.
    """
    bounds = list(starts) + [a.shape[0]]
    out = np.empty((len(starts), a.shape[1]))
    for i in range(len(starts)):
        seg = a[bounds[i]:bounds[i + 1]]
        if i == 0 and prev is not None:
            buf = np.empty((seg.shape[0] + 1, a.shape[1]))
            buf[0] = prev
            if squares:
                np.multiply(seg, seg, out=buf[1:])
            else:
                buf[1:] = seg
            buf.sum(axis=0, out=out[i])
        elif squares:
            np.einsum("ij,ij->j", seg, seg, out=out[i])
        else:
            seg.sum(axis=0, out=out[i])
    return out


def _count(mask: np.ndarray) -> np.ndarray:
    """Number of True values in each column of a 2-D bool array.

    Measured on 81 x 399 slabs: a bool ``sum(axis=0)`` (int64 accumulation)
    costs about 0.6 ns per value, the bytes summed in int32 about 0.3 ns (one
    call never holds 2^31 rows); one column is counted flat (about 0.04 ns).
    """
    if mask.ndim == 2 and mask.shape[1] == 1:
        return np.array([np.count_nonzero(mask)], dtype=np.int64)
    return np.add.reduce(mask.view(np.uint8), axis=0, dtype=np.int32)


def kept_rows(k: int, total: int) -> int:
    """Replicates whose half-widths are kept for the quantiles (k sample sizes, ``total`` replicates)."""
    cap = QUANTILE_BYTES // (4 * k) if k == 1 else CURVE_QUANTILE_REPLICATES
    return int(min(total, cap))


@dataclass
class Partial:
    """The measures of consecutive replicates of one work item, reduced where they were computed.

    Counts are per column (sample size); ``sums`` and ``squares`` hold one row
    per random block (or unit) in replicate order; ``kept`` the first
    half-widths (float32) still wanted for the quantiles. Merging partials in
    replicate order (:meth:`Accumulator.merge`) gives the same bits as
    accumulating the limits themselves, whatever thread computed each partial.
    """

    rows: int
    low: np.ndarray
    high: np.ndarray
    nan: np.ndarray
    degenerate: np.ndarray
    assured: np.ndarray
    unbounded: np.ndarray
    sums: list
    squares: list
    kept: list


class Reducer:
    """Reduces interval limits to a :class:`Partial`, piece by piece, in the thread that computed them.

    ``keep``: how many of the coming half-widths (from the first) are kept for
    the quantiles. With ``more=True`` the rows continue the last segment (a
    unit reduced in slabs): their float sums continue it in row order (see
    :func:`_segment_sums`; two or more columns only).
    """

    def __init__(self, k: int, truth, margin: float | None, keep: int = 0) -> None:
        self.truth, self.margin, self.keep = truth, margin, int(max(keep, 0))
        z = lambda: np.zeros(k, np.int64)  # noqa: E731
        self.p = Partial(0, z(), z(), z(), z(), z(), z(), [], [], [])

    def add(self, lo: np.ndarray, hi: np.ndarray, degenerate=None, starts=None, more: bool = False) -> None:
        """lo, hi of shape (b, k); ``degenerate`` (bool, (b, k) or (b, 1)) as in :meth:`Accumulator.add`."""
        truth, p = self.truth, self.p
        below = _count(hi < truth)
        above = _count(lo > truth)
        hw = np.subtract(hi, lo)
        hw *= 0.5
        st = starts if starts is not None else [0]
        prev = p.sums.pop() if more else None
        sums = _segment_sums(hw, st, prev=prev)
        bad = None
        if np.isnan(sums).any():
            # an interval that could not be computed: counted, never covering,
            # never within the margin; a limit compared with NaN is False, so
            # take off the other limit's miss
            bad = np.isnan(lo) | np.isnan(hi) | np.isnan(hw)
            p.nan += _count(bad)
            below -= _count(bad & (hi < truth))
            above -= _count(bad & (lo > truth))
            hw[bad] = np.nan
            sums = _segment_sums(np.where(bad, 0.0, hw), st, prev=prev)
        if np.isinf(sums).any():
            # unbounded intervals (an infinite limit) are counted, never meet the
            # margin and are left out of the mean, which they would make infinite
            sums = _segment_sums(np.where(np.isfinite(hw), hw, 0.0), st, prev=prev)
            p.unbounded += _count(np.isinf(hw))
        p.low += below
        p.high += above
        self._half_widths(hw, sums, st, bad, None if degenerate is None else np.asarray(degenerate, bool),
                          lambda: (hi < truth) | (lo > truth), more)

    def add_symmetric(self, centre: np.ndarray, half: np.ndarray, starts=None, more: bool = False) -> None:
        """As :meth:`add` for intervals centre ± half (fewer passes over the data)."""
        if np.ndim(centre) == 1:
            centre, half = centre[:, None], half[:, None]
        truth, p = self.truth, self.p
        st = starts if starts is not None else [0]
        prev = p.sums[-1] if more else None
        sums = _segment_sums(half, st, prev=prev)
        if not np.isfinite(sums).all():  # a NaN centre comes with a NaN half here; infinite halves are rare
            self.add(centre - half, centre + half, starts=starts, more=more)
            return
        if more:
            p.sums.pop()
        dev = centre - truth if truth != 0 else centre
        p.low += _count(dev + half < 0)
        p.high += _count(dev > half)
        self._half_widths(half, sums, st, None, None, lambda: (dev + half < 0) | (dev > half), more)

    def _half_widths(self, hw: np.ndarray, sums: np.ndarray, st, bad, flagged, missed, more: bool) -> None:
        """Sums, zero-width count, assurance and kept values of one piece's half-widths.

        ``missed()`` gives the intervals that miss the true value; it is called
        only when a zero-width interval occurs (rare).
        """
        p = self.p
        ok = hw if bad is None else np.where(bad, 0.0, hw)
        if p.unbounded.any():
            ok = np.where(np.isinf(ok), 0.0, ok)
        p.sums.extend(sums)
        p.squares.extend(_segment_sums(ok, st, squares=True, prev=p.squares.pop() if more else None))
        if flagged is None and not (hw.size and ok.min() <= 0):
            zero = None  # no zero-width interval here (the usual case)
        else:
            # zero width and missing the truth; zero width that covers (a census
            # with the finite population correction) is exact, not degenerate
            zero = hw <= 0
            if flagged is not None:
                zero |= flagged
            zero &= missed()
            p.degenerate += _count(zero)
        if self.margin is not None:
            within = hw <= self.margin * MARGIN_RTOL  # NaN compares False
            if zero is not None:
                within &= ~zero
            p.assured += _count(within)
        b = hw.shape[0]
        if self.keep > 0:
            take = min(b, self.keep)
            p.kept.append(np.asarray(hw[:take], dtype=np.float32))
            self.keep -= take
        p.rows += b

    def partial(self) -> Partial:
        return self.p


class Accumulator:
    """Counts and half-widths for k sample sizes, accumulated chunk by chunk.

    Work done in other threads arrives as :class:`Partial` (:meth:`merge`, in
    replicate order); :meth:`add` and :meth:`add_symmetric` reduce limits here.
    """

    def __init__(self, k: int, total: int, margin: float | None) -> None:
        self.k, self.total, self.margin = k, total, margin
        self.covered = np.zeros(k, np.int64)
        self.low = np.zeros(k, np.int64)
        self.high = np.zeros(k, np.int64)
        self.assured = np.zeros(k, np.int64)
        self.block_sums: list[np.ndarray] = []
        self.block_squares: list[np.ndarray] = []
        self.degenerate = np.zeros(k, np.int64)
        self.nan = np.zeros(k, np.int64)
        self.unbounded = np.zeros(k, np.int64)
        self.keep = kept_rows(k, total)
        self.hw = np.empty((self.keep, k), np.float32)
        self.seen = 0

    def reducer(self, truth, first_row: int | None = None) -> Reducer:
        """A :class:`Reducer` for replicates starting at ``first_row`` (default: the next one)."""
        first = self.seen if first_row is None else first_row
        return Reducer(self.k, truth, self.margin, self.keep - first)

    def merge(self, p: Partial) -> None:
        """Add the measures of the next replicates (partials must come in replicate order)."""
        self.low += p.low
        self.high += p.high
        self.nan += p.nan
        self.degenerate += p.degenerate
        self.assured += p.assured
        self.unbounded += p.unbounded
        self.block_sums.extend(p.sums)
        self.block_squares.extend(p.squares)
        at = self.seen
        for part in p.kept:
            take = min(part.shape[0], self.keep - at)
            if take <= 0:
                break
            self.hw[at : at + take] = part[:take]
            at += take
        self.seen += p.rows

    def add(self, lo: np.ndarray, hi: np.ndarray, truth, degenerate=None, starts=None) -> None:
        """lo, hi of shape (b, k); truth broadcastable to them.

        ``starts`` are the row offsets of the random blocks in this chunk: float
        sums are taken per block and added in block order at the end, so they
        do not depend on how blocks were grouped into chunks. ``degenerate``
        (optional, bool of shape (b, k)) flags intervals a method declares
        degenerate besides those of zero width; like those, they count as
        degenerate when they miss the true value.
        """
        r = self.reducer(truth)
        r.add(lo, hi, degenerate, starts)
        self.merge(r.partial())

    def add_symmetric(self, centre: np.ndarray, half: np.ndarray, truth, starts=None) -> None:
        """As :meth:`add` for intervals centre ± half (fewer passes over the data)."""
        r = self.reducer(truth)
        r.add_symmetric(centre, half, starts)
        self.merge(r.partial())

    def finish(self) -> None:
        # coverage = not missed on either side and computable
        self.covered = self.total - self.low - self.high - self.nan
        if self.block_sums:
            self.hw_sum = np.stack(self.block_sums).sum(axis=0)
            self.hw_squares = np.stack(self.block_squares).sum(axis=0)
        else:
            self.hw_sum = self.hw_squares = np.zeros(self.k)
        kept = self.hw[: min(self.keep, self.seen)]
        q, se = quantiles_with_mcse(kept, (0.5, 0.9))
        self.q50, self.q90 = q[0], q[1]
        self.q50_se, self.q90_se = se[0], se[1]

    def _mean_and_mcse(self, j: int) -> tuple[float, float | None]:
        # over the intervals that could be computed and are bounded
        m = int(self.total - self.nan[j] - self.unbounded[j])
        if m <= 0:
            return math.nan, None
        mean = float(self.hw_sum[j] / m)
        if m < 2 or not math.isfinite(mean):
            return mean, None
        var = max(float(self.hw_squares[j] / m - mean * mean), 0.0) * m / (m - 1)
        return mean, math.sqrt(var / m)

    def row(self, j: int, design: Design, n: int, replicates: int, seed, path: str) -> CheckResult:
        """The result at column ``j``."""
        R = replicates
        nan = int(self.nan[j])
        cov = self.covered[j] / R
        assurance = None if self.margin is None else self.assured[j] / R
        mean, mean_se = self._mean_and_mcse(j)
        deg = int(self.degenerate[j])
        notes = list(design_notes(design))
        if self.keep < R:
            notes.append(f"margin median and 90th percentile from the first {self.keep} replicates")
        if self.unbounded[j]:
            notes.append(f"{int(self.unbounded[j])} intervals were unbounded (an infinite limit): they never meet the "
                         "margin, count in the median and 90th percentile as infinite, and are left out of the margin mean")
        if deg:
            notes.append(f"{deg} intervals had zero width (degenerate, e.g. all values equal or no events); "
                         "they never count as meeting the margin")
        if nan:
            notes.append(f"{nan} intervals could not be computed (NaN limits): they count as not covering and "
                         "not meeting the margin, and are left out of the half-width mean and quantiles")
        return CheckResult(
            n=int(n),
            replicates=int(R),
            true_value=float(design.true_value),
            coverage=float(cov),
            coverage_mcse=share_mcse(cov, R),
            miss_low=float(self.low[j] / R),
            miss_high=float(self.high[j] / R),
            margin_mean=mean,
            margin_median=float(self.q50[j]),
            margin_p90=float(self.q90[j]),
            assurance=None if assurance is None else float(assurance),
            assurance_mcse=None if assurance is None else share_mcse(assurance, R),
            exact=False,
            degenerate=deg,
            **design_fields(design, n, seed, path, notes),
            miss_low_mcse=share_mcse(self.low[j] / R, R),
            miss_high_mcse=share_mcse(self.high[j] / R, R),
            margin_mean_mcse=mean_se,
            margin_median_mcse=_finite_or_none(self.q50_se[j]),
            margin_p90_mcse=_finite_or_none(self.q90_se[j]),
            degenerate_share=deg / R,
            degenerate_share_mcse=share_mcse(deg / R, R),
            not_computed=nan,
            # curve rows carry no half-width sample (figures use a check at the chosen n)
            margin_values=self.hw[: min(self.seen, KEEP_MARGINS), j].astype(np.float64) if self.k == 1 else None,
            margin_weights=None,
        )


    def quantiles(self, q: float) -> np.ndarray:
        """The q quantile (same definition as the median) of the kept half-widths at every n."""
        return quantiles_with_mcse(self.hw[: min(self.keep, self.seen)], (q,))[0][0].astype(np.float64)


def _finite_or_none(x) -> float | None:
    x = float(x)
    return x if math.isfinite(x) else None


def share_mcse(p: float, r: int) -> float:
    """Monte Carlo SE of a share: sqrt(p (1 - p) / R) (Morris et al. 2019, Table 6)."""
    p = float(p)  # plain floats: numpy scalar arithmetic costs far more, with the same bits
    return math.sqrt(max(p * (1.0 - p), 0.0) / r)


def block_starts(blocks) -> list[int]:
    return [s - blocks[0][0] for s, _ in blocks]


def pool_checks(a: CheckResult, b: CheckResult) -> CheckResult:
    """Two simulated evaluations of the same n on independent replicates, as one.

    Shares and the mean half-width are replicate-weighted (the mean over the
    intervals that could be computed); their MCSEs are recomputed for the
    pooled replicates, the mean's from the pooled variance. Quantiles and
    their MCSEs come from the kept half-width values of both (up to
    :data:`KEEP_MARGINS` each) when present.
    """
    ra, rb = a.replicates, b.replicates
    R = ra + rb

    def w(x, y):
        if x is None or y is None:
            return None
        return (x * ra + y * rb) / R

    def share(x, y):
        v = w(x, y)
        return (None, None) if v is None else (float(v), share_mcse(v, R))

    cov, cov_se = share(a.coverage, b.coverage)
    ass, ass_se = share(a.assurance, b.assurance)
    low, low_se = share(a.miss_low, b.miss_low)
    high, high_se = share(a.miss_high, b.miss_high)
    deg, deg_se = share(a.degenerate_share, b.degenerate_share)
    mean, mean_se = _pooled_mean(a, b)
    med, p90 = w(a.margin_median, b.margin_median), w(a.margin_p90, b.margin_p90)
    med_se = p90_se = None
    vals = None
    if a.margin_values is not None and b.margin_values is not None:
        vals = np.concatenate([a.margin_values, b.margin_values])
        if vals.size:
            q, se = quantiles_with_mcse(vals[:, None], (0.5, 0.9))
            med, p90 = float(q[0, 0]), float(q[1, 0])
            med_se, p90_se = _finite_or_none(se[0, 0]), _finite_or_none(se[1, 0])
    notes = list(a.notes)
    notes += [t for t in b.notes if t not in notes]
    return replace(
        a, replicates=R, coverage=cov, coverage_mcse=cov_se, miss_low=low, miss_low_mcse=low_se,
        miss_high=high, miss_high_mcse=high_se, margin_mean=mean, margin_mean_mcse=mean_se,
        margin_median=float(med), margin_median_mcse=med_se, margin_p90=float(p90), margin_p90_mcse=p90_se,
        assurance=ass, assurance_mcse=ass_se, degenerate=a.degenerate + b.degenerate,
        degenerate_share=deg if deg is not None else 0.0, degenerate_share_mcse=deg_se,
        not_computed=a.not_computed + b.not_computed, notes=tuple(notes), margin_values=vals, margin_weights=None,
    )


def _pooled_mean(a: CheckResult, b: CheckResult) -> tuple[float, float | None]:
    ma, mb = a.replicates - a.not_computed, b.replicates - b.not_computed
    m = ma + mb
    if m <= 0:
        return math.nan, None
    xa = a.margin_mean if ma else 0.0
    xb = b.margin_mean if mb else 0.0
    mean = (ma * xa + mb * xb) / m
    if a.margin_mean_mcse is None or b.margin_mean_mcse is None or m < 2 or not math.isfinite(mean):
        return float(mean), None
    # within-sample variances back from each MCSE, plus the spread between the two means
    ss = sum(k * (k - 1) * se * se + k * (x - mean) ** 2
             for k, x, se in ((ma, xa, a.margin_mean_mcse), (mb, xb, b.margin_mean_mcse)) if k)
    return float(mean), math.sqrt(ss / (m - 1) / m)


def with_note(r: CheckResult, note: str) -> CheckResult:
    return replace(r, notes=tuple(r.notes) + (note,))


