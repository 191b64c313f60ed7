"""Options shared by the commands that read scenario files (not a command itself)."""

from __future__ import annotations

import argparse

from simcheck.files import OUTSIDE_OPTION


def add_allow_outside(p: argparse.ArgumentParser) -> None:
    """``--allow-outside-files``: let a scenario's data files lie outside its folder."""
    p.add_argument(
        OUTSIDE_OPTION, dest="allow_outside_files", action="store_true",
        help="let population.file, an empirical model's file (and a sweep's base) name files outside "
             "the scenario's folder: absolute paths, '..', symbolic links pointing out (refused by default)",
    )
