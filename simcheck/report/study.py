"""What a report shows: the results of one scenario study or one sweep store.

* a **study** (:class:`StudyResults`) of one scenario: closed-form n, the
  search for each interval method, a coverage curve around the n found and a
  check at it -- built by :func:`run_study`;
* a **sweep** (:class:`SweepResults`) of a sweep store -- read by
  :func:`read_sweep`.
"""

from __future__ import annotations

import math
import platform
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Callable, Mapping, Sequence

from simcheck import __version__
from simcheck.results import CheckResult, CurveResult, SearchResult
from simcheck.report.text import cell_outcome, decision_status, explain_note, methods_paragraph, n_axis_label, value_axis_label


Progress = Callable[[str], None] | None


def versions() -> dict[str, str]:
    """Versions of the software that produced the numbers."""
    import numpy
    import scipy

    return {"simcheck": __version__, "numpy": numpy.__version__, "scipy": scipy.__version__,
            "python": platform.python_version()}


# ---------------------------------------------------------------------------
# what a report is made of
# ---------------------------------------------------------------------------
@dataclass(frozen=True)
class StudyResults:
    """Everything one scenario report shows.

    Parameters
    ----------
    title : str
        Scenario title.
    estimand, confidence, margin, assurance, coverage_tolerance
        The targets.
    replicates, seed, n_min, n_max
        Simulation settings.
    methods : tuple of str
        Interval methods, in the scenario's order.
    searches : dict
        Method -> :class:`SearchResult`.
    curves : dict
        Method -> :class:`CurveResult` around the n found (for figures).
    checks : dict
        Method -> the search's own confirmation at the n found (its ``at_n``):
        the figures the answer rests on, quoted everywhere.
    rechecks : dict
        Method -> a fresh :class:`CheckResult` at the n found, run only when the
        search kept no half-widths for the half-width figure; labelled as a
        re-check wherever it is shown (it differs by Monte Carlo error).
    discrete : bool
        True when a data model is discrete (coverage then oscillates in n).
    n_formula : int, optional
        Closed-form n; ``formula`` holds its details (``FormulaResult.to_dict``).
    formula_checks : dict
        Method -> :class:`CheckResult` at the formula n.
    data : dict
        The data model(s) (``Design.to_dict()``).
    best : str, optional
        Method needing the least n.
    n_label, value_label : str
        Axis labels (what n counts; the data's units).
    """

    title: str
    estimand: str
    confidence: float
    margin: float | None
    assurance: float | None
    coverage_tolerance: float
    replicates: int
    seed: int | None
    n_min: int
    n_max: int
    methods: tuple[str, ...]
    searches: Mapping[str, SearchResult]
    curves: Mapping[str, CurveResult]
    checks: Mapping[str, CheckResult]
    n_formula: int | None = None
    formula: Mapping[str, Any] | None = None
    formula_checks: Mapping[str, CheckResult] = field(default_factory=dict)
    data: Mapping[str, Any] = field(default_factory=dict)
    best: str | None = None
    n_label: str = "Sample size n (observations per sample)"
    value_label: str = "Achieved half-width (data units)"
    scenario: Mapping[str, Any] | None = None
    versions: Mapping[str, str] = field(default_factory=versions)
    rechecks: Mapping[str, CheckResult] = field(default_factory=dict)
    discrete: bool = False

    def to_dict(self) -> dict[str, Any]:
        from simcheck.results import clean_json

        return clean_json({
            "kind": "study",
            "title": self.title,
            "targets": self.targets(),
            "replicates": self.replicates,
            "seed": self.seed,
            "n_min": self.n_min,
            "n_max": self.n_max,
            "methods": list(self.methods),
            "n_formula": self.n_formula,
            "formula": dict(self.formula) if self.formula else None,
            "best": self.best,
            "fewest_n": self.fewest_n(),
            "decision": self.decision(),
            "by_method": [self.method_row(m) for m in self.methods],
            "methods_paragraph": methods_paragraph(self),
            "data": dict(self.data),
            "versions": dict(self.versions),
        })

    def targets(self) -> dict[str, Any]:
        return {"estimand": self.estimand, "confidence": self.confidence, "margin": self.margin,
                "assurance": self.assurance, "coverage_tolerance": self.coverage_tolerance}

    def fewest_n(self) -> list[str]:
        """Methods that reached the targets with the smallest n (a fact, not a recommendation)."""
        found = {m: r.n for m, r in self.searches.items() if r.reached and r.n is not None}
        if not found:
            return []
        low = min(found.values())
        return [m for m in self.methods if found.get(m) == low]

    def decision(self) -> str:
        """'clear' when every method's answer is clear, else 'undecided' or 'not reached' (the first found)."""
        states = [decision_status(self.searches[m]) for m in self.methods if m in self.searches]
        for s in ("undecided", "not reached"):
            if s in states:
                return s
        return "clear" if states else "–"

    def notes_for(self, method: str) -> list[str]:
        """Notes of the search and of its confirmation, the oscillation wording fitted to the data."""
        out: list[str] = []
        for src in (self.searches.get(method), self.checks.get(method)):
            for t in (src.notes if src is not None else ()):
                t = explain_note(t, self.discrete)
                if t not in out:
                    out.append(t)
        return out

    def method_row(self, method: str) -> dict[str, Any]:
        """One row of the results table (plain values).

        ``coverage``, ``assurance`` and their MCSEs are the search's own
        confirmation figures; ``recheck_*`` (when present) come from a fresh
        check run only for the half-width figure.
        """
        s = self.searches.get(method)
        c = self.checks.get(method)
        f = self.formula_checks.get(method)
        rc = self.rechecks.get(method)
        return {
            "method": method,
            "n_formula": self.n_formula,
            "coverage_at_formula_n": None if f is None else f.coverage,
            "coverage_at_formula_n_mcse": None if f is None else f.coverage_mcse,
            "assurance_at_formula_n": None if f is None else f.assurance,
            "n_found": None if s is None else s.n,
            "reached": None if s is None else s.reached,
            "decision": decision_status(s),
            "criterion": None if s is None else (getattr(s, "criterion", "") or None),
            "criterion_text": None if s is None else (getattr(s, "criterion_text", "") or None),
            "stop_reason": None if s is None else s.stop_reason,
            "replicates_needed": None if s is None else getattr(s, "replicates_needed", None),
            "n_first": None if s is None else s.n_first,
            "n_range_low": None if s is None or s.n_range is None else s.n_range[0],
            "n_range_high": None if s is None or s.n_range is None else s.n_range[1],
            "coverage": None if s is None else s.coverage,
            "coverage_mcse": None if s is None else s.coverage_mcse,
            "miss_low": None if c is None else c.miss_low,
            "miss_low_mcse": None if c is None else getattr(c, "miss_low_mcse", None),
            "miss_high": None if c is None else c.miss_high,
            "miss_high_mcse": None if c is None else getattr(c, "miss_high_mcse", None),
            "degenerate_share": None if c is None else getattr(c, "degenerate_share", None),
            "assurance": None if s is None else s.assurance,
            "assurance_mcse": None if s is None else s.assurance_mcse,
            "margin_median": None if c is None else c.margin_median,
            "margin_p90": None if c is None else c.margin_p90,
            "exact": None if s is None else s.exact,
            "confirm_replicates": None if c is None or c.exact else c.replicates,
            "replicates_used": None if s is None else s.replicates_used,
            "recheck_coverage": None if rc is None else rc.coverage,
            "recheck_coverage_mcse": None if rc is None else rc.coverage_mcse,
            "recheck_replicates": None if rc is None else rc.replicates,
            "notes": self.notes_for(method),
        }

    def to_frame(self):
        import pandas as pd

        rows = [self.method_row(m) for m in self.methods]
        for r in rows:
            r["notes"] = " | ".join(r["notes"])
        return pd.DataFrame(rows)


