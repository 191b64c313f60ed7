"""Exact coverage by enumeration, checked against independent loops and published facts."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats

import simcheck.engine.exact as exact
from simcheck.errors import InputError
from simcheck.engine.exact import binomial_curve, binomial_measures, hypergeometric_measures, two_binomial_measures
from simcheck.intervals import get_method

CONF = 0.95
PROPORTION = ("wald", "wilson", "agresti-coull", "clopper-pearson", "jeffreys")


def prop(name):
    return get_method("proportion", name).func


def diff(name):
    return get_method("proportion-diff", name).func


# ---------------------------------------------------------------- independent reference
# Written separately from the library: one x at a time, stdlib math plus scalar
# scipy beta quantiles, formulas as in Brown, Cai & DasGupta (2001), Interval
# estimation for a binomial proportion, Statistical Science 16:101-133
# (Wald 2.1, Wilson 4.1.1, Jeffreys 4.1.2, Agresti-Coull 4.1.3, Clopper-Pearson 4.2.1),
# all clipped to [0, 1].


def _ref_interval(name, x, n, conf):
    a = 1 - conf
    z = stats.norm.ppf(1 - a / 2)
    p = x / n
    if name == "wald":
        h = z * math.sqrt(p * (1 - p) / n)
        lo, hi = p - h, p + h
    elif name == "wilson":
        c = (x + z * z / 2) / (n + z * z)
        h = z * math.sqrt(n) / (n + z * z) * math.sqrt(p * (1 - p) + z * z / (4 * n))
        lo, hi = (0.0 if x == 0 else c - h), (1.0 if x == n else c + h)
    elif name == "agresti-coull":
        nt = n + z * z
        pt = (x + z * z / 2) / nt
        h = z * math.sqrt(pt * (1 - pt) / nt)
        lo, hi = pt - h, pt + h
    elif name == "clopper-pearson":
        lo = 0.0 if x == 0 else stats.beta.ppf(a / 2, x, n - x + 1)
        hi = 1.0 if x == n else stats.beta.ppf(1 - a / 2, x + 1, n - x)
    elif name == "jeffreys":
        lo = 0.0 if x == 0 else stats.beta.ppf(a / 2, x + 0.5, n - x + 0.5)
        hi = 1.0 if x == n else stats.beta.ppf(1 - a / 2, x + 0.5, n - x + 0.5)
    return min(max(lo, 0.0), 1.0), min(max(hi, 0.0), 1.0)


def _ref_quantile(pairs, q):
    """Smallest value whose cumulative probability is >= q (pairs: (value, weight))."""
    pairs = sorted(pairs)
    total = sum(w for _, w in pairs)
    acc = 0.0
    for v, w in pairs:
        acc += w
        if acc / total >= q:
            return v
    return pairs[-1][0]


def _ref_measures(intervals_and_weights, true, margin):
    cov = low = high = mean = assure = deg = 0.0
    pairs = []
    for (lo, hi), w in intervals_and_weights:
        hw = (hi - lo) / 2
        cov += w * (lo <= true <= hi)
        low += w * (hi < true)
        high += w * (lo > true)
        mean += w * hw
        # a zero-width interval that misses (Wald at x = 0 or n) never meets the margin
        # (issue 12; this reference used to count it as assured)
        zero = hw == 0 and not (lo <= true <= hi)
        assure += w * (hw <= margin and not zero)
        deg += w * zero
        pairs.append((hw, w))
    return {"coverage": cov, "miss_low": low, "miss_high": high, "margin_mean": mean,
            "margin_median": _ref_quantile(pairs, 0.5), "margin_p90": _ref_quantile(pairs, 0.9),
            "assurance": assure, "degenerate_share": deg}


def _pmf(x, n, p):
    return math.comb(n, x) * p ** x * (1 - p) ** (n - x)


KEYS = ("coverage", "miss_low", "miss_high", "margin_mean", "margin_median", "margin_p90", "assurance",
        "degenerate_share")


@pytest.mark.parametrize("name", PROPORTION)
@pytest.mark.parametrize("n, p, margin", [(10, 0.1, 0.2), (25, 0.5, 0.18), (50, 0.03, 0.05), (137, 0.2, 0.07), (400, 0.73, 0.045)])
def test_binomial_measures_equal_an_independent_enumeration(name, n, p, margin):
    got = binomial_measures(prop(name), n, p, CONF, margin=margin)
    ref = _ref_measures([(_ref_interval(name, x, n, CONF), _pmf(x, n, p)) for x in range(n + 1)], p, margin)
    for key in KEYS:
        assert got[key] == pytest.approx(ref[key], abs=1e-10), key
    assert got["coverage"] + got["miss_low"] + got["miss_high"] == pytest.approx(1.0, abs=1e-12)
    np.testing.assert_allclose(got["margin_weights"].sum(), 1.0, atol=1e-12)
    assert np.all(np.diff(got["margin_values"]) >= 0)


def test_weighted_quantile_is_smallest_value_reaching_q():
    # Definition (ours): smallest support value whose cumulative probability >= q.
    # Bin(3, 1/2): half-widths 0, 1, 2, 3 with probabilities 1/8, 3/8, 3/8, 1/8
    # (cumulative 1/8, 1/2, 7/8, 1): median 1 (cumulative exactly 1/2), p90 3.
    def widths(x, n, confidence):
        x = np.asarray(x, dtype=float)
        return x / 3 - x, x / 3 + x

    got = binomial_measures(widths, 3, 0.5, CONF, margin=1.5)
    assert got["margin_median"] == 1.0
    assert got["margin_p90"] == 3.0
    assert got["margin_mean"] == pytest.approx(1.5)
    # the zero-width interval at x = 0 (probability 1/8) does not meet the margin
    # (issue 12; this test counted it): P(0 < hw <= 1.5) = 3/8
    assert got["assurance"] == pytest.approx(0.375)
    assert got["degenerate_share"] == pytest.approx(0.125)
    assert binomial_measures(widths, 3, 0.5, CONF)["assurance"] is None


def test_wald_coverage_is_erratic_in_n():
    # Brown, Cai & DasGupta (2001), Statistical Science 16:101-133, section 2.1: at
    # p = 0.005 the 95% Wald coverage is 0.945 at n = 591 and 0.792 at n = 592
    # (values from memory; the exact computation below reproduces them).
    c591 = binomial_measures(prop("wald"), 591, 0.005, 0.95)["coverage"]
    c592 = binomial_measures(prop("wald"), 592, 0.005, 0.95)["coverage"]
    assert c591 == pytest.approx(0.945, abs=5e-4)
    assert c592 == pytest.approx(0.792, abs=5e-4)
    assert c591 - c592 > 0.1


def test_wald_coverage_below_nominal_at_p_half_for_moderate_n():
    # Brown, Cai & DasGupta (2001), Statistical Science 16:101-133, section 2.1: even
    # at p = 0.5 the 95% Wald interval undercovers for small and moderate n, e.g.
    # coverage 0.919 at n = 40 (value from memory).
    curve = binomial_curve(prop("wald"), range(10, 41), 0.5, 0.95)
    assert curve[-1]["n"] == 40 and curve[-1]["coverage"] == pytest.approx(0.919, abs=5e-4)
    below = [r["coverage"] < 0.95 for r in curve]
    assert sum(below) > len(curve) / 2


@pytest.mark.parametrize("confidence", [0.9, 0.95, 0.99])
def test_clopper_pearson_never_below_nominal(confidence):
    # Conservative by construction: Clopper & Pearson (1934), Biometrika 26:404-413;
    # Brown, Cai & DasGupta (2001), section 4.2.1.
    for p in np.linspace(0.001, 0.999, 31):
        curve = binomial_curve(prop("clopper-pearson"), range(1, 121), float(p), confidence)
        assert min(r["coverage"] for r in curve) >= confidence - 1e-12


def test_binomial_curve_agrees_with_single_n_and_full_enumeration(monkeypatch):
    ns = [1, 2, 5, 50, 333, 1000, 4000]
    curve = binomial_curve(prop("jeffreys"), ns, 0.3, 0.9, margin=0.03)
    for n, row in zip(ns, curve):
        single = binomial_measures(prop("jeffreys"), n, 0.3, 0.9, margin=0.03)
        assert row["n"] == n
        for key in KEYS:
            assert row[key] == single[key]
        assert row["omitted_weight"] < 4e-17
    # no tail trimming, tiny chunks: the same numbers to rounding
    monkeypatch.setattr(exact, "TAIL_TRIM", 0.0)
    monkeypatch.setattr(exact, "CHUNK_CELLS", 600)
    full = binomial_curve(prop("jeffreys"), ns, 0.3, 0.9, margin=0.03)
    for a, b in zip(curve, full):
        assert b["margin_values"].size == b["n"] + 1
        for key in KEYS:
            assert a[key] == pytest.approx(b[key], abs=1e-14), key


def test_exact_agrees_with_monte_carlo_within_mcse():
    # Cross-check of the enumeration against plain binomial draws (fixed seed, 4 MCSE).
    rng = np.random.default_rng(20261201)
    n, p, R = 40, 0.12, 200_000
    x = rng.binomial(n, p, size=R)
    lo, hi = prop("agresti-coull")(x, n, CONF)
    sim = np.mean((lo <= p) & (p <= hi))
    ex = binomial_measures(prop("agresti-coull"), n, p, CONF)["coverage"]
    assert abs(sim - ex) < 4 * math.sqrt(ex * (1 - ex) / R)


def test_boundary_proportions():
    for name in PROPORTION:
        for p in (0.0, 1.0):
            r = binomial_measures(prop(name), 30, p, CONF, margin=0.01)
            # x is certain; Wilson/CP/Jeffreys reach the boundary exactly, Wald is [p, p]
            assert r["coverage"] == 1.0
            assert r["margin_weights"].size == 1


# ---------------------------------------------------------------- two binomials


@pytest.mark.parametrize("name", ["wald", "newcombe", "agresti-caffo"])
@pytest.mark.parametrize("na, pa, nb, pb", [(8, 0.3, 12, 0.55), (5, 0.9, 5, 0.9), (15, 0.05, 9, 0.4)])
def test_two_binomial_measures_equal_a_brute_force_double_loop(name, na, pa, nb, pb, monkeypatch):
    margin = 0.25
    f = diff(name)
    items = []
    for xa in range(na + 1):
        for xb in range(nb + 1):
            lo, hi = f(xa, na, xb, nb, CONF)
            items.append(((float(lo), float(hi)), _pmf(xa, na, pa) * _pmf(xb, nb, pb)))
    ref = _ref_measures(items, pa - pb, margin)
    monkeypatch.setattr(exact, "CHUNK_CELLS", 7)  # several chunks over xa
    got = two_binomial_measures(f, na, pa, nb, pb, CONF, margin=margin)
    assert got["true_value"] == pytest.approx(pa - pb)
    for key in KEYS:
        assert got[key] == pytest.approx(ref[key], abs=1e-12), key


def test_two_binomial_large_n_is_bounded_and_consistent():
    r = two_binomial_measures(get_method("proportion-diff", "newcombe"), 5000, 0.5, 4000, 0.45, CONF, margin=0.025)
    assert r["omitted_weight"] < 1e-16
    assert r["margin_values"].size < 1_000_000
    # large samples: near-nominal coverage (Newcombe 1998, method 10 performs well)
    assert 0.94 < r["coverage"] < 0.96
    assert r["margin_median"] == pytest.approx(1.96 * math.sqrt(0.25 / 5000 + 0.2475 / 4000), rel=0.01)


# ---------------------------------------------------------------- finite population


@pytest.mark.parametrize("fpc", [False, True])
def test_hypergeometric_measures_equal_a_loop(fpc):
    # Sampling without replacement: X ~ hypergeometric (Cochran 1977, Sampling
    # Techniques, chapter 3); the fpc wrapper scales each limit's distance from
    # x/n by sqrt(1 - n/N): the interval's variance is estimated from the sample,
    # and the estimate v(p) = (1 - n/N) p q / (n - 1) carries 1 - n/N (Cochran 1977,
    # section 3.2). This test used sqrt((N - n)/(N - 1)), the factor of the true
    # variance P Q, which does not apply to an estimated one.
    N, K, n, margin = 60, 17, 25, 0.15
    f = math.sqrt(1 - n / N) if fpc else 1.0
    items = []
    for x in range(0, n + 1):
        w = math.comb(K, x) * math.comb(N - K, n - x) / math.comb(N, n) if x <= K and n - x <= N - K else 0.0
        if w == 0.0:
            continue
        lo, hi = _ref_interval("wilson", x, n, CONF)
        ph = x / n
        items.append(((max(0.0, ph - (ph - lo) * f), min(1.0, ph + (hi - ph) * f)), w))
    ref = _ref_measures(items, K / N, margin)
    got = hypergeometric_measures(prop("wilson"), n, N, K, CONF, margin=margin, fpc=fpc)
    for key in KEYS:
        assert got[key] == pytest.approx(ref[key], abs=1e-12), key


def test_hypergeometric_census_with_fpc_is_exact():
    r = hypergeometric_measures(prop("wald"), 50, 50, 20, CONF, fpc=True)
    assert r["coverage"] == 1.0 and r["margin_mean"] == 0.0


# ---------------------------------------------------------------- input checks


@pytest.mark.parametrize("call, field", [
    (lambda: binomial_measures(prop("wald"), 0, 0.5, CONF), "n"),
    (lambda: binomial_measures(prop("wald"), True, 0.5, CONF), "n"),
    (lambda: binomial_measures(prop("wald"), 10, 1.5, CONF), "p"),
    (lambda: binomial_measures(prop("wald"), 10, float("nan"), CONF), "p"),
    (lambda: binomial_measures(prop("wald"), 10, 0.5, 1.0), "confidence"),
    (lambda: binomial_measures(prop("wald"), 10, 0.5, CONF, margin=0), "margin"),
    (lambda: binomial_curve(prop("wald"), [], 0.5, CONF), "n_values"),
    (lambda: binomial_curve(prop("wald"), [5, 2.5], 0.5, CONF), "n_values[1]"),
    (lambda: binomial_measures(get_method("proportion-diff", "wald"), 10, 0.5, CONF), "method_func"),
    (lambda: two_binomial_measures(diff("wald"), 10, 0.5, 10, -0.1, CONF), "pb"),
    (lambda: hypergeometric_measures(prop("wald"), 20, 10, 5, CONF), "n"),
])
def test_bad_input_names_the_field(call, field):
    with pytest.raises(InputError) as err:
        call()
    assert any(p.field == field for p in err.value.problems)


def test_cheap_targets_equal_the_full_measures():
    # the search's coverage/assurance-only enumerations against the full ones, including Wald's
    # zero-width intervals at x = 0 (counted as never within the margin) and two binomials
    from simcheck.engine.exact import binomial_targets, two_binomial_targets

    for name, p, margin in (("wald", 0.03, 0.05), ("wilson", 0.3, 0.1), ("jeffreys", 0.9, 0.08)):
        f = get_method("proportion", name)
        ns = list(range(2, 160, 7))
        cov, ass = binomial_targets(f, ns, p, 0.95, margin)
        full = binomial_curve(f, ns, p, 0.95, margin)
        assert np.allclose(cov, [m["coverage"] for m in full], atol=1e-12, rtol=0)
        assert np.allclose(ass, [m["assurance"] for m in full], atol=1e-12, rtol=0)
    for name in ("wald", "newcombe", "agresti-caffo"):
        f = get_method("proportion-diff", name)
        na, nb = [3, 20, 75], [5, 20, 150]
        cov, ass = two_binomial_targets(f, na, nb, 0.04, 0.2, 0.95, 0.15)
        for k in range(3):
            m = two_binomial_measures(f, na[k], 0.04, nb[k], 0.2, 0.95, 0.15)
            assert cov[k] == pytest.approx(m["coverage"], abs=1e-12)
            assert ass[k] == pytest.approx(m["assurance"], abs=1e-12)
