"""Bootstrap intervals (simcheck.intervals.bootstrap) against scipy and theory.

Sources named beside the checks:
- scipy.stats.bootstrap (SciPy 1.17; percentile and BCa as in Efron &
  Tibshirani 1993, ch. 13-14) computed in the test, on the same samples;
- Efron, B. and Tibshirani, R. J. (1993). An Introduction to the Bootstrap.
  Chapman & Hall: bootstrap-t (ch. 12), BCa second-order accuracy (ch. 14,
  sec. 14.3; ch. 22 on second-order accuracy, from memory).
Statistical assertions are within 4 Monte Carlo standard errors, fixed seeds.
"""

from __future__ import annotations

import os
import tracemalloc
import warnings
from types import SimpleNamespace

import numpy as np
import pytest
from scipy import stats

from simcheck.errors import InputError
from simcheck.intervals import REGISTRY, get_method
from simcheck.intervals import bootstrap as bs

LOGNORMAL_MEAN = float(np.exp(0.5))  # mean of lognormal(0, 1): exp(mu + sigma^2/2), common practice


def _diff_stat(a, b, axis=-1):
    return a.mean(axis=axis) - b.mean(axis=axis)


def _covers(lo, hi, truth):
    return (lo <= truth) & (truth <= hi)


# ----------------------------------------------------------------- registry


def test_six_methods_registered():
    for name in ("bootstrap-percentile", "bootstrap-bca", "bootstrap-t"):
        one = get_method("mean", name)
        two = get_method("mean-diff", name)
        assert one.kind == "sample" and two.kind == "sample2"
        assert one.shift_equivariant and two.shift_equivariant
        assert any("Efron" in r and "1993" in r for r in one.references)
    assert sum(1 for (e, n) in REGISTRY if n.startswith("bootstrap") and e in ("mean", "mean-diff")) == 6


# ------------------------------------------ exact agreement of the formulas


def _our_distribution(x, resamples, seed):
    """Our resample means, drawn exactly as the interval function draws them:
    tasks of fixed rows, task i with its own generator from the call's rng."""
    r_total, n = x.shape
    rows = bs._rows_per_chunk(bs._units(n), resamples, 1)
    task_rows = rows * bs._CHUNKS_PER_TASK
    entropy = bs._task_entropy(np.random.default_rng(seed))
    res = bs._Resampler(n, min(r_total, rows), resamples, False, None)
    out = np.empty((r_total, resamples))
    for i, t0 in enumerate(range(0, r_total, task_rows)):
        res.reseed(bs._task_generator(entropy, i))
        for r0 in range(t0, min(r_total, t0 + task_rows), rows):
            r1 = min(r_total, t0 + task_rows, r0 + rows)
            s, _ = res.run(x[r0:r1])
            out[r0:r1] = s / n
    return out


@pytest.mark.parametrize("n", [2, 7, 20, 150])
@pytest.mark.parametrize("method", ["percentile", "BCa"])
def test_same_resamples_give_scipys_interval(n, method):
    # Source: scipy.stats.bootstrap (z0 with half-counted ties, jackknife
    # acceleration, linear-interpolation quantiles) fed our own bootstrap
    # distribution through its bootstrap_result argument: the endpoints must
    # agree to rounding. Rows include 0/1 data (ties at the sample mean) and
    # odd n (the single-value tail of the pair tables); n = 150 uses no pairs.
    g = np.random.default_rng(100 + n)
    x = g.lognormal(0, 1, (12, n))
    x[:4] = g.integers(0, 2, (4, n))
    x[:4, 0], x[:4, 1] = 0.0, 1.0  # not constant
    b = 499
    dist = _our_distribution(x, b, seed=7)
    # A resample that is a permutation of the sample ties with the sample
    # mean, but summed in another order it can differ in the last bit; scipy
    # then counts it as below or above by chance, we count it as a tie (half).
    # Snap such rounding ties before handing the distribution to scipy.
    theta = x.mean(axis=1, keepdims=True)
    dist = np.where(np.abs(dist - theta) <= 1e-12 * np.abs(x).max(axis=1, keepdims=True), theta, dist)
    ref = stats.bootstrap((x,), np.mean, axis=-1, vectorized=True, method=method, n_resamples=0,
                          bootstrap_result=SimpleNamespace(bootstrap_distribution=dist), confidence_level=0.9)
    f = bs.bca_mean if method == "BCa" else bs.percentile_mean
    lo, hi, deg = f(x, 0.9, rng=np.random.default_rng(7), resamples=b)
    assert not deg.any()
    np.testing.assert_allclose(lo, ref.confidence_interval.low, rtol=1e-10, atol=1e-12)
    np.testing.assert_allclose(hi, ref.confidence_interval.high, rtol=1e-10, atol=1e-12)