@dataclass(frozen=True)
class SweepResults:
    """A sweep store read for a report: the cells and the store's record."""

    source: str
    frame: Any  # pandas.DataFrame, one row per cell (per n / per method)
    vary: tuple[str, ...]
    task: str
    meta: Mapping[str, str] = field(default_factory=dict)
    title: str = "Sweep"

    def to_dict(self) -> dict[str, Any]:
        from simcheck.results import clean_json

        ok = self.frame[self.frame["status"] == "ok"] if "status" in self.frame else self.frame
        return clean_json({
            "kind": "sweep",
            "title": self.title,
            "source": self.source,
            "task": self.task,
            "vary": list(self.vary),
            "cells": int(self.frame["cell_key"].nunique()) if "cell_key" in self.frame else len(self.frame),
            "rows_ok": int(len(ok)),
            "decisions": self.decisions(),
            "root_seed": self.meta.get("root_seed"),
            "versions": {k: self.meta.get(f"{k}_version") for k in ("simcheck", "numpy", "scipy", "python")},
        })

    def decisions(self) -> dict[str, int] | None:
        """How many finished rows of a search sweep are clear, undecided or not reached."""
        ok = self.frame[self.frame["status"] == "ok"] if "status" in self.frame else self.frame
        if self.task != "search" or "n" not in ok:
            return None
        kinds = [cell_outcome(r) for r in ok.to_dict("records")]
        return {"clear": kinds.count("clear"),
                "undecided": sum(k.startswith("undecided") for k in kinds),
                "not reached": kinds.count("not reached")}

    def to_frame(self):
        return self.frame


