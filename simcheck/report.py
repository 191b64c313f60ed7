"""Reports for a methods section: results table, figures, methods paragraph.

Two kinds of report, both written by :func:`write_report` as ``report.md``
(figures as linked PNG files), a self-contained ``report.html`` (figures
embedded as base64 PNG), ``results.csv``, ``summary.json`` and every figure
as PNG, SVG and PDF under ``figures/``:

* a **study** report (:class:`StudyResults`) of one scenario: closed-form n,
  the search for each interval method, a coverage curve around the n found
  and a check at it — built by :func:`run_study`;
* a **sweep** report (:class:`SweepResults`) of a sweep store — built by
  :func:`read_sweep`.

All text is produced from the numbers; nothing here draws random numbers, so
the same inputs give byte-identical files.
"""

from __future__ import annotations

import base64
import html
import json
import math
import platform
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Callable, Mapping, Sequence

from simcheck import CAUTION, __version__
from simcheck.errors import InputError
from simcheck.results import CheckResult, CurveResult, SearchResult

__all__ = ["StudyResults", "SweepResults", "ReportFiles", "run_study", "read_sweep", "write_report", "report",
           "methods_paragraph", "describe_model", "curve_grid", "formula_for", "is_store", "check_out_dir"]

Progress = Callable[[str], None] | None

ESTIMAND_TEXT = {
    "mean": "the mean",
    "proportion": "the proportion",
    "mean-diff": "the difference of two means (group a minus group b)",
    "proportion-diff": "the difference of two proportions (group a minus group b)",
}

# Plain-language names of model parameters in the methods paragraph.
# Published interval names as written in prose.
METHOD_TEXT = {
    "z": "z (known SD)",
    "t": "Student t",
    "welch": "Welch",
    "cox": "Cox lognormal",
    "johnson-t": "skewness-corrected (Johnson) t",
    "bootstrap-percentile": "percentile bootstrap",
    "bootstrap-bca": "bootstrap BCa",
    "bootstrap-t": "bootstrap-t",
    "wald": "Wald",
    "wilson": "Wilson",
    "agresti-coull": "Agresti–Coull",
    "clopper-pearson": "Clopper–Pearson",
    "jeffreys": "Jeffreys",
    "newcombe": "Newcombe",
    "agresti-caffo": "Agresti–Caffo",
    "cluster-t": "cluster-level t",
}


def method_text(name: str) -> str:
    return METHOD_TEXT.get(name, name)


PARAM_TEXT = {
    "cv": "CV",
    "sd": "SD",
    "meanlog": "log-scale mean",
    "sdlog": "log-scale SD",
    "df": "degrees of freedom",
    "p": "event probability",
    "zero_prob": "share of zeros",
}


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
        Method -> :class:`CheckResult` at the n found (with ``margin_values``).
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

    def to_dict(self) -> dict[str, Any]:
        from simcheck.results import _clean

        return _clean({
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
            "by_method": [self.method_row(m) for m in self.methods],
            "methods_paragraph": methods_paragraph(self),
            "data": dict(self.data),
            "versions": dict(self.versions),
        })

    def targets(self) -> dict[str, Any]:
        return {"estimand": self.estimand, "confidence": self.confidence, "margin": self.margin,
                "assurance": self.assurance, "coverage_tolerance": self.coverage_tolerance}

    def method_row(self, method: str) -> dict[str, Any]:
        """One row of the results table (plain values)."""
        s = self.searches.get(method)
        c = self.checks.get(method)
        f = self.formula_checks.get(method)
        return {
            "method": method,
            "n_formula": self.n_formula,
            "coverage_at_formula_n": None if f is None else f.coverage,
            "coverage_at_formula_n_mcse": None if f is None else f.coverage_mcse,
            "assurance_at_formula_n": None if f is None else f.assurance,
            "n_found": None if s is None else s.n,
            "reached": None if s is None else s.reached,
            "n_range_low": None if s is None or s.n_range is None else s.n_range[0],
            "n_range_high": None if s is None or s.n_range is None else s.n_range[1],
            "coverage": None if c is None else c.coverage,
            "coverage_mcse": None if c is None else c.coverage_mcse,
            "miss_low": None if c is None else c.miss_low,
            "miss_high": None if c is None else c.miss_high,
            "assurance": None if c is None else c.assurance,
            "assurance_mcse": None if c is None else c.assurance_mcse,
            "margin_median": None if c is None else c.margin_median,
            "margin_p90": None if c is None else c.margin_p90,
            "exact": None if c is None else c.exact,
            "replicates_used": None if s is None else s.replicates_used,
        }

    def to_frame(self):
        import pandas as pd

        return pd.DataFrame([self.method_row(m) for m in self.methods])


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
        from simcheck.results import _clean

        ok = self.frame[self.frame["status"] == "ok"] if "status" in self.frame else self.frame
        return _clean({
            "kind": "sweep",
            "title": self.title,
            "source": self.source,
            "task": self.task,
            "vary": list(self.vary),
            "cells": int(self.frame["cell_key"].nunique()) if "cell_key" in self.frame else len(self.frame),
            "rows_ok": int(len(ok)),
            "root_seed": self.meta.get("root_seed"),
            "versions": {k: self.meta.get(f"{k}_version") for k in ("simcheck", "numpy", "scipy", "python")},
        })

    def to_frame(self):
        return self.frame


