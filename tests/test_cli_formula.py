"""The ``simcheck formula`` command: output, JSON contract, one-line errors."""

from __future__ import annotations

import json
import math
import os
import subprocess
import sys
from pathlib import Path

import pytest
from scipy import stats

from simcheck.cli import build_parser, main

ROOT = Path(__file__).resolve().parents[1]
CONTRACT_KEYS = {"n", "n_b", "n_total", "n_unrounded", "multiplier", "design_effect", "clusters"}


def _run(*args: str) -> subprocess.CompletedProcess:
    env = dict(os.environ)
    env["PYTHONPATH"] = str(ROOT) + os.pathsep + env.get("PYTHONPATH", "")
    env.pop("SIMCHECK_DEBUG", None)
    return subprocess.run(
        [sys.executable, "-m", "simcheck", "formula", *args],
        cwd=ROOT, env=env, capture_output=True, text=True, timeout=120,
    )


def test_subprocess_conservative_proportion_385():
    # common practice: p = 0.5, margin 0.05, 95% -> 385
    text = _run("--estimand", "proportion", "--margin", "0.05")
    assert text.returncode == 0, text.stderr
    assert "385" in text.stdout
    assert "p = 0.5 assumed (most conservative)" in text.stdout
    assert "n0 = z^2 p (1 - p) / B^2" in text.stdout
    js = _run("--estimand", "proportion", "--margin", "0.05", "--json")
    assert js.returncode == 0, js.stderr
    obj = json.loads(js.stdout)  # the whole stdout is one JSON object
    assert isinstance(obj, dict) and obj["n"] == 385
    assert js.stdout.count("\n") == 1


def test_subprocess_bad_input_one_line_exit_2():
    r = _run("--estimand", "proportion", "--margin", "0")
    assert r.returncode == 2
    assert r.stdout == ""
    assert len(r.stderr.strip().splitlines()) == 1 and "--margin" in r.stderr
    assert "Traceback" not in r.stderr


def test_help_lists_every_option_with_help():
    parser = build_parser()
    sub = next(a for a in parser._actions if a.__class__.__name__ == "_SubParsersAction")
    p = sub.choices["formula"]
    for action in p._actions:
        assert action.help, action.option_strings
    for opt in ("--estimand", "--margin", "--confidence", "--sd", "--sd-b", "--p", "--p-b", "--multiplier",
                "--population-size", "--design-effect", "--icc", "--cluster-size", "--cluster-size-cv",
                "--ratio", "--json"):
        assert opt in p.format_help()


def _json(capsys, *args):
    code = main(["formula", *args, "--json"])
    out, err = capsys.readouterr()
    assert code == 0, err
    lines = out.strip().splitlines()
    assert len(lines) == 1
    obj = json.loads(lines[0])
    assert isinstance(obj, dict)
    assert CONTRACT_KEYS <= obj.keys()
    return obj


def test_json_one_sample_keys(capsys):
    obj = _json(capsys, "--estimand", "mean", "--margin", "2", "--sd", "15", "--multiplier", "t",
                "--population-size", "1000")
    tq = stats.t.ppf(0.975, obj["n"] - 1)
    # scipy.stats.t: n meets the margin with the FPC factor, n - 1 does not
    half = lambda n: stats.t.ppf(0.975, n - 1) * 15 / math.sqrt(n) * math.sqrt((1000 - n) / 999)
    assert half(obj["n"]) <= 2 < half(obj["n"] - 1)
    assert obj["multiplier"] == pytest.approx(tq, rel=1e-12)
    assert obj["n_b"] is None and obj["n_total"] == obj["n"]
    assert obj["clusters"] is None and obj["design_effect"] == 1.0
    assert obj["iterations"] >= 1 and obj["population_size"] == 1000
    assert obj["n"] == math.ceil(obj["n_unrounded"] - 1e-9)


