"""Stratified sampling: allocation of a total n to strata, and the closed-form total n.

Pure functions on numpy arrays (no simulation). Notation of Cochran (1977,
ch. 5): stratum sizes ``N_h``, weights ``W_h = N_h / N``, stratum SDs ``S_h``
(divisor ``N_h - 1``), per-unit costs ``c_h``, sample sizes ``n_h``.

Allocation rules (shares ``w_h = n_h / n``):

``proportional``  ``w_h = W_h``
``neyman``        ``w_h`` proportional to ``N_h S_h`` (least variance for a fixed n)
``optimum``       ``w_h`` proportional to ``N_h S_h / sqrt(c_h)`` (least variance for a fixed cost)
``given``         ``w_h`` proportional to the given ``n_h``

References
----------
.. [1] Cochran, W. G. (1977). Sampling Techniques, 3rd ed. Wiley. Section 5.5
   (optimum allocation, eq. 5.24), 5.9 (sample size for a specified variance,
   eq. 5.25 and its Neyman and proportional forms, eqs. 5.26-5.27).
"""

from __future__ import annotations

import math
from typing import Sequence

import numpy as np

from simcheck.errors import Collector, InputError

RULES = ("proportional", "neyman", "optimum", "given")
#: default least number of sampled units per stratum (a variance needs two)
MINIMUM = 2


def shares(rule: str, sizes: Sequence[float], sds: Sequence[float], costs: Sequence[float] | None = None,
           given: Sequence[int] | None = None) -> np.ndarray:
    """Allocation shares ``w_h`` (summing to 1) under ``rule``.

    Parameters
    ----------
    rule : {"proportional", "neyman", "optimum", "given"}
    sizes : sequence of float
        Stratum sizes ``N_h``.
    sds : sequence of float
        Stratum SDs ``S_h`` (planning values).
    costs : sequence of float, optional
        Per-unit costs ``c_h`` (``optimum`` only).
    given : sequence of int, optional
        Given sample sizes ``n_h`` (``given`` only).

    Returns
    -------
    ndarray
        The shares, one per stratum.

    References
    ----------
    .. [1] Cochran (1977), Sampling Techniques, 3rd ed., sections 5.3-5.5.
    """
    N = np.asarray(sizes, dtype=np.float64)
    S = np.asarray(sds, dtype=np.float64)
    if rule == "proportional":
        raw = N
    elif rule == "neyman":
        raw = N * S
    elif rule == "optimum":
        if costs is None:
            raise InputError("strata.cost", "rule 'optimum' needs a cost per stratum")
        raw = N * S / np.sqrt(np.asarray(costs, dtype=np.float64))
    elif rule == "given":
        if given is None:
            raise InputError("strata.n", "rule 'given' needs n per stratum")
        raw = np.asarray(given, dtype=np.float64)
    else:
        raise InputError("allocation.rule", f"must be one of {', '.join(RULES)}, got {rule!r}")
    total = raw.sum()
    if not total > 0:
        # every S_h = 0 under neyman/optimum: nothing varies, share by size
        raw, total = N, N.sum()
    return raw / total


def allocate(n: int, sizes: Sequence[int], w: np.ndarray, minimum: int = MINIMUM) -> np.ndarray:
    """Whole ``n_h`` summing to ``n``: shares ``w`` by largest remainders, each in [minimum, N_h].

    Strata pushed to a bound are fixed there and the rest of n is shared
    again among the others in proportion to their shares, until every
    ``n_h`` is within its bounds.

    Raises
    ------
    InputError
        ``n`` is below ``minimum`` times the number of strata or above the
        population size.
    """
    N = np.asarray(sizes, dtype=np.int64)
    H = N.size
    lo = np.minimum(N, minimum)
    if n < lo.sum():
        raise InputError("n", f"must be at least {int(lo.sum())} ({minimum} per stratum, {H} strata), got {n}")
    if n > N.sum():
        raise InputError("n", f"must be at most the population size {int(N.sum())} (sampling without replacement), got {n}")
    w = np.asarray(w, dtype=np.float64)
    fixed = np.full(H, -1, dtype=np.int64)
    while True:
        free = fixed < 0
        rest = n - fixed[~free].sum()
        ideal = np.zeros(H)
        wf = w[free]
        ideal[free] = rest * (wf / wf.sum() if wf.sum() > 0 else np.full(wf.size, 1.0 / wf.size))
        low = free & (ideal < lo)
        high = free & (ideal > N)
        if not low.any() and not high.any():
            break
        fixed[low] = lo[low]
        fixed[high] = N[high]
    out = np.where(fixed >= 0, fixed, 0)
    free = fixed < 0
    if free.any():
        rest = n - out[~free].sum()
        base = np.floor(ideal[free]).astype(np.int64)
        base = np.clip(base, lo[free], N[free])
        left = int(rest - base.sum())
        # largest remainders first; ties go to the earlier stratum (stable order)
        frac = ideal[free] - np.floor(ideal[free])
        order = np.argsort(-frac, kind="stable")
        caps = N[free] - base
        i = 0
        while left > 0 and i < 10 * len(order) + 10:
            j = order[i % len(order)]
            if caps[j] > 0:
                base[j] += 1
                caps[j] -= 1
                left -= 1
            i += 1
        out[free] = base
    return out


