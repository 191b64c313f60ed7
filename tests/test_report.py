"""Reports: figure files are valid and reproducible, documents say what was done.

The figure checks follow what journal production systems test on submitted
artwork (common practice): PDF fonts embedded as TrueType (``/FontFile2``)
rather than Type 3 bitmaps, SVG that is well-formed XML, PNG that decodes.
Result objects here are built from small binomial and gamma draws with fixed
seeds; only the report layer is under test.
"""

from __future__ import annotations

import hashlib
import json
import re
import xml.etree.ElementTree as ET
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from matplotlib.figure import Figure
from matplotlib.image import imread

from simcheck import CAUTION
from simcheck.report import figures as F
from simcheck.cli import main
from simcheck.report import (
    ReportFiles,
    StudyResults,
    curve_grid,
    methods_paragraph,
    write_report,
)
from simcheck.results import CheckResult, CurveResult, SearchResult

from fixtures import repair_times, sweep_table, write_sweep_folder

SEED = 20261201
R = 2000


def _check(n: int, method: str = "t", *, shortfall: float = 0.0, target: float = 1.0, exact: bool = False) -> CheckResult:
    rng = np.random.default_rng([SEED, n, len(method)])
    p_true = 0.95 - 0.5 / np.sqrt(n) - shortfall
    cov = rng.binomial(R, p_true) / R
    low = 0.8 * (1 - cov)
    m = rng.gamma(25.0, 1.96 * 6.0 / np.sqrt(n) / 25.0, size=R)
    weights = None
    if exact:
        m, idx = np.unique(np.round(m, 2), return_inverse=True)
        weights = np.bincount(idx).astype(float) / R
    a = float(np.mean(m <= target)) if weights is None else float(weights[m <= target].sum())
    se = 0.0 if exact else float(np.sqrt(cov * (1 - cov) / R))
    return CheckResult(
        n=n, replicates=R, true_value=6.0, coverage=float(cov), coverage_mcse=se,
        miss_low=float(low), miss_high=float(1 - cov - low), margin_mean=float(np.mean(m)),
        margin_median=float(np.median(m)), margin_p90=float(np.quantile(m, 0.9)), assurance=a,
        assurance_mcse=0.0 if exact else float(np.sqrt(a * (1 - a) / R)), method=method, seed=SEED,
        exact=exact, target_margin=target, margin_values=m, margin_weights=weights,
    )


def _curve(method: str, shortfall: float = 0.0, ns=range(60, 601, 20)) -> CurveResult:
    return CurveResult(tuple(_check(n, method, shortfall=shortfall) for n in ns))


def _search(method: str, n: int | None, curve: CurveResult) -> SearchResult:
    at = curve.at(n) if n is not None else None
    return SearchResult(
        n=n, reached=n is not None, n_formula=139, n_range=None if n is None else (n - 20, n + 40),
        coverage=None if at is None else at.coverage, coverage_mcse=None if at is None else at.coverage_mcse,
        assurance=None if at is None else at.assurance, assurance_mcse=None, replicates_used=5 * R,
        targets={"confidence": 0.95}, method=method, seed=SEED,
        best_coverage=None if n is not None else float(curve.column("coverage").max()),
        best_coverage_n=None if n is not None else int(curve.n[np.argmax(curve.column("coverage"))]),
    )


@pytest.fixture(scope="module")
def study() -> StudyResults:
    ct, cc = _curve("t", 0.004), _curve("cox", -0.003)
    return StudyResults(
        title="Days to settle a claim (invented example)", estimand="mean", confidence=0.95, margin=1.0,
        assurance=0.8, coverage_tolerance=0.005, replicates=R, seed=SEED, n_min=10, n_max=600,
        methods=("t", "cox"), searches={"t": _search("t", 480, ct), "cox": _search("cox", 180, cc)},
        curves={"t": ct, "cox": cc}, checks={"t": _check(480, "t"), "cox": _check(180, "cox")},
        n_formula=140, formula={"multiplier_kind": "z", "multiplier": 1.959964},
        formula_checks={"t": ct.at(140), "cox": cc.at(140)},
        data={"estimand": "mean", "data": {"model": "lognormal", "mean": 6.0, "cv": 1.0}, "true_value": 6.0},
        best="cox", value_label="Achieved half-width (days)",
    )