@dataclass(frozen=True)
class ReportFiles:
    """Paths written by :func:`write_report`."""

    out_dir: Path
    markdown: Path
    html: Path
    table: Path
    summary: Path
    figures: Mapping[str, Mapping[str, Path]]

    def to_dict(self) -> dict[str, Any]:
        return {
            "out_dir": str(self.out_dir),
            "markdown": str(self.markdown),
            "html": str(self.html),
            "table": str(self.table),
            "summary": str(self.summary),
            "figures": {k: {f: str(p) for f, p in v.items()} for k, v in self.figures.items()},
        }

    def to_frame(self):
        import pandas as pd

        rows = [{"figure": k, "format": f, "path": str(p)} for k, v in self.figures.items() for f, p in v.items()]
        return pd.DataFrame(rows)

    def all_paths(self) -> list[Path]:
        return [self.markdown, self.html, self.table, self.summary] + [p for v in self.figures.values() for p in v.values()]


# ---------------------------------------------------------------------------
# number formatting
# ---------------------------------------------------------------------------
def _num(x: Any, digits: int = 3) -> str:
    if x is None or (isinstance(x, float) and not math.isfinite(x)):
        return "–"
    if isinstance(x, bool):
        return "yes" if x else "no"
    if isinstance(x, int):
        return f"{x:,}"
    return f"{float(x):.{digits}f}"


def _g(x: Any) -> str:
    if x is None:
        return "–"
    if isinstance(x, int) and not isinstance(x, bool):
        return f"{x:,}"
    if isinstance(x, float):
        return f"{x:,g}" if abs(x) >= 1000 else f"{x:g}"
    return str(x)


def _pct(x: float | None) -> str:
    return "–" if x is None else f"{100 * x:g}%"


def _mcse_digits(se: float | None) -> int:
    """Decimals enough to show the MCSE's first significant digit (at least 3)."""
    if not se or not math.isfinite(se) or se <= 0:
        return 3
    return max(3, min(6, -int(math.floor(math.log10(se)))))


def _est(value: float | None, se: float | None, exact: bool | None = False, inline: bool = False) -> str:
    """'0.944 (MCSE 0.002)'; with ``inline`` '0.944, MCSE 0.002' for use inside parentheses."""
    if value is None:
        return "–"
    if exact or not se:
        return f"{value:.{3 if not exact else 4}f}" + ((", exact" if inline else " (exact)") if exact else "")
    d = _mcse_digits(se)
    return f"{value:.{d}f}, MCSE {se:.{d}f}" if inline else f"{value:.{d}f} (MCSE {se:.{d}f})"


# ---------------------------------------------------------------------------
# the document model: blocks rendered to Markdown and to HTML
# ---------------------------------------------------------------------------
@dataclass
class _Figure:
    name: str
    caption: str
    png: Path


