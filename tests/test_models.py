"""Tests of the data models (simcheck.models).

Sources: exact results computed with scipy (scipy.stats frozen laws and their
``stats``/``moment``/``sf``/``pmf``), and the moment formulas of Johnson, N. L.,
Kotz, S. and Balakrishnan, N. (1994), Continuous Univariate Distributions,
Vol. 1, 2nd ed. (ch. 10 truncated normal, ch. 14 lognormal, ch. 17 gamma),
named beside each check. Statistical checks: fixed seeds, within 4 Monte
Carlo standard errors (MCSE).
"""

from __future__ import annotations

import math
import tracemalloc

import numpy as np
import pytest
from scipy import stats

from simcheck.errors import InputError
from simcheck.models import REGISTRY, from_scipy, make_model
from simcheck.models.composite import EventModel, ScipyModel


def _lognorm_from_mean_cv(mean, cv):
    # Johnson, Kotz & Balakrishnan (1994), ch. 14, eq. 14.8a: E X = exp(mu + s^2/2), CV^2 = exp(s^2) - 1.
    s2 = math.log(1 + cv * cv)
    return stats.lognorm(s=math.sqrt(s2), scale=math.exp(math.log(mean) - s2 / 2))


def _beta_shapes(mean, sd, lo=0.0, hi=1.0):
    # Method-of-moments shapes of a beta on [lo, hi] (common practice).
    m, v = (mean - lo) / (hi - lo), (sd / (hi - lo)) ** 2
    k = m * (1 - m) / v - 1
    return m * k, (1 - m) * k


class _ZIRef:
    """Reference law of 0 w.p. pi else ``inner`` (raw moments via scipy's ``moment``)."""

    def __init__(self, pi, inner):
        self.pi, self.inner = pi, inner

    def stats(self, moments="mvs"):
        r = [(1 - self.pi) * self.inner.moment(k) for k in (1, 2, 3)]
        return _mvs_from_raw(r)

    def sf(self, x):
        return self.pi * (0 > x) + (1 - self.pi) * self.inner.sf(x)


class _MixRef:
    """Reference finite mixture of scipy laws (raw moments via scipy's ``moment``)."""

    def __init__(self, weights, dists):
        self.w, self.d = weights, dists

    def stats(self, moments="mvs"):
        r = [sum(w * d.moment(k) for w, d in zip(self.w, self.d)) for k in (1, 2, 3)]
        return _mvs_from_raw(r)

    def sf(self, x):
        return sum(w * d.sf(x) for w, d in zip(self.w, self.d))


def _mvs_from_raw(r):
    m = r[0]
    var = r[1] - m * m
    mu3 = r[2] - 3 * m * r[1] + 2 * m**3
    return m, var, mu3 / var**1.5


