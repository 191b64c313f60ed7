"""Stratified designs: allocation, the closed-form total n, the estimator and its intervals.

References computed inside the tests: Cochran, W. G. (1977). Sampling Techniques,
3rd ed., Wiley -- eq. 5.25 (n for a specified variance, any allocation), its
Neyman form (eq. 5.26) and proportional form (eq. 5.27), Theorem 5.3 (variance of
the stratified mean under sampling without replacement) and Theorem 5.4 (its
unbiased estimator); Satterthwaite, F. E. (1946), Biometrics Bulletin 2:110-114.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
from scipy import stats

from simcheck import engine
from simcheck.cli import main
from simcheck.engine.stratified import allocation_for, stratum_populations
from simcheck.errors import InputError
from simcheck.scenario import scenario_from_dict
from simcheck.strata import allocate, shares, stratified_sample_size


def _table(rule="neyman", estimand="mean", method="t", margin=8.0, extra=None, strata=None):
    strata = strata or [
        {"name": "harbour", "size": 4200, "data": {"model": "lognormal", "mean": 120.0, "cv": 0.9}},
        {"name": "hills", "size": 2500, "data": {"model": "lognormal", "mean": 95.0, "cv": 0.6}},
        {"name": "old town", "size": 3100, "data": {"model": "gamma", "mean": 140.0, "cv": 1.4}},
        {"name": "farms", "size": 2200, "data": {"model": "normal", "mean": 80.0, "sd": 20.0}},
    ]
    t = {"title": "invented strata", "target": {"estimand": estimand, "margin": margin},
         "method": {"interval": method}, "simulation": {"replicates": 2000, "seed": 5, "n_max": 3000},
         "strata": strata, "allocation": {"rule": rule}}
    if extra:
        for k, v in extra.items():
            t[k].update(v) if isinstance(v, dict) and k in t and isinstance(t[k], dict) else t.__setitem__(k, v)
    return t


# --- closed form and allocation against Cochran's formulas written here ------------------------
N_H = [4200, 2500, 3100, 2200]
S_H = [108.0, 57.0, 196.0, 20.0]


def _cochran_neyman_n(B, z, N, S):
    # Cochran (1977) eq. 5.26: n = (sum W_h S_h)^2 / (V + sum W_h S_h^2 / N), V = (B/z)^2
    Nt = sum(N)
    W = [x / Nt for x in N]
    V = (B / z) ** 2
    return sum(w * s for w, s in zip(W, S)) ** 2 / (V + sum(w * s * s for w, s in zip(W, S)) / Nt)


def _cochran_proportional_n(B, z, N, S):
    # Cochran (1977) eq. 5.27: n0 = sum W_h S_h^2 / V, n = n0 / (1 + n0 / N)
    Nt = sum(N)
    W = [x / Nt for x in N]
    n0 = sum(w * s * s for w, s in zip(W, S)) / (B / z) ** 2
    return n0 / (1 + n0 / Nt)


@pytest.mark.parametrize("B", [4.0, 8.0, 15.0])
def test_neyman_and_proportional_total_n_match_cochran(B):
    z = stats.norm.ppf(0.975)
    for rule, ref in (("neyman", _cochran_neyman_n), ("proportional", _cochran_proportional_n)):
        res = stratified_sample_size("mean", B, names=list("abcd"), sizes=N_H, sds=S_H, rule=rule)
        n_ref = ref(B, z, N_H, S_H)
        assert res.n_unrounded == pytest.approx(n_ref, rel=1e-12)
        # each n_h rounded up (common practice), so the total is at least the unrounded n
        w = np.array(N_H) * (np.array(S_H) if rule == "neyman" else 1.0)
        w = w / w.sum()
        n_h = [max(2, math.ceil(n_ref * x - 1e-9)) for x in w]
        assert list(res.allocation.values()) == n_h
        assert res.n == sum(n_h) >= n_ref


def test_optimum_allocation_with_costs_matches_cochran():
    # Cochran (1977) eq. 5.24: n_h proportional to N_h S_h / sqrt(c_h); eq. 5.25 for the total
    c = [1.0, 4.0, 2.5, 9.0]
    z, B = stats.norm.ppf(0.975), 6.0
    res = stratified_sample_size("mean", B, names=list("abcd"), sizes=N_H, sds=S_H, rule="optimum", costs=c)
    Nt = sum(N_H)
    W = [x / Nt for x in N_H]
    num = sum(w * s * math.sqrt(ci) for w, s, ci in zip(W, S_H, c)) * sum(w * s / math.sqrt(ci) for w, s, ci in zip(W, S_H, c))
    n_ref = num / ((B / z) ** 2 + sum(w * s * s for w, s in zip(W, S_H)) / Nt)
    assert res.n_unrounded == pytest.approx(n_ref, rel=1e-12)


def test_proportion_and_total_forms():
    # a proportion plans with S_h^2 = p_h (1 - p_h); a total's margin is N times the mean's
    ps = [0.1, 0.3, 0.5]
    N = [1000, 2000, 3000]
    res = stratified_sample_size("proportion", 0.04, names=list("abc"), sizes=N, ps=ps, rule="proportional")
    assert res.n_unrounded == pytest.approx(_cochran_proportional_n(0.04, stats.norm.ppf(0.975), N, [math.sqrt(p * (1 - p)) for p in ps]))
    mean = stratified_sample_size("mean", 2.0, names=list("abc"), sizes=N, sds=[5, 6, 7], rule="neyman")
    total = stratified_sample_size("total", 2.0 * sum(N), names=list("abc"), sizes=N, sds=[5, 6, 7], rule="neyman")
    assert total.n_unrounded == pytest.approx(mean.n_unrounded)


def test_allocate_sums_and_bounds():
    w = shares("neyman", [50, 5000, 300], [10.0, 1.0, 30.0])
    for n in (6, 40, 500, 2000, 5350):
        n_h = allocate(n, [50, 5000, 300], w, minimum=2)
        assert n_h.sum() == n
        assert np.all(n_h >= 2) and np.all(n_h <= [50, 5000, 300])
    # largest remainders: 10 units at shares 0.55/0.25/0.2 -> 5.5/2.5/2 -> 6, 2, 2 (ties to the first)
    assert list(allocate(10, [100, 100, 100], np.array([0.55, 0.25, 0.2]), minimum=1)) == [6, 2, 2]
    with pytest.raises(InputError, match="at least 6"):
        allocate(5, [50, 50, 50], np.ones(3) / 3)


# --- the estimator: exact variance, and an independent simulation --------------------------------
def test_mean_variance_estimate_is_unbiased_for_cochrans_exact_variance():
    # Normal strata, z interval: half^2 / z^2 is the variance estimate v, whose
    # expectation is exactly V(ybar_st) (Cochran 1977, Theorems 5.3 and 5.4),
    # computed here from the very populations the engine samples.
    sc = scenario_from_dict(_table(rule="proportional", method="z", strata=[
        {"name": "a", "size": 300, "data": {"model": "normal", "mean": 50.0, "sd": 10.0}},
        {"name": "b", "size": 700, "data": {"model": "normal", "mean": 20.0, "sd": 4.0}},
    ]))
    d, n, R = sc.design, 60, 10_000
    r = engine.check(d, n, replicates=R, rng=31)
    pops = stratum_populations(d, 31)
    n_h = np.array(list(allocation_for(d, n).values()), float)
    N = np.array([p.size for p in pops], float)
    W = N / N.sum()
    V = float(np.sum(W**2 * np.array([p.S**2 for p in pops]) / n_h * (1 - n_h / N)))
    v = (r.margin_values / stats.norm.ppf(0.975)) ** 2
    assert len(v) == R
    assert abs(v.mean() - V) <= 4 * v.std(ddof=1) / math.sqrt(R)
    assert r.true_value == pytest.approx(float(np.dot(W, [p.mean for p in pops])), rel=1e-14)


def test_satterthwaite_coverage_on_skewed_strata_matches_an_independent_simulation():
    sc = scenario_from_dict(_table(rule="neyman", method="t"))
    d, n, R = sc.design, 120, 4000
    r = engine.check(d, n, replicates=R, rng=32)
    pops = stratum_populations(d, 32)
    n_h = np.array(list(allocation_for(d, n).values()))
    N = np.array([p.size for p in pops], float)
    W = N / N.sum()
    truth = float(np.dot(W, [p.mean for p in pops]))
    g = np.random.default_rng(2024)
    covered = 0
    for _ in range(R):
        means, var = [], []
        for p, k in zip(pops, n_h):
            x = g.choice(p.values, size=int(k), replace=False)
            means.append(x.mean())
            var.append(x.var(ddof=1))
        a = W**2 * (1 - n_h / N) / n_h
        t = a * np.array(var)
        df = t.sum() ** 2 / np.sum(t * t / (n_h - 1))
        half = stats.t.ppf(0.975, df) * math.sqrt(t.sum())
        covered += abs(float(np.dot(W, means)) - truth) <= half
    cov_ref = covered / R
    se = math.sqrt(cov_ref * (1 - cov_ref) / R + r.coverage_mcse**2)
    assert abs(r.coverage - cov_ref) <= 4 * se


def test_total_is_population_size_times_the_mean():
    m = engine.check(scenario_from_dict(_table(estimand="mean")).design, 200, replicates=500, rng=3)
    t = engine.check(scenario_from_dict(_table(estimand="total", margin=8.0 * 12000)).design, 200, replicates=500, rng=3)
    assert t.true_value == pytest.approx(12000 * m.true_value, rel=1e-12)
    assert t.coverage == m.coverage
    assert t.margin_mean == pytest.approx(12000 * m.margin_mean, rel=1e-12)
    assert t.assurance == m.assurance


def test_scenario_round_trip_and_search_answers_with_the_stratified_formula():
    sc = scenario_from_dict(_table())
    again = scenario_from_dict(sc.to_dict())
    assert again.to_dict() == sc.to_dict()
    assert again.design.strata.to_dict() == sc.design.strata.to_dict()
    from simcheck.search import formula_n

    assert formula_n(sc.design) == stratified_sample_size(
        "mean", 8.0, names=sc.design.strata.names, sizes=sc.design.strata.sizes,
        sds=[m.sd for m in sc.design.strata.models], rule="neyman").n


# --- bad input: one line, exit 2 ---------------------------------------------------------------
@pytest.mark.parametrize("change,field", [
    ({"allocation": {"rule": "neymann"}}, "allocation.rule"),
    ({"allocation": {"rule": "neyman", "minimum": 1}}, "allocation.minimum"),
    ({"allocation": {"rule": "optimum"}}, "strata.cost"),
    ({"allocation": {"rule": "given"}}, "strata.n"),
])
def test_bad_strata_exit_2_one_line(tmp_path, capsys, change, field):
    import tomllib  # noqa: F401  (the file is written as TOML by hand below)

    t = _table()
    t.update(change)
    path = tmp_path / "s.json"
    path.write_text(json.dumps(t))
    with pytest.raises(InputError, match=field.replace(".", r"\.")):
        scenario_from_dict(t)


def _write_toml(path, text):
    path.write_text(text)
    return str(path)


def test_cli_bad_costs_and_given_counts(tmp_path, capsys):
    base = """title = "t (invented)"
