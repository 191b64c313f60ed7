"""Rates per unit of exposure: estimands ``rate`` and ``rate-ratio``.

Every reference is written here, independently of simcheck: Garwood limits
from scipy's chi-square law, the score and Wald limits from their formulas,
the conditional intervals from scipy's binomial confidence intervals, exact
coverage by enumerating the Poisson (or negative-binomial) law of the totals,
over-dispersion by a plain numpy simulation. Sources beside each check.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
from scipy import stats

from fixtures import run_cli, write_toml
from simcheck import engine
from simcheck.estimands import formula_for
from simcheck.intervals import get_method
from simcheck.intervals.base import Sample
from simcheck.intervals.rates import (
    midp_total, byar_total, conditional_exact_totals, garwood_total, score_ratio_totals, score_total, wald_ratio_totals, wald_total,
)
from simcheck.intervals.rate_diff import score_diff_totals, wald_diff_totals
from simcheck.scenario import scenario_from_dict

Z95 = 1.959963984540054


def rate_table(**over):
    t = {
        "title": "Infections per catheter-day (invented example)",
        "target": {"estimand": "rate", "confidence": 0.95, "margin": 0.1, "exposure": 2.0},
        "data": {"model": "poisson", "mean": 0.6},
        "method": {"interval": "garwood"},
        "simulation": {"replicates": 4000, "seed": 11, "n_max": 2000},
    }
    for k, v in over.items():
        sec, key = k.split("__")
        t.setdefault(sec, {})[key] = v
    return t


def ratio_table(**over):
    t = {
        "title": "Falls per person-year, two wards (invented example)",
        "target": {"estimand": "rate-ratio", "confidence": 0.95, "margin": 1.5, "exposure": 0.5},
        "data": {"a": {"model": "poisson", "mean": 1.0}, "b": {"model": "poisson", "mean": 1.5}},
        "method": {"interval": "conditional-exact"},
        "simulation": {"replicates": 4000, "seed": 12, "n_max": 2000, "ratio": 1.5},
    }
    for k, v in over.items():
        sec, key = k.split("__")
        t.setdefault(sec, {})[key] = v
    return t


def design_of(table):
    return scenario_from_dict(table).design


# ------------------------------------------------------------------ one rate: limits
@pytest.mark.parametrize("conf", [0.9, 0.95, 0.99])
def test_garwood_limits_are_the_chi_square_limits(conf):
    # Garwood (1936), Biometrika 28:437-442; Ulm (1990), Am. J. Epidemiol. 131:373-375:
    # lower chi2_{a/2}(2x) / 2, upper chi2_{1-a/2}(2x + 2) / 2 (lower 0 at x = 0)
    x = np.array([0, 1, 2, 5, 10, 37, 200, 5000])
    e = 3.5
    a = 1 - conf
    lo_ref = np.where(x > 0, stats.chi2.ppf(a / 2, 2 * np.maximum(x, 1)) / 2, 0.0) / e
    hi_ref = stats.chi2.ppf(1 - a / 2, 2 * x + 2) / 2 / e
    lo, hi = garwood_total(x, e, conf)
    np.testing.assert_allclose(lo, lo_ref, rtol=1e-10)
    np.testing.assert_allclose(hi, hi_ref, rtol=1e-10)


def test_garwood_published_values():
    # 95% exact limits for a Poisson count, as tabulated (Breslow & Day 1987 vol. II; from memory)
    # and the x = 0 upper limit 3.689 stated in the epitools documentation (pois.exact)
    lo, hi = garwood_total(np.array([0, 1, 2, 10]), 1.0, 0.95)
    assert hi[0] == pytest.approx(3.689, abs=5e-4)
    assert (lo[1], hi[1]) == pytest.approx((0.0253, 5.572), abs=5e-4)
    assert (lo[2], hi[2]) == pytest.approx((0.242, 7.225), abs=5e-4)
    assert (lo[3], hi[3]) == pytest.approx((4.795, 18.39), abs=5e-3)


def test_byar_formula_and_its_published_accuracy():
    # Byar's approximation (Breslow & Day 1987 vol. II, from memory), written out
    x = np.arange(1, 3001.0)
    lo, hi = byar_total(x, 2.0, 0.95)
    ref_lo = x * (1 - 1 / (9 * x) - Z95 / (3 * np.sqrt(x))) ** 3 / 2.0
    ref_hi = (x + 1) * (1 - 1 / (9 * (x + 1)) + Z95 / (3 * np.sqrt(x + 1))) ** 3 / 2.0
    np.testing.assert_allclose(lo, np.maximum(ref_lo, 0), rtol=1e-12)
    np.testing.assert_allclose(hi, ref_hi, rtol=1e-12)
    # "Byar's method is within 0.2% of the exact value for numerators of 10 or more" (95%):
    # Public Health England (2018), Technical Guide: Confidence Intervals, Appendix 1
    g_lo = stats.chi2.ppf(0.025, 2 * x) / 2 / 2.0
    g_hi = stats.chi2.ppf(0.975, 2 * x + 2) / 2 / 2.0
    big = x >= 10
    assert np.max(np.abs(lo[big] / g_lo[big] - 1)) < 0.002
    assert np.max(np.abs(hi[big] / g_hi[big] - 1)) < 0.002
    assert byar_total(np.array([0.0]), 1.0, 0.95)[0][0] == 0.0


def test_score_limits_solve_the_score_equation_and_wald_formula():
    # the score interval: both limits mu solve (x - mu)^2 / mu = z^2 (common practice)
    x = np.array([0.0, 1, 4, 30, 900])
    lo, hi = score_total(x, 1.0, 0.95)
    for mu in (lo[1:], hi):
        np.testing.assert_allclose((x[-mu.size:] - mu) ** 2 / mu, Z95 ** 2, rtol=1e-9)
    assert lo[0] == 0.0 and hi[0] == pytest.approx(Z95 ** 2)
    wl, wh = wald_total(x, 4.0, 0.95)
    np.testing.assert_allclose(wh, (x + Z95 * np.sqrt(x)) / 4.0)
    np.testing.assert_allclose(wl, np.maximum(x - Z95 * np.sqrt(x), 0) / 4.0)


def _midp_reference(x, e, conf):
    """Mid-p limits solved one by one with brentq on scipy's Poisson law (Berry & Armitage 1995, from memory)."""
    from scipy.optimize import brentq

    a2 = (1 - conf) / 2
    lo, hi = [], []
    for k in np.asarray(x, dtype=float):
        top = k + 40 * math.sqrt(k + 1) + 40
        hi.append(brentq(lambda m: stats.poisson.cdf(k - 1, m) + 0.5 * stats.poisson.pmf(k, m) - a2, 1e-12, top,
                         xtol=1e-14, rtol=1e-14))
        lo.append(0.0 if k == 0 else brentq(lambda m: stats.poisson.sf(k, m) + 0.5 * stats.poisson.pmf(k, m) - a2,
                                            1e-12, k, xtol=1e-14, rtol=1e-14))
    return np.array(lo) / e, np.array(hi) / e