class _Doc:
    def __init__(self, title: str) -> None:
        self.title = title
        self.blocks: list[tuple[str, Any]] = []

    def heading(self, text: str) -> None:
        self.blocks.append(("h2", text))

    def para(self, text: str) -> None:
        self.blocks.append(("p", text))

    def quote(self, text: str) -> None:
        self.blocks.append(("quote", text))

    def code(self, text: str) -> None:
        self.blocks.append(("code", text))

    def items(self, rows: Sequence[str]) -> None:
        self.blocks.append(("ul", list(rows)))

    def table(self, headers: Sequence[str], rows: Sequence[Sequence[str]]) -> None:
        self.blocks.append(("table", (list(headers), [list(r) for r in rows])))

    def figure(self, fig: _Figure) -> None:
        self.blocks.append(("figure", fig))

    def markdown(self, base: Path) -> str:
        out = [f"# {self.title}", ""]
        for kind, b in self.blocks:
            if kind == "h2":
                out += [f"## {b}", ""]
            elif kind == "p":
                out += [b, ""]
            elif kind == "quote":
                out += ["> " + b, ""]
            elif kind == "ul":
                out += [f"- {r}" for r in b] + [""]
            elif kind == "code":
                out += ["```toml", b.rstrip("\n"), "```", ""]
            elif kind == "table":
                headers, rows = b
                esc = lambda s: str(s).replace("|", "\\|")  # noqa: E731
                out.append("| " + " | ".join(esc(h) for h in headers) + " |")
                out.append("|" + "|".join("---" for _ in headers) + "|")
                out += ["| " + " | ".join(esc(c) for c in r) + " |" for r in rows]
                out.append("")
            elif kind == "figure":
                rel = b.png.relative_to(base).as_posix()
                out += [f"![{b.name} figure]({rel})", "", f"*{b.caption}* (also as "
                        f"[SVG]({Path(rel).with_suffix('.svg').as_posix()}) and "
                        f"[PDF]({Path(rel).with_suffix('.pdf').as_posix()}))", ""]
        return "\n".join(out).rstrip() + "\n"

    def html(self) -> str:
        e = html.escape
        body = [f"<h1>{e(self.title)}</h1>"]
        for kind, b in self.blocks:
            if kind == "h2":
                body.append(f"<h2>{e(b)}</h2>")
            elif kind == "p":
                body.append(f"<p>{_inline(b)}</p>")
            elif kind == "quote":
                body.append(f'<blockquote class="paste">{_inline(b)}</blockquote>')
            elif kind == "code":
                body.append(f"<pre><code>{e(b)}</code></pre>")
            elif kind == "ul":
                body.append("<ul>" + "".join(f"<li>{_inline(r)}</li>" for r in b) + "</ul>")
            elif kind == "table":
                headers, rows = b
                head = "".join(f"<th>{e(h)}</th>" for h in headers)
                trs = "".join("<tr>" + "".join(f"<td>{e(str(c), quote=False)}</td>" for c in r) + "</tr>" for r in rows)
                body.append(f"<table><thead><tr>{head}</tr></thead><tbody>{trs}</tbody></table>")
            elif kind == "figure":
                data = base64.b64encode(b.png.read_bytes()).decode("ascii")
                body.append(f'<figure><img alt="{e(b.name)} figure" src="data:image/png;base64,{data}">'
                            f"<figcaption>{e(b.caption)}</figcaption></figure>")
        return _HTML_PAGE.format(title=e(self.title), body="\n".join(body))


def _inline(text: str) -> str:
    """Escape, then turn the Markdown `code` spans we write into <code>."""
    parts = html.escape(text, quote=False).split("`")
    return "".join(f"<code>{p}</code>" if i % 2 else p for i, p in enumerate(parts))


_HTML_PAGE = """<!DOCTYPE html>
<html lang="en">
<head>
<meta charset="utf-8">
<meta name="viewport" content="width=device-width, initial-scale=1">
<meta name="generator" content="simcheck">
<title>{title}</title>
<style>
body {{ font-family: "DejaVu Sans", Helvetica, Arial, sans-serif; max-width: 52rem; margin: 2rem auto;
       padding: 0 1rem; line-height: 1.45; color: #111; }}
h1 {{ font-size: 1.5rem; }} h2 {{ font-size: 1.15rem; margin-top: 2rem; border-bottom: 1px solid #ccc; }}
table {{ border-collapse: collapse; font-size: 0.85rem; margin: 0.5rem 0; }}
th, td {{ border: 1px solid #bbb; padding: 0.2rem 0.45rem; text-align: left; vertical-align: top; }}
th {{ background: #f2f2f2; }}
figure {{ margin: 1rem 0; }} figure img {{ max-width: 100%; }}
figcaption {{ font-size: 0.85rem; }}
blockquote.paste {{ border-left: 4px solid #0072B2; margin: 0.5rem 0; padding: 0.3rem 0.8rem; background: #f7f9fb; }}
code {{ font-size: 0.9em; }}
</style>
</head>
<body>
{body}
</body>
</html>
"""


# ---------------------------------------------------------------------------
# wording
# ---------------------------------------------------------------------------
def _join(words: Sequence[str]) -> str:
    words = list(words)
    if len(words) <= 1:
        return "".join(words)
    return ", ".join(words[:-1]) + " and " + words[-1]


def describe_model(d: Mapping[str, Any]) -> str:
    """'a lognormal distribution with mean 6 and CV 1.2' from a model's to_dict()."""
    if not d:
        return "the assumed data model"
    name = str(d.get("model", "model"))
    skip = {"model", "true_mean", "true_sd", "true_skewness", "true_value_note"}
    parts = []
    for k, v in d.items():
        if k in skip or isinstance(v, (dict, list)):
            continue
        parts.append(f"{PARAM_TEXT.get(k, k.replace('_', ' '))} {_g(v)}")
    text = f"a {name} distribution" if not name[0:1].lower() in "aeiou" else f"an {name} distribution"
    return text + (f" with {_join(parts)}" if parts else "")


def _model_text(data: Mapping[str, Any]) -> str:
    if "data_a" in data:
        return (f"{describe_model(data['data_a'])} in group a and {describe_model(data['data_b'])} in group b "
                f"(group b {_g(data.get('ratio', 1.0))} times the size of group a)")
    return describe_model(data.get("data", {}))


def _interval_text(methods: Sequence[str], confidence: float) -> str:
    names = _join([method_text(m) for m in methods])
    kind = "interval" if len(methods) == 1 else "intervals"
    return f"the two-sided {_pct(confidence)} {names} {kind}"


