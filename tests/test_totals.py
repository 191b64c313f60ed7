"""Totals of a finite population from one-stage samples: engine and closed form.

Source for the closed form: Cochran, W. G. (1977), Sampling Techniques, 3rd ed.,
chapters 2 and 3 (from memory): the estimated total N ybar has variance
N^2 (1 - n/N) S^2 / n (S^2 with divisor N - 1); for 0/1 values S^2 = N P Q / (N - 1).
The references below are computed inside the tests (brute force over n, scipy).
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
from simcheck.formulas import total_sample_size
from simcheck.models import make_model
from simcheck.scenario import scenario_from_dict


def _smallest_n(N: int, S: float, B: float, conf: float) -> int:
    """Brute force: the smallest n with z N sqrt((1 - n/N) S^2 / n) <= B (Cochran 1977, ch. 2)."""
    z = stats.norm.isf((1 - conf) / 2)
    for n in range(1, N + 1):
        if z * N * math.sqrt((1 - n / N) * S * S / n) <= B:
            return n
    raise AssertionError("no n")


@pytest.mark.parametrize("N,S,B,conf", [(1200, 360.0, 48_000.0, 0.95), (5000, 12.5, 9_000.0, 0.90), (300, 2.0, 150.0, 0.99)])
def test_formula_total_matches_the_closed_form(N, S, B, conf):
    res = total_sample_size(B, N, sd=S, confidence=conf)
    assert res.estimand == "total" and res.margin == B
    assert res.n == _smallest_n(N, S, B, conf)


def test_formula_total_of_events_uses_P_Q():
    # 0/1 values: S^2 = N P Q / (N - 1) (Cochran 1977, ch. 3), so --p P equals --sd S
    N, P, B = 2400, 0.02, 36.0
    S = math.sqrt(N * P * (1 - P) / (N - 1))
    assert total_sample_size(B, N, p=P).n == _smallest_n(N, S, B, 0.95)


def test_engine_z_total_half_width_is_the_closed_form_and_agrees_with_formula():
    # a 0/1 population of N with K events: S known exactly, the z half-width is fixed,
    # so the engine's assurance is 1 at the formula's n and 0 one below
    N, K, B = 2400, 48, 36.0
    S = math.sqrt(K * (N - K) / (N * (N - 1)))
    d = Design(model=make_model({"model": "bernoulli", "p": K / N}), estimand="total", method="z", margin=B,
               population=PopulationSpec(size=N, events=K))
    n = total_sample_size(B, N, sd=S).n
    rows = engine.curve(d, [n - 1, n], replicates=200, rng=4).rows
    z = stats.norm.isf(0.025)
    for r, k in zip(rows, (n - 1, n)):
        assert r.estimand == "total" and r.true_value == pytest.approx(K)
        assert r.margin_mean == pytest.approx(z * N * math.sqrt((1 - k / N) * S * S / k), rel=1e-9)
    assert rows[0].assurance == 0.0 and rows[1].assurance == 1.0


def test_engine_total_is_N_times_the_mean_row():
    m = make_model({"model": "gamma", "mean": 400.0, "cv": 0.9})
    pop = PopulationSpec(size=1200)
    mean = engine.check(Design(model=m, estimand="mean", method="t", margin=40.0, population=pop), 150, replicates=3000, rng=9)
    tot = engine.check(Design(model=m, estimand="total", method="t", margin=48_000.0, population=pop), 150,
                       replicates=3000, rng=9)
    assert tot.coverage == mean.coverage and tot.assurance == mean.assurance
    assert tot.true_value == pytest.approx(1200 * mean.true_value, rel=1e-12)
    assert tot.margin_mean == pytest.approx(1200 * mean.margin_mean, rel=1e-12)
    assert tot.margin_mean_mcse == pytest.approx(1200 * mean.margin_mean_mcse, rel=1e-12)


def test_total_coverage_of_events_matches_own_enumeration():
    # Wilson with the FPC, times N: coverage of K by N x interval, by our own enumeration
    N, K, n = 800, 30, 120
    d = Design(model=make_model({"model": "bernoulli", "p": K / N}), estimand="total", method="wilson", margin=15.0,
               population=PopulationSpec(size=N, events=K))
    r = engine.check(d, n, replicates=100, rng=1)
    x = np.arange(K + 1)
    z = stats.norm.isf(0.025)
    ph = x / n
    c = (ph + z * z / (2 * n)) / (1 + z * z / n)
    h = z / (1 + z * z / n) * np.sqrt(ph * (1 - ph) / n + z * z / (4 * n * n))  # Wilson (1927)
    f = math.sqrt(1 - n / N)  # the half-width about p-hat times sqrt(1 - n/N), clipped once
    lo = np.clip(ph - (ph - (c - h)) * f, 0, 1) * N
    hi = np.clip(ph + ((c + h) - ph) * f, 0, 1) * N
    w = stats.hypergeom.pmf(x, N, K, n)
    assert r.exact and r.true_value == K
    assert r.coverage == pytest.approx(w[(lo <= K) & (K <= hi)].sum(), abs=1e-12)
    assert r.margin_mean == pytest.approx(np.dot(w, (hi - lo) / 2), rel=1e-9)


def test_total_refusals():
    m = make_model({"model": "normal", "mean": 5, "sd": 1})
    with pytest.raises(InputError, match="population"):
        Design(model=m, estimand="total", method="t", margin=10.0)
    with pytest.raises(InputError, match="clusters"):
        Design(model=m, estimand="total", method="t", margin=10.0, population=PopulationSpec(size=100),
               clusters=ClusterSpec(icc=0.1, size=5))
    with pytest.raises(InputError, match="0/1"):
        Design(model=m, estimand="total", method="wilson", margin=10.0, population=PopulationSpec(size=100))


def test_scenario_total_with_population():
    s = scenario_from_dict({"target": {"estimand": "total", "margin": 30.0}, "method": {"interval": ["hypergeometric", "wilson"]},
                            "population": {"size": 2400, "events": 48}})
    assert s.design.true_value == pytest.approx(48)


def test_cli_formula_total(capsys):
    code = main(["formula", "--estimand", "total", "--population-size", "1200", "--sd", "360", "--margin", "48000", "--json"])
    out = capsys.readouterr().out
    assert code == 0 and '"estimand": "total"' in out and f'"n": {_smallest_n(1200, 360.0, 48000.0, 0.95)}' in out
    for bad, field in ((["--sd", "3", "--margin", "4"], "--population-size"),
                       (["--population-size", "100", "--margin", "4"], "--sd"),
                       (["--population-size", "100", "--sd", "3", "--margin", "4", "--icc", "0.1", "--cluster-size", "3"], "--icc"),
                       (["--population-size", "100", "--p", "0.1", "--margin", "100"], "--margin")):
        code = main(["formula", "--estimand", "total", *bad])
        err = capsys.readouterr().err.strip().splitlines()
        assert code == 2 and len(err) == 1 and field in err[0], err
