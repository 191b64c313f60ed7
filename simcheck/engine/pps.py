"""Selection with probability proportional to size, with replacement (PPS and monetary-unit sampling).

A design kind (see :mod:`simcheck.engine.kinds`) for designs with a
:class:`~simcheck.design.SelectionSpec`. The population of N items (sizes
and values, or book values and misstatements) is fixed: read from
``population.file`` or drawn once from the models, from the seed's entropy
without its spawn key (stream ``(STAGE_POPULATION, 0)``), like a
``[population]``, so every stage of a search and every sweep cell with that
seed sees the same population. The true value is that population's total
(or mean), not the models'.

Each replicate draws n items with replacement, item i with probability
``p_i = x_i / X`` at each draw (the inverse of the cumulative sizes at n
uniform numbers). Then, per sample:

* ``t`` / ``z``: the Hansen-Hurwitz estimate of the total and its interval
  (:func:`simcheck.intervals.pps.hh_interval`); for a one-sided target the
  limit at level c is the two-sided limit at 2c - 1;
* monetary-unit limits (``stringer``, ``stringer-poisson``,
  ``binomial-bound``, ``poisson-bound``): upper limits of the total
  misstatement from the drawn units' taints.

Measures (one-sided, as every one-sided design of simcheck): coverage is the
share of samples whose upper limit is at least the true total misstatement;
the achieved margin is the upper limit minus the point estimate (the
projected misstatement BV x mean taint, the Hansen-Hurwitz estimate), so the
target margin is the allowance for sampling risk the auditor tolerates; with
no misstatement found it is the upper limit itself. The share of samples
whose upper limit is at most the target margin (an auditor accepting the
book value when the limit stays below tolerable misstatement) is added to
the notes. The rows go through :mod:`simcheck.engine.measures` like every
other evaluator.

References
----------
.. [1] Hansen, M. H. & Hurwitz, W. N. (1943). On the theory of sampling from
   finite populations. Annals of Mathematical Statistics 14, 333-362.
.. [2] Cochran, W. G. (1977). Sampling Techniques, 3rd ed. Wiley, ch. 9A.
.. [3] Leslie, D. A., Teitlebaum, A. D. & Anderson, R. J. (1979).
   Dollar-Unit Sampling. Copp Clark Pitman (from memory).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, replace
from typing import Sequence

import numpy as np

from simcheck import rng as rngmod
from simcheck.design import Design
from simcheck.engine import measures as msr
from simcheck.engine.onesided import one_sided_rows
from simcheck.errors import InputError
from simcheck.intervals.pps import (
    HH_METHODS, MUS_BOUNDS, binomial_upper, count_bound, hh_interval, monetary_unit_n, poisson_factor, stringer_bound,
)
from simcheck.models.base import Model
from simcheck.results import CheckResult

__all__ = ["applies", "available_paths", "evaluate", "SizePopulation", "population_for", "formula_result",
           "read_size_columns"]

#: drawn units per random block (bounds memory; fixed by n, so results do not depend on chunking)
BLOCK_VALUES = 1 << 18


def applies(design: Design) -> bool:
    """True for designs with a ``selection`` (PPS or monetary-unit)."""
    return getattr(design, "selection", None) is not None


def available_paths(design: Design) -> list[str]:
    """``["exact", "full"]`` for monetary-unit sampling with a constant taint, else ``["full"]``.

    With one taint value every drawn unit's taint is 0 or that value, so each
    method's limit and estimate depend only on the number k of misstated
    units drawn, and k is Binomial(n, pi) with pi the misstated share of the
    book value: the measures are sums over k.
    """
    sel = design.selection
    if sel.monetary_unit and not isinstance(sel.taint, Model):
        return ["exact", "full"]
    return ["full"]


@dataclass(frozen=True)
class SizePopulation:
    """N items with sizes ``x_i > 0`` and values ``y_i`` (monetary-unit: misstatements ``d_i``)."""

    sizes: np.ndarray = field(repr=False)
    values: np.ndarray = field(repr=False)
    source: str = "models"

    @property
    def size(self) -> int:
        return int(self.sizes.size)

    @property
    def total_size(self) -> float:
        return float(self.sizes.sum())

    @property
    def total(self) -> float:
        return float(self.values.sum())

    @property
    def ratios(self) -> np.ndarray:
        """``y_i / x_i``: the value per unit of size (monetary-unit: the taint)."""
        return self.values / self.sizes

    def single_draw_variance(self) -> float:
        """``V1 = sum p_i (y_i / p_i - Y)^2``: n times the variance of the Hansen-Hurwitz estimate."""
        X = self.total_size
        z = X * self.ratios
        p = self.sizes / X
        return float(np.sum(p * (z - self.total) ** 2))


def read_size_columns(file: str, size_column: str, value_column: str | None) -> tuple[np.ndarray, np.ndarray | None]:
    """Sizes (and values) from the columns of a population file, every row filled.

    Raises
    ------
    InputError
        Empty cells (sizes and values must be paired row by row), sizes <= 0.
    """
    from simcheck.files import read_csv_column

    sizes, empty = read_csv_column(file, size_column, file_field="population.file",
                                   column_field="selection.size_column" if value_column else "population.column")
    field_name = "selection.size_column" if value_column else "population.column"
    if empty:
        raise InputError(field_name, f"column {size_column!r} has {empty} empty cells; every item needs its size")
    _check_sizes(sizes, field_name, f"column {size_column!r}")
    values = None
    if value_column is not None:
        values, empty = read_csv_column(file, value_column, file_field="population.file", column_field="population.column")
        if empty or values.size != sizes.size:
            raise InputError("population.column", f"column {value_column!r} must give a value on every row of "
                             f"{size_column!r} ({sizes.size} rows with a size, {values.size} values)")
    return sizes, values


def _check_sizes(sizes: np.ndarray, field_name: str, where: str) -> None:
    bad = int(np.count_nonzero(~(sizes > 0)))
    if bad:
        raise InputError(field_name, f"{where}: sizes must be > 0, got {bad} values <= 0 (first {float(sizes[~(sizes > 0)][0]):g})")


def population_for(design: Design, rng: rngmod.RngLike) -> SizePopulation:
    """The fixed population of items for the seed behind ``rng``."""
    root, _ = rngmod.root_sequence(rng)
    base = np.random.SeedSequence(entropy=root.entropy, pool_size=root.pool_size)
    g = rngmod.generator(base, rngmod.STAGE_POPULATION, 0)
    sel, pop = design.selection, design.population
    if pop.file is not None:
        if sel.monetary_unit:
            sizes, _ = read_size_columns(pop.file, pop.column, None)
        else:
            sizes, values = read_size_columns(pop.file, sel.size_column, pop.column)
        source = "file"
    else:
        sizes = sel.size_model.draw(g, (1, int(pop.size))).ravel()
        _check_sizes(sizes, "selection.size", f"the size model {sel.size_model.describe()}")
        if not sel.monetary_unit:
            values = design.model.draw(g, (1, int(pop.size))).ravel()
            if sel.data_per_size:
                values = values * sizes
        source = "models"
    if sel.monetary_unit:
        values = sizes * _taints(sel, sizes.size, g)
    return SizePopulation(sizes=sizes, values=np.asarray(values, dtype=np.float64), source=source)


def _taints(sel, N: int, g: np.random.Generator) -> np.ndarray:
    """Each item's taint: 0 unless misstated (probability error_rate), then drawn from the taint model."""
    wrong = g.random(N) < float(sel.error_rate)
    if isinstance(sel.taint, Model):
        t = sel.taint.draw(g, (1, N)).ravel()
        if np.any((t < 0) | (t > 1)):
            raise InputError("misstatement.taint", f"{sel.taint.describe()} gave taints outside [0, 1]")
    else:
        t = np.full(N, float(sel.taint))
    return np.where(wrong, t, 0.0)