[target]
estimand = "mean"
margin = 5.0
[method]
interval = "t"
[[strata]]
name = "a"
size = 100
{a}
[strata.data]
model = "normal"
mean = 1.0
sd = 2.0
[[strata]]
name = "b"
size = 50
{b}
[strata.data]
model = "normal"
mean = 1.0
sd = 2.0
[allocation]
rule = "{rule}"
"""
    cases = [("optimum", "cost = 0", "cost = 1", "strata[0].cost"),
             ("given", "n = 1", "n = 10", "strata[0].n"),
             ("given", "n = 120", "n = 10", "strata[0].n")]
    for rule, a, b, field in cases:
        f = _write_toml(tmp_path / f"{rule}.toml", base.format(a=a, b=b, rule=rule))
        code = main(["check", f, "--n", "20"])
        err = capsys.readouterr().err.strip().splitlines()
        assert code == 2 and len(err) == 1 and field in err[0], (rule, a, err)


def test_formula_cli_strata(capsys):
    code = main(["formula", "--estimand", "mean", "--margin", "8", "--stratum", "a:4200:108",
                 "--stratum", "b:2500:57", "--allocation", "neyman", "--json"])
    out = json.loads(capsys.readouterr().out)
    assert code == 0
    z = stats.norm.ppf(0.975)
    assert out["n_unrounded"] == pytest.approx(_cochran_neyman_n(8.0, z, [4200, 2500], [108.0, 57.0]))
    assert sum(out["allocation"].values()) == out["n"]
    code = main(["formula", "--estimand", "mean", "--margin", "8", "--stratum", "a:4200", "--json"])
    err = capsys.readouterr().err.strip().splitlines()
    assert code == 2 and len(err) == 1 and "--stratum 1" in err[0]


def test_search_json_gives_the_allocation_at_the_n_found():
    # INTERFACE.md (second round): a stratified search's JSON adds `allocation`, the n per stratum
    from simcheck.tasks import run_task

    t = _table(rule="proportional", margin=15.0)
    t["target"]["coverage_tolerance"] = 0.03
    t["simulation"].update({"replicates": 1000, "n_max": 1500})
    row = run_task(scenario_from_dict(t), "search").to_dict()
    assert row["n"] is not None, row["notes"]
    assert list(row["allocation"]) == ["harbour", "hills", "old town", "farms"]
    assert sum(row["allocation"].values()) == row["n"]
    # proportional shares, by largest remainders (Cochran 1977, section 5.3): within one unit of n N_h / N
    for k, N_h in zip(row["allocation"].values(), N_H):
        assert abs(k - row["n"] * N_h / sum(N_H)) < 1
