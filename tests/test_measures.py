"""Measures at the edges (issue 12): zero-width and NaN intervals, Monte Carlo
standard errors of every share, mean and quantile, and one quantile definition.

References are computed inside the tests (own enumeration with math.comb, scipy,
closed forms); statistical tolerances are 4 Monte Carlo standard errors, fixed seeds.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
from scipy import special, stats

from simcheck import engine
from simcheck.design import Design, PopulationSpec
from simcheck.engine.measures import Accumulator, quantiles_with_mcse
from simcheck.models import make_model

NEW_KEYS = ("miss_low_mcse", "miss_high_mcse", "margin_mean_mcse", "margin_median_mcse", "margin_p90_mcse",
            "degenerate", "degenerate_share", "degenerate_share_mcse", "not_computed")


def _within(est, ref, se, k=4.0):
    assert abs(est - ref) <= k * se + 1e-12, f"{est} vs {ref} (SE {se})"


def _wald(x, n, z):
    p = x / n
    h = z * math.sqrt(p * (1 - p) / n)
    return max(0.0, p - h), min(1.0, p + h)


def _pmf(x, n, p):
    return math.comb(n, x) * p**x * (1 - p) ** (n - x)


def _bernoulli(p, method="wald", margin=0.2):
    return Design(model=make_model({"model": "bernoulli", "p": p}), estimand="proportion", method=method,
                  margin=margin)


# --- zero-width intervals ----------------------------------------------------
def test_wald_zero_width_at_x_0_is_degenerate_and_not_assured_exact():
    # Own enumeration over Bin(20, 0.05): Wald is [0, 0] at x = 0 (and [1, 1] at
    # x = n); a zero-width interval always misses p and does not deliver the
    # promised precision, so it is counted apart and never assured.
    n, p, margin = 20, 0.05, 0.2
    z = stats.norm.ppf(0.975)
    ass = deg = 0.0
    for x in range(n + 1):
        lo, hi = _wald(x, n, z)
        hw = (hi - lo) / 2
        w = _pmf(x, n, p)
        zero = hw == 0 and not lo <= p <= hi
        deg += w * zero
        ass += w * (hw <= margin and not zero)
    assert deg == pytest.approx(0.95**20 + 0.05**20, rel=1e-12)
    r = engine.check(_bernoulli(p, margin=margin), n, rng=1)
    assert r.exact
    assert r.assurance == pytest.approx(ass, abs=1e-12)
    assert r.degenerate_share == pytest.approx(deg, abs=1e-12)
    assert r.degenerate_share_mcse == 0.0
    assert any("zero-width" in t for t in r.notes)


def test_wald_zero_width_simulated_agrees_with_enumeration():
    n, p, margin, R = 20, 0.05, 0.2, 20_000
    z = stats.norm.ppf(0.975)
    ass = sum(_pmf(x, n, p) * (0 < (_wald(x, n, z)[1] - _wald(x, n, z)[0]) / 2 <= margin) for x in range(n + 1))
    deg = 0.95**20 + 0.05**20
    r = engine.check(_bernoulli(p, margin=margin), n, replicates=R, rng=5, path="full")
    assert not r.exact
    _within(r.degenerate_share, deg, math.sqrt(deg * (1 - deg) / R))
    _within(r.assurance, ass, math.sqrt(ass * (1 - ass) / R))
    assert r.degenerate == round(r.degenerate_share * R)
    assert r.degenerate_share_mcse == pytest.approx(math.sqrt(r.degenerate_share * (1 - r.degenerate_share) / R))
    # nested curves count them the same way
    c = engine.curve(_bernoulli(p, margin=margin), [10, 20], replicates=R, rng=5, path="nested")
    _within(c.at(20).degenerate_share, deg, math.sqrt(deg * (1 - deg) / R))


def test_issue_example_fpc_zero_width_is_the_only_one_within_the_margin(tmp_path):
    # Issue 12: N = 500, 5 events, n = 100, margin 0.0135, Wald with the finite
    # population correction clipped once. Only x = 0 has a half-width within the
    # margin, and it is the zero-width [0, 0]: assurance 0, degenerate share
    # P(X = 0) = 0.326 (scipy hypergeom); the old rules gave 0.738.
    N, K, n = 500, 5, 100
    f = tmp_path / "units.csv"
    f.write_text("unit,flag\n" + "\n".join(f"{i},{int(i < K)}" for i in range(N)) + "\n")
    d = Design(model=make_model({"model": "bernoulli", "p": 0.5}), estimand="proportion", method="wald",
               margin=0.0135, population=PopulationSpec(size=N, file=str(f), column="flag"))
    r = engine.check(d, n, rng=1)
    p0 = stats.hypergeom.pmf(0, N, K, n)
    assert r.assurance == 0.0
    assert r.degenerate_share == pytest.approx(p0, rel=1e-12)


def test_zero_width_t_interval_on_discrete_data_is_degenerate():
    # Poisson mean 0.05, n = 3: all three values 0 (probability exp(-0.15)) gives
    # s = 0 and a zero-width t interval; P(all equal) = sum_k (e^-m m^k / k!)^3.
    m, n, R = 0.05, 3, 20_000
    p_eq = sum((math.exp(-m) * m**k / math.factorial(k)) ** 3 for k in range(30))
    d = Design(model=make_model({"model": "poisson", "mean": m}), method="t", margin=1.0)
    r = engine.check(d, n, replicates=R, rng=3, path="full")
    _within(r.degenerate_share, p_eq, math.sqrt(p_eq * (1 - p_eq) / R))
    assert r.assurance <= 1 - r.degenerate_share + 1e-12


def test_census_with_fpc_has_zero_width_that_covers_and_is_assured():
    # n = N: the sample is the population, the FPC interval has zero width and holds
    # the true value exactly (Cochran 1977, section 2.5: Var = 0 at n = N); that is
    # the promised precision, not a degenerate interval.
    d = Design(model=make_model({"model": "bernoulli", "p": 0.3}), estimand="proportion", method="wilson",
               margin=0.05, population=PopulationSpec(size=300))
    r = engine.check(d, 300, rng=2)
    assert r.coverage == 1.0 and r.margin_mean == 0.0 and r.assurance == 1.0 and r.degenerate_share == 0.0
    s = engine.check(d, 300, replicates=500, rng=2, path="full")
    assert s.coverage == 1.0 and s.assurance == 1.0 and s.degenerate == 0


# --- intervals that cannot be computed ---------------------------------------
def test_nan_limits_are_never_assured_and_left_out_of_the_mean():
    acc = Accumulator(1, 6, margin=1.0)
    lo = np.array([[0.0], [np.nan], [-0.1], [np.nan], [0.5], [0.2]])
    hi = np.array([[0.4], [np.nan], [0.1], [0.3], [0.5], [np.nan]])
    acc.add(lo, hi, 0.05)
    acc.finish()
    d = Design(model=make_model({"model": "normal", "mean": 0.05, "sd": 1}), method="t", margin=1.0)
    r = acc.row(0, d, 10, 6, None, "simulation")
    # by hand: computable intervals [0, .4] (covers), [-.1, .1] (covers), [.5, .5]
    # (zero width, above); NaN ones: 3, neither covering nor assured
    assert r.not_computed == 3
    assert r.coverage == pytest.approx(2 / 6)
    assert r.miss_high == pytest.approx(1 / 6) and r.miss_low == 0.0
    assert r.assurance == pytest.approx(2 / 6)
    assert r.degenerate == 1
    assert r.margin_mean == pytest.approx((0.2 + 0.1 + 0.0) / 3)
    assert any("could not be computed" in t for t in r.notes)


def test_nan_through_symmetric_path_counts_once():
    acc = Accumulator(1, 4, margin=1.0)
    centre = np.array([0.0, np.nan, 0.1, 3.0])
    half = np.array([0.5, np.nan, 0.5, 0.5])
    acc.add_symmetric(centre, half, 0.0)
    acc.finish()
    d = Design(model=make_model({"model": "normal", "mean": 0, "sd": 1}), method="t", margin=1.0)
    r = acc.row(0, d, 10, 4, None, "simulation")
    assert r.not_computed == 1 and r.coverage == 0.5 and r.miss_high == 0.25 and r.assurance == 0.75


# --- Monte Carlo standard errors ---------------------------------------------
def test_mcse_of_mean_and_quantiles_match_closed_forms():
    # Normal data, t interval: hw = c sqrt(W / df), W ~ chi2(df), c = t sigma / sqrt(n).
    # SD(hw) = c sqrt(1 - c4^2) with c4 = sqrt(2/df) Gamma((df+1)/2) / Gamma(df/2)
    # (closed form); the SE of a sample q-quantile is sqrt(q (1 - q) / m) / f(x_q)
    # (asymptotic law of order statistics; f the density of hw, by scipy).
    n, sigma, R = 8, 2.0, 40_000
    df = n - 1
    c = stats.t.ppf(0.975, df) * sigma / math.sqrt(n)
    c4 = math.sqrt(2 / df) * math.exp(special.gammaln((df + 1) / 2) - special.gammaln(df / 2))
    sd_hw = c * math.sqrt(1 - c4**2)
    d = Design(model=make_model({"model": "normal", "mean": 1.0, "sd": sigma}), method="t", margin=2.0)
    r = engine.check(d, n, replicates=R, rng=21, path="full")
    assert r.margin_mean_mcse == pytest.approx(sd_hw / math.sqrt(R), rel=0.03)
    _within(r.margin_mean, c * c4, sd_hw / math.sqrt(R))
    for q, got, se in ((0.5, r.margin_median, r.margin_median_mcse), (0.9, r.margin_p90, r.margin_p90_mcse)):
        x_q = c * math.sqrt(stats.chi2.ppf(q, df) / df)
        # density of hw = c sqrt(W/df) at x: chi2 pdf at w = df (x/c)^2 times dw/dx = 2 df x / c^2
        dens = stats.chi2.pdf(df * (x_q / c) ** 2, df) * 2 * df * x_q / c**2
        ref_se = math.sqrt(q * (1 - q) / R) / dens
        assert se == pytest.approx(ref_se, rel=0.2)
        _within(got, x_q, ref_se)
    p = r.miss_low
    assert r.miss_low_mcse == pytest.approx(math.sqrt(p * (1 - p) / R), rel=1e-12)
    p = r.miss_high
    assert r.miss_high_mcse == pytest.approx(math.sqrt(p * (1 - p) / R), rel=1e-12)


def test_mcse_keys_in_check_json_and_curve_rows():
    d = Design(model=make_model({"model": "lognormal", "mean": 6.0, "cv": 1.2}), method="t", margin=1.0)
    r = engine.check(d, 30, replicates=2000, rng=2)
    j = json.loads(json.dumps(r.to_dict()))
    for k in NEW_KEYS:
        assert k in j, k
    assert all(j[k] > 0 for k in ("miss_low_mcse", "miss_high_mcse", "margin_mean_mcse", "margin_median_mcse",
                                  "margin_p90_mcse"))
    rows = engine.curve(d, [10, 20, 30], replicates=2000, rng=2).to_dict()["rows"]
    assert all(k in row for row in rows for k in NEW_KEYS)
    ex = engine.check(_bernoulli(0.3, "wilson", 0.1), 50, rng=1).to_dict()
    assert ex["exact"] and all(ex[k] == 0.0 for k in ("miss_low_mcse", "miss_high_mcse", "margin_mean_mcse",
                                                       "margin_median_mcse", "margin_p90_mcse"))


def test_mcse_of_the_mean_agrees_with_spread_over_seeds():
    # Independent check of margin_mean_mcse on skewed data: the SD of margin_mean
    # over 40 independent seeds (its own SE ~ 11%) against the reported MCSE.
    d = Design(model=make_model({"model": "lognormal", "mean": 6.0, "cv": 2.0}), method="t", margin=1.0)
    rs = [engine.check(d, 20, replicates=1000, rng=s, path="full") for s in range(40)]
    spread = float(np.std([r.margin_mean for r in rs], ddof=1))
    reported = float(np.mean([r.margin_mean_mcse for r in rs]))
    assert reported == pytest.approx(spread, rel=0.45)


# --- one quantile definition -------------------------------------------------
def test_quantile_is_the_inverse_cdf_definition():
    # Hyndman & Fan (1996), The American Statistician 50:361-365, definition 1:
    # the smallest x with F(x) >= q; numpy method "inverted_cdf" is the same.
    v = np.array([[4.0], [1.0], [3.0], [2.0]])
    q, _ = quantiles_with_mcse(v, (0.5, 0.9))
    assert q[0, 0] == 2.0 and q[1, 0] == 4.0  # linear interpolation would give 2.5 and 3.7
    rng = np.random.default_rng(0)
    for m in (1, 7, 10, 2000, 2001):
        x = rng.gamma(2.0, size=(m, 3))
        q, _ = quantiles_with_mcse(x, (0.5, 0.9))
        np.testing.assert_array_equal(q, np.quantile(x, [0.5, 0.9], axis=0, method="inverted_cdf"))
    # the engine: 4 replicates, median = 2nd smallest half-width, p90 = the largest
    d = Design(model=make_model({"model": "lognormal", "mean": 6.0, "cv": 1.2}), method="t", margin=1.0)
    r = engine.check(d, 10, replicates=4, rng=1, path="full")
    v = np.sort(r.margin_values)
    assert r.margin_median == v[1] and r.margin_p90 == v[3]


def test_simulated_and_exact_quantiles_agree_on_discrete_half_widths():
    # Wald on Bin(12, 0.25): the half-width takes 13 values. With the same (inverse
    # CDF) definition the simulated median and 90th percentile equal the exact ones
    # whenever the cumulative probability is not within a few MCSE of 0.5 / 0.9.
    n, p, R = 12, 0.25, 20_000
    z = stats.norm.ppf(0.975)
    pairs = sorted(((_wald(x, n, z)[1] - _wald(x, n, z)[0]) / 2, _pmf(x, n, p)) for x in range(n + 1))
    cum = np.cumsum([w for _, w in pairs])
    for q in (0.5, 0.9):
        assert np.min(np.abs(cum - q)) > 6 * math.sqrt(q * (1 - q) / R)
    ex = engine.check(_bernoulli(p), n, rng=1)
    sim = engine.check(_bernoulli(p), n, replicates=R, rng=4, path="full")
    own = {q: pairs[int(np.searchsorted(cum, q))][0] for q in (0.5, 0.9)}
    assert ex.margin_median == pytest.approx(own[0.5], rel=1e-12)
    assert ex.margin_p90 == pytest.approx(own[0.9], rel=1e-12)
    assert sim.margin_median == pytest.approx(own[0.5], rel=1e-6)  # float32 storage
    assert sim.margin_p90 == pytest.approx(own[0.9], rel=1e-6)


def test_pooled_checks_recompute_every_mcse():
    from simcheck.engine.measures import pool_checks

    d = Design(model=make_model({"model": "gamma", "mean": 3.0, "cv": 1.0}), method="t", margin=1.0)
    a = engine.check(d, 15, replicates=3000, rng=1, path="full")
    b = engine.check(d, 15, replicates=5000, rng=2, path="full")
    both = engine.check(d, 15, replicates=8000, rng=1, path="full")
    p = pool_checks(a, b)
    assert p.replicates == 8000
    assert p.margin_mean == pytest.approx((3000 * a.margin_mean + 5000 * b.margin_mean) / 8000, rel=1e-12)
    # the pooled MCSE behaves like that of one run of 8000 replicates
    assert p.margin_mean_mcse == pytest.approx(both.margin_mean_mcse, rel=0.1)
    assert p.miss_low_mcse == pytest.approx(math.sqrt(p.miss_low * (1 - p.miss_low) / 8000), rel=1e-12)
    assert p.margin_median_mcse is not None and p.margin_median_mcse < a.margin_median_mcse
