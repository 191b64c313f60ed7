"""``[zip]`` in sweep files: lists that vary together, crossed with ``[vary]``.

Bookkeeping checks (no statistics): the expanded cells are exactly the ones
listed, written out by hand below.
"""

from __future__ import annotations

import pytest

from simcheck.cli import main
from simcheck.errors import InputError
from simcheck.sweep.grid import load_sweep

# Invented example: two groups of skewed costs whose CVs move together.
BASE = """\
title = "Costs in two clinics (invented example)"

[target]
estimand = "mean-diff"
margin = 2.0

[data.a]
model = "lognormal"
mean = 20.0
cv = 0.5

[data.b]
model = "lognormal"
mean = 18.0
cv = 0.5

[method]
interval = "welch"

[simulation]
replicates = 200
seed = 5
"""


def _write(tmp_path, body: str):
    (tmp_path / "base.toml").write_text(BASE)
    f = tmp_path / "sweep.toml"
    f.write_text('base = "base.toml"\ntask = "check"\nn = [30]\n' + body)
    return f


def test_zip_alone_gives_exactly_the_listed_cells(tmp_path):
    f = _write(tmp_path, '[zip]\n"data.a.cv" = [0.5, 1.0, 1.5]\n"data.b.cv" = [0.6, 1.2, 1.8]\n')
    spec, cells = load_sweep(f)
    assert spec.size == 3
    assert [c.values for c in cells] == [
        {"data.a.cv": 0.5, "data.b.cv": 0.6},
        {"data.a.cv": 1.0, "data.b.cv": 1.2},
        {"data.a.cv": 1.5, "data.b.cv": 1.8},
    ]
    # each cell's scenario really carries its pair
    assert [(c.scenario.to_dict()["data"]["a"]["cv"], c.scenario.to_dict()["data"]["b"]["cv"]) for c in cells] == [
        (0.5, 0.6), (1.0, 1.2), (1.5, 1.8)]


def test_zip_crossed_with_vary(tmp_path):
    f = _write(tmp_path, '[zip]\n"data.a.cv" = [0.5, 1.0]\n"data.b.cv" = [0.6, 1.2]\n'
                         '[vary]\n"method.interval" = ["welch", "t"]\n"target.margin" = [2.0, 3.0]\n')
    spec, cells = load_sweep(f)
    expected = [
        {"data.a.cv": a, "data.b.cv": b, "method.interval": m, "target.margin": g}
        for a, b in [(0.5, 0.6), (1.0, 1.2)] for m in ["welch", "t"] for g in [2.0, 3.0]
    ]
    assert spec.size == 8
    assert [c.values for c in cells] == expected
    assert len({c.key for c in cells}) == 8


def test_zip_with_a_repeated_value_in_one_list(tmp_path):
    f = _write(tmp_path, '[zip]\n"data.a.cv" = [0.5, 0.5, 1.0]\n"data.b.cv" = [0.5, 1.0, 1.0]\n')
    _, cells = load_sweep(f)
    assert [(c.values["data.a.cv"], c.values["data.b.cv"]) for c in cells] == [(0.5, 0.5), (0.5, 1.0), (1.0, 1.0)]


@pytest.mark.parametrize("body, message", [
    ('[zip]\n"data.a.cv" = [0.5, 1.0]\n"data.b.cv" = [0.6]\n', "one length"),
    ('[zip]\n"data.a.cv" = []\n', "non-empty list"),
    ('[zip]\n"data.a.cv" = [0.5, 1.0]\n[vary]\n"data.a.cv" = [0.7]\n', "also in [vary]"),
    ('zip = 3\n', "must be a table"),
])
def test_zip_errors(tmp_path, body, message):
    with pytest.raises(InputError, match=message.replace("[", r"\[").replace("]", r"\]")):
        load_sweep(_write(tmp_path, body))


def test_cli_unequal_lengths_exit_2_one_line(tmp_path, capsys):
    f = _write(tmp_path, '[zip]\n"data.a.cv" = [0.5, 1.0]\n"data.b.cv" = [0.6, 1.2, 1.8]\n')
    assert main(["sweep", str(f), "--store", str(tmp_path / "s.sqlite")]) == 2
    err = capsys.readouterr().err
    assert "zip" in err and "one length" in err and err.count("\n") == 1
    assert not (tmp_path / "s.sqlite").exists()
