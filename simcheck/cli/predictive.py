"""``simcheck predictive``: the answer when planning values are uncertain (conditional vs unconditional)."""

from __future__ import annotations

import argparse
import sys

from simcheck import CAUTION
from simcheck.cli.common import emit_json, note, table
from simcheck.cli.options import add_closing_options, add_scenario_argument


def add_parser(subparsers) -> None:
    p = subparsers.add_parser(
        "predictive",
        help="conditional and unconditional n when planning values are uncertain (e.g. an SD from a pilot)",
        description=(
            "For a scenario whose [data] gives some parameters as distributions (sd = { pilot_n = 20, "
            "pilot_sd = 12 } for an SD from a pilot of 20; x = { lower = a, upper = b } for a stated range), "
            "report side by side: the conditional answer (the search at the point values) and the "
            "unconditional assurance it really has; the unconditional (predictive) n, whose coverage and "
            "assurance averaged over the planning values meet the targets; and Browne's (1995) formula n "
            "with the SD at its upper confidence limit. Results hold only under the assumed data model."
        ),
    )
    add_scenario_argument(p)
    p.add_argument("--n", type=int, metavar="N", help="also evaluate this n, conditionally and unconditionally")
    p.add_argument("--draws", type=int, metavar="K", help="parameter draws (default 400, at least 20)")
    p.add_argument("--replicates", type=int, metavar="R",
                   help="replicates of one evaluation (default: the scenario's), shared out over the draws")
    p.add_argument("--seed", type=int, metavar="S", help="root random seed (overrides the scenario)")
    p.add_argument("--pilot-confidence", dest="pilot_confidence", type=float, default=0.8, metavar="L",
                   help="level of the SD's upper confidence limit in Browne's method, in (0, 1) (default 0.8)")
    p.add_argument("--out", metavar="DIR", help="write a Markdown report with a figure to DIR")
    add_closing_options(p, run)


def run(args: argparse.Namespace) -> int:
    from simcheck.predictive import load_predictive

    res = load_predictive(args.scenario, draws=args.draws, replicates=args.replicates, seed=args.seed,
                          pilot_confidence=args.pilot_confidence, n=args.n)
    if args.out is not None:
        from simcheck.predictive_report import write_predictive_report

        path = write_predictive_report(res, args.out)
        note(f"report written to {path}")
    if args.json:
        emit_json(res.to_dict())
        return 0
    sys.stdout.write(render(res, args.n) + "\n")
    return 0


def _a(x) -> str:
    return "-" if x is None else f"{x:.4f}"


def render(res, n_extra: int | None = None) -> str:
    """The three answers side by side, then what was assumed."""
    t = res.targets
    lines = [f"{res.title}", "",
             f"targets: coverage >= {t['coverage']:.4g}, assurance >= {t['assurance']:g} "
             f"(share of samples with half-width <= {t['margin']:g})", "", "Uncertain planning values:"]
    lines += [f"  - {u.describe()}" for u in res.uncertain]
    lines.append("")
    rows = []
    cond = res.conditional
    cu = res.unconditional_at_conditional_n
    rows.append(["conditional (point values)", res.n_conditional if res.n_conditional is not None else "not reached",
                 _a(getattr(cond, "assurance", None)), _a(cu.assurance if cu else None)])
    un = res.unconditional
    rows.append(["unconditional (predictive)", res.n_unconditional if res.n_unconditional is not None else "not reached",
                 "-", (f"{un.assurance:.4f} +/- {un.assurance_mcse:.4f}" if un and un.assurance is not None else "-")])
    if res.browne is not None:
        b = res.browne
        rows.append([f"Browne 1995 (SD at upper {b['level']:g} limit)", b["n"], "-", "-"])
    headers = ["answer", "n", "assurance at point values", "unconditional assurance"]
    if res.dropout:
        headers.append(f"n to enrol (dropout {res.dropout:g})")
        for r in rows:
            r.append(res.enrolled(r[1]) if isinstance(r[1], int) else "-")
    lines.append(table(headers, rows))
    lines += ["", f"decision: {res.decision} (criterion {res.to_dict()['criterion']}: "
                  f"{res.to_dict()['criterion_text']})"]
    if n_extra is not None and n_extra in res.checked:
        r = res.checked[n_extra]
        lines += ["", f"at n = {n_extra}: unconditional coverage {r.coverage:.4f}, assurance {_a(r.assurance)}"
                      + (f" +/- {r.assurance_mcse:.4f} (MCSE)" if r.assurance_mcse is not None else "")]
    if cu is not None and cu.assurance is not None:
        lines += ["", f"The conditional n = {res.n_conditional} meets the assurance target at the point values, but "
                      f"given the uncertainty of the planning values its assurance is {cu.assurance:.3f}."]
    lines += ["", f"run: {res.draws} parameter draws x {res.replicates_per_draw} replicates each, seed {res.seed}"]
    lines += [f"note: {x}" for x in res.notes]
    if res.browne is not None:
        lines.append(f"note: Browne: {res.browne['text']}; formula n at the point values {res.browne['n_point']}")
    lines.append("note: the Kieser & Wassmer (1996) correction is not computed by simcheck")
    lines += ["", CAUTION]
    return "\n".join(lines)
