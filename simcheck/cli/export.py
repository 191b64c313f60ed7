"""``simcheck export``: a sweep store as one CSV or Parquet table, never over the store or an input."""

from __future__ import annotations

import argparse
import os
import tempfile
from pathlib import Path

from simcheck.cli.common import emit_json, note
from simcheck.cli.options import add_closing_options


def add_parser(subparsers) -> None:
    p = subparsers.add_parser(
        "export",
        help="write a sweep store as a CSV or Parquet table",
        description=(
            "Write one row per stored cell (one per n for check and curve sweeps, one per method for "
            "method comparisons): the varied values as columns, then the result fields. Safe while "
            "the sweep is still running (the store is opened read-only), and from a read-only folder. "
            "Refuses to write over the store or any file the sweep read, and over an existing file "
            "unless --force. Cells that fail their checksum are exported with status 'corrupt' and no "
            "numbers. Parquet needs pyarrow: pip install 'simcheck[parquet]'."
        ),
    )
    p.add_argument("store", metavar="FILE.sqlite", help="sweep store written by `simcheck sweep`")
    p.add_argument("--out", required=True, metavar="FILE.csv|FILE.parquet", help="output table (.csv or .parquet)")
    p.add_argument("--force", action="store_true", help="replace --out when it exists (never the store or an input)")
    add_closing_options(p, run)


def _same(a: Path, b: Path) -> bool:
    if os.path.realpath(a) == os.path.realpath(b):
        return True
    try:
        return a.exists() and b.exists() and os.path.samefile(a, b)  # hard links too
    except OSError:
        return False


def check_target(out: Path, store: Path, force: bool) -> None:
    """Refuse an --out that is a folder, the store (or its -wal/-shm), an input of the sweep, or an existing file without --force."""
    from simcheck.errors import InputError
    from simcheck.sweep.store import input_files, sidecars

    if out.is_dir():
        raise InputError("--out", f"{out} is a folder; name a file, e.g. {out / 'results.csv'}")
    parent = out.parent if str(out.parent) else Path(".")
    if not parent.is_dir():
        raise InputError("--out", f"folder does not exist: {parent}")
    for p in [store, *sidecars(store)]:
        if _same(out, p):
            raise InputError("--out", f"{out} is the sweep store itself; choose another file")
    for p in input_files(store):
        if _same(out, p):
            raise InputError("--out", f"{out} is an input of the sweep ({p}); choose another file")
    if (out.exists() or out.is_symlink()) and not force:
        raise InputError("--out", f"{out} exists; pass --force to replace it, or choose another file")


def write_atomically(frame, out: Path, kind: str) -> None:
    """Write to a temporary file in the target folder, then rename: --out is whole or untouched."""
    from simcheck.errors import InputError

    parent = out.parent if str(out.parent) else Path(".")
    fd, tmp = tempfile.mkstemp(prefix=f".{out.name}.", suffix=".tmp", dir=parent)
    os.close(fd)
    mask = os.umask(0)
    os.umask(mask)
    os.chmod(tmp, 0o666 & ~mask)  # the mode a plain open() would give, not mkstemp's 0600
    try:
        if kind == ".csv":
            frame.to_csv(tmp, index=False)
        else:
            frame.to_parquet(tmp, index=False, engine="pyarrow")
        os.replace(tmp, out)
    except OSError as exc:
        raise InputError("--out", f"cannot write {out}: {exc.strerror or exc}") from None
    finally:
        if os.path.exists(tmp):
            os.unlink(tmp)


def run(args: argparse.Namespace) -> int:
    from simcheck.errors import InputError
    from simcheck.sweep.store import cells_frame, open_readonly

    out = Path(args.out)
    if out.is_dir():
        raise InputError("--out", f"{out} is a folder; name a file, e.g. {out / 'results.csv'}")
    kind = out.suffix.lower()
    if kind not in (".csv", ".parquet"):
        raise InputError("--out", f"must end in .csv or .parquet, got {args.out!r}")
    if kind == ".parquet":
        try:
            import pyarrow  # noqa: F401
        except ImportError:
            raise InputError("--out", "writing Parquet needs pyarrow: pip install 'simcheck[parquet]'") from None
    open_readonly(args.store).close()  # a missing or foreign store is named before --out is judged
    check_target(out, Path(args.store), args.force)
    frame = cells_frame(args.store)
    write_atomically(frame, out, kind)
    cells = int(frame["cell_key"].nunique()) if len(frame) else 0
    corrupt = int(frame.attrs.get("corrupt_cells", 0))
    if corrupt:
        note(f"export: warning: {corrupt} cells failed their checksum or hold invalid JSON; they are written with "
             "status 'corrupt' and no numbers (run the sweep again to recompute them)")
    if args.json:
        emit_json({"out": str(out), "rows": int(len(frame)), "cells": cells, "cells_corrupt": corrupt,
                   "columns": list(map(str, frame.columns))})
    else:
        note(f"export: {len(frame)} rows ({cells} cells) written to {out}")
    return 0