def test_tiled_resampling_has_the_bootstrap_moments(monkeypatch):
    # Tiny tiles force several resample tiles per replicate (the path for
    # large n and B). The resample means of ordinary resampling have mean
    # x-bar and variance m2/n (m2 = central second moment, divisor n)
    # (Efron & Tibshirani 1993, ch. 5 and 6): check both within 4 MCSE, and
    # the interval against scipy fed the same distribution.
    monkeypatch.setattr(bs, "_TILE_ELEMS", 700)
    g = np.random.default_rng(5)
    x = g.normal(size=(6, 21))
    b = 4999
    dist = _our_distribution(x, b, seed=9)
    m2 = x.var(axis=1)
    v = m2 / 21
    assert np.all(np.abs(dist.mean(axis=1) - x.mean(axis=1)) <= 4 * np.sqrt(v / b))
    # SE of a sample variance of B near-normal values: v sqrt(2 / (B - 1))
    assert np.all(np.abs(dist.var(axis=1, ddof=1) - v) <= 4 * v * np.sqrt(2 / (b - 1)) + 1e-12)
    # tiles draw fresh indices: repeated resample means are rare for continuous data
    assert all(np.unique(row).size > 0.99 * b for row in dist)
    lo, hi, _ = bs.percentile_mean(x, 0.9, rng=np.random.default_rng(9), resamples=b)
    ref = stats.bootstrap((x,), np.mean, axis=-1, vectorized=True, method="percentile", n_resamples=0,
                          bootstrap_result=SimpleNamespace(bootstrap_distribution=dist), confidence_level=0.9)
    np.testing.assert_allclose(lo, ref.confidence_interval.low, rtol=1e-10)
    np.testing.assert_allclose(hi, ref.confidence_interval.high, rtol=1e-10)


def test_closed_form_acceleration_matches_scipy_jackknife():
    # Source: scipy.stats._resampling._bca_interval (loop over jackknife
    # resamples) returns a_hat; ours is the closed form for (differences of)
    # means. One and two samples.
    from scipy.stats._resampling import _bca_interval

    g = np.random.default_rng(3)
    xa, xb = g.gamma(0.7, size=(5, 13)), g.lognormal(size=(5, 9))
    fake = g.normal(size=(5, 99))
    _, _, a1 = _bca_interval((xa,), np.mean, -1, 0.05, fake, None, xp=np)
    e = xa - xa.mean(1, keepdims=True)
    np.testing.assert_allclose((e**3).sum(1) / (6 * (e**2).sum(1) ** 1.5), a1, rtol=1e-10)
    _, _, a2 = _bca_interval((xa, xb), _diff_stat, -1, 0.05, fake, None, xp=np)
    eb = xb - xb.mean(1, keepdims=True)
    num = (e**3).sum(1) / 13**3 - (eb**3).sum(1) / 9**3
    den = (e**2).sum(1) / 13**2 + (eb**2).sum(1) / 9**2
    np.testing.assert_allclose(num / (6 * den**1.5), a2, rtol=1e-10)


def test_index_source_is_uniform():
    # Threshold rejection + division by a constant: exact uniform law, checked
    # with scipy.stats.chisquare on 16-bit words (s = 7, 2500, 2**14: with and
    # without rejection) and 32-bit words (s = 40000). Fixed seed; p > 1e-4
    # (common practice).
    for s in (7, 2500, 2**14, 40000):
        src = bs._IndexSource(np.random.default_rng(s), 400_000)
        out = np.empty(400_000, dtype=np.intp)
        src.fill(out, s)
        assert out.min() >= 0 and out.max() < s
        counts = np.bincount(out, minlength=s)
        assert stats.chisquare(counts).pvalue > 1e-4


