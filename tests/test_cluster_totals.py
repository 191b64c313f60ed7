"""Totals of clustered designs: M clusters in the population (clusters.count), estimand total.

References written inside the tests: Cochran, W. G. (1977), Sampling Techniques,
3rd ed., Wiley -- the expansion estimate of a total from a simple random sample
of clusters, M ybar_c, its variance M^2 (1 - k/M) S_c^2 / k and the unbiased
estimate of that variance (sections 2.4-2.5 with the cluster totals as the units,
section 9A.2 for clusters; section numbers from memory). Exact coverage by
enumerating every sample of k of M clusters (itertools) with scipy's t quantile.
"""

from __future__ import annotations

import itertools
import json
import math

import numpy as np
import pytest
from scipy import stats

from simcheck import engine
from simcheck.cli import main
from simcheck.cluster_total import cluster_total_sample_size, cluster_total_variance
from simcheck.engine.clustered import cluster_population_for, finite_cluster_estimates
from simcheck.errors import InputError
from simcheck.intervals.cluster import cluster_sums, cluster_total_interval
from simcheck.scenario import scenario_from_dict

from tests.fixtures import write_toml


def _table(count=40, size=5, margin=400.0, model=None, method="cluster-t", replicates=4000, **clusters):
    cl = {"icc": 0.2, "count": count}
    cl.update({"size": size} if size is not None else {})
    cl.update(clusters)
    return {"title": "invented village survey", "target": {"estimand": "total", "margin": margin},
            "method": {"interval": method}, "data": model or {"model": "gamma", "mean": 12.0, "cv": 0.8},
            "clusters": cl, "simulation": {"replicates": replicates, "seed": 3, "n_max": count}}


def _population(design, seed):
    sizes, totals, _ = cluster_population_for(design, np.random.SeedSequence(seed))
    return sizes, totals


# --- the estimator: unbiased, with Cochran's variance, on the engine's own samples ---------------
def test_expansion_estimator_is_unbiased_with_the_exact_variance_equal_sizes():
    d = scenario_from_dict(_table()).design
    k, R, M = 8, 20_000, 40
    _, y = _population(d, 3)
    Y = y.sum()
    S2 = y.var(ddof=1)  # S_c^2, divisor M - 1
    V = M**2 * (1 - k / M) * S2 / k
    est = finite_cluster_estimates(d, k, R, rng=3)
    assert abs(est.mean() - Y) <= 4 * math.sqrt(V / R)
    d2 = (est - Y) ** 2
    assert abs(d2.mean() - V) <= 4 * d2.std(ddof=1) / math.sqrt(R), (d2.mean(), V)
    # the interval's variance estimate M^2 (1 - k/M) s_c^2 / k is unbiased for V as well
    r = engine.check(d, k, replicates=R, rng=3)
    v = (r.margin_values / stats.t.ppf(0.975, k - 1)) ** 2
    assert abs(v.mean() - V) <= 4 * v.std(ddof=1) / math.sqrt(R)
    assert r.true_value == pytest.approx(Y, rel=1e-12)


def test_coverage_matches_exact_enumeration_of_every_sample():
    d = scenario_from_dict(_table(count=12, size=3, margin=200.0)).design
    M, k, R = 12, 4, 20_000
    _, y = _population(d, 3)
    Y = y.sum()
    q = stats.t.ppf(0.975, k - 1)
    covered = []
    for idx in itertools.combinations(range(M), k):
        s = y[list(idx)]
        half = q * M * math.sqrt((1 - k / M) * s.var(ddof=1) / k)
        covered.append(abs(M * s.mean() - Y) <= half)
    exact = float(np.mean(covered))
    r = engine.check(d, k, replicates=R, rng=3)
    assert abs(r.coverage - exact) <= 4 * math.sqrt(exact * (1 - exact) / R), (r.coverage, exact)


