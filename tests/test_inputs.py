"""Bad input: crashes, wrong answers and leaks found by a hostile-input run (issue 19).

Every check here failed before the change it guards: an exit code 1 with a
traceback-like line, a silent exit 0 with a meaningless figure, a hang, or an
error message that printed a line of the file it read. The contract checked is
INTERFACE.md's: exit 2 and one line on stderr naming the field and the problem.
"""

from __future__ import annotations

import ast
import math
import os
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

from simcheck.errors import InputError
from simcheck.models import make_model
from simcheck.scenario import load_scenario, scenario_from_dict

from fixtures import minimal, repair_times, run_cli, sweep_table, toml_text, write_sweep_folder, write_toml

ROOT = Path(__file__).resolve().parents[1]
SECRET = "s3cr3t-Passw0rd"


def one_line_exit_2(code: int, out: str, err: str) -> str:
    assert code == 2, err
    assert out == ""
    assert err.count("\n") == 1 and err.startswith("simcheck: error: "), err
    assert "Traceback" not in err
    return err


def check_file(path: Path, *extra) -> str:
    return one_line_exit_2(*run_cli(["check", path, "--n", 10, "--replicates", 100, *extra]))


def small(**changes):
    return minimal(simulation__replicates=100, simulation__seed=3, **changes)


# --- numbers the validator could not hold ----------------------------------------------
def test_integer_beyond_float_range_is_refused_by_field(tmp_path):
    err = check_file(write_toml(tmp_path / "s.toml", small(data__mean=10**400)))
    assert "data.mean" in err and "401 digits" in err and "floating-point" in err


def test_integer_beyond_float_range_in_the_python_api():
    # the Collector's float() raised OverflowError before
    with pytest.raises(InputError, match="target.margin: must be a finite number"):
        scenario_from_dict(minimal(target__margin=10**400))
    with pytest.raises(InputError, match=r"^sd: .*beyond the range"):
        make_model({"model": "normal", "mean": 0, "sd": 10**400})


def test_five_thousand_digit_integer(tmp_path):
    p = tmp_path / "s.toml"
    p.write_text(toml_text(small()).replace("mean = 10.0", "mean = 1" + "0" * 5000), encoding="utf-8")
    err = check_file(p)
    assert "4300 digits" in err


def test_nesting_500_levels_deep(tmp_path):
    p = tmp_path / "s.toml"
    p.write_text("title = " + "[" * 500 + "]" * 500 + "\n" + toml_text(small()), encoding="utf-8")
    assert "nesting too deep" in check_file(p)


def test_nesting_deep_in_a_python_table_is_refused_before_recursion():
    deep: dict = {}
    node = deep
    for _ in range(3000):  # deeper than the interpreter's recursion limit
        node["x"] = {}
        node = node["x"]
    table = minimal()
    table["data"]["inner"] = deep  # set directly: a deep copy would itself recurse too far
    with pytest.raises(InputError, match="nested more than 32 levels deep"):
        scenario_from_dict(table)


# --- parameters that passed validation but broke the draw ---------------------------------
def test_beta_with_tiny_shapes_has_finite_moments():
    # a = b -> 0: the beta law tends to Bernoulli(1/2) on {0, 1}, mean 1/2, SD 1/2
    # (from memory: the limit of Beta(a, a) as a -> 0); the SD property divided 0 by 0 before.
    m = make_model({"model": "beta", "a": 1e-300, "b": 1e-300})
    assert m.mean == 0.5 and m.sd == pytest.approx(0.5) and m.skewness == 0.0
    x = m.draw(np.random.default_rng(1), (4, 1000))
    assert np.isfinite(x).all()


@pytest.mark.parametrize("data, field", [
    ({"model": "categorical", "values": [0.0, 5.0], "probs": [1e-300, 1.0]}, "data.probs[0]"),
    ({"model": "negative-binomial", "mean": 5.0, "dispersion": 1e-300}, "data.dispersion"),
    ({"model": "negative-binomial", "mean": 1e15, "dispersion": 1e-6}, "data.dispersion"),
    ({"model": "bernoulli", "p": 1e-20}, "data.p"),
    ({"model": "mixture", "weights": [1e-300, 1.0],
      "components": [{"model": "normal", "mean": 0, "sd": 1}, {"model": "normal", "mean": 5, "sd": 1}]}, "data.weights[0]"),
])
def test_parameters_that_break_the_draw_are_refused(tmp_path, data, field):
    err = check_file(write_toml(tmp_path / "s.toml", small(data=data)))
    assert f"{field}:" in err


