"""``simcheck fit`` and :func:`simcheck.fit.fit`: fitted parameters against scipy's own fits,
AIC and goodness-of-fit statistics recomputed here, tables that build, one-line errors."""

from __future__ import annotations

import json
import math

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from simcheck.cli import main
from simcheck.errors import InputError
from simcheck.fit import fit, fit_file
from simcheck.fit.qq import qq_points
from simcheck.models import make_model
from simcheck.models.composite import Empirical


def _by_name(res, name):
    return next(m for m in res.models if m.model == name)


def test_lognormal_gamma_weibull_normal_match_scipy_fit():
    rng = np.random.default_rng(20261202)
    x = rng.lognormal(2.0, 0.6, 400)
    res = fit(x)
    # reference: scipy.stats.<dist>.fit on the same values (loc fixed at 0 for positive laws)
    s, _, scale = stats.lognorm.fit(x, floc=0)
    ln = _by_name(res, "lognormal")
    assert ln.table["mean"] == pytest.approx(scale * math.exp(s * s / 2), rel=1e-5)
    assert ln.table["cv"] == pytest.approx(math.sqrt(math.exp(s * s) - 1), rel=1e-5)
    assert ln.aic == pytest.approx(4 - 2 * stats.lognorm(s, scale=scale).logpdf(x).sum(), rel=1e-9)
    a, _, gs = stats.gamma.fit(x, floc=0)
    g = _by_name(res, "gamma")
    assert g.table["mean"] == pytest.approx(a * gs, rel=1e-5)
    assert g.table["cv"] == pytest.approx(1 / math.sqrt(a), rel=1e-5)
    c, _, ws = stats.weibull_min.fit(x, floc=0)
    w = _by_name(res, "weibull")
    assert (w.table["shape"], w.table["scale"]) == (pytest.approx(c, rel=1e-5), pytest.approx(ws, rel=1e-5))
    nm = _by_name(res, "normal")
    assert nm.table["mean"] == pytest.approx(x.mean(), rel=1e-5)
    assert nm.table["sd"] == pytest.approx(x.std(ddof=0), rel=1e-5)  # ML: divisor n
    # 400 lognormal values: the lognormal wins by AIC, the normal is far behind
    assert res.best == "lognormal"
    assert nm.delta_aic > 10
    # Kolmogorov-Smirnov against scipy.stats.kstest with the fitted law
    assert ln.gof_statistic == pytest.approx(stats.kstest(x, stats.lognorm(s, scale=scale).cdf).statistic, rel=1e-9)


def test_anderson_darling_matches_scipy_goodness_of_fit():
    rng = np.random.default_rng(7)
    x = rng.normal(10, 2, 60)
    res = fit(x)
    nm = _by_name(res, "normal")
    loc, scale = stats.norm.fit(x)
    # reference: scipy.stats.goodness_of_fit with every parameter known gives A^2 of that law
    ref = stats.goodness_of_fit(stats.norm, x, known_params={"loc": loc, "scale": scale}, statistic="ad",
                                n_mc_samples=99, rng=1)
    assert nm.anderson_darling == pytest.approx(ref.statistic, rel=1e-6)


def test_beta_given_and_inferred_range():
    rng = np.random.default_rng(3)
    u = rng.beta(2.0, 5.0, 300)
    res = fit(u)
    b = _by_name(res, "beta")
    a_ref, b_ref, _, _ = stats.beta.fit(u, floc=0, fscale=1)
    ref = stats.beta(a_ref, b_ref)
    assert b.table["mean"] == pytest.approx(ref.mean(), rel=1e-5)
    assert b.table["sd"] == pytest.approx(ref.std(), rel=1e-5)
    assert any("inferred" in n for n in b.notes)
    scaled = fit(10 * u, lower=0, upper=10)
    bs = _by_name(scaled, "beta")
    assert (bs.table["lower"], bs.table["upper"]) == (0.0, 10.0)
    assert any("given" in n for n in bs.notes)
    assert bs.table["mean"] == pytest.approx(10 * ref.mean(), rel=1e-4)
    assert not any(m.model == "beta" for m in fit(10 * u).models)
    with pytest.raises(InputError, match="strictly inside"):
        fit(10 * u, lower=0, upper=5)
    with pytest.raises(InputError, match="upper"):
        fit(10 * u, lower=0)


