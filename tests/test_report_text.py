"""The words of a report: decision status, the methods paragraph, model descriptions,
summary.json and results.csv.

Result objects are built by hand (fixed numbers) so that only the report layer
is under test; nothing here calls back into simcheck for a reference value.
"""

from __future__ import annotations

import json
from dataclasses import replace

import numpy as np
import pandas as pd
import pytest

from simcheck.report import StudyResults, describe_model, methods_paragraph, write_report
from simcheck.report.text import explain_note, fmt_estimate, key_label, model_text
from simcheck.results import CheckResult, CurveResult, SearchResult

SEED = 31


def _check(n: int, method: str, R: int, cov: float, ass: float, margin_values: bool = False) -> CheckResult:
    m = np.linspace(0.5, 1.5, 200) if margin_values else None
    return CheckResult(
        n=n, replicates=R, true_value=6.0, coverage=cov, coverage_mcse=float(np.sqrt(cov * (1 - cov) / R)),
        miss_low=0.03, miss_high=1 - cov - 0.03, margin_mean=0.9, margin_median=0.9, margin_p90=1.1,
        assurance=ass, assurance_mcse=float(np.sqrt(ass * (1 - ass) / R)), method=method, seed=SEED,
        exact=False, target_margin=1.0, margin_values=m,
    )


def _search(method: str, n: int | None, at: CheckResult | None, *, decision: str = "clear", used: int = 50_000,
            stop: str = "decision clear", n_first: int | None = None, notes=()) -> SearchResult:
    return SearchResult(
        n=n, reached=n is not None, n_formula=139, n_range=None if n is None else (n - 3, n + 40),
        coverage=None if at is None else at.coverage, coverage_mcse=None if at is None else at.coverage_mcse,
        assurance=None if at is None else at.assurance, assurance_mcse=None if at is None else at.assurance_mcse,
        replicates_used=used, targets={"confidence": 0.95}, method=method, seed=SEED, stop_reason=stop,
        decision=decision, criterion="every-larger-n",
        criterion_text="n is the smallest n from which the targets hold at every larger n checked",
        replicates_needed=400_000 if decision == "undecided" else None, n_first=n_first, notes=tuple(notes),
        at_n=at,
    )


def _curve(method: str) -> CurveResult:
    return CurveResult(tuple(_check(n, method, 1000, 0.94 + n / 100_000, 0.5 + n / 2000) for n in range(100, 801, 50)))


@pytest.fixture
def study() -> StudyResults:
    at_t = _check(713, "t", 140_000, 0.9457, 0.9999)
    at_c = _check(161, "cox", 40_000, 0.9489, 0.805)
    searches = {
        "t": _search("t", 713, at_t, decision="undecided", used=165_250, stop="replicate budget spent",
                     n_first=650, notes=["the targets first hold at n = 650 but hold for every larger confirmed n "
                                         "only from n = 713 (coverage oscillates in n); n is the latter"]),
        "cox": _search("cox", 161, at_c, used=43_250),
    }
    return StudyResults(
        title="Days to settle a claim (invented example)", estimand="mean", confidence=0.95, margin=1.0,
        assurance=0.8, coverage_tolerance=0.005, replicates=10_000, seed=SEED, n_min=10, n_max=3000,
        methods=("t", "cox"), searches=searches, curves={"t": _curve("t"), "cox": _curve("cox")},
        checks={"t": at_t, "cox": at_c},
        rechecks={"t": _check(713, "t", 10_000, 0.951, 1.0, True), "cox": _check(161, "cox", 10_000, 0.943, 0.81, True)},
        n_formula=139, formula={"multiplier_kind": "z", "multiplier": 1.959964},
        data={"estimand": "mean", "data": {"model": "lognormal", "mean": 6.0, "cv": 1.0}, "true_value": 6.0},
        best="cox", discrete=False,
    )


def test_paragraph_says_undecided_before_the_number(study):
    text = methods_paragraph(study)
    i = text.index("With the Student t interval")
    assert text.index("undecided", i) < text.index("713", i)
    assert "About 400,000 replicates per n would likely settle it." in text
    # the criterion in words, as a sentence
    assert "The answer n is the smallest n from which the targets hold at every larger n checked." in text