def test_midp_limits_against_brentq_and_the_zero_count():
    x = np.array([0.0, 1, 2, 7, 30, 400])
    lo, hi = midp_total(x, 2.5, 0.95)
    ref_lo, ref_hi = _midp_reference(x, 2.5, 0.95)
    np.testing.assert_allclose(lo, ref_lo, rtol=1e-9, atol=1e-15)
    np.testing.assert_allclose(hi, ref_hi, rtol=1e-9)
    # x = 0: half of P(X = 0) = e^-mu is alpha/2, so the upper limit is ln(1 / alpha) = ln 20 (written out)
    assert hi[0] * 2.5 == pytest.approx(math.log(20.0), rel=1e-12)


def test_raw_form_sums_the_units():
    counts = np.array([[0, 2, 1, 3], [0, 0, 0, 0]], dtype=float)
    s = Sample(x=counts, n=4, params={"exposure": 2.5})
    lo, hi = get_method("rate", "garwood").func(s, 0.95)
    ref = garwood_total(np.array([6.0, 0.0]), 10.0, 0.95)
    np.testing.assert_allclose(lo, ref[0])
    np.testing.assert_allclose(hi, ref[1])


# ------------------------------------------------------------------ one rate: exact paths
def _poisson_enumeration(n, mu, t, conf, margin, limits):
    """Coverage, mean half-width and assurance by summing over the Poisson(n mu) total (own enumeration)."""
    lam = n * mu
    x = np.arange(0, int(lam + 12 * math.sqrt(lam) + 30))  # the tail left out is below 1e-20
    w = stats.poisson.pmf(x, lam)
    lo, hi = limits(x.astype(float), n * t, conf)
    rate = mu / t
    hw = (hi - lo) / 2
    cov = w[(lo <= rate) & (rate <= hi)].sum()
    zero_miss = (hw <= 0) & ~((lo <= rate) & (rate <= hi))
    return cov, float(np.dot(w, hw)), w[(hw <= margin) & ~zero_miss].sum()


