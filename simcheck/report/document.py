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
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Mapping, Sequence

import numpy as np

from simcheck import CAUTION, __version__
from simcheck.errors import InputError
from simcheck.report.study import Progress, StudyResults, SweepResults, is_store, read_sweep, run_study
from simcheck.report.text import (
    estimand_text,
    STATUS_TEXT,
    criterion_sentence,
    decision_status,
    key_label,
    fmt_estimate,
    fmt_g,
    fmt_num,
    join_words,
    methods_paragraph,
    model_text,
)


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
# the document model: blocks rendered to Markdown and to HTML
# ---------------------------------------------------------------------------
@dataclass
class _Figure:
    name: str
    caption: str
    png: Path
    alt: str = ""
    #: PNG at screen resolution, embedded in the HTML (the full-resolution file is linked beside it)
    screen: bytes | None = None


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
                alt = (b.alt or f"{b.name} figure").replace("[", "(").replace("]", ")")
                out += [f"![{alt}]({rel})", "", f"*{b.caption}* (also as "
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
                trs = "".join("<tr>" + "".join(f"<td>{_inline(str(c))}</td>" for c in r) + "</tr>" for r in rows)
                # a wide table scrolls inside its box instead of being cut at narrow widths
                body.append(f'<div class="table-scroll"><table><thead><tr>{head}</tr></thead>'
                            f"<tbody>{trs}</tbody></table></div>")
            elif kind == "figure":
                body.append(_html_figure(b))
        return _HTML_PAGE.format(title=e(self.title), body="\n".join(body))


def _html_figure(b: _Figure) -> str:
    """The screen-resolution PNG inline, with links to the full-resolution PNG, SVG and PDF beside the report."""
    e = html.escape
    data = base64.b64encode(b.screen if b.screen is not None else b.png.read_bytes()).decode("ascii")
    rel = f"figures/{b.png.name}"
    links = (f' (full resolution: <a href="{e(rel)}">PNG</a>, <a href="{e(rel[:-4])}.svg">SVG</a>, '
             f'<a href="{e(rel[:-4])}.pdf">PDF</a>)')
    return (f'<figure><img alt="{e(b.alt or b.name + " figure")}" src="data:image/png;base64,{data}">'
            f"<figcaption>{e(b.caption)}{links}</figcaption></figure>")


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
p, li, figcaption, blockquote {{ overflow-wrap: anywhere; }}
.table-scroll {{ overflow-x: auto; max-width: 100%; }}
pre {{ overflow-x: auto; max-width: 100%; }}
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
# study report
# ---------------------------------------------------------------------------
def study_figures(study: StudyResults) -> dict[str, Any]:
    """The study's figures, by name: ``coverage``, ``margin``, ``misses``."""
    from simcheck.report import figures as F

    what = "interval" if study.data.get("bound", "two-sided") == "two-sided" else f"{study.data['bound']} limit"
    label = {m: f"{m} {what}" for m in study.methods}
    found = {label[m]: s.n for m, s in study.searches.items() if m in label}
    curves = {label[m]: study.curves[m] for m in study.methods if m in study.curves and study.curves[m].rows}
    out: dict[str, Any] = {}
    if curves:
        out["coverage"] = F.coverage_figure(curves, confidence=study.confidence, tolerance=study.coverage_tolerance,
                                            n_formula=study.n_formula, n_found=found, n_label=study.n_label,
                                            undecided=[label[m] for m, s in study.searches.items()
                                                       if m in label and decision_status(s) == "undecided"],
                                            bound=study.data.get("bound", "two-sided"))
    checks = {label[m]: c for m in study.methods if (c := _half_width_check(study, m)) is not None}
    if checks:
        has_assurance = any(r.assurance is not None for c in curves.values() for r in c.rows)
        out["margin"] = F.margin_figure(checks, target_margin=study.margin, curves=curves if has_assurance else None,
                                        assurance=study.assurance, n_found=found, value_label=study.value_label,
                                        n_label=study.n_label,
                                        undecided=[label[m] for m, s in study.searches.items() if m in label and
                                                   decision_status(s) == "undecided" and s.n is None])
    if curves:
        out["misses"] = F.miss_figure(curves, confidence=study.confidence, n_found=found, n_formula=study.n_formula,
                                      n_label=study.n_label)
    return out


def _half_width_check(study: StudyResults, m: str):
    """The evaluation whose half-widths the margin figure draws: the search's own, else the re-check."""
    c = study.checks.get(m)
    if c is not None and c.margin_values is not None:
        return c
    rc = study.rechecks.get(m)
    return rc if rc is not None and rc.margin_values is not None else None


def _captions_study(study: StudyResults, names: Sequence[str]) -> dict[str, str]:
    band = "Shading: estimate ± 2 MCSE (about a 95% Monte Carlo band)."
    low = study.confidence - study.coverage_tolerance
    re = [m for m in study.methods if _half_width_check(study, m) is study.rechecks.get(m) and m in study.rechecks]
    recheck = ""
    if re:
        reps = sorted({study.rechecks[m].replicates for m in re})
        recheck = (f" Panel A comes from a re-check on {', '.join(f'{r:,}' for r in reps)} fresh samples at that n "
                   f"(the search kept no half-widths), so its assurance differs from the table's by Monte Carlo "
                   f"error; the table quotes the search's confirmation.")
    cap = {
        "coverage": (f"Coverage against n. Solid black line: nominal {fmt_g(study.confidence)}; hatched grey band "
                     f"down to the lowest accepted coverage {fmt_g(round(low, 6))}; dotted line: formula n; dashed "
                     f"lines: n found. " + band),
        "margin": ("Achieved half-width. A: distribution of the half-width at the n found, with the target margin; "
                   "the curve's height at the target is the assurance. B: assurance against n with the required "
                   "assurance. " + band + recheck),
        "misses": (f"Non-coverage split by side: shares of intervals wholly below and wholly above the true value; "
                   f"an equal-tailed interval puts about {fmt_g(round((1 - study.confidence) / 2, 6))} on each side. "
                   + band),
    }
    return {n: f"Figure {i + 1}. {cap[n]}" for i, n in enumerate(names)}


def _alt_study(study: StudyResults, name: str) -> str:
    """Alt text: what the figure shows, in numbers, for a reader who cannot see it."""
    names = join_words([f"the {m} interval" for m in study.methods if m in study.curves])
    found = "; ".join((f"{m}: {'undecided, ' if decision_status(s) == 'undecided' else ''}n found {s.n:,}"
                       if s.n is not None else f"{m}: {STATUS_TEXT.get(decision_status(s), '')}")
                      for m, s in study.searches.items())
    if name == "coverage":
        lo = [float(np.nanmin(c.column("coverage"))) for c in study.curves.values() if c.rows]
        hi = [float(np.nanmax(c.column("coverage"))) for c in study.curves.values() if c.rows]
        rng = f" ranges from {min(lo):.3f} to {max(hi):.3f}" if lo else ""
        return (f"Line chart of coverage against sample size n for {names}; coverage{rng}, against a nominal "
                f"{fmt_g(study.confidence)} and a lowest accepted {fmt_g(round(study.confidence - study.coverage_tolerance, 6))}"
                + (f"; formula n {study.n_formula:,}" if study.n_formula is not None else "") + f"; {found}.")
    if name == "margin":
        parts = []
        for m in study.methods:
            c = _half_width_check(study, m)
            if c is not None:
                parts.append(f"{m} at n = {c.n:,}: median half-width {c.margin_median:.3g}, 90th percentile "
                             f"{c.margin_p90:.3g}")
        return (f"Two panels. A: distribution of the achieved half-width against the target margin "
                f"{fmt_g(study.margin)} ({'; '.join(parts)}). B: assurance against n with the required assurance "
                f"{fmt_g(study.assurance)}.")
    return (f"One panel per method ({names}): shares of intervals wholly below and wholly above the true value "
            f"against n, with the expected {fmt_g(round((1 - study.confidence) / 2, 6))} per side.")


def _status_cell(r: Mapping[str, Any]) -> str:
    """'n found' cell: an undecided answer says so before the number."""
    st = r["decision"]
    if st == "undecided":
        return "undecided (budget spent): " + (fmt_num(r["n_found"]) if r["n_found"] is not None else "no n confirmed")
    if st == "not reached":
        return "not reached by the search ceiling"
    return f"{fmt_num(r['n_found'])} (clear)"


def _results_table(doc: _Doc, s: StudyResults) -> None:
    headers = ["Method", "n found (decision)", "n consistent with MC error", "Coverage at n found",
               "Assurance at n found", "Below / above", "Half-width median / 90th pct", "Replicates at n",
               "Coverage at formula n"]
    rows = []
    for m in s.methods:
        r = s.method_row(m)
        lo, hi = r["n_range_low"], r["n_range_high"]
        rng = "–" if lo is None else (f"{lo:,}" if lo == hi else f"{lo:,}–{hi:,}")
        reps = "exact" if r["exact"] else fmt_num(r["confirm_replicates"])
        # no n given: the figures are those of another n, which the cell names
        other = getattr(s.searches.get(m), "best_coverage_n", None) if r["n_found"] is None else None
        where = "" if other is None else f" at n = {other:,}"
        rows.append([
            m, _status_cell(r), rng,
            fmt_estimate(r["coverage"], r["coverage_mcse"], r["exact"]) + where,
            fmt_estimate(r["assurance"], r["assurance_mcse"], r["exact"]) + where,
            f"{fmt_num(r['miss_low'], 4)} / {fmt_num(r['miss_high'], 4)}",
            f"{fmt_num(r['margin_median'])} / {fmt_num(r['margin_p90'])}", reps,
            fmt_estimate(r["coverage_at_formula_n"], r["coverage_at_formula_n_mcse"], r["exact"]),
        ])
    doc.table(headers, rows)
    crit = [t for t in dict.fromkeys(s.method_row(m)["criterion_text"] for m in s.methods) if t]
    if crit:
        doc.para("Criterion: " + " ".join(criterion_sentence(t) for t in crit))
    doc.para("Coverage and assurance at the n found are the search's own confirmation figures (fresh samples, "
             "independent of the exploration). An undecided answer is the n the search gives when its "
             "replicate budget ran out before the Monte Carlo error settled it; the n range shows how far the Monte Carlo error leaves it open.")
    re = [m for m in s.methods if m in s.rechecks and s.rechecks[m].n == s.method_row(m)["n_found"]]
    if re:
        doc.para("Re-check for the half-width figure (not the figures above): " + "; ".join(
            f"{m}: coverage {fmt_estimate(s.rechecks[m].coverage, s.rechecks[m].coverage_mcse)} from "
            f"{s.rechecks[m].replicates:,} fresh samples" for m in re)
            + ". It differs from the search's confirmation by Monte Carlo error only (other random samples).")


def _study_doc(study: StudyResults, figs: dict[str, Path], base: Path) -> _Doc:
    s = study
    doc = _Doc(s.title)
    doc.para(f"Written by simcheck {s.versions.get('simcheck', __version__)}. All numbers below come from the "
             f"scenario's data model and seed; they can be reproduced by running the same scenario again.")
    states = [(m, STATUS_TEXT.get(decision_status(s.searches[m]), "–")) for m in s.methods if m in s.searches]
    doc.para("Decision: " + ("; ".join(f"`{m}` {t}" for m, t in states) if len(states) > 1
                             else (states[0][1] if states else "–")) + ".")
    doc.heading("Targets")
    rows = [["Estimand", estimand_text(s.estimand)],
            ["Confidence level", fmt_g(s.confidence)],
            ["Target margin (half-width)", fmt_g(s.margin)],
            ["Required assurance (share of samples with half-width ≤ target)", fmt_g(s.assurance)],
            ["Coverage tolerance (accepted shortfall below the confidence level)", fmt_g(s.coverage_tolerance)],
            ["Lowest accepted coverage", fmt_g(round(s.confidence - s.coverage_tolerance, 6))]]
    doc.table(["Target", "Value"], rows)
    doc.heading("Data model and parameters")
    doc.para(f"Assumed data: {model_text(s.data)}.")
    doc.table(["Quantity", "Value"], _data_rows(s.data))
    doc.heading("Interval methods")
    fewest = s.fewest_n()
    doc.items([f"`{m}`" + (" (needs the fewest n)" if m in fewest and len(s.methods) > 1 else "") for m in s.methods])
    doc.heading("Simulation settings")
    doc.table(["Setting", "Value"], [
        ["Replicates (simulated samples per n, at least)", f"{s.replicates:,}"],
        ["Seed", "none (not reproducible)" if s.seed is None else str(s.seed)],
        ["Search range of n", f"{s.n_min:,} to {s.n_max:,}"],
        ["Versions", ", ".join(f"{k} {v}" for k, v in s.versions.items())],
    ])
    doc.heading("Results")
    if s.n_formula is not None:
        f = s.formula or {}
        doc.para(f"Closed-form n: {s.n_formula:,} ({f.get('multiplier_kind', 'z')} multiple "
                 f"{fmt_num(f.get('multiplier'))}" + (f", n for group b {f['n_b']:,}" if f.get("n_b") else "") + ").")
        if f.get("formula"):
            doc.para(f"Formula: `{f['formula']}`" + (f"; it assumes {join_words(list(f['assumptions']))}."
                                                     if f.get("assumptions") else "."))
    _results_table(doc, s)
    notes = [f"{m}: {t}" if len(s.methods) > 1 else t for m in s.methods for t in s.notes_for(m)]
    if notes:
        doc.para("Notes from the computation:")
        doc.items(list(dict.fromkeys(notes)))
    doc.heading("Figures")
    caps = _captions_study(s, list(figs))
    for name, png in figs.items():
        doc.figure(_Figure(name, caps[name], png, alt=_alt_study(s, name)))
    doc.heading("Methods paragraph (ready to paste)")
    doc.quote(methods_paragraph(s))
    doc.heading("Caution")
    doc.para(CAUTION)
    return doc


def _data_rows(data: Mapping[str, Any]) -> list[list[str]]:
    rows: list[list[str]] = []

    def model_rows(prefix: str, d: Mapping[str, Any], skip_true: bool = False) -> None:
        for k, v in d.items():
            if skip_true and k.startswith("true_"):
                continue
            if isinstance(v, (dict, list)):
                v = json.dumps(v, sort_keys=True)
            rows.append([f"{prefix}{k.replace('_', ' ')}", fmt_g(v)])

    for key, label in (("data", ""), ("data_a", "group a: "), ("data_b", "group b: ")):
        if key in data:
            model_rows(label, data[key])
    for key in ("true_value", "ratio", "resamples"):
        if key in data:
            label = key.replace("_", " ")
            if key == "true_value" and "strata" in data:
                # each evaluation reports its own finite populations' value (see the notes)
                label = "planning value (the strata models' mean)"
            rows.append([label, fmt_g(data[key])])
    for key in ("clusters", "population"):
        if key in data:
            for k, v in data[key].items():
                rows.append([f"{key}: {k.replace('_', ' ')}", fmt_g(v)])
    for st in data.get("strata", ()):
        model_rows(f"stratum {st['name']} (N = {st['size']:,}): ", st["data"], skip_true=True)
        for k in ("cost", "n"):
            if k in st:
                rows.append([f"stratum {st['name']}: {k}", fmt_g(st[k])])
    if "allocation" in data:
        rows.append(["allocation rule", str(data["allocation"]["rule"])])
    return rows


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


def sweep_n_label(sw: SweepResults) -> str:
    """y label of a search sweep: what n counts (clusters, group a, observations)."""
    import tomllib

    base: dict[str, Any] = {}
    try:
        base = tomllib.loads(sw.meta.get("base_text") or "")
    except tomllib.TOMLDecodeError:
        base = {}
    if "clusters" in base or any(str(c).startswith("clusters.") for c in sw.vary):
        return "Required sample size n (clusters)"
    if str((base.get("target") or {}).get("estimand", "")).endswith("-diff"):
        return "Required sample size n (group a)"
    return "Required sample size n (observations)"


def sweep_figures(sw: SweepResults) -> dict[str, Any]:
    from simcheck.report import figures as F

    fr, vary, value = _sweep_plot_frame(sw)
    if fr.empty or value not in fr.columns or fr[value].notna().sum() == 0 or not vary:
        return {}
    conf = _first(fr, "confidence")
    tol = _first(fr, "targets.coverage_tolerance")
    return {"sweep": F.sweep_figure(fr, value=value, vary=vary, confidence=conf, tolerance=tol,
                                    n_label=sweep_n_label(sw))}


def _first(fr, col: str) -> float | None:
    if col in fr.columns and fr[col].notna().any():
        return float(fr[col].dropna().iloc[0])
    return None


#: readable headers of the sweep results table (result columns; varied keys use key_label)
SWEEP_COLUMNS = {
    "decision": "Decision",
    "n": "n found",
    "n_range": "n consistent with MC error",
    "n_formula": "Formula n",
    "coverage": "Coverage at n found (n_max if not reached)",
    "coverage_mcse": "Coverage MCSE",
    "assurance": "Assurance at the same n",
    "assurance_mcse": "Assurance MCSE",
    "miss_low": "Wholly below",
    "miss_high": "Wholly above",
    "replicates_used": "Replicates simulated",
}


def _sweep_table(fr, vary: Sequence[str], value: str) -> tuple[list[str], list[list[str]]]:
    """The sweep's results: varied keys in words, the decision status, the n range, MCSEs rounded."""
    from simcheck.report.text import cell_outcome

    cols = [c for c in vary if c in fr.columns]
    search = value == "n"
    result = (["decision", "n", "n_range", "n_formula", "coverage", "assurance", "replicates_used"] if search
              else ["coverage", "assurance", "miss_low", "miss_high"])
    names = SWEEP_COLUMNS if search else {**SWEEP_COLUMNS, "coverage": "Coverage", "assurance": "Assurance"}
    headers = [key_label(c) for c in cols] + [names[c] for c in result if c in ("decision", "n_range") or c in fr.columns]
    rows = []
    for rec in fr.to_dict("records"):
        row = [_cell(rec.get(c)) for c in cols]
        for c in result:
            if c == "decision":
                row.append(SHORT_STATUS.get(_sweep_status(cell_outcome(rec)), "–"))
            elif c == "n_range":
                row.append(_range_cell(rec.get("n_range_low"), rec.get("n_range_high")))
            elif c in ("coverage", "assurance") and c in fr.columns:
                row.append(_estimate_cell(rec.get(c), rec.get(f"{c}_mcse"), rec.get("exact")))
            elif c in ("miss_low", "miss_high") and c in fr.columns:
                row.append(f"{float(rec[c]):.4f}" if _finite(rec.get(c)) else "–")
            elif c in fr.columns:
                row.append(_cell(rec.get(c)))
        rows.append(row)
    return headers, rows


#: the decision column of the sweep table (a narrow column; the paragraph below it says more)
SHORT_STATUS = {"clear": "clear", "undecided": "undecided (budget spent)", "not reached": "not reached (ceiling)"}


def _sweep_status(outcome: str) -> str:
    return "undecided" if outcome.startswith("undecided") else outcome


def _finite(x: Any) -> bool:
    return x is not None and not (isinstance(x, float) and not math.isfinite(x))


def _range_cell(lo: Any, hi: Any) -> str:
    if not (_finite(lo) and _finite(hi)):
        return "–"
    lo, hi = int(lo), int(hi)
    return f"{lo:,}" if lo == hi else f"{lo:,}–{hi:,}"


def _estimate_cell(v: Any, se: Any, exact: Any) -> str:
    """'0.9461 (MCSE 0.0022)': digits to the MCSE's first significant figure."""
    if not _finite(v):
        return "–"
    ex = bool(exact) if _finite(exact) else False
    return fmt_estimate(float(v), float(se) if _finite(se) else None, ex)


def _sweep_doc(sw: SweepResults, figs: dict[str, Path], base: Path, alts: Mapping[str, str] | None = None) -> _Doc:
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
        levels.append([f"{key_label(c)} (`{c}`)", ", ".join(fmt_g(v) for v in vals)])
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
    headers, rows = _sweep_table(fr, vary, value)
    doc.table(headers, rows)
    if value == "n":
        doc.para(_sweep_status_text(fr))
    if figs:
        doc.heading("Figures")
        for i, (name, png) in enumerate(figs.items()):
            doc.figure(_Figure(name, f"Figure {i + 1}. " + _sweep_caption(value), png,
                               alt=(alts or {}).get(name, "")))
    doc.heading("Caution")
    doc.para(CAUTION)
    return doc


def _sweep_status_text(fr) -> str:
    from simcheck.report.text import cell_outcome

    kinds = [_sweep_status(cell_outcome(r)) for r in fr.to_dict("records")]
    counts = {k: kinds.count(k) for k in ("clear", "undecided", "not reached")}
    return (f"Decisions: {counts['clear']} clear; {counts['undecided']} undecided (the replicate budget was spent "
            f"before the Monte Carlo error settled the answer: n is what the search gives, and the range shows what "
            f"remains open); {counts['not reached']} not reached by the search ceiling n_max.")


def _sweep_caption(value: str) -> str:
    if value != "n":
        return ("Coverage at the fixed n across the varied parameters (± 2 MCSE error bars); hatched grey band: "
                "accepted coverage; one panel per combination of the remaining parameters.")
    return ("Required n across the varied parameters; one panel per combination of the remaining parameters. "
            "Filled markers: clear answers. Open markers with a vertical bar: undecided (the replicate budget was "
            "spent first), drawn at the n the search gives, the bar spanning the n range still open. A question "
            "mark at the top: undecided with no n confirmed yet. An arrow at the top: not reached by the search "
            "ceiling n_max. Black crosses on a dotted line: formula n. Markers of different methods are shifted "
            "sideways a little so they do not hide each other.")


def sweep_alt(sw: SweepResults) -> str:
    """Alt text of the sweep figure: what it plots and how the cells ended."""
    from simcheck.report.figures import sweep_layout
    from simcheck.report.text import cell_outcome

    fr, vary, value = _sweep_plot_frame(sw)
    lay = sweep_layout(fr, vary)
    what = "required sample size n" if value == "n" else "coverage at the fixed n"
    low = lambda t: t[:1].lower() + t[1:] if not t[:2].isupper() else t  # noqa: E731 ('CV of the data' stays)
    text = f"Small multiples of {what} against {low(key_label(lay.x_col))}"
    if lay.line_col:
        text += f", one line per {low(key_label(lay.line_col))} ({', '.join(str(v) for v in lay.line_levels)})"
    if lay.panel_cols:
        text += f", one panel per {', '.join(low(key_label(c)) for c in lay.panel_cols)}"
    if value == "n":
        kinds = [_sweep_status(cell_outcome(r)) for r in fr.to_dict("records")]
        text += (f"; {kinds.count('clear')} cells clear, {kinds.count('undecided')} undecided, "
                 f"{kinds.count('not reached')} not reached")
        n = fr["n"].dropna()
        if len(n):
            text += f"; n ranges from {int(n.min()):,} to {int(n.max()):,}"
    return text + "."


def _cell(v: Any) -> str:
    if isinstance(v, float):
        if not math.isfinite(v):
            return "–"
        return f"{v:,.0f}" if v.is_integer() and abs(v) >= 1 else f"{v:.4g}"
    return fmt_g(v)


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
    from simcheck.report import figures as F

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
    if isinstance(results, StudyResults):
        doc = _study_doc(results, pngs, out)
    else:
        doc = _sweep_doc(results, pngs, out, alts={k: sweep_alt(results) for k in pngs})
    # the HTML embeds each figure at screen resolution; the full-resolution files sit beside it
    for kind, b in doc.blocks:
        if kind == "figure" and b.name in figs:
            b.screen = F.screen_png(figs[b.name])
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


def report(source: str | Path, out_dir: str | Path, *, overrides: Mapping[str, Any] | None = None,
           progress: Progress = None, allow_outside_files: bool = False) -> tuple[ReportFiles, StudyResults | SweepResults]:
    """Report on a scenario file (runs it) or a sweep store (reads it).

    ``allow_outside_files`` lets the scenario's data files lie outside its
    folder (see :func:`simcheck.scenario.load_scenario`).
    """
    if is_store(source):
        results: StudyResults | SweepResults = read_sweep(source)
        if len(results.frame) == 0:
            raise InputError("STORE", f"{Path(source).name} holds no finished cells yet; run the sweep into it first "
                                      f"(simcheck sweep SWEEP --store {Path(source).name})")
        check_out_dir(out_dir)
    else:
        from simcheck.scenario import load_scenario

        scenario = load_scenario(source, overrides=dict(overrides) if overrides else None,
                                 allow_outside_files=allow_outside_files)
        check_out_dir(out_dir)
        results = run_study(scenario, progress=progress)
    return write_report(out_dir, results), results