def methods_paragraph(study: StudyResults) -> str:
    """A ready-to-paste paragraph: what was simulated, how, and the n chosen and why."""
    s = study
    any_exact = any(c.exact for c in s.checks.values())
    all_exact = bool(s.checks) and all(c.exact for c in s.checks.values())
    est = ESTIMAND_TEXT.get(s.estimand, s.estimand)
    unit = "clusters" if "clusters" in s.data else "observations"
    parts = [f"We checked the planned sample size by simulation (simcheck {s.versions.get('simcheck', __version__)}; "
             f"NumPy {s.versions.get('numpy', '?')}, SciPy {s.versions.get('scipy', '?')})."]
    parts.append(f"Data were assumed to follow {_model_text(s.data)}.")
    if "clusters" in s.data:
        cl = s.data["clusters"]
        size = cl.get("size", cl.get("size_mean"))
        parts.append(f"Observations came in clusters of {_g(size)} with intracluster correlation {_g(cl.get('icc'))}; "
                     f"n counts clusters.")
    if "population" in s.data:
        parts.append(f"Samples were drawn without replacement from a finite population of "
                     f"{_g(s.data['population'].get('size'))} units.")
    if all_exact:
        how = ("by enumerating the binomial distribution of the event count"
               if s.estimand in ("proportion", "proportion-diff")
               else "from the sampling law of the sample mean and variance")
        parts.append(f"For each candidate sample size n, coverage of {_interval_text(s.methods, s.confidence)} for {est} "
                     f"was computed exactly {how} instead of by simulation, so it carries no Monte Carlo error.")
    else:
        what = (f"n observations in group a and {_g(s.data.get('ratio', 1.0))} × n (rounded up) in group b"
                if "data_a" in s.data else f"n {unit}")
        parts.append(f"For each candidate sample size n we drew {s.replicates:,} independent samples of {what} and "
                     f"computed {_interval_text(s.methods, s.confidence)} for {est} in each.")
        parts.append("Coverage is the share of intervals that contained the true value; its Monte Carlo standard "
                     "error (MCSE) is sqrt(c(1 − c)/R) for coverage c estimated from R samples"
                     + (" (methods with an exact path were enumerated instead)." if any_exact else "."))
    if s.margin is not None:
        parts.append(f"The achieved margin of error is half the width of each interval; assurance is the share of "
                     f"samples whose half-width was at most the target of {_g(s.margin)}.")
    if s.n_formula is not None:
        f = s.formula or {}
        kind = f.get("multiplier_kind", "z")
        deff = f.get("design_effect")
        extra = f", design effect {_g(deff)}" if deff not in (None, 1, 1.0) else ""
        fc = [(m, s.formula_checks[m]) for m in s.methods if m in s.formula_checks]
        nf_unit = f" {unit}" if unit == "clusters" else ""
        parts.append(f"The closed-form formula ({kind} multiple{extra}) gives n = {s.n_formula:,}{nf_unit} for a "
                     f"half-width of {_g(s.margin)}" + (";" if fc else "."))
        if fc:
            said = []
            for m, c in fc:
                a = f" and assurance {c.assurance:.3f}" if c.assurance is not None else ""
                who = f" with the {method_text(m)} interval" if len(s.methods) > 1 else ""
                said.append(f"coverage {_est(c.coverage, c.coverage_mcse, c.exact)}{a}{who}")
            gave = "the exact computation gave" if all(c.exact for _, c in fc) else "the simulation gave"
            parts[-1] += f" at that n {gave} " + "; ".join(said) + "."
    crit = [f"coverage at least {_g(round(s.confidence - s.coverage_tolerance, 6))} (the nominal "
            f"{_g(s.confidence)} less a tolerance of {_g(s.coverage_tolerance)})"]
    if s.assurance is not None and s.margin is not None:
        crit.append(f"an assurance of at least {_g(s.assurance)}")
    parts.append(f"We searched n from {s.n_min:,} to {s.n_max:,} for the smallest n with {_join(crit)}.")
    for m in s.methods:
        r = s.searches.get(m)
        if r is None:
            continue
        who = f"With the {method_text(m)} interval the" if len(s.methods) > 1 else "The"
        if r.reached and r.n is not None:
            c = s.checks.get(m)
            cov = (_est(c.coverage, c.coverage_mcse, c.exact, inline=True) if c is not None
                   else _est(r.coverage, r.coverage_mcse, r.exact, inline=True))
            txt = f"{who} smallest such n was {r.n:,}"
            if r.n_b is not None:
                txt += f" in group a and {r.n_b:,} in group b"
            txt += f" (coverage {cov}"
            if c is not None and not c.exact and c.replicates != s.replicates:
                txt += f", from {c.replicates:,} fresh samples at that n"
            ass = c.assurance if c is not None else r.assurance
            if ass is not None:
                txt += f", assurance {ass:.3f}"
            txt += ")"
            if r.n_range is not None and r.n_range[0] != r.n_range[1]:
                txt += f"; sample sizes from {r.n_range[0]:,} to {r.n_range[1]:,} are consistent with the Monte Carlo error"
            parts.append(txt + ".")
        else:
            txt = f"{who} targets were not met by any n up to {s.n_max:,}"
            if r.best_coverage is not None and r.best_coverage_n is not None:
                txt += f" (highest coverage {r.best_coverage:.3f} at n = {r.best_coverage_n:,})"
            parts.append(txt + ".")
    if len(s.methods) > 1 and s.best:
        best = s.searches.get(s.best)
        if best is not None and best.n is not None:
            parts.append(f"We chose n = {best.n:,} with the {method_text(s.best)} interval, the method that met the targets with "
                         f"the fewest {unit}.")
    if s.seed is not None:
        parts.append(f"All random numbers derive from the seed {s.seed}, so every number here can be reproduced exactly.")
    else:
        parts.append("No seed was fixed, so a rerun gives slightly different numbers.")
    return " ".join(parts)