def variance_of_mean(n_h: np.ndarray, sizes: Sequence[int], sds: Sequence[float]) -> float:
    """Variance of the stratified mean under sampling without replacement in each stratum.

    ``V(ybar_st) = sum W_h^2 S_h^2 / n_h * (1 - n_h / N_h)`` (Cochran 1977, Theorem 5.3).
    """
    N = np.asarray(sizes, dtype=np.float64)
    S = np.asarray(sds, dtype=np.float64)
    n_h = np.asarray(n_h, dtype=np.float64)
    W = N / N.sum()
    return float(np.sum(W * W * S * S / n_h * (1.0 - n_h / N)))


def formula_n(margin: float, z: float, sizes: Sequence[int], sds: Sequence[float], w: np.ndarray,
              minimum: int = MINIMUM) -> dict:
    """Closed-form total n for a stratified mean with half-width ``margin`` at multiple ``z``.

    ``n = sum(W_h^2 S_h^2 / w_h) / (V + sum(W_h S_h^2) / N)`` with ``V = (margin / z)^2``
    (Cochran 1977, eq. 5.25, any allocation ``w``; its Neyman and proportional
    forms are eqs. 5.26 and 5.27); each ``n_h = ceil(n w_h)``, as practitioners
    round, raised to ``minimum`` and capped at ``N_h``.

    Returns
    -------
    dict
        ``n`` (total of the rounded n_h), ``n_unrounded``, ``n_h`` (list),
        ``variance`` (V achieved by the rounded n_h).
    """
    N = np.asarray(sizes, dtype=np.float64)
    S = np.asarray(sds, dtype=np.float64)
    W = N / N.sum()
    V = (margin / z) ** 2
    w = np.asarray(w, dtype=np.float64)
    pos = w > 0
    num = float(np.sum(W[pos] ** 2 * S[pos] ** 2 / w[pos]))
    den = V + float(np.sum(W * S * S)) / N.sum()
    n0 = num / den
    n_h = np.ceil(n0 * w * (1 - 1e-12)).astype(np.int64)
    n_h = np.minimum(np.maximum(n_h, np.minimum(minimum, N.astype(np.int64))), N.astype(np.int64))
    return {"n": int(n_h.sum()), "n_unrounded": n0, "n_h": [int(v) for v in n_h],
            "variance": variance_of_mean(n_h, sizes, sds)}


def satterthwaite_df(a: np.ndarray, var_h: np.ndarray, n_h: np.ndarray) -> np.ndarray:
    """Satterthwaite degrees of freedom of ``sum a_h s_h^2``.

    ``df = (sum a_h s_h^2)^2 / sum((a_h s_h^2)^2 / (n_h - 1))`` (Satterthwaite
    1946, Biometrics Bulletin 2:110-114; Cochran 1977, eq. 5.16). ``var_h`` has
    strata along its last axis.
    """
    t = a * var_h
    num = t.sum(axis=-1) ** 2
    den = (t * t / (n_h - 1.0)).sum(axis=-1)
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(den > 0, num / np.where(den > 0, den, 1.0), np.asarray(n_h).sum() - len(n_h))


def check_strata(c: Collector, sizes, rule: str, costs, given, minimum) -> None:
    """Collect the problems of a strata description (all at once)."""
    if rule not in RULES:
        c.add("allocation.rule", f"must be one of {', '.join(RULES)}, got {rule!r}")
    c.number("allocation.minimum", minimum, low=2, integer=True)
    for i, N in enumerate(sizes):
        c.number(f"strata[{i}].size", N, low=2, high=1_000_000_000, integer=True)
    if rule == "optimum":
        if costs is None or any(v is None for v in costs):
            c.add("strata.cost", "rule 'optimum' needs cost > 0 in every [[strata]] table")
        else:
            for i, v in enumerate(costs):
                c.number(f"strata[{i}].cost", v, low=0, low_open=True)
    if rule == "given":
        if given is None or any(v is None for v in given):
            c.add("strata.n", "rule 'given' needs n in every [[strata]] table")
        else:
            for i, (v, N) in enumerate(zip(given, sizes)):
                c.number(f"strata[{i}].n", v, low=2, integer=True)
                if isinstance(v, (int, float)) and isinstance(N, (int, float)) and math.isfinite(v) and v > N:
                    c.add(f"strata[{i}].n", f"must be <= the stratum size {N}, got {v}")