def test_criterion_noun_phrase_becomes_a_sentence():
    from simcheck.report.text import criterion_sentence

    got = criterion_sentence("the smallest n at which coverage meets the target at every larger n checked; "
                             "n_range holds the n the Monte Carlo error cannot tell from the boundary")
    assert got == ("The answer n is the smallest n at which coverage meets the target at every larger n checked; "
                   "the n range holds the n the Monte Carlo error cannot tell from the boundary.")


def test_paragraph_quotes_the_search_confirmation_with_its_replicates(study):
    text = methods_paragraph(study)
    # the search's confirmation, not the re-check (0.951 / 0.943) nor the per-n replicates setting
    assert "coverage 0.9457, MCSE 0.0006" in text
    assert "from 140,000 fresh samples at that n, 165,250 simulated in the whole search" in text
    assert "coverage 0.949, MCSE 0.001" in text and "from 40,000 fresh samples" in text
    assert "0.951" not in text and "0.943" not in text
    assert "10,000 independent samples" not in text


def test_paragraph_names_the_fewest_n_but_does_not_choose(study):
    text = methods_paragraph(study)
    assert "Of the methods compared, the Cox lognormal interval needed the fewest observations (n = 161)" in text
    assert "remains the analyst's choice" in text
    assert "We chose" not in text


def test_paragraph_wiggle_is_noise_for_continuous_and_oscillation_for_discrete(study):
    text = methods_paragraph(study)
    assert "Monte Carlo noise" in text and "oscillates" not in text
    disc = methods_paragraph(replace(study, discrete=True))
    assert "With the Student t interval, because the data are discrete, coverage oscillates in n" in disc
    note = study.searches["t"].notes[0]
    assert "oscillates" not in explain_note(note, discrete=False) and "Monte Carlo noise" in explain_note(note, False)
    assert explain_note(note, discrete=True) == note


def test_two_groups_read_equal_size_or_k_times():
    a = {"model": "normal", "mean": 5.0, "sd": 1.0}
    assert "(groups of equal size)" in model_text({"data_a": a, "data_b": a, "ratio": 1.0})
    assert "(group b 1.5 times the size of group a)" in model_text({"data_a": a, "data_b": a, "ratio": 1.5})
    assert "1 times" not in model_text({"data_a": a, "data_b": a, "ratio": 1.0})


def test_models_are_named_in_words():
    ev = {"model": "event", "inner": {"model": "lognormal", "mean": 200.0, "cv": 0.5}, "event_above": 250.0}
    assert describe_model(ev) == ("a 0/1 indicator that a value from a lognormal distribution with mean 200 and "
                                  "CV 0.5 exceeds 250")
    ev2 = {"model": "event", "inner": {"model": "categorical", "values": [1, 2, 3], "probs": [0.2, 0.3, 0.5]},
           "event_values": [2.0, 3.0]}
    assert describe_model(ev2).endswith("is one of 2 or 3")
    assert "event distribution" not in describe_model(ev2)
    sc = {"model": "scipy", "distribution": "gamma", "args": [2.0], "kwds": {"scale": 3.0}}
    assert describe_model(sc) == "a gamma distribution (scipy.stats.gamma) with shape a 2 and scale 3"
    assert "args" not in describe_model(sc) and "[" not in describe_model(sc)
    zi = {"model": "zero-inflated", "zero_prob": 0.3, "inner": {"model": "gamma", "mean": 50.0, "cv": 1.0}}
    assert describe_model(zi) == "a zero-inflated model: zero with probability 0.3, otherwise a gamma distribution with mean 50 and CV 1"


def test_readable_keys_and_rounded_mcse():
    assert key_label("data.cv") == "CV of the data"
    assert key_label("data.b.sd") == "SD of group b"
    assert key_label("clusters.icc") == "Intracluster correlation (ICC)"
    assert key_label("something.odd") == "something.odd"
    # digits to the MCSE's first significant figure, never more than 4; tiny MCSEs as a bound
    assert fmt_estimate(0.9457, 0.000604) == "0.9457 (MCSE 0.0006)"
    assert fmt_estimate(0.99993, 0.0000212) == "0.9999 (MCSE < 0.0001)"
    assert fmt_estimate(0.949, 0.0022) == "0.949 (MCSE 0.002)"