def test_zero_inflated_forms_fit_the_positive_values():
    rng = np.random.default_rng(11)
    x = np.where(rng.random(300) < 0.25, 0.0, rng.gamma(2.0, 3.0, 300))
    res = fit(x)
    zg = _by_name(res, "zero-inflated gamma")
    pos = x[x > 0]
    a, _, sc = stats.gamma.fit(pos, floc=0)
    assert zg.table["model"] == "zero-inflated"
    assert zg.table["zero_prob"] == pytest.approx(np.mean(x == 0), rel=1e-5)
    assert zg.table["inner"]["mean"] == pytest.approx(a * sc, rel=1e-5)
    pi = np.mean(x == 0)
    ll = (x == 0).sum() * math.log(pi) + pos.size * math.log(1 - pi) + stats.gamma(a, scale=sc).logpdf(pos).sum()
    assert zg.loglik == pytest.approx(ll, rel=1e-9)
    assert zg.parameters == 3
    # the normal density cannot be compared with a law that has an atom at 0: ranked last, said so
    assert res.models[-1].model == "normal" and not res.models[-1].comparable
    assert res.best.startswith("zero-inflated")


def test_counts_poisson_negative_binomial_zip():
    rng = np.random.default_rng(5)
    x = rng.negative_binomial(2.0, 0.3, 400).astype(float)
    res = fit(x)
    assert res.whole_numbers
    p = _by_name(res, "poisson")
    assert p.table["mean"] == pytest.approx(x.mean(), rel=1e-5)
    assert p.loglik == pytest.approx(stats.poisson(x.mean()).logpmf(x).sum(), rel=1e-9)
    nb = _by_name(res, "negative-binomial")
    m, v = x.mean(), x.var(ddof=1)
    assert nb.table["dispersion"] == pytest.approx(m * m / (v - m), rel=1e-5)  # method of moments
    assert "method of moments" in nb.method
    assert res.best == "negative-binomial"
    z = _by_name(res, "zero-inflated poisson")
    lam = m + v / m - 1
    assert z.table["inner"]["mean"] == pytest.approx(lam, rel=1e-5)
    assert z.table["zero_prob"] == pytest.approx(1 - m / lam, rel=1e-5)


def test_chi_square_against_scipy_chisquare():
    # 10 zeros, 10 ones, 10 twos; Poisson(1): expected 11.04, 11.04, 7.93 (tail >= 2), no pooling needed
    x = np.repeat([0.0, 1.0, 2.0], 10)
    p = _by_name(fit(x), "poisson")
    e = 30 * np.array([stats.poisson.pmf(0, 1), stats.poisson.pmf(1, 1), stats.poisson.sf(1, 1)])
    ref = stats.chisquare([10, 10, 10], e, ddof=1)
    assert p.gof == "chi-square (df 1)"
    assert p.gof_statistic == pytest.approx(ref.statistic, rel=1e-9)
    assert p.gof_pvalue == pytest.approx(ref.pvalue, rel=1e-9)


def test_every_table_builds_and_keeps_the_fitted_mean():
    rng = np.random.default_rng(9)
    samples = [rng.lognormal(1, 0.8, 50), rng.poisson(4, 50).astype(float),
               np.r_[np.zeros(8), rng.lognormal(3, 1, 40)], rng.beta(3, 3, 40)]
    for x in samples:
        for m in fit(x).models:
            model = make_model(m.table)
            cand = m.candidate
            assert model.mean == pytest.approx((1 - cand.zero_prob) * cand.dist.mean(), rel=1e-4)


