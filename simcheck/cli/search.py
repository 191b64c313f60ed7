"""``simcheck search SCENARIO``: the smallest n that meets the coverage and assurance targets."""

from __future__ import annotations

import argparse
import sys
from typing import Any

from simcheck import CAUTION
from simcheck.cli.common import emit_json, table
from simcheck.bound_text import bound_words, coverage_words
from simcheck.cli.check import CLI_FIELDS, SearchProgress, bound_overrides, data_lines, run_seed
from simcheck.cli.options import add_closing_options, add_scenario_argument
from simcheck.errors import Collector

BUDGET_MIN, BUDGET_MAX = 100, 10**12


def add_parser(subparsers) -> None:
    p = subparsers.add_parser(
        "search",
        help="smallest n that meets the targets",
        description=(
            "Find the smallest n whose simulated coverage is at least the confidence minus the "
            "coverage tolerance and whose assurance (share of samples with half-width at most the "
            "target margin) reaches the target. Starts from the closed-form n, brackets, locates "
            "the crossing cheaply, then confirms it on fresh replicates, doubling them until the "
            "decision is clear against the Monte Carlo error or the replicate budget is spent. "
            "With several methods in method.interval, every method is searched on the same draws "
            "and the one needing the least n is named. Exact computations (proportions, normal data "
            "with z or t) answer the smallest n at which the targets hold at every n up to "
            "target.window x n (default 1.25): coverage of count data oscillates in n. Every answer "
            "names its criterion and its decision (clear or undecided)."
        ),
    )
    add_scenario_argument(p)
    p.add_argument("--budget", type=int, metavar="B",
                   help="cap on the replicates the search may simulate (overrides simulation.budget; "
                        "default 20 x replicates; 6 x for bootstrap methods)")
    p.add_argument("--window", type=float, metavar="W",
                   help="exact searches: the targets must hold at every n up to W x n (overrides "
                        "target.window; default 1.25; 1 = the first n that meets them)")
    p.add_argument("--n-min", dest="n_min", type=int, metavar="A", help="smallest n considered (default: simulation.n_min)")
    p.add_argument("--n-max", dest="n_max", type=int, metavar="B",
                   help="search ceiling (default: simulation.n_max)")
    add_closing_options(p, run, method=True, simulation=True, outside_files=True)


def run(args: argparse.Namespace) -> int:
    from simcheck.scenario import load_scenario
    from simcheck.tasks import run_task

    c = Collector()
    overrides: dict[str, Any] = {}
    if args.budget is not None:
        b = c.number("--budget", args.budget, low=BUDGET_MIN, high=BUDGET_MAX, integer=True)
        if b is not None:
            overrides["simulation.budget"] = int(b)
    if args.window is not None:
        w = c.number("--window", args.window, low=1, high=4)
        if w is not None:
            overrides["target.window"] = float(w)
    c.raise_if_any()
    overrides.update(bound_overrides(args))
    scenario = load_scenario(args.scenario, overrides or None, allow_outside_files=args.allow_outside_files)
    seed = run_seed(scenario, args.seed)
    with SearchProgress(budget=overrides.get("simulation.budget", getattr(scenario, "budget", None))) as prog:
        res = run_task(scenario, "search", n_min=args.n_min, n_max=args.n_max, method=args.method,
                       replicates=args.replicates, seed=seed, progress=prog, fields=CLI_FIELDS)
    if args.json:
        emit_json(json_object(res))
        return 0
    sys.stdout.write(report(scenario, res) + "\n")
    return 0


def json_object(res) -> dict:
    """The search JSON: one method keeps every key of its result and adds ``by_method`` and ``best``."""
    from simcheck.results import MethodComparison

    if isinstance(res, MethodComparison):
        return res.to_dict()
    d = res.to_dict()
    d["by_method"] = [res.to_dict()]
    d["best"] = res.method if res.reached else None
    return d


# --- readable output ------------------------------------------------------------
def _p(x: Any) -> str:
    return "-" if x is None else f"{x:.4f}"


