"""The engine against outside references (exact laws computed with scipy).

Tolerances: within 4 Monte Carlo standard errors, fixed seeds.
"""

from __future__ import annotations

import math
import tracemalloc

import numpy as np
import pytest
from scipy import stats

from simcheck import engine
from simcheck.design import Design
from simcheck.errors import InputError
from simcheck.models import from_scipy, make_model

LN = {"model": "lognormal", "mean": 6.0, "cv": 1.2}


def _within(est, ref, mcse, k=4.0):
    assert abs(est - ref) <= k * mcse + 1e-12, f"{est} vs {ref} (MCSE {mcse})"


def _assurance_chi2(n, sigma, b, conf):
    # Kupper & Hafner (1989), The American Statistician 43:101-105; Beal (1989),
    # Biometrics 45:969-977: P(t s / sqrt(n) <= b) = P(chi2(n-1) <= n (n-1) b^2 / (t^2 sigma^2)).
    t = stats.t.ppf(1 - (1 - conf) / 2, n - 1)
    return stats.chi2.cdf(n * (n - 1) * b**2 / (t**2 * sigma**2), n - 1)


# --- t interval on normal data: exact law of the t statistic ---------------
@pytest.mark.parametrize("n", [5, 30])
def test_t_on_normal_covers_nominal_full_simulation(n):
    # Exact: (xbar - mu) / (s / sqrt(n)) ~ t(n-1) under normality (Student 1908).
    d = Design(model=make_model({"model": "normal", "mean": 3.0, "sd": 2.0}), method="t", margin=1.0)
    r = engine.check(d, n, replicates=40_000, rng=11, path="full")
    _within(r.coverage, 0.95, r.coverage_mcse)
    _within(r.miss_low, 0.025, math.sqrt(0.025 * 0.975 / r.replicates))
    _within(r.miss_high, 0.025, math.sqrt(0.025 * 0.975 / r.replicates))
    assert not r.exact


def test_t_on_normal_exact_path_is_exact():
    d = Design(model=make_model({"model": "normal", "mean": 0.0, "sd": 2.0}), method="t", margin=1.0)
    r = engine.check(d, 17, rng=1)
    assert r.exact and r.coverage == pytest.approx(0.95) and r.coverage_mcse == 0.0
    assert r.assurance == pytest.approx(_assurance_chi2(17, 2.0, 1.0, 0.95), rel=1e-12)


@pytest.mark.parametrize("n", [10, 25, 60])
@pytest.mark.parametrize("path", ["exact", "sufficient", "full"])
def test_assurance_matches_chi_square_law(n, path):
    sigma, b = 4.0, 1.0
    d = Design(model=make_model({"model": "normal", "mean": 50.0, "sd": sigma}), method="t", margin=b)
    r = engine.check(d, n, replicates=30_000, rng=7, path=path)
    ref = _assurance_chi2(n, sigma, b, 0.95)
    if path == "exact":
        assert r.assurance == pytest.approx(ref, rel=1e-12)
        # median half-width from the chi-square median (same law)
        t = stats.t.ppf(0.975, n - 1)
        assert r.margin_median == pytest.approx(t * sigma / math.sqrt(n) * math.sqrt(stats.chi2.ppf(0.5, n - 1) / (n - 1)))
    else:
        _within(r.assurance, ref, max(r.assurance_mcse, 1e-4))


# --- z interval with known SD on exponential data: gamma law ---------------
@pytest.mark.parametrize("n", [5, 20])
def test_z_known_sd_on_exponential_matches_gamma_law(n):
    # The mean of n exponentials with mean mu is Gamma(shape n, scale mu / n);
    # coverage = P(|xbar - mu| <= z mu / sqrt(n)) exactly (exact result computed with scipy).
    mu = 2.0
    z = stats.norm.ppf(0.975)
    g = stats.gamma(a=n, scale=mu / n)
    half = z * mu / math.sqrt(n)
    ref_cov = g.cdf(mu + half) - g.cdf(mu - half)
    ref_low = g.cdf(mu - half)  # interval wholly below mu <=> xbar < mu - half
    ref_high = g.sf(mu + half)  # interval wholly above mu <=> xbar > mu + half
    d = Design(model=make_model({"model": "exponential", "mean": mu}), method="z", margin=1.0)
    r = engine.check(d, n, replicates=60_000, rng=5)
    _within(r.coverage, ref_cov, r.coverage_mcse)
    _within(r.miss_low, ref_low, math.sqrt(ref_low * (1 - ref_low) / r.replicates) + 1e-5)
    _within(r.miss_high, ref_high, math.sqrt(ref_high * (1 - ref_high) / r.replicates))
    assert r.margin_mean == pytest.approx(half)


# --- simulated bernoulli path agrees with the exact path --------------------
@pytest.mark.parametrize("method", ["wald", "wilson", "agresti-coull", "clopper-pearson", "jeffreys"])
def test_simulated_bernoulli_agrees_with_exact(method):
    # Reference: exact coverage by binomial enumeration, as in Brown, Cai &
    # DasGupta (2001), Statistical Science 16:101-133.
    d = Design(model=make_model({"model": "bernoulli", "p": 0.08}), estimand="proportion", method=method, margin=0.05)
    ex = engine.check(d, 120)
    sim = engine.check(d, 120, replicates=40_000, rng=3, path="full")
    assert ex.exact and not sim.exact
    _within(sim.coverage, ex.coverage, sim.coverage_mcse)
    _within(sim.assurance, ex.assurance, max(sim.assurance_mcse, 1e-4))
    assert sim.margin_mean == pytest.approx(ex.margin_mean, rel=0.01)