def _hashes(paths) -> dict[str, str]:
    return {Path(p).name: hashlib.sha256(Path(p).read_bytes()).hexdigest() for p in paths}


def _assert_valid_files(paths: dict[str, Path]) -> None:
    pdf = paths["pdf"].read_bytes()
    assert pdf.startswith(b"%PDF")
    assert b"/FontFile2" in pdf, "PDF fonts must be embedded as TrueType"
    assert b"/Subtype /Type3" not in pdf and b"/Type3" not in pdf
    assert b"CreationDate" not in pdf
    root = ET.parse(paths["svg"]).getroot()
    assert root.tag.endswith("svg")
    assert "<dc:date>" not in paths["svg"].read_text(encoding="utf-8")
    img = imread(paths["png"])
    assert img.ndim == 3 and img.shape[0] > 300 and img.shape[1] > 600


@pytest.fixture(scope="module")
def written(tmp_path_factory, study) -> ReportFiles:
    return write_report(tmp_path_factory.mktemp("report") / "a", study)


def test_report_figure_files_are_valid(written):
    assert set(written.figures) == {"coverage", "margin", "misses"}
    for paths in written.figures.values():
        _assert_valid_files(paths)


def test_figures_are_figures_and_files_are_valid(tmp_path, study):
    figs = {
        "coverage": F.coverage_figure(dict(study.curves), confidence=0.95, tolerance=0.005, n_formula=140,
                                      n_found={"t": 480, "cox": 180}),
        "coverage1": F.coverage_figure(study.curves["t"], confidence=0.95, tolerance=0.005, n_found=480),
        "margin": F.margin_figure(study.checks["t"], curves=study.curves["t"], assurance=0.8, n_found=480),
        "margin_exact": F.margin_figure(_check(200, "wilson", exact=True), target_margin=1.0),
        "misses": F.miss_figure(dict(study.curves), confidence=0.95, n_found={"t": 480, "cox": 180}),
    }
    for name, fig in figs.items():
        assert isinstance(fig, Figure)
        assert all(ax.get_xlabel() for ax in fig.axes if ax.get_visible()), name
    # the report test covers the multi-method figures' files; here the one-method and exact variants
    for name in ("coverage1", "margin_exact"):
        _assert_valid_files(F.save_figure(figs[name], tmp_path / name))


def test_figure_marks_what_it_says(study):
    fig = F.coverage_figure(study.curves["t"], confidence=0.95, tolerance=0.005, n_formula=140, n_found=480)
    ax = fig.axes[0]
    labels = [t.get_text() for t in fig.legends[0].get_texts()]
    assert "formula n = 140" in labels and "n found = 480" in labels and "nominal 0.95" in labels
    # the band is the estimate +/- 2 MCSE (Morris, White & Crowther 2019, Stat Med 38:2074, Table 6)
    band = ax.collections[0].get_paths()[0].vertices
    c = study.curves["t"]
    top = c.column("coverage") + 2 * c.column("coverage_mcse")
    assert np.isclose(band[:, 1].max(), top.max())
    # the plotted line is the coverage itself
    line = [ln for ln in ax.get_lines() if ln.get_label() == "t"][0]
    assert np.array_equal(line.get_ydata(), c.column("coverage"))


def test_weighted_ecdf_merges_ties():
    # hand computation: P(X <= 2) = 0.1 + 0.2 + 0.3
    x, y = F._ecdf(np.array([2.0, 1.0, 3.0, 2.0]), np.array([0.2, 0.1, 0.4, 0.3]))
    assert np.array_equal(x, [1.0, 2.0, 3.0])
    assert np.allclose(y, [0.1, 0.6, 1.0])


