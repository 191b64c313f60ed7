"""Measures accumulated over replicates: coverage, misses, half-widths, assurance.

The one seam through which every evaluator (simple random samples, clustered
samples, finite populations) turns interval limits into a :class:`CheckResult`:
:class:`Accumulator` gathers counts and half-widths chunk by chunk;
:func:`row_from_measures` builds a row from measures computed exactly.

References
----------
.. [1] Morris, T. P., White, I. R. & Crowther, M. J. (2019). Using simulation
   studies to evaluate statistical methods. Statistics in Medicine 38,
   2074-2102 (Monte Carlo standard errors of coverage-type measures, Table 6).
"""

from __future__ import annotations

import math
from dataclasses import replace

import numpy as np

from simcheck.design import Design
from simcheck.results import CheckResult

__all__ = [
    "Accumulator", "row_from_measures", "design_notes", "share_mcse", "with_note", "block_starts",
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


def row_from_measures(design, n, m, seed, path) -> CheckResult:
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
        notes=design_notes(design),
        margin_values=np.asarray(m.get("margin_values")) if m.get("margin_values") is not None else None,
        margin_weights=np.asarray(m.get("margin_weights")) if m.get("margin_weights") is not None else None,
    )


def design_notes(design: Design) -> tuple[str, ...]:
    out = []
    for m in (design.model, design.model_b):
        if m is not None and m.true_value_note:
            out.append(m.true_value_note)
    return tuple(out)


# --------------------------------------------------------------------------
# measures accumulated over replicates
# --------------------------------------------------------------------------
class Accumulator:
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
        notes = list(design_notes(design))
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
            coverage_mcse=share_mcse(cov, R),
            miss_low=float(self.low[j] / R),
            miss_high=float(self.high[j] / R),
            margin_mean=float(self.hw_sum[j] / R),
            margin_median=med,
            margin_p90=p90,
            assurance=None if assurance is None else float(assurance),
            assurance_mcse=None if assurance is None else share_mcse(assurance, R),
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


    def quantiles(self, q: float) -> np.ndarray:
        """The q quantile of the kept half-widths at every n, in one partition pass."""
        kept = self.hw[: min(self.keep, self.seen)]
        if not kept.shape[0]:
            return np.full(self.k, np.nan)
        with np.errstate(invalid="ignore"):
            return np.quantile(kept, q, axis=0).astype(np.float64)


def share_mcse(p: float, r: int) -> float:
    """Monte Carlo SE of a share: sqrt(p (1 - p) / R) (Morris et al. 2019, Table 6)."""
    return float(math.sqrt(max(p * (1.0 - p), 0.0) / r))


def block_starts(blocks) -> list[int]:
    return [s - blocks[0][0] for s, _ in blocks]


def with_note(r: CheckResult, note: str) -> CheckResult:
    return replace(r, notes=tuple(r.notes) + (note,))


