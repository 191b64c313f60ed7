"""``simcheck store``: look after a sweep store (check a copy, clear a stale writer)."""

from __future__ import annotations

import argparse
from pathlib import Path

from simcheck.cli.common import Parser, add_json, emit_json, note


def add_parser(subparsers) -> None:
    p = subparsers.add_parser(
        "store",
        help="check a sweep store (e.g. a copy) or clear the writer a killed sweep left",
        description="Look after a sweep store written by `simcheck sweep`.",
    )
    sub = p.add_subparsers(dest="action", metavar="ACTION", parser_class=Parser)
    c = sub.add_parser(
        "check",
        help="verify a store: SQLite integrity check and every cell's checksum",
        description=(
            "Verify a store (for instance a copy): SQLite's integrity check and the SHA-256 checksum of "
            "every stored cell. Exit 0 when sound; exit 2 with one line naming the problem otherwise. "
            "Opens the file read-only."
        ),
    )
    c.add_argument("store", metavar="FILE.sqlite")
    add_json(c)
    u = sub.add_parser(
        "unlock",
        help="clear the writer row a killed sweep on another machine left",
        description=(
            "A sweep marks the store it writes; a second sweep on the same store is refused. A sweep "
            "killed on this machine is taken over automatically; use this when the store was written "
            "from another machine that is no longer running it."
        ),
    )
    u.add_argument("store", metavar="FILE.sqlite")
    p.set_defaults(run=run)


def run(args: argparse.Namespace) -> int:
    from simcheck.errors import InputError

    if args.action == "check":
        return _check(args)
    if args.action == "unlock":
        return _unlock(args)
    raise InputError("ACTION", "choose one of: check, unlock (e.g. simcheck store check FILE.sqlite)")


def _check(args: argparse.Namespace) -> int:
    from simcheck.errors import InputError
    from simcheck.sweep.integrity import check_store
    from simcheck.sweep.store import open_readonly, sidecars

    conn = open_readonly(args.store)
    try:
        report = check_store(conn, str(args.store))
    finally:
        conn.close()
    wal = sidecars(Path(args.store))[0]
    if wal.is_file() and wal.stat().st_size > 0:
        note(f"store: note: {wal} holds cells not yet copied into {args.store}; copy both files together")
    if args.json:
        emit_json(report.to_dict())
    if report.integrity != "ok":
        raise InputError("FILE.sqlite", f"{args.store} fails SQLite's integrity check: {report.integrity}")
    if report.corrupt:
        key, problem = report.corrupt[0]
        raise InputError(
            "FILE.sqlite", f"{args.store}: {len(report.corrupt)} of {report.cells} cells cannot be trusted "
            f"(first: cell {key[:12]}: {problem}); run the sweep again to recompute them"
        )
    if not args.json:
        what = "checksums ok" if report.checksums else "no checksums (schema 1: a sweep run upgrades it)"
        print(f"{args.store}: integrity ok; {report.cells} cells, {what}")
    return 0


def _unlock(args: argparse.Namespace) -> int:
    from simcheck.sweep.store import clear_writer

    row = clear_writer(args.store)
    if row is None:
        print(f"{args.store}: no sweep holds it; nothing to do")
    else:
        pid, host, since = row
        print(f"{args.store}: cleared the mark of the sweep of process {pid} on {host} (since {since})")
    return 0
