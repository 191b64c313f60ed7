"""The top-level Python API, used as a notebook would use it.

Checks against the outside world are computed inside the tests: the Wilson
interval's exact coverage by binomial enumeration with scipy (Wilson 1927,
JASA 22:209-212; Brown, Cai & DasGupta 2001, Statistical Science 16:101-133,
section 4.1.1), and the moments of a discrete law from its support points.
"""

from __future__ import annotations

import json
import re
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from scipy import stats

import simcheck as sc
from simcheck.errors import InputError


ROOT = Path(__file__).resolve().parents[1]


def wilson_coverage(n: int, p: float, confidence: float) -> float:
    """Exact coverage of the Wilson score interval, by enumeration of x = 0..n."""
    z = stats.norm.ppf(0.5 + confidence / 2)
    x = np.arange(n + 1)
    ph = x / n
    centre = (x + z * z / 2) / (n + z * z)
    half = z * np.sqrt(n) / (n + z * z) * np.sqrt(ph * (1 - ph) + z * z / (4 * n))
    covered = (centre - half <= p) & (p <= centre + half)
    return float(stats.binom.pmf(x, n, p)[covered].sum())


def proportion_scenario(**more):
    return sc.scenario(estimand="proportion", margin=0.1, interval="wilson",
                       data={"model": "bernoulli", "p": 0.2}, **more)


# --------------------------------------------------------------------------
# the notebook: build, check, search, sweep, report, all from Python
# --------------------------------------------------------------------------
def test_notebook_session_builds_checks_searches_sweeps_and_reports(tmp_path):
    # pilot data held in memory (invented), not in a file
    pilot = pd.Series(np.random.default_rng(11).gamma(2.0, 3.0, size=80), name="minutes")
    s = sc.scenario(estimand="mean", margin=1.5, interval=["t", "johnson-t"],
                    data={"model": "empirical", "values": pilot}, replicates=400, n_max=300,
                    title="Call length (invented)")
    assert s.design.true_value == pytest.approx(pilot.mean(), rel=1e-12)

    r = sc.check(s, 40, rng=5)
    assert (r.n, r.replicates, r.seed, r.method) == (40, 400, 5, "t")
    assert 0.0 < r.coverage <= 1.0
    frame = r.to_frame()
    assert isinstance(frame, pd.DataFrame) and frame.loc[0, "coverage"] == r.coverage

    # proportion: the exact path must equal the enumeration written above
    p = proportion_scenario(n_max=300, coverage_tolerance=0.02)
    c = sc.check(p, 57, rng=1)
    assert c.exact and c.coverage == pytest.approx(wilson_coverage(57, 0.2, 0.95), abs=1e-12)

    found = sc.search(p, rng=2)
    assert found.reached and found.exact
    # the n found meets the coverage target (confidence - tolerance) by the enumeration
    assert wilson_coverage(found.n, 0.2, 0.95) >= 0.95 - 0.02 - 1e-12
    assert found.coverage == pytest.approx(wilson_coverage(found.n, 0.2, 0.95), abs=1e-12)

    comp = sc.compare(s, rng=3)
    assert [x.method for x in comp.by_method] == ["t", "johnson-t"]

    run = sc.sweep(p, {"data.p": [0.1, 0.3]}, store=tmp_path / "cells.sqlite", task="check", n=[60], rng=7)
    assert run.summary["cells_total"] == 2 and run.summary["failed"] == 0
    table = run.to_frame()
    for q in (0.1, 0.3):
        row = table[table["data.p"] == q].iloc[0]
        assert row["coverage"] == pytest.approx(wilson_coverage(60, q, 0.95), abs=1e-12)
    again = sc.sweep(p, {"data.p": [0.1, 0.3]}, store=tmp_path / "cells.sqlite", task="check", n=[60], rng=7)
    assert again.summary["run_now"] == 0 and again.summary["done_before"] == 2  # resumed, nothing re-run

    rep = sc.report(p, tmp_path / "report", rng=4)
    assert rep.files.html.is_file() and rep.files.table.is_file()
    summary = json.loads(rep.files.summary.read_text())
    assert summary["seed"] == 4
    sweep_rep = sc.report(run, tmp_path / "sweep-report")
    assert sweep_rep.files.html.is_file()


