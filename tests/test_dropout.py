"""Dropout: ``target.dropout`` / ``--dropout`` and ``n_enrolled`` = ceil(n / (1 - dropout)).

Reference: exact rational arithmetic in the test (fractions), so that float
fuzz such as 80 / 0.8 = 100.00000000000001 cannot hide a wrong rounding.
Common practice: inflate the analysed n by 1 / (1 - dropout).
"""

from __future__ import annotations

import json
import math
from fractions import Fraction

import pytest

from simcheck.cli import main
from simcheck.formulas import enrolled_n, sample_size
from simcheck.scenario import scenario_from_dict
from simcheck.tasks import run_task


def _exact(n: int, d: str) -> int:
    return math.ceil(Fraction(n) / (1 - Fraction(d)))


@pytest.mark.parametrize("n, d", [(80, "0.2"), (139, "0.15"), (100, "0.1"), (7, "0.3"), (50, "0"), (1000, "0.99")])
def test_enrolled_n_exact(n, d):
    assert enrolled_n(n, float(d)) == _exact(n, d)


def test_formula_reports_n_enrolled(capsys):
    res = sample_size("mean", 2.0, sd=12.0, dropout=0.15)
    assert res.n == 139 and res.n_enrolled == _exact(139, "0.15")
    two = sample_size("mean-diff", 2.0, sd=12.0, ratio=2.0, dropout=0.2)
    d = two.to_dict()
    assert d["n_enrolled"] == _exact(two.n, "0.2") and d["n_b_enrolled"] == _exact(two.n_b, "0.2")
    assert d["n_total_enrolled"] == d["n_enrolled"] + d["n_b_enrolled"]
    assert sample_size("mean", 2.0, sd=12.0).to_dict()["n_enrolled"] == 139  # no dropout: n itself
    assert main(["formula", "--estimand", "mean", "--sd", "12", "--margin", "2", "--dropout", "0.15", "--json"]) == 0
    out = json.loads(capsys.readouterr().out)
    assert (out["n"], out["n_enrolled"], out["dropout"]) == (139, 164, 0.15)


@pytest.mark.parametrize("value", ["1", "-0.1", "1.5", "nan"])
def test_formula_bad_dropout_exit_2(capsys, value):
    assert main(["formula", "--estimand", "mean", "--sd", "12", "--margin", "2", f"--dropout={value}"]) == 2
    err = capsys.readouterr().err
    assert "--dropout" in err and err.count("\n") == 1


SCEN = {
    "title": "Dropout (invented example)",
    "target": {"estimand": "mean", "margin": 2.0},
    "data": {"model": "normal", "mean": 50.0, "sd": 12.0},
    "method": {"interval": "t"},
    "simulation": {"seed": 3},
}


def test_search_reports_n_enrolled_and_hash_is_unchanged_without_dropout():
    plain = scenario_from_dict(SCEN)
    assert "dropout" not in plain.to_dict()["target"]  # sweep stores of older scenarios keep their cell keys
    with_d = scenario_from_dict({**SCEN, "target": {**SCEN["target"], "dropout": 0.25}})
    assert with_d.to_dict()["target"]["dropout"] == 0.25
    res = run_task(with_d, "search")
    d = res.to_dict()
    assert d["n"] is not None and d["n_enrolled"] == _exact(d["n"], "0.25") and d["dropout"] == 0.25
    assert run_task(plain, "search").to_dict()["n_enrolled"] == d["n"]


@pytest.mark.parametrize("value", [1.0, -0.2, "a"])
def test_scenario_bad_dropout(tmp_path, capsys, value):
    f = tmp_path / "s.toml"
    v = f'"{value}"' if isinstance(value, str) else value
    f.write_text(f'[target]\nestimand = "mean"\nmargin = 2.0\ndropout = {v}\n[data]\nmodel = "normal"\nmean = 1\nsd = 1\n'
                 '[method]\ninterval = "t"\n')
    assert main(["search", str(f)]) == 2
    err = capsys.readouterr().err
    assert "target.dropout" in err and err.count("\n") == 1
