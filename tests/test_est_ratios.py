"""Risk ratio and odds ratio: interval limits, exact enumeration, simulation, baselines, bad input.

Every reference is written here, independently of simcheck: the log intervals
from their formulas, the score intervals by scipy's brentq on the score
statistic with the constrained maximum-likelihood proportions found by a
second brentq (not the closed-form roots the package uses), the exact
measures by a full double sum over scipy's binomial probabilities.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
from scipy import optimize, stats

from fixtures import run_cli, write_toml
from simcheck import engine
from simcheck.design import Design
from simcheck.errors import InputError
from simcheck.estimands import formula_for
from simcheck.intervals import ratios
from simcheck.intervals.ratios_exact import PAIRS_MAX
from simcheck.models import REGISTRY as MODELS

Z95 = stats.norm.ppf(0.975)


def bern(p):
    return MODELS["bernoulli"]({"p": p})


def design(estimand="risk-ratio", method="katz", pa=0.3, pb=0.2, margin=2.0, ratio=1.0, assurance=0.5):
    return Design(model=bern(pa), model_b=bern(pb), estimand=estimand, method=method, margin=margin,
                  ratio=ratio, assurance=assurance)


# ------------------------------------------------------------------ references written in the test
def katz_ref(xa, na, xb, nb, z=Z95):
    """Katz et al. (1978): exp(log RR ± z sqrt(1/xa - 1/na + 1/xb - 1/nb))."""
    if xa == 0 or xb == 0:
        return math.nan, math.nan
    est = (xa / na) / (xb / nb)
    se = math.sqrt(1 / xa - 1 / na + 1 / xb - 1 / nb)
    return est * math.exp(-z * se), est * math.exp(z * se)


def woolf_ref(a, b, c, d, z=Z95):
    """Woolf (1955): exp(log(ad/bc) ± z sqrt(1/a + 1/b + 1/c + 1/d))."""
    est = a * d / (b * c)
    se = math.sqrt(1 / a + 1 / b + 1 / c + 1 / d)
    return est * math.exp(-z * se), est * math.exp(z * se)


def constrained_rr(phi, xa, na, xb, nb):
    """ML proportions under p_a = phi p_b: brentq on the derivative of the log-likelihood in p_b."""
    top = min(1.0, 1.0 / phi)

    def score(p):
        return (xa + xb) / p - phi * (na - xa) / (1 - phi * p) - (nb - xb) / (1 - p)

    eps = 1e-14 * top
    if score(top - eps) > 0:  # the likelihood rises up to the boundary
        pb = top
    else:
        pb = optimize.brentq(score, eps, top - eps, xtol=1e-15, rtol=1e-15)
    return phi * pb, pb


def pearson_rr(phi, xa, na, xb, nb):
    """Koopman (1984): Pearson chi-square of the 2x2 table against the constrained fit."""
    pa, pb = constrained_rr(phi, xa, na, xb, nb)
    return (xa - na * pa) ** 2 / (na * pa * (1 - pa)) + (xb - nb * pb) ** 2 / (nb * pb * (1 - pb))


def mn_rr_stat(phi, xa, na, xb, nb):
    """Miettinen & Nurminen (1985): (pa^ - phi pb^)^2 / (variance under the constraint x N/(N-1))."""
    pa, pb = constrained_rr(phi, xa, na, xb, nb)
    n = na + nb
    var = (pa * (1 - pa) / na + phi ** 2 * pb * (1 - pb) / nb) * n / (n - 1)
    return (xa / na - phi * xb / nb) ** 2 / var


def constrained_or(psi, xa, na, xb, nb):
    """ML proportions under the odds ratio psi: they keep the event total (brentq on the margin)."""
    def pa_of(pb):
        return psi * pb / (1 + pb * (psi - 1))

    pb = optimize.brentq(lambda p: na * pa_of(p) + nb * p - (xa + xb), 0.0, 1.0, xtol=1e-15, rtol=1e-15)
    return pa_of(pb), pb


def mn_or_stat(psi, xa, na, xb, nb):
    pa, pb = constrained_or(psi, xa, na, xb, nb)
    n = na + nb
    return (xa - na * pa) ** 2 * (1 / (na * pa * (1 - pa)) + 1 / (nb * pb * (1 - pb))) * (n - 1) / n


def score_ref(stat, est, xa, na, xb, nb, z=Z95):
    """Limits where stat(ratio) = z^2 below and above the estimate (brentq on the log ratio)."""
    def f(t):
        return stat(math.exp(t), xa, na, xb, nb) - z * z

    t0 = math.log(est)
    lo = optimize.brentq(f, t0 - 30, t0, xtol=1e-13)
    hi = optimize.brentq(f, t0, t0 + 30, xtol=1e-13)
    return math.exp(lo), math.exp(hi)


# ------------------------------------------------------------------ limits
TABLES = [(7, 34, 1, 34), (36, 40, 16, 80), (3, 25, 9, 30), (12, 50, 12, 50), (1, 8, 5, 11), (20, 21, 4, 60)]


@pytest.mark.parametrize("xa,na,xb,nb", TABLES + [(0, 10, 3, 12), (4, 10, 0, 12), (10, 10, 12, 12)])
def test_katz_limits_match_the_formula(xa, na, xb, nb):
    lo, hi = ratios.katz_limits(xa, na, xb, nb, 0.95)
    ref = katz_ref(xa, na, xb, nb)
    np.testing.assert_allclose([lo, hi], ref, rtol=1e-12)  # NaN where a group has no events


@pytest.mark.parametrize("xa,na,xb,nb", TABLES + [(0, 10, 3, 12), (10, 10, 0, 12)])
def test_adjusted_log_and_gart_match_their_formulas(xa, na, xb, nb):
    # adjusted log: 0.5 added to every count and every group size (Walter 1975; Pettigrew et al. 1986)
    a, m, b, n = xa + 0.5, na + 0.5, xb + 0.5, nb + 0.5
    est, se = (a / m) / (b / n), math.sqrt(1 / a - 1 / m + 1 / b - 1 / n)
    np.testing.assert_allclose(ratios.adjusted_log_limits(xa, na, xb, nb, 0.95),
                               [est * math.exp(-Z95 * se), est * math.exp(Z95 * se)], rtol=1e-12)
    # Gart (1966): 0.5 added to all four cells
    np.testing.assert_allclose(ratios.gart_limits(xa, na, xb, nb, 0.95),
                               woolf_ref(xa + .5, na - xa + .5, xb + .5, nb - xb + .5), rtol=1e-12)


@pytest.mark.parametrize("xa,na,xb,nb", TABLES + [(0, 10, 3, 12), (5, 10, 12, 12), (10, 10, 3, 12)])
def test_woolf_and_its_haldane_correction(xa, na, xb, nb):
    cells = (xa, na - xa, xb, nb - xb)
    plain = ratios.woolf_limits(xa, na, xb, nb, 0.95)
    corrected = ratios.woolf_haldane_limits(xa, na, xb, nb, 0.95)
    if min(cells) == 0:
        assert np.isnan(plain).all()  # not computed: no correction behind the user's back
        np.testing.assert_allclose(corrected, woolf_ref(*(c + 0.5 for c in cells)), rtol=1e-12)
    else:
        np.testing.assert_allclose(plain, woolf_ref(*cells), rtol=1e-12)
        np.testing.assert_allclose(corrected, plain, rtol=0)


def test_published_values_perondi_and_ritland_examples():
    # Fagerland, Lydersen & Laake (2017), Statistical Analysis of Contingency Tables, Chapman & Hall/CRC,
    # chapter 4 examples, as printed by the book's companion R package contingencytables
    # (tests/testthat/test-ch4.R, 4 decimals). Perondi et al. (2004): 7/34 vs 1/34.
    def r4(pair):
        return [round(float(v), 4) for v in pair]

    assert r4(ratios.katz_limits(7, 34, 1, 34, 0.95)) == [0.9096, 53.8695]
    assert r4(ratios.adjusted_log_limits(7, 34, 1, 34, 0.95)) == [0.9241, 27.0523]
    assert r4(ratios.koopman_limits(7, 34, 1, 34, 0.95)) == [1.2209, 42.5757]
    assert r4(ratios.mn_ratio_limits(7, 34, 1, 34, 0.95)) == [1.2086, 43.0330]
    # the table 9/13 vs 4/14: Miettinen-Nurminen interval for the odds ratio
    assert r4(ratios.mn_odds_limits(9, 13, 4, 14, 0.95)) == [1.0934, 28.9419]
    # Ritland et al. (2007): 0/16 vs 15/72: Gart's adjusted logit interval
    assert r4(ratios.gart_limits(0, 16, 15, 72, 0.95)) == [0.0064, 1.9804]


@pytest.mark.parametrize("xa,na,xb,nb", TABLES)
def test_score_intervals_match_own_root_finding(xa, na, xb, nb):
    rr = (xa / na) / (xb / nb)
    np.testing.assert_allclose(ratios.koopman_limits(xa, na, xb, nb, 0.95),
                               score_ref(pearson_rr, rr, xa, na, xb, nb), rtol=1e-8)
    np.testing.assert_allclose(ratios.mn_ratio_limits(xa, na, xb, nb, 0.95),
                               score_ref(mn_rr_stat, rr, xa, na, xb, nb), rtol=1e-8)
    if xa < na:
        odds = xa * (nb - xb) / ((na - xa) * xb)
        np.testing.assert_allclose(ratios.mn_odds_limits(xa, na, xb, nb, 0.95),
                                   score_ref(mn_or_stat, odds, xa, na, xb, nb), rtol=1e-8)


def test_score_intervals_at_the_edges():
    z2 = Z95 ** 2
    # no events in group a: lower limit 0; none in group b: upper limit infinity; none at all: (0, inf)
    lo, hi = ratios.koopman_limits(np.array([0, 4, 0]), 10, np.array([3, 0, 0]), 12, 0.95)
    assert lo[0] == 0 and hi[1] == math.inf and (lo[2], hi[2]) == (0, math.inf)
    # upper limit at x_a = 0 still solves the Pearson chi-square = z^2 (brentq from 1e-9 on)
    f = lambda t: pearson_rr(math.exp(t), 0, 10, 3, 12) - z2  # noqa: E731
    assert hi[0] == pytest.approx(math.exp(optimize.brentq(f, -20, 5, xtol=1e-13)), rel=1e-8)
    # every unit an event in both groups: a finite interval around 1 on both sides
    lo, hi = ratios.koopman_limits(10, 10, 12, 12, 0.95)
    assert 0 < lo < 1 < hi < math.inf
    # odds ratio: a zero cell puts the matching limit at 0 or infinity
    lo, hi = ratios.mn_odds_limits(np.array([0, 10, 3, 3]), 10, np.array([3, 3, 0, 12]), 12, 0.95)
    assert lo[0] == 0 and hi[1] == math.inf and hi[2] == math.inf and lo[3] == 0


def test_methods_vectorise_over_replicates_from_drawn_values():
    rng = np.random.default_rng(5)
    xa = (rng.random((200, 30)) < 0.4).astype(float)
    xb = (rng.random((200, 45)) < 0.2).astype(float)
    from simcheck.intervals import get_method
    from simcheck.intervals.base import Sample

    s = Sample(x=xa, n=30, xb=xb, n_b=45)
    for (est, name), func in ratios.COUNT_FUNCS.items():
        lo, hi = get_method(est, name).func(s, 0.9)
        ref = func(xa.sum(1), 30, xb.sum(1), 45, 0.9)
        np.testing.assert_array_equal(lo, ref[0])
        np.testing.assert_array_equal(hi, ref[1])
        assert lo.shape == (200,)


# ------------------------------------------------------------------ exact enumeration
def enumerate_measures(limits, na, pa, nb, pb, truth, margin):
    """Full double sum over x_a = 0..n_a, x_b = 0..n_b (no tail trimming)."""
    cov = low = high = ass = 0.0
    logs, weights = [], []
    for xa in range(na + 1):
        for xb in range(nb + 1):
            w = stats.binom.pmf(xa, na, pa) * stats.binom.pmf(xb, nb, pb)
            lo, hi = limits(xa, na, xb, nb)
            if math.isnan(lo) or math.isnan(hi):
                continue  # not computed: not covering, not within the margin, left out of mean/median
            cov += w * (lo <= truth <= hi)
            low += w * (hi < truth)
            high += w * (lo > truth)
            with np.errstate(divide="ignore"):
                h = 0.5 * float(np.log(hi) - np.log(lo))  # a limit 0 or inf: an unbounded margin
            ass += w * (h <= math.log(margin) and not (h == 0 and not lo <= truth <= hi))
            logs.append(h)
            weights.append(w)
    logs, weights = np.array(logs), np.array(weights)
    order = np.argsort(logs)
    cum = np.cumsum(weights[order]) / weights.sum()
    median = math.exp(logs[order][np.searchsorted(cum, 0.5 - 1e-12)])
    fin = np.isfinite(logs)  # the margin mean is taken over bounded intervals (README, "What a check measures")
    gmean = math.exp(float(np.dot(logs[fin], weights[fin]) / weights[fin].sum()))
    return {"coverage": cov, "miss_low": low, "miss_high": high, "assurance": ass, "median": median, "mean": gmean}


@pytest.mark.parametrize("estimand,method,ref", [
    ("risk-ratio", "katz", katz_ref),
    ("odds-ratio", "woolf", lambda xa, na, xb, nb: (math.nan, math.nan) if min(xa, na - xa, xb, nb - xb) == 0
     else woolf_ref(xa, na - xa, xb, nb - xb)),
])
def test_exact_path_equals_own_enumeration(estimand, method, ref):
    d = design(estimand, method, pa=0.35, pb=0.2, margin=2.5, ratio=1.5)
    r = engine.check(d, 16)
    assert r.exact and r.n_b == 24
    want = enumerate_measures(ref, 16, 0.35, 24, 0.2, d.true_value, 2.5)
    assert r.coverage == pytest.approx(want["coverage"], abs=1e-12)
    assert r.miss_low == pytest.approx(want["miss_low"], abs=1e-12)
    assert r.miss_high == pytest.approx(want["miss_high"], abs=1e-12)
    assert r.assurance == pytest.approx(want["assurance"], abs=1e-12)
    assert r.margin_median == pytest.approx(want["median"], rel=1e-12)
    assert r.margin_mean == pytest.approx(want["mean"], rel=1e-10)
    assert any("cannot be computed" in t for t in r.notes)  # zero counts have positive probability here


@pytest.mark.slow
def test_exact_koopman_coverage_equals_own_enumeration():
    d = design("risk-ratio", "koopman", pa=0.5, pb=0.4, margin=3.0)

    def ref(xa, na, xb, nb):
        if xa == 0 and xb == 0:
            return 0.0, math.inf
        if xa in (0, na) or xb in (0, nb):
            return ratios.koopman_limits(xa, na, xb, nb, 0.95)  # edges checked in test_score_intervals_at_the_edges
        return score_ref(pearson_rr, (xa / na) / (xb / nb), xa, na, xb, nb)

    r = engine.check(d, 12)
    want = enumerate_measures(ref, 12, 0.5, 12, 0.4, d.true_value, 3.0)
    assert r.coverage == pytest.approx(want["coverage"], abs=1e-9)
    assert r.assurance == pytest.approx(want["assurance"], abs=1e-9)


@pytest.mark.parametrize("estimand,method", [("risk-ratio", "katz"), ("risk-ratio", "miettinen-nurminen"),
                                             ("odds-ratio", "gart"), ("odds-ratio", "miettinen-nurminen")])
def test_simulated_coverage_within_4_mcse_of_exact(estimand, method):
    d = design(estimand, method, pa=0.3, pb=0.15, margin=2.0, ratio=1.25)
    exact = engine.check(d, 40)
    sim = engine.check(d, 40, replicates=4000, rng=20261202, path="full")
    assert exact.exact and not sim.exact
    assert abs(sim.coverage - exact.coverage) <= 4 * max(sim.coverage_mcse, 1e-3)
    assert abs(sim.assurance - exact.assurance) <= 4 * max(sim.assurance_mcse, 1e-3)
    assert sim.margin_median == pytest.approx(exact.margin_median, rel=0.05)


def test_nested_curve_agrees_with_exact_and_is_reported_as_factors():
    d = design("odds-ratio", "woolf-haldane", pa=0.4, pb=0.25, margin=2.5)
    ns = [20, 40, 60]
    sim = engine.curve(d, ns, replicates=3000, rng=7, path="nested").rows
    ex = engine.curve(d, ns).rows
    for s, e in zip(sim, ex):
        assert abs(s.coverage - e.coverage) <= 4 * s.coverage_mcse
        assert s.margin_median > 1 and e.margin_median > 1  # factors, not log half-widths
        assert any("ratio scale" in t for t in e.notes) and any("ratio scale" in t for t in s.notes)


def test_exact_path_refuses_above_the_pairs_cap_in_one_line():
    assert PAIRS_MAX == engine.EXACT2_PAIRS_MAX
    d = design("risk-ratio", "katz", pa=0.5, pb=0.5, margin=1.1)
    with pytest.raises(InputError, match=r"^n: the exact enumeration of risk-ratio at n = 200000"):
        engine.check(d, 200_000)


# ------------------------------------------------------------------ baselines
def test_risk_ratio_baseline_is_the_katz_variance_formula():
    # n = z^2 ((1 - p) / p + (1 - p_b) / (r p_b)) / (ln f)^2, n_b = ceil(r n)
    res = formula_for("risk-ratio", 1.5, 0.95, {"p": 0.3, "p_b": 0.2, "ratio": 2.0})
    n0 = Z95 ** 2 * (0.7 / 0.3 + 0.8 / (2 * 0.2)) / math.log(1.5) ** 2
    assert res.n_unrounded == pytest.approx(n0, rel=1e-12)
    assert res.n == math.ceil(n0) and res.n_b == math.ceil(2 * res.n)


def test_odds_ratio_baseline_is_the_woolf_variance_formula():
    res = formula_for("odds-ratio", 2.0, 0.9, {"p": 0.4, "p_b": 0.25})
    z = stats.norm.ppf(0.95)
    n0 = z ** 2 * (1 / (0.4 * 0.6) + 1 / (0.25 * 0.75)) / math.log(2.0) ** 2
    assert res.n_unrounded == pytest.approx(n0, rel=1e-12) and res.n == math.ceil(n0) == res.n_b


def test_baseline_half_width_is_close_to_katz_at_the_formula_n():
    # at the closed-form n the exact median margin of Katz's interval is near the target factor
    d = design("risk-ratio", "katz", pa=0.3, pb=0.2, margin=1.5)
    n = formula_for("risk-ratio", 1.5, 0.95, {"p": 0.3, "p_b": 0.2}).n
    assert engine.check(d, n).margin_median == pytest.approx(1.5, rel=0.02)


# ------------------------------------------------------------------ commands and bad input
def _scenario(tmp_path, **target):
    table = {
        "title": "Invented example: wound infections with two dressings",
        "target": {"estimand": "risk-ratio", "margin": 1.8, **target},
        "data": {"a": {"model": "bernoulli", "p": 0.3}, "b": {"model": "bernoulli", "p": 0.15}},
        "method": {"interval": ["koopman", "katz"]},
        "simulation": {"replicates": 500, "seed": 11, "n_max": 400},
    }
    return write_toml(tmp_path / "rr.toml", table)


def _one_line_exit_2(code, out, err):
    assert code == 2, err
    assert out == "" and err.count("\n") == 1 and err.startswith("simcheck: error: ")
    return err


def test_formula_cli_json(tmp_path):
    code, out, err = run_cli(["formula", "--estimand", "odds-ratio", "--margin", 2, "--p", 0.4, "--p-b", 0.25,
                              "--ratio", 2, "--json"])
    assert code == 0, err
    obj = json.loads(out)
    assert obj["estimand"] == "odds-ratio" and obj["n_b"] == math.ceil(2 * obj["n"])
    assert obj["planning"] == {"p": 0.4, "p_b": 0.25, "ratio": 2.0}


@pytest.mark.parametrize("args,field", [
    (["--margin", 1.0, "--p", 0.3, "--p-b", 0.2], "--margin"),
    (["--margin", 0.5, "--p", 0.3, "--p-b", 0.2], "--margin"),
    (["--margin", 1.5, "--p", 0.3, "--p-b", 0.0], "--p-b"),
    (["--margin", 1.5, "--p", 0.3], "--p-b"),
])
def test_formula_bad_input_one_line(args, field):
    err = _one_line_exit_2(*run_cli(["formula", "--estimand", "risk-ratio", *args]))
    assert field in err


def test_check_and_search_through_the_cli(tmp_path):
    path = _scenario(tmp_path)
    code, out, err = run_cli(["check", path, "--n", 50, "--method", "katz", "--json"])
    assert code == 0, err
    row = json.loads(out)
    assert row["estimand"] == "risk-ratio" and row["path"] == "exact" and row["true_value"] == pytest.approx(2.0)
    code, out, err = run_cli(["search", path, "--method", "koopman", "--json"])
    assert code == 0, err
    res = json.loads(out)
    assert res["criterion"] == "window" and res["decision"] == "clear" and res["n"] >= 2


@pytest.mark.parametrize("target,data_b,phrase", [
    ({"margin": 1.0}, None, "target.margin: for the risk ratio the margin is a factor > 1"),
    ({"margin": 0.5}, None, "target.margin: for the risk ratio the margin is a factor > 1"),
    ({"margin": None, "relative_margin": 0.2}, None, "target.relative_margin"),
    ({}, {"model": "normal", "mean": 1, "sd": 1}, "data.b: the risk ratio needs 0/1 data"),
])
def test_bad_scenarios_one_line_exit_2(tmp_path, target, data_b, phrase):
    path = _scenario(tmp_path)
    import tomllib

    table = tomllib.loads(path.read_text())
    for k, v in target.items():
        if v is None:
            table["target"].pop(k)
        else:
            table["target"][k] = v
    if data_b is not None:
        table["data"]["b"] = data_b
    write_toml(path, table)
    err = _one_line_exit_2(*run_cli(["check", path, "--n", 20]))
    assert phrase in err, err


# ------------------------------------------------------------------ exact conditional (Cornfield)
@pytest.mark.parametrize("xa,na,xb,nb", [(9, 13, 4, 14), (7, 34, 1, 34), (3, 25, 9, 30), (30, 168, 40, 168),
                                         (90, 168, 10, 168), (15, 168, 69, 168), (20, 21, 4, 60)])
def test_exact_conditional_matches_scipy(xa, na, xb, nb):
    # scipy.stats.contingency.odds_ratio(kind="conditional"): Cornfield's exact interval from
    # Fisher's noncentral hypergeometric law (SciPy's own implementation, an independent code)
    ci = stats.contingency.odds_ratio([[xa, na - xa], [xb, nb - xb]]).confidence_interval(0.95)
    np.testing.assert_allclose(ratios.exact_conditional_limits(xa, na, xb, nb, 0.95), [ci.low, ci.high],
                               rtol=1e-8)


def test_exact_conditional_by_own_tail_sums():
    # the tail probabilities written out: P(X >= x_a; L) = P(X <= x_a; U) = alpha / 2
    xa, na, xb, nb = 4, 12, 9, 15
    m = xa + xb
    xs = np.arange(max(0, m - nb), min(na, m) + 1)
    logc = np.array([math.lgamma(na + 1) - math.lgamma(x + 1) - math.lgamma(na - x + 1)
                     + math.lgamma(nb + 1) - math.lgamma(m - x + 1) - math.lgamma(nb - m + x + 1) for x in xs])

    def prob(psi, keep):
        w = np.exp(logc + xs * math.log(psi) - (logc + xs * math.log(psi)).max())
        return w[keep].sum() / w.sum()

    lo, hi = ratios.exact_conditional_limits(xa, na, xb, nb, 0.9)
    assert prob(float(lo), xs >= xa) == pytest.approx(0.05, abs=1e-10)
    assert prob(float(hi), xs <= xa) == pytest.approx(0.05, abs=1e-10)


def test_exact_conditional_edges_and_guaranteed_coverage():
    lo, hi = ratios.exact_conditional_limits(np.array([0, 13, 0, 5]), 13, np.array([4, 4, 0, 14]), 14, 0.95)
    assert lo[0] == 0 and hi[1] == math.inf and (lo[2], hi[2]) == (0, math.inf) and lo[3] == 0
    # an exact conditional interval never covers less than its level (Cornfield 1956): exact enumeration
    for pa, pb in ((0.3, 0.1), (0.5, 0.45)):
        r = engine.check(design("odds-ratio", "exact-conditional", pa=pa, pb=pb, margin=3.0), 25)
        assert r.exact and r.coverage >= 0.95 - 1e-12


def test_search_answer_equals_own_window_scan():
    # brute force written here: Katz's interval by a full double sum at every n, then the window
    # rule (targets hold at every n from n to ceil(1.25 n)), against the search's exact scan
    pa, pb, f, conf_target, ass_target = 0.3, 0.2, 2.5, 0.945, 0.8
    truth = pa / pb

    def targets(n):
        xa, xb = np.meshgrid(np.arange(n + 1.0), np.arange(n + 1.0), indexing="ij")
        w = np.outer(stats.binom.pmf(np.arange(n + 1), n, pa), stats.binom.pmf(np.arange(n + 1), n, pb))
        ok = (xa > 0) & (xb > 0)
        with np.errstate(divide="ignore", invalid="ignore"):
            log_rr = np.log(xa / n) - np.log(xb / n)
            se = np.sqrt(1 / xa - 2 / n + 1 / xb)
            lo, hi = np.exp(log_rr - Z95 * se), np.exp(log_rr + Z95 * se)
        cov = w[ok & (lo <= truth) & (truth <= hi)].sum()
        ass = w[ok & (Z95 * se <= math.log(f)) & ((se > 0) | ((lo <= truth) & (truth <= hi)))].sum()
        return cov >= conf_target - 1e-12 and ass >= ass_target - 1e-12

    passes = {n: targets(n) for n in range(2, 161)}
    want = next(n for n in range(2, 121) if all(passes[k] for k in range(n, math.ceil(1.25 * n) + 1)))
    from simcheck.search import find_n

    res = find_n(design("risk-ratio", "katz", pa=pa, pb=pb, margin=f), assurance=ass_target, n_max=160)
    assert 20 < want < 120  # the answer lies inside the scanned range
    assert res.n == want and res.criterion == "window"
