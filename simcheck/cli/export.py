"""``simcheck export``: a sweep store as one CSV or Parquet table."""

from __future__ import annotations

import argparse
from pathlib import Path

from simcheck.cli.common import add_json, emit_json, note


def add_parser(subparsers) -> None:
    p = subparsers.add_parser(
        "export",
        help="write a sweep store as a CSV or Parquet table",
        description=(
            "Write one row per stored cell (one per n for check and curve sweeps, one per method for "
            "method comparisons): the varied values as columns, then the result fields. Safe while "
            "the sweep is still running (the store is opened read-only). Parquet needs pyarrow: "
            "pip install 'simcheck[parquet]'."
        ),
    )
    p.add_argument("store", metavar="FILE.sqlite", help="sweep store written by `simcheck sweep`")
    p.add_argument("--out", required=True, metavar="FILE.csv|FILE.parquet", help="output table (.csv or .parquet)")
    add_json(p)
    p.set_defaults(run=run)


def run(args: argparse.Namespace) -> int:
    from simcheck.errors import InputError
    from simcheck.sweep.store import cells_frame

    out = Path(args.out)
    kind = out.suffix.lower()
    if kind not in (".csv", ".parquet"):
        raise InputError("--out", f"must end in .csv or .parquet, got {args.out!r}")
    if kind == ".parquet":
        try:
            import pyarrow  # noqa: F401
        except ImportError:
            raise InputError("--out", "writing Parquet needs pyarrow: pip install 'simcheck[parquet]'") from None
    if out.parent and not out.parent.exists():
        raise InputError("--out", f"folder does not exist: {out.parent}")
    frame = cells_frame(args.store)
    if kind == ".csv":
        frame.to_csv(out, index=False)
    else:
        frame.to_parquet(out, index=False, engine="pyarrow")
    cells = int(frame["cell_key"].nunique()) if len(frame) else 0
    if args.json:
        emit_json({"out": str(out), "rows": int(len(frame)), "cells": cells, "columns": list(map(str, frame.columns))})
    else:
        note(f"export: {len(frame)} rows ({cells} cells) written to {out}")
    return 0