def test_report_documents(study, written):
    files = written
    assert isinstance(files, ReportFiles)
    d = files.to_dict()
    assert set(d["figures"]) == {"coverage", "margin", "misses"}
    md = files.markdown.read_text(encoding="utf-8")
    html = files.html.read_text(encoding="utf-8")
    for text in (md, html):
        assert study.title in text
        assert CAUTION in text
        assert str(SEED) in text
    # self-contained: every image is inline data
    srcs = re.findall(r'src="([^"]*)"', html)
    assert len(srcs) == 3 and all(s.startswith("data:image/png;base64,") for s in srcs)
    assert "numpy" in md and "scipy" in md
    table = pd.read_csv(files.table)
    assert list(table["method"]) == ["t", "cox"]
    assert table.loc[0, "n_found"] == 480
    summary = json.loads(files.summary.read_text(encoding="utf-8"))
    assert summary["seed"] == SEED and summary["best"] == "cox"
    assert summary["methods_paragraph"] == methods_paragraph(study)


def test_methods_paragraph_names_seed_replicates_and_n(study):
    text = methods_paragraph(study)
    assert str(SEED) in text
    assert f"at least {R:,} per n" in text
    assert "n = 140" in text  # the formula n
    assert "smallest such n was 480" in text and "smallest such n was 180" in text
    # the method needing the fewest n is named, not chosen for the reader
    assert "Cox lognormal interval needed the fewest observations (n = 180)" in text
    assert "We chose" not in text
    # the quoted figures are the search's own, with the replicates behind them
    r, chk = study.searches["cox"], study.checks["cox"]
    assert f"coverage {r.coverage:.3f}, MCSE {r.coverage_mcse:.3f}" in text
    assert f"from {chk.replicates:,} fresh samples at that n, {r.replicates_used:,} simulated in the whole search" in text
    assert "lognormal distribution with mean 6 and CV 1" in text
    assert "`" not in text  # pasted into a manuscript: no Markdown marks


def test_methods_paragraph_when_not_reached(study):
    ct = study.curves["t"]
    s = StudyResults(**{**study.__dict__, "methods": ("t",), "searches": {"t": _search("t", None, ct)},
                        "best": None, "checks": {}})
    text = methods_paragraph(s)
    assert "not met by any n up to 600" in text
    assert "highest coverage" in text


def test_curve_grid_includes_marks_and_stays_in_range():
    g = curve_grid([139, 700], 10, 3000, points=41)
    assert 139 in g and 700 in g
    assert g[0] >= 10 and g[-1] <= 3000 and g == sorted(set(g))
    assert g[0] <= 70 and g[-1] >= 1000
    assert curve_grid([5], 2, 12, points=41) == list(range(2, 9))  # 5 / 2 rounded down to 5 * 1.5 rounded up


def test_sweep_figure_small_multiples():
    rows = []
    for cv in (0.5, 1.0, 2.0):
        for m in ("t", "cox"):
            for conf in (0.9, 0.95):
                rows.append({"data.cv": cv, "method.interval": m, "target.confidence": conf,
                             "n": int(100 * cv * cv) + (20 if m == "t" else 0), "n_formula": int(90 * cv * cv)})
    fig = F.sweep_figure(pd.DataFrame(rows))
    visible = [ax for ax in fig.axes if ax.get_visible()]
    assert len(visible) == 2  # one panel per confidence level
    assert [ax.get_title(loc="left") for ax in visible] == ["Confidence level = 0.9", "Confidence level = 0.95"]
    labels = [t.get_text() for t in fig.legends[0].get_texts()]
    assert labels == ["formula n", "cox interval", "t interval"]