# ------------------------------------ agreement with scipy in distribution


def _rel(a, b):
    return np.abs(a - b) / np.maximum(np.abs(b), 1e-12)


@pytest.mark.parametrize("method,ours", [("percentile", bs.percentile_mean), ("BCa", bs.bca_mean)])
def test_endpoints_agree_with_scipy_in_distribution(method, ours):
    # Source: scipy.stats.bootstrap on the same samples. Our endpoints differ
    # from scipy's by no more than two scipy runs with different seeds do
    # (median relative difference, 1.5x, floor 1e-3).
    g = np.random.default_rng(21)
    x = g.lognormal(0, 1, (300, 20))
    b = 1999
    run = lambda seed: stats.bootstrap((x,), np.mean, axis=-1, vectorized=True, method=method,
                                       n_resamples=b, rng=np.random.default_rng(seed)).confidence_interval
    s1, s2 = run(1), run(2)
    lo, hi, _ = ours(x, 0.95, rng=np.random.default_rng(3), resamples=b)
    for mine, ref, other in ((lo, s1.low, s2.low), (hi, s1.high, s2.high)):
        assert np.median(_rel(mine, ref)) <= 1.5 * np.median(_rel(other, ref)) + 1e-3


def test_two_sample_endpoints_agree_with_scipy_in_distribution():
    # Source: scipy.stats.bootstrap with two samples (resampled separately,
    # paired=False), BCa and percentile, on the same samples; criterion as
    # above but on absolute differences (endpoints of a difference can be
    # near zero, where relative differences are unstable).
    g = np.random.default_rng(22)
    xa, xb = g.lognormal(0, 1, (200, 15)), g.gamma(2.0, size=(200, 25))
    b = 1999
    run = lambda seed: stats.bootstrap((xa, xb), _diff_stat, axis=-1, vectorized=True, method="BCa",
                                       n_resamples=b, rng=np.random.default_rng(seed)).confidence_interval
    s1, s2 = run(1), run(2)
    for f in (bs.bca_diff, bs.percentile_diff):
        lo, hi, _ = f(xa, xb, 0.95, rng=np.random.default_rng(3), resamples=b)
        if f is bs.percentile_diff:
            p = stats.bootstrap((xa, xb), _diff_stat, axis=-1, vectorized=True, method="percentile",
                                n_resamples=b, rng=np.random.default_rng(1)).confidence_interval
            q = stats.bootstrap((xa, xb), _diff_stat, axis=-1, vectorized=True, method="percentile",
                                n_resamples=b, rng=np.random.default_rng(2)).confidence_interval
            refs = ((lo, p.low, q.low), (hi, p.high, q.high))
        else:
            refs = ((lo, s1.low, s2.low), (hi, s1.high, s2.high))
        for mine, ref, other in refs:
            assert np.median(np.abs(mine - ref)) <= 1.5 * np.median(np.abs(other - ref)) + 1e-3


# ------------------------------------------------------------------ coverage


@pytest.mark.parametrize("method,ours", [("percentile", bs.percentile_mean), ("BCa", bs.bca_mean)])
def test_coverage_agrees_with_scipy(method, ours):
    # Source: coverage of scipy.stats.bootstrap intervals on the same 400
    # lognormal(0, 1) samples of n = 15 (999 resamples). Difference within
    # 4 MCSE of the paired difference (floor: one replicate).
    g = np.random.default_rng(31)
    r = 400
    x = g.lognormal(0, 1, (r, 15))
    ci = stats.bootstrap((x,), np.mean, axis=-1, vectorized=True, method=method, n_resamples=999,
                         rng=np.random.default_rng(32)).confidence_interval
    ref = _covers(ci.low, ci.high, LOGNORMAL_MEAN)
    lo, hi, _ = ours(x, 0.95, rng=np.random.default_rng(33), resamples=999)
    mine = _covers(lo, hi, LOGNORMAL_MEAN)
    d = mine.astype(float) - ref
    mcse = max(d.std(ddof=1) / np.sqrt(r), 1.0 / r)
    assert abs(d.mean()) <= 4 * mcse
    # and a real difference from nominal exists at n = 15 (first-order error,
    # Efron & Tibshirani 1993 ch. 14), so the comparison is not vacuous
    assert mine.mean() < 0.95


