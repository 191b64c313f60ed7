"""Options several commands share (not a command itself).

Every command's parser ends with :func:`add_closing_options`, so the shared
options keep one wording and one order in every ``--help``:
``--method --bound`` (commands that evaluate one scenario), ``--replicates
--seed`` (commands that simulate), ``--json``, ``--allow-outside-files``
(commands that read scenario files).
"""

from __future__ import annotations

import argparse
from typing import Callable

from simcheck.cli.common import add_json, add_sim_overrides
from simcheck.files import OUTSIDE_OPTION


def add_allow_outside(p: argparse.ArgumentParser) -> None:
    """``--allow-outside-files``: let a scenario's data files lie outside its folder."""
    p.add_argument(
        OUTSIDE_OPTION, dest="allow_outside_files", action="store_true",
        help="let population.file, an empirical model's file (and a sweep's base) name files outside "
             "the scenario's folder: absolute paths, '..', symbolic links pointing out (refused by default)",
    )


def add_scenario_argument(p: argparse.ArgumentParser) -> None:
    """The positional scenario file of check, curve, search and predictive."""
    p.add_argument("scenario", metavar="SCENARIO", help="scenario file (TOML)")


def add_method_option(p: argparse.ArgumentParser) -> None:
    p.add_argument("--method", metavar="NAME",
                   help="interval method to use (default: the first in the scenario's method.interval)")


def add_bound_option(p: argparse.ArgumentParser) -> None:
    p.add_argument("--bound", choices=("two-sided", "upper", "lower"), metavar="B",
                   help="two-sided, upper or lower: an interval or a one-sided confidence limit "
                        "(overrides target.bound)")


def add_closing_options(p: argparse.ArgumentParser, run: Callable[[argparse.Namespace], int], *,
                        method: bool = False, simulation: bool = False, outside_files: bool = False) -> None:
    """The options a command's parser ends with, in one order, and the function that runs it.

    ``method``: ``--method`` and ``--bound``; ``simulation``: ``--replicates``
    and ``--seed``; then ``--json``; ``outside_files``: ``--allow-outside-files``.
    """
    if method:
        add_method_option(p)
        add_bound_option(p)
    if simulation:
        add_sim_overrides(p)
    add_json(p)
    if outside_files:
        add_allow_outside(p)
    p.set_defaults(run=run)
