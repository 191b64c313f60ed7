"""``simcheck fit``: fit the data models simcheck knows to a column of pilot data."""

from __future__ import annotations

import argparse
import os
import sys

from simcheck.cli.common import emit_json, table
from simcheck.cli.options import add_closing_options

QQ_FORMATS = (".png", ".svg", ".pdf")


def add_parser(subparsers) -> None:
    p = subparsers.add_parser(
        "fit",
        help="fit candidate data models to pilot data and print a [data] table",
        description=(
            "Fit the data models simcheck knows (normal, lognormal, gamma, Weibull, beta on a bounded "
            "range, zero-inflated forms when zeros are present; Poisson, negative binomial and "
            "zero-inflated Poisson for whole numbers) to one column of a CSV file, rank them by AIC "
            "with a goodness-of-fit statistic, and print the best one's [data] table ready to paste "
            "into a scenario. A small pilot rarely tells the models apart; the fitted values are "
            "planning values, themselves uncertain."
        ),
    )
    p.add_argument("file", metavar="FILE.csv", help="CSV file of pilot data (a header row names the columns)")
    p.add_argument("--column", required=True, metavar="C", help="the column holding the values")
    p.add_argument("--lower", type=float, metavar="L", help="lower end of a bounded range (beta candidate; with --upper)")
    p.add_argument("--upper", type=float, metavar="U", help="upper end of a bounded range (beta candidate; with --lower)")
    p.add_argument("--qq", metavar="OUT.png", help="write a Q-Q figure of the best models (.png, .svg or .pdf)")
    add_closing_options(p, run)


def run(args: argparse.Namespace) -> int:
    from simcheck.errors import InputError
    from simcheck.fit import fit_file

    if args.qq is not None:
        ext = os.path.splitext(args.qq)[1].lower()
        folder = os.path.dirname(os.path.abspath(args.qq))
        if ext not in QQ_FORMATS:
            raise InputError("--qq", f"must end in {', '.join(QQ_FORMATS)}, got {args.qq!r}")
        if not os.path.isdir(folder):
            raise InputError("--qq", f"folder does not exist: {folder}")
    res = fit_file(args.file, args.column, lower=args.lower, upper=args.upper)
    if args.qq is not None:
        from simcheck.fit.qq import save_qq

        save_qq(res, args.qq)
        sys.stderr.write(f"Q-Q figure written to {args.qq}\n")
    if args.json:
        emit_json(res.to_dict())
        return 0
    sys.stdout.write(render(res, args.file, args.column) + "\n")
    return 0


def render(res, file: str, column: str) -> str:
    """Ranked models, the best model's [data] table and the notes."""
    lines = [f"Models fitted to {res.source}: n = {res.n}, mean {res.mean:.6g}, "
             f"SD {res.sd:.6g} (divisor n - 1), {res.zeros} zeros"
             + (", whole numbers" if res.whole_numbers else ""), ""]
    rows = []
    for i, m in enumerate(res.models, 1):
        p = "-" if m.gof_pvalue is None else f"{m.gof_pvalue:.3f}"
        rows.append([i, m.model, m.parameters, f"{m.aic:.2f}", f"{m.delta_aic:.2f}",
                     f"{m.gof} {m.gof_statistic:.4f}", p])
    lines.append(table(["rank", "model", "k", "AIC", "dAIC", "goodness of fit", "p (descriptive)"], rows))
    lines += ["", f"Best by AIC: {res.best} ({res.best_fit.method}). Paste into a scenario:", ""]
    lines.append(res.data_table())
    lines += ["", "To carry the uncertainty of the fitted parameters into the plan (`simcheck predictive`), "
                  "add to the table:", "", f"pilot_n = {res.n}   # each draw refits the model to {res.n} simulated values"]
    if res.best == "normal":
        lines += ["", "or, for the SD alone (its scaled chi-square law), give instead:", "",
                  f"sd = {{ pilot_n = {res.n}, pilot_sd = {res.sd:.6g} }}   # the sample SD, divisor n - 1"]
    lines += ["", "Or resample the pilot itself:", "",
              f'[data]\nmodel = "empirical"\nfile = "{file}"\ncolumn = "{column}"', ""]
    lines.append("Notes:")
    lines += [f"  - {n}" for n in res.notes]
    for m in res.models:
        lines += [f"  - {m.model}: {n}" for n in m.notes]
    lines.append("  - a fitted model holds only as an assumption; simulated results hold only under it")
    return "\n".join(lines)
