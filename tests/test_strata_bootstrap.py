"""The stratified rescaling bootstrap (method ``bootstrap`` of stratified designs).

References written inside the tests: Rao, J. N. K. & Wu, C. F. J. (1988),
Resampling inference with complex survey data, JASA 83:231-241 (the rescaled
resample mean ybar_h + sqrt(m_h (1 - f_h) / (n_h - 1)) (ybar*_h - ybar_h), whose
bootstrap variance is the usual estimator); Cochran, W. G. (1977), Sampling
Techniques, 3rd ed., Wiley, Theorem 5.4 (v(ybar_st) = sum W_h^2 (1 - f_h) s_h^2 / n_h).
The resampling in the tests is numpy's own, written here, never simcheck's.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from simcheck import engine
from simcheck.cli import main
from simcheck.engine.stratified import allocation_for, stratum_populations
from simcheck.errors import InputError
from simcheck.intervals.stratified_bootstrap import rescaled_bootstrap, rescaled_estimates
from simcheck.scenario import scenario_from_dict

from tests.fixtures import write_toml

SKEWED = [
    {"name": "harbour", "size": 900, "data": {"model": "lognormal", "mean": 120.0, "cv": 1.2}},
    {"name": "hills", "size": 400, "data": {"model": "gamma", "mean": 95.0, "cv": 1.5}},
    {"name": "farms", "size": 150, "data": {"model": "normal", "mean": 80.0, "sd": 20.0}},
]


def _table(estimand="mean", margin=15.0, rule="neyman", strata=SKEWED, resamples=399, bound=None):
    t = {"title": "invented stratified survey", "target": {"estimand": estimand, "margin": margin},
         "method": {"interval": "bootstrap", "resamples": resamples},
         "simulation": {"replicates": 1000, "seed": 11, "n_max": 1000},
         "strata": strata, "allocation": {"rule": rule}}
    if bound:
        t["target"]["bound"] = bound
    return t


def _reference_coverage(pops, n_h, confidence, R, B, seed):
    """Own simulation: samples without replacement, Rao-Wu resamples of n_h - 1, percentile interval."""
    g = np.random.default_rng(seed)
    N = np.array([p.size for p in pops], float)
    W = N / N.sum()
    truth = float(np.dot(W, [p.values.mean() for p in pops]))
    lam = np.sqrt(1.0 - n_h / N)  # m_h = n_h - 1: sqrt(m_h (1 - f_h) / (n_h - 1)) = sqrt(1 - f_h)
    covered = 0
    for _ in range(R):
        est = np.zeros(B)
        for p, k, w, l in zip(pops, n_h, W, lam):
            x = g.choice(p.values, size=int(k), replace=False)
            star = x[g.integers(0, k, size=(B, k - 1))].mean(axis=1)
            est += w * (x.mean() + l * (star - x.mean()))
        lo, hi = np.percentile(est, [100 * (1 - confidence) / 2, 100 * (1 + confidence) / 2])
        covered += lo <= truth <= hi
    return covered / R


@pytest.mark.slow
def test_coverage_on_skewed_strata_matches_an_independent_simulation():
    d = scenario_from_dict(_table()).design
    n, R, B = 60, 1500, 399
    r = engine.check(d, n, replicates=R, rng=21)
    pops = stratum_populations(d, 21)
    n_h = np.array(list(allocation_for(d, n).values()))
    ref = _reference_coverage(pops, n_h, 0.95, R, B, seed=77)
    se = math.sqrt(ref * (1 - ref) / R + r.coverage_mcse ** 2)
    assert abs(r.coverage - ref) <= 4 * se, (r.coverage, ref, se)
    # skewed strata at this n: the percentile bootstrap falls visibly short of 95%
    assert r.coverage < 0.95


def test_bootstrap_variance_is_the_usual_stratified_variance_estimator():
    # Rao & Wu (1988): Var*(sum W_h ytilde_h) = sum W_h^2 (1 - f_h) s_h^2 / n_h on a fixed sample
    g = np.random.default_rng(5)
    N = np.array([300.0, 1200.0, 80.0])
    samples = [g.lognormal(3.0, 0.8, size=(1, 6)), g.gamma(2.0, 10.0, size=(1, 25)), g.normal(50, 5, size=(1, 40))]
    n = np.array([x.shape[1] for x in samples], float)
    W = N / N.sum()
    f = n / N
    v = float(np.sum(W**2 * (1 - f) * np.array([x.var(ddof=1) for x in samples]) / n))
    B = 200_000
    est = rescaled_estimates(samples, W, f, np.random.default_rng(9), B)[0]
    d2 = (est - est.mean()) ** 2
    boot_var = d2.mean() * B / (B - 1)
    assert abs(boot_var - v) <= 4 * d2.std(ddof=1) / math.sqrt(B), (boot_var, v)
    # and its bootstrap mean is the stratified mean
    ybar_st = float(np.dot(W, [x.mean() for x in samples]))
    assert abs(est.mean() - ybar_st) <= 4 * math.sqrt(v / B)


def test_census_stratum_adds_nothing_and_zero_one_estimates_stay_in_range():
    g = np.random.default_rng(3)
    x1 = (g.random((4, 10)) < 0.3).astype(float)
    x2 = (g.random((4, 5)) < 0.7).astype(float)
    W = np.array([0.5, 0.5])
    est = rescaled_estimates([x1, x2], W, [0.1, 1.0], np.random.default_rng(1), 500)
    assert est.min() >= 0.0 and est.max() <= 1.0
    # the census stratum (f = 1) contributes its exact mean and draws nothing: only stratum 1 varies
    only1 = rescaled_estimates([x1], [0.5], [0.1], np.random.default_rng(1), 500)
    assert np.allclose(est, only1 + 0.5 * x2.mean(axis=1)[:, None], rtol=0, atol=1e-15)
    centre = 0.5 * x1.mean(axis=1) + 0.5 * x2.mean(axis=1)
    one = rescaled_estimates([x1, x2], W, [1.0, 1.0], np.random.default_rng(1), 50)
    assert np.allclose(one, centre[:, None], rtol=0, atol=1e-15)


def test_interval_is_the_percentile_interval_of_the_estimates(monkeypatch):
    # one tile: the limits are numpy's linear-interpolation quantiles of the same stream's estimates
    from simcheck.intervals import stratified_bootstrap as sb

    monkeypatch.setattr(sb, "TILE_VALUES", 10_000_000)
    g = np.random.default_rng(8)
    xs = [g.normal(size=(30, 7)), g.normal(size=(30, 4))]
    lo, hi = rescaled_bootstrap(xs, [0.3, 0.7], [0.0, 0.2], 0.9, np.random.default_rng(2), 199)
    est = rescaled_estimates(xs, [0.3, 0.7], [0.0, 0.2], np.random.default_rng(2), 199)
    # (1 - 0.9) / 2 is 0.04999... in floating point: equal to rounding
    assert np.allclose(lo, np.percentile(est, 5, axis=1), rtol=1e-12, atol=0)
    assert np.allclose(hi, np.percentile(est, 95, axis=1), rtol=1e-12, atol=0)


def test_engine_results_do_not_depend_on_threads():
    d = scenario_from_dict(_table()).design
    a = engine.check(d, 40, replicates=300, rng=4, threads=1)
    b = engine.check(d, 40, replicates=300, rng=4, threads=2)
    assert a.coverage == b.coverage and a.margin_mean == b.margin_mean
    assert any("Rao & Wu" in s for s in a.notes)


def test_total_is_population_size_times_the_mean_and_proportions_work():
    m = engine.check(scenario_from_dict(_table()).design, 50, replicates=300, rng=6)
    t = engine.check(scenario_from_dict(_table(estimand="total", margin=15.0 * 1450)).design, 50, replicates=300, rng=6)
    assert t.coverage == m.coverage
    assert t.margin_mean == pytest.approx(1450 * m.margin_mean, rel=1e-12)
    strata = [{"name": "a", "size": 500, "data": {"model": "bernoulli", "p": 0.1}},
              {"name": "b", "size": 800, "data": {"model": "bernoulli", "p": 0.4}}]
    p = engine.check(scenario_from_dict(_table(estimand="proportion", margin=0.1, strata=strata)).design, 80,
                     replicates=300, rng=6)
    assert 0.8 < p.coverage <= 1.0 and 0 < p.margin_mean < 0.2


def test_search_and_cli_method_choice(tmp_path, capsys):
    from simcheck.search import find_n

    t = _table(margin=25.0)
    t["method"]["interval"] = ["t", "bootstrap"]
    t["simulation"].update({"replicates": 300, "n_max": 400})
    t["target"]["coverage_tolerance"] = 0.04
    sc = scenario_from_dict(t)
    res = find_n(sc.design.with_method("bootstrap"), replicates=300, rng=1, n_max=400)
    assert res.method == "bootstrap" and res.decision in ("clear", "undecided", "not reached")
    path = write_toml(tmp_path / "s.toml", t)
    assert main(["check", str(path), "--n", "40", "--method", "bootstrap", "--json"]) == 0
    assert '"method": "bootstrap"' in capsys.readouterr().out


def test_one_sided_bootstrap_is_refused_with_one_line(tmp_path, capsys):
    with pytest.raises(InputError, match="target.bound"):
        scenario_from_dict(_table(bound="upper"))
    path = write_toml(tmp_path / "s.toml", _table(bound="upper"))
    assert main(["check", str(path), "--n", "40"]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "target.bound" in err[0]
