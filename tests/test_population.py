"""Finite populations: sampling without replacement against Cochran (1977) and exact enumeration.

Tolerances: within 4 Monte Carlo standard errors, fixed seeds.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats

from simcheck import engine
from simcheck import rng as rngmod
from simcheck.design import Design, PopulationSpec
from simcheck.errors import InputError
from simcheck.models import make_model
from simcheck.models.population import draw_population, read_population, sample_indices


def _within(est, ref, se, k=4.0):
    assert abs(est - ref) <= k * se + 1e-12, f"{est} vs {ref} (SE {se})"


# --- the sampler ------------------------------------------------------------
@pytest.mark.parametrize("N,n", [(5000, 50), (200, 60), (40, 40)])
def test_inclusion_probabilities_of_simple_random_sampling(N, n):
    # Cochran (1977), Sampling Techniques, ch. 2: under simple random sampling
    # every unit has inclusion probability n/N and every pair n(n-1)/(N(N-1));
    # (N, n) pick both algorithms of sample_indices (rejection, sorted keys).
    R = 20_000
    g = np.random.default_rng(N + n)
    idx = sample_indices(g, N, (R, n))
    assert np.all(np.diff(np.sort(idx, axis=1), axis=1) > 0)  # no unit twice
    counts = np.bincount(idx.ravel(), minlength=N)
    p = n / N
    if p < 1:
        # each unit's count is Binomial(R, n/N): largest standardised deviation over units
        z = (counts - R * p) / math.sqrt(R * p * (1 - p))
        assert np.abs(z).max() < stats.norm.isf(0.5e-3 / N)  # Bonferroni at 0.1 % overall
        pair = np.mean(np.any(idx == 0, axis=1) & np.any(idx == 1, axis=1))
        p2 = n * (n - 1) / (N * (N - 1))
        _within(pair, p2, math.sqrt(p2 * (1 - p2) / R))
    # the first position is uniform over units (prefixes are random samples)
    first = np.bincount(idx[:, 0], minlength=N)
    chi2 = ((first - R / N) ** 2 / (R / N)).sum()
    assert stats.chi2.sf(chi2, N - 1) > 1e-3


def test_cochran_variance_of_the_mean_without_replacement():
    # Cochran (1977), Sampling Techniques, ch. 2, Theorem 2.2:
    # Var(ybar) = (1 - n/N) S^2 / n, S^2 with divisor N - 1.
    N, n, R = 500, 150, 20_000
    pop = draw_population(make_model({"model": "gamma", "mean": 5.0, "cv": 1.2}), N, np.random.default_rng(1))
    idx = sample_indices(np.random.default_rng(2), N, (R, n), ordered=False)
    means = pop.values[idx].mean(axis=1)
    ref = (1 - n / N) * pop.S**2 / n
    v = means.var(ddof=1)
    d = means - means.mean()
    _within(v, ref, math.sqrt((np.mean(d**4) - v**2) / R))  # delta-method SE of a variance (common practice)
    _within(means.mean(), pop.mean, math.sqrt(ref / R))


# --- exact hypergeometric coverage ------------------------------------------
def _hypergeom_coverage(N, K, n, conf, fpc):
    # Written out here: X ~ hypergeom(N, K, n); Wald p +- z sqrt(p(1-p)/n),
    # half-width times sqrt(1 - n/N) when fpc (Cochran 1977, ch. 3), clipped to [0, 1].
    z = stats.norm.ppf(0.5 + conf / 2)
    total = 0.0
    for x in range(max(0, n - (N - K)), min(n, K) + 1):
        p = x / n
        h = z * math.sqrt(p * (1 - p) / n) * (math.sqrt(1 - n / N) if fpc else 1.0)
        lo, hi = max(0.0, p - h), min(1.0, p + h)
        if lo <= K / N <= hi:
            total += stats.hypergeom.pmf(x, N, K, n)
    return total


@pytest.mark.parametrize("fpc", [True, False])
def test_hypergeometric_exact_coverage_equals_written_enumeration(fpc):
    N, n = 400, 120
    d = Design(model=make_model({"model": "bernoulli", "p": 0.1}), estimand="proportion", method="wald",
               margin=0.05, population=PopulationSpec(size=N, fpc=fpc))
    r = engine.check(d, n, rng=8)
    root, _ = rngmod.root_sequence(8)
    pop = draw_population(d.model, N, rngmod.generator(root, rngmod.STAGE_POPULATION))
    K = pop.events
    assert r.exact and r.path == "exact-hypergeometric" and r.true_value == K / N
    assert r.coverage == pytest.approx(_hypergeom_coverage(N, K, n, 0.95, fpc), abs=1e-12)
    sim = engine.check(d, n, replicates=20_000, rng=8, path="full")
    assert not sim.exact and sim.true_value == K / N
    _within(sim.coverage, r.coverage, math.sqrt(r.coverage * (1 - r.coverage) / 20_000))
    assert any("population" in s for s in r.notes)


def test_fpc_restores_coverage_when_sampling_a_large_fraction():
    # Without the correction the interval is too wide by 1/sqrt(1 - n/N): the
    # normal approximation (Cochran 1977, ch. 2) predicts coverage
    # 2 Phi(z / sqrt(1 - f)) - 1; with it, near nominal.
    N, n, R = 1000, 500, 20_000
    model = make_model({"model": "normal", "mean": 50.0, "sd": 10.0})
    with_fpc = engine.check(Design(model=model, method="t", margin=1.0, population=PopulationSpec(size=N)), n,
                            replicates=R, rng=4)
    without = engine.check(Design(model=model, method="t", margin=1.0, population=PopulationSpec(size=N, fpc=False)), n,
                           replicates=R, rng=4)
    _within(with_fpc.coverage, 0.95, math.sqrt(0.95 * 0.05 / R) + 0.003 / 4)
    pred = 2 * stats.norm.cdf(stats.norm.ppf(0.975) / math.sqrt(1 - n / N)) - 1
    _within(without.coverage, pred, math.sqrt(pred * (1 - pred) / R) + 0.003 / 4)
    assert with_fpc.margin_mean == pytest.approx(without.margin_mean * math.sqrt(1 - n / N), rel=0.01)


def test_true_value_is_the_population_mean_and_reproducible():
    d = Design(model=make_model({"model": "lognormal", "mean": 6.0, "cv": 1.0}), method="t", margin=0.5,
               population=PopulationSpec(size=3000))
    a = engine.check(d, 100, replicates=2000, rng=13)
    b = engine.check(d, 100, replicates=2000, rng=13, chunk_bytes=1 << 12)
    root, _ = rngmod.root_sequence(13)
    pop = draw_population(d.model, 3000, rngmod.generator(root, rngmod.STAGE_POPULATION))
    assert a.true_value == pytest.approx(pop.mean, rel=1e-15) and a.true_value != d.model.mean
    assert a.coverage == b.coverage and a.margin_mean == b.margin_mean
    assert any("true value: the population" in s for s in a.notes)


def test_curve_nested_and_exact_curve():
    d = Design(model=make_model({"model": "bernoulli", "p": 0.3}), estimand="proportion", method="wilson",
               margin=0.05, population=PopulationSpec(size=2000))
    ex = engine.curve(d, [100, 300, 600], rng=2)
    nest = engine.curve(d, [100, 300, 600], replicates=10_000, rng=2, path="nested")
    for e, s in zip(ex.rows, nest.rows):
        assert e.exact and s.path == "nested"
        _within(s.coverage, e.coverage, math.sqrt(e.coverage * (1 - e.coverage) / 10_000))
    # at n = N the sample is the population: the fpc interval has zero width and covers
    full = engine.check(d.with_method("wald"), 2000, rng=2)
    assert full.coverage == 1.0 and full.margin_mean == 0.0


def test_population_from_csv(tmp_path):
    values = np.round(np.random.default_rng(3).gamma(2.0, 3.0, size=800), 2)
    f = tmp_path / "ledger.csv"
    f.write_text("id,amount\n" + "\n".join(f"{i},{v}" for i, v in enumerate(values)) + "\n")
    pop = read_population(str(f), "amount")
    assert pop.size == 800 and pop.mean == pytest.approx(values.mean(), rel=1e-14)
    d = Design(model=make_model({"model": "normal", "mean": 0, "sd": 1}), method="t", margin=0.5,
               population=PopulationSpec(size=800, file=str(f), column="amount"))
    r = engine.check(d, 80, replicates=2000, rng=1)
    assert r.true_value == pytest.approx(values.mean(), rel=1e-14)
    with pytest.raises(InputError) as e:
        read_population(str(f), "amont")
    assert e.value.problems[0].field == "population.column"


def test_errors_name_the_field():
    model = make_model({"model": "normal", "mean": 0, "sd": 1})
    d = Design(model=model, method="t", margin=0.5, population=PopulationSpec(size=50))
    with pytest.raises(InputError) as e:
        engine.check(d, 51, replicates=200, rng=1)
    assert e.value.problems[0].field == "n" and "population.size" in str(e.value)
    with pytest.raises(InputError) as e:
        engine.check(d.with_method("bootstrap-percentile"), 20, replicates=200, rng=1)
    assert e.value.problems[0].field == "population.fpc"
    with pytest.raises(InputError) as e:
        engine.check(d.with_method("cluster-t"), 20, replicates=200, rng=1)
    assert e.value.problems[0].field == "method.interval"


def test_bootstrap_without_fpc_and_exact_flag():
    from simcheck.engine.clustered import exact_available

    model = make_model({"model": "lognormal", "mean": 6.0, "cv": 1.0})
    d = Design(model=model, method="bootstrap-percentile", margin=0.5, resamples=199,
               population=PopulationSpec(size=5000, fpc=False))
    r = engine.check(d, 30, replicates=400, rng=1)
    assert r.path == "simulation" and 0.5 < r.coverage <= 1.0 and not exact_available(d)
    p = Design(model=make_model({"model": "bernoulli", "p": 0.3}), estimand="proportion", method="wilson",
               margin=0.05, population=PopulationSpec(size=500))
    assert exact_available(p) and engine.check(p, 50, rng=1).exact


# --- the finite population correction of a 0/1 interval (issue 12) -----------
def _wald_fpc_by_hand(N, K, n, conf, margin):
    # Written out here (not simcheck): X ~ hypergeom(N, K, n) (scipy); Wald with the
    # finite population correction p +- z sqrt(1 - n/N) sqrt(p q / n), clipped to
    # [0, 1] ONCE (Cochran 1977, Sampling Techniques, 3rd ed., section 3.2: the
    # estimated variance of p carries the factor 1 - n/N). Returns the half-width
    # law as (value, probability) pairs.
    z = stats.norm.ppf(0.5 + conf / 2)
    out = []
    for x in range(max(0, n - (N - K)), min(n, K) + 1):
        p = x / n
        h = z * math.sqrt(1 - n / N) * math.sqrt(p * (1 - p) / n)
        lo, hi = max(0.0, p - h), min(1.0, p + h)
        out.append(((hi - lo) / 2, float(stats.hypergeom.pmf(x, N, K, n))))
    return out


def test_fpc_on_0_1_data_is_clipped_once_issue_example(tmp_path):
    # The issue's example: N = 500, 5 events, n = 100, margin 0.0135. Clip, shrink,
    # clip again gave half-width 0.0132 at x = 1 and assurance 0.738; clipped once
    # the half-width at x = 1 is 0.0137 > 0.0135, so only x = 0 (the zero-width
    # [0, 0]) is within the margin: P(X = 0) = 0.326.
    N, K, n, margin = 500, 5, 100, 0.0135
    law = _wald_fpc_by_hand(N, K, n, 0.95, margin)
    p0 = stats.hypergeom.pmf(0, N, K, n)
    assert p0 == pytest.approx(0.3259, abs=5e-4)
    within = sum(w for h, w in law if h <= margin)
    assert within == pytest.approx(p0, rel=1e-12)  # only the zero-width x = 0
    from simcheck.engine.exact import hypergeometric_measures
    from simcheck.intervals import get_method

    got = hypergeometric_measures(get_method("proportion", "wald"), n, N, K, 0.95, margin=margin, fpc=True)
    assert got["margin_mean"] == pytest.approx(sum(h * w for h, w in law), rel=1e-12)
    # the engine on a population file holding exactly these 500 units
    hw = np.array([h for h, _ in law])
    w = np.array([w for _, w in law])
    order = np.argsort(hw, kind="stable")
    cum = np.cumsum(w[order])
    median = hw[order][np.searchsorted(cum, 0.5)]  # smallest value with P(hw <= value) >= 1/2
    f = tmp_path / "ledger.csv"
    f.write_text("unit,flag\n" + "\n".join(f"{i},{int(i < K)}" for i in range(N)) + "\n")
    d = Design(model=make_model({"model": "bernoulli", "p": 0.5}), estimand="proportion", method="wald",
               margin=margin, population=PopulationSpec(size=N, file=str(f), column="flag"))
    r = engine.check(d, n, rng=1)
    assert r.exact and r.true_value == K / N
    assert r.margin_mean == pytest.approx(sum(h * w for h, w in law), rel=1e-12)
    assert r.margin_median == pytest.approx(median, rel=1e-12)
    sim = engine.check(d, n, replicates=20_000, rng=1, path="full")
    se = math.sqrt(sum(h * h * w for h, w in law) - r.margin_mean**2) / math.sqrt(20_000)
    _within(sim.margin_mean, r.margin_mean, se)
