"""Analytic interval methods: endpoints against published values and independent references."""

from __future__ import annotations

import math
import statistics
import warnings

import numpy as np
import pytest
from scipy import stats
from statsmodels.stats.proportion import confint_proportions_2indep, proportion_confint

from simcheck.intervals import REGISTRY, Summary, get_method, methods_for
from simcheck.intervals.mean import welch_df

PROPORTION = ("wald", "wilson", "agresti-coull", "clopper-pearson", "jeffreys")
# our name -> statsmodels' name; the definitions agree with Brown, Cai & DasGupta (2001)
STATSMODELS_NAME = {
    "wald": "normal",
    "wilson": "wilson",
    "agresti-coull": "agresti_coull",
    "clopper-pearson": "beta",
    "jeffreys": "jeffreys",
}


def prop(name):
    return get_method("proportion", name).func


def diff(name):
    return get_method("proportion-diff", name).func


def summary_of(x: np.ndarray, sd_true=None) -> Summary:
    """Summary of raw samples along the last axis (test helper, numpy only)."""
    n = x.shape[-1]
    mean = x.mean(axis=-1)
    var = x.var(axis=-1, ddof=1)
    m3 = ((x - mean[..., None]) ** 3).mean(axis=-1)
    return Summary(n=n, mean=mean, var=var, m3=m3, sd_true=sd_true)


# ---------------------------------------------------------------- registry


def test_registry_holds_every_method_with_its_kind_and_flags():
    expected = {
        ("mean", "z"): ("summary", True, False, True),
        ("mean", "t"): ("summary", True, False, False),
        ("mean", "johnson-t"): ("summary", True, True, False),
        ("mean", "cox"): ("log", False, False, False),
        ("mean-diff", "z"): ("summary2", True, False, True),
        ("mean-diff", "t"): ("summary2", True, False, False),
        ("mean-diff", "welch"): ("summary2", True, False, False),
    }
    expected.update({("proportion", m): ("count", False, False, False) for m in PROPORTION})
    expected.update({("proportion-diff", m): ("count2", False, False, False) for m in ("wald", "newcombe", "agresti-caffo")})
    for key, (kind, equivariant, m3, sd) in expected.items():
        m = REGISTRY[key]
        assert (m.kind, m.shift_equivariant, m.needs_m3, m.needs_true_sd) == (kind, equivariant, m3, sd), key
        assert m.references and m.summary
        assert m.func.__doc__ and "References" in m.func.__doc__
    assert set(PROPORTION) <= set(methods_for("proportion"))


# ---------------------------------------------------------------- one proportion


@pytest.mark.parametrize("name", PROPORTION)
@pytest.mark.parametrize("n", [1, 2, 7, 30, 101, 1000])
@pytest.mark.parametrize("confidence", [0.8, 0.95, 0.99])
def test_proportion_endpoints_match_statsmodels(name, n, confidence):
    # Reference: statsmodels.stats.proportion.proportion_confint (test-only), whose
    # definitions follow Brown, Cai & DasGupta (2001), Statistical Science 16:101-133.
    # statsmodels clips normal/agresti_coull/wilson to [0, 1] like we do; its Jeffreys
    # interval does not apply Brown et al.'s boundary rule (lower 0 at x = 0,
    # upper 1 at x = n), so those two limits are checked separately.
    x = np.arange(n + 1)
    lo, hi = prop(name)(x, n, confidence)
    ref_lo, ref_hi = proportion_confint(x, n, alpha=1 - confidence, method=STATSMODELS_NAME[name])
    ref_lo, ref_hi = np.asarray(ref_lo, float), np.asarray(ref_hi, float)
    if name == "jeffreys":
        assert lo[0] == 0.0 and hi[-1] == 1.0
        np.testing.assert_allclose(lo[1:], ref_lo[1:], rtol=1e-10, atol=1e-13)
        np.testing.assert_allclose(hi[:-1], ref_hi[:-1], rtol=1e-10, atol=1e-13)
    else:
        np.testing.assert_allclose(lo, ref_lo, rtol=1e-10, atol=1e-13)
        np.testing.assert_allclose(hi, ref_hi, rtol=1e-10, atol=1e-13)


