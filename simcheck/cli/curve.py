"""``simcheck curve SCENARIO [--n-min A --n-max B]``: the check at every n of a range."""

from __future__ import annotations

import argparse
import sys

from simcheck.cli.common import UsageError, emit_json
from simcheck.cli.check import CLI_FIELDS, Progress, bound_overrides, report, run_seed
from simcheck.cli.options import add_closing_options, add_scenario_argument


def add_parser(subparsers) -> None:
    p = subparsers.add_parser(
        "curve",
        help="coverage and achieved margin for every n in a range",
        description=(
            "The check of `simcheck check` at every n from --n-min to --n-max (default: the "
            "scenario's simulation.n_min and n_max), every --step, or at the n values of --n-values. "
            "Methods that work on the sample mean and variance share one nested draw of the largest "
            "n, so the whole curve costs about one simulation; bootstrap methods are evaluated at "
            "each n separately, so give them a coarse grid."
        ),
    )
    add_scenario_argument(p)
    p.add_argument("--n-min", dest="n_min", type=int, metavar="A", help="smallest n (default: simulation.n_min)")
    p.add_argument("--n-max", dest="n_max", type=int, metavar="B", help="largest n (default: simulation.n_max)")
    p.add_argument("--step", type=int, metavar="K", help="evaluate every K-th n of the range (default 1; B is always included)")
    p.add_argument("--n-values", dest="n_values", metavar="LIST",
                   help="comma-separated n values, e.g. 20,50,100 (instead of a range)")
    add_closing_options(p, run, method=True, simulation=True, outside_files=True)


def parse_n_values(text: str) -> list[int]:
    out = []
    for part in text.split(","):
        part = part.strip()
        try:
            out.append(int(part))
        except ValueError:
            raise UsageError(f"simcheck curve: argument --n-values: expected whole numbers separated by commas, got {part!r}") from None
    return out


def run(args: argparse.Namespace) -> int:
    from simcheck.scenario import load_scenario
    from simcheck.tasks import run_task

    n_values = parse_n_values(args.n_values) if args.n_values is not None else None
    if n_values is not None and (args.n_min is not None or args.n_max is not None or args.step is not None):
        raise UsageError("simcheck curve: argument --n-values: not with --n-min, --n-max or --step")
    scenario = load_scenario(args.scenario, bound_overrides(args) or None, allow_outside_files=args.allow_outside_files)
    seed = run_seed(scenario, args.seed)
    fields = dict(CLI_FIELDS, n="--n-values")
    with Progress() as prog:
        res = run_task(scenario, "curve", n=n_values, n_min=args.n_min, n_max=args.n_max, step=args.step,
                       method=args.method, replicates=args.replicates, seed=seed, progress=prog, fields=fields)
    if args.json:
        emit_json(res.to_dict())
        return 0
    sys.stdout.write(report(scenario, list(res.rows)) + "\n")
    return 0