# ---------------------------------------------------------------------------
# sweep report
# ---------------------------------------------------------------------------
def read_sweep(path: str | Path, field_name: str = "STORE") -> SweepResults:
    """Read a sweep store (SQLite) for a report."""
    from simcheck.sweep.store import cells_frame, open_readonly

    conn = open_readonly(path, field_name)
    try:
        meta = dict(conn.execute("SELECT key, value FROM meta").fetchall())
    finally:
        conn.close()
    frame = cells_frame(path)
    reserved = {"cell_key", "cell_index", "task", "status", "error", "seconds", "finished_at", "worker", "root_seed"}
    vary = tuple(c for c in frame.columns if "." in c and c not in reserved and not c.startswith("targets."))
    # vary columns come first after the bookkeeping ones in cells_frame; keep only those named by a cell
    vary = tuple(c for c in vary if c in vary_keys(path))
    task = meta.get("task") or (str(frame["task"].iloc[0]) if len(frame) else "search")
    title = sweep_title(meta)
    return SweepResults(source=str(path), frame=frame, vary=vary, task=task, meta=meta, title=title)


def vary_keys(path: str | Path) -> list[str]:
    from simcheck.sweep.store import open_readonly, read_cells

    conn = open_readonly(path)
    try:
        keys: list[str] = []
        for cell in read_cells(conn):
            for k in cell["values"]:
                if k not in keys:
                    keys.append(k)
        return keys
    finally:
        conn.close()


def sweep_title(meta: Mapping[str, str]) -> str:
    import tomllib

    for key in ("base_text",):
        text = meta.get(key)
        if text:
            try:
                t = tomllib.loads(text).get("title")
            except tomllib.TOMLDecodeError:
                t = None
            if t:
                return f"Sweep: {t}"
    return "Sweep"


# ---------------------------------------------------------------------------
# running a scenario for a report
# ---------------------------------------------------------------------------
def curve_grid(n_points: Sequence[int | None], n_min: int, n_max: int, points: int = 41) -> list[int]:
    """Sample sizes for the figure curve: from about half the smallest to 1.5 times the largest marked n,
    geometrically spaced.

    The marked n values themselves are always included, so the figures show
    the exact coverage at the formula n and at the n found.
    """
    marks = sorted({int(n) for n in n_points if n is not None and n_min <= n <= n_max})
    if not marks:
        lo, hi = n_min, min(n_max, max(n_min * 50, n_min + 100))
    else:
        lo = max(n_min, int(math.floor(marks[0] * 0.5)))
        hi = min(n_max, int(math.ceil(marks[-1] * 1.5)))
    lo = max(lo, 2) if n_min >= 2 else lo
    if hi <= lo:
        hi = min(n_max, lo + max(1, points))
    if hi - lo + 1 <= points:
        grid = set(range(lo, hi + 1))
    else:
        # geometric spacing: coverage and assurance change fastest at small n
        ratio = (hi / max(lo, 1)) ** (1 / (points - 1))
        grid = {min(hi, max(lo, int(round(max(lo, 1) * ratio**i)))) for i in range(points)} | {lo, hi}
    return sorted(grid | set(marks))


def formula_for(design) -> Any | None:
    """``(FormulaResult, n)`` for a design (n counts clusters when clustered), or None
    when no formula applies; the same closed form as :func:`simcheck.search.formula_n`."""
    from simcheck.search import formula_result

    return formula_result(design)


