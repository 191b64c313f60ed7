"""Result objects: frozen dataclasses with ``to_dict()`` and ``to_frame()``.

``to_dict()`` gives exactly the JSON objects of the command-line contract
(INTERFACE.md) plus documented extra keys; NaN and infinities become None so
the output is valid JSON.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np


def clean_json(value: Any) -> Any:
    """Make a value JSON-safe: numpy scalars to Python, NaN/inf to None."""
    if isinstance(value, dict):
        return {k: clean_json(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [clean_json(v) for v in value]
    if isinstance(value, np.ndarray):
        return [clean_json(v) for v in value.tolist()]
    if isinstance(value, (np.bool_,)):
        return bool(value)
    if isinstance(value, np.integer):
        return int(value)
    if isinstance(value, (float, np.floating)):
        v = float(value)
        return v if math.isfinite(v) else None
    return value


@dataclass(frozen=True)
class CheckResult:
    """Coverage and achieved margin of one interval method at one n.

    ``n`` is the sample size of group a (or the number of clusters); ``n_b``
    the size of group b for two-sample estimands. Proportions (coverage,
    misses, assurance, degenerate share) are shares of replicates; on an exact
    path they are exact probabilities and the MCSEs are 0. ``degenerate``
    counts zero-width intervals (0 on exact paths, which have no replicates;
    ``degenerate_share`` is their probability there).
    """

    n: int
    replicates: int
    true_value: float
    coverage: float
    coverage_mcse: float
    miss_low: float
    miss_high: float
    margin_mean: float
    margin_median: float
    margin_p90: float
    assurance: float | None
    assurance_mcse: float | None
    method: str
    seed: int | None
    exact: bool
    estimand: str = "mean"
    confidence: float = 0.95
    target_margin: float | None = None
    n_b: int | None = None
    observations: int | None = None
    degenerate: int = 0
    path: str = "simulation"
    notes: tuple[str, ...] = ()
    #: Monte Carlo standard errors of the misses and half-width measures (0 on
    #: exact paths; None where no finite error exists, e.g. unbounded intervals)
    miss_low_mcse: float | None = None
    miss_high_mcse: float | None = None
    margin_mean_mcse: float | None = None
    margin_median_mcse: float | None = None
    margin_p90_mcse: float | None = None
    #: share (exact paths: probability) of zero-width intervals, which never
    #: count as meeting the margin
    degenerate_share: float = 0.0
    degenerate_share_mcse: float | None = None
    #: intervals that could not be computed (NaN limits): not covering, not
    #: within the margin, left out of the half-width mean and quantiles
    not_computed: int = 0
    # Distribution of the achieved half-width, for figures (not in to_dict):
    # simulated values (weights None) or exact support points with weights.
    margin_values: np.ndarray | None = field(default=None, repr=False, compare=False)
    margin_weights: np.ndarray | None = field(default=None, repr=False, compare=False)
    # target bound, margin at assurance, relative margin, demonstration plan
    # (filled by simcheck.engine.onesided.finish_rows; see bound_dict)
    bound: str = "two-sided"
    units: str | None = None
    margin_at_assurance: float | None = None
    assurance_level: float | None = None
    target_relative_margin: float | None = None
    relative_margin_mean: float | None = None
    relative_margin_median: float | None = None
    relative_margin_p90: float | None = None
    relative_margin_at_assurance: float | None = None
    limit: float | None = None
    events_allowed: int | None = None
    pass_probability: float | None = None
    plan_n: int | None = None

    def bound_dict(self) -> dict[str, Any]:
        """The keys of one-sided limits, relative margins and plans (issue 20)."""
        d: dict[str, Any] = {"bound": self.bound, "margin_at_assurance": self.margin_at_assurance,
                             "assurance_level": self.assurance_level}
        if self.units is not None:
            d["units"] = self.units
        if self.target_relative_margin is not None:
            d.update(target_relative_margin=self.target_relative_margin,
                     relative_margin_mean=self.relative_margin_mean,
                     relative_margin_median=self.relative_margin_median,
                     relative_margin_p90=self.relative_margin_p90,
                     relative_margin_at_assurance=self.relative_margin_at_assurance)
        if self.limit is not None:
            d.update(limit=self.limit, events_allowed=self.events_allowed, pass_probability=self.pass_probability,
                     plan_n=self.plan_n)
        return d

    def to_dict(self) -> dict[str, Any]:
        d = {
            "n": self.n,
            "replicates": self.replicates,
            "true_value": self.true_value,
            "coverage": self.coverage,
            "coverage_mcse": self.coverage_mcse,
            "miss_low": self.miss_low,
            "miss_low_mcse": self.miss_low_mcse,
            "miss_high": self.miss_high,
            "miss_high_mcse": self.miss_high_mcse,
            "margin_mean": self.margin_mean,
            "margin_mean_mcse": self.margin_mean_mcse,
            "margin_median": self.margin_median,
            "margin_median_mcse": self.margin_median_mcse,
            "margin_p90": self.margin_p90,
            "margin_p90_mcse": self.margin_p90_mcse,
            "assurance": self.assurance,
            "assurance_mcse": self.assurance_mcse,
            "method": self.method,
            "seed": self.seed,
            "exact": self.exact,
            "estimand": self.estimand,
            "confidence": self.confidence,
            "target_margin": self.target_margin,
            "n_b": self.n_b,
            "observations": self.observations,
            "degenerate": self.degenerate,
            "degenerate_share": self.degenerate_share,
            "degenerate_share_mcse": self.degenerate_share_mcse,
            "not_computed": self.not_computed,
            "path": self.path,
            "notes": list(self.notes),
        }
        d.update(self.bound_dict())
        return clean_json(d)

    def to_frame(self):
        import pandas as pd

        d = self.to_dict()
        d["notes"] = " | ".join(d["notes"])
        return pd.DataFrame([d])

    def __repr__(self) -> str:
        from simcheck.notebook import estimate, num

        return (f"CheckResult(method={self.method!r}, n={self.n}, coverage={estimate(self.coverage, self.coverage_mcse, self.exact)}, "
                f"miss_low={num(self.miss_low)}, miss_high={num(self.miss_high)}, margin_median={num(self.margin_median)}, "
                f"assurance={estimate(self.assurance, self.assurance_mcse, self.exact)}, replicates={self.replicates}, "
                f"seed={self.seed}, exact={self.exact})")

    def _repr_html_(self) -> str:
        from simcheck.notebook import estimate, html_table, margin_png, png_html

        rows = [("method", self.method), ("n", self.n), ("coverage", estimate(self.coverage, self.coverage_mcse, self.exact)),
                ("nominal", self.confidence), ("miss low / high", f"{self.miss_low:.4g} / {self.miss_high:.4g}"),
                ("margin mean / median / 90th pct", f"{self.margin_mean:.4g} / {self.margin_median:.4g} / {self.margin_p90:.4g}"),
                ("target margin", self.target_margin), ("assurance", estimate(self.assurance, self.assurance_mcse, self.exact)),
                ("replicates", self.replicates), ("seed", self.seed), ("path", self.path)]
        out = html_table(f"Check at n = {self.n}", rows)
        if self.margin_values is not None and len(self.margin_values):
            out += png_html(margin_png(self.margin_values, self.margin_weights, target=self.target_margin), "achieved half-width")
        return out


@dataclass(frozen=True)
class CurveResult:
    """One :class:`CheckResult` per n, in increasing n."""

    rows: tuple[CheckResult, ...]

    @property
    def n(self) -> np.ndarray:
        return np.array([r.n for r in self.rows], dtype=np.int64)

    def column(self, name: str) -> np.ndarray:
        return np.array([getattr(r, name) if getattr(r, name) is not None else np.nan for r in self.rows], dtype=float)

    def at(self, n: int) -> CheckResult:
        for r in self.rows:
            if r.n == n:
                return r
        raise KeyError(n)

    def to_dict(self) -> dict[str, Any]:
        return {"rows": [r.to_dict() for r in self.rows]}

    def to_frame(self):
        import pandas as pd

        if not self.rows:
            return pd.DataFrame()
        return pd.concat([r.to_frame() for r in self.rows], ignore_index=True)

    def __repr__(self) -> str:
        from simcheck.notebook import num

        if not self.rows:
            return "CurveResult(0 rows)"
        cov = self.column("coverage")
        first = self.rows[0]
        return (f"CurveResult({len(self.rows)} rows, method={first.method!r}, n={self.rows[0].n}..{self.rows[-1].n}, "
                f"coverage {num(np.nanmin(cov))}..{num(np.nanmax(cov))}, replicates={first.replicates}, "
                f"seed={first.seed}, exact={first.exact})")

    def _repr_html_(self) -> str:
        from simcheck.notebook import coverage_png, frame_html, png_html

        if not self.rows:
            return "<p>CurveResult: 0 rows</p>"
        cols = ["n", "coverage", "coverage_mcse", "miss_low", "miss_high", "margin_median", "assurance", "exact"]
        frame = self.to_frame()[cols]
        png = coverage_png(self.n, self.column("coverage"), self.column("coverage_mcse"),
                           confidence=self.rows[0].confidence)
        return (f"<p><b>Curve</b>: {self.rows[0].method}, {len(self.rows):,} values of n, seed {self.rows[0].seed}</p>"
                + frame_html(frame, max_rows=10) + png_html(png, "coverage against n"))


@dataclass(frozen=True)
class SearchResult:
    """The smallest n meeting the coverage and assurance targets.

    ``n`` is None when the targets are not reached by the search ceiling;
    then ``best_coverage`` / ``best_coverage_n`` say how close it came and
    ``methods_that_reach`` names methods that do reach them.
    """

    n: int | None
    reached: bool
    n_formula: int | None
    n_range: tuple[int, int] | None
    coverage: float | None
    coverage_mcse: float | None
    assurance: float | None
    assurance_mcse: float | None
    replicates_used: int
    targets: dict[str, Any]
    method: str
    seed: int | None
    n_b: int | None = None
    n_first: int | None = None
    stop_reason: str = ""
    exact: bool = False
    best_coverage: float | None = None
    best_coverage_n: int | None = None
    methods_that_reach: tuple[str, ...] = ()
    notes: tuple[str, ...] = ()
    #: "clear" when the evidence decides the answer, "undecided" when the
    #: replicate budget ran out before it did (then ``n`` is the conservative end)
    decision: str = "clear"
    #: short name of the stability criterion that defines ``n`` (a scenario key value)
    criterion: str = ""
    #: the criterion in one sentence, for tables, reports and the methods paragraph
    criterion_text: str = ""
    #: replicates per n that would likely settle an undecided answer (None when clear)
    replicates_needed: int | None = None
    #: share lost after enrolment (``target.dropout``); n counts the units analysed
    dropout: float = 0.0
    #: n to enrol, ceil(n / (1 - dropout)) (set with ``dropout``; None when n is None)
    n_enrolled: int | None = None
    n_b_enrolled: int | None = None
    #: stratified designs: the n of each stratum at ``n`` (JSON ``allocation``; only when stratified)
    allocation: dict[str, int] | None = None
    # Evaluations made during the search, for figures (not in to_dict).
    curve: CurveResult | None = field(default=None, repr=False, compare=False)
    at_n: CheckResult | None = field(default=None, repr=False, compare=False)

    @property
    def ratio_to_formula(self) -> float | None:
        if self.n is None or not self.n_formula:
            return None
        return self.n / self.n_formula

    def to_dict(self) -> dict[str, Any]:
        d = {
            "n": self.n,
            "reached": self.reached,
            "n_formula": self.n_formula,
            "n_range": list(self.n_range) if self.n_range is not None else None,
            "coverage": self.coverage,
            "coverage_mcse": self.coverage_mcse,
            "assurance": self.assurance,
            "assurance_mcse": self.assurance_mcse,
            "replicates_used": self.replicates_used,
            "targets": self.targets,
            "method": self.method,
            "seed": self.seed,
            "n_b": self.n_b,
            "n_first": self.n_first,
            "ratio_to_formula": self.ratio_to_formula,
            "stop_reason": self.stop_reason,
            "exact": self.exact,
            "best_coverage": self.best_coverage,
            "best_coverage_n": self.best_coverage_n,
            "methods_that_reach": list(self.methods_that_reach),
            "notes": list(self.notes),
            "decision": self.decision,
            "criterion": self.criterion,
            "criterion_text": self.criterion_text,
            "replicates_needed": self.replicates_needed,
            "dropout": self.dropout,
            "n_enrolled": self.n_enrolled if self.dropout else self.n,
            "n_b_enrolled": self.n_b_enrolled if self.dropout else self.n_b,
        }
        if self.allocation is not None:
            d["allocation"] = dict(self.allocation)
        return clean_json(d)

    def to_frame(self):
        import pandas as pd

        d = self.to_dict()
        if "allocation" in d:
            d["allocation"] = ", ".join(f"{k} {v}" for k, v in d["allocation"].items())
        d["n_range"] = None if d["n_range"] is None else f"{d['n_range'][0]}-{d['n_range'][1]}"
        d["targets"] = str(d["targets"])
        d["methods_that_reach"] = ", ".join(d["methods_that_reach"])
        d["notes"] = " | ".join(d["notes"])
        return pd.DataFrame([d])

    def __repr__(self) -> str:
        from simcheck.notebook import estimate

        rng = f"{self.n_range[0]}-{self.n_range[1]}" if self.n_range else "-"
        return (f"SearchResult(method={self.method!r}, n={self.n}, n_range={rng}, reached={self.reached}, "
                f"decision={getattr(self, 'decision', '')!r}, criterion={getattr(self, 'criterion', '')!r}, "
                f"coverage={estimate(self.coverage, self.coverage_mcse, self.exact)}, n_formula={self.n_formula}, "
                f"replicates_used={self.replicates_used}, seed={self.seed})")

    def _repr_html_(self) -> str:
        from simcheck.notebook import coverage_png, estimate, html_table, png_html

        rng = f"{self.n_range[0]}-{self.n_range[1]}" if self.n_range else "-"
        rows = [("method", self.method), ("n", self.n if self.n is not None else "not reached"), ("n range", rng),
                ("decision", getattr(self, "decision", "")), ("criterion", getattr(self, "criterion_text", "") or getattr(self, "criterion", "")),
                ("coverage at n", estimate(self.coverage, self.coverage_mcse, self.exact)),
                ("assurance at n", estimate(self.assurance, self.assurance_mcse, self.exact)),
                ("formula n", self.n_formula), ("replicates used", self.replicates_used), ("seed", self.seed),
                ("stop reason", self.stop_reason)]
        out = html_table("Search: smallest n meeting the targets", rows)
        c = self.curve
        if c is not None and len(c.rows) > 1:
            png = coverage_png(c.n, c.column("coverage"), c.column("coverage_mcse"),
                               confidence=c.rows[0].confidence, mark=self.n)
            out += png_html(png, "coverage around the n found")
        return out


@dataclass(frozen=True)
class MethodComparison:
    """Searches for several interval methods on the same draws."""

    by_method: tuple[SearchResult, ...]
    best: str | None

    def to_dict(self) -> dict[str, Any]:
        return {"by_method": [r.to_dict() for r in self.by_method], "best": self.best}

    def to_frame(self):
        import pandas as pd

        return pd.concat([r.to_frame() for r in self.by_method], ignore_index=True)

    def __repr__(self) -> str:
        parts = ", ".join(f"{r.method}: n={r.n}" for r in self.by_method)
        return f"MethodComparison(best={self.best!r}, {parts})"

    def _repr_html_(self) -> str:
        from simcheck.notebook import frame_html

        cols = [c for c in ("method", "n", "n_range", "reached", "decision", "coverage", "coverage_mcse",
                            "assurance", "n_formula", "seed") if c in self.to_frame().columns]
        return f"<p><b>Methods compared</b>; best: {self.best}</p>" + frame_html(self.to_frame()[cols])
