"""Shared command-line plumbing: one-line errors, JSON output, progress."""

from __future__ import annotations

import argparse
import json
import sys
from typing import Any

from simcheck.results import clean_json


class UsageError(Exception):
    """A command-line usage problem (exit 2, one line)."""


class Parser(argparse.ArgumentParser):
    """ArgumentParser whose errors are one line on stderr and exit code 2."""

    def error(self, message: str) -> None:  # noqa: D401
        raise UsageError(f"{self.prog}: {message}")


def add_json(p: argparse.ArgumentParser) -> None:
    p.add_argument("--json", action="store_true", help="print exactly one JSON object on stdout")


def add_sim_overrides(p: argparse.ArgumentParser) -> None:
    p.add_argument("--replicates", type=int, metavar="R", help="number of simulated samples (overrides the scenario)")
    p.add_argument("--seed", type=int, metavar="S", help="root random seed (overrides the scenario)")


def emit_json(obj: Any) -> None:
    sys.stdout.write(json.dumps(clean_json(obj), allow_nan=False) + "\n")
    sys.stdout.flush()


def note(text: str) -> None:
    """A notice for the user; always on stderr so --json stdout stays clean."""
    sys.stderr.write(text.rstrip("\n") + "\n")
    sys.stderr.flush()


def fmt(x: Any, digits: int = 4) -> str:
    if x is None:
        return "-"
    if isinstance(x, float):
        return f"{x:.{digits}f}"
    return str(x)


def table(headers: list[str], rows: list[list[Any]]) -> str:
    """A plain fixed-width text table."""
    cells = [[str(h) for h in headers]] + [[fmt(c) for c in r] for r in rows]
    widths = [max(len(r[i]) for r in cells) for i in range(len(headers))]
    lines = ["  ".join(c.rjust(w) for c, w in zip(r, widths)) for r in cells]
    lines.insert(1, "  ".join("-" * w for w in widths))
    return "\n".join(lines)