def stratified_sample_size(estimand: str, margin: float, *, names: Sequence[str], sizes: Sequence[int],
                           sds: Sequence[float] | None = None, ps: Sequence[float] | None = None,
                           means: Sequence[float] | None = None, rule: str = "proportional",
                           costs: Sequence[float] | None = None, given: Sequence[int] | None = None,
                           minimum: int = MINIMUM, confidence: float = 0.95):
    """Closed-form total n of a stratified sample (the textbook baseline).

    Parameters
    ----------
    estimand : {"mean", "proportion", "total"}
        A total's ``margin`` is in the total's units (N times the mean's).
    margin : float
        Target half-width.
    names, sizes : sequences
        Stratum names and sizes ``N_h``.
    sds : sequence of float, optional
        Stratum SDs (mean, total).
    ps : sequence of float, optional
        Stratum proportions (proportion); ``S_h^2 = p_h (1 - p_h)``, as
        practitioners plan (common practice).
    means : sequence of float, optional
        Stratum means, for the design effect against a simple random sample.
    rule, costs, given, minimum
        The allocation (see :func:`shares`).
    confidence : float
        Nominal level; the multiple is ``z_{1 - alpha/2}``.

    Returns
    -------
    StratifiedFormulaResult
        ``n`` is the total of the per-stratum ``ceil(n w_h)``; ``allocation``
        maps each stratum to its n_h.

    References
    ----------
    .. [1] Cochran (1977), Sampling Techniques, 3rd ed., eqs. 5.25-5.27.
    """
    from scipy import stats

    from simcheck.formulas import StratifiedFormulaResult

    _check_inputs(estimand, margin, confidence, sizes, sds, ps, rule, costs, given, minimum)
    N = np.asarray(sizes, dtype=np.float64)
    S = np.sqrt(np.asarray(ps) * (1 - np.asarray(ps))) if estimand == "proportion" else np.asarray(sds, dtype=np.float64)
    z = float(stats.norm.ppf(1 - (1 - confidence) / 2))
    b = margin / N.sum() if estimand == "total" else margin
    w = shares(rule, sizes, S, costs, given)
    out = formula_n(b, z, sizes, S, w, minimum)
    deff = _design_effect(N, S, w, means if means is not None else ps)
    return StratifiedFormulaResult(
        estimand=estimand, n=out["n"], n_b=None, n_unrounded=float(out["n_unrounded"]), multiplier=z,
        multiplier_kind="z", design_effect=deff, clusters=None, clusters_b=None, confidence=confidence,
        margin=margin, ratio=None, df=None, iterations=None, n_before_fpc=None, population_size=int(N.sum()),
        cluster_size=None, sd=None, sd_b=None, p=None, p_b=None,
        assumptions=(f"allocation {rule}", "sampling without replacement in each stratum (finite population correction)",
                     "each n_h rounded up, at least the minimum per stratum",
                     "design effect: variance against a simple random sample of the same n"
                     + ("" if means is not None else " with the same within-stratum SDs (stratum means not given)")),
        formula=f"V = (B / z)^2; {FORMS[rule]} (Cochran 1977, eqs. 5.25-5.27)",
        allocation={str(k): int(v) for k, v in zip(names, out["n_h"])},
    )


#: each allocation rule's total n, as the formula text says it (Cochran 1977, eqs. 5.25-5.27)
FORMS = {"proportional": "n0 = sum W_h S_h^2 / V, n = n0 / (1 + n0 / N)",
         "neyman": "n = (sum W_h S_h)^2 / (V + sum W_h S_h^2 / N)",
         "optimum": "n = (sum W_h S_h sqrt(c_h)) (sum W_h S_h / sqrt(c_h)) / (V + sum W_h S_h^2 / N)",
         "given": "n = sum(W_h^2 S_h^2 / w_h) / (V + sum W_h S_h^2 / N)"}


def _check_inputs(estimand, margin, confidence, sizes, sds, ps, rule, costs, given, minimum) -> None:
    """All problems of :func:`stratified_sample_size`'s inputs at once."""
    c = Collector()
    c.number("margin", margin, low=0, low_open=True)
    c.number("confidence", confidence, low=0, high=1, low_open=True, high_open=True)
    check_strata(c, sizes, rule, costs, given, minimum)
    if estimand == "proportion":
        if ps is None:
            c.add("p", "a proportion needs p per stratum")
        else:
            for i, p in enumerate(ps):
                c.number(f"strata[{i}].p", p, low=0, high=1)
    elif estimand in ("mean", "total"):
        if sds is None:
            c.add("sd", "a mean or total needs an SD per stratum")
        else:
            for i, s in enumerate(sds):
                c.number(f"strata[{i}].sd", s, low=0)
    else:
        c.add("estimand", f"stratified samples estimate a mean, a proportion or a total, not {estimand!r}")
    c.raise_if_any()


def _design_effect(N: np.ndarray, S: np.ndarray, w: np.ndarray, means) -> float:
    """Variance of the stratified mean over that of a simple random sample of the same n.

    The population variance is the within-stratum part plus the spread of the
    stratum means (taken as equal when not given).
    """
    W = N / N.sum()
    mu = np.asarray(means if means is not None else np.zeros(len(N)), dtype=np.float64)
    s2_pop = float(np.sum(W * S * S) + np.sum(W * (mu - np.sum(W * mu)) ** 2))
    return float(np.sum(W[w > 0] ** 2 * S[w > 0] ** 2 / w[w > 0]) / s2_pop) if s2_pop > 0 else 1.0
