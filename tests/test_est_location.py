"""Geometric means, ratios of geometric means, medians and quantiles (issue 16).

Every check names its reference: scipy's t-test confidence intervals (an
independent implementation of the t and Welch intervals), exact laws written
here (binomial enumeration with math.comb, the Beta law of uniform spacings,
Renyi's representation of exponential order statistics, chi-square law of s^2),
published values (sources named beside them) and Monte Carlo checks within
4 MCSE. Scenarios are invented.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from fixtures import run_cli, write_toml
from scipy import integrate, special, stats

from simcheck import engine
from simcheck.design import Design
from simcheck.estimands import formula_for
from simcheck.errors import InputError
from simcheck.intervals.base import Sample, get_method
from simcheck.models import make_model

Z975 = 1.959963984540054


def _design(model, estimand, method, margin, **kw):
    return Design(model=make_model(model), estimand=estimand, method=method, margin=margin, **kw)


LN = {"model": "lognormal", "meanlog": 1.2, "sdlog": 0.7}
GAMMA = {"model": "gamma", "shape": 2.5, "scale": 1.6}


# --------------------------------------------------------------------------
# geometric mean: true values
# --------------------------------------------------------------------------
def _gm_by_integration(dist) -> float:
    """exp(E log X) by quadrature of log(x) f(x), written here."""
    lo, hi = dist.support()
    val, _ = integrate.quad(lambda x: math.log(x) * dist.pdf(x), lo, hi, limit=400)
    return math.exp(val)


@pytest.mark.parametrize("model, dist", [
    (LN, stats.lognorm(0.7, scale=math.exp(1.2))),
    (GAMMA, stats.gamma(2.5, scale=1.6)),
    ({"model": "weibull", "shape": 1.7, "scale": 3.0}, stats.weibull_min(1.7, scale=3.0)),
    ({"model": "exponential", "mean": 2.0}, stats.expon(scale=2.0)),
    ({"model": "beta", "a": 2.0, "b": 3.0}, stats.beta(2.0, 3.0)),
])
def test_geometric_mean_true_value(model, dist):
    d = _design(model, "geometric-mean", "log-t", 1.2)
    assert d.true_value == pytest.approx(_gm_by_integration(dist), rel=1e-7)


def test_geometric_mean_true_value_closed_forms():
    # lognormal: exp(meanlog); gamma: scale exp(digamma(shape)) (common practice: E log X of the gamma law)
    assert _design(LN, "geometric-mean", "log-t", 1.2).true_value == pytest.approx(math.exp(1.2), rel=1e-14)
    g = _design(GAMMA, "geometric-mean", "log-t", 1.2).true_value
    assert g == pytest.approx(1.6 * math.exp(special.digamma(2.5)), rel=1e-14)
    d = Design(model=make_model(LN), model_b=make_model(GAMMA), estimand="geometric-mean-ratio", method="log-welch",
               margin=1.3)
    assert d.true_value == pytest.approx(math.exp(1.2) / g, rel=1e-12)


def test_geometric_mean_of_pilot_values():
    vals = [1.5, 2.0, 2.0, 8.0, 3.5]
    d = _design({"model": "empirical", "values": vals}, "geometric-mean", "log-t", 1.2)
    assert d.true_value == pytest.approx(stats.gmean(vals), rel=1e-12)  # scipy's geometric mean


# --------------------------------------------------------------------------
# geometric mean: intervals against scipy's t-test intervals on the logs
# --------------------------------------------------------------------------
def test_log_t_matches_scipy():
    rng = np.random.default_rng(11)
    x = rng.lognormal(1.0, 0.8, size=(6, 9))
    lo, hi = get_method("geometric-mean", "log-t").func(Sample(x=x, n=9), 0.9)
    for i in range(6):
        ci = stats.ttest_1samp(np.log(x[i]), 0.0).confidence_interval(0.9)
        assert lo[i] == pytest.approx(math.exp(ci.low), rel=1e-12)
        assert hi[i] == pytest.approx(math.exp(ci.high), rel=1e-12)


@pytest.mark.parametrize("method, equal_var", [("log-t", True), ("log-welch", False)])
def test_log_ratio_intervals_match_scipy(method, equal_var):
    rng = np.random.default_rng(12)
    xa = rng.lognormal(1.0, 0.8, size=(5, 8))
    xb = rng.gamma(2.0, 1.5, size=(5, 13))
    lo, hi = get_method("geometric-mean-ratio", method).func(Sample(x=xa, n=8, xb=xb, n_b=13), 0.95)
    for i in range(5):
        ci = stats.ttest_ind(np.log(xa[i]), np.log(xb[i]), equal_var=equal_var).confidence_interval(0.95)
        assert lo[i] == pytest.approx(math.exp(ci.low), rel=1e-12)
        assert hi[i] == pytest.approx(math.exp(ci.high), rel=1e-12)


def test_log_t_nan_for_values_not_positive():
    x = np.array([[1.0, 2.0, 3.0], [1.0, 0.0, 3.0]])
    lo, hi = get_method("geometric-mean", "log-t").func(Sample(x=x, n=3), 0.95)
    assert np.isfinite(lo[0]) and np.isnan(lo[1]) and np.isnan(hi[1])


@pytest.mark.parametrize("two", [False, True])
def test_bootstrap_percentile_is_the_percentile_of_resampled_geometric_means(two):
    """Against a plain bootstrap written here (Efron & Tibshirani 1993, ch. 13), within Monte Carlo error."""
    rng = np.random.default_rng(31)
    xa = rng.lognormal(0.5, 0.8, size=15)
    xb = rng.lognormal(0.0, 0.6, size=12)
    B = 19999
    ia = rng.integers(0, 15, size=(B, 15))
    gm = stats.gmean(xa[ia], axis=1)
    if two:
        gm = gm / stats.gmean(xb[rng.integers(0, 12, size=(B, 12))], axis=1)
    ref = np.percentile(gm, [2.5, 97.5])
    s = Sample(x=xa[None, :], n=15, xb=xb[None, :] if two else None, n_b=12 if two else None,
               rng=np.random.default_rng(5), resamples=B)
    lo, hi, deg = get_method("geometric-mean-ratio" if two else "geometric-mean", "bootstrap-percentile").func(s, 0.95)
    # two independent bootstraps of B = 19999: the 2.5% quantiles differ by about 1% at most (4 MCSE)
    assert lo[0] == pytest.approx(ref[0], rel=0.025) and hi[0] == pytest.approx(ref[1], rel=0.025)
    assert not deg[0]


# --------------------------------------------------------------------------
# geometric mean: exact path on lognormal data
# --------------------------------------------------------------------------
def test_log_t_exact_against_chi_square_law():
    """The log-scale half-width t s / sqrt(n) with (n-1) s^2 / sdlog^2 ~ chi2(n-1) (Student 1908), written here."""
    n, f, sdlog = 30, 1.25, 0.7
    d = _design(LN, "geometric-mean", "log-t", f)
    r = engine.check(d, n, path="exact")
    t = stats.t.ppf(0.975, n - 1)
    k = t * sdlog / math.sqrt(n)
    assert r.exact and r.coverage == pytest.approx(0.95, abs=1e-12)
    assert r.assurance == pytest.approx(stats.chi2.cdf((n - 1) * (math.log(f) / k) ** 2, n - 1), rel=1e-10)
    assert r.margin_median == pytest.approx(math.exp(k * math.sqrt(stats.chi2.ppf(0.5, n - 1) / (n - 1))), rel=1e-10)
    # the margin mean is the geometric mean of the factors: exp(k E[sqrt(W / df)])
    e_root, _ = integrate.quad(lambda w: math.sqrt(w / (n - 1)) * stats.chi2.pdf(w, n - 1), 0, np.inf)
    assert r.margin_mean == pytest.approx(math.exp(k * e_root), rel=1e-8)
    assert any("ratio scale" in note for note in r.notes)


def test_log_t_exact_agrees_with_simulation():
    d = _design(LN, "geometric-mean", "log-t", 1.3)
    ex = engine.check(d, 25, path="exact")
    sim = engine.check(d, 25, path="full", replicates=4000, rng=5)
    assert not sim.exact
    assert abs(sim.coverage - ex.coverage) <= 4 * math.sqrt(0.95 * 0.05 / 4000)
    assert abs(sim.assurance - ex.assurance) <= 4 * math.sqrt(ex.assurance * (1 - ex.assurance) / 4000)
    assert abs(sim.margin_median - ex.margin_median) <= 4 * sim.margin_median_mcse


def test_log_t_ratio_exact_only_for_equal_sdlogs():
    a = make_model(LN)
    same = Design(model=a, model_b=make_model({"model": "lognormal", "meanlog": 0.3, "sdlog": 0.7}),
                  estimand="geometric-mean-ratio", method="log-t", margin=1.4, ratio=1.5)
    r = engine.check(same, 20, path="exact")
    nb, df = 30, 48
    k = stats.t.ppf(0.975, df) * 0.7 * math.sqrt(1 / 20 + 1 / nb)
    assert r.n_b == nb and r.coverage == pytest.approx(0.95, abs=1e-12)
    assert r.assurance == pytest.approx(stats.chi2.cdf(df * (math.log(1.4) / k) ** 2, df), rel=1e-10)
    other = Design(model=a, model_b=make_model({"model": "lognormal", "meanlog": 0.3, "sdlog": 0.9}),
                   estimand="geometric-mean-ratio", method="log-t", margin=1.4)
    assert "exact" not in engine.available_paths(other)
    assert "exact" not in engine.available_paths(other.with_method("log-welch"))


@pytest.mark.slow
def test_log_welch_coverage_with_unequal_spread():
    # Welch (1947) keeps coverage near nominal where the pooled interval does not (unequal SDs, unequal n)
    a = make_model({"model": "lognormal", "meanlog": 0.0, "sdlog": 1.2})
    b = make_model({"model": "lognormal", "meanlog": 0.0, "sdlog": 0.4})
    d = Design(model=a, model_b=b, estimand="geometric-mean-ratio", method="log-welch", margin=1.5, ratio=3.0)
    w = engine.check(d, 10, replicates=6000, rng=3)
    p = engine.check(d.with_method("log-t"), 10, replicates=6000, rng=3)
    assert abs(w.coverage - 0.95) <= 4 * w.coverage_mcse + 0.01
    assert p.coverage < w.coverage - 4 * math.hypot(w.coverage_mcse, p.coverage_mcse)


# --------------------------------------------------------------------------
# geometric mean: baselines
# --------------------------------------------------------------------------
def test_geometric_mean_formula():
    r = formula_for("geometric-mean", 1.2, 0.95, {"sd_log": 0.8})
    assert r.n == math.ceil((Z975 * 0.8 / math.log(1.2)) ** 2)  # 74
    assert r.n == 74
    r2 = formula_for("geometric-mean-ratio", 1.3, 0.9, {"sd_log": 0.8, "sd_log_b": 0.9, "ratio": 2.0})
    z = stats.norm.ppf(0.95)
    n = math.ceil(z * z * (0.64 + 0.81 / 2) / math.log(1.3) ** 2)
    assert (r2.n, r2.n_b) == (n, 2 * n)


def test_geometric_mean_planning_value_from_model():
    from simcheck.search import formula_result

    d = _design(GAMMA, "geometric-mean", "log-t", 1.2)
    sd_log = math.sqrt(special.polygamma(1, 2.5))  # Var(log X) = trigamma(shape) for the gamma law
    res, n = formula_result(d)
    assert res.planning["sd_log"] == pytest.approx(sd_log, rel=1e-12)
    assert n == math.ceil((Z975 * sd_log / math.log(1.2)) ** 2)


# --------------------------------------------------------------------------
# order-statistic interval
# --------------------------------------------------------------------------
def _binom_cdf(i: int, n: int, q: float) -> float:
    """P(B <= i), B ~ Binomial(n, q), by enumeration."""
    return sum(math.comb(n, t) * q**t * (1 - q) ** (n - t) for t in range(0, i + 1))


def _ranks_by_enumeration(n: int, q: float, conf: float):
    half = (1 - conf) / 2
    js = [j for j in range(1, n + 1) if _binom_cdf(j - 1, n, q) <= half]
    ks = [k for k in range(1, n + 1) if 1 - _binom_cdf(k - 1, n, q) <= half]
    j = max(js) if js else 0
    k = min(ks) if ks else n + 1
    return j, k


@pytest.mark.parametrize("n, q, conf", [(20, 0.5, 0.95), (100, 0.5, 0.95), (37, 0.9, 0.9), (60, 0.1, 0.99),
                                        (5, 0.5, 0.95), (12, 0.25, 0.8)])
def test_order_statistic_ranks_by_enumeration(n, q, conf):
    from simcheck.intervals.quantile import order_statistic_coverage, order_statistic_ranks

    j, k = _ranks_by_enumeration(n, q, conf)
    assert order_statistic_ranks(n, q, conf) == (j, k)
    cov = order_statistic_coverage(n, q, conf)
    lo_tail = _binom_cdf(j - 1, n, q) if j >= 1 else 0.0
    hi_tail = 1 - _binom_cdf(k - 1, n, q) if k <= n else 0.0
    assert cov["coverage"] == pytest.approx(1 - lo_tail - hi_tail, abs=1e-12)
    assert cov["coverage"] >= conf


def test_order_statistic_published_median_intervals():
    from simcheck.intervals.quantile import order_statistic_coverage

    # the 95% median interval X(6)..X(15) for n = 20 with confidence 0.9586 (binomial tables, e.g.
    # Conover 1999 sec. 3.2; from memory) and X(40)..X(61) for n = 100 (from memory)
    c20 = order_statistic_coverage(20, 0.5, 0.95)
    assert c20["ranks"] == (6, 15) and round(c20["coverage"], 4) == 0.9586
    assert order_statistic_coverage(100, 0.5, 0.95)["ranks"] == (40, 61)


def test_order_statistic_distribution_free_on_the_same_draws():
    """A monotone map of the data moves the interval and the true quantile together: identical coverage."""
    rng = np.random.default_rng(7)
    z = rng.standard_normal((3000, 31))
    f = get_method("quantile", "order-statistic").func
    lo, hi = f(Sample(x=z, n=31, params={"quantile": 0.75}), 0.95)
    xi = stats.norm.ppf(0.75)
    lo2, hi2 = f(Sample(x=np.exp(z), n=31, params={"quantile": 0.75}), 0.95)
    cov1 = (lo <= xi) & (xi <= hi)
    cov2 = (lo2 <= math.exp(xi)) & (math.exp(xi) <= hi2)
    assert np.array_equal(cov1, cov2)


@pytest.mark.parametrize("model", [{"model": "normal", "mean": 5.0, "sd": 2.0}, {"model": "weibull", "shape": 0.8, "scale": 2.0}])
def test_order_statistic_coverage_identical_on_two_continuous_models(model):
    d = _design(model, "quantile", "order-statistic", 1.0, quantile=0.3)
    ex = engine.check(d, 45, path="exact")
    from simcheck.intervals.quantile import order_statistic_coverage

    ref = order_statistic_coverage(45, 0.3, 0.95)
    assert ex.coverage == pytest.approx(ref["coverage"], abs=1e-15)  # the same number for both models
    assert ex.miss_low == pytest.approx(ref["miss_low"], abs=1e-15)
    sim = engine.check(d, 45, path="full", replicates=4000, rng=9)
    se = math.sqrt(ex.coverage * (1 - ex.coverage) / 4000)
    assert abs(sim.coverage - ex.coverage) <= 4 * se


def test_order_statistic_exact_half_width_uniform():
    """Uniform(0, w) spacings: X(k) - X(j) ~ w Beta(k - j, n - k + j + 1) (David & Nagaraja 2003, sec. 2.5)."""
    w, n = 4.0, 40
    d = _design({"model": "uniform", "lower": 0.0, "upper": w}, "median", "order-statistic", 0.6, assurance=0.8)
    from simcheck.intervals.quantile import order_statistic_ranks

    j, k = order_statistic_ranks(n, 0.5, 0.95)
    spacing = stats.beta(k - j, n - k + j + 1)
    r = engine.check(d, n, path="exact")
    assert r.margin_mean == pytest.approx(w * (k - j) / (n + 1) / 2, rel=1e-5)
    assert r.margin_median == pytest.approx(w * spacing.ppf(0.5) / 2, rel=1e-5)
    assert r.margin_p90 == pytest.approx(w * spacing.ppf(0.9) / 2, rel=1e-5)
    assert r.assurance == pytest.approx(spacing.cdf(2 * 0.6 / w), abs=1e-6)
    assert r.margin_at_assurance == pytest.approx(w * spacing.ppf(0.8) / 2, rel=1e-5)


def test_order_statistic_exact_half_width_exponential():
    """Renyi (1953): X(k) - X(j) = sum over i = j+1..k of E_i / (n - i + 1) for exponential data."""
    n, mu = 30, 2.0
    d = _design({"model": "exponential", "mean": mu}, "quantile", "order-statistic", 1.0, quantile=0.4)
    from simcheck.intervals.quantile import order_statistic_ranks

    j, k = order_statistic_ranks(n, 0.4, 0.95)
    r = engine.check(d, n, path="exact")
    assert r.margin_mean == pytest.approx(0.5 * mu * sum(1 / (n - i + 1) for i in range(j + 1, k + 1)), rel=1e-6)


def test_order_statistic_exact_agrees_with_simulation_lognormal():
    d = _design(LN, "median", "order-statistic", 0.8)
    ex = engine.check(d, 50, path="exact")
    sim = engine.check(d, 50, path="full", replicates=4000, rng=21)
    assert abs(sim.margin_mean - ex.margin_mean) <= 4 * sim.margin_mean_mcse
    assert abs(sim.margin_median - ex.margin_median) <= 4 * sim.margin_median_mcse
    assert abs(sim.assurance - ex.assurance) <= 4 * math.sqrt(ex.assurance * (1 - ex.assurance) / 4000)


def test_order_statistic_unbounded_below_n6():
    # n = 5: (1/2)^5 = 0.031 > 0.025, so no order statistic bounds the 95% median interval
    d = _design(LN, "median", "order-statistic", 1.0)
    r = engine.check(d, 5, path="exact")
    assert r.coverage == 1.0 and math.isinf(r.margin_mean) and r.assurance == 0.0


def test_ties_note_and_conservative_coverage_on_counts():
    d = _design({"model": "poisson", "mean": 3.5}, "median", "order-statistic", 1.0)
    assert "exact" not in engine.available_paths(d)
    r = engine.check(d, 40, replicates=4000, rng=4)
    assert any("discrete (ties occur)" in note for note in r.notes)
    # with ties each tail is at most alpha / 2 (the count below the median is stochastically smaller)
    assert r.coverage >= 0.95 - 4 * r.coverage_mcse
    cont = engine.check(_design(LN, "median", "order-statistic", 1.0), 40, path="exact")
    assert not any("ties" in note for note in cont.notes)


def test_empirical_median_true_value_and_ties():
    vals = [3.0, 1.0, 4.0, 1.0, 5.0, 9.0, 2.0, 6.0]
    d = _design({"model": "empirical", "values": vals}, "quantile", "order-statistic", 1.0, quantile=0.25)
    # inverse-CDF quantile of the resampling law (Hyndman & Fan 1996, definition 1): the 2nd of 8 sorted values
    assert d.true_value == sorted(vals)[1]
    assert "exact" not in engine.available_paths(d)


# --------------------------------------------------------------------------
# Maritz-Jarrett
# --------------------------------------------------------------------------
def _bootstrap_law_of_order_statistic(n: int, m: int) -> np.ndarray:
    """P(X*_(m) = X_(i)) of a resample: P(Bin(n, i/n) >= m) - P(Bin(n, (i-1)/n) >= m), by enumeration."""
    def tail(p):
        return sum(math.comb(n, t) * p**t * (1 - p) ** (n - t) for t in range(m, n + 1))

    return np.array([tail(i / n) - tail((i - 1) / n) for i in range(1, n + 1)])


@pytest.mark.parametrize("n, q", [(9, 0.5), (20, 0.9), (15, 0.1)])
def test_maritz_jarrett_is_the_exact_bootstrap_se(n, q):
    rng = np.random.default_rng(n)
    x = rng.gamma(2.0, 3.0, size=(4, n))
    lo, hi = get_method("quantile", "maritz-jarrett").func(Sample(x=x, n=n, params={"quantile": q}), 0.95)
    m = min(max(math.floor(q * n + 0.5), 1), n)  # Wilcox (2012) sec. 3.5: m = [q n + 0.5]
    w = _bootstrap_law_of_order_statistic(n, m)
    for i in range(4):
        s = np.sort(x[i])
        se = math.sqrt(np.dot(w, s * s) - np.dot(w, s) ** 2)
        assert lo[i] == pytest.approx(s[m - 1] - Z975 * se, rel=1e-10)
        assert hi[i] == pytest.approx(s[m - 1] + Z975 * se, rel=1e-10)


def test_maritz_jarrett_se_against_resampling():
    rng = np.random.default_rng(3)
    x = rng.lognormal(0.0, 1.0, size=25)
    lo, hi = get_method("median", "maritz-jarrett").func(Sample(x=x[None, :], n=25), 0.95)
    se = (hi[0] - lo[0]) / (2 * Z975)
    boot = np.sort(x[rng.integers(0, 25, size=(40000, 25))], axis=1)[:, 12]
    # bootstrap SD with 40000 resamples: relative MCSE about 1 / sqrt(2 * 40000) < 0.4%
    assert se == pytest.approx(boot.std(ddof=1), rel=4 * 0.004)


# --------------------------------------------------------------------------
# quantile baselines
# --------------------------------------------------------------------------
def test_quantile_formula():
    r = formula_for("quantile", 2.0, 0.95, {"quantile": 0.9, "density": 0.05})
    assert r.n == math.ceil(Z975**2 * 0.9 * 0.1 / (0.05**2 * 4.0))  # 35
    # normal data from the SD: the median's variance pi sigma^2 / (2 n) (Serfling 1980, from memory)
    m = formula_for("median", 0.5, 0.95, {"sd": 2.0})
    assert m.n == math.ceil(Z975**2 * math.pi * 4.0 / 2 / 0.25)  # 97
    assert "normal data" in " ".join(m.assumptions)


def test_quantile_planning_density_from_model():
    from simcheck.search import formula_result

    d = _design(GAMMA, "quantile", "order-statistic", 0.8, quantile=0.8)
    law = stats.gamma(2.5, scale=1.6)
    f = law.pdf(law.ppf(0.8))
    res, n = formula_result(d)
    assert res.planning["density"] == pytest.approx(f, rel=1e-12)
    assert n == math.ceil(Z975**2 * 0.8 * 0.2 / (f * f * 0.64))


def test_quantile_formula_input_errors():
    with pytest.raises(InputError, match="--density"):
        formula_for("median", 0.5, 0.95, {})
    with pytest.raises(InputError, match="--quantile"):
        formula_for("median", 0.5, 0.95, {"quantile": 0.4, "density": 0.1})


# --------------------------------------------------------------------------
# the command line: bad input (exit 2, one line) and the estimands end to end
# --------------------------------------------------------------------------
def _one_line_error(code, out, err, field):
    lines = [ln for ln in err.splitlines() if ln.strip()]
    assert code == 2 and out == ""
    assert len(lines) == 1 and field in lines[0] and "Traceback" not in err


QT = {"target": {"estimand": "quantile", "quantile": 0.9, "margin": 2.0},
      "data": {"model": "gamma", "mean": 8.0, "cv": 0.6}, "method": {"interval": "order-statistic"},
      "simulation": {"replicates": 400, "seed": 1}}
GM = {"target": {"estimand": "geometric-mean", "margin": 1.2},
      "data": {"model": "lognormal", "mean": 40.0, "cv": 1.0}, "method": {"interval": "log-t"},
      "simulation": {"replicates": 400, "seed": 1}}


@pytest.mark.parametrize("table, key, value, field", [
    (QT, "quantile", 1.2, "target.quantile"),
    (QT, "quantile", 0.0, "target.quantile"),
    (GM, "margin", 0.9, "target.margin"),
    (GM, "margin", 1.0, "target.margin"),
])
def test_cli_bad_target(tmp_path, table, key, value, field):
    import copy

    t = copy.deepcopy(table)
    t["target"][key] = value
    _one_line_error(*run_cli(["check", write_toml(tmp_path / "s.toml", t), "--n", 30]), field)


def test_cli_bad_data_and_keys(tmp_path):
    import copy

    t = copy.deepcopy(GM)
    t["data"] = {"model": "normal", "mean": 1.0, "sd": 2.0}
    _one_line_error(*run_cli(["check", write_toml(tmp_path / "a.toml", t), "--n", 30]), "data")
    t = copy.deepcopy(QT)
    del t["target"]["quantile"]
    _one_line_error(*run_cli(["check", write_toml(tmp_path / "b.toml", t), "--n", 30]), "target.quantile")
    t = copy.deepcopy(QT)
    t["target"]["estimand"] = "median"
    _one_line_error(*run_cli(["check", write_toml(tmp_path / "c.toml", t), "--n", 30]), "target.quantile")


@pytest.mark.parametrize("argv, field", [
    (["--estimand", "geometric-mean", "--margin", 0.8, "--sd-log", 0.5], "--margin"),
    (["--estimand", "geometric-mean-ratio", "--margin", 1.0, "--sd-log", 0.5], "--margin"),
    (["--estimand", "quantile", "--quantile", 1.5, "--margin", 1, "--density", 0.1], "--quantile"),
    (["--estimand", "quantile", "--margin", 1, "--density", 0.1], "--quantile"),
    (["--estimand", "median", "--margin", 1, "--density", 0.1, "--sd", 2], "--sd"),
    (["--estimand", "median", "--margin", 1, "--sd-log", 2], "--sd-log"),
])
def test_cli_formula_bad_input(argv, field):
    _one_line_error(*run_cli(["formula", *argv]), field)


def test_cli_formula_and_check_json(tmp_path):
    import json

    code, out, _ = run_cli(["formula", "--estimand", "geometric-mean", "--margin", 1.2, "--sd-log", 0.8, "--json"])
    assert code == 0 and json.loads(out)["n"] == 74
    code, out, _ = run_cli(["check", write_toml(tmp_path / "q.toml", QT), "--n", 60, "--json"])
    assert code == 0
    text = out
    assert "0.9 quantile" in text and '"exact": true' in text


@pytest.mark.slow
def test_search_order_statistic_scans_every_n(tmp_path):
    """Exact order-statistic coverage oscillates in n: the search's window must hold at every n."""
    from simcheck.search import find_n

    d = _design(LN, "median", "order-statistic", 0.9)
    res = find_n(d, rng=1, n_max=600)
    assert res.reached and res.exact
    from simcheck.window import window_top

    rows = engine.curve(d, list(range(res.n - 1, window_top(res.n, 1.25) + 1)), path="exact").rows
    assert all(r.coverage >= 0.945 and r.assurance >= 0.5 for r in rows[1:])
    # the n before fails, unless the targets held earlier and broke off (then n_first says so)
    assert not (rows[0].coverage >= 0.945 and rows[0].assurance >= 0.5) or res.n_first is not None


def test_scenario_round_trip_keeps_the_quantile_level():
    """Sweeps hash Scenario.to_dict(): two levels must give two scenarios, and the dict must load back."""
    from simcheck.scenario import scenario_from_dict

    a = scenario_from_dict(QT)
    b = scenario_from_dict({**QT, "target": {**QT["target"], "quantile": 0.5}})
    assert a.to_dict()["target"]["quantile"] == 0.9 and a.to_dict() != b.to_dict()
    assert scenario_from_dict(a.to_dict()).design.quantile == 0.9
    assert "quantile" not in scenario_from_dict(GM).to_dict()["target"]


def test_lognormal_geometric_mean_is_its_median():
    # exp(meanlog) is both the geometric mean and the median of a lognormal law (Johnson, Kotz &
    # Balakrishnan 1994, ch. 14; from memory): two estimands, two routes to one number
    gm = _design(LN, "geometric-mean", "log-t", 1.2).true_value
    med = _design(LN, "median", "order-statistic", 1.0).true_value
    assert gm == pytest.approx(med, rel=1e-12)