def _m(x) -> str:
    return "-" if x is None else f"{x:g}"


def _range(r) -> str:
    if r.n_range is None:
        return "-"
    lo, hi = r.n_range
    return str(lo) if lo == hi else f"{lo}-{hi}"


def _header(scenario, design) -> list[str]:
    d = design
    lines = [scenario.title, "", *data_lines(d)]
    if d.clusters is not None:
        lines.append(f"clusters:    ICC {d.clusters.icc:g} (n counts clusters)")
    if d.population is not None:
        lines.append(f"population:  {d.population.size} units, sampled without replacement")
    return lines


def _targets_line(t: dict, ratio_scale: bool = False) -> str:
    text = (f"targets:     coverage >= {t['coverage_target']:.4f} "
            f"({t['confidence']:.4g} confidence - {t['coverage_tolerance']:g} tolerance)")
    if t.get("margin") is not None and t.get("assurance") is not None:
        what = "half-width" if t.get("bound", "two-sided") == "two-sided" else "margin"
        if ratio_scale:
            what = "margin factor"
        text += f", assurance >= {t['assurance']:g} (share of samples with {what} <= {t['margin']:g})"
    return text


def _one(r, design) -> list[str]:
    lines = []
    if r.reached:
        nb = f"   (group b: n_b = {r.n_b})" if r.n_b is not None else ""
        head = "UNDECIDED, conservative end: " if r.decision == "undecided" else ""
        lines.append(f"n found:     {head}{r.n}{nb}")
        if r.dropout:
            nbe = f"   (group b: {r.n_b_enrolled})" if r.n_b is not None else ""
            lines.append(f"n to enrol:  {r.n_enrolled}{nbe}   (dropout {r.dropout:g}: ceil(n / (1 - dropout)); "
                         "n counts the units analysed)")
        lines.append(f"n range:     {_range(r)}   (n consistent with the Monte Carlo error)"
                     if not r.exact else f"n range:     {_range(r)}   (exact: no Monte Carlo error)")
        if r.n_first is not None and r.n_first != r.n:
            lines.append(f"first n:     {r.n_first}   (the targets first hold here)")
    elif r.stop_reason == "window reaches n_max":
        lines.append("n found:     UNDECIDED within n_max: the window of the candidate n reaches past n_max")
    elif _undecided(r):
        lines.append("n found:     UNDECIDED: the replicate budget was spent before any n was confirmed")
        if r.n_range is not None:
            lines.append(f"n range:     {_range(r)}   (the boundary may lie anywhere here)")
    else:
        lines.append("n found:     NOT REACHED by the search ceiling n_max")
    if r.n_formula is not None:
        ratio = f"   (found / formula = {r.ratio_to_formula:.2f})" if r.ratio_to_formula is not None else ""
        lines.append(f"formula n:   {r.n_formula}{ratio}")
    else:
        lines.append("formula n:   - (no closed form applies)")
    at = "at n" if r.reached else (f"at n = {r.at_n.n}" if r.at_n is not None else "at n_max")
    if r.coverage is not None:
        mc = "" if r.exact else f" +/- {_p(r.coverage_mcse)} (MCSE)"
        lines.append(f"coverage:    {_p(r.coverage)}{mc}  {at}")
    if r.assurance is not None:
        mc = "" if r.exact else f" +/- {_p(r.assurance_mcse)} (MCSE)"
        lines.append(f"assurance:   {_p(r.assurance)}{mc}  {at}")
    if not r.reached and not _undecided(r):
        if r.best_coverage is not None:
            lines.append(f"best:        coverage {_p(r.best_coverage)} at n = {r.best_coverage_n}")
        if r.methods_that_reach:
            lines.append(f"suggested:   methods that reach the targets here (not among your methods): "
                         f"{', '.join(r.methods_that_reach)}")
        else:
            lines.append("suggested:   no other interval method in simcheck reaches the targets by n_max")
    sim = "exact (no simulation)" if r.exact else f"{r.replicates_used} replicates simulated"
    lines.append(f"run:         {sim}, seed {r.seed}, method {r.method}")
    lines.append(f"stopped:     {r.stop_reason}")
    lines.append(f"decision:    {r.decision}" + (f"   (about {r.replicates_needed} replicates per n would settle it)"
                                                  if r.replicates_needed else ""))
    lines.append(f"criterion:   {r.criterion}: {r.criterion_text}")
    for t in r.notes:
        lines.append(f"note: {t}")
    return lines