def test_proportion_hand_formulas_brown_cai_dasgupta():
    # Brown, Cai & DasGupta (2001), Statistical Science 16:101-133, sections 2.1, 4.1.1-4.1.3,
    # 4.2.1: formulas written out here with the stdlib only (scalar, one x at a time).
    n, conf = 20, 0.95
    z = statistics.NormalDist().inv_cdf(0.975)
    for x in range(n + 1):
        p = x / n
        w_half = z * math.sqrt(p * (1 - p) / n)
        wald = (max(0.0, p - w_half), min(1.0, p + w_half))
        c = (x + z * z / 2) / (n + z * z)
        h = z * math.sqrt(n) / (n + z * z) * math.sqrt(p * (1 - p) + z * z / (4 * n))
        wilson = (max(0.0, c - h), min(1.0, c + h))
        nt = n + z * z
        pt = (x + z * z / 2) / nt
        ha = z * math.sqrt(pt * (1 - pt) / nt)
        ac = (max(0.0, pt - ha), min(1.0, pt + ha))
        for name, ref in (("wald", wald), ("wilson", wilson), ("agresti-coull", ac)):
            lo, hi = prop(name)(x, n, conf)
            assert float(lo) == pytest.approx(ref[0], abs=1e-12), (name, x)
            assert float(hi) == pytest.approx(ref[1], abs=1e-12), (name, x)


def test_clopper_pearson_tail_definition():
    # Clopper & Pearson (1934), Biometrika 26:404-413: the limits solve
    # P(X >= x | p_lo) = alpha/2 and P(X <= x | p_hi) = alpha/2.
    n, alpha = 40, 0.05
    x = np.arange(1, n)
    lo, hi = prop("clopper-pearson")(x, n, 1 - alpha)
    np.testing.assert_allclose(stats.binom.sf(x - 1, n, lo), alpha / 2, rtol=1e-8)
    np.testing.assert_allclose(stats.binom.cdf(x, n, hi), alpha / 2, rtol=1e-8)


@pytest.mark.parametrize("name", PROPORTION)
def test_proportion_boundaries_vectorised_and_silent(name):
    n = np.array([[1], [2], [10], [500]])
    x = np.array([[0, 1, 2, 10, 500]])
    x = np.minimum(x, n)  # broadcast (4, 5)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        lo, hi = prop(name)(x, n, 0.95)
    assert lo.shape == hi.shape == (4, 5)
    assert np.all(np.isfinite(lo)) and np.all(np.isfinite(hi))
    assert np.all((0 <= lo) & (lo <= hi) & (hi <= 1))
    if name in ("wilson", "clopper-pearson", "jeffreys"):
        assert np.all(lo[x == 0] == 0.0) and np.all(hi[x == n] == 1.0)


# ---------------------------------------------------------------- difference of proportions

# Newcombe, R. G. (1998). Interval estimation for the difference between independent
# proportions: comparison of eleven methods. Statistics in Medicine 17:873-890, Table II,
# method 10 (95%). The first two rows were looked up as reproduced in a public test suite
# citing Table II; the remaining rows are "from memory" of the same table.
NEWCOMBE_TABLE_II = [
    ((56, 70, 48, 80), (0.0524, 0.3339)),
    ((9, 10, 3, 10), (0.1705, 0.8090)),
    ((5, 56, 0, 29), (-0.0381, 0.1926)),  # from memory
    ((0, 10, 0, 20), (-0.1611, 0.2775)),  # from memory
    ((0, 10, 0, 10), (-0.2775, 0.2775)),  # from memory
    ((10, 10, 0, 20), (0.6791, 1.0000)),  # from memory
]


