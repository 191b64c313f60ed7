"""The ``simcheck`` command: argument parsing and printing only.

Each sub-command lives in its own module ``simcheck.cli.<name>`` exposing
``add_parser(subparsers)`` and ``run(args) -> int``.
"""

from __future__ import annotations

import importlib
import os
import sys

from simcheck import __version__
from simcheck.cli.common import Parser, UsageError
from simcheck.errors import InputError

COMMANDS = ["formula", "check", "curve", "search", "sweep", "export", "report", "demo", "examples"]


def build_parser() -> Parser:
    parser = Parser(
        prog="simcheck",
        description=(
            "Check by simulation whether a planned sample size delivers the confidence "
            "interval it promises, and find the n that does. Results hold only under the "
            "assumed data model; regulated studies follow their own guidance and a "
            "qualified statistician's review."
        ),
    )
    parser.add_argument("--version", action="version", version=f"simcheck {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=Parser)
    for name in COMMANDS:
        try:
            mod = importlib.import_module(f"simcheck.cli.{name}")
        except ModuleNotFoundError as exc:
            if exc.name == f"simcheck.cli.{name}":
                continue
            raise
        mod.add_parser(sub)
    return parser


def main(argv: list[str] | None = None) -> int:
    try:
        parser = build_parser()
        args = parser.parse_args(argv)
        if not getattr(args, "command", None):
            parser.print_help(sys.stderr)
            return 2
        return int(args.run(args) or 0)
    except UsageError as exc:
        sys.stderr.write(f"{exc}\n")
        return 2
    except InputError as exc:
        sys.stderr.write(f"simcheck: error: {exc.one_line()}\n")
        return 2
    except KeyboardInterrupt:
        sys.stderr.write("simcheck: interrupted\n")
        return 130
    except BrokenPipeError:
        return 0
    except Exception as exc:  # the contract: exit 1, one line, no traceback
        if os.environ.get("SIMCHECK_DEBUG"):
            raise
        sys.stderr.write(f"simcheck: unexpected failure: {type(exc).__name__}: {exc}\n")
        return 1