def test_pandas_series_missing_values_and_frame():
    s = pd.Series([3.1, None, 4.2, 5.0, 2.2, 6.3, 4.4])
    res = fit(s)
    assert res.n == 6 and any("1 missing value dropped" in n for n in res.notes)
    d = res.to_dict()
    assert d["best"] == res.models[0].model and len(d["models"]) == len(res.models)
    assert d["sd"] == pytest.approx(np.std(s.dropna(), ddof=1)) and d["sd_divisor"] == "n - 1"
    frame = res.to_frame()
    assert list(frame["model"]) == [m.model for m in res.models]
    assert all("descriptive" in n for n in res.notes[:1])


@pytest.mark.parametrize("values, message", [
    ([1.0, 2.0], "at least 3"),
    ([1.0, "a", 2.0, 3.0], "non-numeric"),
    ([1.0, np.inf, 2.0], "infinite"),
    ([2.0, 2.0, 2.0], "constant"),
])
def test_bad_values(values, message):
    with pytest.raises(InputError, match=message):
        fit(values)


def test_qq_points_use_the_fitted_quantiles():
    rng = np.random.default_rng(2)
    x = rng.gamma(3, 2, 30)
    g = _by_name(fit(x), "gamma")
    fq, xs = qq_points(x, g.candidate)
    a, _, sc = stats.gamma.fit(x, floc=0)
    assert np.allclose(fq, stats.gamma(a, scale=sc).ppf((np.arange(1, 31) - 0.5) / 30), rtol=1e-6)
    assert np.array_equal(xs, np.sort(x))


def _csv(tmp_path, **cols):
    f = tmp_path / "pilot.csv"
    pd.DataFrame(cols).to_csv(f, index=False)
    return str(f)


def test_cli_json_text_and_qq(tmp_path, capsys):
    rng = np.random.default_rng(4)
    f = _csv(tmp_path, cost=np.round(rng.lognormal(3, 0.5, 20), 2))
    assert main(["fit", f, "--column", "cost", "--json", "--qq", str(tmp_path / "qq.png")]) == 0
    out = json.loads(capsys.readouterr().out)
    assert out["best"] == out["models"][0]["model"]
    assert {"model", "table", "aic", "gof", "gof_statistic", "gof_pvalue", "method"} <= set(out["models"][0])
    assert (tmp_path / "qq.png").read_bytes()[:4] == b"\x89PNG"
    assert main(["fit", f, "--column", "cost"]) == 0
    text = capsys.readouterr().out
    assert "[data]" in text and "descriptive" in text and 'model = "empirical"' in text
    assert fit_file(f, "cost").best == out["best"]


@pytest.mark.parametrize("cols, column, message", [
    ({"y": [1.0, 2.0]}, "y", "at least 3"),
    ({"y": ["a", "b", "c"]}, "y", "non-numeric"),
    ({"y": [1.0, 2.0, 3.0]}, "z", "no column 'z'"),
])
def test_cli_bad_input_one_line_exit_2(tmp_path, capsys, cols, column, message):
    f = _csv(tmp_path, **cols)
    assert main(["fit", f, "--column", column]) == 2
    err = capsys.readouterr().err
    assert message in err and err.count("\n") == 1


def test_cli_missing_file_and_bad_qq(tmp_path, capsys):
    assert main(["fit", str(tmp_path / "none.csv"), "--column", "y"]) == 2
    assert "no such file" in capsys.readouterr().err
    f = _csv(tmp_path, y=[1.0, 2.0, 4.0])
    assert main(["fit", f, "--column", "y", "--qq", str(tmp_path / "qq.txt")]) == 2
    assert "--qq" in capsys.readouterr().err


