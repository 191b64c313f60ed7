"""Coverage and achieved margin for clustered samples and finite populations.

:func:`simcheck.engine.check` / :func:`~simcheck.engine.curve` dispatch here
whenever ``design.clusters`` or ``design.population`` is set; the results are
ordinary :class:`~simcheck.results.CheckResult` rows.

Clustered samples (``design.clusters``)
    n counts clusters. Data follow :mod:`simcheck.models.clustered`. Each
    replicate draws k_max clusters; running sums over clusters give every
    k <= k_max at once (``nested``), or one k per draw (``simulation``).
    Methods: ``cluster-t`` (ratio estimator, linearisation SE, k - 1 df;
    :mod:`simcheck.intervals.cluster`) and the methods that ignore the
    clustering (``t``, ``z``, ``johnson-t`` on all observations;
    ``wald``, ``wilson``, ... on the pooled count), so a report can show
    what ignoring the clustering does. ``observations`` is k m for equal
    sizes, the expected total k size_mean for varying sizes (the notes say
    which).

    Paths: ``exact`` for ``cluster-t`` and ``z`` with equal sizes, a normal
    model and normal effects (cluster means are iid normal), and for the
    proportion methods that use only the pooled count with equal sizes (the
    count is a sum of k iid beta-binomials: enumeration); ``sufficient``
    when the within-cluster values are normal (per-cluster sums drawn from
    their exact law, without the observations) or 0/1 (beta-binomial
    counts); ``full`` draws every observation.

Finite populations (``design.population``)
    The population (N values from the model, or from ``population.file``) is
    drawn from the stream ``STAGE_POPULATION`` below the root's entropy with
    its spawn key dropped, so it is reproducible and shared by all n of a
    curve, all stages of a search and all sweep cells with the same seed. Samples are drawn without replacement
    (:func:`simcheck.models.population.sample_indices`). The true value is
    the population mean (K / N for 0/1 populations), not the model mean.
    With ``population.fpc`` the half-width of ``t``, ``z``, ``johnson-t`` and
    the proportion methods is multiplied by sqrt(1 - n/N) about the point
    estimate (:func:`simcheck.formulas.fpc_variance_factor`; proportions
    through :func:`simcheck.engine.exact.with_fpc`: Wald and Agresti--Coull
    before their clipping, all clipped to [0, 1] once); ``z`` uses the
    population's S (divisor N - 1). Proportion methods on a 0/1 population
    are exact by hypergeometric enumeration.

Randomness follows :mod:`simcheck.engine`: block ``i`` of replicates draws
from the stream ``(STAGE_MAIN, i)`` (bootstrap resampling
``(STAGE_BOOTSTRAP, i)``), consumed in fixed pieces (:func:`_run_blocks`,
which runs the blocks on the engine's threads);
block and piece sizes depend only on the design and n, so ``chunk_bytes``
(accepted for the engine's signature) never changes results: memory is
bounded by the pieces.

Measures go through :mod:`simcheck.engine.measures` (``Accumulator``,
``row_from_measures``); exact enumerations through :mod:`simcheck.engine.exact`
(``hypergeometric_measures``, ``weighted_measures``, ``with_fpc``); the finite
population correction is :func:`simcheck.formulas.fpc_variance_factor`.

References
----------
.. [1] Kish, L. (1965). *Survey Sampling*. Wiley, New York.
.. [2] Cochran, W. G. (1977). *Sampling Techniques*, 3rd ed. Wiley,
   chapters 2 and 6.
.. [3] Donner, A. & Klar, N. (2000). *Design and Analysis of Cluster
   Randomization Trials in Health Research*. Arnold, London.
.. [4] Morris, T. P., White, I. R. & Crowther, M. J. (2019). Using simulation
   studies to evaluate statistical methods. *Statistics in Medicine* 38,
   2074-2102.
"""

from __future__ import annotations

import math
from dataclasses import replace
from typing import Sequence

import numpy as np
from scipy import signal, stats

from simcheck.engine import exact as exactmod
from simcheck.engine import measures as msr
from simcheck.engine import simple as eng
from simcheck import rng as rngmod
from simcheck.design import Design
from simcheck.errors import Collector, InputError
from simcheck.formulas import fpc_variance_factor
from simcheck.intervals import Summary, get_method
from simcheck.intervals.base import Method
from simcheck.intervals.cluster import ClusterSums
from simcheck.models import make_model
from simcheck.models.clustered import ClusteredModel, SizeLaw, size_law
from simcheck.models.population import (
    FinitePopulation,
    block_columns,
    draw_population,
    fixed_count_population,
    population_from_values,
    read_population,
    sample_indices,
)
from simcheck.results import CheckResult
from simcheck.threads import ordered_map