def test_sweep_coverage_panels_draw_their_own_nominal_level(tmp_path):
    # A sweep over the confidence level: each panel's reference line is its own level.
    import shutil

    from simcheck.report import read_sweep, sweep_figures
    from simcheck.sweep.runner import run_sweep

    root = Path(__file__).resolve().parents[1] / "scenarios"
    for name in ("top_box.toml", "top_box_check_sweep.toml"):
        shutil.copy(root / name, tmp_path / name)
    store = tmp_path / "s.sqlite"
    run_sweep(tmp_path / "top_box_check_sweep.toml", store)
    fig = sweep_figures(read_sweep(store))["sweep"]
    levels = []
    for ax in (a for a in fig.axes if a.get_visible()):
        # axhline: x data (0, 1) in axes coordinates
        hlines = {float(ln.get_ydata()[0]) for ln in ax.get_lines()
                  if len(ln.get_xdata()) == 2 and tuple(ln.get_xdata()) == (0, 1)}
        levels.append(sorted(hlines))
    assert levels == [[0.9], [0.95]]


# --- command line ------------------------------------------------------------------
BASE = repair_times(title="Sweep base (invented example)", simulation__replicates=400, simulation__seed=7,
                    simulation__n_min=10)
SWEEP = sweep_table(n=[40, 160])


@pytest.fixture(scope="module")
def store(tmp_path_factory) -> Path:
    d = tmp_path_factory.mktemp("sweep")
    write_sweep_folder(d, BASE, SWEEP)
    assert main(["sweep", str(d / "sweep.toml"), "--store", str(d / "s.sqlite"), "--json"]) == 0
    return d / "s.sqlite"


def test_report_cli_on_a_store(tmp_path, store, capsys):
    capsys.readouterr()
    assert main(["report", str(store), "--out", str(tmp_path / "r"), "--json"]) == 0
    out = capsys.readouterr().out
    obj = json.loads(out)  # exactly one JSON object on stdout
    assert obj["summary"]["kind"] == "sweep" and obj["summary"]["cells"] == 4
    figs = obj["report"]["figures"]["sweep"]
    _assert_valid_files({k: Path(v) for k, v in figs.items()})
    table = pd.read_csv(tmp_path / "r" / "results.csv")
    assert len(table) == 8  # 4 cells x 2 sample sizes
    md = (tmp_path / "r" / "report.md").read_text(encoding="utf-8")
    assert "data.cv" in md and "seed = 7" in md


@pytest.mark.parametrize("argv_tail, field", [
    (["--out", "FILE"], "--out"),
    (["--out", "FILE/sub"], "--out"),
])
def test_report_cli_bad_out_is_one_line(tmp_path, store, capsys, argv_tail, field):
    f = tmp_path / "a_file.txt"
    f.write_text("x", encoding="utf-8")
    argv = ["report", str(store)] + [a.replace("FILE", str(f)) for a in argv_tail]
    capsys.readouterr()
    assert main(argv) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and field in err and "Traceback" not in err