# --------------------------------------------------------------------------
# one seed convention
# --------------------------------------------------------------------------
def test_rng_forms_and_the_seed_recorded():
    s = sc.scenario(estimand="mean", margin=1.0, interval="t", replicates=200,
                    data={"model": "gamma", "mean": 5, "cv": 1.0})
    a = sc.check(s, 20, rng=123)
    b = sc.check(s, 20, rng=np.random.SeedSequence(123))
    assert a.seed == b.seed == 123 and a.coverage == b.coverage
    g = sc.check(s, 20, rng=np.random.default_rng(9))
    again = sc.check(s, 20, rng=g.seed)
    assert isinstance(g.seed, int) and again.coverage == g.coverage and again.margin_mean == g.margin_mean
    fresh = sc.check(s, 20)  # rng=None: a fresh seed, recorded and repeatable
    assert isinstance(fresh.seed, int)
    assert sc.check(s, 20, rng=fresh.seed).coverage == fresh.coverage
    seeded = sc.scenario(estimand="mean", margin=1.0, interval="t", replicates=200, seed=77,
                         data={"model": "gamma", "mean": 5, "cv": 1.0})
    assert sc.check(seeded, 20).seed == 77


def test_bad_rng_and_progress_are_refused_by_name():
    s = proportion_scenario()
    for bad in (True, -1, 2**63, 1.5, "7"):
        with pytest.raises(InputError, match=r"^rng: "):
            sc.check(s, 20, rng=bad)
    with pytest.raises(InputError, match=r"^progress: "):
        sc.check(s, 20, rng=1, progress="yes")


def test_progress_callback_receives_done_and_total():
    s = sc.scenario(estimand="mean", margin=1.0, interval="t", replicates=5000,
                    data={"model": "lognormal", "mean": 5, "cv": 1.0})
    calls = []
    sc.check(s, 30, rng=1, progress=lambda done, total: calls.append((done, total)))
    assert calls and calls[-1][0] == calls[-1][1] == 5000
    assert all(0 < d <= t for d, t in calls)


# --------------------------------------------------------------------------
# validation as on the command line, errors named by the Python argument
# --------------------------------------------------------------------------
def test_whole_numbers_and_limits_are_refused_not_truncated():
    s = proportion_scenario()
    with pytest.raises(InputError, match=r"^n: must be a whole number, got 10.5$"):
        sc.check(s, 10.5)
    with pytest.raises(InputError, match=r"^replicates: must be in \[100, 100000000\], got 5$"):
        sc.check(s, 10, replicates=5)
    with pytest.raises(InputError, match=r"^replicates: must be in \[100, 100000000\], got 5$"):
        proportion_scenario(replicates=5)
    with pytest.raises(InputError, match=r"^n_max: must be a whole number"):
        proportion_scenario(n_max=300.5)


def test_every_problem_at_once_named_by_keyword():
    with pytest.raises(InputError) as e:
        sc.scenario(estimand="mean-diff", margin=-1, interval="welch",
                    data_a={"model": "normal", "mean": 1, "sd": 1}, data_b={"model": "normal", "mean": 1, "sdd": 2})
    fields = {p.field for p in e.value.problems}
    assert "margin" in fields and "data_b.sdd" in fields and "data_b.sd" in fields
    with pytest.raises(InputError, match=r"^margn: unknown keyword .*did you mean 'margin'"):
        sc.scenario(estimand="mean", margn=1.0)
    with pytest.raises(InputError, match=r"^methods\[1\]: unknown interval 'wilsn'"):
        sc.compare(proportion_scenario(), ["wald", "wilsn"])


# --------------------------------------------------------------------------
# data in from Python
# --------------------------------------------------------------------------
def test_population_from_an_array_or_series():
    values = np.random.default_rng(2).lognormal(3, 1, size=500)
    for given in (values, pd.Series(values), list(values)):
        s = sc.scenario(estimand="mean", margin=5.0, interval="t", replicates=300,
                        data={"model": "normal", "mean": 0, "sd": 1}, population={"values": given})
        r = sc.check(s, 40, rng=1)
        # the truth is the population mean, not the data model's
        assert r.true_value == pytest.approx(values.mean(), rel=1e-12)
        assert s.n_max == 500
    with pytest.raises(InputError, match=r"^population\.size: must match the 500 values"):
        sc.scenario(estimand="mean", margin=5.0, interval="t", data={"model": "normal", "mean": 0, "sd": 1},
                    population={"values": values, "size": 400})
    with pytest.raises(InputError, match=r"^population\.values\[1\]: must be a finite number"):
        sc.scenario(estimand="mean", margin=5.0, interval="t", data={"model": "normal", "mean": 0, "sd": 1},
                    population={"values": [1.0, np.nan, 3.0]})