def test_negative_binomial_limit_matches_numpy():
    # just inside the limit numpy draws; the bound is numpy's POISSON_LAM_MAX
    m = make_model({"model": "negative-binomial", "mean": 9e14, "dispersion": 1e-6})
    x = m.draw(np.random.default_rng(2), (2, 100))
    assert np.isfinite(x).all()


# --- models whose moments or draws overflow or underflow -------------------------------------
@pytest.mark.parametrize("data, field, says", [
    ({"model": "lognormal", "meanlog": 700.0, "sdlog": 1.0}, "data.sdlog", "overflow"),
    ({"model": "lognormal", "meanlog": 300.0, "sdlog": 6.0}, "data.sdlog", "upper tail"),
    ({"model": "gamma", "mean": 1e308, "cv": 1.0}, "data.cv", "overflow"),
    ({"model": "beta", "a": 2.0, "b": 3.0, "lower": -1e308, "upper": 1e308}, "data.upper", "must lie within"),
    ({"model": "uniform", "lower": -1e308, "upper": 1e308}, "data.lower", "must lie within"),
    ({"model": "normal", "mean": 0.0, "sd": 1e200}, "data.sd", "overflow"),
    ({"model": "exponential", "mean": 1e300}, "data.mean", "overflow"),
    ({"model": "student-t", "df": 5.0, "mean": 0.0, "scale": 1e300}, "data.scale", "overflow"),
    ({"model": "categorical", "values": [0.0, 1e300], "probs": [0.5, 0.5]}, "data.values[1]", "must lie within"),
    ({"model": "lognormal", "mean": 1e-300, "cv": 1.0}, "data.cv", "underflows"),
    ({"model": "uniform", "lower": 0.0, "upper": 5e-324}, "data.upper", "underflows"),
    ({"model": "uniform", "lower": 1e6, "upper": 1e6 + 1e-7}, "data.upper", "resolution"),
])
def test_overflow_and_underflow_are_refused(tmp_path, data, field, says):
    # before: exit 0 with NaN intervals counted as meeting the margin, or a silent underflow
    err = check_file(write_toml(tmp_path / "s.toml", small(data=data)))
    assert f"{field}:" in err and says in err


def test_large_but_representable_models_still_run(tmp_path):
    # 1e100-scale values: squares 1e200, sums over n stay finite -> accepted, finite figures
    code, out, err = run_cli(["check", write_toml(tmp_path / "s.toml", small(data__mean=1e100, data__sd=1e99, target__margin=1e99)),
                              "--n", 20, "--replicates", 200, "--json"])
    assert code == 0, err
    import json

    d = json.loads(out)
    assert 0 <= d["coverage"] <= 1 and math.isfinite(d["margin_mean"])


# --- the closed form -------------------------------------------------------------------
@pytest.mark.parametrize("extra", [[], ["--multiplier", "t"], ["--icc", "0.1", "--cluster-size", "5"]])
def test_formula_with_a_huge_margin_gives_at_least_one(extra):
    import json

    code, out, err = run_cli(["formula", "--estimand", "mean", "--margin", "1e300", "--sd", "1", "--json", *extra])
    assert code == 0, err
    d = json.loads(out)
    assert d["n"] >= 1 and d["n_total"] >= 1
    if d["clusters"] is not None:
        assert d["clusters"] >= 1
    code, out, _ = run_cli(["formula", "--estimand", "mean-diff", "--margin", "1e300", "--sd", "1", "--json"])
    d = json.loads(out)
    assert d["n"] >= 1 and d["n_b"] >= 1


# --- files that are not what they seem ---------------------------------------------------------
def test_file_name_over_255_characters(tmp_path):
    err = check_file(tmp_path / ("a" * 300 + ".toml"))
    assert "at most 255" in err


def test_not_utf8_and_byte_order_mark(tmp_path):
    p = tmp_path / "latin.toml"
    p.write_bytes(toml_text(small(title="Caf\u00e9 (invented example)")).encode("latin-1"))
    assert "not UTF-8" in check_file(p)
    p = tmp_path / "bom.toml"
    p.write_bytes(b"\xef\xbb\xbf" + toml_text(small()).encode())
    assert "byte-order mark" in check_file(p)


def test_sweep_and_base_not_utf8_or_with_bom(tmp_path):
    sweep = write_sweep_folder(tmp_path, repair_times(simulation__replicates=100), sweep_table(n=[10]))
    store = tmp_path / "s.sqlite"
    (tmp_path / "base.toml").write_bytes(b"\xef\xbb\xbf" + toml_text(repair_times()).encode())
    err = one_line_exit_2(*run_cli(["sweep", sweep, "--store", store]))
    assert "base" in err and "byte-order mark" in err
    (tmp_path / "base.toml").write_bytes(toml_text(repair_times(title="\u00e9")).encode("latin-1"))
    assert "not UTF-8" in one_line_exit_2(*run_cli(["sweep", sweep, "--store", store]))
    sweep.write_bytes(b'title = "\xff"\n')
    assert "not UTF-8" in one_line_exit_2(*run_cli(["sweep", sweep, "--store", store]))
    assert not store.exists()