def test_bootstrap_t_nominal_on_normal_data():
    # Source: Efron & Tibshirani (1993) ch. 12 - the bootstrap-t is second-order
    # accurate; on normal data at n = 30 coverage is the nominal 95% within
    # 4 MCSE (2,000 replicates).
    g = np.random.default_rng(41)
    r = 2000
    x = g.normal(10.0, 3.0, (r, 30))
    lo, hi, deg = bs.t_mean(x, 0.95, rng=np.random.default_rng(42), resamples=999)
    cov = _covers(lo, hi, 10.0).mean()
    assert not deg.any()
    assert abs(cov - 0.95) <= 4 * np.sqrt(0.95 * 0.05 / r)


@pytest.mark.slow
def test_bca_covers_better_than_percentile_on_skewed_data():
    # Source: Efron & Tibshirani (1993) ch. 14 and ch. 22 (from memory): BCa is
    # second-order accurate, the percentile interval only first-order; on
    # lognormal(0, 1) data at n = 20 BCa's coverage is higher (both below
    # 95%). Paired difference over 10,000 samples must exceed 4 MCSE (the
    # difference is about 0.014 with a per-sample SD of 0.21, so 10,000
    # samples put it about 6.7 MCSE from zero; 4,000 gave only about 4).
    g = np.random.default_rng(51)
    r = 10_000
    x = g.lognormal(0, 1, (r, 20))
    lo, hi, _ = bs.percentile_mean(x, 0.95, rng=np.random.default_rng(52), resamples=999)
    pct = _covers(lo, hi, LOGNORMAL_MEAN)
    lo, hi, _ = bs.bca_mean(x, 0.95, rng=np.random.default_rng(52), resamples=999)
    bca = _covers(lo, hi, LOGNORMAL_MEAN)
    d = bca.astype(float) - pct
    assert d.mean() > 4 * d.std(ddof=1) / np.sqrt(r)
    assert bca.mean() < 0.95


@pytest.mark.parametrize("f", [bs.percentile_diff, bs.bca_diff, bs.t_diff])
def test_two_sample_covers_true_difference(f):
    # Common practice: normal groups (unequal SDs and sizes, 50 and 60) - every
    # bootstrap interval for mean_a - mean_b reaches 95% within 4 MCSE.
    g = np.random.default_rng(61)
    r = 1000
    xa = g.normal(5.0, 2.0, (r, 50))
    xb = g.normal(3.0, 1.0, (r, 60))
    lo, hi, deg = f(xa, xb, 0.95, rng=np.random.default_rng(62), resamples=499)
    assert not deg.any() and np.all(lo < hi)
    assert abs(_covers(lo, hi, 2.0).mean() - 0.95) <= 4 * np.sqrt(0.95 * 0.05 / r)


# ---------------------------------------------------------------- degenerate


@pytest.mark.parametrize("f", [bs.percentile_mean, bs.bca_mean, bs.t_mean])
def test_degenerate_samples_counted_without_warnings(f):
    # Zero-inflated data at n = 5: about a third of the samples are all zero
    # (0.8^5); plus constant non-zero rows and n = 1.
    g = np.random.default_rng(71)
    x = np.where(g.random((300, 5)) < 0.8, 0.0, g.lognormal(0, 1, (300, 5)))
    x[:3] = 2.5
    const = x.min(1) == x.max(1)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        lo, hi, deg = f(x, 0.95, rng=np.random.default_rng(72), resamples=199)
        lo1, hi1, deg1 = f(x[:, :1], 0.95, rng=np.random.default_rng(72), resamples=199)
    assert deg.dtype == bool and deg.shape == (300,)
    np.testing.assert_array_equal(deg, const)
    assert 60 < deg.sum() < 150
    np.testing.assert_array_equal(lo[deg], x[deg, 0])
    np.testing.assert_array_equal(hi[deg], x[deg, 0])
    ok = ~deg
    assert np.all(~np.isnan(lo[ok])) and np.all(~np.isnan(hi[ok])) and np.all(lo[ok] <= hi[ok])
    assert deg1.all() and np.array_equal(lo1, x[:, 0]) and np.array_equal(hi1, x[:, 0])


