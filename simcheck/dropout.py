"""A check in which the analysed n is random: binomial retention of the enrolled units.

With ``target.dropout = d`` a study enrols ``N = ceil(n / (1 - d))`` units
and each is kept with probability ``1 - d``, independently, so the analysed
size is ``K ~ Binomial(N, 1 - d)``. Coverage, misses and assurance of such a
study are the mixture ``sum_k P(K = k) measure(k)``; :func:`check_random_dropout`
evaluates every k in the bulk of the binomial law along one engine curve (the
nested path shares its draws across k) and mixes them. Studies left with
fewer units than the interval needs (k below 2) count as neither covering nor
meeting the margin.
"""

from __future__ import annotations

import numpy as np
from scipy import stats

from simcheck.formulas import enrolled_n
from simcheck.results import CheckResult

TAIL = 1e-7  # binomial mass left out at each end (said in the notes)


def retention_law(n: int, dropout: float, min_n: int = 2) -> tuple[int, np.ndarray, np.ndarray, float]:
    """(N enrolled, k values, their probabilities, probability of k < min_n)."""
    big_n = enrolled_n(n, dropout)
    law = stats.binom(big_n, 1.0 - dropout)
    lo = max(min_n, int(law.ppf(TAIL)))
    hi = max(lo, int(law.isf(TAIL)))
    ks = np.arange(lo, hi + 1)
    return big_n, ks, law.pmf(ks), float(law.cdf(min_n - 1))


def _weighted_quantile(values: np.ndarray, weights: np.ndarray, q: float) -> float:
    order = np.argsort(values)
    v, w = values[order], weights[order]
    cum = np.cumsum(w) / w.sum()
    return float(v[min(np.searchsorted(cum, q), v.size - 1)])


def _margins(rows, w: np.ndarray) -> tuple[float | None, float | None]:
    vals, wts = [], []
    for r, wk in zip(rows, w):
        if r.margin_values is None or np.size(r.margin_values) == 0:
            return None, None
        mv = np.asarray(r.margin_values, dtype=float)
        mw = np.full(mv.size, 1.0 / mv.size) if r.margin_weights is None else np.asarray(r.margin_weights, float)
        vals.append(mv)
        wts.append(wk * mw / mw.sum())
    v, wt = np.concatenate(vals), np.concatenate(wts)
    ok = np.isfinite(v)
    return _weighted_quantile(v[ok], wt[ok], 0.5), _weighted_quantile(v[ok], wt[ok], 0.9)


def check_random_dropout(design, n: int, dropout: float, *, replicates: int, rng, path: str = "auto") -> CheckResult:
    """:func:`simcheck.engine.check` at a target analysed ``n`` with binomial retention of ``N`` enrolled.

    The MCSEs are the weighted sums of the per-k MCSEs: an upper bound, since
    the per-k estimates share draws (positively correlated at most).
    """
    from simcheck import engine
    from simcheck.errors import InputError

    if design.two_sample:
        raise InputError("simulation.random_dropout", "is for one-sample estimands only")
    big_n, ks, p, p_short = retention_law(n, dropout)
    rows = engine.curve(design, ks.tolist(), replicates=replicates, rng=rng, path=path).rows
    w = p  # P(K = k); the left-out tails and k < 2 count as failures
    cov = float(np.dot(w, [r.coverage for r in rows]))
    ass = None if any(r.assurance is None for r in rows) else float(np.dot(w, [r.assurance for r in rows]))
    med, p90 = _margins(rows, w / w.sum())
    notes = [
        f"analysed n drawn per study from Binomial({big_n}, {1 - dropout:g}): {big_n} enrolled "
        f"(ceil({n} / (1 - {dropout:g}))), mean analysed {big_n * (1 - dropout):.6g}; measures mixed over "
        f"k = {ks[0]}..{ks[-1]} (binomial mass outside, {1 - float(w.sum()):.2g}, counts as failing)",
        "MCSEs are upper bounds (weighted sums over k of curve points sharing draws)",
    ]
    if p_short > 1e-9:
        notes.append(f"probability {p_short:.2g} that fewer than 2 units remain (counted as failing)")
    first = rows[0]
    return CheckResult(
        n=int(n), replicates=first.replicates, true_value=first.true_value,
        coverage=cov, coverage_mcse=float(np.dot(w, [r.coverage_mcse for r in rows])),
        miss_low=float(np.dot(w, [r.miss_low for r in rows])), miss_high=float(np.dot(w, [r.miss_high for r in rows])),
        margin_mean=float(np.dot(w / w.sum(), [r.margin_mean for r in rows])),
        margin_median=med if med is not None else float("nan"), margin_p90=p90 if p90 is not None else float("nan"),
        assurance=ass,
        assurance_mcse=None if ass is None else float(np.dot(w, [r.assurance_mcse for r in rows])),
        method=first.method, seed=first.seed, exact=all(r.exact for r in rows), estimand=first.estimand,
        confidence=first.confidence, target_margin=first.target_margin, observations=None,
        degenerate=int(sum(r.degenerate for r in rows)), path=first.path,
        notes=tuple(notes) + tuple(dict.fromkeys(x for r in rows for x in r.notes)),
    )