# ---------------------------------------------------------------------------
# study report
# ---------------------------------------------------------------------------
def study_figures(study: StudyResults) -> dict[str, Any]:
    """The study's figures, by name: ``coverage``, ``margin``, ``misses``."""
    from simcheck import figures as F

    label = {m: f"{m} interval" for m in study.methods}
    found = {label[m]: s.n for m, s in study.searches.items() if m in label}
    curves = {label[m]: study.curves[m] for m in study.methods if m in study.curves and study.curves[m].rows}
    out: dict[str, Any] = {}
    if curves:
        out["coverage"] = F.coverage_figure(curves, confidence=study.confidence, tolerance=study.coverage_tolerance,
                                            n_formula=study.n_formula, n_found=found, n_label=study.n_label)
    checks = {label[m]: study.checks[m] for m in study.methods if m in study.checks}
    if checks and any(c.margin_values is not None for c in checks.values()):
        has_assurance = any(r.assurance is not None for c in curves.values() for r in c.rows)
        out["margin"] = F.margin_figure(checks, target_margin=study.margin, curves=curves if has_assurance else None,
                                        assurance=study.assurance, n_found=found, value_label=study.value_label,
                                        n_label=study.n_label)
    if curves:
        out["misses"] = F.miss_figure(curves, confidence=study.confidence, n_found=found, n_formula=study.n_formula,
                                      n_label=study.n_label)
    return out


def _captions_study(study: StudyResults, names: Sequence[str]) -> dict[str, str]:
    band = "Shading: estimate ± 2 MCSE (about a 95% Monte Carlo band)."
    low = study.confidence - study.coverage_tolerance
    cap = {
        "coverage": (f"Coverage against n. Solid black line: nominal {_g(study.confidence)}; grey band down to the "
                     f"lowest accepted coverage {_g(round(low, 6))}; dotted line: formula n; dashed lines: n found. "
                     + band),
        "margin": ("Achieved half-width. A: distribution of the half-width at the n found, with the target margin; "
                   "the curve's height at the target is the assurance. B: assurance against n with the required "
                   "assurance. " + band),
        "misses": (f"Non-coverage split by side: shares of intervals wholly below and wholly above the true value; "
                   f"an equal-tailed interval puts about {_g(round((1 - study.confidence) / 2, 6))} on each side. "
                   + band),
    }
    return {n: f"Figure {i + 1}. {cap[n]}" for i, n in enumerate(names)}