def test_summary_and_csv_carry_decision_criterion_and_notes(study, tmp_path):
    files = write_report(tmp_path / "r", study)
    summary = json.loads(files.summary.read_text(encoding="utf-8"))
    rows = {r["method"]: r for r in summary["by_method"]}
    assert rows["t"]["decision"] == "undecided" and rows["cox"]["decision"] == "clear"
    assert rows["t"]["criterion"] == "every-larger-n"
    assert rows["t"]["criterion_text"].startswith("n is the smallest n")
    assert rows["t"]["replicates_needed"] == 400_000 and rows["t"]["n_first"] == 650
    assert rows["t"]["stop_reason"] == "replicate budget spent"
    assert any("Monte Carlo noise" in t for t in rows["t"]["notes"])
    # one number per quantity: the search's confirmation; the re-check is labelled as such
    assert rows["t"]["coverage"] == 0.9457 and rows["t"]["confirm_replicates"] == 140_000
    assert rows["t"]["recheck_coverage"] == 0.951 and rows["t"]["recheck_replicates"] == 10_000
    assert summary["decision"] == "undecided" and summary["fewest_n"] == ["cox"]
    table = pd.read_csv(files.table)
    assert {"decision", "criterion", "criterion_text", "stop_reason", "notes", "replicates_used",
            "recheck_coverage", "miss_low_mcse", "miss_high_mcse", "degenerate_share"} <= set(table.columns)
    assert list(table["decision"]) == ["undecided", "clear"]
    assert "Monte Carlo noise" in table.loc[0, "notes"]
    md = files.markdown.read_text(encoding="utf-8")
    assert "undecided (budget spent): 713" in md and "161 (clear)" in md
    assert "Re-check for the half-width figure (not the figures above)" in md
    assert "t: undecided, n found 713; cox: n found 161" in md  # the coverage figure's alt text
    assert "differs from the search's confirmation by Monte Carlo error" in md


def test_exact_two_group_paragraph_reads_plainly(study):
    def exact_search(m, n, first):
        return replace(_search(m, n, None, n_first=first), exact=True, coverage=0.9497, coverage_mcse=0.0,
                       assurance=0.5023, assurance_mcse=0.0, n_b=n)

    s = replace(study, estimand="proportion-diff", methods=("newcombe", "wald"),
                searches={"newcombe": exact_search("newcombe", 227, 200), "wald": exact_search("wald", 229, 210)},
                checks={}, rechecks={}, curves={}, formula_checks={}, discrete=True,
                data={"data_a": {"model": "bernoulli", "p": 0.3}, "data_b": {"model": "bernoulli", "p": 0.22},
                      "ratio": 1.0})
    text = methods_paragraph(s)
    assert text.startswith("We checked the planned sample size by exact computation")
    assert "smallest such n was 227 in each group (exact coverage 0.9497, assurance 0.5023)" in text
    assert "needed the fewest observations (n = 227 per group)" in text
    # the oscillation is explained once for both methods, naming each first n
    assert text.count("oscillates in n") == 1 and "(Newcombe 200 and Wald 210)" in text
    assert "No random numbers were needed" in text and "seed" not in text


def test_strata_paragraph_names_the_allocation_and_rounds_the_design_effect(study):
    data = {"strata": [{"name": "harbour", "size": 4200, "data": {"model": "lognormal", "mean": 120.0, "cv": 0.9}},
                       {"name": "farms", "size": 2200, "data": {"model": "normal", "mean": 80.0, "sd": 20.0}}],
            "allocation": {"rule": "neyman"}}
    s = replace(study, data=data, formula={"multiplier_kind": "z", "design_effect": 0.709872})
    text = methods_paragraph(s)
    assert ("The population was assumed to consist of 2 strata, each sampled without replacement and the total n "
            "allocated by Neyman allocation: harbour (N = 4,200), a lognormal distribution") in text
    assert "design effect 0.71)" in text and "0.709872" not in text