def test_bootstrap_t_zero_sd_resamples():
    # n = 3 with two equal values: many resamples are constant (s* = 0) and
    # take t* = +-inf (module docstring); endpoints may be infinite, never NaN.
    x = np.array([[0.0, 0.0, 1.0], [1.0, 2.0, 4.0]])
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        lo, hi, deg = bs.t_mean(x, 0.95, rng=np.random.default_rng(1), resamples=999)
    assert not deg.any()
    assert not np.isnan(lo).any() and not np.isnan(hi).any()
    assert np.all(lo <= x.mean(1)) and np.all(hi >= x.mean(1))
    # P(all three draws equal) = 1/9 > 2.5%, so both endpoints are infinite
    assert np.isinf(lo).all() and np.isinf(hi).all()


@pytest.mark.parametrize("f", [bs.percentile_diff, bs.bca_diff, bs.t_diff])
def test_two_sample_degenerate(f):
    g = np.random.default_rng(81)
    xa = np.where(g.random((200, 4)) < 0.7, 0.0, 1.0)
    xb = np.where(g.random((200, 3)) < 0.7, 0.0, 1.0)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        lo, hi, deg = f(xa, xb, 0.9, rng=np.random.default_rng(82), resamples=199)
    both = (xa.min(1) == xa.max(1)) & (xb.min(1) == xb.max(1))
    assert both.sum() > 5
    np.testing.assert_array_equal(deg, both)
    np.testing.assert_array_equal(lo[deg], (xa.mean(1) - xb.mean(1))[deg])
    np.testing.assert_array_equal(hi[deg], lo[deg])
    assert not np.isnan(lo).any() and not np.isnan(hi).any()


# ------------------------------------------------- reproducibility, memory, input


@pytest.mark.parametrize("f", [bs.percentile_mean, bs.bca_mean, bs.t_mean])
def test_reproducible_for_fixed_seed(f):
    x = np.random.default_rng(91).exponential(size=(50, 12))
    a = f(x, 0.9, rng=np.random.default_rng(5), resamples=299)
    b = f(x, 0.9, rng=np.random.default_rng(5), resamples=299)
    c = f(x, 0.9, rng=np.random.default_rng(6), resamples=299)
    for u, v in zip(a, b):
        np.testing.assert_array_equal(u, v)
    assert not np.array_equal(a[0], c[0])


def test_two_sample_reproducible():
    g = np.random.default_rng(92)
    xa, xb = g.exponential(size=(40, 9)), g.exponential(size=(40, 11))
    a = bs.t_diff(xa, xb, 0.9, rng=np.random.default_rng(5), resamples=199)
    b = bs.t_diff(xa, xb, 0.9, rng=np.random.default_rng(5), resamples=199)
    for u, v in zip(a, b):
        np.testing.assert_array_equal(u, v)


@pytest.mark.parametrize("f", [bs.percentile_mean, bs.bca_mean, bs.t_mean])
def test_same_result_for_any_thread_count(f):
    # Tasks have fixed rows and their own generators, so 1, 2 and 3 threads
    # give bitwise identical endpoints. n = 30, B = 999: tasks of 136 rows,
    # so 400 replicates make three tasks (one short).
    x = np.random.default_rng(95).lognormal(size=(400, 30))
    assert bs._rows_per_chunk(bs._units(30), 999, 1) * bs._CHUNKS_PER_TASK < 200
    runs = [f(x, 0.9, rng=np.random.default_rng(5), resamples=999, threads=t) for t in (1, 2, 3)]
    for other in runs[1:]:
        for u, v in zip(runs[0], other):
            np.testing.assert_array_equal(u, v)