def _study_doc(study: StudyResults, figs: dict[str, Path], base: Path) -> _Doc:
    s = study
    doc = _Doc(s.title)
    doc.para(f"Written by simcheck {s.versions.get('simcheck', __version__)}. All numbers below come from the "
             f"scenario's data model and seed; they can be reproduced by running the same scenario again.")
    doc.heading("Targets")
    rows = [["Estimand", ESTIMAND_TEXT.get(s.estimand, s.estimand)],
            ["Confidence level", _g(s.confidence)],
            ["Target margin (half-width)", _g(s.margin)],
            ["Required assurance (share of samples with half-width ≤ target)", _g(s.assurance)],
            ["Coverage tolerance (accepted shortfall below the confidence level)", _g(s.coverage_tolerance)],
            ["Lowest accepted coverage", _g(round(s.confidence - s.coverage_tolerance, 6))]]
    doc.table(["Target", "Value"], rows)
    doc.heading("Data model and parameters")
    doc.para(f"Assumed data: {_model_text(s.data)}.")
    doc.table(["Quantity", "Value"], _data_rows(s.data))
    doc.heading("Interval methods")
    doc.items([f"`{m}`" + (" (needs the least n)" if m == s.best and len(s.methods) > 1 else "") for m in s.methods])
    doc.heading("Simulation settings")
    doc.table(["Setting", "Value"], [
        ["Replicates (simulated samples per n)", f"{s.replicates:,}"],
        ["Seed", "none (not reproducible)" if s.seed is None else str(s.seed)],
        ["Search range of n", f"{s.n_min:,} to {s.n_max:,}"],
        ["Versions", ", ".join(f"{k} {v}" for k, v in s.versions.items())],
    ])
    doc.heading("Results")
    if s.n_formula is not None:
        f = s.formula or {}
        doc.para(f"Closed-form n: {s.n_formula:,} ({f.get('multiplier_kind', 'z')} multiple "
                 f"{_num(f.get('multiplier'))}" + (f", n for group b {f['n_b']:,}" if f.get("n_b") else "") + ").")
        if f.get("formula"):
            doc.para(f"Formula: `{f['formula']}`" + (f"; it assumes {_join(list(f['assumptions']))}."
                                                     if f.get("assumptions") else "."))
    headers = ["Method", "Coverage at formula n", "n found", "n consistent with MC error", "Coverage at n found",
               "Below / above", "Assurance", "Half-width median / 90th pct"]
    table_rows = []
    for m in s.methods:
        r = s.method_row(m)
        lo, hi = r["n_range_low"], r["n_range_high"]
        rng = "–" if lo is None else (f"{lo:,}" if lo == hi else f"{lo:,}–{hi:,}")
        n_found = "not reached" if r["reached"] is False else _num(r["n_found"])
        table_rows.append([
            m,
            _est(r["coverage_at_formula_n"], r["coverage_at_formula_n_mcse"], r["exact"]),
            n_found, rng,
            _est(r["coverage"], r["coverage_mcse"], r["exact"]),
            f"{_num(r['miss_low'], 4)} / {_num(r['miss_high'], 4)}",
            _est(r["assurance"], r["assurance_mcse"], r["exact"]),
            f"{_num(r['margin_median'])} / {_num(r['margin_p90'])}",
        ])
    doc.table(headers, table_rows)
    notes: list[str] = []
    for m in s.methods:
        for src in (s.searches.get(m), s.checks.get(m)):
            for n in (src.notes if src is not None else ()):
                t = f"{m}: {n}" if len(s.methods) > 1 else n
                if t not in notes:
                    notes.append(t)
    if notes:
        doc.para("Notes from the computation:")
        doc.items(notes)
    doc.heading("Figures")
    caps = _captions_study(s, list(figs))
    for name, png in figs.items():
        doc.figure(_Figure(name, caps[name], png))
    doc.heading("Methods paragraph (ready to paste)")
    doc.quote(methods_paragraph(s))
    doc.heading("Caution")
    doc.para(CAUTION)
    return doc


def _data_rows(data: Mapping[str, Any]) -> list[list[str]]:
    rows: list[list[str]] = []

    def model_rows(prefix: str, d: Mapping[str, Any]) -> None:
        for k, v in d.items():
            if isinstance(v, (dict, list)):
                v = json.dumps(v, sort_keys=True)
            rows.append([f"{prefix}{k.replace('_', ' ')}", _g(v)])

    for key, label in (("data", ""), ("data_a", "group a: "), ("data_b", "group b: ")):
        if key in data:
            model_rows(label, data[key])
    for key in ("true_value", "ratio", "resamples"):
        if key in data:
            rows.append([key.replace("_", " "), _g(data[key])])
    for key in ("clusters", "population"):
        if key in data:
            for k, v in data[key].items():
                rows.append([f"{key}: {k.replace('_', ' ')}", _g(v)])
    return rows


# ---------------------------------------------------------------------------
# sweep report
# ---------------------------------------------------------------------------
def read_sweep(path: str | Path, field_name: str = "STORE") -> SweepResults:
    """Read a sweep store (SQLite) for a report."""
    from simcheck.sweep_store import cells_frame, open_readonly

    conn = open_readonly(path, field_name)
    try:
        meta = dict(conn.execute("SELECT key, value FROM meta").fetchall())
    finally:
        conn.close()
    frame = cells_frame(path)
    reserved = {"cell_key", "cell_index", "task", "status", "error", "seconds", "finished_at", "worker", "root_seed"}
    vary = tuple(c for c in frame.columns if "." in c and c not in reserved and not c.startswith("targets."))
    # vary columns come first after the bookkeeping ones in cells_frame; keep only those named by a cell
    vary = tuple(c for c in vary if c in _vary_keys(path))
    task = meta.get("task") or (str(frame["task"].iloc[0]) if len(frame) else "search")
    title = _sweep_title(meta)
    return SweepResults(source=str(path), frame=frame, vary=vary, task=task, meta=meta, title=title)


def _vary_keys(path: str | Path) -> list[str]:
    from simcheck.sweep_store import open_readonly, read_cells

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


def _sweep_title(meta: Mapping[str, str]) -> str:
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


