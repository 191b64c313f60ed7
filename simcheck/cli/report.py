"""``simcheck report SCENARIO|STORE --out DIR``: figures, tables and a methods paragraph."""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

from simcheck import CAUTION
from simcheck.cli.common import emit_json, note
from simcheck.cli.options import add_closing_options


#: file kinds people hand to `report` by mistake (pilot data, exported tables)
DATA_SUFFIXES = (".csv", ".tsv", ".txt", ".parquet", ".json", ".xlsx", ".xls")


def add_parser(subparsers) -> None:
    p = subparsers.add_parser(
        "report",
        help="write figures, tables and a methods paragraph (Markdown and HTML)",
        description=(
            "For a scenario file: compute the closed-form n, search the smallest n for every listed "
            "interval method, evaluate coverage around it and write report.md, a self-contained "
            "report.html, results.csv, summary.json and the figures (PNG, SVG, PDF) into DIR. "
            "For a sweep store (.sqlite): the sweep's table and small-multiple figures. "
            "Equal inputs give byte-identical files."
        ),
    )
    p.add_argument("source", metavar="SCENARIO|STORE", help="scenario file (TOML) or sweep store (.sqlite)")
    p.add_argument("--out", required=True, metavar="DIR", help="output folder (created when missing)")
    add_closing_options(p, run, simulation=True, outside_files=True)


def overrides(args: argparse.Namespace) -> dict[str, object]:
    o: dict[str, object] = {}
    if getattr(args, "replicates", None) is not None:
        o["simulation.replicates"] = args.replicates
    if getattr(args, "seed", None) is not None:
        o["simulation.seed"] = args.seed
    return o


def run(args: argparse.Namespace) -> int:
    import importlib

    # the subpackage: the package attribute `simcheck.report` is the API function
    rep = importlib.import_module("simcheck.report")
    from simcheck.errors import InputError
    from simcheck.files import regular_file

    src = Path(args.source)
    # a regular file only: a FIFO or device would hang the store sniffing below
    try:
        regular_file(src, label=str(src), what="scenario file or sweep store")
    except InputError as exc:
        if exc.problems[0].message == "no such file":
            raise InputError("SCENARIO|STORE", f"file not found: {src}") from None
        raise
    if not rep.is_store(src) and src.suffix.lower() in DATA_SUFFIXES:
        raise InputError("SCENARIO|STORE", f"{src.name} is a {src.suffix.lower()[1:].upper()} data file; report expects "
                                           "a scenario file (.toml) or a sweep store (.sqlite)")
    rep.check_out_dir_usable(args.out)
    if rep.is_store(src) and overrides(args):
        raise InputError("--replicates/--seed", "apply to a scenario file, not to a sweep store")
    files, results = rep.report(src, args.out, overrides=overrides(args), allow_outside_files=args.allow_outside_files, progress=lambda m: note(f"simcheck: {m}"))
    if args.json:
        emit_json({"report": files.to_dict(), "summary": results.to_dict()})
        return 0
    sys.stdout.write(text_summary(files, results) + "\n")
    return 0


def text_summary(files, results) -> str:
    from simcheck.report import StudyResults
    from simcheck.report.text import STATUS_TEXT, decision_status, fmt_estimate

    lines = [results.title, ""]
    if isinstance(results, StudyResults):
        lines.append(f"formula n:   {results.n_formula if results.n_formula is not None else '-'}")
        for m in results.methods:
            s = results.searches.get(m)
            if s is None:
                continue
            status = decision_status(s)
            lead = "" if status == "clear" else f"{STATUS_TEXT[status]}: "
            if s.n is not None:
                cov = "" if s.coverage is None else f"  coverage {fmt_estimate(s.coverage, s.coverage_mcse, s.exact)}"
                lines.append(f"n found:     {lead}{s.n:,} with {m}{cov}")
            else:
                lines.append(f"n found:     {lead}none up to {results.n_max:,} with {m}")
    else:
        lines.append(f"cells:       {results.to_dict()['cells']} (task {results.task})")
    lines.append(f"report:      {files.html}")
    lines.append(f"             {files.markdown}, {files.table}, figures in {files.out_dir / 'figures'}")
    lines.append("")
    lines.append(CAUTION)
    return "\n".join(lines)