def _chi2_limits(x, e, conf):
    a = 1 - conf
    lo = np.where(x > 0, stats.chi2.ppf(a / 2, 2 * np.maximum(x, 1)) / 2, 0.0)
    return lo / e, stats.chi2.ppf(1 - a / 2, 2 * x + 2) / 2 / e


def _wald_written_out(x, e, conf):
    z = stats.norm.ppf(0.5 + conf / 2)
    return np.maximum(x - z * np.sqrt(x), 0) / e, (x + z * np.sqrt(x)) / e


@pytest.mark.parametrize("method, limits", [("garwood", _chi2_limits), ("wald", _wald_written_out),
                                           ("mid-p", _midp_reference)])
def test_exact_path_equals_own_enumeration(method, limits):
    d = design_of(rate_table(method__interval=method, target__margin=0.2))
    for n in (3, 25, 140):
        r = engine.check(d, n, path="exact")
        cov, mean_hw, assured = _poisson_enumeration(n, 0.6, 2.0, 0.95, 0.2, limits)
        assert r.exact and r.coverage == pytest.approx(cov, abs=1e-12)
        assert r.margin_mean == pytest.approx(mean_hw, rel=1e-10)
        assert r.assurance == pytest.approx(assured, abs=1e-12)


def test_garwood_never_below_nominal_on_poisson_data():
    # the exact interval is conservative for every Poisson mean (Garwood 1936)
    d = design_of(rate_table())
    rows = engine.curve(d, range(2, 120), path="exact").rows
    assert min(r.coverage for r in rows) >= 0.95 - 1e-12


@pytest.mark.parametrize("method", ["garwood", "score", "byar", "mid-p"])
def test_simulated_path_agrees_with_exact(method):
    d = design_of(rate_table(method__interval=method))
    ex = engine.check(d, 30, path="exact")
    sim = engine.check(d, 30, replicates=6000, rng=5, path="full")
    assert abs(sim.coverage - ex.coverage) <= 4 * math.sqrt(ex.coverage * (1 - ex.coverage) / 6000)
    assert abs(sim.margin_mean - ex.margin_mean) <= 4 * sim.margin_mean_mcse


def test_negative_binomial_counts_make_poisson_methods_under_cover():
    # the sum of n NB(k, p) counts is NB(n k, p); an independent numpy simulation of the
    # n per-unit counts (Cameron & Trivedi 2013, sec. 3.3: var mu + mu^2 / k) gives the reference
    mu, k, t, n, R = 2.0, 0.8, 1.0, 60, 6000
    d = design_of(rate_table(data__model="negative-binomial", data__mean=mu, data__dispersion=k,
                             target__exposure=t, target__margin=0.5))
    ex = engine.check(d, n, path="exact")
    g = np.random.default_rng(20261202)
    p = k / (k + mu)
    totals = g.negative_binomial(k, p, size=(R, n)).sum(axis=1)
    lo, hi = _chi2_limits(totals.astype(float), n * t, 0.95)
    cov = np.mean((lo <= mu / t) & (mu / t <= hi))
    assert abs(ex.coverage - cov) <= 4 * math.sqrt(cov * (1 - cov) / R)
    assert ex.coverage < 0.85  # far below the nominal 0.95
    # the t interval on the units' counts estimates the variance and keeps close to nominal
    tt = engine.check(d.with_method("t"), n, replicates=R, rng=3)
    assert tt.coverage > 0.9


