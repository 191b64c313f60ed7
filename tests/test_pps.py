"""Selection with probability proportional to size: Hansen-Hurwitz and monetary-unit limits.

References used inside the tests (each computed here, never by calling back into
the function under test):

* Hansen, M. H. & Hurwitz, W. N. (1943). On the theory of sampling from finite
  populations. Annals of Mathematical Statistics 14, 333-362; Cochran, W. G. (1977).
  Sampling Techniques, 3rd ed., ch. 9A (from memory): with n draws with replacement
  and draw probabilities p_i, Y_hat = mean(y_i / p_i) is unbiased for Y, with
  variance sum_i p_i (y_i / p_i - Y)^2 / n, and v = sum (z_j - Y_hat)^2 / (n (n - 1))
  is unbiased for it.
* The Stringer bound: BV [u(0) + sum_j (u(j) - u(j - 1)) t_(j)] with taints largest
  first (Stringer 1963; Leslie, Teitlebaum & Anderson 1979; the formula from memory),
  u(j) the 95% Poisson factors 3.00, 4.75, 6.30, 7.76 divided by n (the usual table of
  audit practice, "common practice"; two decimals) or the one-sided Clopper-Pearson
  limit (scipy's beta quantile).
* Poisson upper limits: chi2.ppf(c, 2k + 2) / 2 (the chi-square form of the gamma
  quantile, common practice); the law of the number of misstated units drawn is
  Binomial(n, pi) with pi the misstated share of the book value (draws with replacement).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats

from simcheck import engine
from simcheck.design import Design, PopulationSpec, SelectionSpec
from simcheck.intervals import pps as ipps
from simcheck.models import make_model


def _population(seed: int = 3, N: int = 40):
    g = np.random.default_rng(seed)
    x = g.lognormal(3.0, 0.8, N)
    y = x * g.gamma(4.0, 0.25, N) + g.normal(0, 2.0, N)  # values roughly proportional to size
    return x, y


# --- the Hansen-Hurwitz estimator -----------------------------------------------------
def test_hansen_hurwitz_is_unbiased_and_its_variance_estimator_matches_the_exact_variance():
    x, y = _population()
    N, n, R = x.size, 8, 200_000
    p = x / x.sum()
    Y = y.sum()
    V_exact = float(np.sum(p * (y / p - Y) ** 2) / n)  # Hansen & Hurwitz (1943); Cochran (1977) 9A
    g = np.random.default_rng(11)
    idx = g.choice(N, size=(R, n), p=p)  # draws with replacement, written here with numpy
    est, v = ipps.hansen_hurwitz(y[idx] / p[idx])
    # unbiased: within 4 Monte Carlo SE of the true total
    assert abs(est.mean() - Y) <= 4 * est.std(ddof=1) / math.sqrt(R)
    # the variance estimator is unbiased for the exact variance
    assert abs(v.mean() - V_exact) <= 4 * v.std(ddof=1) / math.sqrt(R)
    # and the estimates' own spread is the exact variance (SE of a sample variance: sqrt((m4 - s^4) / R))
    d = est - est.mean()
    s2 = float(np.mean(d**2))
    se_s2 = math.sqrt((np.mean(d**4) - s2**2) / R)
    assert abs(s2 - V_exact) <= 4 * se_s2


def test_hansen_hurwitz_is_exact_when_values_are_proportional_to_size():
    x = np.array([1.0, 2.0, 5.0, 12.0])
    y = 3.5 * x
    p = x / x.sum()
    idx = np.random.default_rng(1).choice(4, size=(50, 6), p=p)
    est, v = ipps.hansen_hurwitz(y[idx] / p[idx])
    assert np.allclose(est, y.sum()) and np.allclose(v, 0.0, atol=1e-9)


def test_hh_interval_quantiles_are_t_and_z():
    z = np.array([[10.0, 12.0, 9.0, 13.0, 11.0]])
    est, lo, hi = ipps.hh_interval(z, 0.9, "t")
    se = z.std(ddof=1) / math.sqrt(5)
    assert est[0] == pytest.approx(11.0)
    assert hi[0] - est[0] == pytest.approx(stats.t.ppf(0.95, 4) * se, rel=1e-12)
    _, lo, hi = ipps.hh_interval(z, 0.9, "z")
    assert hi[0] - lo[0] == pytest.approx(2 * stats.norm.ppf(0.95) * se, rel=1e-12)


# --- the engine: PPS from a file, against an independent simulation --------------------
def _pps_file(tmp_path, x, y):
    path = tmp_path / "items.csv"
    path.write_text("size,value\n" + "".join(f"{float(a)!r},{float(b)!r}\n" for a, b in zip(x, y)), encoding="utf-8")
    return path


@pytest.mark.parametrize("method", ["z", "t"])
def test_engine_pps_coverage_matches_an_independent_simulation(tmp_path, method):
    x, y = _population(5, 60)
    path = _pps_file(tmp_path, x, y)
    conf, n, R = 0.9, 6, 40_000
    d = Design(model=make_model({"model": "normal", "mean": float(y.mean()), "sd": float(y.std(ddof=1))}),
               estimand="total", method=method, confidence=conf, margin=float(y.sum()) * 0.2,
               population=PopulationSpec(size=60, file=str(path), column="value"),
               selection=SelectionSpec(rule="pps", size_column="size"))
    r = engine.check(d, n, replicates=R, rng=8)
    assert r.true_value == pytest.approx(y.sum())
    # reference written here: numpy's weighted choice, the estimator and interval by hand
    p = x / x.sum()
    g = np.random.default_rng(99)
    zz = (y / p)[g.choice(60, size=(R, n), p=p)]
    est = zz.mean(axis=1)
    se = zz.std(axis=1, ddof=1) / math.sqrt(n)
    q = stats.t.ppf(0.95, n - 1) if method == "t" else stats.norm.ppf(0.95)
    cov_ref = float(np.mean(np.abs(est - y.sum()) <= q * se))
    ass_ref = float(np.mean(q * se <= d.margin))
    tol = 4 * math.sqrt(2 * cov_ref * (1 - cov_ref) / R)
    assert abs(r.coverage - cov_ref) <= tol
    assert abs(r.assurance - ass_ref) <= 4 * math.sqrt(2 * ass_ref * (1 - ass_ref) / R)
    assert r.margin_mean == pytest.approx(float(np.mean(q * se)), rel=0.03)


def test_engine_mean_is_total_over_N(tmp_path):
    x, y = _population(5, 60)
    path = _pps_file(tmp_path, x, y)
    base = dict(model=make_model({"model": "normal", "mean": 1.0, "sd": 1.0}), method="t",
                population=PopulationSpec(size=60, file=str(path), column="value"),
                selection=SelectionSpec(rule="pps", size_column="size"))
    tot = engine.check(Design(estimand="total", margin=600.0, **base), 10, replicates=2000, rng=2)
    mean = engine.check(Design(estimand="mean", margin=10.0, **base), 10, replicates=2000, rng=2)
    assert mean.true_value == pytest.approx(y.mean()) and tot.true_value == pytest.approx(y.sum())
    assert mean.coverage == tot.coverage and mean.assurance == tot.assurance
    assert mean.margin_mean == pytest.approx(tot.margin_mean / 60, rel=1e-12)


# --- the Stringer bound ----------------------------------------------------------------
def test_stringer_bound_worked_example_with_poisson_factors():
    # n = 100 units of a book value of 1,000,000; three misstatements with taints 0.5, 0.2, 1.0.
    # Computed by hand with the 95% Poisson factors 3.00, 4.75, 6.30, 7.76 (common practice):
    # taints largest first: 1.0, 0.5, 0.2
    # UL = 1e6 / 100 x [3.00 + (4.75 - 3.00) 1.0 + (6.30 - 4.75) 0.5 + (7.76 - 6.30) 0.2]
    #    = 10,000 x [3.00 + 1.75 + 0.775 + 0.292] = 10,000 x 5.817 = 58,170
    taints = np.zeros((1, 100))
    taints[0, [7, 30, 64]] = [0.5, 0.2, 1.0]
    ul = ipps.stringer_bound(taints, 1_000_000.0, 0.95, factors="poisson")
    # the table's factors are rounded to two decimals: 4 factors x 0.005 x 10,000 at most
    assert ul[0] == pytest.approx(58_170.0, abs=200.0)
    # with unrounded factors (chi-square form of the Poisson limit) the same sum is exact
    f = [stats.chi2.ppf(0.95, 2 * k + 2) / 2 for k in range(4)]
    exact = 10_000 * (f[0] + (f[1] - f[0]) * 1.0 + (f[2] - f[1]) * 0.5 + (f[3] - f[2]) * 0.2)
    assert ul[0] == pytest.approx(exact, rel=1e-9)


def test_stringer_bound_with_binomial_limits_and_no_errors():
    n, BV = 60, 500_000.0
    taints = np.zeros((2, n))
    taints[1, :2] = [0.25, 0.9]
    ul = ipps.stringer_bound(taints, BV, 0.9, factors="binomial")
    u = [stats.beta.ppf(0.9, k + 1, n - k) for k in range(3)]  # one-sided Clopper-Pearson
    assert ul[0] == pytest.approx(BV * u[0], rel=1e-10)
    assert ul[0] == pytest.approx(BV * (1 - 0.1 ** (1 / n)), rel=1e-10)  # zero errors: 1 - alpha^(1/n)
    assert ul[1] == pytest.approx(BV * (u[0] + (u[1] - u[0]) * 0.9 + (u[2] - u[1]) * 0.25), rel=1e-10)


def test_count_bounds_and_sample_size():
    n, BV = 80, 2_000_000.0
    k = np.array([0, 1, 3])
    assert ipps.count_bound(k, n, BV, 0.95, "poisson") == pytest.approx(BV * stats.chi2.ppf(0.95, 2 * k + 2) / 2 / n)
    assert ipps.count_bound(k, n, BV, 0.95, "binomial") == pytest.approx(BV * stats.beta.ppf(0.95, k + 1, n - k))
    # Poisson-based n for zero expected errors: BV x 3.0 / TM at 95% (R = -ln 0.05)
    nn, raw, R = ipps.monetary_unit_n(BV, 60_000.0, 0.95)
    assert R == pytest.approx(-math.log(0.05)) and nn == math.ceil(BV * -math.log(0.05) / 60_000.0)


# --- monetary-unit sampling in the engine ----------------------------------------------
def _ledger_file(tmp_path, N=300, seed=4):
    bv = np.round(np.random.default_rng(seed).lognormal(6.0, 1.0, N), 2)
    path = tmp_path / "ledger.csv"
    path.write_text("book\n" + "".join(f"{float(v)!r}\n" for v in bv), encoding="utf-8")
    return path, bv


def _mus(path, N, method, rate, taint=1.0, margin=None, conf=0.95):
    return Design(model=make_model({"model": "normal", "mean": 1.0, "sd": 1.0}), estimand="total", method=method,
                  bound="upper", confidence=conf, margin=margin,
                  population=PopulationSpec(size=N, file=str(path), column="book"),
                  selection=SelectionSpec(rule="monetary-unit", error_rate=rate, taint=taint))


@pytest.mark.parametrize("n", [30, 47, 120])
def test_poisson_bound_on_a_ledger_without_errors_is_what_the_exact_law_says(tmp_path, n):
    path, bv = _ledger_file(tmp_path)
    BV = float(bv.sum())
    R_factor = stats.chi2.ppf(0.95, 2) / 2  # Poisson limit for zero errors (= -ln 0.05)
    TM = BV * R_factor / 60.5  # the exact law: margin BV R / n <= TM exactly when n >= 60.5
    r = engine.check(_mus(path, bv.size, "poisson-bound", 0.0, margin=TM), n, replicates=3000, rng=6)
    # no misstatement: every sample finds none, the limit BV R / n covers the true 0 always
    assert r.true_value == 0.0 and r.coverage == 1.0 and r.miss_low == 0.0
    assert r.margin_mean == pytest.approx(BV * R_factor / n, rel=1e-12)
    for v in (r.margin_median, r.margin_p90):  # quantiles come from half-widths kept as float32
        assert v == pytest.approx(BV * R_factor / n, rel=1e-6)
    assert r.assurance == (1.0 if n >= 60.5 else 0.0)


def test_poisson_and_binomial_bounds_coverage_against_the_binomial_law(tmp_path):
    # every misstated item is wholly misstated (taint 1): the number of misstated units drawn
    # is Binomial(n, pi), pi = misstated share of the book value (= true total / BV)
    path, bv = _ledger_file(tmp_path, N=400, seed=9)
    BV, n, conf, R = float(bv.sum()), 40, 0.9, 40_000
    for method in ("poisson-bound", "binomial-bound"):
        d = _mus(path, bv.size, method, 0.08, conf=conf)
        exact = engine.check(d, n, rng=12)  # a constant taint: the engine sums over the count itself
        sim = engine.check(d, n, replicates=R, rng=12, path="full")
        pi = exact.true_value / BV
        k = np.arange(n + 1)
        if method == "poisson-bound":
            ul = stats.chi2.ppf(conf, 2 * k + 2) / 2 / n
        else:
            ul = np.where(k < n, stats.beta.ppf(conf, k + 1, np.maximum(n - k, 1)), 1.0)
        cov = float(stats.binom.pmf(k, n, pi)[ul >= pi].sum())
        assert 0 < pi < 0.5 and cov < 0.99
        assert exact.exact and exact.coverage_mcse == 0.0
        assert exact.coverage == pytest.approx(cov, abs=1e-12), method
        assert sim.true_value == exact.true_value and not sim.exact
        assert abs(sim.coverage - cov) <= 4 * math.sqrt(cov * (1 - cov) / R), method


@pytest.mark.parametrize("method", ["stringer", "stringer-poisson", "binomial-bound", "poisson-bound", "t", "z"])
def test_exact_path_of_a_constant_taint_agrees_with_simulation(tmp_path, method):
    path, bv = _ledger_file(tmp_path, N=400, seed=9)
    d = _mus(path, bv.size, method, 0.06, taint=0.4, conf=0.9, margin=float(bv.sum()) * 0.06)
    e = engine.check(d, 50, rng=3)
    s = engine.check(d, 50, replicates=20_000, rng=3, path="full")
    assert e.exact and not s.exact and e.true_value == s.true_value
    for a, b, se in ((e.coverage, s.coverage, s.coverage_mcse), (e.assurance, s.assurance, s.assurance_mcse),
                     (e.margin_mean, s.margin_mean, s.margin_mean_mcse)):
        assert abs(a - b) <= 4 * se + 1e-9, method


def test_stringer_covers_and_is_tighter_than_the_poisson_bound(tmp_path):
    path, bv = _ledger_file(tmp_path, N=400, seed=9)
    base = dict(rate=0.05, taint=make_model({"model": "beta", "mean": 0.35, "sd": 0.2}), margin=float(bv.sum()) * 0.1)
    s = engine.check(_mus(path, bv.size, "stringer", **base), 80, replicates=4000, rng=3)
    p = engine.check(_mus(path, bv.size, "poisson-bound", **base), 80, replicates=4000, rng=3)
    assert s.true_value == p.true_value > 0
    assert s.coverage >= 0.95 - 4 * s.coverage_mcse  # conservative in practice (de Jager et al. 1997)
    assert s.margin_mean < p.margin_mean
    assert any("share of samples whose upper limit is at most the target margin" in t for t in s.notes)


def _stringer_by_hand(taints_row, BV, conf):
    """The Stringer bound of one sample, written out: Clopper-Pearson limits from scipy's beta law."""
    n = len(taints_row)
    t = sorted((v for v in taints_row if v > 0), reverse=True)
    u = [stats.beta.ppf(conf, j + 1, n - j) if j < n else 1.0 for j in range(len(t) + 1)]
    return BV * (u[0] + sum((u[j] - u[j - 1]) * t[j - 1] for j in range(1, len(t) + 1)))


