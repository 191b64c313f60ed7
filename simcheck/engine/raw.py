"""Estimands from the registry: methods that take the drawn values (method kind ``raw``).

The design kind of every estimand in :mod:`simcheck.estimands` (median,
standard deviation, rates, ratios, correlation, ...). Its methods get a
:class:`~simcheck.intervals.base.Sample` of drawn values and return interval
limits; this module draws, hands the values over and accumulates measures.

Paths:

``exact``
    when the method has an exact path for the design (``Method.exact``);
``nested`` (curves)
    one draw of ``n_max`` values per replicate; every n is evaluated on the
    first n values (common random numbers along the curve);
``full``
    a draw of exactly n values per replicate at each n.

Randomness as in :mod:`simcheck.engine.simple`: fixed blocks of replicates,
block ``i`` of group a (or of the pairs) drawn from spawn key
``(STAGE_MAIN, i)``, group b from ``(STAGE_GROUP_B, i)``, resampling from
``(STAGE_BOOTSTRAP, i)``; results do not depend on chunking or threads.

Ratio-scale estimands (margin as a factor f > 1) are measured on the log
scale: the half-width of ``(log lo, log hi)`` against ``log f``; reported
margins are exponentiated back to factors (the mean is then the geometric
mean of the factors, its MCSE by the delta method).
"""

from __future__ import annotations

import math
from dataclasses import replace
from typing import Sequence

import numpy as np

from simcheck import rng as rngmod
from simcheck.design import Design
from simcheck.engine.measures import Accumulator, row_from_measures, with_note
from simcheck.engine.simple import block_size, unit_rows
from simcheck.errors import InputError
from simcheck.intervals import get_method
from simcheck.intervals.base import Method, Sample
from simcheck.models.pairs import draw_pairs
from simcheck.results import CheckResult
from simcheck.threads import ordered_map

RATIO_NOTE = ("margin on the ratio scale: the factor f with the interval within estimate / f and estimate × f "
              "(exp of the log-scale half-width); the margin mean is the geometric mean of the factors")


def applies(design: Design) -> bool:
    """True for designs whose method takes the drawn values (registered estimands)."""
    if getattr(design, "strata", None) is not None:
        return False  # stratified methods are not in the registry; the stratified evaluator takes them
    m = get_method(design.estimand, design.method)
    return m.kind == "raw"


def available_paths(design: Design) -> list[str]:
    method = get_method(design.estimand, design.method)
    out = []
    if method.exact is not None and (method.exact_applies is None or method.exact_applies(design)):
        out.append("exact")
    out += ["nested", "full"]
    return out


def evaluate(design: Design, ns: Sequence[int], replicates: int, rng, path: str, progress, chunk_bytes: int,
             curve: bool, threads: int = 1) -> list[CheckResult]:
    """One :class:`CheckResult` per n in ``ns``."""
    method = get_method(design.estimand, design.method)
    valid = available_paths(design)
    chosen = valid[0] if path == "auto" else path
    if chosen == "sufficient":
        raise InputError("simulation.path", f"path 'sufficient' is not available for estimand {design.estimand!r}; "
                                            f"available: {', '.join(valid)}")
    if chosen not in valid:
        raise InputError("simulation.path", f"path {path!r} is not available for this design; available: {', '.join(valid)}")
    if chosen == "nested" and (not curve or len(ns) == 1):
        chosen = "full"
    root, seed = rngmod.root_sequence(rng)
    if chosen == "exact":
        return [_exact_row(design, n, m, seed) for n, m in zip(ns, method.exact(design, list(ns)))]
    if chosen == "nested":
        return _simulate(design, method, list(ns), replicates, root, seed, progress, threads, "nested")
    rows = []
    for n in ns:
        rows += _simulate(design, method, [n], replicates, root, seed, progress, threads, "simulation")
    return rows


def _exact_row(design: Design, n: int, m: dict, seed) -> CheckResult:
    r = row_from_measures(design, n, m, seed, "exact")
    if m.get("margin_at_assurance") is not None:
        r = replace(r, margin_at_assurance=float(m["margin_at_assurance"]))
    for note in m.get("notes", ()):  # what an exact path has to say (e.g. intervals not computed)
        r = with_note(r, note)
    return with_note(r, RATIO_NOTE) if design.ratio_scale else r


def _columns(design: Design, ns: list[int]) -> tuple[int, int]:
    n_max = max(ns)
    nb_max = design.n_b(n_max) if design.two_sample else 0
    return n_max, nb_max


