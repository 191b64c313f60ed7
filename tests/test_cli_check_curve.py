"""``simcheck check`` and ``simcheck curve``: the bad-file corpus through the
command line, JSON and text output, overrides, seeds, progress."""

from __future__ import annotations

import io
import json
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
from scipy import stats

from simcheck import CAUTION
from simcheck.cli import main
from simcheck.cli.check import Progress

ROOT = Path(__file__).resolve().parents[1]
BAD = sorted((ROOT / "tests" / "bad_scenarios").glob("*.toml"))
SCEN = ROOT / "scenarios"

CHECK_KEYS = {
    "n", "replicates", "true_value", "coverage", "coverage_mcse", "miss_low", "miss_high",
    "margin_mean", "margin_median", "margin_p90", "assurance", "assurance_mcse", "method",
    "seed", "exact",
}


def cli(capsys, *argv):
    rc = main([str(a) for a in argv])
    out, err = capsys.readouterr()
    return rc, out, err


# --- the bad corpus ----------------------------------------------------------------
@pytest.mark.parametrize("path", BAD, ids=lambda p: p.name)
def test_bad_file_exit_2_one_line(capsys, path):
    rc, out, err = cli(capsys, "check", path, "--n", 50)
    assert rc == 2
    assert out == ""
    assert err.count("\n") == 1 and err.startswith("simcheck: error: ")
    assert str(path) in err and "Traceback" not in err


@pytest.mark.parametrize("name", ["syntax_error.toml"])
def test_bad_file_in_a_real_process(name):
    # the installed entry point and `python -m simcheck` share cli.main; this
    # checks that nothing prints a traceback outside pytest's capture
    path = ROOT / "tests" / "bad_scenarios" / name
    p = subprocess.run([sys.executable, "-m", "simcheck", "check", str(path), "--n", "50"],
                       capture_output=True, text=True, cwd=ROOT, timeout=120)
    assert p.returncode == 2 and p.stdout == ""
    assert p.stderr.count("\n") == 1 and "Traceback" not in p.stderr


def test_missing_file_and_folder(capsys, tmp_path):
    rc, _, err = cli(capsys, "check", tmp_path / "nope.toml", "--n", 10)
    assert rc == 2 and "no such file" in err and err.count("\n") == 1
    rc, _, err = cli(capsys, "curve", tmp_path)
    assert rc == 2 and "is a folder" in err


def test_bad_options_name_the_option(capsys):
    f = SCEN / "rare_event.toml"
    rc, _, err = cli(capsys, "check", f, "--n", 1, "--replicates", 5)
    assert rc == 2 and "--n: must be" in err and "--replicates: must be" in err and err.count("\n") == 1
    rc, _, err = cli(capsys, "check", f, "--n", 50, "--method", "tt")
    assert rc == 2 and "--method: unknown interval 'tt'" in err
    rc, _, err = cli(capsys, "check", f)
    assert rc == 2 and "--n" in err
    rc, _, err = cli(capsys, "curve", f, "--n-values", "10,x")
    assert rc == 2 and "--n-values" in err
    rc, _, err = cli(capsys, "curve", f, "--n-values", "10,20", "--n-min", 5)
    assert rc == 2 and "--n-values" in err
    rc, _, err = cli(capsys, "curve", f, "--n-min", 50, "--n-max", 20)
    assert rc == 2 and "--n-max: must be > n_min (50)" in err


# --- check ---------------------------------------------------------------------
def wald_coverage(n: int, p: float, confidence: float = 0.95) -> float:
    """Exact coverage of the Wald interval by enumerating the binomial law."""
    z = stats.norm.ppf(0.5 + confidence / 2)
    x = np.arange(n + 1)
    ph = x / n
    half = z * np.sqrt(ph * (1 - ph) / n)
    covers = (ph - half <= p) & (p <= ph + half)
    return float(stats.binom.pmf(x, n, p)[covers].sum())


def test_check_json_is_the_contract_object(capsys):
    rc, out, err = cli(capsys, "check", SCEN / "rare_event.toml", "--n", 100, "--json")
    assert rc == 0 and err == ""
    assert out.count("\n") == 1
    d = json.loads(out)
    assert CHECK_KEYS <= set(d)
    assert d["method"] == "wald" and d["n"] == 100 and d["seed"] == 1902 and d["exact"] is True
    # Wald coverage near p = 0.02 falls well short of 0.95 (Brown, Cai & DasGupta 2001,
    # Interval estimation for a binomial proportion, Statistical Science 16:101-133, Sec. 2);
    # the exact value here is computed with scipy's binomial law.
    assert d["coverage"] == pytest.approx(wald_coverage(100, 0.02), abs=1e-12)
    assert d["coverage"] < 0.9
    assert d["true_value"] == pytest.approx(0.02)


def test_check_text(capsys):
    rc, out, err = cli(capsys, "check", SCEN / "two_groups.toml", "--n", 40, "--replicates", 400)
    assert rc == 0 and err == ""
    assert out.startswith("Difference in session length between two app versions (invented example)")
    assert "normal(mean=52, sd=10)" in out and "normal(mean=48, sd=14)" in out
    assert "true value:  4" in out and "welch interval" in out and "seed 5150" in out
    assert "400 replicates" in out
    lines = out.splitlines()
    row = next(ln for ln in lines if ln.strip().startswith("40 "))
    assert row.split()[1] == "60"  # n_b = 1.5 * 40
    assert lines[-1] == CAUTION