#: largest pooled count k m enumerated exactly for clustered 0/1 data
EXACT_COUNT_MAX = 2_000_000

__all__ = ["applies", "evaluate", "available_paths", "exact_available", "population_for", "cluster_model_for", "validate_design",
           "cluster_population_for", "finite_cluster_estimates"]


#: values drawn per piece and pieces per random block: fixed, so the numbers
#: depend only on the root, the block index and the design (never on chunking)
PIECE_VALUES = 1 << 17
PIECES_PER_BLOCK = 8


def _pieces(root: np.random.SeedSequence, replicates: int, columns: int):
    """Yield (block index, block generator, first row, stop row, last piece of block).

    Block ``i`` owns the stream ``(STAGE_MAIN, i)``; its generator is consumed
    piece by piece in order, so memory stays bounded by PIECE_VALUES values
    (times a small factor) whatever the number of replicates. The same pieces
    as :func:`_run_blocks`, one after another in the calling thread.
    """
    pr = max(1, PIECE_VALUES // max(int(columns), 1))
    for bi, (s, e) in enumerate(rngmod.blocks(replicates, pr * PIECES_PER_BLOCK)):
        g = rngmod.generator(root, rngmod.STAGE_MAIN, bi)
        for ps in range(s, e, pr):
            pe = min(ps + pr, e)
            yield bi, g, ps, pe, pe == e


def _run_blocks(root: np.random.SeedSequence, replicates: int, columns: int, acc: msr.Accumulator, truth,
                piece, threads: int, progress, bootstrap: bool = False) -> None:
    """Evaluate every random block on ``threads`` threads and merge the measures into ``acc``.

    Block ``i`` owns the stream ``(STAGE_MAIN, i)`` (and ``(STAGE_BOOTSTRAP, i)``
    for resampling); its generator is consumed piece by piece in order, so
    memory stays bounded by PIECE_VALUES values (times a small factor) whatever
    the number of replicates. ``piece(g, rows, g_boot)`` returns the limits
    ``(lo, hi, degenerate)`` of the next ``rows`` replicates drawn from ``g``;
    each piece is reduced to counts and sums in the worker thread, and the
    blocks' measures are merged in block order, so no number depends on the
    thread count.
    """
    pr = max(1, PIECE_VALUES // max(int(columns), 1))
    items = list(enumerate(rngmod.blocks(replicates, pr * PIECES_PER_BLOCK)))

    def work(item) -> msr.Partial:
        bi, (s, e) = item
        g = rngmod.generator(root, rngmod.STAGE_MAIN, bi)
        g_boot = rngmod.generator(root, rngmod.STAGE_BOOTSTRAP, bi) if bootstrap else None
        red = acc.reducer(truth, s)
        for ps in range(s, e, pr):
            lo, hi, deg = piece(g, min(ps + pr, e) - ps, g_boot)
            red.add(lo, hi, deg)
        return red.partial()

    # bootstrap intervals run their own thread pool inside each call
    for (_, (_, e)), part in zip(items, ordered_map(work, items, 1 if bootstrap else threads)):
        acc.merge(part)
        if progress:
            progress(e, replicates)


# --------------------------------------------------------------------------
# entry point
# --------------------------------------------------------------------------
def evaluate(design: Design, ns: Sequence[int], replicates: int, rng, path: str, progress, chunk_bytes: int,
             curve: bool = True, threads: int = 1) -> list[CheckResult]:
    """One :class:`CheckResult` per n in ``ns`` (n = clusters, or units from the population).

    ``path``: "auto", "exact", "sufficient" (clusters only), "nested" or "full".
    ``curve`` is accepted for the design-kind interface; the nested path is
    chosen here whenever several n are evaluated.
    """
    if design.estimand == "total" and design.strata is None and design.clusters is None:
        inner = total_inner(design)
        rows = evaluate(inner, ns, replicates, rng, path, progress, chunk_bytes, curve, threads)
        return [_total_row(r, design) for r in rows]
    method = get_method(design.estimand, design.method)
    validate_design(design, method, ns, path)
    root, seed = rngmod.root_sequence(rng)
    curve = len(ns) > 1
    if design.clusters is not None:
        return _clusters(design, method, list(ns), replicates, root, seed, path, curve, progress, chunk_bytes, threads)
    return _population(design, method, list(ns), replicates, root, seed, path, curve, progress, chunk_bytes, threads)


def applies(design: Design) -> bool:
    """True for clustered samples and samples from a finite population."""
    return design.clusters is not None or design.population is not None


def exact_available(design: Design) -> bool:
    """True when ``path="auto"`` evaluates ``design`` exactly (no simulation) at every n.

    Clusters: ``cluster-t`` or ``z`` with equal sizes, a normal model and
    normal effects; proportion methods on the pooled count with equal sizes.
    Populations: proportion methods on a 0/1 population (model-drawn
    populations are 0/1 exactly when the model is).
    """
    if design.estimand == "total" and design.clusters is None:
        return exact_available(total_inner(design))
    method = get_method(design.estimand, design.method)
    if design.two_sample or (design.clusters is not None and design.population is not None):
        return False
    if design.clusters is not None:
        if design.clusters.count is not None:
            return False  # a finite population of clusters is simulated
        try:
            cm, law = cluster_model_for(design)
        except InputError:
            return False
        return _cluster_exact_kind(design, method, cm, law) is not None
    if design.population is not None:
        if method.kind != "count":
            return False
        pop = design.population
        return (pop.file is not None or pop.values is not None or pop.events is not None
                or bool(design.model.zero_one))
    return False


def available_paths(design: Design) -> list[str]:
    """The paths valid for a clustered or finite-population design, cheapest first."""
    if design.estimand == "total" and design.clusters is None:
        return available_paths(total_inner(design))
    method = get_method(design.estimand, design.method)
    out = ["exact"] if exact_available(design) else []
    if design.clusters is not None and design.clusters.count is not None:
        return ["nested", "full"]
    if design.clusters is not None:
        try:
            cm, _ = cluster_model_for(design)
        except InputError:
            return ["full"]
        if cm.fast_ok(3 if method.needs_m3 else 2):
            out.append("sufficient")
    if method.kind != "sample":
        out.append("nested")
    out.append("full")
    return out


def validate_design(design: Design, method: Method, ns, path: str) -> None:
    c = Collector()
    which = "clusters" if design.clusters is not None else "population"
    if design.clusters is not None and design.population is not None:
        c.add("population", "cannot be combined with [clusters]; for clusters drawn from a finite number of "
              "clusters give clusters.count (the number of clusters in the population)")
    if design.two_sample:
        c.add(which, f"only for the one-sample estimands mean and proportion, not {design.estimand!r}")
    c.raise_if_any()
    if design.clusters is not None:
        if design.clusters.effect == "gamma" and design.model.zero_one:
            # 0/1 data are clustered through a beta-binomial law; a gamma effect
            # would be shown but not used, so it is refused
            c.add("clusters.effect", "'gamma' applies to continuous data only; 0/1 data are clustered by a "
                  "beta-binomial law (cluster proportions ~ Beta), so leave clusters.effect out")
        if method.kind not in ("cluster", "summary", "count"):
            c.add("method.interval", f"{design.method!r} is not available with [clusters]; use cluster-t, "
                  "or t / z / a proportion interval to see the effect of ignoring the clustering")
        elif design.clusters.count is not None:
            _validate_cluster_count(c, design, method, ns, path)
    else:
        pop = design.population
        if method.kind == "cluster":
            c.add("method.interval", f"{design.method!r} needs a [clusters] table")
        if pop.fpc and method.kind in ("log", "sample"):
            c.add("population.fpc", f"the {design.method} interval has no finite population correction; set population.fpc = false")
        for n in ns:
            if n > pop.size:
                c.add("n", f"must be <= population.size ({pop.size}) when sampling without replacement, got {n}")
                break
        if path == "sufficient":
            c.add("simulation.path", "path 'sufficient' is not available with [population]; use auto, exact, nested or full")
    c.raise_if_any()


def _validate_cluster_count(c: Collector, design: Design, method: Method, ns, path: str) -> None:
    M = design.clusters.count
    if method.kind != "cluster":
        c.add("method.interval", f"with clusters.count only cluster-t is available (the first-stage correction "
              f"sqrt(1 - n/M) applies to the cluster-level variance); got {design.method!r}")
    for n in ns:
        if n > M:
            c.add("n", f"must be <= clusters.count ({M}) when clusters are drawn without replacement, got {n}")
            break
    if path in ("exact", "sufficient"):
        c.add("simulation.path", f"path {path!r} is not available with clusters.count; use auto, nested or full")


# --------------------------------------------------------------------------
# clustered samples
# --------------------------------------------------------------------------
def cluster_model_for(design: Design) -> tuple[ClusteredModel, SizeLaw]:
    """The two-level data model and the cluster-size law of a clustered design."""
    cs = design.clusters
    c = Collector()
    try:
        cm = ClusteredModel(design.model, cs.icc, cs.effect)
    except InputError as e:
        c.extend(e)
        cm = None
    try:
        law = size_law(cs.size, cs.size_mean, cs.size_cv)
    except InputError as e:
        c.extend(e)
        law = None
    c.raise_if_any()
    return cm, law


def _cluster_notes(design: Design, cm: ClusteredModel, law: SizeLaw, method: Method) -> list[str]:
    notes = list(msr.design_notes(design))
    notes.append(f"n counts clusters; cluster sizes {law.describe()}")
    if law.fixed:
        notes.append(f"observations = clusters x {int(law.a)}")
    else:
        notes.append(f"observations = expected total, clusters x {law.mean:g} (sizes vary by sample)")
    notes.append(cm.describe())
    if method.kind != "cluster":
        notes.append(f"the {design.method} interval ignores the clustering (treats all observations as independent)")
    return notes


def _observations(k: int, law: SizeLaw) -> int:
    return int(k * int(law.a)) if law.fixed else int(round(k * law.mean))


def _clusters(design, method, ns, replicates, root, seed, path, curve, progress, chunk_bytes, threads=1) -> list[CheckResult]:
    cm, law = cluster_model_for(design)
    if design.clusters.count is not None:
        return _finite_clusters(design, method, ns, replicates, root, seed, path, curve, progress, cm, law, threads)
    powers = 3 if method.needs_m3 else 2
    notes = _cluster_notes(design, cm, law, method)
    exact_kind = _cluster_exact_kind(design, method, cm, law)
    if path == "exact" and exact_kind is None:
        raise InputError("simulation.path", "path 'exact' is not available for this clustered design; available: auto, sufficient (normal or 0/1 data), nested, full")
    if path == "sufficient" and not cm.fast_ok(powers):
        raise InputError("simulation.path", "path 'sufficient' needs normal or 0/1 data (and a method without the third moment)")
    if exact_kind is not None and path in ("auto", "exact"):
        rows = _cluster_exact(design, method, ns, seed, cm, law, exact_kind)
        return [replace(r, observations=_observations(r.n, law), notes=tuple(list(r.notes) + notes)) for r in rows]

    fast = path != "full" and cm.fast_ok(powers)
    nested = path == "nested" or (path == "auto" and curve)
    groups = [ns] if nested else [[n] for n in ns]
    centre = design.model.mean if method.shift_equivariant else 0.0
    truth = design.true_value - centre
    label = ("nested" if nested else ("sufficient" if fast else "simulation"))
    rows: list[CheckResult] = []
    for group in groups:
        K = max(group)
        per_rep = K * (2 if fast else max(1, math.ceil(law.mean)))
        acc = msr.Accumulator(len(group), replicates, design.margin)

        def piece(g, rows, _boot, K=K, group=group):
            m = law.draw(g, (rows, K))
            s1, s2, s3 = cm.cluster_sums(g, m, centre=centre, powers=powers, fast=fast)
            return (*_cluster_intervals(design, method, m, s1, s2, s3, group, law.fixed), None)

        _run_blocks(root, replicates, per_rep, acc, truth, piece, threads, progress)
        acc.finish()
        for j, k in enumerate(group):
            r = acc.row(j, design, k, replicates, seed, label)
            rows.append(replace(r, observations=_observations(k, law), notes=tuple(list(r.notes) + notes)))
    return rows


#: largest number of observations drawn to form a finite population of clusters
#: when its cluster sums cannot be drawn from their exact law (8 bytes each)
CLUSTER_DRAW_MAX = 50_000_000


def cluster_population_for(design: Design, root: np.random.SeedSequence) -> tuple[np.ndarray, np.ndarray, float]:
    """The M clusters of a finite cluster population: sizes, totals, and the population mean.

    Drawn once from the clustered model on the stream ``STAGE_POPULATION``
    below the root's entropy (spawn key dropped, as for unit populations), so
    every n, search stage and sweep cell with one seed samples the same clusters.
    The mean is the ratio of all totals to all sizes (the mean over the
    population's observations).
    """
    cm, law = cluster_model_for(design)
    M = int(design.clusters.count)
    fast = cm.fast_ok(2)
    if not fast and M * law.mean > CLUSTER_DRAW_MAX:
        raise InputError("clusters.count", f"{M} clusters of mean size {law.mean:g} exceed {CLUSTER_DRAW_MAX} "
                         "observations to draw for this model; use fewer clusters")
    base = np.random.SeedSequence(entropy=root.entropy, pool_size=root.pool_size)
    g = rngmod.generator(base, rngmod.STAGE_POPULATION)
    m = law.draw(g, (1, M))
    s1, _, _ = cm.cluster_sums(g, m, centre=0.0, powers=2, fast=fast)
    sizes, totals = m.ravel().astype(np.float64), s1.ravel()
    return sizes, totals, float(totals.sum() / sizes.sum())


def _finite_clusters(design, method, ns, replicates, root, seed, path, curve, progress, cm, law, threads=1) -> list[CheckResult]:
    """cluster-t on n of M clusters drawn without replacement, first-stage FPC sqrt(1 - n/M).

    A mean (proportion) is the ratio estimator; a total is M times the mean
    cluster total (:func:`simcheck.intervals.cluster.cluster_total_interval`),
    computed on cluster totals centred on the population's mean cluster total
    (the interval is shift-equivariant) and scaled by M.
    """
    M = int(design.clusters.count)
    sizes, totals, truth = cluster_population_for(design, root)
    total = design.estimand == "total"
    # unclipped: corrected first, then clipped once for proportions
    plain = get_method("total" if total else "mean", "cluster-t")
    shift = float(totals.mean()) if total else 0.0
    if total:
        truth = float(totals.sum())
    notes = _finite_cluster_notes(design, cm, law, method, M, truth)
    nested = path == "nested" or (path == "auto" and curve)
    groups = [ns] if nested else [[n] for n in ns]
    rows: list[CheckResult] = []
    for group in groups:
        K = max(group)
        f = np.sqrt(fpc_variance_factor(np.asarray(group, dtype=np.float64), M, "S2"))
        acc = msr.Accumulator(len(group), replicates, design.margin)

        def piece(g, rows, _boot, K=K, group=group, f=f):
            idx = sample_indices(g, M, (rows, K), ordered=nested)
            return (*_finite_cluster_limits(design, plain, sizes[idx], totals[idx], group, law, f, shift, truth), None)

        _run_blocks(root, replicates, block_columns(M, K), acc, truth, piece, threads, progress)
        acc.finish()
        for j, k in enumerate(group):
            r = acc.row(j, design, k, replicates, seed, "nested" if nested else "simulation")
            rows.append(replace(r, true_value=truth, observations=_observations(k, law),
                                notes=tuple(list(r.notes) + notes)))
    return rows


def _finite_cluster_limits(design, plain, m, y, group, law, f, shift: float, truth: float):
    """Limits of cluster-t on sampled cluster sizes ``m`` and totals ``y`` (rows x clusters), FPC factor ``f``."""
    total = design.estimand == "total"
    lo, hi = _cluster_intervals(design, plain, m, y - shift if total else y, None, None, group, law.fixed)
    centre = (lo + hi) / 2.0
    lo, hi = centre - (centre - lo) * f, centre + (hi - centre) * f
    if total:
        M = float(design.clusters.count)
        lo, hi = M * (lo + shift), M * (hi + shift)
    # a census (n = M) estimates the population value itself: exact, zero width
    lo, hi = np.where(f == 0, truth, lo), np.where(f == 0, truth, hi)
    if design.estimand == "proportion":
        lo, hi = np.clip(lo, 0.0, 1.0), np.clip(hi, 0.0, 1.0)
    return lo, hi


def finite_cluster_estimates(design: Design, n: int, replicates: int, rng) -> np.ndarray:
    """Point estimates (interval midpoints) of a finite-cluster design at ``n``, on the check's own streams.

    For a total (M x the mean cluster total, an interval symmetric about its
    estimate and never clipped) these are the estimates behind
    :func:`simcheck.engine.check`'s intervals, replicate by replicate; used to
    test unbiasedness and the estimator's variance.
    """
    root, _ = rngmod.root_sequence(rng)
    M = int(design.clusters.count)
    _, law = cluster_model_for(design)
    sizes, totals, truth = cluster_population_for(design, root)
    total = design.estimand == "total"
    plain = get_method("total" if total else "mean", "cluster-t")
    shift = float(totals.mean()) if total else 0.0
    truth = float(totals.sum()) if total else truth
    f = np.sqrt(fpc_variance_factor(np.asarray([n], dtype=np.float64), M, "S2"))
    out = np.empty(replicates)
    for bi, g, ps, pe, last in _pieces(root, replicates, block_columns(M, n)):
        idx = sample_indices(g, M, (pe - ps, n), ordered=False)
        lo, hi = _finite_cluster_limits(design, plain, sizes[idx], totals[idx], [n], law, f, shift, truth)
        out[ps:pe] = ((lo + hi) / 2.0)[:, 0]
    return out


def _finite_cluster_notes(design, cm, law, method, M: int, truth: float) -> list[str]:
    notes = _cluster_notes(design, cm, law, method)
    notes.append(f"n clusters drawn without replacement from a population of {M} clusters (drawn once from the model)")
    if design.estimand == "total":
        notes.append(f"true value: the population's total over its {M} clusters ({truth:.6g}), not the data model's")
        notes.append("total = M x the mean cluster total (unbiased expansion estimator; Cochran 1977, ch. 9A), "
                     "t interval on the cluster totals with k - 1 df")
    else:
        notes.append(f"true value: the population's mean over its {M} clusters ({truth:.6g}), not the data model's")
    notes.append("first-stage finite population correction: half-width x sqrt(1 - n/M)")
    return notes


def _cluster_intervals(design, method, m, s1, s2, s3, group, fixed_sizes):
    """(lo, hi) of shape (b, len(group)) from per-cluster sums of the first k clusters."""
    cols = eng.prefix_columns(group)
    mf = m.astype(np.float64)
    M = np.cumsum(mf, axis=1)[:, cols]
    if fixed_sizes:
        M = M[:1]  # the same in every replicate: one t quantile per k
    conf = design.confidence
    if method.kind == "cluster":
        sums = ClusterSums(
            k=np.asarray(group, dtype=np.float64),
            sum_y=np.cumsum(s1, axis=1)[:, cols],
            sum_m=np.broadcast_to(M, (s1.shape[0], len(group))),
            sum_yy=np.cumsum(s1 * s1, axis=1)[:, cols],
            sum_ym=np.cumsum(s1 * mf, axis=1)[:, cols],
            sum_mm=np.cumsum(mf * mf, axis=1)[:, cols],
        )
        lo, hi = method.func(sums, conf)
    elif method.kind == "summary":
        S1 = np.cumsum(s1, axis=1)[:, cols]
        S2 = np.cumsum(s2, axis=1)[:, cols]
        S3 = np.cumsum(s3, axis=1)[:, cols] if s3 is not None else None
        summ = eng.summary_from_sums(S1, S2, S3, M, design.model.sd)
        lo, hi = method.func(summ, conf)
    else:  # count: the pooled number of events over all observations
        x = np.rint(np.cumsum(s1, axis=1)[:, cols])
        lo, hi = method.func(x, M, conf)
    shape = (s1.shape[0], len(group))
    lo = np.broadcast_to(np.asarray(lo, dtype=np.float64), shape)
    hi = np.broadcast_to(np.asarray(hi, dtype=np.float64), shape)
    return lo, hi


def _cluster_exact_kind(design, method, cm: ClusteredModel, law: SizeLaw) -> str | None:
    if not law.fixed:
        return None
    normal = design.model.normal_params() is not None and (cm.icc == 0 or design.clusters.effect == "normal")
    if design.estimand == "mean" and normal and design.method in ("cluster-t", "z"):
        return "normal"
    if design.estimand == "proportion" and method.kind == "count" and cm.binary:
        return "betabinomial"
    return None


def _cluster_exact(design, method, ns, seed, cm: ClusteredModel, law: SizeLaw, kind: str) -> list[CheckResult]:
    m = int(law.a)
    if kind == "normal":
        mu, sd = design.model.normal_params()
        # the cluster means are iid normal with this SD (Kish 1965)
        tau = sd * math.sqrt(cm.icc + (1.0 - cm.icc) / m)
        if design.method == "cluster-t":
            # cluster-t with equal sizes is Student's t on k iid normal cluster means
            proxy = Design(model=make_model({"model": "normal", "mean": mu, "sd": tau}), estimand="mean",
                           method="t", confidence=design.confidence, margin=design.margin, assurance=design.assurance)
            rows = eng.exact_rows(proxy, get_method("mean", "t"), ns, seed)
            return [replace(r, method=design.method, notes=msr.design_notes(design)) for r in rows]
        rows = []
        z = stats.norm.ppf(0.5 + design.confidence / 2)
        for k in ns:
            hw = z * sd / math.sqrt(k * m)  # the naive z half-width, fixed
            miss = float(stats.norm.sf(hw / (tau / math.sqrt(k))))
            meas = {
                "coverage": 1.0 - 2.0 * miss, "miss_low": miss, "miss_high": miss,
                "margin_mean": hw, "margin_median": hw, "margin_p90": hw,
                "assurance": None if design.margin is None else float(hw <= design.margin * (1 + 1e-12)),
                "margin_values": np.array([hw]), "margin_weights": np.array([1.0]),
            }
            rows.append(msr.row_from_measures(design, k, meas, seed, "exact-normal"))
        return rows
    # pooled count of k iid beta-binomial(m) clusters, by convolution
    rows = []
    p = cm.mean
    for k in ns:
        total = k * m
        if total > EXACT_COUNT_MAX:
            raise InputError("n", f"{k} clusters of {m} exceed the exact enumeration limit of {EXACT_COUNT_MAX} observations; use simulation.path = \"full\"")
        w = _pooled_count_pmf(cm, m, k)
        x = np.arange(total + 1)
        lo, hi = method.func(x, np.full(x.shape, total), design.confidence)
        lo = np.broadcast_to(np.asarray(lo, dtype=float), x.shape)
        hi = np.broadcast_to(np.asarray(hi, dtype=float), x.shape)
        meas = exactmod.weighted_measures(lo, hi, w, p, design.margin)
        rows.append(msr.row_from_measures(design, k, meas, seed, "exact-betabinomial"))
    return rows


def _pooled_count_pmf(cm: ClusteredModel, m: int, k: int) -> np.ndarray:
    """P(sum of k iid cluster counts = x), x = 0..k m (beta-binomial clusters)."""
    if cm.icc == 0.0:
        return stats.binom.pmf(np.arange(k * m + 1), k * m, cm.mean)
    one = stats.betabinom.pmf(np.arange(m + 1), m, cm.alpha, cm.beta)
    out = np.array([1.0])
    base = one
    e = k
    # convolution power by squaring; FFT rounding leaves |error| ~ 1e-16, clipped
    while e:
        if e & 1:
            out = np.clip(signal.fftconvolve(out, base), 0.0, None)
        e >>= 1
        if e:
            base = np.clip(signal.fftconvolve(base, base), 0.0, None)
    return out / out.sum()


# --------------------------------------------------------------------------
# totals of a finite population (one stage)
# --------------------------------------------------------------------------
def total_inner(design: Design) -> Design:
    """The mean (or proportion) design whose interval, times N, is the total's.

    The target margin is divided by N: ``N hw <= B`` exactly when ``hw <= B / N``.
    """
    N = design.population.size
    margin = None if design.margin is None else design.margin / N
    return replace(design, estimand=design.base_estimand, margin=margin)


def _total_row(r: CheckResult, design: Design) -> CheckResult:
    """A mean's (proportion's) row as the total's: true value, limits and half-widths times N."""
    N = float(design.population.size)

    def times(v):
        return None if v is None else v * N

    note = (f"total = N x mean with N = {design.population.size}: its interval is N times the "
            f"{design.base_estimand}'s, so coverage is the same and half-widths are N times as large")
    return replace(
        r, estimand="total", true_value=r.true_value * N, target_margin=design.margin,
        margin_mean=r.margin_mean * N, margin_median=r.margin_median * N, margin_p90=r.margin_p90 * N,
        margin_mean_mcse=times(r.margin_mean_mcse), margin_median_mcse=times(r.margin_median_mcse),
        margin_p90_mcse=times(r.margin_p90_mcse),
        margin_values=None if r.margin_values is None else r.margin_values * N,
        notes=tuple(list(r.notes) + [note]),
    )


# --------------------------------------------------------------------------
# finite populations
# --------------------------------------------------------------------------
def population_for(design: Design, root: np.random.SeedSequence) -> FinitePopulation:
    """The fixed population of one evaluation (file, or drawn from ``STAGE_POPULATION``)."""
    pop = design.population
    if pop.values is not None:
        return population_from_values(pop.values)
    if pop.file is not None:
        if pop.column is None:
            raise InputError("population.column", "missing (required with population.file)")
        return read_population(pop.file, pop.column, pop.size)
    if pop.events is not None:
        return fixed_count_population(pop.size, pop.events)
    # The population belongs to the seed, not to one evaluation: its stream
    # drops the spawn key, so the search's stages (and sweep cells with the
    # same root seed) all sample the same population.
    base = np.random.SeedSequence(entropy=root.entropy, pool_size=root.pool_size)
    return draw_population(design.model, pop.size, rngmod.generator(base, rngmod.STAGE_POPULATION))


def _population_notes(design: Design, fp: FinitePopulation | None, method: Method) -> list[str]:
    notes = list(msr.design_notes(design))
    pop = design.population
    if fp is None:  # a fixed count, evaluated without forming the population
        size, source, mean = pop.size, f"{pop.events} with the event (a fixed count)", pop.events / pop.size
    else:
        size, source, mean = fp.size, fp.source, fp.mean
    notes.append(f"finite population of {size} units, {source}; samples drawn without replacement")
    what = "share of events K/N" if design.estimand == "proportion" else "mean"
    given = "as given" if pop.events is not None or pop.file is not None else "not the data model's"
    notes.append(f"true value: the population {what} ({mean:.6g}), {given}")
    if method.needs_population_size:
        notes.append(f"the {design.method} interval is exact for the finite population: no finite population correction applied")
    elif design.population.fpc and method.kind in ("summary", "count"):
        notes.append("finite population correction: half-width x sqrt(1 - n/N)")
    elif not design.population.fpc:
        notes.append("no finite population correction (population.fpc = false)")
    if design.method == "z" and fp is not None:
        notes.append(f"z uses the population SD S = {fp.S:.6g} (divisor N - 1)")
    return notes


def _shrink(centre, lo, hi, f):
    """Limits pulled towards ``centre`` by the factor ``f`` (means: no clipping)."""
    return centre - (centre - lo) * f, centre + (hi - centre) * f


def _population_exact(design, method, ns, N: int, K: int, seed, notes) -> list[CheckResult]:
    """Exact rows by hypergeometric enumeration (a 0/1 population of N units with K events)."""
    fpc = bool(design.population.fpc)
    rows = []
    for n in ns:
        meas = exactmod.hypergeometric_measures(method, n, N, K, design.confidence, design.margin, fpc=fpc)
        r = msr.row_from_measures(design, n, meas, seed, "exact-hypergeometric")
        rows.append(replace(r, true_value=K / N, notes=tuple(list(r.notes) + notes)))
    return rows


def _population(design, method, ns, replicates, root, seed, path, curve, progress, chunk_bytes, threads=1) -> list[CheckResult]:
    pop = design.population
    if pop.events is not None and method.kind == "count" and path in ("auto", "exact"):
        # a fixed count is exact without forming its N values (N may be large)
        for n in ns:
            if n > pop.size:
                raise InputError("n", f"must be <= population.size ({pop.size}) when sampling without replacement, got {n}")
        return _population_exact(design, method, ns, pop.size, pop.events, seed, _population_notes(design, None, method))
    fp = population_for(design, root)
    N = fp.size
    for n in ns:
        if n > N:
            raise InputError("n", f"must be <= population.size ({N}) when sampling without replacement, got {n}")
    notes = _population_notes(design, fp, method)
    fpc = bool(design.population.fpc)
    kind = method.kind
    if design.estimand == "proportion" and not fp.zero_one:
        raise InputError("population.file", "a proportion estimand needs 0/1 population values")
    exact_ok = kind == "count" and fp.zero_one
    if path == "exact" and not exact_ok:
        raise InputError("simulation.path", "path 'exact' is only for proportion intervals on a 0/1 population; available: auto, nested, full")
    if exact_ok and path in ("auto", "exact"):
        return _population_exact(design, method, ns, N, fp.events, seed, notes)

    nested = kind != "sample" and (path == "nested" or (path == "auto" and curve))
    groups = [ns] if nested else [[n] for n in ns]
    centre = fp.mean if method.shift_equivariant else 0.0
    truth = fp.mean - centre
    values = fp.values
    if kind == "log" and np.any(values <= 0):
        raise InputError("method.interval", f"{design.method} needs strictly positive data; the population has values <= 0")
    rows: list[CheckResult] = []
    for group in groups:
        nmax = max(group)
        cols_per_rep = block_columns(N, nmax)
        acc = msr.Accumulator(len(group), replicates, design.margin)
        n_eval = np.asarray(group, dtype=np.int64)
        # the interval's variance is estimated from the sample: factor 1 - n/N
        f = np.sqrt(fpc_variance_factor(n_eval, N, "S2"))

        def piece(g, b, g_boot, group=group, nmax=nmax, n_eval=n_eval, f=f):
            # resampling draws from its own stream per block, consumed piece by piece
            x = values[sample_indices(g, N, (b, nmax), ordered=nested)]
            if centre:
                x -= centre
            lo, hi, deg = _population_intervals(design, method, x, group, nested, n_eval, f, fpc, fp, g_boot)
            lo = np.broadcast_to(np.asarray(lo, dtype=np.float64).reshape(b, -1), (b, len(group)))
            hi = np.broadcast_to(np.asarray(hi, dtype=np.float64).reshape(b, -1), (b, len(group)))
            return lo, hi, None if deg is None else np.asarray(deg).reshape(-1, 1)

        _run_blocks(root, replicates, cols_per_rep, acc, truth, piece, threads, progress, bootstrap=kind == "sample")
        acc.finish()
        label = "nested" if nested else "simulation"
        for j, n in enumerate(group):
            r = acc.row(j, design, n, replicates, seed, label)
            rows.append(replace(r, true_value=fp.mean, notes=tuple(list(r.notes) + notes)))
    return rows


def _population_intervals(design, method, x, group, nested, n_eval, f, fpc, fp, boot_rng):
    kind = method.kind
    conf = design.confidence
    if kind == "summary":
        s = eng.summary_from_sums(*eng.prefix_moments(x, group, nested, method.needs_m3), n_eval, fp.S)
        lo, hi = method.func(s, conf)
        if fpc:
            lo, hi = _shrink(s.mean, lo, hi, f)
        return lo, hi, None
    if kind == "count":
        cnt = eng.prefix_counts(x, group, nested)
        if method.needs_population_size:
            # exact for the finite population: given N, never corrected
            return (*method.func(cnt, n_eval, conf, population_size=fp.size), None)
        func = exactmod.with_fpc(method, fp.size) if fpc else method.func
        return (*func(cnt, n_eval, conf), None)
    if kind == "log":
        np.log(x, out=x)
        shift = math.log(fp.mean)  # centre the logs for precision; undone below
        x -= shift
        s = eng.summary_from_sums(*eng.prefix_moments(x, group, nested, False), n_eval, None)
        return (*method.func(Summary(n=s.n, mean=s.mean + shift, var=s.var), conf), None)
    # sample (bootstrap): one n per draw
    return method.func(x[:, : group[0]], conf, rng=boot_rng, resamples=design.resamples)