def _simulate(design, method, ns, replicates, root, seed, progress, threads, path) -> list[CheckResult]:
    n_max, nb_max = _columns(design, ns)
    width = n_max * (2 if design.paired else 1) + nb_max
    blocks = rngmod.blocks(replicates, block_size(width))
    rows_per_unit = unit_rows(width)
    ratio = design.ratio_scale
    truth = design.true_value
    if ratio and not truth > 0:
        raise InputError("data", f"the true {design.estimand} is {truth:g}; a ratio-scale margin needs a positive true value")
    acc = Accumulator(len(ns), replicates, None if design.margin is None else
                      (math.log(design.margin) if ratio else design.margin))
    acc_truth = math.log(truth) if ratio else truth

    def work(item):
        # limits are reduced to measures in the worker; the calling thread only merges
        bi, block = item
        red = acc.reducer(acc_truth, first_row=block[0])
        for lo, hi, deg in _block_limits(design, method, ns, root, bi, block, rows_per_unit, n_max, nb_max, ratio):
            red.add(lo, hi, deg, starts=[0])
        return red.partial(), block[1]

    # every block has its own streams (resampling included) and partials merge in
    # replicate order: threads do not change results
    for part, stop in ordered_map(work, list(enumerate(blocks)), threads):
        acc.merge(part)
        if progress:
            progress(stop, replicates)
    acc.finish()
    rows = []
    at = None if design.assurance in (0.5, 0.9) else acc.quantiles(design.assurance)
    for j, n in enumerate(ns):
        r = acc.row(j, design, n, replicates, seed, path)
        if at is not None:
            r = replace(r, margin_at_assurance=float(at[j]))
        rows.append(to_factor_scale(r) if ratio else r)
    return rows


def _block_limits(design, method, ns, root, bi, block, rows_per_unit, n_max, nb_max, ratio):
    """Limits of one random block, unit by unit: yields (lo, hi, degenerate) of shape (rows, len(ns))."""
    g_a = rngmod.generator(root, rngmod.STAGE_MAIN, bi)
    g_b = rngmod.generator(root, rngmod.STAGE_GROUP_B, bi) if design.two_sample else None
    g_boot = rngmod.generator(root, rngmod.STAGE_BOOTSTRAP, bi) if method.resampling else None
    params = {k: getattr(design, k) for k in ("quantile", "exposure") if getattr(design, k) is not None}
    s, e = block
    for us in range(s, e, rows_per_unit):
        ue = min(us + rows_per_unit, e)
        r = ue - us
        if design.paired:
            x, y = draw_pairs(design.model, design.model_b, design.correlation, g_a, (r, n_max))
        else:
            x, y = design.model.draw(g_a, (r, n_max)), None
        xb = design.model_b.draw(g_b, (r, nb_max)) if design.two_sample else None
        los, his, degs = [], [], []
        for n in ns:
            nb = design.n_b(n) if design.two_sample else None
            smp = Sample(x=x[:, :n], n=n, y=None if y is None else y[:, :n], xb=None if xb is None else xb[:, :nb],
                         n_b=nb, params=params, rng=g_boot, resamples=design.resamples)
            res = method.func(smp, design.confidence)
            lo, hi = np.asarray(res[0], np.float64), np.asarray(res[1], np.float64)
            deg = np.asarray(res[2], bool) if len(res) > 2 and res[2] is not None else np.zeros(r, bool)
            if ratio:
                with np.errstate(divide="ignore", invalid="ignore"):
                    lo, hi = np.log(lo), np.log(hi)
            los.append(lo.reshape(r))
            his.append(hi.reshape(r))
            degs.append(deg.reshape(r))
        yield np.stack(los, axis=1), np.stack(his, axis=1), np.stack(degs, axis=1)


def to_factor_scale(r: CheckResult) -> CheckResult:
    """A row measured on the log scale with margins turned into factors exp(half-width)."""
    def f(v):
        return None if v is None else float(math.exp(v))

    def se(v, s):
        return None if v is None or s is None else float(math.exp(v) * s)

    return with_note(replace(
        r,
        margin_mean=f(r.margin_mean), margin_mean_mcse=se(r.margin_mean, r.margin_mean_mcse),
        margin_median=f(r.margin_median), margin_median_mcse=se(r.margin_median, r.margin_median_mcse),
        margin_p90=f(r.margin_p90), margin_p90_mcse=se(r.margin_p90, r.margin_p90_mcse),
        margin_at_assurance=f(r.margin_at_assurance),
        margin_values=None if r.margin_values is None else np.exp(r.margin_values),
    ), RATIO_NOTE)