# (table, reference law) — every reference is a scipy.stats law built
# independently of simcheck's own conversions ("exact result computed with scipy").
CASES = [
    ({"model": "normal", "mean": 1.0, "sd": 2.0}, stats.norm(1, 2)),
    ({"model": "lognormal", "mean": 6.0, "cv": 0.5}, _lognorm_from_mean_cv(6.0, 0.5)),
    ({"model": "lognormal", "meanlog": 1.0, "sdlog": 0.4}, stats.lognorm(s=0.4, scale=math.e)),
    ({"model": "gamma", "mean": 2.0, "cv": 0.5}, stats.gamma(a=4.0, scale=0.5)),
    ({"model": "gamma", "shape": 0.7, "scale": 3.0}, stats.gamma(a=0.7, scale=3.0)),
    ({"model": "exponential", "mean": 3.0}, stats.expon(scale=3.0)),
    ({"model": "weibull", "shape": 1.5, "scale": 2.0}, stats.weibull_min(1.5, scale=2.0)),
    ({"model": "beta", "mean": 0.3, "sd": 0.1}, stats.beta(*_beta_shapes(0.3, 0.1))),
    ({"model": "beta", "a": 2.0, "b": 3.0, "lower": 10.0, "upper": 20.0}, stats.beta(2, 3, loc=10, scale=10)),
    ({"model": "uniform", "lower": 1.0, "upper": 3.0}, stats.uniform(1, 2)),
    ({"model": "truncated-normal", "mean": 0.0, "sd": 1.0, "lower": 0.5}, stats.truncnorm(0.5, np.inf)),
    ({"model": "truncated-normal", "mean": 10.0, "sd": 2.0, "lower": 8.0, "upper": 15.0},
     stats.truncnorm(-1.0, 2.5, loc=10, scale=2)),
    ({"model": "truncated-normal", "mean": 0.0, "sd": 1.0, "upper": -5.0}, stats.truncnorm(-np.inf, -5.0)),
    ({"model": "categorical", "values": [1, 2, 5], "probs": [0.2, 0.3, 0.5]},
     stats.rv_discrete(values=([1, 2, 5], [0.2, 0.3, 0.5]))),
    ({"model": "bernoulli", "p": 0.2}, stats.bernoulli(0.2)),
    ({"model": "poisson", "mean": 3.0}, stats.poisson(3.0)),
    ({"model": "negative-binomial", "mean": 3.0, "dispersion": 2.0}, stats.nbinom(2.0, 2.0 / 5.0)),
    ({"model": "student-t", "df": 10.0, "mean": 1.0, "scale": 2.0}, stats.t(10.0, loc=1.0, scale=2.0)),
    ({"model": "zero-inflated", "zero_prob": 0.3, "inner": {"model": "gamma", "shape": 2.0, "scale": 5.0}},
     _ZIRef(0.3, stats.gamma(2.0, scale=5.0))),
    ({"model": "mixture", "weights": [0.4, 0.6],
      "components": [{"model": "normal", "mean": 0, "sd": 1}, {"model": "exponential", "mean": 5}]},
     _MixRef([0.4, 0.6], [stats.norm(0, 1), stats.expon(scale=5)])),
]
IDS = [f"{c[0]['model']}-{i}" for i, c in enumerate(CASES)]


@pytest.mark.parametrize("table,ref", CASES, ids=IDS)
def test_true_moments_match_scipy(table, ref):
    # Exact result computed with scipy: mean, variance, skewness of the reference law.
    m = make_model(table)
    rm, rv, rs = (float(x) for x in ref.stats(moments="mvs"))
    assert m.mean == pytest.approx(rm, rel=1e-9, abs=1e-12)
    assert m.sd == pytest.approx(math.sqrt(rv), rel=1e-9)
    assert m.skewness == pytest.approx(rs, rel=1e-7, abs=1e-9)


@pytest.mark.parametrize("table,ref", CASES, ids=IDS)
def test_sample_moments_within_4_mcse(table, ref):
    # Large fixed-seed draws: mean, E(X - mu)^2 and E(X - mu)^3 (true mu) within 4 MCSE
    # of the stated true values; each MCSE is the sample SD of the averaged terms / sqrt(N).
    m = make_model(table)
    x = m.draw(np.random.default_rng(20261201), (40, 5000)).ravel()
    n = x.size
    assert abs(x.mean() - m.mean) <= 4 * x.std() / math.sqrt(n)
    d = x - m.mean
    d2, d3 = d * d, d * d * d
    assert abs(d2.mean() - m.sd**2) <= 4 * d2.std() / math.sqrt(n)
    assert abs(d3.mean() - m.skewness * m.sd**3) <= 4 * d3.std() / math.sqrt(n) + 1e-12


def test_lognormal_trade_parameterisation():
    # Johnson, Kotz & Balakrishnan (1994), ch. 14: sdlog^2 = log(1 + cv^2), meanlog = log(mean) - sdlog^2/2,
    # skewness (cv^2 + 3) cv.
    m = make_model({"model": "lognormal", "mean": 6, "cv": 1.2})
    assert m.sdlog == pytest.approx(math.sqrt(math.log(1 + 1.44)))
    assert m.meanlog == pytest.approx(math.log(6) - math.log(1 + 1.44) / 2)
    assert m.mean == pytest.approx(6.0) and m.sd == pytest.approx(7.2)
    assert m.skewness == pytest.approx((1.44 + 3) * 1.2)
    # Exact result computed with scipy.
    ref = stats.lognorm(s=m.sdlog, scale=math.exp(m.meanlog))
    assert ref.stats("s") == pytest.approx(m.skewness)