@pytest.mark.skipif(not hasattr(os, "mkfifo"), reason="needs FIFOs")
def test_dev_zero_and_a_fifo_do_not_hang(tmp_path):
    fifo = tmp_path / "fifo.toml"
    os.mkfifo(fifo)
    for path in ("/dev/zero", str(fifo)):
        # a real process: a hang or a memory blow-up would hit the timeout
        p = subprocess.run([sys.executable, "-m", "simcheck", "check", path, "--n", "10"],
                           capture_output=True, text=True, cwd=ROOT, timeout=60,
                           env={**os.environ, "PYTHONPATH": str(ROOT)})
        assert p.returncode == 2 and p.stderr.count("\n") == 1, p.stderr
        assert "not a regular file" in p.stderr
    # report sniffs for a store by reading the first bytes: refused before that (in process)
    err = one_line_exit_2(*run_cli(["report", fifo, "--out", tmp_path / "r"]))
    assert "not a regular file" in err
    # a data file that is a FIFO
    s = write_toml(tmp_path / "s.toml", small(data={"model": "empirical", "file": "fifo.toml", "column": "x"}))
    assert "not a regular file" in check_file(s)


def test_scenario_larger_than_the_cap(tmp_path):
    p = tmp_path / "big.toml"
    p.write_text(toml_text(small()) + "# " + "x" * (1 << 20) + "\n", encoding="utf-8")
    assert "1 MiB limit" in check_file(p)


# --- data files: nan, ragged rows, no echo ----------------------------------------------------
def _pilot_scenario(folder: Path, csv_text: str, kind: str) -> Path:
    (folder / "data.csv").write_text(csv_text, encoding="utf-8")
    if kind == "empirical":
        table = small(data={"model": "empirical", "file": "data.csv", "column": "hours"})
    else:
        table = small(population={"file": "data.csv", "column": "hours"}, simulation__n_max=5)
    return write_toml(folder / "s.toml", table)


@pytest.mark.parametrize("kind, field", [("empirical", "data.column"), ("population", "population.file")])
def test_text_nan_is_refused_naming_line_and_column(tmp_path, kind, field):
    # before: the empirical model dropped "nan" silently while a population file refused it
    err = check_file(_pilot_scenario(tmp_path, "site,hours\na,1.5\nb,nan\nc,4.0\nd,2.0\ne,3.0\nf,6.0\n", kind))
    assert f"{field}:" in err and "line 3, column 'hours'" in err and "not a finite number" in err


@pytest.mark.parametrize("kind", ["empirical", "population"])
def test_ragged_rows_are_refused_naming_the_line(tmp_path, kind):
    err = check_file(_pilot_scenario(tmp_path, "site,hours\na,1.5\nb,2.5,extra\nc,4.0\nd,2.0\ne,3.0\n", kind))
    assert "line 3 has 3 fields, the header has 2" in err


@pytest.mark.parametrize("kind", ["empirical", "population"])
def test_errors_never_echo_a_data_file(tmp_path, kind):
    err = check_file(_pilot_scenario(tmp_path, f"site,hours\na,1.5\nb,{SECRET}\nc,4.0\nd,2.0\n", kind))
    assert SECRET not in err and "line 3" in err
    # a header that is not ours is not listed either (only a close match to the asked column)
    err = check_file(_pilot_scenario(tmp_path, f"{SECRET},x\n1,2\n3,4\n", kind))
    assert SECRET not in err and "no column 'hours'" in err


def test_toml_errors_never_echo_the_file(tmp_path):
    p = tmp_path / "s.toml"
    p.write_text(f'{SECRET} = 1\n{SECRET} = 2\n', encoding="utf-8")
    err = check_file(p)
    assert SECRET not in err and "line 2" in err
    p.write_text(f'title = "x"\n\x01{SECRET}\n', encoding="utf-8")
    err = check_file(p)
    assert SECRET not in err and "line 2" in err


# --- paths that leave the scenario's folder ---------------------------------------------------
def _outside_layout(tmp_path: Path) -> tuple[Path, Path]:
    outside = tmp_path / "private"
    outside.mkdir()
    (outside / "pilot.csv").write_text("hours\n1.5\n2.5\n4.0\n7.0\n", encoding="utf-8")
    folder = tmp_path / "plan"
    folder.mkdir()
    return folder, outside / "pilot.csv"