def _sweep_plot_frame(sw: SweepResults) -> tuple[Any, list[str], str]:
    fr = sw.frame
    if "status" in fr:
        fr = fr[fr["status"] == "ok"]
    vary = list(sw.vary)
    if "method" in fr.columns and "method.interval" not in vary and fr["method"].nunique() > 1:
        vary.append("method")
    if sw.task in ("check", "curve"):
        value = "coverage"
        if "n" in fr.columns and fr["n"].nunique() > 1:
            vary.append("n")
    else:
        value = "n"
    return fr, vary, value


def sweep_figures(sw: SweepResults) -> dict[str, Any]:
    from simcheck import figures as F

    fr, vary, value = _sweep_plot_frame(sw)
    if fr.empty or value not in fr.columns or fr[value].notna().sum() == 0 or not vary:
        return {}
    conf = _first(fr, "confidence")
    tol = _first(fr, "targets.coverage_tolerance")
    out = {"sweep": F.sweep_figure(fr, value=value, vary=vary, confidence=conf, tolerance=tol)}
    return out


def _first(fr, col: str) -> float | None:
    if col in fr.columns and fr[col].notna().any():
        return float(fr[col].dropna().iloc[0])
    return None


def _sweep_doc(sw: SweepResults, figs: dict[str, Path], base: Path) -> _Doc:
    doc = _Doc(sw.title)
    fr, vary, value = _sweep_plot_frame(sw)
    total = int(sw.frame["cell_key"].nunique()) if "cell_key" in sw.frame else len(sw.frame)
    failed = int(sw.frame.loc[sw.frame["status"] != "ok", "cell_key"].nunique()) if "status" in sw.frame else 0
    doc.para(f"Written by simcheck {__version__} from the sweep store `{Path(sw.source).name}`: {total:,} cells "
             f"(task `{sw.task}`)" + (f", of which {failed:,} failed and are left out of the figures" if failed else "")
             + ".")
    doc.heading("What was varied")
    levels = []
    for c in sw.vary:
        vals = sorted(sw.frame[c].dropna().unique().tolist(), key=str)
        levels.append([c, ", ".join(_g(v) for v in vals)])
    doc.table(["Parameter", "Levels"], levels or [["–", "–"]])
    doc.heading("Simulation settings")
    m = sw.meta
    doc.table(["Setting", "Value"], [
        ["Root seed", m.get("root_seed", "–")],
        ["Versions", ", ".join(f"{k} {m[f'{k}_version']}" for k in ("simcheck", "numpy", "scipy", "python")
                               if m.get(f"{k}_version"))],
    ])
    if m.get("base_text"):
        doc.para("Base scenario:")
        doc.code(m["base_text"])
    doc.heading("Results")
    cols = [c for c in vary if c in fr.columns]
    want = ["n", "n_formula", "reached", "coverage", "coverage_mcse", "assurance", "miss_low", "miss_high"]
    cols += [c for c in want if c in fr.columns and c not in cols]
    rows = [[_cell(v) for v in r] for r in fr[cols].itertuples(index=False)]
    doc.table(cols, rows)
    if figs:
        doc.heading("Figures")
        what = "Required n" if value == "n" else "Coverage (± 2 MCSE error bars)"
        for i, (name, png) in enumerate(figs.items()):
            doc.figure(_Figure(name, f"Figure {i + 1}. {what} across the varied parameters; one panel per combination "
                                     f"of the remaining parameters." + (" Dotted black: formula n." if value == "n" else ""),
                               png))
    doc.heading("Caution")
    doc.para(CAUTION)
    return doc


def _cell(v: Any) -> str:
    if isinstance(v, float):
        if not math.isfinite(v):
            return "–"
        return f"{v:,.0f}" if v.is_integer() and abs(v) >= 1 else f"{v:.4g}"
    return _g(v)


# ---------------------------------------------------------------------------
# writing
# ---------------------------------------------------------------------------
def check_out_dir_usable(out_dir: str | Path, field_name: str = "--out") -> Path:
    """Fail early (InputError) when ``out_dir`` cannot become a folder; creates nothing."""
    p = Path(out_dir)
    if str(out_dir).strip() == "":
        raise InputError(field_name, "must name a folder, got an empty string")
    if p.exists() and not p.is_dir():
        raise InputError(field_name, f"{p} exists and is not a folder")
    for parent in p.parents:
        if parent.exists():
            if not parent.is_dir():
                raise InputError(field_name, f"{parent} is a file, so {p} cannot be a folder")
            break
    return p


def check_out_dir(out_dir: str | Path, field_name: str = "--out") -> Path:
    """The output folder, created if needed; an InputError when it cannot be one."""
    p = check_out_dir_usable(out_dir, field_name)
    try:
        p.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise InputError(field_name, f"cannot create {p}: {exc.strerror or exc}") from None
    return p