def test_truncated_normal_mean_formula():
    # Johnson, Kotz & Balakrishnan (1994), sec. 10.1: E X = mu + sd (phi(a) - phi(b)) / (Phi(b) - Phi(a)).
    m = make_model({"model": "truncated-normal", "mean": 10.0, "sd": 2.0, "lower": 8.0, "upper": 15.0})
    a, b = -1.0, 2.5
    expect = 10 + 2 * (stats.norm.pdf(a) - stats.norm.pdf(b)) / (stats.norm.cdf(b) - stats.norm.cdf(a))
    assert m.mean == pytest.approx(expect, rel=1e-12)
    x = m.draw(np.random.default_rng(3), (10, 1000))
    assert x.min() >= 8.0 and x.max() <= 15.0


def test_far_tail_truncation_stays_in_bounds():
    # An interval 8-9 SDs above the parent mean (mirrored to the lower tail internally).
    m = make_model({"model": "truncated-normal", "mean": 0.0, "sd": 1.0, "lower": 8.0, "upper": 9.0})
    ref = stats.truncnorm(8.0, 9.0)  # exact result computed with scipy
    assert m.mean == pytest.approx(ref.mean(), rel=1e-9)
    x = m.draw(np.random.default_rng(4), (20, 1000)).ravel()
    assert x.min() >= 8.0 and x.max() <= 9.0
    assert abs(x.mean() - m.mean) <= 4 * x.std() / math.sqrt(x.size)


def test_student_t_skewness_undefined_for_small_df():
    # The third moment of t(df) exists only for df > 3 (common practice).
    assert make_model({"model": "student-t", "df": 3, "mean": 0, "scale": 1}).skewness is None
    m = make_model({"model": "student-t", "df": 4, "mean": 0, "scale": 1})
    assert m.skewness == 0.0
    assert m.sd == pytest.approx(float(np.sqrt(stats.t(4).var())))  # exact result computed with scipy


def test_negative_binomial_variance_function():
    # NB2: var = mean + mean^2 / dispersion (Cameron & Trivedi 2013, Regression Analysis of Count Data, sec. 3.3).
    m = make_model({"model": "negative-binomial", "mean": 4.0, "dispersion": 0.5})
    assert m.sd**2 == pytest.approx(4.0 + 16.0 / 0.5)


# ---------------------------------------------------------------------------
# bad parameters (field named, reason given)
# ---------------------------------------------------------------------------