def test_report_cli_bad_source(tmp_path, capsys):
    capsys.readouterr()
    assert main(["report", str(tmp_path / "missing.toml"), "--out", str(tmp_path / "o")]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "not found" in err
    assert main(["report", "--out", str(tmp_path / "o")]) == 2  # no source: usage error
    assert not (tmp_path / "o").exists()


def test_demo_cli_help_and_bad_out(tmp_path, capsys):
    with pytest.raises(SystemExit) as exc:
        main(["demo", "--help"])
    assert exc.value.code == 0
    assert "invented" in capsys.readouterr().out
    f = tmp_path / "f"
    f.write_text("x", encoding="utf-8")
    assert main(["demo", "--out", str(f)]) == 2
    assert capsys.readouterr().err.count("\n") == 1


def test_demo_scenario_shipped_in_package_matches_repository():
    from simcheck.cli.demo import scenario_text

    repo_copy = Path(__file__).resolve().parents[1] / "scenarios" / "demo.toml"
    assert scenario_text() == repo_copy.read_text(encoding="utf-8")
    assert "(invented example)" in scenario_text()


SCENARIO = """title = "Minutes per service call (invented example)"
[target]
estimand = "mean"
confidence = 0.95
margin = 2.0
assurance = 0.5
# 0.03: with 1,000 replicates a coverage target of 0.94 cannot be told from the t interval's
# plateau near 0.943, so the search would (rightly) end undecided
coverage_tolerance = 0.03
[data]
model = "gamma"
mean = 10.0
cv = 0.8
[method]
interval = ["t", "johnson-t"]
[simulation]
replicates = 1000
seed = 4242
n_min = 5
n_max = 200
budget = 8000
"""


@pytest.fixture(scope="module")
def scenario_report(tmp_path_factory):
    d = tmp_path_factory.mktemp("scen")
    (d / "s.toml").write_text(SCENARIO, encoding="utf-8")
    import contextlib
    import io

    buf = io.StringIO()
    with contextlib.redirect_stdout(buf):
        rc = main(["report", str(d / "s.toml"), "--out", str(d / "out"), "--json"])
    return d, rc, buf.getvalue()


def test_report_cli_on_a_scenario(scenario_report):
    d, rc, out = scenario_report
    assert rc == 0
    obj = json.loads(out)
    summary = obj["summary"]
    assert summary["kind"] == "study" and summary["seed"] == 4242 and summary["replicates"] == 1000
    # formula n: z multiple, sd = cv * mean = 8, margin 2 -> (1.959964 * 8 / 2)^2 = 61.46 -> 62 (common practice)
    assert summary["n_formula"] == 62
    rows = {r["method"]: r for r in summary["by_method"]}
    assert set(rows) == {"t", "johnson-t"}
    md = (d / "out" / "report.md").read_text(encoding="utf-8")
    para = summary["methods_paragraph"]
    assert para in md and "4242" in para and "at least 1,000 per n" in para
    for m, r in rows.items():
        assert r["decision"] in ("clear", "undecided", "not reached")
        if r["reached"] and r["decision"] == "clear":
            assert f"smallest such n was {r['n_found']:,}" in para
        elif r["decision"] == "undecided":
            # the status comes before the number
            i = para.index(f"With the {'Student t' if m == 't' else 'skewness-corrected (Johnson) t'} interval")
            assert para.index("undecided", i) < para.index(f"n = {r['n_found']:,}", i)
    for paths in obj["report"]["figures"].values():
        _assert_valid_files({k: Path(v) for k, v in paths.items()})


def test_report_cli_on_a_scenario_is_reproducible(scenario_report, tmp_path):
    # two renders from the same inputs: every file (figures in three formats,
    # documents, table, summary) byte for byte the same
    d, rc, _ = scenario_report
    assert rc == 0
    assert main(["report", str(d / "s.toml"), "--out", str(tmp_path / "again")]) == 0
    first = _hashes(p for p in (d / "out").rglob("*") if p.is_file())
    second = _hashes(p for p in (tmp_path / "again").rglob("*") if p.is_file())
    assert len(first) == 4 + 3 * 3
    assert first == second


def test_report_cli_bad_override_is_one_line(scenario_report, tmp_path, capsys):
    d, _, _ = scenario_report
    capsys.readouterr()
    assert main(["report", str(d / "s.toml"), "--out", str(tmp_path / "x"), "--replicates", "0"]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "replicates" in err


def test_demo_runs_end_to_end_into_reports_demo(tmp_path, monkeypatch, capsys):
    monkeypatch.chdir(tmp_path)
    capsys.readouterr()
    assert main(["demo", "--replicates", "300", "--json"]) == 0
    obj = json.loads(capsys.readouterr().out)
    assert obj["invented"] is True and "(invented example)" in obj["title"]
    assert obj["n_formula"] == 139  # (1.959964 * 6 / 1)^2 = 138.3 -> 139 (common practice: z formula, SD = CV * mean)
    assert set(obj["n_found"]) == {"t", "cox"}
    assert Path(obj["report"]["html"]) == Path("reports/demo/report.html")
    assert (tmp_path / "reports" / "demo" / "report.html").is_file()
    assert (tmp_path / "reports" / "demo" / "figures" / "coverage.pdf").is_file()