def test_check_exact_is_noted(capsys):
    rc, out, _ = cli(capsys, "check", SCEN / "two_shares.toml", "--n", 60)
    assert rc == 0 and "exact (no simulation)" in out and "exact: computed by enumeration" in out
    assert "newcombe interval" in out and "choose one with --method" in out  # the first of three listed


def test_seed_and_replicates_override(capsys):
    f = SCEN / "turnaround.toml"
    runs = [json.loads(cli(capsys, "check", f, "--n", 30, "--replicates", 300, "--seed", s, "--json")[1]) for s in (5, 5, 6)]
    assert runs[0] == runs[1]
    assert runs[0]["replicates"] == 300 and runs[0]["seed"] == 5 and runs[2]["seed"] == 6
    assert runs[0]["margin_mean"] != runs[2]["margin_mean"]


def test_missing_seed_is_drawn_and_reported(capsys, tmp_path):
    text = (SCEN / "rating.toml").read_text().replace("seed = 4417\n", "")
    f = tmp_path / "noseed.toml"
    f.write_text(text)
    rc, out, err = cli(capsys, "check", f, "--n", 25, "--replicates", 200, "--json")
    assert rc == 0 and "no seed given; using seed" in err
    first = json.loads(out)
    seed = first["seed"]
    assert isinstance(seed, int) and f"--seed {seed}" in err
    rc, out, err = cli(capsys, "check", f, "--n", 25, "--replicates", 200, "--seed", seed, "--json")
    assert json.loads(out) == first and err == ""


# --- curve ---------------------------------------------------------------------
def test_curve_json_rows(capsys):
    f = SCEN / "zero_inflated.toml"
    rc, out, _ = cli(capsys, "curve", f, "--n-min", 20, "--n-max", 70, "--step", 25, "--replicates", 300, "--json")
    assert rc == 0
    d = json.loads(out)
    assert list(d) == ["rows"]
    assert [r["n"] for r in d["rows"]] == [20, 45, 70]  # the range's end is always included
    assert all(CHECK_KEYS <= set(r) for r in d["rows"])
    rc, out, _ = cli(capsys, "curve", f, "--n-values", "30,10", "--replicates", 300, "--json")
    assert [r["n"] for r in json.loads(out)["rows"]] == [10, 30]


def test_curve_default_range_and_text(capsys, tmp_path):
    f = tmp_path / "shares.toml"
    f.write_text((SCEN / "two_shares.toml").read_text().replace("n_max = 1000", "n_min = 5\nn_max = 40"))
    rc, out, err = cli(capsys, "curve", f, "--method", "wald")
    assert rc == 0 and err == ""
    rows = [ln for ln in out.splitlines() if ln.strip() and ln.split()[0].isdigit()]
    assert [int(r.split()[0]) for r in rows] == list(range(5, 41))  # the file's n_min .. n_max
    assert "wald interval" in out and out.rstrip().endswith(CAUTION)


def test_run_task_check_list_matches_single_checks():
    from simcheck.scenario import load_scenario
    from simcheck.tasks import run_task

    s = load_scenario(SCEN / "turnaround.toml")
    many = run_task(s, "check", n=[20, 40], replicates=200)
    one = run_task(s, "check", n=40, replicates=200)
    assert [r.n for r in many] == [20, 40]
    assert many[1].to_dict() == one.to_dict()


def test_run_task_search_several_methods():
    from simcheck.results import MethodComparison
    from simcheck.scenario import load_scenario
    from simcheck.tasks import run_task

    s = load_scenario(SCEN / "two_shares.toml")
    res = run_task(s, "search", n_max=600)
    assert isinstance(res, MethodComparison)
    assert [r.method for r in res.by_method] == list(s.methods)
    assert all(r.seed == 8812 for r in res.by_method)  # the file's seed


# --- progress ------------------------------------------------------------------
class FakeTTY(io.StringIO):
    def isatty(self) -> bool:
        return True


def test_progress_plain_lines_when_not_a_terminal():
    s = io.StringIO()
    p = Progress(quiet=0.0, every=0.0, stream=s)
    p(50, 200)
    p(200, 200)
    lines = s.getvalue().splitlines()
    assert lines[0].startswith("simcheck: 25% done (50 of 200)") and len(lines) == 2
    quiet = io.StringIO()
    Progress(stream=quiet)(10, 20)  # fast runs print nothing
    assert quiet.getvalue() == ""


def test_progress_bar_on_a_terminal():
    s = FakeTTY()
    with Progress(delay=0.0, stream=s) as p:
        p(10, 100)
        p(100, 100)
    assert "100" in s.getvalue()


EXAMPLES = sorted(p for p in SCEN.glob("*.toml") if "base" not in p.read_text().split("[", 1)[0])


@pytest.mark.parametrize("path", EXAMPLES, ids=lambda p: p.name)
def test_every_example_runs(capsys, path):
    rc, out, err = cli(capsys, "check", path, "--n", 30, "--replicates", 200, "--json")
    assert rc == 0, err
    d = json.loads(out)
    assert d["n"] == 30 and 0.0 <= d["coverage"] <= 1.0