BAD = [
    ({"model": "lognormal", "mean": 6, "cv": 1.2, "meanlog": 1, "sdlog": 1}, "meanlog", "not both"),
    ({"model": "lognormal", "mean": 6}, "cv", "missing"),
    ({"model": "lognormal", "mean": 6, "cvv": 1.0}, "cvv", "did you mean 'cv'"),
    ({"model": "lognormal", "mean": 6, "cv": 0}, "cv", "> 0"),
    ({"model": "lognormal", "mean": True, "cv": 1}, "mean", "must be a number"),
    ({"model": "lognormal", "mean": 6, "cv": float("nan")}, "cv", "finite"),
    ({"model": "normal", "mean": 1, "sd": float("inf")}, "sd", "finite"),
    ({"model": "normal", "mean": "1", "sd": 1}, "mean", "must be a number"),
    ({"model": "gamma", "mean": 2, "cv": -1}, "cv", "> 0"),
    ({"model": "gamma", "shape": 2}, "scale", "missing"),
    ({"model": "exponential", "mean": 0}, "mean", "> 0"),
    ({"model": "weibull", "shape": 1, "scael": 2}, "scael", "did you mean 'scale'"),
    ({"model": "beta", "mean": 0.5, "sd": 0.6}, "sd", "sd^2 must be < (mean - lower)(upper - mean)"),
    ({"model": "beta", "mean": 0.2, "sd": 0.4}, "sd", "too large"),
    ({"model": "beta", "mean": 1.5, "sd": 0.1}, "mean", "strictly between"),
    ({"model": "beta", "a": 2, "b": 3, "lower": 5, "upper": 5}, "upper", "> lower"),
    ({"model": "uniform", "lower": 3, "upper": 1}, "upper", "> lower"),
    ({"model": "truncated-normal", "mean": 0, "sd": 1}, "lower", "lower, upper or both"),
    ({"model": "truncated-normal", "mean": 0, "sd": 1, "lower": 2, "upper": 1}, "upper", "> lower"),
    ({"model": "truncated-normal", "mean": 0, "sd": 1, "lower": 50}, "lower", "zero probability"),
    ({"model": "categorical", "values": [1, 2], "probs": [0.2, 0.3]}, "probs", "sum to 1"),
    ({"model": "categorical", "values": [1, 2, 3], "probs": [0.5, 0.5]}, "probs", "one probability per value"),
    ({"model": "categorical", "values": [1, 1], "probs": [0.5, 0.5]}, "values[1]", "repeats"),
    ({"model": "categorical", "values": [1, 2], "probs": [1.5, -0.5]}, "probs[0]", "in [0, 1]"),
    ({"model": "categorical", "values": 3, "probs": [1.0]}, "values", "list of numbers"),
    ({"model": "bernoulli", "p": 1.0}, "p", "in (0, 1)"),
    ({"model": "bernoulli", "p": False}, "p", "must be a number"),
    ({"model": "poisson", "mean": -1}, "mean", "> 0"),
    ({"model": "negative-binomial", "mean": 3}, "dispersion", "missing"),
    ({"model": "student-t", "df": 2, "mean": 0, "scale": 1}, "df", "no finite SD"),
    ({"model": "zero-inflated", "zero_prob": 0.2, "inner": {"model": "lognormal", "mean": 50, "cv": -1}}, "inner.cv", "> 0"),
    ({"model": "zero-inflated", "zero_prob": 0.2, "inner": {"model": "lognormall"}}, "inner.model", "unknown model"),
    ({"model": "zero-inflated", "zero_prob": 1.0, "inner": {"model": "poisson", "mean": 2}}, "zero_prob", "in (0, 1)"),
    ({"model": "mixture", "weights": [0.5, 0.5],
      "components": [{"model": "normal", "mean": 0, "sd": 1}, {"model": "normal", "mean": 0, "sd": -2}]},
     "components[1].sd", "> 0"),
    ({"model": "mixture", "weights": [0.5, 0.6],
      "components": [{"model": "normal", "mean": 0, "sd": 1}, {"model": "normal", "mean": 5, "sd": 2}]},
     "weights", "sum to 1"),
]


@pytest.mark.parametrize("table,field,text", BAD, ids=[f"{b[0]['model']}-{b[1]}-{i}" for i, b in enumerate(BAD)])
def test_bad_parameters_name_the_field(table, field, text):
    with pytest.raises(InputError) as ei:
        make_model(table)
    fields = {p.field: p.message for p in ei.value.problems}
    assert field in fields, ei.value.one_line()
    assert text in fields[field], fields[field]


def test_all_problems_reported_at_once():
    with pytest.raises(InputError) as ei:
        make_model({"model": "beta", "mean": "x", "sd": -1, "lowr": 0})
    fields = {p.field for p in ei.value.problems}
    assert fields == {"mean", "sd", "lowr"}
    assert "\n" not in ei.value.one_line()


# ---------------------------------------------------------------------------
# event probabilities (exact results computed with scipy)
# ---------------------------------------------------------------------------

