"""The ``simcheck`` command: argument parsing and printing only.

Each sub-command lives in its own module ``simcheck.cli.<name>`` exposing
``add_parser(subparsers)`` and ``run(args) -> int``.
"""

from __future__ import annotations

import importlib
import os
import sys

from simcheck import __version__
from simcheck.cli.common import Parser, UsageError, error_line, suggest, unknown_options
from simcheck.errors import InputError

COMMANDS = ["formula", "check", "curve", "search", "sweep", "export", "store", "report", "demo"]


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
        argv = sys.argv[1:] if argv is None else list(argv)
        if argv and not argv[0].startswith("-") and argv[0] not in COMMANDS:
            raise UsageError(error_line(f"unknown command {argv[0]!r}{suggest(argv[0], COMMANDS) or ''}; "
                                        f"commands: {', '.join(COMMANDS)}"))
        args, extras = parser.parse_known_args(argv)
        if extras:
            raise unknown_options(parser, getattr(args, "command", None), extras)
        if not getattr(args, "command", None):
            parser.print_help(sys.stderr)
            return 2
        return int(args.run(args) or 0)
    except UsageError as exc:
        sys.stderr.write(f"{exc}\n")
        return 2
    except InputError as exc:
        sys.stderr.write(error_line(exc.one_line()) + "\n")
        return 2
    except KeyboardInterrupt:
        sys.stderr.write(error_line("interrupted") + "\n")
        return 130
    except BrokenPipeError:
        return 0
    except Exception as exc:  # the contract: exit 1, one line, no traceback
        if os.environ.get("SIMCHECK_DEBUG"):
            raise
        sys.stderr.write(error_line(f"unexpected failure: {type(exc).__name__}: {exc}") + "\n")
        return 1
