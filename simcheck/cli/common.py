"""Shared command-line plumbing: one-line errors, JSON output, progress."""

from __future__ import annotations

import argparse
import json
import sys
from typing import Any

from simcheck.results import clean_json


#: The one prefix of every error line the command writes.
ERROR_PREFIX = "simcheck: error: "


class UsageError(Exception):
    """A command-line usage problem (exit 2, one line)."""


def error_line(message: str) -> str:
    """One error line with the common prefix (never doubled)."""
    text = " ".join(str(message).split())
    return text if text.startswith(ERROR_PREFIX) else ERROR_PREFIX + text


class Parser(argparse.ArgumentParser):
    """ArgumentParser whose errors are one line on stderr and exit code 2.

    Abbreviated options are refused (``--rep`` is not ``--replicates``): an
    abbreviation silently changes meaning when a new option is added, and an
    unknown option gets a "did you mean" suggestion instead.
    """

    def __init__(self, *args: Any, **kwargs: Any) -> None:
        kwargs.setdefault("allow_abbrev", False)
        super().__init__(*args, **kwargs)

    def error(self, message: str) -> None:  # noqa: D401
        where = self.prog.removeprefix("simcheck").strip()
        hint = f" (see simcheck {where} --help)" if where else " (see simcheck --help)"
        raise UsageError(error_line(f"{where + ': ' if where else ''}{message}{hint}"))

    def option_names(self) -> list[str]:
        return [o for a in self._actions for o in a.option_strings if o.startswith("--")]


def suggest(word: str, choices: list[str]) -> str:
    """' (did you mean --replicates?)' for the closest choice, or ''."""
    import difflib

    close = difflib.get_close_matches(word.split("=")[0], choices, n=1, cutoff=0.6)
    return f" (did you mean {close[0]}?)" if close else ""


def unknown_options(parser: "Parser", command: str | None, extras: list[str]) -> UsageError:
    """The usage error for arguments no parser took, with a suggestion for the first unknown option."""
    sub = None
    for a in parser._actions:  # the sub-command's own parser knows its options
        if isinstance(a, argparse._SubParsersAction) and command in a.choices:
            sub = a.choices[command]
    names = sub.option_names() if isinstance(sub, Parser) else parser.option_names()
    first = next((e for e in extras if e.startswith("-")), extras[0])
    where = f"{command}: " if command else ""
    see = f" (see simcheck {command} --help)" if command else " (see simcheck --help)"
    hint = suggest(first, names) if first.startswith("-") else ""
    return UsageError(error_line(f"{where}unrecognized arguments: {' '.join(extras)}{hint or see}"))


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


def paired_lines(d) -> list[str]:
    """Header lines of a paired design: both measurements' models and their correlation."""
    return [f"data a:      {d.model.describe()}  (first measurement of each pair)",
            f"data b:      {d.model_b.describe()}  (second measurement; n counts pairs)",
            f"correlation: {d.correlation:g} between the measurements' normal scores (Gaussian copula)"]