EVENTS = [
    ({"model": "normal", "mean": 1.0, "sd": 2.0}, {"above": 2.5}, stats.norm(1, 2).sf(2.5)),
    ({"model": "lognormal", "mean": 50.0, "cv": 1.0}, {"above": 120.0}, _lognorm_from_mean_cv(50, 1).sf(120.0)),
    ({"model": "lognormal", "mean": 50.0, "cv": 1.0}, {"above": -3.0}, 1.0),
    ({"model": "gamma", "shape": 0.7, "scale": 3.0}, {"above": 4.0}, stats.gamma(0.7, scale=3).sf(4.0)),
    ({"model": "exponential", "mean": 3.0}, {"above": 1.0}, math.exp(-1 / 3)),
    ({"model": "weibull", "shape": 1.5, "scale": 2.0}, {"above": 3.0}, math.exp(-(1.5**1.5))),
    ({"model": "beta", "a": 2, "b": 3, "lower": 10, "upper": 20}, {"above": 12}, stats.beta(2, 3, loc=10, scale=10).sf(12)),
    ({"model": "uniform", "lower": 1.0, "upper": 3.0}, {"above": 2.5}, 0.25),
    ({"model": "truncated-normal", "mean": 10, "sd": 2, "lower": 8, "upper": 15}, {"above": 11},
     stats.truncnorm(-1, 2.5, loc=10, scale=2).sf(11)),
    ({"model": "student-t", "df": 5, "mean": 1, "scale": 2}, {"above": 4}, stats.t(5, loc=1, scale=2).sf(4)),
    ({"model": "normal", "mean": 1.0, "sd": 2.0}, {"values": [1.0]}, 0.0),
    ({"model": "categorical", "values": [1, 2, 5], "probs": [0.2, 0.3, 0.5]}, {"values": [2, 5, 7]}, 0.8),
    ({"model": "categorical", "values": [1, 2, 5], "probs": [0.2, 0.3, 0.5]}, {"above": 1.5}, 0.8),
    ({"model": "bernoulli", "p": 0.2}, {"values": [1]}, 0.2),
    ({"model": "poisson", "mean": 3.0}, {"values": [6, 7]}, stats.poisson(3).pmf([6, 7]).sum()),
    ({"model": "poisson", "mean": 3.0}, {"above": 4.5}, stats.poisson(3).sf(4)),
    ({"model": "negative-binomial", "mean": 3.0, "dispersion": 2.0}, {"values": [0]}, stats.nbinom(2, 0.4).pmf(0)),
    ({"model": "negative-binomial", "mean": 3.0, "dispersion": 2.0}, {"above": 5}, stats.nbinom(2, 0.4).sf(5)),
    ({"model": "zero-inflated", "zero_prob": 0.3, "inner": {"model": "poisson", "mean": 2}}, {"values": [0]},
     0.3 + 0.7 * stats.poisson(2).pmf(0)),
    ({"model": "zero-inflated", "zero_prob": 0.3, "inner": {"model": "gamma", "shape": 2, "scale": 5}}, {"above": 8},
     0.7 * stats.gamma(2, scale=5).sf(8)),
    ({"model": "mixture", "weights": [0.4, 0.6],
      "components": [{"model": "normal", "mean": 0, "sd": 1}, {"model": "exponential", "mean": 5}]}, {"above": 1.0},
     0.4 * stats.norm.sf(1.0) + 0.6 * math.exp(-0.2)),
]


@pytest.mark.parametrize("table,kw,expect", EVENTS, ids=[f"{e[0]['model']}-{i}" for i, e in enumerate(EVENTS)])
def test_event_probability_matches_scipy(table, kw, expect):
    assert make_model(table).event_probability(**kw) == pytest.approx(float(expect), rel=1e-10, abs=1e-15)


def test_event_probability_needs_exactly_one_kind():
    m = make_model({"model": "poisson", "mean": 3})
    with pytest.raises(InputError):
        m.event_probability()
    with pytest.raises(InputError):
        m.event_probability(values=[1], above=2)


