"""Dropout: ``target.dropout`` / ``--dropout`` and ``n_enrolled`` = ceil(n / (1 - dropout)).

Reference: exact rational arithmetic in the test (fractions), so that float
fuzz such as 80 / 0.8 = 100.00000000000001 cannot hide a wrong rounding.
Common practice: inflate the analysed n by 1 / (1 - dropout).
"""

from __future__ import annotations

import json
import math
from fractions import Fraction

import pytest

from simcheck.cli import main
from simcheck.formulas import enrolled_n, sample_size
from simcheck.scenario import scenario_from_dict
from simcheck.tasks import run_task


def _exact(n: int, d: str) -> int:
    return math.ceil(Fraction(n) / (1 - Fraction(d)))


@pytest.mark.parametrize("n, d", [(80, "0.2"), (139, "0.15"), (100, "0.1"), (7, "0.3"), (50, "0"), (1000, "0.99")])
def test_enrolled_n_exact(n, d):
    assert enrolled_n(n, float(d)) == _exact(n, d)


def test_formula_reports_n_enrolled(capsys):
    res = sample_size("mean", 2.0, sd=12.0, dropout=0.15)
    assert res.n == 139 and res.n_enrolled == _exact(139, "0.15")
    two = sample_size("mean-diff", 2.0, sd=12.0, ratio=2.0, dropout=0.2)
    d = two.to_dict()
    assert d["n_enrolled"] == _exact(two.n, "0.2") and d["n_b_enrolled"] == _exact(two.n_b, "0.2")
    assert d["n_total_enrolled"] == d["n_enrolled"] + d["n_b_enrolled"]
    assert sample_size("mean", 2.0, sd=12.0).to_dict()["n_enrolled"] == 139  # no dropout: n itself
    assert main(["formula", "--estimand", "mean", "--sd", "12", "--margin", "2", "--dropout", "0.15", "--json"]) == 0
    out = json.loads(capsys.readouterr().out)
    assert (out["n"], out["n_enrolled"], out["dropout"]) == (139, 164, 0.15)


@pytest.mark.parametrize("value", ["1", "-0.1", "1.5", "nan"])
def test_formula_bad_dropout_exit_2(capsys, value):
    assert main(["formula", "--estimand", "mean", "--sd", "12", "--margin", "2", f"--dropout={value}"]) == 2
    err = capsys.readouterr().err
    assert "--dropout" in err and err.count("\n") == 1


SCEN = {
    "title": "Dropout (invented example)",
    "target": {"estimand": "mean", "margin": 2.0},
    "data": {"model": "normal", "mean": 50.0, "sd": 12.0},
    "method": {"interval": "t"},
    "simulation": {"seed": 3},
}


def test_search_reports_n_enrolled_and_hash_is_unchanged_without_dropout():
    plain = scenario_from_dict(SCEN)
    assert "dropout" not in plain.to_dict()["target"]  # sweep stores of older scenarios keep their cell keys
    with_d = scenario_from_dict({**SCEN, "target": {**SCEN["target"], "dropout": 0.25}})
    assert with_d.to_dict()["target"]["dropout"] == 0.25
    res = run_task(with_d, "search")
    d = res.to_dict()
    assert d["n"] is not None and d["n_enrolled"] == _exact(d["n"], "0.25") and d["dropout"] == 0.25
    assert run_task(plain, "search").to_dict()["n_enrolled"] == d["n"]


@pytest.mark.parametrize("value", [1.0, -0.2, "a"])
def test_scenario_bad_dropout(tmp_path, capsys, value):
    f = tmp_path / "s.toml"
    v = f'"{value}"' if isinstance(value, str) else value
    f.write_text(f'[target]\nestimand = "mean"\nmargin = 2.0\ndropout = {v}\n[data]\nmodel = "normal"\nmean = 1\nsd = 1\n'
                 '[method]\ninterval = "t"\n')
    assert main(["search", str(f)]) == 2
    err = capsys.readouterr().err
    assert "target.dropout" in err and err.count("\n") == 1


# --- simulation.random_dropout: the analysed n is Binomial(n_enrolled, 1 - dropout) -------------------

import numpy as np
from scipy import stats


def _rd_scenario(model, dropout=0.2, **sim):
    return scenario_from_dict({
        "title": "Random dropout (invented example)",
        "target": {"estimand": "mean", "margin": 3.0, "dropout": dropout},
        "data": model,
        "method": {"interval": "t"},
        "simulation": {"seed": 4, "random_dropout": True, **sim},
    })


def test_random_dropout_exact_normal_against_the_binomial_mixture():
    scen = _rd_scenario({"model": "normal", "mean": 0.0, "sd": 12.0})
    res = run_task(scen, "check", n=70)
    big_n = _exact(70, "0.2")
    # reference: sum over k of Binomial(N, 0.8) pmf times the exact t-interval assurance at k
    # (chi-square law of the sample variance; k < 2 gives no interval and counts as failing)
    k = np.arange(2, big_n + 1)
    t = stats.t.ppf(0.975, k - 1)
    a_k = stats.chi2.cdf((k - 1) * k * 9.0 / (t * t * 144.0), k - 1)
    ref = float(np.sum(stats.binom.pmf(k, big_n, 0.8) * a_k))
    assert res.exact and res.assurance == pytest.approx(ref, abs=1e-6)
    assert res.coverage == pytest.approx(0.95 * stats.binom.sf(1, big_n, 0.8), abs=1e-6)
    assert any("Binomial(88, 0.8)" in x for x in res.notes)


def test_random_dropout_simulated_against_direct_simulation():
    model = {"model": "lognormal", "mean": 10.0, "cv": 1.0}
    scen = _rd_scenario(model, replicates=20000)
    res = run_task(scen, "check", n=30)
    # reference: simulated here directly, each study with its own binomial n
    rng = np.random.default_rng(99)
    big_n, reps = _exact(30, "0.2"), 20000
    ks = rng.binomial(big_n, 0.8, size=reps)
    s2 = np.log(2.0)
    covered = 0
    for k in np.unique(ks):
        m = int(np.sum(ks == k))
        x = rng.lognormal(np.log(10.0) - s2 / 2, np.sqrt(s2), size=(m, k))
        half = stats.t.ppf(0.975, k - 1) * x.std(axis=1, ddof=1) / np.sqrt(k)
        covered += int(np.sum(np.abs(x.mean(axis=1) - 10.0) <= half))
    p = covered / reps
    se = np.sqrt(p * (1 - p) / reps)
    assert abs(res.coverage - p) <= 4 * np.hypot(se, res.coverage_mcse)


def test_random_dropout_needs_a_dropout():
    with pytest.raises(Exception, match="target.dropout"):
        _rd_scenario({"model": "normal", "mean": 0.0, "sd": 1.0}, dropout=0.0)


def test_random_dropout_search_says_it_uses_a_fixed_n():
    scen = _rd_scenario({"model": "normal", "mean": 0.0, "sd": 12.0})
    res = run_task(scen, "search")
    assert res.n_enrolled == _exact(res.n, "0.2")
    assert any("applies to check only" in x for x in res.notes)