@pytest.mark.parametrize("counts, expected", NEWCOMBE_TABLE_II)
def test_newcombe_method10_worked_examples(counts, expected):
    lo, hi = diff("newcombe")(*counts, 0.95)
    assert float(lo) == pytest.approx(expected[0], abs=5e-5)
    assert float(hi) == pytest.approx(expected[1], abs=5e-5)


def _grid(na, nb):
    xa, xb = np.meshgrid(np.arange(na + 1), np.arange(nb + 1), indexing="ij")
    return xa.ravel(), xb.ravel()


@pytest.mark.parametrize("name, sm", [("wald", "wald"), ("newcombe", "newcomb"), ("agresti-caffo", "agresti-caffo")])
@pytest.mark.parametrize("na, nb", [(1, 1), (7, 12), (30, 25)])
def test_difference_endpoints_match_statsmodels(name, sm, na, nb):
    # Reference: statsmodels.stats.proportion.confint_proportions_2indep (test-only),
    # compare="diff", correction=False. statsmodels does not clip agresti-caffo to
    # [-1, 1]; we do, so we compare after clipping the reference.
    xa, xb = _grid(na, nb)
    lo, hi = diff(name)(xa, na, xb, nb, 0.95)
    ref = [confint_proportions_2indep(a, na, b, nb, method=sm, compare="diff", alpha=0.05, correction=False)
           for a, b in zip(xa, xb)]
    ref = np.clip(np.array(ref, dtype=float), -1.0, 1.0)
    np.testing.assert_allclose(lo, ref[:, 0], atol=1e-12)
    np.testing.assert_allclose(hi, ref[:, 1], atol=1e-12)


def test_agresti_caffo_is_wald_after_adding_one_success_and_one_failure():
    # Agresti & Caffo (2000), The American Statistician 54:280-288, section 2.
    xa, xb = _grid(15, 9)
    lo, hi = diff("agresti-caffo")(xa, 15, xb, 9, 0.9)
    rlo, rhi = diff("wald")(xa + 1, 17, xb + 1, 11, 0.9)
    # the shifted Wald uses n+2 in both the estimate and the variance: identical
    np.testing.assert_allclose(lo, rlo, atol=1e-14)
    np.testing.assert_allclose(hi, rhi, atol=1e-14)


@pytest.mark.parametrize("name", ["wald", "newcombe", "agresti-caffo"])
def test_difference_boundaries_silent(name):
    xa, xb = _grid(6, 4)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        lo, hi = diff(name)(xa, 6, xb, 4, 0.99)
    assert np.all((-1 <= lo) & (lo <= hi) & (hi <= 1))


# ---------------------------------------------------------------- means

RNG_SEED = 20261201


@pytest.mark.parametrize("confidence", [0.8, 0.95, 0.999])
def test_t_and_z_match_scipy_intervals(confidence):
    # Exact law under normal data: scipy.stats.t.interval / scipy.stats.norm.interval.
    rng = np.random.default_rng(RNG_SEED)
    x = rng.normal(3.0, 2.0, size=(50, 9))
    s = summary_of(x, sd_true=2.0)
    lo, hi = get_method("mean", "t").func(s, confidence)
    rlo, rhi = stats.t.interval(confidence, df=8, loc=s.mean, scale=np.sqrt(s.var / 9))
    np.testing.assert_allclose(lo, rlo, rtol=1e-12, atol=1e-12)
    np.testing.assert_allclose(hi, rhi, rtol=1e-12, atol=1e-12)
    lo, hi = get_method("mean", "z").func(s, confidence)
    rlo, rhi = stats.norm.interval(confidence, loc=s.mean, scale=2.0 / 3.0)
    np.testing.assert_allclose(lo, rlo, rtol=1e-12, atol=1e-12)
    np.testing.assert_allclose(hi, rhi, rtol=1e-12, atol=1e-12)