# ---------------------------------------------------------------------------
# drawing into the caller's buffer
# ---------------------------------------------------------------------------

IN_PLACE = ["normal", "lognormal", "gamma", "exponential", "weibull", "uniform", "truncated-normal", "bernoulli"]


@pytest.mark.parametrize("table,ref", CASES, ids=IDS)
def test_draw_fills_the_given_buffer(table, ref):
    m = make_model(table)
    buf = np.full((7, 13), np.nan)
    got = m.draw(np.random.default_rng(5), (7, 13), out=buf)
    assert got is buf
    assert np.all(np.isfinite(buf))
    # Same seed, same numbers (no hidden state).
    again = m.draw(np.random.default_rng(5), (7, 13))
    assert np.array_equal(again, buf)
    with pytest.raises(ValueError):
        m.draw(np.random.default_rng(5), (7, 13), out=np.empty((7, 12)))


@pytest.mark.parametrize("table", [c[0] for c in CASES if c[0]["model"] in IN_PLACE],
                         ids=[c[0]["model"] for c in CASES if c[0]["model"] in IN_PLACE])
def test_in_place_draws_allocate_no_block(table):
    # numpy reports its buffers to tracemalloc; an in-place draw needs no block-sized temporary.
    m = make_model(table)
    buf = np.empty((200, 500))
    rng = np.random.default_rng(6)
    m.draw(rng, buf.shape, out=buf)  # warm caches (scipy imports etc.)
    tracemalloc.start()
    m.draw(rng, buf.shape, out=buf)
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    assert peak < buf.nbytes / 20


def test_bernoulli_draws_are_zero_one():
    m = make_model({"model": "bernoulli", "p": 0.3})
    assert m.zero_one and m.discrete and m.bernoulli_p() == 0.3
    x = m.draw(np.random.default_rng(7), (10, 100))
    assert set(np.unique(x)) <= {0.0, 1.0}


def test_normal_params_only_for_normal():
    assert make_model({"model": "normal", "mean": 1, "sd": 2}).normal_params() == (1.0, 2.0)
    assert make_model({"model": "lognormal", "mean": 1, "cv": 2}).normal_params() is None


def test_params_describe_to_dict():
    m = make_model({"model": "lognormal", "mean": 6, "cv": 1.2})
    assert m.params() == {"mean": 6, "cv": 1.2}
    assert m.describe() == "lognormal(mean=6, cv=1.2)"
    d = m.to_dict()
    assert d["model"] == "lognormal" and d["true_mean"] == pytest.approx(6.0) and d["true_sd"] == pytest.approx(7.2)
    z = make_model({"model": "zero-inflated", "zero_prob": 0.3, "inner": {"model": "lognormal", "mean": 50, "cv": 1}})
    assert z.params() == {"zero_prob": 0.3, "inner": {"model": "lognormal", "mean": 50, "cv": 1}}
    rebuilt = make_model({"model": z.name, **z.params()})
    assert rebuilt.mean == z.mean


def test_registry_has_every_contract_model():
    # INTERFACE.md lists these names.
    names = {"normal", "lognormal", "gamma", "exponential", "weibull", "beta", "uniform", "truncated-normal",
             "categorical", "bernoulli", "poisson", "negative-binomial", "student-t", "zero-inflated",
             "mixture", "empirical"}
    assert names <= set(REGISTRY)


def test_discrete_flags():
    assert make_model({"model": "poisson", "mean": 2}).discrete
    assert not make_model({"model": "gamma", "mean": 2, "cv": 1}).discrete
    zi = make_model({"model": "zero-inflated", "zero_prob": 0.5, "inner": {"model": "bernoulli", "p": 0.4}})
    assert zi.zero_one and zi.bernoulli_p() == pytest.approx(0.2)
    cat = make_model({"model": "categorical", "values": [0, 1], "probs": [0.7, 0.3]})
    assert cat.zero_one and cat.bernoulli_p() == pytest.approx(0.3)


# ---------------------------------------------------------------------------
# empirical
# ---------------------------------------------------------------------------