def report(scenario, res) -> str:
    """Readable search result: one method in full, or the comparison table."""
    from simcheck.results import MethodComparison

    design = scenario.design
    lines = _header(scenario, design)
    if isinstance(res, MethodComparison):
        first = res.by_method[0]
        lines.append(f"confidence:  {design.confidence:.4g}, target margin {_m(design.margin)}"
                     + (f" {design.units}" if design.units else "")
                     + (f" ({design.relative_margin:g} of the true value)" if design.relative_margin is not None else ""))
        if design.bound != "two-sided":
            lines.append(f"bound:       one-sided {bound_words(design.bound)}: coverage = {coverage_words(design.bound)}; "
                         "margin = distance from estimate to limit")
        lines.append(_targets_line(first.targets, design.ratio_scale))
        lines.append("")
        headers = ["method", "n", "n range", "formula n", "n/formula", "coverage", "+/- mcse",
                   "assurance", "+/- mcse", "decision", "stopped"]
        rows = []
        for r in res.by_method:
            rows.append([
                r.method, "not reached" if not r.reached else str(r.n), _range(r),
                "-" if r.n_formula is None else str(r.n_formula),
                "-" if r.ratio_to_formula is None else f"{r.ratio_to_formula:.2f}",
                _p(r.coverage), "exact" if r.exact else _p(r.coverage_mcse),
                _p(r.assurance), "exact" if r.exact else _p(r.assurance_mcse), r.decision, r.stop_reason,
            ])
        lines.append(table(headers, rows))
        crit = {(r.criterion, r.criterion_text) for r in res.by_method}
        for name, text in sorted(crit):
            lines.append(f"criterion:   {name}: {text}")
        lines.append("")
        if res.best is not None:
            lines.append(f"best:        {res.best} (needs the least n; ties broken by coverage)")
        elif any(_undecided(r) for r in res.by_method):
            lines.append("best:        undecided (the replicate budget was spent before every method was decided)")
        else:
            lines.append("best:        none of the methods reaches the targets by n_max")
        for r in res.by_method:
            if not r.reached and _undecided(r):
                lines.append(f"{r.method}: undecided (replicate budget spent before any n was confirmed)")
            elif not r.reached:
                mine = {x.method for x in res.by_method}
                sug = ", ".join(m if m in mine else f"{m} (not among your methods)" for m in r.methods_that_reach) or "none"
                lines.append(f"{r.method}: not reached by n_max (best coverage {_p(r.best_coverage)} at n = "
                             f"{r.best_coverage_n}); methods that reach it: {sug}")
        for r in res.by_method:
            for t in r.notes:
                lines.append(f"note ({r.method}): {t}")
    else:
        d = design.with_method(res.method)
        lines.append(f"method:      {d.method} {bound_words(d.bound)}, {d.confidence:.4g} confidence, target margin {_m(d.margin)}"
                     + (f" {d.units}" if d.units else "")
                     + (f" ({d.relative_margin:g} of the true value)" if d.relative_margin is not None else ""))
        if d.bound != "two-sided":
            lines.append(f"             one-sided: coverage = {coverage_words(d.bound)}; margin = distance from estimate to limit")
        lines.append(_targets_line(res.targets, design.ratio_scale))
        lines.append("")
        lines.extend(_one(res, d))
    lines.append("")
    lines.append(CAUTION)
    return "\n".join(lines)


def _undecided(r) -> bool:
    """Not reached because the budget ran out, not because n_max fails."""
    return (not r.reached) and r.stop_reason == "replicate budget spent"