def test_nested_curve_agrees_with_exact_binomial():
    d = Design(model=make_model({"model": "bernoulli", "p": 0.2}), estimand="proportion", method="wilson", margin=0.08)
    ex = engine.curve(d, range(40, 81, 10))
    sim = engine.curve(d, range(40, 81, 10), replicates=30_000, rng=9, path="nested")
    for a, b in zip(ex.rows, sim.rows):
        _within(b.coverage, a.coverage, b.coverage_mcse)


def test_two_proportions_simulated_agrees_with_double_enumeration():
    # Reference: exact coverage by double binomial enumeration (Newcombe 1998,
    # Statistics in Medicine 17:873-890, evaluates his methods the same way).
    d = Design(
        model=make_model({"model": "bernoulli", "p": 0.3}),
        model_b=make_model({"model": "bernoulli", "p": 0.15}),
        estimand="proportion-diff",
        method="newcombe",
        margin=0.12,
        ratio=1.5,
    )
    ex = engine.check(d, 50)
    sim = engine.check(d, 50, replicates=40_000, rng=2, path="full")
    assert ex.exact and ex.n_b == 75
    _within(sim.coverage, ex.coverage, sim.coverage_mcse)


# --- right-skewed data, t interval ------------------------------------------
def test_skewed_t_undercovers_with_lopsided_misses():
    # A low sample mean comes with a low SD for right-skewed data, so misses are
    # mostly intervals wholly below the true mean (common practice; see e.g.
    # Johnson 1978, JASA 73:536-544).
    d = Design(model=make_model({"model": "lognormal", "mean": 6.0, "cv": 1.5}), method="t", margin=1.0)
    c = engine.curve(d, [15, 60, 240], replicates=30_000, rng=4)
    cov = c.column("coverage")
    mcse = c.column("coverage_mcse")
    assert np.all(cov + 4 * mcse < 0.95)
    assert cov[0] + 4 * mcse[0] < cov[1] and cov[1] + 4 * mcse[1] < cov[2]
    assert np.all(c.column("miss_low") > 5 * c.column("miss_high"))


# --- nested curve vs separate checks: same law -------------------------------
def test_nested_curve_consistent_with_separate_checks():
    d = Design(model=make_model(LN), method="t", margin=1.0)
    c = engine.curve(d, [20, 80], replicates=30_000, rng=1)
    for row in c.rows:
        single = engine.check(d, row.n, replicates=30_000, rng=2)
        se = math.hypot(row.coverage_mcse, single.coverage_mcse)
        _within(row.coverage, single.coverage, se)
        assert row.path == "nested" and single.path == "simulation"


# --- randomness --------------------------------------------------------------
def test_results_do_not_depend_on_chunk_size():
    d = Design(model=make_model(LN), method="johnson-t", margin=1.0)
    assert engine.block_size(37) < 20_000  # several random blocks
    a = engine.check(d, 37, replicates=20_000, rng=123, chunk_bytes=1 << 14)
    b = engine.check(d, 37, replicates=20_000, rng=123, chunk_bytes=1 << 24)
    assert a.to_dict() == b.to_dict()
    assert engine.block_size(55) < 12_000
    ca = engine.curve(d, range(5, 60, 5), replicates=12_000, rng=5, chunk_bytes=1 << 15)
    cb = engine.curve(d, range(5, 60, 5), replicates=12_000, rng=5, chunk_bytes=1 << 24)
    assert ca.to_dict() == cb.to_dict()


def test_rng_forms_spec7():
    d = Design(model=make_model(LN), method="t", margin=1.0)
    a = engine.check(d, 20, replicates=2_000, rng=42)
    b = engine.check(d, 20, replicates=2_000, rng=np.random.SeedSequence(42))
    assert a.coverage == b.coverage and a.seed == 42
    g = np.random.default_rng(1)
    c1 = engine.check(d, 20, replicates=2_000, rng=g)
    c2 = engine.check(d, 20, replicates=2_000, rng=g)
    assert c1.coverage != c2.coverage or c1.margin_mean != c2.margin_mean  # the Generator moves on
    g2 = np.random.default_rng(1)
    assert engine.check(d, 20, replicates=2_000, rng=g2).margin_mean == c1.margin_mean


def test_scipy_frozen_distribution_as_model():
    # Exact law of the t statistic under normality (Student 1908).
    d = Design(model=from_scipy(stats.norm(loc=1.0, scale=2.0)), method="t", margin=1.0)
    r = engine.check(d, 12, replicates=20_000, rng=8, path="full")
    _within(r.coverage, 0.95, r.coverage_mcse)


def test_memory_bounded_at_many_replicates():
    # 400,000 replicates of n = 50: extra memory stays a few MiB (the draw buffer
    # is a fixed-size chunk; half-widths are kept as float32 for the median).
    d = Design(model=make_model(LN), method="t", margin=1.0)
    tracemalloc.start()
    engine.check(d, 50, replicates=400_000, rng=1)
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    assert peak < 16 * 2**20, peak


# --- bad input ----------------------------------------------------------------
def test_bad_inputs_raise_input_error():
    d = Design(model=make_model(LN), method="t", margin=1.0)
    with pytest.raises(InputError, match="n"):
        engine.check(d, 1)
    with pytest.raises(InputError, match="replicates"):
        engine.check(d, 10, replicates=0)
    with pytest.raises(InputError, match="path"):
        engine.check(d, 10, path="exact")
    dn = Design(model=make_model({"model": "normal", "mean": 0.0, "sd": 1.0}), method="cox", margin=1.0)
    with pytest.raises(InputError, match="positive"):
        engine.check(dn, 10, replicates=1000, rng=1)