def _pilot(tmp_path, text="hours,site\n1.5,a\n2.5,b\n,c\n4.0,d\n7.0,e\n"):
    f = tmp_path / "pilot.csv"
    f.write_text(text)
    return f


def test_empirical_reads_csv_and_resamples(tmp_path):
    f = _pilot(tmp_path)
    m = make_model({"model": "empirical", "file": "pilot.csv", "column": "hours"}, base_dir=str(tmp_path))
    v = np.array([1.5, 2.5, 4.0, 7.0])
    assert m.mean == pytest.approx(v.mean())  # pilot mean (pandas read, NaN dropped)
    assert m.sd == pytest.approx(v.std())  # resampling law: divisor n
    assert m.skewness == pytest.approx(stats.skew(v))  # exact result computed with scipy
    assert "n=4" in m.true_value_note and "pilot.csv" in m.true_value_note and "1 empty value dropped" in m.true_value_note
    assert m.to_dict()["true_value_note"] == m.true_value_note
    x = m.draw(np.random.default_rng(8), (50, 1000))
    assert set(np.unique(x)) <= set(v)
    assert abs(x.mean() - m.mean) <= 4 * m.sd / math.sqrt(x.size)
    assert m.event_probability(above=3.0) == 0.5
    assert m.event_probability(values=[1.5, 7.0]) == 0.5
    assert not m.discrete
    # an absolute path leaves the scenario's folder: refused unless allowed explicitly
    with pytest.raises(InputError, match="absolute path is refused.*--allow-outside-files"):
        make_model({"model": "empirical", "file": str(f), "column": "hours"})
    assert make_model({"model": "empirical", "file": str(f), "column": "hours"}, allow_outside_files=True).mean == m.mean


def test_empirical_errors(tmp_path):
    _pilot(tmp_path)
    bd = str(tmp_path)
    cases = [
        ({"file": "missing.csv", "column": "hours"}, "file", "no such file"),
        ({"file": "pilot.csv", "column": "hour"}, "column", "did you mean 'hours'"),
        ({"file": "pilot.csv", "column": "site"}, "column", "line 2, column 'site': not a number"),
        ({"file": "pilot.csv"}, "column", "missing"),
        ({"file": "pilot.csv", "column": "hours", "sep": ";"}, "sep", "unknown key"),
    ]
    for params, field, text in cases:
        with pytest.raises(InputError) as ei:
            make_model({"model": "empirical", **params}, base_dir=bd)
        fields = {p.field: p.message for p in ei.value.problems}
        assert field in fields and text in fields[field], ei.value.one_line()
    (tmp_path / "one.csv").write_text("y\n3.0\n\n")
    with pytest.raises(InputError, match="at least 2"):
        make_model({"model": "empirical", "file": "one.csv", "column": "y"}, base_dir=bd)


def test_empirical_inside_mixture_uses_base_dir(tmp_path):
    _pilot(tmp_path)
    m = make_model({"model": "mixture", "weights": [0.5, 0.5],
                    "components": [{"model": "empirical", "file": "pilot.csv", "column": "hours"},
                                   {"model": "normal", "mean": 0, "sd": 1}]}, base_dir=str(tmp_path))
    assert m.mean == pytest.approx(0.5 * 3.75)
    assert "pilot data" in m.true_value_note


# ---------------------------------------------------------------------------
# EventModel
# ---------------------------------------------------------------------------


def test_event_model_above_threshold():
    inner = make_model({"model": "lognormal", "mean": 100, "cv": 1.2})
    ev = EventModel(inner, above=250)
    p = _lognorm_from_mean_cv(100, 1.2).sf(250)  # exact result computed with scipy
    assert ev.mean == pytest.approx(p) and ev.sd == pytest.approx(math.sqrt(p * (1 - p)))
    assert ev.bernoulli_p() == pytest.approx(p)
    assert ev.zero_one and ev.discrete
    assert ev.describe() == "share of lognormal(mean=100, cv=1.2) values > 250"
    buf = np.empty((40, 5000))
    x = ev.draw(np.random.default_rng(9), buf.shape, out=buf)
    assert x is buf and set(np.unique(x)) <= {0.0, 1.0}
    assert abs(x.mean() - p) <= 4 * math.sqrt(p * (1 - p) / x.size)


