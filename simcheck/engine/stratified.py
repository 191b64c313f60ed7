"""Stratified designs: H strata, each a finite population sampled without replacement.

``n`` counts the whole sample; :func:`allocation_for` shares it among the
strata by the design's rule (:mod:`simcheck.strata`). Each stratum's
population of ``N_h`` units is drawn once from its data model (from the
seed, like a ``[population]``, so every stage of a search and every sweep
cell with that seed samples the same populations); the true value is the
realised stratified mean (or total) of those populations.

Estimator and intervals (Cochran 1977, sections 5.2-5.4):

* ``ybar_st = sum W_h ybar_h``, ``v = sum W_h^2 (1 - f_h) s_h^2 / n_h`` with
  ``f_h = n_h / N_h`` (0 when ``fpc`` is off);
* ``t``: ``ybar_st ± t_df sqrt(v)`` with Satterthwaite's df (Cochran eq. 5.16);
* ``z`` (mean, total) and ``wald`` (proportion): ``ybar_st ± z sqrt(v)``;
* ``bootstrap``: the percentile interval of Rao & Wu's (1988) rescaling
  bootstrap (:mod:`simcheck.intervals.stratified_bootstrap`; m_h = n_h - 1
  units drawn with replacement per stratum, rescaled by sqrt(1 - f_h)). Block
  ``i`` resamples from its own stream ``(STAGE_BOOTSTRAP, i)``, so results do
  not depend on chunking or threads;
* a total is ``N`` times the mean, with its interval.

References
----------
.. [1] Cochran, W. G. (1977). Sampling Techniques, 3rd ed. Wiley, ch. 5.
.. [2] Satterthwaite, F. E. (1946). An approximate distribution of estimates
   of variance components. Biometrics Bulletin 2, 110-114.
.. [3] Rao, J. N. K. & Wu, C. F. J. (1988). Resampling inference with complex
   survey data. Journal of the American Statistical Association 83, 231-241.
"""

from __future__ import annotations

from dataclasses import replace
from typing import Sequence

import numpy as np
from scipy import special, stats

from simcheck import rng as rngmod
from simcheck.design import Design
from simcheck.engine import measures as msr
from simcheck.errors import InputError
from simcheck.intervals.stratified_bootstrap import rescaled_bootstrap
from simcheck.models.population import FinitePopulation, draw_population, sample_indices
from simcheck.results import CheckResult
from simcheck.strata import allocate, satterthwaite_df, shares

__all__ = ["applies", "available_paths", "evaluate", "allocation_for", "stratum_populations"]

#: drawn indices per random block (bounds memory; fixed by n, so results do not depend on chunking)
BLOCK_VALUES = 1 << 18


def applies(design: Design) -> bool:
    """True for stratified designs."""
    return design.strata is not None


def available_paths(design: Design) -> list[str]:
    """Stratified designs are simulated (no exact path yet)."""
    return ["full"]


def allocation_for(design: Design, n: int) -> dict[str, int]:
    """The sample size of each stratum when the whole sample is ``n``.

    Shares follow the design's rule with the planning SDs of the strata
    models; whole numbers by largest remainders, each at least the design's
    minimum and at most the stratum size.
    """
    st = design.strata
    w = shares(st.rule, st.sizes, [m.sd for m in st.models], st.costs, st.given)
    n_h = allocate(int(n), st.sizes, w, st.minimum)
    return {name: int(v) for name, v in zip(st.names, n_h)}


def stratum_populations(design: Design, rng: rngmod.RngLike) -> list[FinitePopulation]:
    """The fixed populations of the strata for the seed behind ``rng``.

    Stratum ``h`` is drawn from the stream ``(STAGE_POPULATION, h)`` of the
    seed's entropy without its spawn key: the populations belong to the seed.
    """
    root, _ = rngmod.root_sequence(rng)
    base = np.random.SeedSequence(entropy=root.entropy, pool_size=root.pool_size)
    st = design.strata
    return [draw_population(m, N, rngmod.generator(base, rngmod.STAGE_POPULATION, h))
            for h, (m, N) in enumerate(zip(st.models, st.sizes))]