# ------------------------------------------------------------------ rate ratio
def test_conditional_limits_equal_scipy_binomial_limits_mapped():
    # conditional on N = xa + xb, xa ~ Bin(N, pi), pi = RR ea / (RR ea + eb) (Breslow & Day 1987,
    # from memory); Clopper-Pearson and Wilson limits for pi from scipy.stats.binomtest
    ea, eb = 12.0, 30.0
    for xa, xb in [(3, 9), (17, 4), (40, 61), (1, 0), (0, 5)]:
        res = stats.binomtest(xa, xa + xb)
        for method, func in (("exact", conditional_exact_totals), ("wilson", score_ratio_totals)):
            ci = res.proportion_ci(0.95, method=method)
            lo, hi = func(np.array([xa]), ea, np.array([xb]), eb, 0.95)
            ref_lo = ci.low / (1 - ci.low) * eb / ea
            ref_hi = ci.high / (1 - ci.high) * eb / ea if ci.high < 1 else math.inf
            assert lo[0] == pytest.approx(ref_lo, rel=1e-8, abs=1e-14)
            assert hi[0] == pytest.approx(ref_hi, rel=1e-8)
    lo, hi = conditional_exact_totals(np.array([0.0]), ea, np.array([0.0]), eb, 0.95)
    assert lo[0] == 0 and hi[0] == math.inf


def test_wald_ratio_formula_and_zero_counts():
    lo, hi = wald_ratio_totals(np.array([20.0, 0.0]), 10.0, np.array([35.0, 4.0]), 14.0, 0.95)
    rr = (20 / 10) / (35 / 14)
    h = Z95 * math.sqrt(1 / 20 + 1 / 35)
    assert (lo[0], hi[0]) == pytest.approx((rr * math.exp(-h), rr * math.exp(h)), rel=1e-12)
    assert math.isnan(lo[1]) and math.isnan(hi[1])


def test_published_worked_example_blind_cohort():
    # Rothman (2012), Epidemiology: An Introduction, 2nd ed., Table 9-2 (data of Feychting et al.):
    # 136 cancers in 22,050 person-years (blind) vs 1,709 in 127,650 (severely impaired);
    # 90% limits: rate ratio 0.46 (0.40 to 0.53), rate difference -7.2 (-8.2 to -6.2) per 1,000 person-years
    lo, hi = wald_ratio_totals(np.array([136.0]), 22050.0, np.array([1709.0]), 127650.0, 0.90)
    assert (round(lo[0], 2), round(hi[0], 2)) == (0.40, 0.53)
    lo, hi = wald_diff_totals(np.array([136.0]), 22050.0, np.array([1709.0]), 127650.0, 0.90)
    assert (round(1000 * lo[0], 1), round(1000 * hi[0], 1)) == (-8.2, -6.2)


def _double_enumeration(d, n, limits):
    """Coverage, median and mean (over bounded intervals) log half-width as factors, by summing over
    both Poisson totals (own code)."""
    t, nb = d.exposure, d.n_b(n)
    la, lb = n * d.model.mean, nb * d.model_b.mean
    xa = np.arange(0, int(la + 12 * math.sqrt(la) + 30))  # tails left out: below 1e-20
    xb = np.arange(0, int(lb + 12 * math.sqrt(lb) + 30))
    w = np.outer(stats.poisson.pmf(xa, la), stats.poisson.pmf(xb, lb)).ravel()
    ga, gb = (g.ravel().astype(float) for g in np.meshgrid(xa, xb, indexing="ij"))
    lo, hi = limits(ga, n * t, gb, nb * t)
    rr = d.model.mean / d.model_b.mean
    cov = w[(lo <= rr) & (rr <= hi)].sum()
    with np.errstate(divide="ignore"):
        hw = (np.log(hi) - np.log(lo)) / 2
    order = np.argsort(hw)
    cum = np.cumsum(w[order]) / w.sum()
    fin = np.isfinite(hw)  # the margin mean over bounded intervals, as a factor (geometric mean)
    mean = math.exp(np.dot(w[fin], hw[fin]) / w[fin].sum())
    return cov, math.exp(hw[order][np.searchsorted(cum, 0.5 - 1e-12)]), mean


def _cp_mapped(xa, ea, xb, eb):
    m = xa + xb
    lo_pi = np.where(xa > 0, stats.beta.ppf(0.025, np.maximum(xa, 1), xb + 1), 0.0)
    hi_pi = np.where(xb > 0, stats.beta.ppf(0.975, xa + 1, np.maximum(xb, 1)), 1.0)
    lo_pi, hi_pi = np.where(m > 0, lo_pi, 0), np.where(m > 0, hi_pi, 1)
    with np.errstate(divide="ignore"):
        return lo_pi / (1 - lo_pi) * eb / ea, np.where(hi_pi < 1, hi_pi / (1 - hi_pi), np.inf) * eb / ea


