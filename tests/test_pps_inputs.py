"""Scenario files with [selection] and [misstatement]: bad input, round trips, search and formula.

The reference for the search is the Poisson-based sample size for zero expected errors,
n = ceil(BV R / TM) with R = -ln(1 - confidence) (Leslie, Teitlebaum & Anderson 1979,
Dollar-Unit Sampling; from memory), computed here with the standard library: on a ledger
without misstatement every sample finds none, the Poisson limit is BV R / n, so the
assurance is exactly 1 from that n on and 0 below it.
"""

from __future__ import annotations

import json
import math

import pytest
from fixtures import run_cli, write_toml

from simcheck.scenario import load_scenario, scenario_from_dict


def mus_table(**changes):
    table = {
        "title": "Ledger (invented example)",
        "target": {"estimand": "total", "bound": "upper", "confidence": 0.95, "margin": 40_000.0, "assurance": 0.8},
        "population": {"size": 2000},
        "selection": {"rule": "monetary-unit", "size": {"model": "lognormal", "mean": 500.0, "cv": 1.0}},
        "misstatement": {"error_rate": 0.02, "taint": {"model": "beta", "mean": 0.4, "sd": 0.2}},
        "method": {"interval": ["stringer", "poisson-bound"]},
        "simulation": {"replicates": 500, "seed": 7, "n_max": 1500},
    }
    return _changed(table, changes)


def _changed(table, changes):
    # keyword names: "table__key" sets one key, "table" replaces the whole table
    for k, v in changes.items():
        head, _, leaf = k.partition("__")
        if leaf:
            table.setdefault(head, {})[leaf] = v
        else:
            table[head] = v
    return table


def pps_table(**changes):
    table = {
        "title": "Shops (invented example)",
        "target": {"estimand": "total", "confidence": 0.95, "margin": 150_000.0},
        "population": {"size": 800},
        "selection": {"rule": "pps", "size": {"model": "gamma", "mean": 120.0, "cv": 0.8}},
        "data": {"model": "normal", "mean": 2.5, "sd": 0.6},
        "method": {"interval": ["t", "z"]},
        "simulation": {"replicates": 500, "seed": 8},
    }
    return _changed(table, changes)


def _refused(tmp_path, table, field, phrase, name="bad.toml"):
    path = write_toml(tmp_path / name, table)
    code, out, err = run_cli(["check", path, "--n", 50])
    lines = err.strip().splitlines()
    assert code == 2, err
    assert len(lines) == 1 and lines[0].startswith("simcheck: error: "), err
    assert field in lines[0] and phrase in lines[0], lines[0]
    assert "Traceback" not in err and out == ""


# --- bad input: exit 2, one line naming the field ---------------------------------------------------------
@pytest.mark.parametrize("rate", [1.5, -0.1])
def test_error_rate_outside_0_1(tmp_path, rate):
    _refused(tmp_path, mus_table(misstatement__error_rate=rate), "misstatement.error_rate", "must be")


@pytest.mark.parametrize("taint", [1.2, -0.5])
def test_constant_taint_outside_0_1(tmp_path, taint):
    _refused(tmp_path, mus_table(misstatement__taint=taint), "misstatement.taint", "must be")


def test_taint_model_outside_0_1(tmp_path):
    taint = {"model": "uniform", "lower": 0.5, "upper": 1.5}
    _refused(tmp_path, mus_table(misstatement__taint=taint), "misstatement.taint", "outside [0, 1]")


def test_size_model_with_values_at_or_below_zero(tmp_path):
    size = {"model": "normal", "mean": 500.0, "sd": 300.0}
    _refused(tmp_path, mus_table(selection__size=size), "selection.size", "sizes <= 0")


def test_book_values_at_or_below_zero_in_the_file(tmp_path):
    (tmp_path / "ledger.csv").write_text("book\n120.5\n0\n310\n44.1\n", encoding="utf-8")
    table = mus_table(population={"file": "ledger.csv", "column": "book"}, selection={"rule": "monetary-unit"})
    _refused(tmp_path, table, "population.column", "sizes must be > 0")


def test_pps_sizes_at_or_below_zero_in_the_file(tmp_path):
    (tmp_path / "items.csv").write_text("area,value\n10,4\n-2,5\n7,3\n", encoding="utf-8")
    table = pps_table(population={"file": "items.csv", "column": "value"}, selection={"rule": "pps", "size_column": "area"})
    table.pop("data")
    _refused(tmp_path, table, "selection.size_column", "sizes must be > 0")


def test_one_sided_limit_needs_bound_upper(tmp_path):
    table = mus_table()
    table["target"]["bound"] = "two-sided"
    _refused(tmp_path, table, "method.interval", "bound = \"upper\"")