def test_empirical_values_refuse_bad_data_by_name():
    with pytest.raises(InputError, match=r"^data\.values: .*one value only"):
        sc.scenario(estimand="mean", margin=1.0, interval="t", data={"model": "empirical", "values": [2.0, 2.0]})
    with pytest.raises(InputError, match=r"^data\.values: .*non-numeric values, e\.g\. 'x' in data row 2"):
        sc.scenario(estimand="mean", margin=1.0, interval="t", data={"model": "empirical", "values": [2.0, "x"]})


def test_from_scipy_accepts_rv_discrete_values(tmp_path):
    xk, pk = np.array([0.0, 1.0, 2.0, 5.0]), np.array([0.1, 0.4, 0.3, 0.2])
    law = stats.rv_discrete(values=(xk, pk))
    for given in (law, law()):
        m = sc.models.from_scipy(given)
        mean = float(np.sum(xk * pk))
        sd = float(np.sqrt(np.sum(pk * (xk - mean) ** 2)))
        assert m.mean == pytest.approx(mean) and m.sd == pytest.approx(sd) and m.discrete
        assert "rv_discrete" in m.describe()
    draws = m.draw(np.random.default_rng(0), (1, 40_000)).ravel()
    assert set(np.unique(draws)) <= set(xk)
    assert abs(draws.mean() - mean) < 4 * sd / np.sqrt(draws.size)  # within 4 MCSE
    s = sc.scenario(estimand="mean", margin=0.5, interval="t", replicates=300, data=law)
    assert s.design.true_value == pytest.approx(mean)
    assert sc.check(s, 30, rng=2).true_value == pytest.approx(mean)
    with pytest.raises(InputError, match=r"^scenario: a sweep writes its base scenario as TOML"):
        sc.sweep(s, {"margin": [0.5, 1.0]}, store=tmp_path / "x.sqlite", rng=1)
    assert not (tmp_path / "x.sqlite").exists()


# --------------------------------------------------------------------------
# notebook manners
# --------------------------------------------------------------------------
def test_reprs_are_short_and_html_is_compact():
    s = sc.scenario(estimand="mean", margin=1.0, interval="t", replicates=200, n_max=2001,
                    data={"model": "lognormal", "mean": 5, "cv": 1.0})
    c = sc.curve(s, rng=1)
    assert len(c.rows) == 2000
    assert len(repr(c)) < 300 and "2000 rows" in repr(c)
    html = c._repr_html_()
    assert "<table" in html and "data:image/png;base64," in html
    assert len(html) < 200_000
    assert html.count("<tr>") < 30  # 10 rows shown, not 2,000
    r = sc.check(s, 40, rng=1)
    assert len(repr(r)) < 400 and "margin_values" not in repr(r)
    assert "<table" in r._repr_html_()
    found = sc.search(proportion_scenario(n_max=300), rng=2)
    assert len(repr(found)) < 400 and "<table" in found._repr_html_()
    comp = sc.compare(proportion_scenario(n_max=300), ["wald", "wilson"], rng=2)
    assert "wilson" in repr(comp) and "<table" in comp._repr_html_()


def test_figures_say_a_log_axis():
    from matplotlib.figure import Figure

    from simcheck.notebook import label_scales

    fig = Figure()
    ax = fig.add_subplot()
    ax.plot([10, 1000], [0.9, 0.95])
    ax.set_xscale("log")
    ax.set_xlabel("n")
    ax.set_ylabel("coverage")
    label_scales(fig)
    assert ax.get_xlabel() == "n (log scale)" and ax.get_ylabel() == "coverage"