def test_t_interval_coverage_on_normal_data_within_mcse():
    # The t interval is exact for normal data (Student 1908): coverage = confidence.
    rng = np.random.default_rng(RNG_SEED + 1)
    R, n, conf = 40_000, 4, 0.9
    x = rng.normal(-1.0, 5.0, size=(R, n))
    lo, hi = get_method("mean", "t").func(summary_of(x), conf)
    cov = np.mean((lo <= -1.0) & (-1.0 <= hi))
    mcse = math.sqrt(conf * (1 - conf) / R)
    assert abs(cov - conf) < 4 * mcse


def test_pooled_t_and_welch_match_scipy_ttest_ind():
    # scipy.stats.ttest_ind(...).confidence_interval() (equal_var True: pooled; False: Welch).
    rng = np.random.default_rng(RNG_SEED + 2)
    for na, nb in [(2, 2), (5, 11), (40, 7)]:
        a = rng.gamma(2.0, 3.0, size=na)
        b = rng.normal(4.0, 1.5, size=nb)
        sa, sb = summary_of(a), summary_of(b)
        for equal_var, name in ((True, "t"), (False, "welch")):
            ref = stats.ttest_ind(a, b, equal_var=equal_var).confidence_interval(0.95)
            lo, hi = get_method("mean-diff", name).func(sa, sb, 0.95)
            assert float(lo) == pytest.approx(ref.low, rel=1e-10)
            assert float(hi) == pytest.approx(ref.high, rel=1e-10)


def test_welch_df_hand_formula_and_bounds():
    # Welch (1947), Biometrika 34:28-35; Satterthwaite (1946): written out with the stdlib.
    cases = [(5, 2.0, 12, 9.0), (30, 1.0, 30, 1.0), (3, 0.0, 8, 4.0), (10, 7.5, 4, 0.2)]
    for na, va, nb, vb in cases:
        ua, ub = va / na, vb / nb
        ref = (ua + ub) ** 2 / (ua ** 2 / (na - 1) + ub ** 2 / (nb - 1))
        got = welch_df(Summary(na, np.array(0.0), np.array(va)), Summary(nb, np.array(0.0), np.array(vb)))
        assert float(got) == pytest.approx(ref, rel=1e-13)
        assert min(na, nb) - 1 <= float(got) + 1e-12 and float(got) <= na + nb - 2 + 1e-12


def test_z_difference_hand_formula():
    z = statistics.NormalDist().inv_cdf(0.95)  # 90% two-sided
    a = Summary(n=10, mean=np.array([1.0, 2.0]), var=np.array([1.0, 1.0]), sd_true=2.0)
    b = Summary(n=25, mean=np.array([0.5, 0.0]), var=np.array([1.0, 1.0]), sd_true=3.0)
    lo, hi = get_method("mean-diff", "z").func(a, b, 0.9)
    half = z * math.sqrt(4 / 10 + 9 / 25)
    np.testing.assert_allclose(lo, [0.5 - half, 2.0 - half], rtol=1e-13)
    np.testing.assert_allclose(hi, [0.5 + half, 2.0 + half], rtol=1e-13)


def test_johnson_t_reduces_to_t_without_skewness_and_shifts_by_the_correction():
    # Johnson (1978), JASA 73:536-544, eq. 2.5 (quadratic term dropped): centre
    # xbar + mu3/(6 s^2 n).
    rng = np.random.default_rng(RNG_SEED + 3)
    x = rng.exponential(2.0, size=(20, 15))
    s = summary_of(x)
    t_lo, t_hi = get_method("mean", "t").func(s, 0.95)
    s0 = Summary(n=s.n, mean=s.mean, var=s.var, m3=np.zeros_like(s.mean))
    j_lo, j_hi = get_method("mean", "johnson-t").func(s0, 0.95)
    np.testing.assert_allclose(j_lo, t_lo, rtol=1e-14, atol=0)
    np.testing.assert_allclose(j_hi, t_hi, rtol=1e-14, atol=0)
    j_lo, j_hi = get_method("mean", "johnson-t").func(s, 0.95)
    for i in range(x.shape[0]):
        row = list(x[i])
        xbar = statistics.fmean(row)
        mu3 = sum((v - xbar) ** 3 for v in row) / len(row)
        shift = mu3 / (6 * statistics.variance(row) * len(row))
        assert j_lo[i] == pytest.approx(t_lo[i] + shift, rel=1e-11)
        assert j_hi[i] == pytest.approx(t_hi[i] + shift, rel=1e-11)
    assert np.all(j_lo > t_lo)  # right-skewed data move the interval up