def test_misstatement_only_with_monetary_unit(tmp_path):
    table = pps_table()
    table["misstatement"] = {"error_rate": 0.1, "taint": 0.5}
    _refused(tmp_path, table, "misstatement", "monetary-unit")


def test_unknown_rule_and_missing_size(tmp_path):
    _refused(tmp_path, pps_table(selection__rule="sizes"), "selection.rule", "choose one of")
    table = mus_table()
    del table["selection"]["size"]
    _refused(tmp_path, table, "selection.size", "missing", name="b2.toml")


def test_all_problems_at_once(tmp_path):
    table = mus_table(misstatement__error_rate=2.0, misstatement__taint=3.0)
    path = write_toml(tmp_path / "two.toml", table)
    code, _, err = run_cli(["check", path, "--n", 50])
    assert code == 2 and "misstatement.error_rate" in err and "misstatement.taint" in err
    assert len(err.strip().splitlines()) == 1


# --- round trips and the commands -------------------------------------------------------------------------
@pytest.mark.parametrize("make", [mus_table, pps_table])
def test_scenario_round_trips(tmp_path, make):
    s = scenario_from_dict(make(), base_dir=tmp_path)
    d = s.to_dict()
    again = scenario_from_dict(json.loads(json.dumps(d, allow_nan=False)), base_dir=tmp_path)
    assert again.to_dict() == d and again.design.true_value == pytest.approx(s.design.true_value)
    assert s.design.selection is not None


def test_planning_true_values():
    mus = scenario_from_dict(mus_table()).design
    assert mus.true_value == pytest.approx(2000 * 500.0 * 0.02 * 0.4)  # N E[book] rate E[taint]
    pps = scenario_from_dict(pps_table()).design
    assert pps.true_value == pytest.approx(800 * 120.0 * 2.5)  # value = size x per-size value


def test_search_on_a_ledger_without_misstatement_is_the_poisson_formula(tmp_path):
    table = mus_table(misstatement__error_rate=0.0)
    table["method"]["interval"] = "poisson-bound"
    path = write_toml(tmp_path / "clean.toml", table)
    code, out, err = run_cli(["search", path, "--json"])
    assert code == 0, err
    res = json.loads(out)
    s = load_scenario(path)
    # the realised book value of the ledger drawn from the seed: true value 0, limit BV R / n
    from simcheck.engine.pps import population_for

    BV = population_for(s.design, 7).total_size
    n_ref = math.ceil(BV * -math.log(1 - 0.95) / 40_000.0)
    assert res["reached"] and res["n"] == n_ref
    # the closed form plans with the models' book value N E[size] = 2000 x 500
    assert res["n_formula"] == math.ceil(2000 * 500.0 * -math.log(0.05) / 40_000.0)
    assert res["coverage"] == 1.0 and res["decision"] == "clear"


def test_check_and_curve_commands_run(tmp_path):
    path = write_toml(tmp_path / "mus.toml", mus_table())
    code, out, err = run_cli(["check", path, "--n", 60, "--json"])
    assert code == 0, err
    r = json.loads(out)
    assert r["bound"] == "upper" and 0 <= r["coverage"] <= 1 and r["margin_mean"] > 0
    code, out, err = run_cli(["curve", path, "--n-values", "40,80", "--method", "poisson-bound"])
    assert code == 0, err
    assert "monetary-unit selection" in out


# --- hostile values for every new key: refused with InputError or run, never a crash ----------------------
HOSTILE = ["x", "", True, [], [1.0], {}, {"model": "nope"}, float("inf"), float("nan"), -1, 0, 0.5, 1, 2, 1e308, 10**400]
KEYS = ["selection.rule", "selection.size", "selection.size_column", "selection.data_per_size",
        "misstatement.error_rate", "misstatement.taint", "selection", "misstatement"]


@pytest.mark.parametrize("key", KEYS)
@pytest.mark.parametrize("make", [mus_table, pps_table])
def test_hostile_values_are_refused_or_run(tmp_path, key, make):
    from simcheck import engine
    from simcheck.errors import InputError
    from simcheck.scenario import set_dotted

    for v in HOSTILE:
        table = set_dotted(make(), key, v)
        try:
            s = scenario_from_dict(table, base_dir=tmp_path)
        except InputError as e:
            assert e.one_line() and "\n" not in e.one_line()
            continue
        try:
            r = engine.check(s.design, 20, replicates=100, rng=1)
        except InputError:
            continue
        assert 0.0 <= r.coverage <= 1.0, (key, v)


def test_report_words_describe_the_selection():
    from simcheck.report.text import model_text

    mus = model_text(scenario_from_dict(mus_table()).design.to_dict())
    assert mus.startswith("a ledger of 2,000 items") and "misstated with probability 0.02" in mus
    pps = model_text(scenario_from_dict(pps_table()).design.to_dict())
    assert "value per unit of size" in pps and "800 items" in pps
