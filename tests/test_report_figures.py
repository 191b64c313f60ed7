"""Figures: sweep outcomes drawn apart, readable labels, one style per method,
greyscale-safe bands, SVG text kept as text.

Frames and curves are built by hand (fixed numbers); only drawing is under test.
"""

from __future__ import annotations

import re

import numpy as np
import pandas as pd
import pytest
from matplotlib.colors import to_hex

from simcheck.report import figures as F
from simcheck.report.document import _sweep_table, sweep_n_label
from simcheck.report.study import SweepResults
from simcheck.results import CheckResult, CurveResult


def _frame(formula_by_method: bool = False) -> pd.DataFrame:
    rows = []
    for cv in (0.6, 1.2, 1.8, 2.4):
        for m in ("t", "johnson-t", "bootstrap-bca"):
            base = {"data.cv": cv, "method.interval": m, "n_formula": int(140 * cv * cv) + (7 * len(m) if formula_by_method else 0)}
            if cv == 2.4:  # the ceiling: not reached
                rows.append({**base, "n": np.nan, "reached": False, "decision": "clear", "stop_reason": "not reached",
                             "n_range_low": np.nan, "n_range_high": np.nan})
            elif cv == 1.8 and m == "t":  # budget spent, no n yet
                rows.append({**base, "n": np.nan, "reached": False, "decision": "undecided",
                             "stop_reason": "replicate budget spent", "n_range_low": np.nan, "n_range_high": np.nan})
            elif cv == 1.2:  # budget spent with an n and a range
                rows.append({**base, "n": 400.0 + 10 * len(m), "reached": True, "decision": "undecided",
                             "stop_reason": "replicate budget spent", "n_range_low": 350.0, "n_range_high": 520.0,
                             "coverage": 0.9461, "coverage_mcse": 0.00226, "assurance": 0.99, "assurance_mcse": 0.0007,
                             "exact": False})
            else:
                rows.append({**base, "n": 200.0 * cv + len(m), "reached": True, "decision": "clear",
                             "stop_reason": "decision clear", "n_range_low": 190.0 * cv, "n_range_high": 220.0 * cv,
                             "coverage": 0.9512345, "coverage_mcse": 0.002231, "assurance": 0.8, "assurance_mcse": 0.004,
                             "exact": False})
    return pd.DataFrame(rows)


def _labels(fig) -> list[str]:
    return [t.get_text() for t in fig.legends[0].get_texts()]


def test_sweep_outcomes_are_told_apart():
    fig = F.sweep_figure(_frame())
    labels = _labels(fig)
    assert "undecided (budget spent); bar: n range" in labels
    assert "undecided, no n yet (budget spent)" in labels
    assert "not reached by the search ceiling" in labels
    ax = fig.axes[0]
    # undecided cells with an n are drawn at their n with an open marker; not-reached ones above the data
    open_pts = [ln for ln in ax.get_lines() if ln.get_markerfacecolor() == "white" and len(ln.get_xdata())]
    assert any(np.allclose(np.asarray(ln.get_xdata()).round(), 1) for ln in open_pts)
    ys = np.concatenate([np.asarray(ln.get_ydata(), dtype=float) for ln in open_pts])
    assert set(np.round(ys)) <= {400 + 10 * len(m) for m in ("t", "johnson-t", "bootstrap-bca")}


def test_no_legend_entry_for_an_outcome_never_drawn():
    fr = _frame()
    fr = fr[fr["data.cv"] <= 0.6]  # every cell clear
    fr = pd.concat([fr, fr.assign(**{"data.cv": 0.9})])
    labels = _labels(F.sweep_figure(fr))
    assert not any("undecided" in t or "not reached" in t for t in labels)
    fr2 = fr.assign(n_formula=np.nan)
    assert "formula n" not in _labels(F.sweep_figure(fr2))


def test_markers_of_different_methods_do_not_sit_on_top_of_each_other():
    fig = F.sweep_figure(_frame())
    ax = fig.axes[0]
    xs = {}
    for ln in ax.get_lines():
        x = np.asarray(ln.get_xdata(), dtype=float)
        if ln.get_label() in ("t interval", "johnson-t interval", "bootstrap-bca interval") and x.size:
            xs[ln.get_label()] = x
    near = [x[np.argmin(np.abs(x - 0.6))] for x in xs.values()]
    assert len(near) == 3 and len(set(np.round(near, 6))) == 3
    # shifted by at least 1.5 % of the x span, at most half the gap between levels
    gaps = np.diff(sorted(near))
    assert gaps.min() >= 0.015 * 1.8 and max(near) - min(near) < 0.6


def test_axis_labels_are_words_and_n_says_what_it_counts():
    fig = F.sweep_figure(_frame(), n_label="Required sample size n (clusters)")
    ax = fig.axes[0]
    assert ax.get_xlabel() == "CV of the data"
    assert "clusters" in ax.get_ylabel()
    sw = SweepResults(source="x.sqlite", frame=_frame(), vary=("data.cv", "method.interval"), task="search",
                      meta={"base_text": "[clusters]\nicc = 0.05\nsize = 12\n"})
    assert sweep_n_label(sw) == "Required sample size n (clusters)"
    sw2 = SweepResults(source="x.sqlite", frame=_frame(), vary=("data.cv",), task="search", meta={"base_text": "x = 1"})
    assert sweep_n_label(sw2) == "Required sample size n (observations)"