def test_cox_lognormal_example_against_independent_formula():
    # Zhou & Gao (1997), Statistics in Medicine 16:783-790, Cox's method:
    # exp(ybar + s^2/2 ± z sqrt(s^2/n + s^4/(2(n-1)))), computed with the stdlib.
    values = [3.2, 1.1, 7.5, 2.4, 5.0, 0.9, 12.3, 4.4, 2.2, 6.1]  # (invented example)
    logs = [math.log(v) for v in values]
    n = len(logs)
    ybar, s2 = statistics.fmean(logs), statistics.variance(logs)
    for conf in (0.9, 0.95):
        z = statistics.NormalDist().inv_cdf(1 - (1 - conf) / 2)
        half = z * math.sqrt(s2 / n + s2 ** 2 / (2 * (n - 1)))
        ref = (math.exp(ybar + s2 / 2 - half), math.exp(ybar + s2 / 2 + half))
        lo, hi = get_method("mean", "cox").func(summary_of(np.array(logs)), conf)
        assert float(lo) == pytest.approx(ref[0], rel=1e-12)
        assert float(hi) == pytest.approx(ref[1], rel=1e-12)


def test_mean_methods_zero_variance_zero_width_and_broadcast():
    # Constant samples: zero variance (and m3 = 0) give zero-width intervals, no warnings.
    n = np.array([[2], [10], [300]])
    mean = np.array([[0.0, 1.5, -2.0, 4.0]])
    var = np.array([[0.0, 0.0, 1.0, 2.0]])
    m3 = np.array([[0.0, 0.0, 0.3, -1.0]])
    s = Summary(n=n, mean=mean, var=var, m3=m3, sd_true=1.0)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        for name in ("t", "johnson-t", "cox", "z"):
            lo, hi = get_method("mean", name).func(s, 0.95)
            assert lo.shape == hi.shape == (3, 4)
            assert np.all(np.isfinite(lo)) and np.all(lo <= hi)
            if name != "z":
                np.testing.assert_array_equal(lo[:, :2], hi[:, :2])
        for name in ("t", "welch", "z"):
            lo, hi = get_method("mean-diff", name).func(s, s, 0.95)
            assert lo.shape == (3, 4) and np.all(np.isfinite(lo))
            if name != "z":
                np.testing.assert_array_equal(lo[:, :2], hi[:, :2])


@pytest.mark.parametrize("key", [k for k, m in REGISTRY.items() if m.kind in ("summary", "summary2") and m.shift_equivariant])
def test_shift_equivariance_flag_is_true(key):
    m = REGISTRY[key]
    rng = np.random.default_rng(RNG_SEED + 4)
    x = rng.gamma(1.5, size=(10, 8))
    y = rng.gamma(3.0, size=(10, 6))
    c = 17.25
    if m.kind == "summary":
        lo, hi = m.func(summary_of(x, 1.0), 0.95)
        slo, shi = m.func(summary_of(x + c, 1.0), 0.95)
    else:
        lo, hi = m.func(summary_of(x, 1.0), summary_of(y, 2.0), 0.95)
        slo, shi = m.func(summary_of(x + c, 1.0), summary_of(y, 2.0), 0.95)
    np.testing.assert_allclose(slo, lo + c, rtol=1e-10)
    np.testing.assert_allclose(shi, hi + c, rtol=1e-10)