@pytest.mark.slow
def test_engine_stringer_against_an_independent_simulation(tmp_path):
    # the engine's ledger (book values from a file, misstatements drawn once from the seed) is
    # the input; the samples (numpy's weighted choice) and the bound (_stringer_by_hand) are
    # written here
    from simcheck.engine.pps import population_for

    path, bv = _ledger_file(tmp_path, N=200, seed=21)
    BV, n, conf = float(bv.sum()), 25, 0.6  # a low level, so that the conservative bound misses at times
    d = _mus(path, bv.size, "stringer", 0.3, taint=make_model({"model": "uniform", "lower": 0.1, "upper": 0.9}),
             conf=conf, margin=BV * 0.042)  # near the median margin: an informative assurance
    r = engine.check(d, n, replicates=20_000, rng=5)
    ledger = population_for(d, 5)
    taint = ledger.values / ledger.sizes
    D = float(ledger.values.sum())
    assert r.true_value == pytest.approx(D) and np.allclose(ledger.sizes, bv)
    R = 4000
    idx = np.random.default_rng(77).choice(bv.size, size=(R, n), p=bv / BV)
    ul = np.array([_stringer_by_hand(row, BV, conf) for row in taint[idx]])
    margin = ul - BV * taint[idx].mean(axis=1)
    cov_ref = float(np.mean(ul >= D))
    assert 0.5 < cov_ref < 1.0  # a case where the bound can miss
    assert abs(r.coverage - cov_ref) <= 4 * math.sqrt(cov_ref * (1 - cov_ref) / R + r.coverage_mcse**2)
    se = math.sqrt(margin.var(ddof=1) / R + r.margin_mean_mcse**2)
    assert abs(r.margin_mean - margin.mean()) <= 4 * se
    ass_ref = float(np.mean(margin <= d.margin))
    assert 0.1 < ass_ref < 0.9
    assert abs(r.assurance - ass_ref) <= 4 * math.sqrt(ass_ref * (1 - ass_ref) / R + r.assurance_mcse**2)