def write_report(out_dir: str | Path, results: StudyResults | SweepResults) -> ReportFiles:
    """Write the report files for a study or a sweep into ``out_dir``.

    Returns
    -------
    ReportFiles
        The Markdown and HTML documents, the results table (CSV), the
        summary (JSON) and each figure's PNG, SVG and PDF.
    """
    from simcheck import figures as F

    out = check_out_dir(out_dir)
    fig_dir = out / "figures"
    if isinstance(results, StudyResults):
        figs = study_figures(results)
    elif isinstance(results, SweepResults):
        figs = sweep_figures(results)
    else:
        raise TypeError(f"results must be StudyResults or SweepResults, got {type(results).__name__}")
    written: dict[str, dict[str, Path]] = {}
    for name, fig in figs.items():
        written[name] = F.save_figure(fig, fig_dir / name)
    pngs = {k: v["png"] for k, v in written.items()}
    doc = _study_doc(results, pngs, out) if isinstance(results, StudyResults) else _sweep_doc(results, pngs, out)
    md = out / "report.md"
    md.write_text(doc.markdown(out), encoding="utf-8")
    ht = out / "report.html"
    ht.write_text(doc.html(), encoding="utf-8")
    table = out / "results.csv"
    results.to_frame().to_csv(table, index=False, lineterminator="\n")
    summary = out / "summary.json"
    d = results.to_dict()
    d["caution"] = CAUTION
    summary.write_text(json.dumps(d, indent=2, sort_keys=True, allow_nan=False) + "\n", encoding="utf-8")
    return ReportFiles(out_dir=out, markdown=md, html=ht, table=table, summary=summary, figures=written)


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
    from simcheck import engine, search
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
                  rng=seed, n_min=scenario.n_min, n_max=scenario.n_max, budget=getattr(scenario, "budget", None), path=path)
    searches: dict[str, SearchResult] = {}
    best = None
    if len(methods) > 1:
        comp = search.compare(design, list(methods), **common)
        for r in comp.by_method:
            searches[r.method] = r
        best = comp.best
    else:
        searches[methods[0]] = search.find_n(design.with_method(methods[0]), **common)
        best = methods[0] if searches[methods[0]].reached else None
    if n_formula is None:
        n_formula = next((r.n_formula for r in searches.values() if r.n_formula is not None), None)
    curves: dict[str, CurveResult] = {}
    checks: dict[str, CheckResult] = {}
    formula_checks: dict[str, CheckResult] = {}
    # one grid for every method, so their lines can be compared point by point
    marks = [n_formula] + [x for r in searches.values() for x in (r.n, r.best_coverage_n)]
    grid = curve_grid(marks, scenario.n_min, scenario.n_max, points)
    for m in methods:
        d = design.with_method(m)
        r = searches.get(m)
        say(f"curve for {m}: {len(grid)} sample sizes from {grid[0]:,} to {grid[-1]:,} ...")
        curves[m] = engine.curve(d, grid, replicates=R, rng=seed, path=path)
        if n_formula is not None and n_formula in set(grid):
            formula_checks[m] = curves[m].at(n_formula)
        n_at = r.n if r is not None and r.n is not None else (r.best_coverage_n if r is not None else None)
        if r is not None and r.at_n is not None and r.at_n.n == n_at and r.at_n.margin_values is not None:
            # the search's own confirmation run at n: the numbers the decision rests on
            checks[m] = r.at_n
        elif n_at is not None:
            say(f"check for {m} at n = {n_at:,} ...")
            checks[m] = engine.check(d, n_at, replicates=R, rng=seed, path=path)
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
        n_formula=n_formula,
        formula=None if formula is None else formula.to_dict(),
        formula_checks=formula_checks,
        data=design.to_dict(),
        best=best,
        n_label=_n_label(design),
        value_label=_value_label(scenario, units),
        scenario=scenario.to_dict() if hasattr(scenario, "to_dict") else None,
    )


def _n_label(design) -> str:
    if design.clusters is not None:
        return "Sample size n (clusters)"
    if design.two_sample:
        return "Sample size n (observations in group a)"
    return "Sample size n (observations)"


def _value_label(scenario, units: str | None = None) -> str:
    if units:
        return f"Achieved half-width ({units})"
    if scenario.design.estimand in ("proportion", "proportion-diff"):
        return "Achieved half-width (proportion)"
    return "Achieved half-width (data units)"


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


def report(source: str | Path, out_dir: str | Path, *, overrides: Mapping[str, Any] | None = None,
           progress: Progress = None) -> tuple[ReportFiles, StudyResults | SweepResults]:
    """Report on a scenario file (runs it) or a sweep store (reads it)."""
    if is_store(source):
        check_out_dir(out_dir)
        results: StudyResults | SweepResults = read_sweep(source)
    else:
        from simcheck.scenario import load_scenario

        scenario = load_scenario(source, overrides=dict(overrides) if overrides else None)
        check_out_dir(out_dir)
        results = run_study(scenario, progress=progress)
    return write_report(out_dir, results), results
