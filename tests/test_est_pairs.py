"""Paired estimands: the mean paired difference and the Pearson correlation (issue 16).

Every check compares simcheck with a reference written here: scipy endpoints
(scipy.stats.pearsonr's Fisher-z interval, the t and chi-square laws), the
exact null law of r (a beta law), Fisher's (1915) integral form of the law of
r evaluated with scipy.integrate.quad (simcheck uses Hotelling's
hypergeometric form), the closed-form correlation of two lognormal margins,
and simulations written with plain numpy. Scenarios are invented examples.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import integrate, stats

from fixtures import run_cli, write_toml
from simcheck import engine
from simcheck.design import Design
from simcheck.estimands import formula_for
from simcheck.intervals.base import Sample, get_method
from simcheck.models import make_model


def _normal(mean=0.0, sd=1.0):
    return make_model({"model": "normal", "mean": mean, "sd": sd})


def _lognormal(sdlog, meanlog=0.0):
    return make_model({"model": "lognormal", "meanlog": meanlog, "sdlog": sdlog})


def _design(estimand, method, a, b, rho, margin=0.2, **kw):
    return Design(model=a, model_b=b, estimand=estimand, method=method, confidence=kw.pop("confidence", 0.95),
                  margin=margin, correlation=rho, **kw)


def _pairs_numpy(rng, n, rho, size):
    """Bivariate standard normal pairs drawn here (not by simcheck)."""
    z1 = rng.standard_normal((size, n))
    z2 = rho * z1 + math.sqrt(1 - rho * rho) * rng.standard_normal((size, n))
    return z1, z2


def _scenario(tmp_path, estimand="correlation", interval="fisher-z", correlation=0.5, a=None, b=None, margin=0.1,
              **extra):
    data = {"a": a or {"model": "normal", "mean": 10.0, "sd": 2.0}, "b": b or {"model": "normal", "mean": 9.0, "sd": 2.0}}
    if correlation is not None:
        data["correlation"] = correlation
    table = {"title": "Paired readings (invented example)",
             "target": {"estimand": estimand, "margin": margin, "confidence": 0.95},
             "data": data, "method": {"interval": interval},
             "simulation": {"replicates": 400, "seed": 7, "n_max": 300}}
    for k, v in extra.items():
        table.setdefault(k.split("__")[0], {})[k.split("__")[1]] = v
    return write_toml(tmp_path / "pairs.toml", table)


# --------------------------------------------------------------------------- the Fisher-z interval


def test_fisher_z_limits_match_formula_and_scipy():
    rng = np.random.default_rng(11)
    x, y = _pairs_numpy(rng, 25, 0.4, 3)
    lo, hi, _ = get_method("correlation", "fisher-z").func(Sample(x=x, n=25, y=y), 0.9)
    for i in range(3):
        r = np.corrcoef(x[i], y[i])[0, 1]
        c = stats.norm.ppf(0.95) / math.sqrt(25 - 3)
        # the formula written out (Fisher 1921, Metron 1:3-32)
        assert lo[i] == pytest.approx(math.tanh(math.atanh(r) - c), rel=1e-12)
        assert hi[i] == pytest.approx(math.tanh(math.atanh(r) + c), rel=1e-12)
        # scipy's own Fisher-z interval (scipy.stats.pearsonr(...).confidence_interval, method=None)
        ci = stats.pearsonr(x[i], y[i]).confidence_interval(confidence_level=0.9)
        assert (lo[i], hi[i]) == pytest.approx((ci.low, ci.high), rel=1e-10)


def _coverage_fisher_1915(n, rho, confidence):
    """Coverage of the Fisher-z interval from Fisher's (1915, Biometrika 10:507-521) integral form of the
    density of r: f(r) = (n-2)/pi (1-rho^2)^((n-1)/2) (1-r^2)^((n-4)/2) int_0^inf dw / (cosh w - rho r)^(n-1)."""
    def dens(r):
        inner = integrate.quad(lambda w: (math.cosh(w) - rho * r) ** (1 - n), 0, 40.0, epsabs=0, epsrel=1e-12)[0]
        return (n - 2) / math.pi * (1 - rho * rho) ** ((n - 1) / 2) * (1 - r * r) ** ((n - 4) / 2) * inner

    c = stats.norm.ppf(0.5 + confidence / 2) / math.sqrt(n - 3)
    z = math.atanh(rho)
    return integrate.quad(dens, math.tanh(z - c), math.tanh(z + c), epsabs=0, epsrel=1e-11)[0]


@pytest.mark.parametrize("n,rho", [(8, 0.6), (15, -0.3), (30, 0.85)])
def test_fisher_z_exact_coverage_against_fisher_1915_density(n, rho):
    d = _design("correlation", "fisher-z", _normal(), _normal(5, 3), rho)
    row = engine.check(d, n, replicates=100, rng=1)
    assert row.path == "exact"
    assert row.coverage == pytest.approx(_coverage_fisher_1915(n, rho, 0.95), abs=1e-8)


@pytest.mark.parametrize("n", [4, 6, 20, 120])
def test_fisher_z_exact_coverage_null_against_beta_law(n):
    # under rho = 0, (r + 1) / 2 ~ Beta((n-2)/2, (n-2)/2): the exact null law scipy.stats.pearsonr uses
    d = _design("correlation", "fisher-z", _normal(), _normal(), 0.0)
    row = engine.check(d, n, replicates=100, rng=1)
    c = math.tanh(stats.norm.ppf(0.975) / math.sqrt(n - 3))
    law = stats.beta((n - 2) / 2, (n - 2) / 2)
    assert row.coverage == pytest.approx(law.cdf((1 + c) / 2) - law.cdf((1 - c) / 2), abs=1e-9)
    assert row.miss_low == pytest.approx(law.cdf((1 - c) / 2), abs=1e-9)


def test_fisher_z_exact_half_width_measures_against_own_simulation():
    n, rho, margin = 40, 0.6, 0.2
    d = _design("correlation", "fisher-z", _normal(), _normal(), rho, margin=margin)
    row = engine.check(d, n, replicates=100, rng=1)
    rng = np.random.default_rng(5)
    R = 40_000
    x, y = _pairs_numpy(rng, n, rho, R)
    r = _rows_r(x, y)
    c = stats.norm.ppf(0.975) / math.sqrt(n - 3)
    half = (np.tanh(np.arctanh(r) + c) - np.tanh(np.arctanh(r) - c)) / 2
    se_mean = half.std() / math.sqrt(R)
    assert abs(row.margin_mean - half.mean()) < 4 * se_mean
    share = np.mean(half <= margin)
    assert abs(row.assurance - share) < 4 * math.sqrt(share * (1 - share) / R)
    covered = np.mean(np.abs(np.arctanh(r) - math.atanh(rho)) <= c)
    assert abs(row.coverage - covered) < 4 * math.sqrt(covered * (1 - covered) / R)


def test_fisher_z_simulated_coverage_within_4_mcse_of_exact():
    d = _design("correlation", "fisher-z", _normal(), _normal(), 0.7, margin=0.15)
    exact = engine.check(d, 12, replicates=100, rng=1)
    sim = engine.check(d, 12, replicates=20_000, rng=3, path="full")
    assert sim.path != "exact"
    assert abs(sim.coverage - exact.coverage) < 4 * sim.coverage_mcse
    assert abs(sim.margin_mean - exact.margin_mean) < 4 * sim.margin_mean_mcse


# --------------------------------------------------------------------------- the copula's correlation


@pytest.mark.parametrize("sa,sb,rho", [(0.5, 0.5, 0.6), (1.0, 0.3, -0.7), (1.2, 1.0, 0.9)])
def test_copula_correlation_of_lognormal_margins_closed_form(sa, sb, rho):
    # corr(exp(sa Z1), exp(sb Z2)) = (exp(rho sa sb) - 1) / sqrt((exp(sa^2) - 1)(exp(sb^2) - 1)): the moments of
    # the bivariate lognormal (from memory; Johnson, Kotz & Balakrishnan, Continuous Multivariate Distributions)
    ref = (math.exp(rho * sa * sb) - 1) / math.sqrt((math.exp(sa * sa) - 1) * (math.exp(sb * sb) - 1))
    d = _design("correlation", "fisher-z", _lognormal(sa), _lognormal(sb, meanlog=2.0), rho)
    assert d.true_value == pytest.approx(ref, abs=1e-9)


@pytest.mark.parametrize("rho", [0.5, -0.8])
def test_copula_correlation_of_two_bernoulli_margins_against_scipy_bivariate_normal(rho):
    # X = 1[Z1 > Phi^-1(1 - p_a)], Y likewise: P(X = Y = 1) is a bivariate normal orthant (scipy's mvn cdf)
    pa, pb = 0.3, 0.6
    ca, cb = stats.norm.ppf(1 - pa), stats.norm.ppf(1 - pb)
    p11 = stats.multivariate_normal([0, 0], [[1, rho], [rho, 1]]).cdf([-ca, -cb])
    ref = (p11 - pa * pb) / math.sqrt(pa * (1 - pa) * pb * (1 - pb))
    d = _design("correlation", "fisher-z", make_model({"model": "bernoulli", "p": pa}),
                make_model({"model": "bernoulli", "p": pb}), rho)
    assert d.true_value == pytest.approx(ref, abs=1e-8)


def test_copula_correlation_of_count_and_skewed_margins_against_own_simulation():
    a = make_model({"model": "poisson", "mean": 3.0})
    b = make_model({"model": "gamma", "mean": 2.0, "cv": 1.0})
    d = _design("correlation", "fisher-z", a, b, 0.5)
    rng = np.random.default_rng(18)
    z1, z2 = _pairs_numpy(rng, 1, 0.5, 2_000_000)
    x = stats.poisson(3.0).ppf(stats.norm.cdf(z1[:, 0]))
    y = -2.0 * stats.norm.logsf(z2[:, 0])
    r = np.corrcoef(x, y)[0, 1]
    assert abs(d.true_value - r) < 4 * 4 * (1 - r * r) / math.sqrt(2_000_000)


def test_copula_correlation_of_heavy_tailed_margins_against_own_simulation():
    # scipy's t quantile gives up far in the tails, where the quadrature still has nodes
    t5 = make_model({"model": "student-t", "df": 5, "mean": 0.0, "scale": 1.0})
    d = _design("correlation", "fisher-z", t5, t5, 0.5)
    rng = np.random.default_rng(19)
    z1, z2 = _pairs_numpy(rng, 1, 0.5, 1_000_000)
    law = stats.t(5)
    r = np.corrcoef(law.ppf(stats.norm.cdf(z1[:, 0])), law.ppf(stats.norm.cdf(z2[:, 0])))[0, 1]
    assert abs(d.true_value - r) < 0.01


def test_copula_correlation_of_gamma_margins_against_own_simulation():
    a = make_model({"model": "gamma", "mean": 2.0, "cv": 1.0})
    b = make_model({"model": "weibull", "shape": 1.5, "scale": 3.0})
    d = _design("correlation", "fisher-z", a, b, 0.5)
    rng = np.random.default_rng(8)
    z1, z2 = _pairs_numpy(rng, 1, 0.5, 2_000_000)
    # closed-form quantiles: exponential (gamma with CV 1) -mean log(1 - u), Weibull scale (-log(1 - u))^(1/shape)
    x = -2.0 * stats.norm.logsf(z1[:, 0])
    y = 3.0 * (-stats.norm.logsf(z2[:, 0])) ** (1 / 1.5)
    r = np.corrcoef(x, y)[0, 1]
    # SD of a sample correlation about (1 - r^2) / sqrt(N) for near-normal data; x4 for the skewed margins
    assert abs(d.true_value - r) < 4 * 4 * (1 - r * r) / math.sqrt(2_000_000)


# --------------------------------------------------------------------------- the paired t interval


def test_paired_t_limits_match_scipy_one_sample_t_on_differences():
    rng = np.random.default_rng(2)
    x = rng.normal(10, 2, (4, 12))
    y = x - rng.normal(1, 1, (4, 12))
    lo, hi = get_method("paired-mean-diff", "t").func(Sample(x=x, n=12, y=y), 0.95)
    for i in range(4):
        ci = stats.ttest_rel(x[i], y[i]).confidence_interval(0.95)
        assert (lo[i], hi[i]) == pytest.approx((ci.low, ci.high), rel=1e-12)


def test_paired_t_exact_coverage_is_the_confidence_and_margins_follow_chi_law():
    sa, sb, rho, n, margin = 2.0, 3.0, 0.4, 20, 0.9
    d = _design("paired-mean-diff", "t", _normal(10, sa), _normal(7, sb), rho, margin=margin, confidence=0.9)
    row = engine.check(d, n, replicates=100, rng=1)
    assert row.path == "exact" and row.true_value == 3.0
    assert row.coverage == 0.9
    sd_d = math.sqrt(sa * sa + sb * sb - 2 * rho * sa * sb)
    k = stats.t.ppf(0.95, n - 1) * sd_d / math.sqrt(n)
    # s_d sqrt(n - 1) / sd_d ~ chi(n - 1): scipy's chi law
    assert row.margin_mean == pytest.approx(k * stats.chi(n - 1).mean() / math.sqrt(n - 1), rel=1e-10)
    assert row.assurance == pytest.approx(stats.chi(n - 1).cdf(margin / k * math.sqrt(n - 1)), rel=1e-10)


def test_paired_t_simulated_coverage_within_4_mcse():
    d = _design("paired-mean-diff", "t", _normal(10, 2), _normal(9, 2), 0.6, margin=0.5)
    sim = engine.check(d, 15, replicates=20_000, rng=4, path="full")
    assert abs(sim.coverage - 0.95) < 4 * sim.coverage_mcse
    exact = engine.check(d, 15, replicates=100, rng=1)
    assert abs(sim.margin_mean - exact.margin_mean) < 4 * sim.margin_mean_mcse


def test_paired_t_on_skewed_margins_against_own_simulation():
    a, b = _lognormal(0.8), _lognormal(0.5, meanlog=0.2)
    d = _design("paired-mean-diff", "t", a, b, 0.5, margin=0.5)
    sim = engine.check(d, 10, replicates=20_000, rng=9)
    assert sim.path != "exact"
    assert sim.true_value == pytest.approx(math.exp(0.32) - math.exp(0.2 + 0.125), rel=1e-12)
    rng = np.random.default_rng(10)
    z1, z2 = _pairs_numpy(rng, 10, 0.5, 20_000)
    diff = np.exp(0.8 * z1) - np.exp(0.2 + 0.5 * z2)
    m, s = diff.mean(1), diff.std(1, ddof=1)
    half = stats.t.ppf(0.975, 9) * s / math.sqrt(10)
    own = np.mean(np.abs(m - sim.true_value) <= half)
    se = math.sqrt(sim.coverage_mcse ** 2 + own * (1 - own) / 20_000)
    assert abs(sim.coverage - own) < 4 * se


# --------------------------------------------------------------------------- bootstrap intervals


def _own_percentile(stat, x, y, rng, B, confidence):
    """Percentile bootstrap over resampled pairs, one replicate at a time (``stat`` works on (B, n) rows)."""
    lo, hi = np.empty(len(x)), np.empty(len(x))
    a = (1 - confidence) / 2
    for i in range(len(x)):
        idx = rng.integers(0, x.shape[1], size=(B, x.shape[1]))
        vals = stat(x[i][idx], y[i][idx])
        lo[i], hi[i] = np.percentile(vals[np.isfinite(vals)], [100 * a, 100 * (1 - a)])
    return lo, hi


def _rows_r(u, v):
    uc = u - u.mean(axis=1, keepdims=True)
    vc = v - v.mean(axis=1, keepdims=True)
    return (uc * vc).sum(axis=1) / np.sqrt((uc * uc).sum(axis=1) * (vc * vc).sum(axis=1))


@pytest.mark.slow
def test_correlation_bootstrap_coverage_against_own_simulation():
    n, rho, R, B = 15, 0.5, 3000, 499
    d = _design("correlation", "bootstrap-percentile", _normal(), _normal(), rho, margin=0.3, resamples=B)
    sim = engine.check(d, n, replicates=R, rng=12)
    rng = np.random.default_rng(13)
    x, y = _pairs_numpy(rng, n, rho, R)
    with np.errstate(invalid="ignore", divide="ignore"):
        lo, hi = _own_percentile(_rows_r, x, y, rng, B, 0.95)
    own = np.mean((lo <= rho) & (rho <= hi))
    se = math.sqrt(sim.coverage_mcse ** 2 + own * (1 - own) / R)
    assert abs(sim.coverage - own) < 4 * se
    own_half = (hi - lo) / 2
    assert abs(sim.margin_mean - own_half.mean()) < 4 * math.hypot(sim.margin_mean_mcse, own_half.std() / math.sqrt(R))


def test_correlation_bootstrap_limits_are_percentiles_of_resampled_r():
    # one replicate, its resample indices drawn from the same stream: the limits are np.percentile's
    rng = np.random.default_rng(3)
    x, y = _pairs_numpy(rng, 10, 0.3, 1)
    lo, hi, _ = get_method("correlation", "bootstrap-percentile").func(
        Sample(x=x, n=10, y=y, rng=np.random.default_rng(99), resamples=199), 0.9)
    idx = np.random.default_rng(99).integers(0, 10, size=(1, 199, 10), dtype=np.intp)[0]
    with np.errstate(invalid="ignore", divide="ignore"):
        vals = np.array([np.corrcoef(x[0, j], y[0, j])[0, 1] for j in idx])
    vals = vals[np.isfinite(vals)]
    assert (lo[0], hi[0]) == pytest.approx(tuple(np.percentile(vals, [5, 95])), abs=1e-12)


@pytest.mark.slow
def test_paired_bootstrap_coverage_against_own_simulation():
    n, R, B = 12, 3000, 499
    d = _design("paired-mean-diff", "bootstrap-percentile", _normal(5, 2), _normal(4, 1), 0.3, margin=0.8,
                resamples=B)
    sim = engine.check(d, n, replicates=R, rng=21)
    rng = np.random.default_rng(22)
    z1, z2 = _pairs_numpy(rng, n, 0.3, R)
    x, y = 5 + 2 * z1, 4 + z2
    lo, hi = _own_percentile(lambda u, v: np.mean(u - v, axis=1), x, y, rng, B, 0.95)
    own = np.mean((lo <= 1.0) & (1.0 <= hi))
    se = math.sqrt(sim.coverage_mcse ** 2 + own * (1 - own) / R)
    assert abs(sim.coverage - own) < 4 * se


# --------------------------------------------------------------------------- baselines


def test_paired_baseline_formula():
    res = formula_for("paired-mean-diff", 0.5, 0.95, {"sd": 2.0, "sd_b": 3.0, "correlation": 0.6})
    sd_d = math.sqrt(4 + 9 - 2 * 0.6 * 6)
    assert res.n == math.ceil((stats.norm.ppf(0.975) * sd_d / 0.5) ** 2)


def test_correlation_baseline_bonett_wright():
    # Bonett & Wright (2000), Psychometrika 65:23-28: n0 = 4 z^2 (1 - rho^2)^2 / w^2 + 3 (c = 1 for Pearson's r)
    res = formula_for("correlation", 0.1, 0.95, {"correlation": 0.5})
    z = stats.norm.ppf(0.975)
    assert res.n == math.ceil(4 * z * z * 0.75 ** 2 / 0.2 ** 2 + 3) == 220


def test_search_baseline_uses_the_copula_correlation():
    from simcheck.search import formula_n

    a, b = _lognormal(0.8), _lognormal(0.8)
    d = _design("paired-mean-diff", "t", a, b, 0.5, margin=0.3)
    n = formula_n(d)
    r = (math.exp(0.5 * 0.64) - 1) / (math.exp(0.64) - 1)
    sd = math.sqrt((math.exp(0.64) - 1) * math.exp(0.64))  # the lognormal SD (from memory)
    assert n == math.ceil((stats.norm.ppf(0.975) * sd * math.sqrt(2 - 2 * r) / 0.3) ** 2)


# --------------------------------------------------------------------------- the command line


def test_cli_formula_correlation(tmp_path):
    code, out, _ = run_cli(["formula", "--estimand", "correlation", "--margin", "0.1", "--correlation", "0.5", "--json"])
    assert code == 0 and '"n": 220' in out


def test_cli_check_and_search_exact(tmp_path):
    path = _scenario(tmp_path)
    code, out, err = run_cli(["check", path, "--n", "150", "--json"])
    assert code == 0, err
    code, out, err = run_cli(["search", path, "--json"])
    assert code == 0, err
    import json

    res = json.loads(out)
    assert res["exact"] and 150 <= res["n"] <= 300


@pytest.mark.parametrize("change,field,phrase", [
    ({"correlation": 1.5}, "data.correlation", "(-1, 1)"),
    ({"correlation": -1}, "data.correlation", "(-1, 1)"),
    ({"correlation": None}, "data.correlation", "required"),
    ({"b": {"model": "mixture", "weights": [0.5, 0.5],
            "components": [{"model": "normal", "mean": 1, "sd": 1}, {"model": "normal", "mean": 5, "sd": 1}]}},
     "data.b", "closed-form law"),
    ({"margin": 1.0}, "target.margin", "correlation lies in"),
    ({"a": {"model": "student-t", "df": 2.5, "mean": 0, "scale": 1}, "margin": 1.5}, "target.margin", "correlation lies in"),
])
def test_cli_bad_input_exit_2_one_line(tmp_path, change, field, phrase):
    kw = {"correlation": change.get("correlation", 0.5)}
    for k in ("a", "b", "margin"):
        if k in change:
            kw[k] = change[k]
    path = _scenario(tmp_path, **kw)
    code, out, err = run_cli(["check", path, "--n", "20"])
    lines = [ln for ln in err.splitlines() if ln.startswith("simcheck: error")]
    assert code == 2 and len(lines) == 1, err
    assert field in lines[0] and phrase in lines[0]


def test_cli_paired_without_data_b(tmp_path):
    path = tmp_path / "p.toml"
    path.write_text('[target]\nestimand = "paired-mean-diff"\nmargin = 0.5\n[data]\ncorrelation = 0.5\n'
                    '[data.a]\nmodel = "normal"\nmean = 1\nsd = 1\n[method]\ninterval = "t"\n', encoding="utf-8")
    code, _, err = run_cli(["check", path, "--n", "20"])
    lines = [ln for ln in err.splitlines() if ln.startswith("simcheck: error")]
    assert code == 2 and len(lines) == 1 and "data.b" in lines[0], err


def test_cli_formula_bad_correlation():
    code, _, err = run_cli(["formula", "--estimand", "correlation", "--margin", "0.1", "--correlation", "1.2"])
    assert code == 2 and "--correlation" in err and len(err.strip().splitlines()) == 1
