"""``simcheck formula`` for the estimands of the registry (median, SD, rates, ratios, ...).

Their planning values come from options of their own (``--quantile``,
``--rate``, ``--correlation``, ...); each estimand's formula names the ones
it takes (:attr:`simcheck.estimands.EstimandSpec.formula_inputs`).
"""

from __future__ import annotations

import argparse
import sys

from simcheck.cli.common import emit_json
from simcheck.estimands import PLANNING_VALUES, REGISTRY, formula_for
from simcheck.errors import Collector

#: options of the built-in estimands that the registered ones share (the others are refused)
SHARED = ("sd", "sd_b", "p", "p_b", "ratio")
#: options of the built-in formulas a registered estimand does not use: (dest, default)
NOT_USED = (("multiplier", "z"), ("population_size", None), ("design_effect", None), ("icc", None),
            ("cluster_size", None), ("cluster_size_cv", None), ("cluster_count", None), ("dropout", None),
            ("pilot_n", None), ("bound", "two-sided"), ("relative_margin", None), ("cv", None), ("limit", None),
            ("events_allowed", None), ("stratum", None), ("allocation", None), ("minimum", None))


def add_options(p: argparse.ArgumentParser) -> None:
    """The planning-value options only registered estimands use."""
    for key, text in PLANNING_VALUES.items():
        if key in SHARED:
            continue
        users = ", ".join(k for k, v in REGISTRY.items() if key in v.formula_inputs)
        p.add_argument("--" + key.replace("_", "-"), dest=key, type=float, default=None, metavar="V",
                       help=f"{text} (estimand {users or 'none yet'})")


def run_registered(args: argparse.Namespace) -> int:
    """The closed-form n of a registered estimand."""
    from simcheck.cli.formula import render

    c = Collector()
    for dest, default in NOT_USED:
        if getattr(args, dest, default) != default:
            c.add("--" + dest.replace("_", "-"), f"is not used by estimand {args.estimand!r}")
    if args.margin is None:
        c.add("--margin", "required")
    planning = {k: getattr(args, k, None) for k in PLANNING_VALUES}
    res = formula_for(args.estimand, args.margin, args.confidence, planning, problems=c)
    if args.json:
        emit_json(res.to_dict())
        return 0
    sys.stdout.write(render(res) + "\n")
    return 0