def test_json_two_sample_clustered(capsys):
    obj = _json(capsys, "--estimand", "proportion-diff", "--margin", "0.06", "--p", "0.4", "--p-b", "0.25",
                "--ratio", "2", "--icc", "0.03", "--cluster-size", "12", "--cluster-size-cv", "0.4")
    deff = 1 + ((0.4**2 + 1) * 12 - 1) * 0.03  # Eldridge, Ashby & Kerry (2006)
    z = stats.norm.ppf(0.975)
    exact = z**2 * deff * (0.24 + 0.1875 / 2) / 0.06**2
    assert obj["design_effect"] == pytest.approx(deff, rel=1e-12)
    assert obj["n_unrounded"] == pytest.approx(exact, rel=1e-12)
    assert obj["n"] == math.ceil(exact)
    assert obj["n_b"] == math.ceil(2 * obj["n"])
    assert obj["n_total"] == obj["n"] + obj["n_b"]
    assert obj["clusters"] == math.ceil(obj["n"] / 12)
    assert obj["multiplier"] == pytest.approx(z, rel=1e-12)


def test_text_two_sample_shows_assumptions(capsys):
    code = main(["formula", "--estimand", "mean-diff", "--margin", "1", "--sd", "4"])
    out, err = capsys.readouterr()
    assert code == 0 and err == ""
    assert "sd_b = sd_a = 4 assumed" in out
    assert "n_b" in out and "n total" in out


BAD = [
    (["--estimand", "proportion", "--margin", "0"], "--margin"),
    (["--estimand", "proportion", "--margin", "-0.1"], "--margin"),
    (["--estimand", "proportion", "--margin", "nan"], "--margin"),
    (["--estimand", "proportion", "--margin", "inf"], "--margin"),
    (["--estimand", "proportion"], "--margin"),
    (["--estimand", "proportion", "--margin", "abc"], "--margin"),
    (["--margin", "0.05"], "--estimand"),
    (["--estimand", "mode", "--margin", "0.05"], "--estimand"),
    (["--estimand", "proportion", "--margin", "0.05", "--confidence", "95"], "--confidence"),
    (["--estimand", "proportion", "--margin", "0.05", "--p", "0"], "--p"),
    (["--estimand", "proportion", "--margin", "0.05", "--p", "1"], "--p"),
    (["--estimand", "mean", "--margin", "1"], "--sd"),
    (["--estimand", "mean", "--margin", "1", "--sd", "-3"], "--sd"),
    (["--estimand", "mean", "--margin", "1", "--sd", "2", "--p", "0.5"], "--p"),
    (["--estimand", "proportion", "--margin", "0.05", "--sd", "2"], "--sd"),
    (["--estimand", "proportion", "--margin", "0.05", "--population-size", "1"], "--population-size"),
    (["--estimand", "proportion", "--margin", "0.05", "--population-size", "12.5"], "--population-size"),
    (["--estimand", "proportion", "--margin", "0.05", "--icc", "0.1"], "--icc"),
    (["--estimand", "proportion", "--margin", "0.05", "--icc", "1", "--cluster-size", "5"], "--icc"),
    (["--estimand", "proportion", "--margin", "0.05", "--design-effect", "2", "--icc", "0.1",
      "--cluster-size", "5"], "--design-effect"),
    (["--estimand", "proportion", "--margin", "0.05", "--cluster-size", "0"], "--cluster-size"),
    (["--estimand", "proportion-diff", "--margin", "0.05", "--population-size", "900"], "--population-size"),
    (["--estimand", "proportion", "--margin", "0.05", "--ratio", "2"], "--ratio"),
    (["--estimand", "mean-diff", "--margin", "1", "--sd", "1", "--ratio", "0"], "--ratio"),
    (["--estimand", "proportion", "--margin", "0.05", "--multiplier", "t"], "--multiplier"),
    (["--estimand", "proportion", "--margin", "0.05", "--multiplier", "q"], "--multiplier"),
    (["--estimand", "mean", "--margin", "1", "--sd", "1", "--design-effect", "-1"], "--design-effect"),
]


@pytest.mark.parametrize("args,option", BAD)
def test_bad_input_exit_2_one_line(capsys, args, option):
    code = main(["formula", *args])
    out, err = capsys.readouterr()
    assert code == 2
    assert out == ""
    lines = err.strip().splitlines()
    assert len(lines) == 1, err
    assert option in lines[0]
    assert "Traceback" not in err


def test_bad_input_with_json_keeps_stdout_empty(capsys):
    code = main(["formula", "--estimand", "mean", "--margin", "1", "--json"])
    out, err = capsys.readouterr()
    assert code == 2 and out == "" and "--sd" in err