def test_event_model_values():
    inner = make_model({"model": "poisson", "mean": 4})
    ev = EventModel(inner, values=[6, 7])
    p = stats.poisson(4).pmf([6, 7]).sum()  # exact result computed with scipy
    assert ev.mean == pytest.approx(p)
    assert ev.describe() == "share of poisson(mean=4) values in {6, 7}"
    x = ev.draw(np.random.default_rng(10), (40, 5000))
    assert abs(x.mean() - p) <= 4 * math.sqrt(p * (1 - p) / x.size)
    single = EventModel(inner, values=[0])
    assert single.mean == pytest.approx(math.exp(-4))


def test_event_model_refusals():
    logn = make_model({"model": "lognormal", "mean": 100, "cv": 1.2})
    with pytest.raises(InputError, match="always happens"):
        EventModel(logn, above=-1)
    with pytest.raises(InputError, match="event_values.*continuous"):
        EventModel(logn, values=[100])
    with pytest.raises(InputError, match="never happens"):
        EventModel(make_model({"model": "poisson", "mean": 3}), values=[2.5])
    with pytest.raises(InputError, match="event_above"):
        EventModel(logn, above=float("nan"))
    with pytest.raises(InputError, match="exactly one"):
        EventModel(logn)


# ---------------------------------------------------------------------------
# ScipyModel
# ---------------------------------------------------------------------------


def test_scipy_model_continuous():
    d = stats.gamma(2.0, scale=3.0)
    m = from_scipy(d)
    assert isinstance(m, ScipyModel) and not m.discrete
    assert m.mean == pytest.approx(6.0) and m.sd == pytest.approx(math.sqrt(18.0))
    assert m.skewness == pytest.approx(2 / math.sqrt(2))  # gamma skewness 2/sqrt(shape), JKB (1994) ch. 17
    assert m.event_probability(above=5.0) == pytest.approx(d.sf(5.0))
    assert m.event_probability(values=[5.0]) == 0.0
    buf = np.empty((40, 5000))
    x = m.draw(np.random.default_rng(11), buf.shape, out=buf)
    assert x is buf
    assert abs(x.mean() - m.mean) <= 4 * m.sd / math.sqrt(x.size)
    assert m.describe() == "scipy.stats.gamma(2, scale=3)"


def test_scipy_model_discrete():
    m = ScipyModel(stats.poisson(2.5))
    assert m.discrete and not m.zero_one
    assert m.event_probability(values=[1, 2]) == pytest.approx(stats.poisson(2.5).pmf([1, 2]).sum())
    b = ScipyModel(stats.bernoulli(0.3))
    assert b.zero_one and b.bernoulli_p() == pytest.approx(0.3)
    x = m.draw(np.random.default_rng(12), (10, 100))
    assert np.all(x == np.round(x))
    assert ScipyModel(stats.norm(0, 1), discrete=True).discrete


def test_scipy_model_refusals():
    for d in (stats.cauchy(), stats.t(1.5), stats.pareto(1.5)):
        with pytest.raises(InputError, match="finite mean and variance"):
            ScipyModel(d)
    with pytest.raises(InputError, match="frozen scipy.stats"):
        ScipyModel(stats.norm)


def test_event_model_values_on_non_integer_pilot_data(tmp_path):
    # Resampled pilot data are a finite set, so listed values have positive probability.
    (tmp_path / "r.csv").write_text("score\n2.5\n3.5\n3.5\n4.5\n")
    m = make_model({"model": "empirical", "file": "r.csv", "column": "score"}, base_dir=str(tmp_path))
    assert EventModel(m, values=[3.5]).mean == pytest.approx(0.5)
