"""``simcheck demo [--out DIR]``: an invented example, end to end.

Runs the packaged demo scenario (simcheck/data/demo.toml, a copy of
scenarios/demo.toml): closed-form n, coverage at it, the search for each
interval method, and the full report.
"""

from __future__ import annotations

import argparse
import sys
import time
from importlib import resources

from simcheck import CAUTION
from simcheck.cli.common import emit_json, note
from simcheck.cli.options import add_closing_options

DEFAULT_OUT = "reports/demo"


def add_parser(subparsers) -> None:
    p = subparsers.add_parser(
        "demo",
        help="run an invented example end to end and write its report",
        description=(
            "Run the built-in invented example (days to settle a warranty claim, lognormal data): "
            "the closed-form n, the coverage it really gives, the smallest n that meets the "
            "coverage and assurance targets for the t and Cox intervals, and the report "
            f"(default folder {DEFAULT_OUT}, relative to the current folder)."
        ),
    )
    p.add_argument("--out", default=DEFAULT_OUT, metavar="DIR", help=f"output folder (default {DEFAULT_OUT})")
    p.add_argument("--replicates", type=int, metavar="R",
                   help="simulated samples per n (default: the demo's 10,000)")
    p.add_argument("--show-scenario", action="store_true", help="print the demo scenario file and exit")
    add_closing_options(p, run)


def scenario_text() -> str:
    """The packaged demo scenario (TOML text)."""
    return resources.files("simcheck").joinpath("data", "demo.toml").read_text(encoding="utf-8")


def run(args: argparse.Namespace) -> int:
    import importlib

    # the subpackage: the package attribute `simcheck.report` is the API function
    rep = importlib.import_module("simcheck.report")
    from simcheck.report.text import STATUS_TEXT, decision_status, fmt_estimate
    from simcheck.scenario import load_scenario

    if args.show_scenario:
        sys.stdout.write(scenario_text())
        return 0
    rep.check_out_dir_usable(args.out)
    start = time.monotonic()
    over = {} if args.replicates is None else {"simulation.replicates": args.replicates}
    with resources.as_file(resources.files("simcheck").joinpath("data", "demo.toml")) as path:
        scenario = load_scenario(path, overrides=over)
    study = rep.run_study(scenario, progress=lambda m: note(f"simcheck: {m}"), units="days")
    files = rep.write_report(args.out, study)
    seconds = time.monotonic() - start
    summary = {
        "title": study.title,
        "invented": True,
        "n_formula": study.n_formula,
        "coverage_at_formula_n": {m: _cov(c) for m, c in study.formula_checks.items()},
        "n_found": {m: s.n for m, s in study.searches.items()},
        "decision": {m: decision_status(s) for m, s in study.searches.items()},
        "coverage_at_n_found": {m: _found(s) for m, s in study.searches.items()},
        "best": study.best,
        "fewest_n": study.fewest_n(),
        "replicates": study.replicates,
        "seed": study.seed,
        "report": files.to_dict(),
        "seconds": round(seconds, 1),
    }
    if args.json:
        emit_json(summary)
        return 0
    out = [study.title, ""]
    f = study.formula or {}
    out.append(f"formula n ({f.get('multiplier_kind', 'z')} multiple, SD {f.get('sd', 0):g} days, "
               f"margin {study.margin:g} day{'s' if study.margin != 1 else ''}): {study.n_formula}")
    for m, c in study.formula_checks.items():
        out.append(f"  coverage at n = {c.n} with {m}: {c.coverage:.4f} (MCSE {c.coverage_mcse:.4f}), "
                   f"assurance {c.assurance:.3f}")
    for m, s in study.searches.items():
        status = decision_status(s)
        if s.n is not None:
            cov = "" if s.coverage is None else f", coverage {fmt_estimate(s.coverage, s.coverage_mcse, s.exact)}"
            lead = "" if status == "clear" else f"{STATUS_TEXT[status]}: "
            out.append(f"n found with {m}: {lead}{s.n:,}{cov}")
        else:
            out.append(f"n found with {m}: {STATUS_TEXT.get(status, status)} (none up to {study.n_max:,})")
    if study.fewest_n():
        out.append(f"needs the fewest n: {', '.join(study.fewest_n())}")
    out.append(f"report: {files.html} (and report.md, figures/) in {seconds:.0f} s")
    out.append("")
    out.append(CAUTION)
    sys.stdout.write("\n".join(out) + "\n")
    return 0


def _found(s) -> dict:
    """The search's own confirmation figures at the n found."""
    from simcheck.report.text import decision_status

    return {"n": s.n, "coverage": s.coverage, "coverage_mcse": s.coverage_mcse, "assurance": s.assurance,
            "decision": decision_status(s), "replicates_used": s.replicates_used}


def _cov(c) -> dict:
    return {"n": c.n, "coverage": c.coverage, "coverage_mcse": c.coverage_mcse, "assurance": c.assurance}