def test_rate_ratio_exact_path_equals_own_double_enumeration():
    d = design_of(ratio_table())
    for n in (4, 30):
        r = engine.check(d, n, path="exact")
        cov, med, mean = _double_enumeration(d, n, _cp_mapped)
        assert r.exact and r.n_b == d.n_b(n)
        assert r.coverage == pytest.approx(cov, abs=1e-11)
        assert r.margin_median == pytest.approx(med, rel=1e-9)
        assert r.margin_mean == pytest.approx(mean, rel=1e-9)
        assert r.coverage >= 0.95  # conditional exact: conservative


@pytest.mark.parametrize("cap", [None, 400])
def test_conditional_limits_kept_between_n_are_the_limits_of_each_n(cap, monkeypatch):
    # the exact path keeps the Clopper-Pearson table from one n to the next (cut back when it
    # outgrows the cap); every n must still equal its own double enumeration (scipy's beta
    # quantiles, computed here)
    from simcheck.intervals import rates_exact

    if cap is not None:
        monkeypatch.setattr(rates_exact, "GRID_CACHE_MAX", cap)
    d = design_of(ratio_table())
    for n in (30, 8, 31, 29, 60):
        r = engine.check(d, n, path="exact")
        cov, med, _ = _double_enumeration(d, n, _cp_mapped)
        assert r.coverage == pytest.approx(cov, abs=1e-11)
        assert r.margin_median == pytest.approx(med, rel=1e-9)


def test_wald_ratio_zero_counts_count_as_misses_on_the_exact_path():
    d = design_of(ratio_table(method__interval="wald"))
    n = 4

    def wald(xa, ea, xb, eb):  # written out; a zero count gives no interval (NaN: not covering)
        with np.errstate(divide="ignore", invalid="ignore"):
            c, h = np.log(xa / ea) - np.log(xb / eb), Z95 * np.sqrt(1 / xa + 1 / xb)
            ok = (xa > 0) & (xb > 0)
            return np.where(ok, np.exp(c - h), np.nan), np.where(ok, np.exp(c + h), np.nan)

    cov, _, _ = _double_enumeration(d, n, wald)
    r = engine.check(d, n, path="exact")
    assert r.coverage == pytest.approx(cov, abs=1e-12)
    p_zero = 1 - (1 - math.exp(-n * 1.0)) * (1 - math.exp(-d.n_b(n) * 1.5))  # P(X_a = 0 or X_b = 0)
    assert any(f"{p_zero:.4g} of an interval that cannot be computed" in note for note in r.notes)


def test_over_dispersed_groups_make_the_conditional_interval_under_cover():
    # two groups of NB counts (Cameron & Trivedi 2013, sec. 3.3): the exact double enumeration of
    # the NB(n k, p) totals against a plain numpy simulation of the units, and far below 0.95
    mu_a, mu_b, k, n, R = 3.0, 2.0, 1.0, 40, 6000
    d = design_of(ratio_table(data__a={"model": "negative-binomial", "mean": mu_a, "dispersion": k},
                              data__b={"model": "negative-binomial", "mean": mu_b, "dispersion": k},
                              simulation__ratio=1.0, target__exposure=1.0))
    ex = engine.check(d, n, path="exact")
    g = np.random.default_rng(7)
    xa = g.negative_binomial(k, k / (k + mu_a), size=(R, n)).sum(axis=1).astype(float)
    xb = g.negative_binomial(k, k / (k + mu_b), size=(R, n)).sum(axis=1).astype(float)
    lo, hi = _cp_mapped(xa, float(n), xb, float(n))
    cov = np.mean((lo <= mu_a / mu_b) & (mu_a / mu_b <= hi))
    assert abs(ex.coverage - cov) <= 4 * math.sqrt(cov * (1 - cov) / R)
    assert ex.coverage < 0.8


@pytest.mark.parametrize("method", ["conditional-exact", "wald", "score"])
def test_rate_ratio_simulated_path_agrees_with_exact(method):
    d = design_of(ratio_table(method__interval=method))
    ex = engine.check(d, 25, path="exact")
    sim = engine.check(d, 25, replicates=6000, rng=8, path="full")
    tol = 4 * math.sqrt(ex.coverage * (1 - ex.coverage) / 6000)
    assert abs(sim.coverage - ex.coverage) <= tol
    assert abs(sim.margin_median - ex.margin_median) <= 4 * sim.margin_median_mcse + 1e-3


