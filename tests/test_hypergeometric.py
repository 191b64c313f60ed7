"""The exact finite-population interval for a proportion (hypergeometric inversion)
and 0/1 populations with a fixed count (population.events).

References used in the checks:
* the definition (two one-sided tests at alpha/2 inverted over K = 0..N):
  Buonaccorsi, J. P. (1987), A note on confidence intervals for proportions in
  finite populations, The American Statistician 41, 215-218 (from memory);
* the limits are checked against a brute-force search over every K written
  here, and the coverage against our own enumeration with
  scipy.stats.hypergeom (exact, no simulation).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats

from simcheck import engine
from simcheck.cli import main
from simcheck.design import ClusterSpec, Design, PopulationSpec
from simcheck.errors import InputError
from simcheck.intervals import get_method
from simcheck.models import make_model
from simcheck.scenario import scenario_from_dict


def _brute_limits(x: int, n: int, N: int, confidence: float) -> tuple[int, int]:
    """Every K in 0..N tried: the K not rejected by either one-sided test at alpha/2."""
    half = (1 - confidence) / 2
    kept = [K for K in range(N + 1)
            if stats.hypergeom.sf(x - 1, N, K, n) > half and stats.hypergeom.cdf(x, N, K, n) > half]
    assert kept == list(range(kept[0], kept[-1] + 1))  # the kept set is an interval of K
    return kept[0], kept[-1]


@pytest.mark.parametrize("N,n,conf", [(20, 7, 0.95), (45, 12, 0.90), (60, 60, 0.95), (80, 30, 0.99), (150, 9, 0.95)])
def test_limits_match_a_brute_force_search_over_K(N, n, conf):
    func = get_method("proportion", "hypergeometric").func
    x = np.arange(n + 1)
    lo, hi = func(x, np.full(x.shape, n), conf, population_size=N)
    for xi in x:
        kl, ku = _brute_limits(int(xi), n, N, conf)
        assert lo[xi] * N == pytest.approx(kl, abs=1e-9), (xi, lo[xi] * N, kl)
        assert hi[xi] * N == pytest.approx(ku, abs=1e-9), (xi, hi[xi] * N, ku)


def _coverage_at_every_K(N: int, n: int, conf: float) -> np.ndarray:
    """Exact coverage for each K in 0..N by our own enumeration over x (scipy pmf)."""
    func = get_method("proportion", "hypergeometric").func
    x = np.arange(n + 1)
    lo, hi = func(x, np.full(x.shape, n), conf, population_size=N)
    out = np.empty(N + 1)
    for K in range(N + 1):
        w = stats.hypergeom.pmf(x, N, K, n)
        p = K / N
        out[K] = w[(lo <= p) & (p <= hi)].sum()
    return out


@pytest.mark.parametrize("N,n,conf", [(30, 10, 0.95), (100, 15, 0.95), (100, 60, 0.90), (240, 40, 0.95), (400, 120, 0.99)])
def test_coverage_is_at_least_nominal_at_every_K(N, n, conf):
    # an exact method: coverage >= the confidence for every possible population
    cov = _coverage_at_every_K(N, n, conf)
    assert cov.min() >= conf - 1e-12, (int(cov.argmin()), cov.min())


def test_engine_exact_path_matches_own_enumeration_and_ignores_fpc():
    N, K, n = 2400, 48, 400
    func = get_method("proportion", "hypergeometric").func
    x = np.arange(0, K + 1)
    lo, hi = func(x, np.full(x.shape, n), 0.95, population_size=N)
    w = stats.hypergeom.pmf(x, N, K, n)
    cov = w[(lo <= K / N) & (K / N <= hi)].sum()
    hw_mean = float(np.dot(w, (hi - lo) / 2))
    assurance = w[(hi - lo) / 2 <= 0.015 * (1 + 1e-12)].sum()
    for fpc in (True, False):
        d = Design(model=make_model({"model": "bernoulli", "p": K / N}), estimand="proportion", method="hypergeometric",
                   margin=0.015, population=PopulationSpec(size=N, events=K, fpc=fpc))
        r = engine.check(d, n, replicates=1000, rng=1)
        assert r.exact and r.true_value == K / N
        assert r.coverage == pytest.approx(cov, abs=1e-12)
        assert r.margin_mean == pytest.approx(hw_mean, rel=1e-12)
        assert r.assurance == pytest.approx(assurance, abs=1e-12)


def test_simulated_path_agrees_with_the_exact_coverage_within_4_mcse():
    N, K, n, R = 300, 21, 70, 20_000
    d = Design(model=make_model({"model": "bernoulli", "p": K / N}), estimand="proportion", method="hypergeometric",
               margin=0.05, population=PopulationSpec(size=N, events=K))
    exact = engine.check(d, n, replicates=R, rng=5)
    sim = engine.check(d, n, replicates=R, rng=5, path="full")
    assert exact.exact and not sim.exact
    se = math.sqrt(exact.coverage * (1 - exact.coverage) / R)
    assert abs(sim.coverage - exact.coverage) <= 4 * se + 1e-12
    assert abs(sim.margin_mean - exact.margin_mean) <= 4 * sim.margin_mean_mcse + 1e-12


def test_fixed_count_population_has_exactly_K_events_and_fpc_methods_stay_exact():
    # Wilson with the FPC on a fixed count: the engine's exact row equals our own enumeration
    N, K, n = 500, 12, 90
    d = Design(model=make_model({"model": "bernoulli", "p": K / N}), estimand="proportion", method="wilson",
               margin=0.03, population=PopulationSpec(size=N, events=K, fpc=False))
    r = engine.check(d, n, replicates=1000, rng=3)
    x = np.arange(0, K + 1)
    z = stats.norm.isf(0.025)
    ph = x / n
    c = (ph + z * z / (2 * n)) / (1 + z * z / n)
    h = z / (1 + z * z / n) * np.sqrt(ph * (1 - ph) / n + z * z / (4 * n * n))  # Wilson (1927)
    w = stats.hypergeom.pmf(x, N, K, n)
    assert r.exact and r.coverage == pytest.approx(w[(c - h <= K / N) & (K / N <= c + h)].sum(), abs=1e-12)


def _table(**pop):
    return {"target": {"estimand": "proportion", "margin": 0.02}, "method": {"interval": "hypergeometric"},
            "population": pop}


def test_scenario_fixed_count_without_data():
    s = scenario_from_dict(_table(size=2400, events=48))
    assert s.design.population.events == 48 and s.design.population.size == 2400
    assert s.design.model.mean == pytest.approx(0.02)


@pytest.mark.parametrize("pop,extra,field", [
    ({"size": 100, "events": 101}, {}, "population.events"),
    ({"size": 100, "events": -1}, {}, "population.events"),
    ({"size": 100, "events": 4.5}, {}, "population.events"),
    ({"size": 100, "events": "4"}, {}, "population.events"),
    ({"size": 100, "events": 4}, {"data": {"model": "bernoulli", "p": 0.1}}, "data"),
])
def test_scenario_refuses_bad_fixed_counts(pop, extra, field):
    t = _table(**pop)
    t.update(extra)
    with pytest.raises(InputError) as e:
        scenario_from_dict(t)
    assert [p.field for p in e.value.problems] == [field]


def test_hypergeometric_needs_a_population_and_no_clusters():
    m = make_model({"model": "bernoulli", "p": 0.1})
    with pytest.raises(InputError, match="population"):
        Design(model=m, estimand="proportion", method="hypergeometric", margin=0.05)
    with pytest.raises(InputError, match="clusters"):
        Design(model=m, estimand="proportion", method="hypergeometric", margin=0.05,
               clusters=ClusterSpec(icc=0.1, size=10))


def test_cli_bad_fixed_count_is_one_line_exit_2(tmp_path, capsys):
    f = tmp_path / "s.toml"
    f.write_text('[target]\nestimand = "proportion"\nmargin = 0.02\n[method]\ninterval = "hypergeometric"\n'
                 '[population]\nsize = 100\nevents = 150\n')
    code = main(["check", str(f), "--n", "10"])
    err = capsys.readouterr().err.strip().splitlines()
    assert code == 2 and len(err) == 1 and "population.events" in err[0]
    f.write_text('[target]\nestimand = "proportion"\nmargin = 0.02\n[method]\ninterval = "hypergeometric"\n'
                 '[data]\nmodel = "bernoulli"\np = 0.1\n')
    code = main(["check", str(f), "--n", "10"])
    err = capsys.readouterr().err.strip().splitlines()
    assert code == 2 and len(err) == 1 and "method.interval" in err[0]


def test_invoice_audit_example_loads_and_is_labelled_invented():
    from pathlib import Path

    from simcheck.scenario import load_scenario

    path = Path(__file__).resolve().parent.parent / "scenarios" / "invoice_audit.toml"
    assert "invented" in path.read_text().lower()
    s = load_scenario(path)
    assert s.methods == ("hypergeometric", "wilson", "clopper-pearson")
    assert (s.design.population.size, s.design.population.events) == (2400, 48)
    r = engine.check(s.design, 404, replicates=1000, rng=s.seed)
    assert r.exact and r.coverage >= 0.95  # exact method: at least the nominal level


def test_nested_curve_on_a_drawn_population_agrees_with_exact_within_4_mcse():
    # a population drawn from a model (not a fixed count): nested prefixes vs hypergeometric enumeration
    d = Design(model=make_model({"model": "bernoulli", "p": 0.1}), estimand="proportion", method="hypergeometric",
               margin=0.05, population=PopulationSpec(size=500))
    nested = engine.curve(d, [50, 100, 150], replicates=4000, rng=3, path="nested").rows
    exact = engine.curve(d, [50, 100, 150], replicates=4000, rng=3).rows
    for a, b in zip(nested, exact):
        assert b.exact and not a.exact and a.true_value == b.true_value
        assert abs(a.coverage - b.coverage) <= 4 * math.sqrt(b.coverage * (1 - b.coverage) / 4000) + 1e-12
        assert abs(a.margin_mean - b.margin_mean) <= 4 * a.margin_mean_mcse + 1e-12