def _block_rows(n_h: Sequence[int], sizes: Sequence[int]) -> int:
    # sampling without replacement touches up to N_h keys per replicate for large fractions
    work = sum(max(int(k), int(N) if 8 * k > N else int(k)) for k, N in zip(n_h, sizes))
    return int(max(1, BLOCK_VALUES // max(1, work)))


def _interval(design: Design, n_h: np.ndarray, means: np.ndarray, varis: np.ndarray):
    """Centre and half-width per replicate; ``means``/``varis`` are (rows, H)."""
    st = design.strata
    N = np.asarray(st.sizes, dtype=np.float64)
    W = N / N.sum()
    f = n_h / N if st.fpc else np.zeros_like(N)
    a = W * W * (1.0 - f) / n_h
    centre = means @ W
    v = varis @ a
    np.maximum(v, 0.0, out=v)
    alpha = 1.0 - design.confidence
    if design.method == "t":
        df = satterthwaite_df(a, varis, n_h)
        # a sample with no spread in any stratum has df 0/0: its width is 0 anyway
        df = np.where(np.isfinite(df) & (df > 0), df, 1.0)
        q = special.stdtrit(df, 1.0 - alpha / 2.0)
    else:
        q = stats.norm.ppf(1.0 - alpha / 2.0)
    half = q * np.sqrt(v)
    if design.estimand == "total":
        centre, half = centre * N.sum(), half * N.sum()
    return centre, half


def _bootstrap_interval(design: Design, n_h: np.ndarray, xs: list, g_boot) -> tuple[np.ndarray, np.ndarray]:
    """Rao-Wu rescaled bootstrap percentile limits per replicate (total: times N)."""
    st = design.strata
    N = np.asarray(st.sizes, dtype=np.float64)
    f = n_h / N if st.fpc else np.zeros_like(N)
    lo, hi = rescaled_bootstrap(xs, N / N.sum(), f, design.confidence, g_boot, design.resamples)
    if design.estimand == "total":
        lo, hi = lo * N.sum(), hi * N.sum()
    return lo, hi


def _one_n(design: Design, n: int, replicates: int, root, seed, pops, truth, progress) -> CheckResult:
    st = design.strata
    alloc = allocation_for(design, n)
    n_h = np.asarray(list(alloc.values()), dtype=np.float64)
    rows = _block_rows(n_h.astype(int), st.sizes)
    acc = msr.Accumulator(1, replicates, design.margin)
    H = len(st.sizes)
    boot = design.method == "bootstrap"
    for bi, (s, e) in enumerate(rngmod.blocks(replicates, rows)):
        g = rngmod.generator(root, rngmod.STAGE_MAIN, bi)
        b = e - s
        means = np.empty((b, H))
        varis = np.empty((b, H))
        xs = []
        for h, fp in enumerate(pops):
            x = fp.values[sample_indices(g, fp.size, (b, int(n_h[h])), ordered=False)]
            means[:, h] = x.mean(axis=1)
            varis[:, h] = x.var(axis=1, ddof=1)
            if boot:
                xs.append(x)
        if boot:
            lo, hi = _bootstrap_interval(design, n_h, xs, rngmod.generator(root, rngmod.STAGE_BOOTSTRAP, bi))
        else:
            centre, half = _interval(design, n_h, means, varis)
            lo, hi = centre - half, centre + half
        acc.add(lo[:, None], hi[:, None], truth)
        if progress:
            progress(e, replicates)
    acc.finish()
    row = acc.row(0, design, n, replicates, seed, "simulation")
    return replace(row, true_value=float(truth), notes=tuple(row.notes) + tuple(_notes(design, alloc, pops, truth)))


def _notes(design: Design, alloc: dict[str, int], pops, truth: float) -> list[str]:
    st = design.strata
    parts = ", ".join(f"{k} {v}" for k, v in alloc.items())
    out = [f"n counts the whole sample, allocated {st.rule}: {parts}",
           f"each of {len(pops)} strata is a finite population drawn once from its model and sampled without replacement",
           f"true value: the strata populations' {design.estimand} ({truth:.6g}), not the models'"]
    out.append("finite population correction in each stratum" if st.fpc else "no finite population correction (fpc = false)")
    if design.method == "t":
        out.append("t interval with Satterthwaite degrees of freedom")
    if design.method == "bootstrap":
        out.append(f"rescaled bootstrap (Rao & Wu 1988): in each stratum n_h - 1 units drawn with replacement, "
                   f"rescaled by sqrt(1 - f_h); percentile interval of {design.resamples} resamples")
    return out


def evaluate(design: Design, ns: Sequence[int], replicates: int, rng, path: str, progress, chunk_bytes: int,
             curve: bool = True, threads: int = 1) -> list[CheckResult]:
    """One :class:`CheckResult` per total sample size in ``ns``."""
    if path not in ("auto", "full"):
        raise InputError("simulation.path", f"path {path!r} is not available for stratified designs; available: auto, full")
    root, seed = rngmod.root_sequence(rng)
    pops = stratum_populations(design, root)
    W = np.asarray(design.strata.weights)
    truth = float(np.dot(W, [p.mean for p in pops]))
    if design.estimand == "total":
        truth *= design.strata.population_size
    return [_one_n(design, int(n), replicates, root, seed, pops, truth, progress) for n in ns]
