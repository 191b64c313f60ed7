"""One-sided limits, upper limits for skewed data, demonstration plans, relative
margins, margin_at_assurance and units (issue 20).

Every reference is computed inside the test from an exact law (scipy's
binomial, beta, t, chi-square and gamma laws) or written out; sources are named
beside each check.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import integrate, stats

from simcheck import engine, formulas
from simcheck.cli import main
from simcheck.design import Design
from simcheck.errors import InputError
from simcheck.intervals import Summary, get_method
from simcheck.intervals import land
from simcheck.models import make_model
from simcheck.scenario import load_scenario, scenario_from_dict


def model(name, **p):
    return make_model({"model": name, **p})


def cli(capsys, *argv):
    rc = main([str(a) for a in argv])
    out, err = capsys.readouterr()
    return rc, out, err


# --- one-sided coverage against exact references ------------------------------------------
def _binomial_reference(n, p, limit_of_x, bound):
    """Coverage, margin distribution of a one-sided limit by enumerating x = 0..n."""
    x = np.arange(n + 1)
    w = stats.binom.pmf(x, n, p)
    lim = np.array([limit_of_x(k) for k in x])
    if bound == "upper":
        cover = lim >= p
        margin = lim - x / n
    else:
        cover = lim <= p
        margin = x / n - lim
    return float(w[cover].sum()), margin, w


def _cp_upper(n, c):
    # Clopper & Pearson (1934): one-sided exact upper limit Beta_c(x + 1, n - x), 1 at x = n
    return lambda x: 1.0 if x == n else float(stats.beta.ppf(c, x + 1, n - x))


def _cp_lower(n, c):
    return lambda x: 0.0 if x == 0 else float(stats.beta.ppf(1 - c, x, n - x + 1))


def _jeffreys_upper(n, c):
    # Brown, Cai & DasGupta (2001), sec. 4.1.1: Beta(x + 1/2, n - x + 1/2) quantile; 1 at x = n
    return lambda x: 1.0 if x == n else float(stats.beta.ppf(c, x + 0.5, n - x + 0.5))


def _wilson_upper(n, c):
    # Wilson (1927) score limit with the one-sided z_c (Brown, Cai & DasGupta 2001, eq. 4)
    z = stats.norm.ppf(c)

    def f(x):
        ph = x / n
        centre = (ph + z * z / (2 * n)) / (1 + z * z / n)
        half = z / (1 + z * z / n) * math.sqrt(ph * (1 - ph) / n + z * z / (4 * n * n))
        return centre + half
    return f


def lim_of(n, p, ref, bound):
    return np.array([ref(n, 0.95)(k) for k in range(n + 1)])


@pytest.mark.parametrize("method,ref,bound", [
    ("clopper-pearson", _cp_upper, "upper"),
    ("clopper-pearson", _cp_lower, "lower"),
    ("jeffreys", _jeffreys_upper, "upper"),
    ("wilson", _wilson_upper, "upper"),
])
@pytest.mark.parametrize("n,p", [(20, 0.1), (57, 0.3), (200, 0.02)])
def test_one_sided_binomial_coverage_exact(method, ref, bound, n, p):
    # reference: binomial enumeration written here with the published one-sided limits
    c = 0.95
    d = Design(model=model("bernoulli", p=p), estimand="proportion", method=method, margin=0.05,
               bound=bound, assurance=0.8)
    r = engine.check(d, n)
    cov, margin, w = _binomial_reference(n, p, ref(n, c), bound)
    assert r.exact and r.coverage_mcse == 0.0
    assert r.coverage == pytest.approx(cov, abs=1e-12)
    assert (r.miss_high if bound == "upper" else r.miss_low) == 0.0
    assert (r.miss_low if bound == "upper" else r.miss_high) == pytest.approx(1 - cov, abs=1e-12)
    # the engine's rule: a limit equal to the estimate that misses (zero margin) never meets the margin
    covers = (lim_of(n, p, ref, bound) >= p) if bound == "upper" else (lim_of(n, p, ref, bound) <= p)
    assured = (margin <= 0.05 * (1 + 1e-12)) & ~((margin <= 0) & ~covers)
    assert r.assurance == pytest.approx(float(w[assured].sum()), abs=1e-12)
    order = np.argsort(margin, kind="stable")
    cum = np.cumsum(w[order])
    want = margin[order][np.searchsorted(cum, 0.8 * (1 - 1e-12))]
    assert r.margin_at_assurance == pytest.approx(want, rel=1e-9)
    assert r.bound == bound and r.confidence == c and r.method == method


@pytest.mark.parametrize("bound", ["upper", "lower"])
def test_one_sided_t_exact_law_under_normality(bound):
    # reference: the exact t law (Student 1908): P(mu <= x̄ + t_{c, n-1} s / sqrt n) = c;
    # the margin t_{c} s / sqrt(n) has s^2 ~ sigma^2 chi2(n-1) / (n-1) (Kupper & Hafner 1989)
    n, sd, c, b = 15, 3.0, 0.9, 1.2
    d = Design(model=model("normal", mean=4.0, sd=sd), method="t", confidence=c, margin=b, bound=bound,
               assurance=0.75)
    r = engine.check(d, n)
    k = stats.t.ppf(c, n - 1) * sd / math.sqrt(n)
    assert r.exact
    assert r.coverage == pytest.approx(c, abs=1e-12)
    assert r.margin_median == pytest.approx(k * math.sqrt(stats.chi2.ppf(0.5, n - 1) / (n - 1)), rel=1e-10)
    assert r.margin_at_assurance == pytest.approx(k * math.sqrt(stats.chi2.ppf(0.75, n - 1) / (n - 1)), rel=1e-10)
    assert r.assurance == pytest.approx(stats.chi2.cdf((n - 1) * (b / k) ** 2, n - 1), abs=1e-12)
    # the simulation path agrees within 4 MCSE and misses on one side only
    s = engine.check(d, n, replicates=20_000, rng=7, path="full")
    assert abs(s.coverage - c) <= 4 * s.coverage_mcse
    assert (s.miss_high if bound == "upper" else s.miss_low) == 0.0
    assert abs(s.assurance - r.assurance) <= 4 * s.assurance_mcse


def test_one_sided_t_curve_and_sufficient_paths():
    # the nested curve and the Welch sufficient path use the same reading of the limit:
    # coverage c exactly in law (Student 1908; Welch 1947 approximately for equal n and SD)
    d = Design(model=model("lognormal", mean=5.0, cv=0.2), method="t", margin=0.5, bound="upper")
    rows = engine.curve(d, [10, 20, 40], replicates=20_000, rng=3).rows
    for r in rows:
        assert r.path == "nested" and r.miss_high == 0.0
        assert r.margin_at_assurance is not None
    dd = Design(model=model("normal", mean=0, sd=1), model_b=model("normal", mean=0, sd=1),
                estimand="mean-diff", method="welch", margin=0.5, bound="lower")
    w = engine.check(dd, 30, replicates=20_000, rng=5)
    assert w.path == "sufficient" and w.miss_low == 0.0
    assert abs(w.coverage - 0.95) <= 4 * w.coverage_mcse


def test_gamma_limit_against_the_gamma_law_of_exponential_means():
    # reference: for exponential data the mean of n values is Gamma(n, mu / n), so with the
    # shape fixed at 1, 2 n x̄ / mu ~ chi2(2n) and U = 2 n x̄ / chi2_alpha(2n) covers with
    # probability exactly c (Grice & Bain 1980, sec. 2)
    n, mu, c = 12, 3.0, 0.95
    f = get_method("mean", "grice-bain").func
    xbar = np.linspace(0.2, 8.0, 400)
    lo, hi = f(Summary(n=n, mean=xbar, var=xbar**2), c)  # var = mean^2: moment shape 1
    assert np.all(np.isneginf(lo))
    # U(x̄) is increasing: U >= mu exactly when x̄ >= the root
    root = mu * stats.chi2.ppf(1 - c, 2 * n) / (2 * n)
    assert np.all((hi >= mu) == (xbar >= root))
    assert stats.gamma.sf(root, n, scale=mu / n) == pytest.approx(c, abs=1e-12)


# --- Land's exact limit -----------------------------------------------------------------
def test_land_conditional_law_against_quadrature():
    # reference: the conditional density of W given T2 (Land 1971, sec. 3; Lehmann & Romano
    # 2005, sec. 4.4), f(w) ∝ exp(-a w) (1 - w^2)^((n-3)/2), integrated here by scipy.quad
    for n, s, w in [(4, 0.5, -0.6), (10, 1.0, -0.3), (25, 2.0, -0.8), (60, 0.2, -0.05)]:
        S = math.sqrt(n - 1) * s
        a = 0.5 * math.sqrt(n) * S / math.sqrt(1 - w * w)
        k = (n - 3) / 2

        def dens(v):
            return math.exp(-a * (v + 1) + k * math.log1p(-v * v))
        num = integrate.quad(dens, -1, w, epsabs=0, epsrel=1e-12, limit=200)[0]
        den = num + integrate.quad(dens, w, 1, epsabs=0, epsrel=1e-12, limit=200)[0]
        got = land._cdf(np.array([w]), np.array([S]), n)[0]
        assert got == pytest.approx(num / den, rel=1e-7, abs=1e-10)


def test_land_table_matches_direct_solution():
    # the spline over log s against the direct inversion (numerical accuracy of simcheck itself)
    s = np.geomspace(0.01, 8.0, 57)
    direct = land.land_offset_direct(s, 9, 0.95)
    assert np.max(np.abs(land.land_offset(s, 9, 0.95) / direct - 1)) < 1e-6


@pytest.mark.slow
def test_land_coverage_under_lognormal_data_is_nominal():
    # reference: Land's limit is exact under lognormal data (Land 1971), so its coverage is the
    # nominal 0.95 within the Monte Carlo error (4 MCSE); the t limit falls short (common practice)
    d = Design(model=model("lognormal", meanlog=1.0, sdlog=1.2), method="land", margin=5.0, bound="upper")
    r = engine.check(d, 12, replicates=40_000, rng=11)
    assert abs(r.coverage - 0.95) <= 4 * r.coverage_mcse
    assert r.miss_high == 0.0
    t = engine.check(d.with_method("t"), 12, replicates=40_000, rng=11)
    assert t.coverage < 0.95 - 4 * t.coverage_mcse


def test_land_coverage_quick():
    # the same reference as above at fewer replicates (Land 1971: exact under lognormal data)
    d = Design(model=model("lognormal", mean=8.0, cv=1.5), method="land", margin=4.0, bound="upper")
    r = engine.check(d, 20, replicates=6_000, rng=2)
    assert abs(r.coverage - 0.95) <= 4 * r.coverage_mcse


def test_one_sided_methods_refuse_two_sided_targets():
    with pytest.raises(InputError, match="one-sided upper limit"):
        Design(model=model("lognormal", mean=5, cv=1), method="land", margin=1.0)
    with pytest.raises(InputError, match="one-sided upper limit"):
        Design(model=model("lognormal", mean=5, cv=1), method="chebyshev", margin=1.0, bound="lower")


def test_every_method_states_its_one_sided_limit():
    from simcheck.intervals import REGISTRY

    for (est, name), m in REGISTRY.items():
        assert m.one_sided_text(), (est, name)
        if m.one_sided:
            assert m.one_sided_references, (est, name)


# --- demonstration plans ------------------------------------------------------------------
@pytest.mark.parametrize("p0", [0.01, 0.05, 0.2])
@pytest.mark.parametrize("c", [0, 1, 3])
@pytest.mark.parametrize("conf", [0.9, 0.95, 0.99])
def test_plan_size_against_the_binomial_law(p0, c, conf):
    # reference: the binomial law (scipy): n is the smallest n with P(X <= c | n, p0) <= alpha
    plan = formulas.demonstration_plan(p0, c, confidence=conf)
    alpha = 1 - conf
    assert stats.binom.cdf(c, plan.n, p0) <= alpha + 1e-15
    assert stats.binom.cdf(c, plan.n - 1, p0) > alpha
    if c == 0:
        # success-run rule: (1 - p0)^n <= alpha
        assert plan.n == math.ceil(math.log(alpha) / math.log(1 - p0) - 1e-9)


def test_success_run_299():
    # common practice: 299 trials without a failure show p < 1% at 95% confidence
    assert formulas.demonstration_plan(0.01, 0, confidence=0.95).n == 299


def test_pass_probability_checked_by_the_engine():
    # reference: the binomial CDF P(X <= c | n, p) (scipy), at the plan size and another n
    d = Design(model=model("bernoulli", p=0.004), estimand="proportion", method="clopper-pearson",
               bound="upper", limit=0.02, events_allowed=2)
    plan = formulas.demonstration_plan(0.02, 2, confidence=0.95, p=0.004)
    for n in (plan.n, 150):
        r = engine.check(d, n)
        assert r.pass_probability == pytest.approx(stats.binom.cdf(2, n, 0.004), abs=1e-14)
        assert r.to_dict()["limit"] == 0.02 and r.to_dict()["events_allowed"] == 2
        assert r.plan_n == plan.n
    assert plan.pass_probability == pytest.approx(stats.binom.cdf(2, plan.n, 0.004), abs=1e-14)


def test_formula_cli_plan_json(capsys):
    import json

    rc, out, _ = cli(capsys, "formula", "--limit", "0.05", "--events-allowed", "1", "--p", "0.01", "--json")
    d = json.loads(out)
    assert rc == 0 and stats.binom.cdf(1, d["n"], 0.05) <= 0.05 < stats.binom.cdf(1, d["n"] - 1, 0.05)
    assert d["pass_probability"] == pytest.approx(stats.binom.cdf(1, d["n"], 0.01))


# --- relative precision and one-sided formulas ---------------------------------------------
def test_relative_formula_is_z_cv_over_r_squared():
    # common practice (Cochran 1977, sec. 4.6): n = (z CV / r)^2, rounded up
    r = formulas.relative_sample_size(0.2, 1.2, confidence=0.95)
    z = stats.norm.ppf(0.975)
    assert r.n == math.ceil((z * 1.2 / 0.2) ** 2)
    up = formulas.relative_sample_size(0.1, 0.5, confidence=0.9, bound="upper", multiplier="t")
    # t version: the smallest n with t_{0.9, n-1} CV / sqrt(n) <= r
    n = next(k for k in range(2, 10_000) if stats.t.ppf(0.9, k - 1) * 0.5 / math.sqrt(k) <= 0.1)
    assert up.n == n


def test_one_sided_formula_uses_the_one_sided_multiple():
    # common practice: a one-sided 95% limit uses z_{0.95} = 1.645
    r = formulas.sample_size("mean", 1.0, sd=5.0, bound="upper")
    assert r.multiplier == pytest.approx(stats.norm.ppf(0.95))
    assert r.n == math.ceil((stats.norm.ppf(0.95) * 5.0) ** 2)


def test_relative_margin_check_fields():
    d = Design(model=model("gamma", mean=350.0, cv=1.1), method="t", relative_margin=0.2)
    assert d.margin == pytest.approx(70.0)
    r = engine.check(d, 60, replicates=4000, rng=1).to_dict()
    assert r["target_relative_margin"] == 0.2
    assert r["relative_margin_median"] == pytest.approx(r["margin_median"] / 350.0)
    assert r["relative_margin_at_assurance"] == pytest.approx(r["margin_at_assurance"] / 350.0)


def test_search_relative_margin_exact_normal_path():
    # reference: exact law of the t margin (Kupper & Hafner 1989): at n the upper-limit margin
    # t_{c, n-1} sigma sqrt(W / (n-1)) / sqrt(n), W ~ chi2(n-1), is <= r mu with probability
    # chi2.cdf((n-1) (r mu sqrt(n) / (t sigma))^2, n-1); the search must give the first n
    # where that reaches the assurance
    from simcheck.search import find_n

    mu, sd, r, a = 20.0, 6.0, 0.1, 0.8
    d = Design(model=model("normal", mean=mu, sd=sd), method="t", relative_margin=r, bound="upper")

    def ok(n):
        k = stats.t.ppf(0.95, n - 1) * sd / math.sqrt(n)
        return stats.chi2.cdf((n - 1) * (r * mu / k) ** 2, n - 1) >= a
    want = next(n for n in range(2, 1000) if ok(n))
    res = find_n(d, assurance=a, replicates=2000, rng=1, n_max=1000)
    assert res.reached and res.n == want


def test_search_upper_limit_on_skewed_data():
    # the search reaches an n for a one-sided upper limit on lognormal data, and an
    # independent check there meets the targets within 4 MCSE (Morris et al. 2019)
    from simcheck.search import find_n

    d = Design(model=model("lognormal", mean=8.0, cv=1.5), method="chen-modified-t", margin=4.0,
               bound="upper")
    res = find_n(d, assurance=0.5, coverage_tolerance=0.03, replicates=2000, rng=4, n_min=5, n_max=600)
    assert res.reached and res.n is not None
    chk = engine.check(d, res.n, replicates=8000, rng=99)
    assert chk.coverage >= 0.92 - 4 * chk.coverage_mcse
    assert chk.assurance >= 0.5 - 4 * chk.assurance_mcse


# --- bad input: exit 2, one line -----------------------------------------------------------
def _scenario(tmp_path, target_extra: str, data: str = 'model = "lognormal"\nmean = 5.0\ncv = 1.0',
              estimand: str = "mean", method: str = "t") -> str:
    p = tmp_path / "s.toml"
    p.write_text(f'[target]\nestimand = "{estimand}"\n{target_extra}\n\n[data]\n{data}\n\n'
                 f'[method]\ninterval = "{method}"\n\n[simulation]\nseed = 1\nreplicates = 200\n')
    return str(p)


@pytest.mark.parametrize("extra,field", [
    ('margin = 1.0\nbound = "uper"', "target.bound"),
    ("margin = 1.0\nrelative_margin = 0.2", "target.relative_margin"),
    ("limit = 1.5", "target.limit"),
    ("limit = 0.0", "target.limit"),
])
def test_bad_bound_keys_exit_2(capsys, tmp_path, extra, field):
    est = "proportion" if "limit" in extra else "mean"
    data = 'model = "bernoulli"\np = 0.1' if est == "proportion" else 'model = "lognormal"\nmean = 5.0\ncv = 1.0'
    path = _scenario(tmp_path, extra, data=data, estimand=est, method="wilson" if est == "proportion" else "t")
    rc, out, err = cli(capsys, "check", path, "--n", 20)
    assert rc == 2 and out == "" and err.count("\n") == 1 and field in err


def test_relative_margin_on_a_zero_difference_exit_2(capsys, tmp_path):
    p = tmp_path / "d.toml"
    p.write_text('[target]\nestimand = "mean-diff"\nrelative_margin = 0.2\n\n'
                 '[data.a]\nmodel = "normal"\nmean = 3.0\nsd = 1.0\n[data.b]\nmodel = "normal"\nmean = 3.0\nsd = 1.0\n\n'
                 '[method]\ninterval = "welch"\n')
    rc, out, err = cli(capsys, "search", p)
    assert rc == 2 and err.count("\n") == 1 and "target.relative_margin" in err and "true value is 0" in err


def test_bad_bound_option_exit_2(capsys, tmp_path):
    path = _scenario(tmp_path, "margin = 1.0")
    rc, out, err = cli(capsys, "check", path, "--n", 20, "--bound", "upp")
    assert rc == 2 and err.count("\n") == 1 and "--bound" in err
    rc, out, err = cli(capsys, "formula", "--limit", "1.2")
    assert rc == 2 and err.count("\n") == 1 and "--limit" in err


def test_bound_option_overrides_the_scenario(capsys, tmp_path):
    import json

    path = _scenario(tmp_path, "margin = 1.0")
    rc, out, _ = cli(capsys, "check", path, "--n", 20, "--bound", "upper", "--json")
    d = json.loads(out)
    assert rc == 0 and d["bound"] == "upper" and d["miss_high"] == 0.0 and "margin_at_assurance" in d


# --- scenario round trip, units and words ---------------------------------------------------
def test_scenario_round_trip_keeps_the_new_keys():
    s = load_scenario("scenarios/relative_precision.toml")
    t = s.to_dict()["target"]
    assert t["relative_margin"] == 0.2 and "margin" not in t and t["units"] == "litres per day"
    s2 = scenario_from_dict(s.to_dict())
    assert s2.design.relative_margin == 0.2 and s2.design.margin == pytest.approx(70.0)
    z = load_scenario("scenarios/zero_failure_demo.toml")
    assert z.design.bound == "upper" and z.design.limit == 0.01
    assert scenario_from_dict(z.to_dict()).design.events_allowed == 0


def test_units_and_one_sided_words():
    from simcheck.bound_text import target_sentences

    plain = " ".join(target_sentences({"bound": "two-sided"}, 0.95, 1.0))
    assert plain.count("in the data's units") == 1
    up = " ".join(target_sentences({"bound": "upper", "units": "mg/L"}, 0.95, 4.0))
    assert "one-sided upper" in up and "in mg/L" in up and "data's units" not in up


def test_check_text_names_the_limit(capsys):
    rc, out, _ = cli(capsys, "check", "scenarios/well_upper_limit.toml", "--n", 20, "--method", "chebyshev",
                     "--replicates", 500)
    assert rc == 0
    assert "upper confidence limit" in out and "mg/L" in out and "share of upper limits" in out


@pytest.mark.parametrize("argv,field", [
    (["--relative-margin", "0.2"], "--cv"),
    (["--cv", "1.0", "--estimand", "mean", "--margin", "1", "--sd", "2"], "--cv"),
    (["--events-allowed", "1", "--estimand", "proportion", "--margin", "0.05"], "--events-allowed"),
    (["--limit", "0.01", "--margin", "0.05"], "--margin"),
    (["--limit", "0", "--events-allowed", "1"], "--limit"),
    (["--relative-margin", "0.2", "--cv", "1", "--estimand", "proportion"], "--estimand"),
])
def test_formula_bad_combinations_exit_2(capsys, argv, field):
    rc, out, err = cli(capsys, "formula", *argv)
    assert rc == 2 and out == "" and err.count("\n") == 1 and field in err


def test_one_sided_t_is_as_fast_as_two_sided():
    # the one-sided t limit goes through the same symmetric fast path (no reflected interval)
    from simcheck.engine import onesided

    d = Design(model=model("lognormal", mean=5.0, cv=1.0), method="t", margin=1.0, bound="upper")
    work = onesided.evaluation_design(d, simple_kind=True)
    assert work.method == "t" and work.bound == "two-sided" and work.confidence == pytest.approx(0.9)
    d2 = Design(model=model("lognormal", mean=5.0, cv=1.0), method="cox", margin=1.0, bound="upper")
    assert onesided.evaluation_design(d2, simple_kind=True).method == "cox|upper"


def test_one_sided_wald_difference_by_double_enumeration():
    # reference: double binomial enumeration written here (Newcombe 1998, exact evaluation
    # over the two binomials) of the one-sided Wald limit d + z_c SE, clipped to [-1, 1]
    na, nb, pa, pb, c = 30, 40, 0.3, 0.2, 0.9
    d = Design(model=model("bernoulli", p=pa), model_b=model("bernoulli", p=pb), estimand="proportion-diff",
               method="wald", margin=0.2, bound="upper", confidence=c, ratio=nb / na)
    r = engine.check(d, na)
    xa, xb = np.arange(na + 1)[:, None], np.arange(nb + 1)[None, :]
    w = stats.binom.pmf(xa, na, pa) * stats.binom.pmf(xb, nb, pb)
    diff = xa / na - xb / nb
    se = np.sqrt((xa / na) * (1 - xa / na) / na + (xb / nb) * (1 - xb / nb) / nb)
    upper = np.clip(diff + stats.norm.ppf(c) * se, -1, 1)
    assert r.exact
    assert r.coverage == pytest.approx(float(w[upper >= pa - pb].sum()), abs=1e-12)
    zero_miss = (upper - diff <= 0) & (upper < pa - pb)  # never meets the margin (the engine's rule)
    assert r.assurance == pytest.approx(float(w[(upper - diff <= 0.2 * (1 + 1e-12)) & ~zero_miss].sum()), abs=1e-12)


def test_one_sided_clustered_designs():
    # cluster-t is symmetric: the one-sided limit is read from the two-sided evaluation at 1 - 2 alpha;
    # equal clusters of normal data make it Student's t on the cluster means (exact, Kish 1965)
    base = {"model": model("normal", mean=10.0, sd=2.0), "method": "cluster-t", "margin": 1.0}
    from simcheck.design import ClusterSpec

    d = Design(**base, clusters=ClusterSpec(icc=0.1, size=5), bound="upper")
    r = engine.check(d, 12)
    assert r.exact and r.coverage == pytest.approx(0.95, abs=1e-12) and r.miss_high == 0.0
    with pytest.raises(InputError, match="simple random samples only"):
        engine.check(Design(model=model("bernoulli", p=0.2), estimand="proportion", method="wilson", margin=0.1,
                            clusters=ClusterSpec(icc=0.1, size=5), bound="upper"), 12, replicates=200)
