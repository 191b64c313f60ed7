"""Uncertain planning values: the unconditional (predictive) assurance against its closed form,
Browne's (1995) inflated-SD n against the formula computed here, parsing and one-line errors.

References used by the checks:
- the sampling law of the sample variance under normality, (n - 1) S^2 / sigma^2 ~ chi2(n - 1)
  (common practice; e.g. any mathematical statistics text), for the half-width of the t interval;
- the pilot law sigma^2 = s^2 (m - 1) / X, X ~ chi2(m - 1) (the scaled chi-square law of the pilot s^2
  turned round), integrated numerically here with scipy.integrate.quad;
- Browne, R. H. (1995). On the use of a pilot sample for sample size determination. Statistics in
  Medicine 14, 1933-1940: the SD raised to its upper one-sided confidence limit
  s sqrt((m - 1) / chi2_{1 - level}(m - 1)).
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
from scipy import integrate, stats

from simcheck import rng as rngmod
from simcheck.cli import main
from simcheck.errors import InputError
from simcheck.predictive import find_predictive_n, run_predictive
from simcheck.uncertain import draw_values, point_designs, predictive_check, split

B, S_PILOT, M = 2.0, 12.0, 20


def _table(sd, assurance=0.8, seed=11):
    return {
        "title": "Blood pressure change (invented example)",
        "target": {"estimand": "mean", "margin": B, "assurance": assurance},
        "data": {"model": "normal", "mean": 5.0, "sd": sd},
        "method": {"interval": "t"},
        "simulation": {"seed": seed},
    }


def _assurance_given_sigma(n: int, sigma: float) -> float:
    # half-width t S / sqrt(n) <= B  <=>  chi2(n - 1) <= (n - 1) n B^2 / (t^2 sigma^2)
    t = stats.t.ppf(0.975, n - 1)
    return stats.chi2.cdf((n - 1) * n * B * B / (t * t * sigma * sigma), n - 1)


def _unconditional_pilot(n: int) -> float:
    df = M - 1

    def f(x):
        return _assurance_given_sigma(n, S_PILOT * math.sqrt(df / x)) * stats.chi2.pdf(x, df)

    return integrate.quad(f, 0, np.inf, limit=200)[0]


def _setup(table, draws=400):
    point, specs = split(table)
    root, _ = rngmod.root_sequence(5)
    values = draw_values(specs, draws, root)
    return point, specs, root, point_designs(point, specs, values)


@pytest.mark.parametrize("n", [150, 196, 240])
def test_unconditional_assurance_matches_the_chi_square_integral(n):
    _, _, root, designs = _setup(_table({"pilot_n": M, "pilot_sd": S_PILOT}))
    r = predictive_check(designs, n, replicates_per_draw=1, root=root)
    ref = _unconditional_pilot(n)
    assert r.exact_given_parameters
    assert 0 < r.assurance_mcse < 0.005
    assert abs(r.assurance - ref) <= 4 * r.assurance_mcse, (r.assurance, ref, r.assurance_mcse)
    assert r.coverage == pytest.approx(0.95, abs=1e-12)  # the t interval is exact for every sigma


def test_stated_range_matches_its_integral():
    _, _, root, designs = _setup(_table({"lower": 8.0, "upper": 16.0}))
    n = 150
    r = predictive_check(designs, n, replicates_per_draw=1, root=root)
    ref = integrate.quad(lambda s: _assurance_given_sigma(n, s) / 8.0, 8.0, 16.0)[0]
    assert abs(r.assurance - ref) <= 4 * r.assurance_mcse


@pytest.mark.slow
def test_run_predictive_side_by_side_and_browne():
    res = run_predictive(_table({"pilot_n": M, "pilot_sd": S_PILOT}))
    # conditional: the exact search at sd = 12 (assurance 0.8 at the point value)
    assert res.conditional.assurance >= 0.8 and _assurance_given_sigma(res.n_conditional, S_PILOT) >= 0.8
    assert _assurance_given_sigma(res.n_conditional - 1, S_PILOT) < 0.8
    # its unconditional assurance is much lower, against the integral
    cu = res.unconditional_at_conditional_n
    assert abs(cu.assurance - _unconditional_pilot(res.n_conditional)) <= 4 * cu.assurance_mcse
    assert cu.assurance < 0.7
    # the unconditional n: the crossing of the integral's curve, within the Monte Carlo error
    lo, hi = res.n_conditional, 400  # the integral is increasing in n: bisect for its crossing
    while hi - lo > 1:
        mid = (lo + hi) // 2
        lo, hi = (lo, mid) if _unconditional_pilot(mid) >= 0.8 else (mid, hi)
    n_ref = hi
    assert abs(res.n_unconditional - n_ref) <= 2
    # Browne (1995): formula n (t iteration) with the 80% upper confidence limit of sigma, computed here
    s_up = S_PILOT * math.sqrt((M - 1) / stats.chi2.ppf(0.2, M - 1))
    n_browne = next(n for n in range(2, 2000) if stats.t.ppf(0.975, n - 1) * s_up / math.sqrt(n) <= B)
    assert res.browne["n"] == n_browne
    assert res.browne["sd_upper"]["data.sd"] == pytest.approx(s_up, rel=1e-12)
    d = res.to_dict()
    assert {"n_conditional", "n_unconditional", "browne", "unconditional", "conditional"} <= set(d)


def test_same_seed_same_answer_and_frame():
    a = run_predictive(_table({"pilot_n": M, "pilot_sd": S_PILOT}), draws=100)
    b = run_predictive(_table({"pilot_n": M, "pilot_sd": S_PILOT}), draws=100)
    assert a.to_dict() == b.to_dict()
    assert list(a.to_frame()["n"]) == sorted(a.checked)


@pytest.mark.parametrize("target", [2, 3, 50, 137, 999, 1000])
@pytest.mark.parametrize("start", [2, 10, 137, 600, 1000])
def test_find_predictive_n_on_a_step(target, start):
    class R:
        def __init__(self, n):
            self.n = n

    assert find_predictive_n(R, lambda r: r.n >= target, start, 2, 1000) == target
    assert find_predictive_n(R, lambda r: False, start, 2, 1000) is None


@pytest.mark.parametrize("sd, message", [
    ({"pilot_n": 2, "pilot_sd": 12}, "pilot_n"),
    ({"pilot_n": 20}, "pilot_sd"),
    ({"lower": 5.0, "upper": 4.0}, "upper"),
    ({"lower": 5.0, "upper": 9.0, "point": 10.0}, "point"),
    ({"pilot_n": 20, "pilot_sd": 12, "lower": 1.0}, "not both"),
])
def test_bad_distribution_tables(sd, message):
    with pytest.raises(InputError, match=message):
        split(_table(sd))


def test_pilot_only_for_an_sd():
    t = _table(12.0)
    t["data"] = {"model": "lognormal", "mean": 5.0, "cv": {"pilot_n": 20, "pilot_sd": 0.5}}
    with pytest.raises(InputError, match="standard deviation"):
        split(t)


def _write(tmp_path, sd_text):
    f = tmp_path / "s.toml"
    f.write_text('title = "t (invented)"\n[target]\nestimand = "mean"\nmargin = 2.0\nassurance = 0.8\n'
                 f'[data]\nmodel = "normal"\nmean = 5.0\nsd = {sd_text}\n[method]\ninterval = "t"\n'
                 "[simulation]\nseed = 3\n")
    return str(f)


def test_cli_json_and_errors(tmp_path, capsys):
    f = _write(tmp_path, "{ pilot_n = 20, pilot_sd = 12 }")
    assert main(["predictive", f, "--json", "--draws", "100", "--out", str(tmp_path / "rep")]) == 0
    out = json.loads(capsys.readouterr().out)
    assert out["n_unconditional"] > out["n_conditional"]
    text = (tmp_path / "rep" / "predictive.md").read_text()
    assert "unconditional" in text and "Caution" in text
    assert (tmp_path / "rep" / "predictive_assurance.png").stat().st_size > 1000
    plain = _write(tmp_path, "12.0")
    assert main(["predictive", plain]) == 2
    err = capsys.readouterr().err
    assert "no planning value" in err and err.count("\n") == 1
    bad = _write(tmp_path, "{ pilot_n = 1.5, pilot_sd = 12 }")
    assert main(["predictive", bad]) == 2
    err = capsys.readouterr().err
    assert "data.sd.pilot_n" in err and err.count("\n") == 1


def test_formula_pilot_n_browne_side_by_side(capsys):
    assert main(["formula", "--estimand", "mean", "--sd", "12", "--margin", "2", "--multiplier", "t",
                 "--pilot-n", "20", "--json"]) == 0
    out = json.loads(capsys.readouterr().out)
    s_up = S_PILOT * math.sqrt((M - 1) / stats.chi2.ppf(0.2, M - 1))  # Browne (1995), 80% upper limit
    n_browne = next(n for n in range(2, 2000) if stats.t.ppf(0.975, n - 1) * s_up / math.sqrt(n) <= B)
    assert out["browne"]["n"] == n_browne and out["browne"]["sd_upper"] == pytest.approx(s_up, rel=1e-12)
    # z multiple, 90% limit, computed here: n = ceil((z s_up / B)^2)
    assert main(["formula", "--estimand", "mean", "--sd", "12", "--margin", "2", "--pilot-n", "20",
                 "--pilot-confidence", "0.9", "--json"]) == 0
    out = json.loads(capsys.readouterr().out)
    s90 = S_PILOT * math.sqrt((M - 1) / stats.chi2.ppf(0.1, M - 1))
    assert out["browne"]["n"] == math.ceil((stats.norm.ppf(0.975) * s90 / B) ** 2)
    assert main(["formula", "--estimand", "proportion", "--margin", "0.1", "--pilot-n", "20"]) == 2
    err = capsys.readouterr().err
    assert "--pilot-n" in err and err.count("\n") == 1
    assert main(["formula", "--estimand", "mean", "--sd", "12", "--margin", "2", "--pilot-n", "2"]) == 2
    assert "--pilot-n" in capsys.readouterr().err


def test_shipped_pilot_example_fit_to_report(tmp_path, capsys):
    # the invented 20-patient pilot shipped in scenarios/, from fit to the predictive report
    from pathlib import Path

    from simcheck.fit import fit_file

    root = Path(__file__).resolve().parents[1] / "scenarios"
    res = fit_file(str(root / "pilot_sbp_invented.csv"), "sbp_change")
    assert res.n == 20 and res.best == "normal"
    # the scenario's pilot SD is the sample SD of the pilot (divisor n - 1), to the 6 digits printed
    import tomllib

    scen = tomllib.loads((root / "pilot_sbp.toml").read_text())
    assert scen["data"]["sd"] == {"pilot_n": 20, "pilot_sd": float(f"{res.sd:.6g}")}
    assert scen["data"]["mean"] == pytest.approx(res.mean, abs=1e-9)
    out = tmp_path / "rep"
    assert main(["predictive", str(root / "pilot_sbp.toml"), "--draws", "100", "--json", "--out", str(out)]) == 0
    d = json.loads(capsys.readouterr().out)
    assert d["n_unconditional"] > d["n_conditional"] and d["assurance_conditional_n"] < 0.8
    assert d["n_enrolled_unconditional"] == math.ceil(d["n_unconditional"] / 0.9 - 1e-9)
    md = (out / "predictive.md").read_text()
    assert "conditional" in md and "unconditional" in md and "Browne" in md and "invented" in md


def test_other_commands_run_at_the_point_values_and_say_so(tmp_path):
    from simcheck.scenario import scenario_from_dict
    from simcheck.tasks import run_task

    unc = scenario_from_dict(_table({"pilot_n": M, "pilot_sd": S_PILOT}))
    plain = scenario_from_dict(_table(S_PILOT))
    assert [u.key for u in unc.uncertain] == ["data.sd"] and unc.design.model.sd == S_PILOT
    # the distribution stays in the resolved scenario, so a sweep cell with it differs from the plain one
    assert unc.to_dict()["data"]["sd"] == {"pilot_n": M, "pilot_sd": S_PILOT}
    assert scenario_from_dict(unc.to_dict()).uncertain == unc.uncertain
    a = run_task(unc, "check", n=150)
    b = run_task(plain, "check", n=150)
    assert a.assurance == b.assurance == pytest.approx(_assurance_given_sigma(150, S_PILOT), abs=1e-9)
    assert any("conditional on the point values of data.sd" in x for x in a.notes)
    s = run_task(unc, "search")
    assert s.n == run_task(plain, "search").n and any("simcheck predictive" in x for x in s.notes)


# --- a whole model from a pilot: parametric bootstrap (pilot_n in the model table) ----------------------


def test_bootstrap_normal_draws_follow_the_law_of_the_refit():
    t = _table(S_PILOT)
    t["data"]["pilot_n"] = M
    point, specs = split(t)
    assert point["data"] == {"model": "normal", "mean": 5.0, "sd": S_PILOT} and specs[0].kind == "bootstrap"
    root, _ = rngmod.root_sequence(8)
    rows = draw_values(specs, 2000, root)
    sd = np.array([r["data"]["sd"] for r in rows])
    mean = np.array([r["data"]["mean"] for r in rows])
    # the ML SD of M normal values: sd_hat^2 = sigma^2 X / M, X ~ chi2(M - 1) (common practice)
    ref = S_PILOT**2 * (M - 1) / M
    assert abs(np.mean(sd**2) - ref) <= 4 * np.std(sd**2) / math.sqrt(sd.size)
    assert abs(np.mean(mean) - 5.0) <= 4 * S_PILOT / math.sqrt(M * mean.size)
    assert np.var(mean) == pytest.approx(S_PILOT**2 / M, rel=0.1)


def test_bootstrap_unconditional_assurance_matches_its_integral():
    t = _table(S_PILOT)
    t["data"]["pilot_n"] = M
    _, _, root, designs = _setup(t, draws=1000)
    n = 170
    r = predictive_check(designs, n, replicates_per_draw=1, root=root)

    def f(x):  # sigma_hat^2 = S^2 x / M with x ~ chi2(M - 1)
        return _assurance_given_sigma(n, S_PILOT * math.sqrt(x / M)) * stats.chi2.pdf(x, M - 1)

    ref = integrate.quad(f, 0, np.inf, limit=200)[0]
    assert 0 < r.assurance_mcse < 0.03
    assert abs(r.assurance - ref) <= 4 * r.assurance_mcse, (r.assurance, ref, r.assurance_mcse)


@pytest.mark.parametrize("data, message", [
    ({"model": "exponential", "mean": 3.0, "pilot_n": 20}, "refits"),
    ({"model": "normal", "mean": 3.0, "sd": {"lower": 1.0, "upper": 2.0}, "pilot_n": 20}, "not both"),
    ({"model": "normal", "mean": 3.0, "sd": 1.0, "pilot_n": 2}, "pilot_n"),
])
def test_bootstrap_errors(data, message):
    t = _table(1.0)
    t["data"] = data
    with pytest.raises(InputError, match=message):
        split(t)


def test_bootstrap_refits_every_supported_model():
    from simcheck.fit.candidates import REFIT
    from simcheck.models import make_model

    tables = {
        "normal": {"mean": 5.0, "sd": 2.0}, "lognormal": {"mean": 5.0, "cv": 0.5}, "gamma": {"mean": 5.0, "cv": 0.5},
        "weibull": {"shape": 1.5, "scale": 4.0}, "beta": {"mean": 0.3, "sd": 0.1},
        "poisson": {"mean": 0.2}, "negative-binomial": {"mean": 3.0, "dispersion": 2.0},
    }
    assert set(tables) == set(REFIT)
    root, _ = rngmod.root_sequence(2)
    for name, params in tables.items():
        t = _table(1.0)
        t["data"] = {"model": name, **params, "pilot_n": 5}
        point, specs = split(t)
        for row in draw_values(specs, 50, root):
            make_model(row["data"])  # every refitted table is a valid model
