"""Settings shown but not used, and values allowed but implausible (issue 12, "Measures").

Each case goes through the scenario file and the command line: bad input is one
line on stderr with exit code 2; a warning is a notice on stderr and a result note.
"""

from __future__ import annotations

import json
import math

import pytest
from fixtures import write_toml
from scipy import stats

from simcheck.cli import main
from simcheck.errors import InputError
from simcheck.scenario import load_scenario, scenario_from_dict
from simcheck.search import formula_n


def cli(capsys, *argv):
    rc = main([str(a) for a in argv])
    out, err = capsys.readouterr()
    return rc, out, err


def _scenario(tmp_path, method: str, estimand: str, margin: float, name: str = "s.toml", **tables):
    """An invented scenario file: the target, the method, 500 replicates, seed 1, and ``tables``."""
    table = {"title": "invented", "method": {"interval": method}, "simulation": {"replicates": 500, "seed": 1},
             "target": {"estimand": estimand, "margin": margin}, **tables}
    return write_toml(tmp_path / name, table)


BERNOULLI = {"model": "bernoulli", "p": 0.3}
CLUSTERS = {"icc": 0.05, "size": 10, "effect": "gamma"}


# --- clusters.effect on 0/1 data ---------------------------------------------
@pytest.mark.parametrize("method,estimand,margin,data,refused", [
    ("wilson", "proportion", 0.05, BERNOULLI, True),
    # continuous data keep the gamma effect
    ("cluster-t", "mean", 1.0, {"model": "lognormal", "mean": 5, "cv": 1}, False),
])
def test_gamma_cluster_effect_is_refused_on_0_1_data_only(capsys, tmp_path, method, estimand, margin, data, refused):
    f = _scenario(tmp_path, method, estimand, margin, data=data, clusters=CLUSTERS)
    if not refused:
        assert load_scenario(f).design.clusters.effect == "gamma"
        return
    rc, out, err = cli(capsys, "check", f, "--n", 20)
    assert rc == 2 and out == "" and err.count("\n") == 1
    assert err.startswith("simcheck: error: ") and "clusters.effect" in err and "beta-binomial" in err


# --- a proportion margin of 10 -------------------------------------------------
@pytest.mark.parametrize("estimand,data,margin", [
    ("proportion", BERNOULLI, 10),
    ("proportion", BERNOULLI, 1),
    ("proportion-diff", {"a": BERNOULLI, "b": {"model": "bernoulli", "p": 0.2}}, 1.5),
])
def test_proportion_margin_of_one_or_more_is_refused_as_formula_does(capsys, tmp_path, estimand, data, margin):
    method = "wilson" if estimand == "proportion" else "newcombe"
    f = _scenario(tmp_path, method, estimand, margin, data=data)
    rc, out, err = cli(capsys, "search", f)
    assert rc == 2 and out == "" and err.count("\n") == 1 and "target.margin: must be < 1" in err
    # the closed form refuses it too (the same rule)
    rc, _, err2 = cli(capsys, "formula", "--estimand", estimand, "--margin", margin, "--p", 0.3,
                      *(("--p-b", 0.2) if estimand == "proportion-diff" else ()))
    assert rc == 2 and "--margin: must be < 1" in err2


# --- implausible CVs warn --------------------------------------------------------
@pytest.mark.parametrize("cv,clusters,warned", [
    (80, {"icc": 0.05, "size_mean": 10, "size_cv": 40}, ("data.cv = 80", "clusters.size_cv = 40")),
    (0.8, None, ()),
])
def test_cv_80_and_size_cv_40_warn_on_stderr_and_in_notes(capsys, tmp_path, cv, clusters, warned):
    tables = {"data": {"model": "lognormal", "mean": 100, "cv": cv}}
    if clusters is not None:
        tables["clusters"] = clusters
    f = _scenario(tmp_path, "t", "mean", 50, **tables)
    rc, out, err = cli(capsys, "check", f, "--n", 30, "--json")
    assert rc == 0
    notes = json.loads(out)["notes"]
    for key in warned:
        assert any(key in t for t in notes), key
        assert any(key in line for line in err.splitlines()), key
    if not warned:
        assert "warning" not in err and not any("warning" in t for t in notes)


def test_lognormal_given_sd_suggests_cv():
    with pytest.raises(InputError) as e:
        scenario_from_dict({"target": {"estimand": "mean", "margin": 1.0}, "method": {"interval": "t"},
                            "data": {"model": "lognormal", "mean": 5.0, "sd": 2.0}})
    msg = {p.field: p.message for p in e.value.problems}["data.sd"]
    assert "cv" in msg and "sdlog" not in msg and "0.4" in msg


# --- population.file supplies the values -----------------------------------------
def _ledger(tmp_path):
    values = [round(2.0 + (i * 37 % 101) / 7.0, 2) for i in range(600)]
    (tmp_path / "ledger.csv").write_text("id,amount\n" + "\n".join(f"{i},{v}" for i, v in enumerate(values)) + "\n")
    return values


#: a [data] table beside population.file is not used: the file gives the values (a normal SD of 400
#: would give n = 585 of 600)
UNUSED_DATA = {"model": "normal", "mean": 1000, "sd": 400}


@pytest.mark.parametrize("data_table", [None, UNUSED_DATA], ids=["no-data-table", "data-table-ignored"])
def test_population_file_supplies_the_values(capsys, tmp_path, data_table):
    values = _ledger(tmp_path)
    tables = {} if data_table is None else {"data": data_table}
    f = _scenario(tmp_path, "t", "mean", 0.5, population={"file": "ledger.csv", "column": "amount"}, **tables)
    s = load_scenario(f)
    N = len(values)
    mean = sum(values) / N
    assert s.design.model.mean == pytest.approx(mean)
    assert "ledger.csv" in s.describe_data() and "1000" not in s.describe_data()
    # the closed form from the file's values: Cochran (1977), section 4.6,
    # n0 = (z S / B)^2 with S on divisor N - 1, n = n0 / (1 + n0 / N), rounded up
    S2 = sum((v - mean) ** 2 for v in values) / (N - 1)
    n0 = stats.norm.ppf(0.975) ** 2 * S2 / 0.5**2
    assert formula_n(s.design) == math.ceil(n0 / (1 + n0 / N))
    rc, out, err = cli(capsys, "search", f, "--json", "--budget", 5000)
    assert rc == 0 and json.loads(out)["n_formula"] == math.ceil(n0 / (1 + n0 / N))
    assert ("[data] is not used" in err) == bool(data_table)
    rc, out, err = cli(capsys, "check", f, "--n", 40, "--json")
    assert rc == 0 and ("[data] is not used" in err) == bool(data_table)
    # round trip of the resolved scenario (sweeps hash it)
    again = scenario_from_dict(s.to_dict(), base_dir=tmp_path)
    assert again.design.model.mean == pytest.approx(mean)