# ------------------------------------------------------------------ rate difference
def _score_diff_reference(xa, ea, xb, eb, z):
    """Miettinen & Nurminen (1985) score limits for a rate difference, solved with brentq (own code)."""
    from scipy.optimize import brentq

    d = xa / ea - xb / eb

    def stat(delta):
        # restricted MLE: maximise xa log(lb + delta) - ea (lb + delta) + xb log lb - eb lb over lb > max(0, -delta)
        a, b, c = ea + eb, (ea + eb) * delta - xa - xb, -xb * delta
        lb = max((-b + math.sqrt(b * b - 4 * a * c)) / (2 * a), max(-delta, 0.0))
        return (d - delta) / math.sqrt((lb + delta) / ea + lb / eb)

    step = 10 * math.sqrt((xa + 1) / ea ** 2 + (xb + 1) / eb ** 2)
    lo = brentq(lambda t: stat(t) - z, d - step, d - 1e-12 if xa + xb else d - 1e-9, xtol=1e-14)
    hi = brentq(lambda t: stat(t) + z, d + (1e-12 if xa + xb else 1e-9), d + step, xtol=1e-14)
    return lo, hi


def test_rate_difference_score_and_wald_limits():
    ea, eb = 40.0, 25.0
    for xa, xb in [(12, 3), (0, 7), (5, 0), (60, 61), (1, 1)]:
        lo, hi = score_diff_totals(np.array([xa]), ea, np.array([xb]), eb, 0.95)
        ref = _score_diff_reference(xa, ea, xb, eb, Z95)
        assert (lo[0], hi[0]) == pytest.approx(ref, abs=1e-9)
        wl, wh = wald_diff_totals(np.array([xa]), ea, np.array([xb]), eb, 0.95)
        h = Z95 * math.sqrt(xa / ea ** 2 + xb / eb ** 2)
        assert (wl[0], wh[0]) == pytest.approx((xa / ea - xb / eb - h, xa / ea - xb / eb + h))
    # no events at all: the score limits are -z^2 / E_b and z^2 / E_a (solved by hand)
    lo, hi = score_diff_totals(np.array([0.0]), ea, np.array([0.0]), eb, 0.95)
    assert (lo[0], hi[0]) == pytest.approx((-Z95 ** 2 / eb, Z95 ** 2 / ea), rel=1e-9)


def test_rate_difference_exact_path_equals_own_double_enumeration():
    d = design_of(ratio_table(target__estimand="rate-diff", target__margin=0.5, method__interval="score"))
    n = 12
    nb, t = d.n_b(n), d.exposure
    la, lb = n * d.model.mean, nb * d.model_b.mean
    xa, xb = np.arange(0, 80), np.arange(0, 100)
    w = np.outer(stats.poisson.pmf(xa, la), stats.poisson.pmf(xb, lb)).ravel()
    truth = (d.model.mean - d.model_b.mean) / t
    covered = 0.0
    for (i, j), wij in zip(np.ndindex(xa.size, xb.size), w):
        if wij < 1e-16:
            continue
        lo, hi = _score_diff_reference(float(xa[i]), n * t, float(xb[j]), nb * t, Z95)
        covered += wij * (lo <= truth <= hi)
    r = engine.check(d, n, path="exact")
    assert r.exact and r.true_value == pytest.approx(truth)
    assert r.coverage == pytest.approx(covered, abs=1e-9)


def test_rate_difference_formula():
    res = formula_for("rate-diff", 0.05, 0.95, {"rate": 0.2, "rate_b": 0.1, "exposure": 3.0, "ratio": 0.5})
    assert res.n_unrounded == pytest.approx(Z95 ** 2 * (0.2 + 0.1 / 0.5) / (3.0 * 0.05 ** 2))


# ------------------------------------------------------------------ baselines
def test_rate_formula_against_the_variance_written_out():
    # Var(X / (n t)) = lambda (1 + lambda t / k) / (n t) (Poisson: k infinite)
    res = formula_for("rate", 0.1, 0.95, {"rate": 0.3, "exposure": 2.0})
    assert res.n_unrounded == pytest.approx(Z95 ** 2 * 0.3 / (2.0 * 0.01))
    nb = formula_for("rate", 0.1, 0.95, {"rate": 0.3, "exposure": 2.0, "dispersion": 0.5})
    assert nb.n_unrounded == pytest.approx(Z95 ** 2 * 0.3 * (1 + 0.6 / 0.5) / (2.0 * 0.01))