def test_report_figures_say_a_log_n_axis():
    from simcheck.report.figures import coverage_figure

    s = sc.scenario(estimand="mean", margin=1.0, interval="t", replicates=200,
                    data={"model": "normal", "mean": 0, "sd": 1})
    wide = sc.curve(s, n=[10, 100, 1000], rng=1)
    narrow = sc.curve(s, n=[10, 20, 40], rng=1)
    assert coverage_figure(wide, confidence=0.95).axes[0].get_xlabel().endswith("(log scale)")
    assert "log" not in coverage_figure(narrow, confidence=0.95).axes[0].get_xlabel()


def test_tables_are_dataframes():
    m = sc.methods()
    assert isinstance(m, pd.DataFrame) and {"estimand", "name", "kind", "references"} <= set(m.columns)
    assert set(sc.methods("proportion")["name"]) >= {"wald", "wilson", "clopper-pearson"}
    with pytest.raises(InputError, match=r"^estimand: unknown estimand 'means'"):
        sc.methods("means")
    assert isinstance(sc.examples(), pd.DataFrame)


# --------------------------------------------------------------------------
# examples and package layout
# --------------------------------------------------------------------------
def test_every_repository_scenario_is_a_packaged_example(tmp_path):
    packaged = {e.file for e in sc.api.example_list()}
    assert packaged == {p.name for p in (ROOT / "scenarios").glob("*.toml")}
    s = sc.example("turnaround")
    assert s.design.estimand == "mean"
    with pytest.raises(InputError, match=r"did you mean 'turnaround'"):
        sc.example("turnaround_swep")


def test_examples_command_lists_and_copies(tmp_path, capsys):
    from simcheck.cli import main

    assert main(["examples", "--json"]) == 0
    out = json.loads(capsys.readouterr().out)
    assert out["invented"] is True and any(e["name"] == "costs" for e in out["examples"])
    assert main(["examples", "--copy", str(tmp_path / "ex"), "--json"]) == 0
    copied = json.loads(capsys.readouterr().out)["copied"]
    assert (tmp_path / "ex" / "turnaround_sweep.toml").is_file() and "costs.toml" in copied
    (tmp_path / "ex" / "costs.toml").write_text("# mine\n")
    assert main(["examples", "--copy", str(tmp_path / "ex"), "--json"]) == 0
    again = json.loads(capsys.readouterr().out)
    assert again["copied"] == [] and again["skipped"] == ["costs.toml"]
    assert (tmp_path / "ex" / "costs.toml").read_text() == "# mine\n"  # never overwritten
    # a copied sweep runs where it was copied (its base is beside it)
    assert main(["check", str(tmp_path / "ex" / "turnaround.toml"), "--n", "30", "--replicates", "200", "--json"]) == 0
    (tmp_path / "f").write_text("")
    assert main(["examples", "--copy", str(tmp_path / "f")]) == 2


def test_top_level_names_stay_functions_after_module_imports():
    import importlib

    importlib.import_module("simcheck.search")
    importlib.import_module("simcheck.sweep")
    importlib.import_module("simcheck.report")
    importlib.import_module("simcheck.scenario")
    for name in ("scenario", "search", "sweep", "report", "check", "curve", "compare"):
        assert callable(getattr(sc, name)) and getattr(sc, name).__module__ == "simcheck.api", name
    from simcheck.search import find_n  # the module by its full path

    assert callable(find_n)


def test_no_module_imports_a_shadowed_name_from_the_package():
    # `from simcheck import search` would get the API function, not the module
    pattern = re.compile(r"from\s+simcheck\s+import\s+[^\n]*\b(search|sweep|report|scenario|fit)\b(?!\w)"
                         r"|import\s+simcheck\.(search|sweep|report|scenario|fit)\s+as\b")
    offenders = []
    for path in list((ROOT / "simcheck").rglob("*.py")) + list((ROOT / "tests").rglob("*.py")):
        for i, line in enumerate(path.read_text(encoding="utf-8").splitlines(), start=1):
            code = line.split("#", 1)[0]
            if pattern.search(code) and "simcheck.api" not in code:
                offenders.append(f"{path.relative_to(ROOT)}:{i}: {line.strip()}")
    assert not offenders, "use `from simcheck.search import find_n` (full path):\n" + "\n".join(offenders)


def test_main_module_is_guarded():
    import importlib

    mod = importlib.import_module("simcheck.__main__")  # importing must not run the command
    assert mod.__name__ == "simcheck.__main__"