def test_formula_n_is_drawn_per_cell_when_it_differs_between_lines():
    fig = F.sweep_figure(_frame(formula_by_method=True))
    ax = fig.axes[0]
    per_cell = [ln for ln in ax.get_lines() if ln.get_label() == "formula n (per cell)"]
    assert len(per_cell) == 3  # one set of crosses per method, each at its own values
    ys = sorted(float(y) for ln in per_cell for y in np.asarray(ln.get_ydata())[:1])
    assert len(set(ys)) == 3
    one = F.sweep_figure(_frame())
    assert [ln.get_label() for ln in one.axes[0].get_lines()].count("formula n") == 1


def test_sweep_table_has_status_range_words_and_rounded_mcse():
    fr = _frame()
    headers, rows = _sweep_table(fr, ["data.cv", "method.interval"], "n")
    assert headers[:5] == ["CV of the data", "Interval method", "Decision", "n found", "n consistent with MC error"]
    by = {(r[0], r[1]): r for r in rows}
    assert by[("1.2", "t")][2] == "undecided (budget spent)"
    assert by[("1.2", "t")][4] == "350–520"
    assert by[("2.4", "t")][2] == "not reached (ceiling)"
    assert by[("0.6", "t")][2] == "clear"
    cov = by[("0.6", "t")][headers.index("Coverage at n found (n_max if not reached)")]
    assert cov == "0.951 (MCSE 0.002)"  # digits to the MCSE's first significant figure


def _curve(method: str) -> CurveResult:
    rows = []
    for n in range(50, 301, 25):
        cov = 0.93 + n / 20000
        R = 2000
        rows.append(CheckResult(n=n, replicates=R, true_value=1.0, coverage=cov,
                                coverage_mcse=float(np.sqrt(cov * (1 - cov) / R)), miss_low=0.03,
                                miss_high=1 - cov - 0.03, margin_mean=1.0, margin_median=1.0, margin_p90=1.2,
                                assurance=min(1.0, n / 300), assurance_mcse=0.01, method=method, seed=1, exact=False))
    return CurveResult(tuple(rows))


def test_one_colour_per_method_across_figures():
    curves = {"t interval": _curve("t"), "cox interval": _curve("cox")}
    cov = F.coverage_figure(curves, confidence=0.95, tolerance=0.005)
    only_cox = F.coverage_figure({"cox interval": _curve("cox")}, confidence=0.95, tolerance=0.005)
    fr = _frame().assign(**{"method.interval": lambda d: d["method.interval"].replace({"johnson-t": "cox"})})
    sweep = F.sweep_figure(fr)

    def colour(fig, label):
        for ax in fig.axes:
            for ln in ax.get_lines():
                if ln.get_label() == label:
                    return to_hex(ln.get_color())
        for h, t in zip(fig.legends[0].legend_handles, _labels(fig)):
            if t == label:
                return to_hex(h.get_color())
        raise AssertionError(label)

    c = colour(cov, "cox interval")
    assert c == colour(only_cox, "cox interval") == colour(sweep, "cox interval")
    assert colour(cov, "t interval") == colour(sweep, "t interval") != c
    assert F.method_style("t")["color"] == F.method_style("t interval")["color"]


def test_accepted_band_and_method_band_differ_in_greyscale():
    fig = F.coverage_figure({"t interval": _curve("t")}, confidence=0.95, tolerance=0.005)
    ax = fig.axes[0]
    hatched = [p for p in ax.patches if p.get_hatch()]
    assert hatched, "the accepted-coverage band is hatched"
    # the method's band is a plain fill in its own colour: no hatch, so grey print tells them apart
    bands = [c for c in ax.collections if len(c.get_paths())]
    assert bands and all(not c.get_hatch() for c in bands)
    assert to_hex(bands[0].get_facecolor()[0][:3]) == F.method_style("t")["color"].lower()


def test_svg_keeps_text_as_text_in_a_named_font(tmp_path):
    fig = F.coverage_figure({"t interval": _curve("t")}, confidence=0.95, tolerance=0.005)
    svg = F.save_figure(fig, tmp_path / "c", formats=("svg",))["svg"].read_text(encoding="utf-8")
    assert "<text" in svg and "Coverage" in svg
    assert re.search(r"font[-:].*DejaVu Sans", svg)
    # the same figure built again gives the same bytes (no dates, fixed ids)
    again = F.coverage_figure({"t interval": _curve("t")}, confidence=0.95, tolerance=0.005)
    assert svg == F.save_figure(again, tmp_path / "d", formats=("svg",))["svg"].read_text(encoding="utf-8")


def test_miss_figure_uses_the_method_colour():
    fig = F.miss_figure({"t interval": _curve("t"), "cox interval": _curve("cox")}, confidence=0.95)
    for ax, m in zip(fig.axes, ("t", "cox")):
        drawn = [to_hex(ln.get_color()) for ln in ax.get_lines() if ln.get_label().startswith("_wholly")]
        assert drawn and set(drawn) == {F.method_style(m)["color"].lower()}


@pytest.mark.parametrize("fig_name", ["coverage", "sweep"])
def test_figures_still_render_to_png(tmp_path, fig_name):
    fig = (F.coverage_figure({"t interval": _curve("t")}, confidence=0.95, tolerance=0.005) if fig_name == "coverage"
           else F.sweep_figure(_frame()))
    data = F.screen_png(fig)
    assert data.startswith(b"\x89PNG") and len(data) < 150_000


def test_sweep_summary_counts_decisions():
    sw = SweepResults(source="x.sqlite", frame=_frame().assign(status="ok", cell_key=range(12)),
                      vary=("data.cv", "method.interval"), task="search")
    assert sw.to_dict()["decisions"] == {"clear": 5, "undecided": 4, "not reached": 3}
