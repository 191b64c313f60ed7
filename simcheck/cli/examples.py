"""``simcheck examples [--copy DIR]``: the example scenarios shipped with the package.

The scenarios live in ``simcheck/data/examples`` (the repository's
``scenarios/`` folder, packaged), so an installed simcheck has them too.
Every example is invented; the list says so.
"""

from __future__ import annotations

import argparse
import sys

from simcheck.cli.common import emit_json, note, table
from simcheck.cli.options import add_closing_options


def add_parser(subparsers) -> None:
    p = subparsers.add_parser(
        "examples",
        help="list the example scenarios shipped with simcheck, or copy them to a folder",
        description=(
            "List the example scenario and sweep files that come with simcheck (invented settings), "
            "or copy them into a folder to run and edit them: simcheck examples --copy my-scenarios, "
            "then simcheck search my-scenarios/turnaround.toml. Existing files are never overwritten."
        ),
    )
    p.add_argument("--copy", metavar="DIR", help="copy every example into DIR (created if missing)")
    add_closing_options(p, run)


def run(args: argparse.Namespace) -> int:
    from simcheck.api import copy_examples, example_list

    rows = example_list()
    copied: list[str] = []
    skipped: list[str] = []
    if args.copy is not None:
        copied, skipped = copy_examples(args.copy)
    if args.json:
        emit_json({
            "examples": [{"name": r.name, "kind": r.kind, "title": r.title, "file": r.file} for r in rows],
            "copied": copied,
            "skipped": skipped,
            "invented": True,
        })
        return 0
    if args.copy is None:
        sys.stdout.write(table(["name", "kind", "title"], [[r.name, r.kind, r.title] for r in rows]) + "\n")
        sys.stdout.write("All examples are invented settings. Copy them with: simcheck examples --copy DIR\n")
        return 0
    note(f"examples: {len(copied)} file{'s' if len(copied) != 1 else ''} copied to {args.copy}")
    for name in skipped:
        note(f"examples: {name} already exists in {args.copy} with other content; not overwritten")
    return 0