def _limits(design: Design, r: np.ndarray, X: float, N: int) -> tuple[np.ndarray, np.ndarray]:
    """(lower, upper) per replicate; one-sided limits as the interval reflected about the estimate."""
    n = r.shape[1]
    conf = design.confidence
    if design.method in HH_METHODS:
        level = conf if design.bound == "two-sided" else 2.0 * conf - 1.0
        _, lo, hi = hh_interval(X * r, level, design.method)
    else:
        kind, factors = MUS_BOUNDS[design.method]
        est = X * r.mean(axis=1)
        if kind == "stringer":
            upper = stringer_bound(r, X, conf, factors)
        else:
            upper = count_bound(np.count_nonzero(r > 0, axis=1), n, X, conf, factors)
        lo, hi = 2.0 * est - upper, upper
    if design.estimand == "mean":
        lo, hi = lo / N, hi / N
    return lo, hi


def _draws(g: np.random.Generator, cum: np.ndarray, shape: tuple[int, int]) -> np.ndarray:
    """Item indices drawn with replacement with probability proportional to size."""
    u = g.random(shape)
    u *= cum[-1]
    idx = np.searchsorted(cum, u, side="right")
    np.minimum(idx, cum.size - 1, out=idx)
    return idx


def _one_n(design: Design, n: int, replicates: int, root, seed, pop: SizePopulation, truth: float, progress) -> CheckResult:
    rows = max(1, BLOCK_VALUES // n)
    acc = msr.Accumulator(1, replicates, design.margin)
    cum = np.cumsum(pop.sizes)
    ratios = pop.ratios
    X = pop.total_size
    accepted = 0
    for bi, (s, e) in enumerate(rngmod.blocks(replicates, rows)):
        g = rngmod.generator(root, rngmod.STAGE_MAIN, bi)
        r = ratios[_draws(g, cum, (e - s, n))]
        lo, hi = _limits(design, r, X, pop.size)
        acc.add(lo[:, None], hi[:, None], truth)
        if design.margin is not None:
            accepted += int(np.count_nonzero(hi <= design.margin * msr.MARGIN_RTOL))
        if progress:
            progress(e, replicates)
    acc.finish()
    row = acc.row(0, design, n, replicates, seed, "simulation")
    notes = tuple(row.notes) + tuple(_notes(design, n, pop, truth, accepted, replicates))
    return replace(row, true_value=float(truth), notes=notes)


def _notes(design: Design, n: int, pop: SizePopulation, truth: float, accepted: int, R: int) -> list[str]:
    sel = design.selection
    what = "monetary units" if sel.monetary_unit else "items"
    out = [f"n counts draws of {what} with probability proportional to size, with replacement "
           "(an item may be drawn more than once)",
           f"the population of {pop.size} items (total size {pop.total_size:.6g}) is "
           + ("read from population.file" if pop.source == "file" else "drawn once from the models")
           + f"; true value: its {design.estimand} ({truth:.6g}), not the models'"]
    if sel.monetary_unit:
        wrong = int(np.count_nonzero(pop.values > 0))
        share = float(pop.values[pop.values > 0].sum() / pop.total_size) if wrong else 0.0
        out.append(f"{wrong} of {pop.size} items misstated; {share:.4g} of the book value is misstated")
    if design.method in MUS_BOUNDS or design.bound == "upper":
        out.append("achieved margin: the upper limit minus the point estimate (the Hansen-Hurwitz projection)")
        if design.margin is not None and R:
            share = accepted / R
            out.append(f"n = {n}: share of samples whose upper limit is at most the target margin {design.margin:.6g}: "
                       f"{share:.4f} (MCSE {msr.share_mcse(share, R):.4f})")
        elif design.margin is not None:
            out.append(f"n = {n}: probability that the upper limit is at most the target margin {design.margin:.6g}: "
                       f"{accepted:.4f} (exact)")
    return out


def evaluate(design: Design, ns: Sequence[int], replicates: int, rng, path: str, progress, chunk_bytes: int,
             curve: bool = True, threads: int = 1) -> list[CheckResult]:
    """One :class:`CheckResult` per n in ``ns`` (one-sided rows read as one-sided limits)."""
    valid = available_paths(design)
    if path != "auto" and path not in valid:
        raise InputError("simulation.path", f"path {path!r} is not available for this selection design; "
                         f"available: auto, {', '.join(valid)}")
    for n in ns:
        if int(n) < 2:
            raise InputError("n", f"must be >= 2 draws for selection by size, got {n}")
    root, seed = rngmod.root_sequence(rng)
    pop = population_for(design, root)
    truth = pop.total if design.estimand == "total" else pop.total / pop.size
    if valid[0] == "exact" and path in ("auto", "exact"):
        rows = [_exact_n(design, int(n), seed, pop, truth) for n in ns]
    else:
        rows = [_one_n(design, int(n), replicates, root, seed, pop, truth, progress) for n in ns]
    return one_sided_rows(design, rows) if design.one_sided else rows


def _count_limits(design: Design, n: int, X: float, N: int) -> tuple[np.ndarray, np.ndarray]:
    """(lower, upper) after k = 0..n misstated units drawn, each with the constant taint."""
    tau, conf = float(design.selection.taint), design.confidence
    k = np.arange(n + 1, dtype=np.float64)
    est = X * tau * k / n
    if design.method in HH_METHODS:
        # n draws of y/p in {X tau, 0}: sample variance (X tau)^2 k (n - k) / (n (n - 1))
        var = (X * tau) ** 2 * k * (n - k) / (n * (n - 1.0)) / n
        level = conf if design.bound == "two-sided" else 2.0 * conf - 1.0
        p = 1.0 - (1.0 - level) / 2.0
        from scipy import special

        q = special.stdtrit(n - 1, p) if design.method == "t" else special.ndtri(p)
        lo, hi = est - q * np.sqrt(var), est + q * np.sqrt(var)
    else:
        kind, factors = MUS_BOUNDS[design.method]
        u = binomial_upper(k, n, conf) if factors == "binomial" else poisson_factor(k, conf) / n
        upper = X * (u[0] + tau * (u - u[0])) if kind == "stringer" else X * u
        lo, hi = 2.0 * est - upper, upper
    if design.estimand == "mean":
        lo, hi = lo / N, hi / N
    return lo, hi


def _exact_n(design: Design, n: int, seed, pop: SizePopulation, truth: float) -> CheckResult:
    """Exact measures at n: a sum over the Binomial(n, pi) number of misstated units drawn."""
    from scipy import stats

    from simcheck.engine.onesided import margin_quantile

    X = pop.total_size
    pi = float(pop.sizes[pop.values > 0].sum() / X)
    w = stats.binom.pmf(np.arange(n + 1), n, pi)
    lo, hi = _count_limits(design, n, X, pop.size)
    hw = (hi - lo) / 2.0
    low, high = hi < truth, lo > truth
    zero = (hw <= 0) & (low | high)
    m = {"coverage": float(w[~(low | high)].sum()), "miss_low": float(w[low].sum()), "miss_high": float(w[high].sum()),
         "margin_mean": float(np.dot(w, hw)), "degenerate_share": float(w[zero].sum()),
         # the support kept for figures: counts of negligible probability would only stretch the axis
         "margin_values": hw[w >= 1e-12], "margin_weights": w[w >= 1e-12]}
    m["margin_median"] = margin_quantile(hw, w, 0.5)
    m["margin_p90"] = margin_quantile(hw, w, 0.9)
    if design.margin is not None:
        m["assurance"] = float(w[(hw <= design.margin * msr.MARGIN_RTOL) & ~zero].sum())
    row = msr.row_from_measures(design, n, m, seed, "exact-count")
    accepted = None if design.margin is None else float(w[hi <= design.margin * msr.MARGIN_RTOL].sum())
    notes = tuple(row.notes) + tuple(_notes(design, n, pop, truth, accepted, 0))
    notes += (f"exact: the {n} draws find Binomial({n}, {pi:.6g}) misstated units, each with taint "
              f"{float(design.selection.taint):g}, and every limit depends on that count alone",)
    return replace(row, true_value=float(truth), notes=notes)


def formula_result(design: Design):
    """``(FormulaResult, n)``: the closed-form n of a selection design, or None.

    Monetary-unit limits: ``n = BV R / TM`` with ``R = -ln(1 - c)`` (Poisson,
    zero expected errors). Hansen-Hurwitz intervals: ``n = q^2 V1 / B^2``
    with ``V1 = sum p_i (y_i / p_i - Y)^2`` of the planning population (the
    file's, or the models' expectation when the data model is the value per
    unit of size: ``V1 = X^2 Var(r)``); None for values independent of the
    sizes (no closed form kept).
    """
    from scipy import special

    from simcheck.formulas import FormulaResult

    sel, pop, B = design.selection, design.population, design.margin
    if B is None or pop is None:
        return None
    if design.estimand == "mean":
        B = B * pop.size
    try:
        X, V1 = _planning(design)
    except (InputError, ValueError, TypeError, ZeroDivisionError):
        return None
    if design.method in MUS_BOUNDS:
        n, raw, R = monetary_unit_n(X, B, design.confidence)
        text = "n = BV x R / TM, R = -ln(1 - confidence) (Poisson factor for zero expected errors)"
        assume = ("no misstatement expected in the population", "draws with replacement, probability proportional to book value")
        kind = "poisson"
    else:
        if V1 is None or not V1 > 0:
            return None
        p = design.confidence if design.one_sided else 1.0 - (1.0 - design.confidence) / 2.0
        R = float(special.ndtri(p))
        raw = R * R * V1 / (B * B)
        n, kind = max(2, int(math.ceil(raw * (1.0 - 1e-12)))), "z"
        text = "n = z^2 V1 / B^2, V1 = sum p_i (y_i / p_i - Y)^2 (Hansen-Hurwitz, with replacement)"
        assume = ("the planning population's single-draw variance V1", "normal approximation")
    res = FormulaResult(
        estimand=design.estimand, n=int(n), n_b=None, n_unrounded=float(raw), multiplier=float(R), multiplier_kind=kind,
        design_effect=1.0, clusters=None, clusters_b=None, confidence=design.confidence, margin=float(design.margin),
        ratio=None, df=None, iterations=None, n_before_fpc=None, population_size=int(pop.size), cluster_size=None,
        sd=None if V1 is None else math.sqrt(V1), sd_b=None, p=None, p_b=None, assumptions=assume, formula=text,
        bound=design.bound)
    return res, int(n)


def _planning(design: Design) -> tuple[float, float | None]:
    """(total size X, single-draw variance V1 or None) of the planning population."""
    sel, pop = design.selection, design.population
    if pop.file is not None:
        fp = population_for(design, 0)  # the file fixes the sizes; misstatements at a fixed planning seed
        if sel.monetary_unit:
            return fp.total_size, _mus_v1(sel, fp.total_size)
        return fp.total_size, fp.single_draw_variance()
    X = pop.size * float(sel.size_model.mean)
    if sel.monetary_unit:
        return X, _mus_v1(sel, X)
    if sel.data_per_size:
        return X, X * X * float(design.model.sd) ** 2
    return X, None


def _mus_v1(sel, X: float) -> float:
    """``BV^2 Var(taint of a drawn unit)``: errors independent of the book values."""
    rate = float(sel.error_rate)
    if isinstance(sel.taint, Model):
        m1, m2 = float(sel.taint.mean), float(sel.taint.sd) ** 2 + float(sel.taint.mean) ** 2
    else:
        m1 = float(sel.taint)
        m2 = m1 * m1
    return X * X * (rate * m2 - (rate * m1) ** 2)