def test_exact_search_matches_a_brute_force_over_the_binomial_law(tmp_path):
    # the search's window criterion (targets hold at every n from n to ceil(1.25 n)) written
    # out over the exact law: k ~ Binomial(n, pi), limit BV Gamma_c(k + 1) / n (chi-square form),
    # margin = limit - BV tau k / n
    from simcheck.engine.pps import population_for
    from simcheck.search import find_n

    path, bv = _ledger_file(tmp_path, N=500, seed=2)
    BV, tau, conf, TM, a_t, tol = float(bv.sum()), 0.5, 0.95, float(bv.sum()) * 0.05, 0.8, 0.005
    d = _mus(path, bv.size, "poisson-bound", 0.03, taint=tau, conf=conf, margin=TM)
    ledger = population_for(d, 31)
    D = float(ledger.values.sum())
    pi = float(bv[ledger.values > 0].sum() / BV)

    def passes(n):
        k = np.arange(n + 1)
        w = stats.binom.pmf(k, n, pi)
        ul = BV * stats.chi2.ppf(conf, 2 * k + 2) / 2 / n
        cov = w[ul >= D].sum()
        ass = w[ul - BV * tau * k / n <= TM * (1 + 1e-12)].sum()
        return cov >= conf - tol and ass >= a_t

    ok = {n: passes(n) for n in range(2, 500)}
    want = next(n for n in range(2, 400) if all(ok[m] for m in range(n, math.ceil(1.25 * n) + 1)))
    res = find_n(d, assurance=a_t, coverage_tolerance=tol, n_min=2, n_max=499, rng=31)
    assert 20 < want < 400 and res.exact and res.n == want