def test_interval_function_against_its_formula_and_census():
    g = np.random.default_rng(1)
    y = g.gamma(2.0, 30.0, size=(5, 6))
    lo, hi = cluster_total_interval(cluster_sums(y, 4.0), 0.9, cluster_count=50)
    s2 = y.var(axis=1, ddof=1)
    half = stats.t.ppf(0.95, 5) * 50 * np.sqrt((1 - 6 / 50) * s2 / 6)
    assert np.allclose((lo + hi) / 2, 50 * y.mean(axis=1), rtol=1e-12)
    assert np.allclose((hi - lo) / 2, half, rtol=1e-10)
    lo, hi = cluster_total_interval(cluster_sums(y, 4.0), 0.9, cluster_count=6)
    assert np.allclose(hi - lo, 0.0)
    # a census through the engine: exact, zero width
    d = scenario_from_dict(_table(count=10, size=4)).design
    r = engine.check(d, 10, replicates=200, rng=2)
    assert r.coverage == 1.0 and r.margin_mean == 0.0


def test_varying_sizes_cluster_total_variance_against_the_model():
    # S_y^2 = sigma^2 (rho m^2 (1 + V^2) + (1 - rho) m) + mu^2 m^2 V^2: the law of total variance
    # (common practice) applied to the clustered model; compared with a large drawn population
    d = scenario_from_dict(_table(count=200_000, size=None, size_mean=8, size_cv=0.5, icc=0.1,
                                  model={"model": "normal", "mean": 5.0, "sd": 2.0})).design
    _, y = _population(d, 9)
    d2 = (y - y.mean()) ** 2
    want = 4.0 * (0.1 * 64 * 1.25 + 0.9 * 8) + 25.0 * 64 * 0.25
    assert cluster_total_variance(2.0, 0.1, 8, 0.5, 5.0) == pytest.approx(want, rel=1e-12)
    assert abs(d2.mean() - want) <= 4 * d2.std(ddof=1) / math.sqrt(y.size), (d2.mean(), want)


# --- closed form ------------------------------------------------------------------------------
@pytest.mark.parametrize("B,M,m,rho,sd", [(5000.0, 300, 12, 0.05, 30.0), (800.0, 40, 5, 0.2, 9.6), (1e4, 2000, 20, 0.01, 4.0)])
def test_formula_equal_sizes_matches_cochran(capsys, B, M, m, rho, sd):
    z = stats.norm.ppf(0.975)
    S2 = m * sd**2 * (1 + (m - 1) * rho)  # variance of a cluster total, equal sizes (Kish deff)
    k0 = (z * M * math.sqrt(S2) / B) ** 2
    k = max(2, math.ceil(k0 / (1 + k0 / M) - 1e-9))
    res = cluster_total_sample_size(B, M, m, rho, sd=sd)
    assert res.clusters == k and res.n == math.ceil(k * m - 1e-9)
    # the same n as the mean of the units at margin B / (M m) (N = M m units), with the first-stage correction
    code = main(["formula", "--estimand", "mean", "--margin", repr(B / (M * m)), "--sd", repr(sd), "--icc", repr(rho),
                 "--cluster-size", repr(m), "--cluster-count", repr(M), "--json"])
    assert code == 0 and json.loads(capsys.readouterr().out)["clusters"] == k


def test_formula_cli_and_search_use_the_cluster_total(capsys):
    code = main(["formula", "--estimand", "total", "--margin", "800", "--cluster-count", "40", "--icc", "0.2",
                 "--cluster-size", "5", "--sd", "9.6", "--json"])
    out = json.loads(capsys.readouterr().out)
    assert code == 0 and out["estimand"] == "total"
    assert out["clusters"] == cluster_total_sample_size(800.0, 40, 5, 0.2, sd=9.6).clusters
    from simcheck.search import formula_n

    d = scenario_from_dict(_table(margin=800.0)).design
    assert formula_n(d) == cluster_total_sample_size(800.0, 40, 5, 0.2, sd=d.model.sd, mean=d.model.mean).clusters


