"""Clustered samples against published variance formulas and exact laws.

Tolerances: within 4 Monte Carlo standard errors, fixed seeds. The MC error
of a variance estimated from R simulated means is derived in each test:
for normal means the sample variance satisfies (R - 1) v / var ~ chi2(R - 1),
so SE(v) = var sqrt(2 / (R - 1)) (common practice); otherwise the
large-sample SE sqrt((m4 - v^2) / R) from the simulated fourth central
moment (common practice, delta method).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats

from simcheck import engine
from simcheck import rng as rngmod
from simcheck.design import ClusterSpec, Design
from simcheck.errors import InputError
from simcheck.formulas import design_effect_from_icc
from simcheck.intervals.cluster import cluster_sums, cluster_t_interval, ratio_estimate
from simcheck.models import make_model
from simcheck.models.clustered import ClusteredModel, size_law

NORMAL = {"model": "normal", "mean": 10.0, "sd": 2.0}


def _within(est, ref, se, k=4.0):
    assert abs(est - ref) <= k * se + 1e-12, f"{est} vs {ref} (SE {se})"


def _pooled_means(cm, sizes, R, seed, fast):
    g = np.random.default_rng(seed)
    m = np.broadcast_to(np.asarray(sizes, dtype=np.int64), (R, len(sizes)))
    s1, s2, _ = cm.cluster_sums(g, m, centre=cm.mean, fast=fast)
    return s1.sum(axis=1) / m.sum(axis=1)


# --- Kish (1965): equal clusters --------------------------------------------
@pytest.mark.parametrize("fast", [True, False])
@pytest.mark.parametrize("icc,m", [(0.05, 10), (0.2, 4)])
def test_kish_variance_of_the_mean_equal_clusters_normal(fast, icc, m):
    # Kish, L. (1965), Survey Sampling, Wiley: for k equal clusters of m,
    # Var(mean) = sigma^2 (1 + (m - 1) ICC) / (k m).
    k, R, sigma = 15, 20_000, 2.0
    cm = ClusteredModel(make_model(NORMAL), icc, "normal")
    means = _pooled_means(cm, [m] * k, R, 100 + m, fast)
    ref = sigma**2 * (1 + (m - 1) * icc) / (k * m)
    # means are normal here: SE of their sample variance = var sqrt(2/(R-1))
    _within(means.var(ddof=1), ref, ref * math.sqrt(2 / (R - 1)))
    _within(means.mean(), 0.0, math.sqrt(ref / R))


@pytest.mark.parametrize("effect", ["normal", "gamma"])
def test_kish_design_effect_skewed_base_model(effect):
    # Kish (1965), Survey Sampling: deff = 1 + (m - 1) ICC for equal clusters,
    # whatever the law of the values (only variances enter).
    k, m, icc, R = 12, 8, 0.1, 20_000
    model = make_model({"model": "gamma", "mean": 5.0, "cv": 1.5})
    cm = ClusteredModel(model, icc, effect)
    means = _pooled_means(cm, [m] * k, R, 7, fast=True)
    ref = model.sd**2 * (1 + (m - 1) * icc) / (k * m)
    v = means.var(ddof=1)
    d = means - means.mean()
    se = math.sqrt((np.mean(d**4) - v**2) / R)
    _within(v, ref, se)


def test_variance_components_give_the_icc():
    # Definition of the ICC (Donner & Klar 2000, Design and Analysis of Cluster
    # Randomization Trials, ch. 1): between-cluster variance ICC sigma^2 and
    # within-cluster variance (1 - ICC) sigma^2. The mean within-cluster sample
    # variance is (1 - ICC) sigma^2 and the variance of the cluster means is
    # sigma^2 (ICC + (1 - ICC) / m).
    m, icc, R = 6, 0.3, 40_000
    model = make_model({"model": "lognormal", "mean": 3.0, "cv": 0.8})
    cm = ClusteredModel(model, icc, "gamma")
    g = np.random.default_rng(5)
    sizes = np.full((R, 1), m)
    s1, s2, _ = cm.cluster_sums(g, sizes, centre=cm.mean, fast=False)
    cmean = s1[:, 0] / m
    within = (s2[:, 0] - m * cmean**2) / (m - 1)
    sig2 = model.sd**2
    _within(within.mean(), (1 - icc) * sig2, within.std(ddof=1) / math.sqrt(R))
    ref = sig2 * (icc + (1 - icc) / m)
    v = cmean.var(ddof=1)
    d = cmean - cmean.mean()
    _within(v, ref, math.sqrt((np.mean(d**4) - v**2) / R))


def test_beta_binomial_cluster_counts_have_the_icc():
    # Beta-binomial overdispersion: Var(y) = m p (1 - p) (1 + (m - 1) ICC) with
    # ICC = 1 / (a + b + 1) (Donner & Klar 2000, ch. 1; exact law via scipy.stats.betabinom).
    p, icc, m = 0.2, 0.05, 20
    cm = ClusteredModel(make_model({"model": "bernoulli", "p": p}), icc)
    law = stats.betabinom(m, cm.alpha, cm.beta)
    assert law.mean() == pytest.approx(m * p, rel=1e-12)
    assert law.var() == pytest.approx(m * p * (1 - p) * (1 + (m - 1) * icc), rel=1e-12)
    g = np.random.default_rng(3)
    s1, _, _ = cm.cluster_sums(g, np.full((50_000, 1), m))
    y = s1[:, 0]
    _within(y.var(ddof=1), law.var(), math.sqrt((law.moment(4) - 4 * law.mean() * law.moment(3)
                                                 + 6 * law.mean()**2 * law.moment(2) - 3 * law.mean()**4
                                                 - law.var()**2) / 50_000))


# --- Eldridge, Ashby & Kerry (2006): unequal sizes --------------------------
@pytest.mark.parametrize("fast", [True, False])
def test_eldridge_design_effect_fixed_unequal_sizes(fast):
    # Eldridge, Ashby & Kerry (2006), International Journal of Epidemiology
    # 35:1292-1300: deff = 1 + ((cv^2 + 1) mbar - 1) ICC, exact for the pooled
    # (observation-weighted) mean with fixed sizes, cv with divisor k.
    sizes = np.array([2, 3, 5, 8, 12, 20, 30, 40])
    icc, R, sigma = 0.08, 20_000, 2.0
    mbar = sizes.mean()
    cv = sizes.std(ddof=0) / mbar
    deff = 1 + ((cv**2 + 1) * mbar - 1) * icc
    assert deff == pytest.approx(design_effect_from_icc(icc, mbar, cv), rel=1e-12)
    cm = ClusteredModel(make_model(NORMAL), icc, "normal")
    means = _pooled_means(cm, sizes, R, 11, fast)
    ref = sigma**2 * deff / sizes.sum()
    _within(means.var(ddof=1), ref, ref * math.sqrt(2 / (R - 1)))


def test_size_law_mean_and_cv():
    # Gamma-Poisson mixture: 1 + NegBin has mean size_mean and variance
    # (cv size_mean)^2 exactly (common practice: NB variance mu + mu^2 / r).
    law = size_law(size_mean=12.0, size_cv=0.6)
    assert law.kind == "gamma-poisson" and law.mean == 12.0 and law.cv == pytest.approx(0.6)
    g = np.random.default_rng(1)
    s = law.draw(g, (200_000, 1)).ravel()
    assert s.min() >= 1
    _within(s.mean(), 12.0, s.std() / math.sqrt(s.size))
    # SE of the sample SD ~ sd sqrt((kurtosis - 1) / (4 R)) (delta method, common practice)
    kurt = stats.kurtosis(s, fisher=False)
    _within(s.std(), 0.6 * 12.0, 0.6 * 12 * math.sqrt((kurt - 1) / (4 * s.size)))
    # below the Poisson variance a binomial with the nearest whole number of trials
    low = size_law(size_mean=20.0, size_cv=0.1)
    assert low.kind == "binomial" and abs(low.cv - 0.1) < 0.002
    assert size_law(size=7).fixed and size_law(size_mean=5.0, size_cv=0.0).fixed


# --- coverage ---------------------------------------------------------------
def test_cluster_t_equal_sizes_is_student_t_on_cluster_means():
    # With equal sizes the ratio estimator is the mean of cluster means and its
    # linearisation SE is s/sqrt(k) of those means (Cochran 1977, Sampling
    # Techniques, ch. 6): the interval equals Student's t on the cluster means.
    g = np.random.default_rng(0)
    y = g.normal(size=(50, 9)) * 4.0
    lo, hi = cluster_t_interval(cluster_sums(y, 4), 0.9)
    cmean = y / 4
    half = stats.t.ppf(0.95, 8) * cmean.std(axis=1, ddof=1) / 3
    np.testing.assert_allclose(lo, cmean.mean(axis=1) - half, rtol=1e-12, atol=1e-12)
    np.testing.assert_allclose(hi, cmean.mean(axis=1) + half, rtol=1e-12, atol=1e-12)
    # unequal sizes: Cochran (1977) eq. 6.13, written out here
    m = g.integers(1, 9, size=(50, 9))
    r, se = ratio_estimate(cluster_sums(y, m))
    rr = y.sum(1) / m.sum(1)
    ref = np.sqrt(((y - rr[:, None] * m) ** 2).sum(1) / (9 * 8 * m.mean(1) ** 2))
    np.testing.assert_allclose(se, ref, rtol=1e-10)


@pytest.mark.parametrize("path", ["sufficient", "full"])
def test_cluster_t_nominal_and_naive_t_undercovers(path):
    # Equal sizes and normal effects: cluster means iid normal, so cluster-t is
    # exactly Student's t (Student 1908; Donner & Klar 2000) - nominal coverage.
    # The naive t ignores deff = 1 + (m - 1) ICC (Kish 1965), and under-covers
    # more as m grows.
    model = make_model(NORMAL)
    k, icc, R = 12, 0.05, 20_000
    cov = {}
    for m in (5, 30):
        spec = ClusterSpec(icc=icc, size=m)
        r = engine.check(Design(model=model, method="cluster-t", margin=0.5, clusters=spec), k, replicates=R, rng=21, path=path)
        _within(r.coverage, 0.95, math.sqrt(0.95 * 0.05 / R))
        _within(r.miss_low, 0.025, math.sqrt(0.025 * 0.975 / R))
        assert r.observations == k * m and r.n == k
        naive = engine.check(Design(model=model, method="t", margin=0.5, clusters=spec), k, replicates=R, rng=21, path=path)
        assert naive.coverage < 0.95 - 4 * naive.coverage_mcse
        cov[m] = naive.coverage
    assert cov[30] < cov[5] - 4 * math.sqrt(2 * 0.9 * 0.1 / R)


def test_naive_z_matches_its_design_effect_law():
    # Normal theory (common practice) with Kish's (1965) deff: the naive z
    # half-width z sigma / sqrt(k m) covers with probability 2 Phi(z / sqrt(deff)) - 1.
    k, m, icc, R = 10, 15, 0.1, 40_000
    d = Design(model=make_model(NORMAL), method="z", margin=0.5, clusters=ClusterSpec(icc=icc, size=m))
    z = stats.norm.ppf(0.975)
    ref = 2 * stats.norm.cdf(z / math.sqrt(1 + (m - 1) * icc)) - 1
    ex = engine.check(d, k, rng=1)
    assert ex.exact and ex.coverage == pytest.approx(ref, rel=1e-12)
    sim = engine.check(d, k, replicates=R, rng=1, path="full")
    _within(sim.coverage, ref, math.sqrt(ref * (1 - ref) / R))


def test_cluster_t_exact_path_law():
    # Kupper & Hafner (1989), The American Statistician 43:101-105: assurance of a
    # t interval on k iid normal values of SD tau is P(chi2(k-1) <= k (k-1) B^2 / (t^2 tau^2));
    # here tau^2 = sigma^2 (ICC + (1 - ICC)/m), the variance of a cluster mean (Kish 1965).
    k, m, icc, B = 14, 10, 0.05, 0.5
    d = Design(model=make_model(NORMAL), method="cluster-t", margin=B, clusters=ClusterSpec(icc=icc, size=m))
    r = engine.check(d, k, rng=3)
    tau2 = 4.0 * (icc + (1 - icc) / m)
    t = stats.t.ppf(0.975, k - 1)
    assert r.exact and r.coverage == pytest.approx(0.95)
    assert r.assurance == pytest.approx(stats.chi2.cdf(k * (k - 1) * B**2 / (t**2 * tau2), k - 1), rel=1e-10)
    sim = engine.check(d, k, replicates=20_000, rng=3, path="full")
    _within(sim.assurance, r.assurance, math.sqrt(r.assurance * (1 - r.assurance) / 20_000))


def test_proportion_pooled_count_exact_matches_binomial_when_icc_zero():
    # ICC = 0: the pooled count is Binomial(k m, p); coverage by binomial
    # enumeration (Brown, Cai & DasGupta 2001, Statistical Science 16:101-133).
    from simcheck.engine.exact import binomial_measures
    from simcheck.intervals.proportion import wilson

    d = Design(model=make_model({"model": "bernoulli", "p": 0.15}), estimand="proportion", method="wilson",
               margin=0.05, clusters=ClusterSpec(icc=0.0, size=8))
    r = engine.check(d, 25, rng=1)
    ref = binomial_measures(wilson, 200, 0.15, 0.95, 0.05)
    assert r.exact and r.coverage == pytest.approx(ref["coverage"], abs=1e-12)
    assert r.assurance == pytest.approx(ref["assurance"], abs=1e-12)


def test_proportion_betabinomial_exact_against_simulation_and_cluster_t():
    # Pooled count = sum of k iid beta-binomials (Donner & Klar 2000): the
    # enumeration agrees with simulation; cluster-t restores coverage.
    d = Design(model=make_model({"model": "bernoulli", "p": 0.2}), estimand="proportion", method="wald",
               margin=0.05, clusters=ClusterSpec(icc=0.05, size=20))
    ex = engine.check(d, 30, rng=2)
    sim = engine.check(d, 30, replicates=20_000, rng=2, path="full")
    assert ex.exact and not sim.exact
    _within(sim.coverage, ex.coverage, math.sqrt(ex.coverage * (1 - ex.coverage) / 20_000))
    assert ex.coverage < 0.9  # deff = 1.95: naive Wald covers about 2 Phi(1.96/1.4) - 1 = 0.84
    ct = engine.check(d.with_method("cluster-t"), 30, replicates=20_000, rng=2)
    _within(ct.coverage, 0.95, math.sqrt(0.95 * 0.05 / 20_000) + 0.005 / 4)


def test_cluster_t_varying_sizes_near_nominal_with_many_clusters():
    # Ratio estimator with linearisation variance is consistent as k grows
    # (Cochran 1977, ch. 6): with 80 clusters coverage is within 1 point of nominal.
    d = Design(model=make_model(NORMAL), method="cluster-t", margin=0.5,
               clusters=ClusterSpec(icc=0.1, size_mean=10, size_cv=0.7))
    r = engine.check(d, 80, replicates=10_000, rng=4)
    assert abs(r.coverage - 0.95) <= 0.01 + 4 * r.coverage_mcse
    assert r.observations == 800 and any("expected total" in s for s in r.notes)


# --- engine behaviour -------------------------------------------------------
def test_results_do_not_depend_on_chunk_size():
    d = Design(model=make_model({"model": "gamma", "mean": 5, "cv": 1.0}), method="t", margin=0.5,
               clusters=ClusterSpec(icc=0.1, size_mean=6, size_cv=0.5, effect="gamma"))
    a = engine.check(d, 20, replicates=3000, rng=9)
    b = engine.check(d, 20, replicates=3000, rng=9, chunk_bytes=1 << 12)
    assert a.coverage == b.coverage and a.margin_mean == b.margin_mean


def test_curve_is_nested_and_consistent():
    d = Design(model=make_model(NORMAL), method="cluster-t", margin=0.5,
               clusters=ClusterSpec(icc=0.05, size_mean=8, size_cv=0.4))
    c = engine.curve(d, [5, 10, 20], replicates=8000, rng=5)
    assert [r.n for r in c.rows] == [5, 10, 20] and all(r.path == "nested" for r in c.rows)
    margins = [r.margin_mean for r in c.rows]
    assert margins[0] > margins[1] > margins[2]
    one = engine.check(d, 20, replicates=8000, rng=5)
    se = math.sqrt(2 * 0.95 * 0.05 / 8000)
    _within(c.rows[-1].coverage, one.coverage, se)


def test_same_seed_same_result_and_stream_keys():
    d = Design(model=make_model(NORMAL), method="t", margin=0.5, clusters=ClusterSpec(icc=0.05, size=5))
    assert engine.check(d, 8, replicates=500, rng=3, path="full") == engine.check(d, 8, replicates=500, rng=3, path="full")
    root, _ = rngmod.root_sequence(3)
    assert rngmod.child(root, rngmod.STAGE_MAIN, 0).spawn_key == (0, 0)


@pytest.mark.parametrize("design_kw,field", [
    ({"estimand": "mean-diff", "method": "t", "model_b": make_model(NORMAL)}, "clusters"),
    ({"method": "bootstrap-percentile"}, "method.interval"),
    ({"method": "cox"}, "method.interval"),
])
def test_bad_combinations_name_the_field(design_kw, field):
    kw = {"model": make_model(NORMAL), "margin": 0.5, "clusters": ClusterSpec(icc=0.1, size=5)}
    kw.update(design_kw)
    if kw.get("method") == "cox":
        kw["model"] = make_model({"model": "lognormal", "mean": 3.0, "cv": 1.0})
    with pytest.raises(InputError) as e:
        engine.check(Design(**kw), 10, replicates=200, rng=1)
    assert e.value.problems[0].field == field


def test_bad_cluster_spec_values():
    with pytest.raises(InputError) as e:
        engine.check(Design(model=make_model(NORMAL), margin=0.5, clusters=ClusterSpec(icc=1.5, size=0, effect="odd")), 10, replicates=200, rng=1)
    fields = {p.field for p in e.value.problems}
    assert {"clusters.icc", "clusters.effect", "clusters.size"} <= fields


# --- search over the number of clusters -------------------------------------
def test_search_finds_the_number_of_clusters_of_the_design_effect_law():
    # Closed form through the design effect (Kish 1965): cluster means have
    # variance tau^2 = sigma^2 (1 + (m - 1) ICC) / m, so the cluster-t
    # assurance at k clusters is P(chi2(k-1) <= k (k-1) B^2 / (t^2 tau^2))
    # (Kupper & Hafner 1989, The American Statistician 43:101-105), and the
    # z-based number of clusters is ceil(z^2 sigma^2 deff / (m B^2)).
    from simcheck.search import find_n, formula_n

    sigma, B, m, icc = 2.0, 0.5, 10, 0.05
    d = Design(model=make_model({"model": "normal", "mean": 10.0, "sd": sigma}), method="cluster-t", margin=B,
               clusters=ClusterSpec(icc=icc, size=m))
    deff = 1 + (m - 1) * icc
    tau2 = sigma**2 * deff / m

    def assurance(k):
        t = stats.t.ppf(0.975, k - 1)
        return stats.chi2.cdf(k * (k - 1) * B**2 / (t**2 * tau2), k - 1)

    z = stats.norm.ppf(0.975)
    assert formula_n(d) == math.ceil(z**2 * sigma**2 * deff / (m * B**2))
    k80 = next(k for k in range(2, 500) if assurance(k) >= 0.8)
    r = find_n(d, assurance=0.8, coverage_tolerance=0.005, replicates=4000, rng=1, n_min=2, n_max=200)
    assert r.reached and r.n == k80
    # the same through full simulation: the answer's range holds the exact k
    k50 = next(k for k in range(2, 500) if assurance(k) >= 0.5)
    s = find_n(d, assurance=0.5, coverage_tolerance=0.005, replicates=4000, rng=2, n_min=2, n_max=200, path="full")
    assert s.reached and s.n_range[0] <= k50 <= s.n_range[1]
    # the naive t never reaches 95 % coverage: it ignores deff (about 0.90 here)
    naive = find_n(d.with_method("t"), assurance=0.5, coverage_tolerance=0.005, replicates=4000, rng=3,
                          n_min=2, n_max=100)
    assert not naive.reached


def test_available_paths_and_forced_paths():
    from simcheck.engine.clustered import available_paths

    normal = Design(model=make_model(NORMAL), method="cluster-t", margin=0.5, clusters=ClusterSpec(icc=0.1, size=5))
    assert available_paths(normal) == ["exact", "sufficient", "nested", "full"]
    skewed = Design(model=make_model({"model": "gamma", "mean": 5, "cv": 1}), method="johnson-t", margin=0.5,
                    clusters=ClusterSpec(icc=0.1, size_mean=5, size_cv=0.3))
    assert available_paths(skewed) == ["nested", "full"]
    for path in ("exact", "sufficient"):
        with pytest.raises(InputError) as e:
            engine.check(skewed, 10, replicates=200, rng=1, path=path)
        assert e.value.problems[0].field == "simulation.path"
    # the third moment needs every observation: full draws; ignoring deff = 1.45
    # (Eldridge et al. 2006) the naive johnson-t under-covers
    r = engine.check(skewed, 10, replicates=2000, rng=1)
    assert r.path == "simulation" and r.coverage < 0.95 - 4 * r.coverage_mcse