@pytest.mark.parametrize("how", ["absolute", "dotdot", "symlink"])
@pytest.mark.parametrize("kind", ["empirical", "population"])
def test_paths_outside_the_folder_are_refused_unless_allowed(tmp_path, how, kind):
    folder, csv = _outside_layout(tmp_path)
    if how == "absolute":
        name = str(csv)
    elif how == "dotdot":
        name = "../private/pilot.csv"
    else:
        (folder / "link.csv").symlink_to(csv)
        name = "link.csv"
    if kind == "empirical":
        table = small(data={"model": "empirical", "file": name, "column": "hours"})
        field = "data.file"
    else:
        table = small(population={"file": name, "column": "hours"}, simulation__n_max=3)
        field = "population.file"
    s = write_toml(folder / "s.toml", table)
    err = check_file(s)
    assert f"{field}:" in err and "--allow-outside-files" in err
    code, out, err = run_cli(["check", s, "--n", 3, "--replicates", 100, "--allow-outside-files", "--json"])
    assert code == 0, err
    with pytest.raises(InputError):
        load_scenario(s)
    assert load_scenario(s, allow_outside_files=True).design is not None


def test_files_inside_the_folder_need_no_option(tmp_path):
    folder, csv = _outside_layout(tmp_path)
    (folder / "data").mkdir()
    (folder / "data" / "pilot.csv").write_text(csv.read_text())
    s = write_toml(folder / "s.toml", small(data={"model": "empirical", "file": "data/pilot.csv", "column": "hours"}))
    assert load_scenario(s).design.model.mean == pytest.approx(3.75)
    # '..' that comes back inside is fine
    s = write_toml(folder / "s2.toml", small(data={"model": "empirical", "file": "data/../data/pilot.csv", "column": "hours"}))
    assert load_scenario(s).design.model.mean == pytest.approx(3.75)


def test_sweep_base_outside_the_folder(tmp_path):
    write_toml(tmp_path / "base.toml", repair_times(simulation__replicates=100))
    sub = tmp_path / "sweeps"
    sub.mkdir()
    sweep = write_toml(sub / "sweep.toml", sweep_table(base="../base.toml", n=[10], vary={"data.cv": [0.5, 1.0]}))
    store = sub / "s.sqlite"
    err = one_line_exit_2(*run_cli(["sweep", sweep, "--store", store]))
    assert "base:" in err and "--allow-outside-files" in err and not store.exists()
    code, out, err = run_cli(["sweep", sweep, "--store", store, "--allow-outside-files", "--json"])
    assert code == 0, err


# --- resource caps ------------------------------------------------------------------------------
def test_exact_two_proportion_enumeration_cap(tmp_path):
    table = {
        "target": {"estimand": "proportion-diff", "margin": 0.001},
        "data": {"a": {"model": "bernoulli", "p": 0.5}, "b": {"model": "bernoulli", "p": 0.4}},
        "method": {"interval": "newcombe"},
        "simulation": {"replicates": 100, "seed": 1, "n_max": 1_000_000},
    }
    s = write_toml(tmp_path / "s.toml", table)
    err = one_line_exit_2(*run_cli(["check", s, "--n", 300_000]))
    assert "n:" in err and "over the limit of 5e+06" in err
    err = one_line_exit_2(*run_cli(["curve", s, "--n-values", "1000,400000"]))
    assert "over the limit" in err


def test_curve_of_a_million_n_values_is_capped(tmp_path):
    s = write_toml(tmp_path / "s.toml", small())
    err = one_line_exit_2(*run_cli(["curve", s, "--n-min", 2, "--n-max", 1_000_000]))
    assert "over the limit of 20000 per curve" in err


# --- issue 13: scenario.validate split into its sections ------------------------------------------
def test_no_function_in_the_scenario_module_is_longer_than_a_screen():
    tree = ast.parse((ROOT / "simcheck" / "scenario.py").read_text())
    long = [(f.name, f.end_lineno - f.lineno + 1) for f in ast.walk(tree)
            if isinstance(f, (ast.FunctionDef, ast.AsyncFunctionDef)) and f.end_lineno - f.lineno + 1 > 80]
    assert long == []


def test_strata_data_files_follow_the_same_rule(tmp_path):
    folder, csv = _outside_layout(tmp_path)
    table = small(data=None, strata=[
        {"name": "north", "size": 400, "data": {"model": "empirical", "file": "../private/pilot.csv", "column": "hours"}},
        {"name": "south", "size": 600, "data": {"model": "normal", "mean": 5.0, "sd": 2.0}},
    ])
    s = write_toml(folder / "s.toml", table)
    with pytest.raises(InputError, match=r"strata\[0\]\.data\.file: .*leaves the scenario's folder"):
        load_scenario(s)
    assert load_scenario(s, allow_outside_files=True).design.strata is not None