def run_study(scenario, *, seed: int | None = None, progress: Progress = None, points: int = 41,
              units: str | None = None) -> StudyResults:
    """Formula n, the search for every method, a curve around the n found and a check at it.

    Parameters
    ----------
    scenario : simcheck.scenario.Scenario
        Loaded scenario (``load_scenario``).
    progress : callable, optional
        ``progress(message)`` for each stage (the CLI prints to stderr).
    seed : int, optional
        Root seed; default the scenario's, else one is drawn (and reported).
    points : int
        Number of n values on the figure curve.
    units : str, optional
        The data's units, for the half-width axis.
    """
    from simcheck.tasks import resolve_seed

    say = progress or (lambda _msg: None)
    design = scenario.design
    methods = tuple(scenario.methods) if scenario.methods else (design.method,)
    seed, drawn = resolve_seed(scenario, seed)
    if drawn:
        say(f"no seed given; using seed {seed}")
    R = scenario.replicates
    path = getattr(scenario, "path", "auto") or "auto"
    f = formula_for(design)
    formula, n_formula = (f if f is not None else (None, None))
    say(f"formula n: {n_formula if n_formula is not None else 'not available for this design'}")
    say(f"searching n for {', '.join(methods)} ...")
    common = dict(assurance=scenario.assurance, coverage_tolerance=scenario.coverage_tolerance, replicates=R,
                  rng=seed, n_min=scenario.n_min, n_max=scenario.n_max, budget=getattr(scenario, "budget", None), path=path,
                  window=getattr(scenario, "window", 1.25))
    searches, best = _search_each(design, methods, common)
    if n_formula is None:
        n_formula = next((r.n_formula for r in searches.values() if r.n_formula is not None), None)
    # one grid for every method, so their lines can be compared point by point
    marks = [n_formula] + [x for r in searches.values() for x in (r.n, r.best_coverage_n)]
    grid = curve_grid(marks, scenario.n_min, scenario.n_max, points)
    curves, checks, rechecks, formula_checks = _study_evaluations(design, methods, searches, grid, n_formula,
                                                                  R=R, seed=seed, path=path, say=say)
    return StudyResults(
        title=scenario.title,
        estimand=design.estimand,
        confidence=design.confidence,
        margin=design.margin,
        assurance=scenario.assurance,
        coverage_tolerance=scenario.coverage_tolerance,
        replicates=R,
        seed=seed,
        n_min=scenario.n_min,
        n_max=scenario.n_max,
        methods=methods,
        searches=searches,
        curves=curves,
        checks=checks,
        rechecks=rechecks,
        discrete=any(m is not None and m.discrete for m in (design.model, design.model_b)),
        n_formula=n_formula,
        formula=None if formula is None else formula.to_dict(),
        formula_checks=formula_checks,
        data=design.to_dict(),
        best=best,
        n_label=n_axis_label(design),
        value_label=value_axis_label(scenario, units),
        scenario=scenario.to_dict() if hasattr(scenario, "to_dict") else None,
    )


def _search_each(design, methods: tuple[str, ...], common: dict[str, Any]) -> tuple[dict[str, SearchResult], str | None]:
    """The search of every method (a comparison when several) and the best method, if any reaches."""
    import importlib

    # the module: the package attribute `simcheck.search` is the API function
    search = importlib.import_module("simcheck.search")
    if len(methods) > 1:
        comp = search.compare(design, list(methods), **common)
        return {r.method: r for r in comp.by_method}, comp.best
    only = search.find_n(design.with_method(methods[0]), **common)
    return {methods[0]: only}, methods[0] if only.reached else None


def _study_evaluations(design, methods, searches, grid, n_formula, *, R, seed, path, say):
    """Curves for the figures, the search's confirmations, and a re-check only where the
    search kept no half-widths for the half-width figure."""
    from simcheck import engine

    curves: dict[str, CurveResult] = {}
    checks: dict[str, CheckResult] = {}
    rechecks: dict[str, CheckResult] = {}
    formula_checks: dict[str, CheckResult] = {}
    for m in methods:
        d = design.with_method(m)
        r = searches.get(m)
        say(f"curve for {m}: {len(grid)} sample sizes from {grid[0]:,} to {grid[-1]:,} ...")
        curves[m] = engine.curve(d, grid, replicates=R, rng=seed, path=path)
        if n_formula is not None and n_formula in set(grid):
            formula_checks[m] = curves[m].at(n_formula)
        if r is None:
            continue
        if r.at_n is not None:
            # the search's own confirmation: the numbers the decision rests on, quoted everywhere
            checks[m] = r.at_n
        n_at = r.at_n.n if r.at_n is not None else (r.n if r.n is not None else r.best_coverage_n)
        if n_at is not None and (r.at_n is None or r.at_n.margin_values is None):
            say(f"re-check for {m} at n = {n_at:,} (half-widths for the figure) ...")
            rechecks[m] = engine.check(d, n_at, replicates=R, rng=seed, path=path)
    return curves, checks, rechecks, formula_checks


def is_store(path: str | Path) -> bool:
    """True when ``path`` looks like a sweep store (.sqlite/.db or SQLite magic bytes)."""
    p = Path(path)
    if p.suffix.lower() in (".sqlite", ".sqlite3", ".db"):
        return True
    try:
        with p.open("rb") as fh:
            return fh.read(16) == b"SQLite format 3\x00"
    except OSError:
        return False
