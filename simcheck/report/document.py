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

from simcheck import CAUTION, __version__
from simcheck.errors import InputError
from simcheck.report.study import Progress, StudyResults, SweepResults, is_store, read_sweep, run_study
from simcheck.report.text import (
    ESTIMAND_TEXT,
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
# study report
# ---------------------------------------------------------------------------
def study_figures(study: StudyResults) -> dict[str, Any]:
    """The study's figures, by name: ``coverage``, ``margin``, ``misses``."""
    from simcheck.report import figures as F

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
        "coverage": (f"Coverage against n. Solid black line: nominal {fmt_g(study.confidence)}; grey band down to the "
                     f"lowest accepted coverage {fmt_g(round(low, 6))}; dotted line: formula n; dashed lines: n found. "
                     + band),
        "margin": ("Achieved half-width. A: distribution of the half-width at the n found, with the target margin; "
                   "the curve's height at the target is the assurance. B: assurance against n with the required "
                   "assurance. " + band),
        "misses": (f"Non-coverage split by side: shares of intervals wholly below and wholly above the true value; "
                   f"an equal-tailed interval puts about {fmt_g(round((1 - study.confidence) / 2, 6))} on each side. "
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
                 f"{fmt_num(f.get('multiplier'))}" + (f", n for group b {f['n_b']:,}" if f.get("n_b") else "") + ").")
        if f.get("formula"):
            doc.para(f"Formula: `{f['formula']}`" + (f"; it assumes {join_words(list(f['assumptions']))}."
                                                     if f.get("assumptions") else "."))
    headers = ["Method", "Coverage at formula n", "n found", "n consistent with MC error", "Coverage at n found",
               "Below / above", "Assurance", "Half-width median / 90th pct"]
    table_rows = []
    for m in s.methods:
        r = s.method_row(m)
        lo, hi = r["n_range_low"], r["n_range_high"]
        rng = "–" if lo is None else (f"{lo:,}" if lo == hi else f"{lo:,}–{hi:,}")
        n_found = "not reached" if r["reached"] is False else fmt_num(r["n_found"])
        table_rows.append([
            m,
            fmt_estimate(r["coverage_at_formula_n"], r["coverage_at_formula_n_mcse"], r["exact"]),
            n_found, rng,
            fmt_estimate(r["coverage"], r["coverage_mcse"], r["exact"]),
            f"{fmt_num(r['miss_low'], 4)} / {fmt_num(r['miss_high'], 4)}",
            fmt_estimate(r["assurance"], r["assurance_mcse"], r["exact"]),
            f"{fmt_num(r['margin_median'])} / {fmt_num(r['margin_p90'])}",
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
            rows.append([key.replace("_", " "), fmt_g(data[key])])
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


def sweep_figures(sw: SweepResults) -> dict[str, Any]:
    from simcheck.report import figures as F

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
        levels.append([c, ", ".join(fmt_g(v) for v in vals)])
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


def report(source: str | Path, out_dir: str | Path, *, overrides: Mapping[str, Any] | None = None,
           progress: Progress = None, allow_outside_files: bool = False) -> tuple[ReportFiles, StudyResults | SweepResults]:
    """Report on a scenario file (runs it) or a sweep store (reads it).

    ``allow_outside_files`` lets the scenario's data files lie outside its
    folder (see :func:`simcheck.scenario.load_scenario`).
    """
    if is_store(source):
        check_out_dir(out_dir)
        results: StudyResults | SweepResults = read_sweep(source)
    else:
        from simcheck.scenario import load_scenario

        scenario = load_scenario(source, overrides=dict(overrides) if overrides else None,
                                 allow_outside_files=allow_outside_files)
        check_out_dir(out_dir)
        results = run_study(scenario, progress=progress)
    return write_report(out_dir, results), results