def test_check_curve_search_cli(tmp_path, capsys):
    path = write_toml(tmp_path / "villages.toml", _table(margin=900.0, replicates=500))
    assert main(["check", str(path), "--n", "10", "--json"]) == 0
    row = json.loads(capsys.readouterr().out)
    assert row["estimand"] == "total" and 0.8 < row["coverage"] <= 1.0
    assert main(["curve", str(path), "--n-min", "5", "--n-max", "12", "--json"]) == 0
    capsys.readouterr()
    assert main(["search", str(path), "--json"]) == 0
    res = json.loads(capsys.readouterr().out)
    assert res["n_formula"] is not None and res["decision"] in ("clear", "undecided", "not reached")


# --- bad input: one line, exit 2 -------------------------------------------------------------
@pytest.mark.parametrize("change,field", [
    ({"count": None}, "clusters.count"),
    ({"method": "t"}, "method.interval"),
])
def test_bad_cluster_totals_exit_2(tmp_path, capsys, change, field):
    t = _table()
    if "count" in change:
        del t["clusters"]["count"]
    else:
        t["method"]["interval"] = change["method"]
    with pytest.raises(InputError, match=field.replace(".", r"\.")):
        scenario_from_dict(t)
    path = write_toml(tmp_path / "bad.toml", t)
    assert main(["check", str(path), "--n", "5"]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and field in err[0], err


@pytest.mark.parametrize("argv,field", [
    (["--cluster-count", "1", "--icc", "0.1", "--cluster-size", "4", "--sd", "2"], "--cluster-count"),
    (["--cluster-count", "50", "--icc", "0.1", "--cluster-size", "4", "--sd", "2", "--cluster-size-cv", "0.3"],
     "--cluster-size-cv"),
    (["--cluster-count", "50", "--cluster-size", "4", "--sd", "2"], "--icc"),
])
def test_bad_formula_cluster_totals_exit_2(capsys, argv, field):
    assert main(["formula", "--estimand", "total", "--margin", "100"] + argv) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and field in err[0], err


# --- search's closed form for one-stage totals (no strata, no clusters) --------------------------
@pytest.mark.parametrize("data,interval,N,B", [
    ({"model": "lognormal", "mean": 30.0, "cv": 1.0}, "t", 5000, 20000.0),
    ({"model": "bernoulli", "p": 0.1}, "wilson", 2000, 60.0),
])
def test_search_formula_for_one_stage_totals(data, interval, N, B):
    # a half-width B on N ybar is B / N on the mean; Cochran (1977) sections 4.4 and 4.6:
    # means n = n0 / (1 + n0 / N) with n0 = (z S / b)^2, proportions n = n0 / (1 + (n0 - 1) / N) with n0 = z^2 P Q / b^2
    from simcheck.search import formula_n

    t = {"title": "invented ledger", "target": {"estimand": "total", "margin": B}, "method": {"interval": interval},
         "data": data, "population": {"size": N}, "simulation": {"replicates": 1000, "seed": 1}}
    z, b = stats.norm.ppf(0.975), B / N
    if "p" in data:
        n0 = z**2 * data["p"] * (1 - data["p"]) / b**2
        n = n0 / (1 + (n0 - 1) / N)
    else:
        n0 = (z * data["cv"] * data["mean"] / b) ** 2
        n = n0 / (1 + n0 / N)
    assert formula_n(scenario_from_dict(t).design) == math.ceil(n - 1e-9)


def test_search_formula_for_a_mean_of_finite_clusters_has_the_first_stage_correction():
    # k = k0 / (1 + k0 / M), k0 = (z sd / B)^2 (1 + (m - 1) rho) / m (Kish deff; Cochran 1977 ch. 9, from memory)
    from simcheck.search import formula_n

    t = _table(count=60, size=20, margin=2.0)
    t["target"]["estimand"] = "mean"
    t["data"] = {"model": "normal", "mean": 50.0, "sd": 10.0}
    t["clusters"]["icc"] = 0.05
    k0 = (stats.norm.ppf(0.975) * 10.0 / 2.0) ** 2 * (1 + 19 * 0.05) / 20
    assert formula_n(scenario_from_dict(t).design) == math.ceil(k0 / (1 + k0 / 60) - 1e-9)