@pytest.mark.parametrize("f", [bs.percentile_diff, bs.bca_diff, bs.t_diff])
def test_two_sample_same_result_for_any_thread_count(f):
    g = np.random.default_rng(96)
    xa, xb = g.lognormal(size=(300, 30)), g.gamma(2.0, size=(300, 41))
    runs = [f(xa, xb, 0.9, rng=np.random.default_rng(5), resamples=999, threads=t) for t in (1, 2, 3)]
    for other in runs[1:]:
        for u, v in zip(runs[0], other):
            np.testing.assert_array_equal(u, v)


def test_thread_count_from_environment(monkeypatch):
    monkeypatch.delenv("SIMCHECK_THREADS", raising=False)
    from simcheck.threads import available_cores

    assert bs.bootstrap_threads() == available_cores()
    monkeypatch.setenv("SIMCHECK_THREADS", " 3 ")
    assert bs.bootstrap_threads() == 3
    x = np.random.default_rng(97).exponential(size=(20, 8))
    for bad in ("0", "-2", "2.5", "many"):
        monkeypatch.setenv("SIMCHECK_THREADS", bad)
        with pytest.raises(ValueError, match="SIMCHECK_THREADS"):
            bs.bootstrap_threads()
        with pytest.raises(ValueError, match="SIMCHECK_THREADS"):
            bs.bca_mean(x, 0.9, rng=np.random.default_rng(1), resamples=99)
    # the keyword overrides the environment, and is checked itself
    lo, _, _ = bs.bca_mean(x, 0.9, rng=np.random.default_rng(1), resamples=99, threads=2)
    assert lo.shape == (20,)
    for bad in (0, True, 1.5):
        with pytest.raises(ValueError, match="threads"):
            bs.t_diff(x, x, 0.9, rng=np.random.default_rng(1), resamples=99, threads=bad)


def _peak(f, *args, **kw):
    tracemalloc.start()
    try:
        f(*args, **kw)
        return tracemalloc.get_traced_memory()[1]
    finally:
        tracemalloc.stop()


@pytest.mark.slow
def test_memory_bounded_for_large_study():
    # R = 5,000, n = 50, B = 1,999 (5e8 resampled values, 4 GB, if
    # materialised): tracemalloc peak within the documented bound (input not
    # counted).
    x = np.random.default_rng(93).lognormal(size=(5_000, 50))
    # all MAX_THREADS threads at once, each with its own buffers
    peak = _peak(bs.bca_mean, x, 0.95, rng=np.random.default_rng(1), resamples=1999, threads=bs.MAX_THREADS)
    assert peak <= bs.MEMORY_BOUND


@pytest.mark.parametrize("n", [3, 300])
def test_memory_bounded_bootstrap_t_and_two_sample(n):
    x = np.random.default_rng(94).lognormal(size=(400 if n < 100 else 40, n))
    # all MAX_THREADS threads at once (tracemalloc sees every thread)
    kw = dict(rng=np.random.default_rng(1), resamples=999, threads=bs.MAX_THREADS)
    assert _peak(bs.t_mean, x, 0.95, **kw) <= bs.MEMORY_BOUND
    kw["rng"] = np.random.default_rng(1)
    assert _peak(bs.t_diff, x, x[:, ::-1], 0.95, **kw) <= bs.MEMORY_BOUND


def test_empty_block():
    lo, hi, deg = bs.bca_mean(np.empty((0, 8)), 0.9, rng=np.random.default_rng(1), resamples=99)
    assert lo.shape == hi.shape == deg.shape == (0,)
    lo, hi, deg = bs.t_diff(np.empty((0, 8)), np.empty((0, 3)), 0.9, rng=np.random.default_rng(1), resamples=99)
    assert lo.shape == (0,)


def test_bad_input_names_the_field():
    x = np.ones((2, 5))
    with pytest.raises(InputError, match="target.confidence"):
        bs.bca_mean(x, 1.5, rng=np.random.default_rng(1), resamples=99)
    with pytest.raises(InputError, match="method.resamples"):
        bs.bca_mean(x, 0.9, rng=np.random.default_rng(1), resamples=0)
    with pytest.raises(InputError, match="method.resamples"):
        bs.t_diff(x, x, 0.9, rng=np.random.default_rng(1), resamples=True)
