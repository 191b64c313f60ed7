"""A Markdown report of a :class:`~simcheck.predictive.PredictiveResult` with one figure."""

from __future__ import annotations

from pathlib import Path

import numpy as np

from simcheck import CAUTION


def assurance_figure(res):
    """Assurance against n: conditional (at the point values) and unconditional (with 2 MCSE bars)."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    from simcheck import engine

    ns = sorted(res.checked)
    lo, hi = max(2, int(min(ns) * 0.8)), int(max(ns) * 1.05) + 1
    grid = sorted(set(np.linspace(lo, hi, 60).round().astype(int).tolist()))
    cond = engine.curve(res.point_design, grid, replicates=res.draws * res.replicates_per_draw,
                        rng=res.seed, path=res.path)
    fig = Figure(figsize=(6.0, 3.8), layout="constrained")
    FigureCanvasAgg(fig)
    ax = fig.add_subplot(1, 1, 1)
    ax.plot([r.n for r in cond.rows], [r.assurance for r in cond.rows], color="#0072B2",
            label="conditional (point values)")
    un = [res.checked[n] for n in ns if res.checked[n].assurance is not None]
    ax.errorbar([r.n for r in un], [r.assurance for r in un], yerr=[2 * (r.assurance_mcse or 0) for r in un],
                fmt="o-", color="#D55E00", markersize=3.5, linewidth=1, label="unconditional (predictive)")
    ax.axhline(res.targets["assurance"], color="0.4", linestyle="--", linewidth=0.8, label="assurance target")
    for n, style, lab in ((res.n_conditional, ":", "n conditional"), (res.n_unconditional, "-.", "n unconditional")):
        if n is not None:
            ax.axvline(n, color="0.3", linestyle=style, linewidth=0.8, label=f"{lab} = {n}")
    if res.browne is not None:
        ax.axvline(res.browne["n"], color="#009E73", linestyle="--", linewidth=0.8, label=f"Browne n = {res.browne['n']}")
    ax.set_xlabel("n")
    ax.set_ylabel(f"P(half-width <= {res.targets['margin']:g})")
    ax.set_ylim(0, 1.02)
    ax.legend(fontsize=7, loc="lower right")
    return fig


def write_predictive_report(res, out_dir: str | Path) -> Path:
    """Write ``predictive.md`` and ``predictive_assurance.png`` to ``out_dir``; return the Markdown path."""
    from simcheck.report.document import check_out_dir

    out = check_out_dir(out_dir)
    fig = assurance_figure(res)
    fig.savefig(out / "predictive_assurance.png", dpi=150)
    t = res.targets
    cu = res.unconditional_at_conditional_n
    un = res.unconditional
    lines = [f"# {res.title}", "",
             f"Targets: coverage at least {t['coverage']:.4g} ({t['confidence']:g} confidence less "
             f"{t['coverage_tolerance']:g} tolerance); assurance at least {t['assurance']:g}, the share of samples "
             f"whose half-width is at most {t['margin']:g}.", "", "## Uncertain planning values", ""]
    lines += [f"- {u.describe()}" for u in res.uncertain]
    lines += ["", "## The answers side by side", "",
              "| answer | n | assurance at the point values | unconditional assurance |", "|---|---|---|---|"]
    if res.dropout:
        lines[-2:] = ["| answer | n | assurance at the point values | unconditional assurance | n to enrol |",
                      "|---|---|---|---|---|"]

    def enrol(n) -> str:
        return f" {res.enrolled(n)} |" if res.dropout and isinstance(n, int) else (" - |" if res.dropout else "")

    cond_a = getattr(res.conditional, "assurance", None)
    lines.append(f"| conditional (search at the point values) | {res.n_conditional} | "
                 f"{'-' if cond_a is None else f'{cond_a:.4f}'} | "
                 f"{'-' if cu is None or cu.assurance is None else f'{cu.assurance:.4f} ± {cu.assurance_mcse:.4f}'} |"
                 + enrol(res.n_conditional))
    lines.append(f"| unconditional (predictive) | {res.n_unconditional if res.n_unconditional else 'not reached'} | - | "
                 f"{'-' if un is None or un.assurance is None else f'{un.assurance:.4f} ± {un.assurance_mcse:.4f}'} |"
                 + enrol(res.n_unconditional))
    if res.browne is not None:
        b = res.browne
        lines.append(f"| Browne (1995): SD at its upper {b['level']:g} confidence limit "
                     f"({', '.join(f'{k} {v:.4g}' for k, v in b['sd_upper'].items())}) | {b['n']} | - | - |" + enrol(b["n"]))
    lines += ["", "![Assurance against n](predictive_assurance.png)", "",
              "*Figure: assurance against n at the point values (line) and averaged over the planning values' "
              "distributions (points, bars 2 MCSE).*", "", "## How it was computed", ""]
    d = res.to_dict()
    lines.append(f"- decision: **{d['decision']}** (criterion `{d['criterion']}`: {d['criterion_text']})")
    lines += [f"- {x}" for x in res.notes]
    lines.append(f"- {res.draws} parameter draws (replicated Latin hypercube), {res.replicates_per_draw} replicates "
                 f"per draw, root seed {res.seed}")
    lines.append("- the Kieser & Wassmer (1996) correction is not computed by simcheck")
    lines += ["", f"**Caution.** {CAUTION}", ""]
    path = out / "predictive.md"
    path.write_text("\n".join(lines), encoding="utf-8")
    return path
