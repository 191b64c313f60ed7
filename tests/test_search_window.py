"""The window criterion of the exact searches, against brute-force enumeration written here.

Every reference below enumerates the binomial law(s) over all outcomes with
the interval formulas written out in this file (sources named beside each),
one n at a time, and applies the criterion by its definition: the smallest n
such that the targets hold at every n in [n, ceil(window n)].
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats

from simcheck.design import Design
from simcheck.models import make_model
from simcheck.search import find_n

CONF, TOL, ASSURANCE, WINDOW = 0.95, 0.005, 0.5, 1.25
Z = stats.norm.ppf(0.975)


# ------------------------------------------------------------------ interval formulas (test-only)
def ci_one(method, x, n):
    """Limits for x successes of n (arrays). Brown, Cai & DasGupta (2001), Statistical Science 16:101-133."""
    p = x / n
    if method == "wald":  # eq. 2.1
        h = Z * np.sqrt(p * (1 - p) / n)
        return np.clip(p - h, 0, 1), np.clip(p + h, 0, 1)
    if method == "wilson":  # Wilson (1927); BCD eq. 4.1.1
        c = (x + Z * Z / 2) / (n + Z * Z)
        h = Z * math.sqrt(n) / (n + Z * Z) * np.sqrt(p * (1 - p) + Z * Z / (4 * n))
        lo, hi = np.clip(c - h, 0, 1), np.clip(c + h, 0, 1)
        return np.where(x == 0, 0.0, lo), np.where(x == n, 1.0, hi)
    if method == "agresti-coull":  # Agresti & Coull (1998); BCD section 4.1.3
        nt = n + Z * Z
        pt = (x + Z * Z / 2) / nt
        h = Z * np.sqrt(pt * (1 - pt) / nt)
        return np.clip(pt - h, 0, 1), np.clip(pt + h, 0, 1)
    if method == "clopper-pearson":  # Clopper & Pearson (1934), beta quantiles
        lo = np.where(x > 0, stats.beta.ppf(0.025, np.maximum(x, 1), n - x + 1), 0.0)
        hi = np.where(x < n, stats.beta.isf(0.025, x + 1, np.maximum(n - x, 1)), 1.0)
        return lo, hi
    if method == "jeffreys":  # BCD section 4.1.2: Beta(x + 1/2, n - x + 1/2) quantiles
        lo = np.where(x > 0, stats.beta.ppf(0.025, x + 0.5, n - x + 0.5), 0.0)
        hi = np.where(x < n, stats.beta.isf(0.025, x + 0.5, n - x + 0.5), 1.0)
        return lo, hi
    raise ValueError(method)


def wilson_limits(x, n):
    return ci_one("wilson", x, n)


def ci_two(method, xa, na, xb, nb):
    """Limits for p_a - p_b on the outer product of outcomes (xa column, xb row)."""
    if method == "wald":  # Newcombe (1998), Statistics in Medicine 17:873-890, method 1
        pa, pb = xa / na, xb / nb
        h = Z * np.sqrt(pa * (1 - pa) / na + pb * (1 - pb) / nb)
        return np.clip(pa - pb - h, -1, 1), np.clip(pa - pb + h, -1, 1)
    if method == "agresti-caffo":  # Agresti & Caffo (2000), The American Statistician 54:280-288
        pa, pb = (xa + 1) / (na + 2), (xb + 1) / (nb + 2)
        h = Z * np.sqrt(pa * (1 - pa) / (na + 2) + pb * (1 - pb) / (nb + 2))
        return np.clip(pa - pb - h, -1, 1), np.clip(pa - pb + h, -1, 1)
    if method == "newcombe":  # Newcombe (1998), method 10, from the Wilson limits of each group
        pa, pb = xa / na, xb / nb
        la, ua = wilson_limits(xa, na)
        lb, ub = wilson_limits(xb, nb)
        lo = pa - pb - np.sqrt((pa - la) ** 2 + (ub - pb) ** 2)
        hi = pa - pb + np.sqrt((ua - pa) ** 2 + (pb - lb) ** 2)
        return np.clip(lo, -1, 1), np.clip(hi, -1, 1)
    raise ValueError(method)


# ------------------------------------------------------------------ brute force
def passes_one(method, p, margin, n, tol=TOL):
    # outcomes of probability below 1e-18 each are left out (their sum is below 1e-15)
    lo_x, hi_x = int(stats.binom.ppf(1e-18, n, p)), n - int(stats.binom.ppf(1e-18, n, 1 - p))
    x = np.arange(max(0, lo_x - 1), min(n, hi_x + 1) + 1, dtype=float)
    w = stats.binom.pmf(x, n, p)
    lo, hi = ci_one(method, x, n)
    return meets(lo, hi, w, p, margin, tol)


def meets(lo, hi, w, true, margin, tol=TOL):
    """Coverage and assurance targets; a zero-width interval that misses is never within the
    margin (the project's definition: it does not deliver the promised precision)."""
    covered = (lo <= true) & (true <= hi)
    hw = (hi - lo) / 2
    cov = w[covered].sum()
    ass = w[(hw <= margin * (1 + 1e-12)) & ~((hw <= 0) & ~covered)].sum()
    return cov >= CONF - tol - 1e-12 and ass >= ASSURANCE - 1e-12


def n_b(n, ratio):
    v = ratio * n
    return int(round(v)) if abs(v - round(v)) <= 1e-9 * max(1.0, v) else math.ceil(v)


def passes_two(method, pa, pb, ratio, margin, n, tol=TOL):
    nb = n_b(n, ratio)
    xa = np.arange(n + 1, dtype=float)[:, None]
    xb = np.arange(nb + 1, dtype=float)[None, :]
    w = stats.binom.pmf(xa, n, pa) * stats.binom.pmf(xb, nb, pb)
    lo, hi = ci_two(method, xa, n, xb, nb)
    return meets(lo, hi, w, pa - pb, margin, tol)


def top(n, window=WINDOW):
    return max(n, math.ceil(round(window * n, 9)))


def window_answer(passes, n_min, limit, window=WINDOW):
    """Smallest n >= n_min whose targets hold at every n in [n, ceil(window n)], by definition."""
    ok = {}

    def o(k):
        if k not in ok:
            ok[k] = passes(k)
        return ok[k]

    for n in range(n_min, limit + 1):
        if all(o(k) for k in range(n, top(n, window) + 1)):
            first = next(k for k in range(n_min, n + 1) if o(k))
            return n, first
    raise AssertionError("no answer below the test's limit")


def design_one(p, margin, method):
    return Design(model=make_model({"model": "bernoulli", "p": p}), estimand="proportion", method=method, margin=margin)


def design_two(pa, pb, ratio, margin, method):
    return Design(model=make_model({"model": "bernoulli", "p": pa}), model_b=make_model({"model": "bernoulli", "p": pb}),
                  estimand="proportion-diff", method=method, margin=margin, ratio=ratio)


# ------------------------------------------------------------------ one proportion: 20 cases per method
# (p, margin) pairs chosen for this test (answers between about 6 and 700 for each method)
ONE_CASES = {
    "wald": [(p, m) for p in (0.41, 0.47, 0.52, 0.58, 0.63) for m in (0.06, 0.09, 0.13, 0.17)],
    "wilson": [(0.03, 0.06), (0.03, 0.09), (0.03, 0.13), (0.03, 0.17), (0.07, 0.09), (0.07, 0.13), (0.07, 0.17),
               (0.12, 0.17), (0.18, 0.17), (0.18, 0.06), (0.29, 0.09), (0.33, 0.13), (0.41, 0.17), (0.47, 0.06),
               (0.52, 0.13), (0.58, 0.09), (0.71, 0.17), (0.91, 0.13), (0.95, 0.09), (0.95, 0.17)],
    "agresti-coull": [(0.03, 0.06), (0.03, 0.13), (0.07, 0.06), (0.07, 0.17), (0.12, 0.09), (0.12, 0.13),
                      (0.18, 0.17), (0.23, 0.13), (0.23, 0.17), (0.29, 0.17), (0.41, 0.17), (0.52, 0.17),
                      (0.71, 0.17), (0.77, 0.13), (0.84, 0.09), (0.84, 0.17), (0.91, 0.06), (0.91, 0.13),
                      (0.95, 0.06), (0.95, 0.17)],
    "clopper-pearson": [(0.03, 0.06), (0.07, 0.09), (0.12, 0.06), (0.12, 0.13), (0.18, 0.09), (0.23, 0.17),
                        (0.29, 0.13), (0.33, 0.06), (0.41, 0.09), (0.47, 0.17), (0.52, 0.13), (0.58, 0.06),
                        (0.63, 0.17), (0.71, 0.09), (0.77, 0.13), (0.84, 0.06), (0.91, 0.17), (0.95, 0.09),
                        (0.03, 0.17), (0.07, 0.13)],
    "jeffreys": [(0.03, 0.06), (0.03, 0.09), (0.03, 0.13), (0.03, 0.17), (0.07, 0.13), (0.07, 0.17), (0.12, 0.13),
                 (0.12, 0.17), (0.91, 0.13), (0.91, 0.17), (0.95, 0.09), (0.95, 0.13), (0.95, 0.17), (0.52, 0.06),
                 (0.63, 0.09), (0.47, 0.13), (0.58, 0.17), (0.29, 0.06), (0.41, 0.09), (0.33, 0.17)],
}


@pytest.mark.parametrize("method", [pytest.param(m, marks=pytest.mark.slow) if m in ("jeffreys", "wald") else m
                                    for m in ONE_CASES])
def test_one_proportion_window_answer_equals_brute_force_and_ignores_n_max(method):
    cases = ONE_CASES[method]
    assert len(set(cases)) >= 20
    for p, margin in cases:
        ref, first = window_answer(lambda n: passes_one(method, p, margin, n), 2, 1000)
        for factor in (3, 10):
            res = find_n(design_one(p, margin, method), rng=1, n_min=2, n_max=max(3, factor * ref))
            assert res.reached and res.exact, (method, p, margin, factor, res.notes)
            assert (res.n, res.n_first) == (ref, first), (method, p, margin, factor)
            assert res.criterion == "window" and res.decision == "clear"
            assert res.n_range == (ref, ref)


# ------------------------------------------------------------------ two proportions: 22 cases x 3 methods
TWO_CASES = [
    (pa, pb, ratio, method, margin)
    for (pa, pb, ratio, margin) in [
        (0.22, 0.08, 1.0, 0.21), (0.35, 0.15, 1.5, 0.2), (0.6, 0.45, 0.5, 0.24), (0.12, 0.3, 2.0, 0.19),
        (0.5, 0.5, 1.0, 0.22), (0.81, 0.64, 1.0, 0.18), (0.07, 0.02, 3.0, 0.15), (0.44, 0.27, 0.75, 0.23),
        (0.9, 0.72, 1.25, 0.17), (0.33, 0.61, 1.0, 0.25), (0.18, 0.11, 2.5, 0.16), (0.55, 0.2, 1.0, 0.3),
        (0.7, 0.85, 0.8, 0.2), (0.25, 0.25, 1.7, 0.2), (0.42, 0.09, 1.3, 0.21), (0.65, 0.38, 1.1, 0.26),
        (0.14, 0.05, 1.0, 0.12), (0.95, 0.8, 1.0, 0.14), (0.3, 0.2, 1.0, 0.22), (0.6, 0.3, 2.0, 0.2),
        (0.85, 0.55, 1.0, 0.24), (0.4, 0.4, 0.6, 0.25),
    ]
    for method in ("wald", "newcombe", "agresti-caffo")
]


@pytest.mark.slow
def test_two_proportion_exact_search_equals_brute_force():
    assert len(TWO_CASES) >= 50 and all(sum(c[3] == m for c in TWO_CASES) >= 20
                                         for m in ("wald", "newcombe", "agresti-caffo"))
    for pa, pb, ratio, method, margin in TWO_CASES:
        ref, first = window_answer(lambda n: passes_two(method, pa, pb, ratio, margin, n), 1, 600)
        res = find_n(design_two(pa, pb, ratio, margin, method), rng=1, n_min=1, n_max=max(10, 3 * ref))
        assert res.reached and res.exact, (pa, pb, ratio, method, margin, res.notes)
        assert (res.n, res.n_first) == (ref, first), (pa, pb, ratio, method, margin)
        again = find_n(design_two(pa, pb, ratio, margin, method), rng=1, n_min=1, n_max=max(10, 10 * ref))
        assert again.n == ref


# ------------------------------------------------------------------ the issue's wrong answers
def test_wald_difference_old_answer_178_was_wrong_and_the_new_one_holds():
    # p_a = 0.10, p_b = 0.05, ratio 2, margin 0.9, n_max 300: the bisecting search reported
    # n = 178 "for every larger n", but coverage at 179 is below 0.945 (brute force here)
    pa, pb, ratio, margin = 0.10, 0.05, 2.0, 0.9
    assert not passes_two("wald", pa, pb, ratio, margin, 179)
    res = find_n(design_two(pa, pb, ratio, margin, "wald"), rng=1, n_max=300)
    ref, first = window_answer(lambda n: passes_two("wald", pa, pb, ratio, margin, n), 1, 300)
    if res.reached:
        assert res.n == ref and res.n != 178
        assert all(passes_two("wald", pa, pb, ratio, margin, k) for k in range(res.n, top(res.n) + 1))
    else:
        # the window of the candidate reaches past n_max: said, and no n at the ceiling
        assert res.stop_reason == "window reaches n_max" and res.decision == "undecided" and top(ref) > 300
    assert res.n_first == first


def test_agresti_caffo_zero_tolerance_answer_satisfies_its_criterion():
    # p_a = 0.5, p_b = 0.1, tolerance 0: the old search said n = 3 "for every larger n", while
    # coverage at n = 13 is 0.94635 < 0.95 (brute force here); the answer now claims the window only
    pa, pb, margin = 0.5, 0.1, 0.9
    assert not passes_two("agresti-caffo", pa, pb, 1.0, margin, 13, tol=0.0)
    res = find_n(design_two(pa, pb, 1.0, margin, "agresti-caffo"), coverage_tolerance=0.0, rng=1, n_max=500)
    ref, _ = window_answer(lambda n: passes_two("agresti-caffo", pa, pb, 1.0, margin, n, tol=0.0), 1, 500)
    assert res.reached and res.n == ref and res.criterion == "window"
    assert all(passes_two("agresti-caffo", pa, pb, 1.0, margin, k, tol=0.0) for k in range(ref, top(ref) + 1))
    assert "ceil(1.25 n)" in res.criterion_text
    assert not any("every larger n" in t for t in res.notes)


def test_one_proportion_scan_finds_the_answer_far_from_n_min():
    # Wilson, p = 0.3, margin 0.008, n_max 20000: the old scan stopped after 10,000 n and
    # said "not reached"; the assurance target binds near n = 12,600
    # (common practice: z^2 p q / b^2 = 12,605 for the Wald-type half-width)
    res = find_n(design_one(0.3, 0.008, "wilson"), rng=1, n_max=20_000)
    assert res.reached and 12_400 <= res.n <= 12_800
    n = res.n
    assert passes_one("wilson", 0.3, 0.008, n) and not passes_one("wilson", 0.3, 0.008, n - 1)
    assert all(passes_one("wilson", 0.3, 0.008, k) for k in (top(n) - 1, top(n)))


def test_window_beyond_n_max_is_said_and_not_moved_to_the_ceiling():
    # Wilson at p = 0.04 dips below the target at scattered n (Brown, Cai & DasGupta 2001, Fig. 4)
    d = design_one(0.04, 0.02, "wilson")
    full = find_n(d, rng=1, n_max=20_000)
    assert full.reached
    res = find_n(d, rng=1, n_max=full.n + 10)
    assert not res.reached and res.n is None
    assert res.stop_reason == "window reaches n_max" and res.decision == "undecided"
    assert any("raise simulation.n_max" in t for t in res.notes)
    assert res.to_dict()["decision"] == "undecided"


def test_window_one_is_the_first_n():
    d = design_one(0.1, 0.12, "wilson")
    res = find_n(d, rng=1, n_min=5, n_max=220, window=1.0)
    first = next(n for n in range(5, 221) if passes_one("wilson", 0.1, 0.12, n))
    assert res.n == first and res.criterion == "first"


# ------------------------------------------------------------------ the scenario key and the command line
WINDOW_TOML = """
title = "Completion rate (invented example)"
[target]
estimand = "proportion"
margin = 0.12
{window}
[data]
model = "bernoulli"
p = 0.07
[method]
interval = ["wilson", "agresti-coull"]
[simulation]
n_max = 600
"""


def test_scenario_window_key_and_json(tmp_path):
    import io
    import json
    from contextlib import redirect_stderr, redirect_stdout

    from simcheck.cli import main as cli_main

    def run(text, *extra):
        path = tmp_path / "w.toml"
        path.write_text(text)
        out, err = io.StringIO(), io.StringIO()
        with redirect_stdout(out), redirect_stderr(err):
            code = cli_main(["search", str(path), "--json", "--seed", "1", *extra])
        return code, out.getvalue(), err.getvalue()

    code, out, _ = run(WINDOW_TOML.format(window="window = 1.0"))
    obj = json.loads(out)
    assert code == 0 and [r["criterion"] for r in obj["by_method"]] == ["first", "first"]
    first = next(n for n in range(2, 601) if passes_one("wilson", 0.07, 0.12, n))
    assert obj["by_method"][0]["n"] == first and obj["by_method"][0]["targets"]["window"] == 1.0
    code, out, _ = run(WINDOW_TOML.format(window=""), "--method", "wilson")
    obj = json.loads(out)
    ref, _ = window_answer(lambda n: passes_one("wilson", 0.07, 0.12, n), 2, 600)
    assert code == 0 and obj["n"] == ref and obj["criterion"] == "window" and obj["decision"] == "clear"
    assert len(obj["by_method"]) == 1 and obj["best"] == "wilson"
    code, out, err = run(WINDOW_TOML.format(window="window = 0.5"))
    assert code == 2 and out == "" and "target.window" in err and err.count("\n") == 1
    code, out, _ = run(WINDOW_TOML.format(window=""), "--method", "wilson", "--window", "1")
    assert code == 0 and json.loads(out)["n"] == first and json.loads(out)["criterion"] == "first"
    code, out, err = run(WINDOW_TOML.format(window=""), "--window", "9")
    assert code == 2 and out == "" and "--window" in err and err.count("\n") == 1


# ------------------------------------------------------------------ clustered and finite-population exact paths
def test_clustered_proportion_exact_search_equals_brute_force():
    # pooled count of k clusters of m, each Beta-binomial(m, a, b) with a = p (1 - icc) / icc,
    # b = (1 - p)(1 - icc) / icc (ICC = 1 / (a + b + 1); common practice), the Wilson interval on the
    # pooled count; the pmf of the sum by repeated convolution, written here
    from simcheck.design import ClusterSpec

    # the pooled Wilson interval ignores the clustering (design effect 1.1): coverage tends to
    # P(|Z| < 1.96 / sqrt(1.1)) = 0.938, so the tolerance is 0.02 (target 0.93)
    p, icc, m, margin, tol = 0.3, 0.02, 6, 0.1, 0.02
    a, b = p * (1 - icc) / icc, (1 - p) * (1 - icc) / icc
    one = stats.betabinom.pmf(np.arange(m + 1), m, a, b)

    def passes(k):
        pmf = np.array([1.0])
        for _ in range(k):
            pmf = np.convolve(pmf, one)
        x = np.arange(k * m + 1, dtype=float)
        lo, hi = ci_one("wilson", x, k * m)
        return meets(lo, hi, pmf, p, margin, tol)

    ref, first = window_answer(passes, 2, 300)
    d = Design(model=make_model({"model": "bernoulli", "p": p}), estimand="proportion", method="wilson",
               margin=margin, clusters=ClusterSpec(icc=icc, size=m))
    for factor in (3, 10):
        res = find_n(d, coverage_tolerance=tol, rng=1, n_min=2, n_max=factor * ref)
        assert res.exact and res.reached and (res.n, res.n_first) == (ref, first), (factor, res.notes)


def test_population_proportion_exact_search_equals_brute_force(tmp_path):
    # sampling without replacement from N units with K events: hypergeometric law; Wilson limits
    # pulled towards x / n by sqrt(1 - n / N) and clipped (finite population correction, Cochran 1977, ch. 2)
    from simcheck.design import PopulationSpec

    N, K, margin = 500, 140, 0.06
    path = tmp_path / "pop.csv"
    path.write_text("x\n" + "\n".join(["1"] * K + ["0"] * (N - K)) + "\n")
    p = K / N

    def passes(n):
        x = np.arange(max(0, n - (N - K)), min(n, K) + 1, dtype=float)
        w = stats.hypergeom.pmf(x, N, K, n)
        lo, hi = ci_one("wilson", x, n)
        f, ph = math.sqrt(max(1 - n / N, 0.0)), x / n
        lo, hi = np.clip(ph - (ph - lo) * f, 0, 1), np.clip(ph + (hi - ph) * f, 0, 1)
        return meets(lo, hi, w, p, margin)

    ok = {n: passes(n) for n in range(2, N + 1)}
    # the window stops at N: no n above the population exists
    ref = next(n for n in range(2, N + 1) if all(ok[k] for k in range(n, min(top(n), N) + 1)))
    first = next(n for n in range(2, N + 1) if ok[n])
    d = Design(model=make_model({"model": "bernoulli", "p": p}), estimand="proportion", method="wilson", margin=margin,
               population=PopulationSpec(size=N, file=str(path), column="x"))
    res = find_n(d, rng=1, n_min=2, n_max=N)
    assert res.exact and res.reached and (res.n, res.n_first) == (ref, first), res.notes


def test_issue_completion_rate_answer_no_longer_follows_n_max():
    # p = 0.8, Wilson, margin 0.15, assurance 0.5: the "every larger n up to n_max" rule gave
    # 56 / not reached / 293 / 716 for n_max 60 / 100 / 300 / 1000; the window answer is one n
    ref, first = window_answer(lambda n: passes_one("wilson", 0.8, 0.15, n), 2, 300)
    got = {m: find_n(design_one(0.8, 0.15, "wilson"), rng=1, n_max=m) for m in (60, 100, 300, 1000)}
    assert {(r.n, r.n_first) for r in got.values()} == {(ref, first)}
    assert all(r.reached and r.criterion == "window" for r in got.values())