def test_empirical_from_values_states_its_divisor():
    values = [3.0, 5.0, 4.0, 10.0, 8.0]
    m = Empirical.from_values(np.array(values))
    assert m.mean == pytest.approx(np.mean(values))
    assert m.sd == pytest.approx(np.std(values, ddof=0)) and m.sd_divisor == "n"
    assert m.sample_sd == pytest.approx(np.std(values, ddof=1))
    assert "divisor n" in m.true_value_note
    draws = m.draw(np.random.default_rng(1), (200, 5))
    assert set(np.unique(draws)) <= set(values)
    from_series = make_model({"model": "empirical", "values": pd.Series(values)})
    assert from_series.params() == {"values": values}
    with pytest.raises(InputError, match="not both"):
        make_model({"model": "empirical", "values": values, "file": "x.csv", "column": "y"})


def test_zero_one_values_fit_a_bernoulli():
    x = np.array([0, 1, 1, 0, 1, 1, 1, 0, 1, 1], dtype=float)
    res = fit(x)
    b = _by_name(res, "bernoulli")
    assert b.table == {"model": "bernoulli", "p": 0.7}
    assert b.loglik == pytest.approx(stats.bernoulli(0.7).logpmf(x).sum(), rel=1e-12)
    assert res.best == "bernoulli"  # one parameter, the same likelihood as any law on {0, 1} can reach
    make_model(b.table)


def test_two_dimensional_values_refused():
    with pytest.raises(InputError, match="1-d"):
        fit(np.ones((3, 2)))


def test_chi_square_pools_small_cells_from_the_top():
    # 40 counts: 0 x 12, 1 x 14, 2 x 9, 3 x 4, 5 x 1; Poisson(mean 1.25) expected counts computed here:
    # cells 0, 1, 2, then 3+ (expected 40 * P(X >= 3) = 5.85 >= 5 once pooled), so df = 4 - 1 - 1 = 2
    x = np.repeat([0.0, 1.0, 2.0, 3.0, 5.0], [12, 14, 9, 4, 1])
    m = x.mean()
    e = 40 * np.array([stats.poisson.pmf(0, m), stats.poisson.pmf(1, m), stats.poisson.pmf(2, m),
                       stats.poisson.sf(2, m)])
    assert e[-1] >= 5 and 40 * stats.poisson.sf(3, m) < 5  # the pooling the test expects
    ref = stats.chisquare([12, 14, 9, 5], e, ddof=1)
    p = _by_name(fit(x), "poisson")
    assert p.gof == "chi-square (df 2)"
    assert p.gof_statistic == pytest.approx(ref.statistic, rel=1e-9)
    assert p.gof_pvalue == pytest.approx(ref.pvalue, rel=1e-9)


def test_zero_inflated_poisson_likelihood():
    x = np.repeat([0.0, 1.0, 2.0, 3.0, 4.0, 6.0], [30, 10, 12, 8, 5, 2])
    z = _by_name(fit(x), "zero-inflated poisson")
    pi, lam = z.candidate.zero_prob, z.candidate.dist.mean()
    pmf = (1 - pi) * stats.poisson.pmf(x, lam) + pi * (x == 0)
    assert z.loglik == pytest.approx(np.log(pmf).sum(), rel=1e-12)


def test_empirical_values_in_a_scenario_file(tmp_path, capsys):
    f = tmp_path / "s.toml"
    f.write_text('title = "inline pilot (invented)"\n[target]\nestimand = "mean"\nmargin = 1.0\n'
                 '[data]\nmodel = "empirical"\nvalues = [3.0, 5.5, 4.0, 7.5, 6.0, 2.5]\n'
                 '[method]\ninterval = "t"\n[simulation]\nseed = 1\nreplicates = 2000\n')
    assert main(["check", str(f), "--n", "10", "--json"]) == 0
    out = json.loads(capsys.readouterr().out)
    assert out["true_value"] == pytest.approx(np.mean([3.0, 5.5, 4.0, 7.5, 6.0, 2.5]))


def test_failed_fits_are_noted_not_raised():
    res = fit([1e300, 1.0, 2.5])  # overflows the lognormal mean and the normal fit: both left out, said so
    assert any("could not be fitted" in n for n in res.notes)
    assert all(np.isfinite(m.aic) for m in res.models)
    with pytest.raises(InputError, match="no candidate model"):
        fit([1e300, -1e300, 2.5])