def test_rate_ratio_formula_against_the_log_variance_written_out():
    # Var(log RR) = 1 / (n mu_a) + 1 / (n_b mu_b), half-width z sqrt(.) = ln f
    res = formula_for("rate-ratio", 1.25, 0.9, {"rate": 0.02, "rate_b": 0.03, "exposure": 5.0, "ratio": 2.0})
    z = stats.norm.ppf(0.95)
    n0 = z ** 2 * (1 / 0.1 + 1 / (2 * 0.15)) / math.log(1.25) ** 2
    assert res.n_unrounded == pytest.approx(n0)
    assert res.n_b == math.ceil(2 * res.n - 1e-9)


def test_search_baseline_and_window_scan_on_counts():
    d = design_of(rate_table())
    from simcheck.search import find_n

    res = find_n(d, replicates=1000, rng=1)
    # the closed form for this design, written out
    n_formula = math.ceil(Z95 ** 2 * 0.3 / (2.0 * 0.1 ** 2))
    assert res.exact and res.n_formula == n_formula

    def passes(m):  # own enumeration of the targets: coverage >= 0.945, assurance >= 0.5
        cov, _, assured = _poisson_enumeration(m, 0.6, 2.0, 0.95, 0.1, _chi2_limits)
        return cov >= 0.945 - 1e-12 and assured >= 0.5 - 1e-12

    def window_holds(m):  # the window criterion: the targets hold at every n in [m, ceil(1.25 m)]
        return all(passes(k) for k in range(m, math.ceil(1.25 * m) + 1))

    assert window_holds(res.n) and not window_holds(res.n - 1)


# ------------------------------------------------------------------ command line
def test_cli_check_curve_search_formula(tmp_path):
    p = write_toml(tmp_path / "rr.toml", ratio_table())
    code, out, _ = run_cli(["check", p, "--n", "40", "--json"])
    assert code == 0
    row = json.loads(out)
    assert row["estimand"] == "rate-ratio" and row["exact"] and row["true_value"] == pytest.approx(2 / 3)
    code, out, _ = run_cli(["curve", p, "--n-values", "10,20", "--method", "wald", "--json"])
    assert code == 0
    code, out, _ = run_cli(["formula", "--estimand", "rate", "--margin", "0.1", "--rate", "0.3", "--exposure", "2",
                            "--json"])
    assert code == 0 and json.loads(out)["n"] == math.ceil(Z95 ** 2 * 0.3 / (2.0 * 0.01))


@pytest.mark.parametrize("table, field", [
    (rate_table(target__exposure=0.0), "target.exposure"),
    (rate_table(target__exposure=-2.0), "target.exposure"),
    (ratio_table(target__margin=0.8), "target.margin"),
    (ratio_table(target__margin=1.0), "target.margin"),
    (rate_table(data__model="normal", data__sd=1.0), "data"),
    (rate_table(method__interval="clopper-pearson"), "method.interval"),
])
def test_bad_input_exit_2_one_line(tmp_path, table, field):
    p = write_toml(tmp_path / "bad.toml", table)
    code, out, err = run_cli(["check", p, "--n", "20"])
    assert code == 2 and out == ""
    lines = err.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("simcheck: error: ") and field in lines[0]


def test_bad_formula_input_exit_2_one_line():
    for argv in (["formula", "--estimand", "rate", "--margin", "0.1", "--rate", "0.3", "--exposure", "0"],
                 ["formula", "--estimand", "rate-ratio", "--margin", "0.9", "--rate", "0.3", "--rate-b", "0.2"]):
        code, out, err = run_cli(argv)
        assert code == 2 and len(err.strip().splitlines()) == 1


def test_exposure_is_part_of_the_resolved_scenario_and_sweeps_vary_it(tmp_path):
    sc = scenario_from_dict(rate_table())
    d = sc.to_dict()
    assert d["target"]["exposure"] == 2.0
    assert scenario_from_dict(d).design.true_value == pytest.approx(0.3)
    write_toml(tmp_path / "rate.toml", rate_table())
    (tmp_path / "sweep.toml").write_text(
        'base = "rate.toml"\ntask = "check"\nn = [20]\n[vary]\n"target.exposure" = [1.0, 4.0]\n', encoding="utf-8")
    code, out, err = run_cli(["sweep", tmp_path / "sweep.toml", "--store", tmp_path / "s.sqlite", "--json"])
    assert code == 0, err
