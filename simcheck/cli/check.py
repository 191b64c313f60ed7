"""``simcheck check SCENARIO --n N``: coverage and achieved margin at one n.

Also holds the pieces ``simcheck curve`` shares: the progress display (on
stderr only) and the readable report of scenario and results.
"""

from __future__ import annotations

import argparse
import sys
import time
from typing import Any, Sequence

from simcheck import CAUTION
from simcheck.cli.common import emit_json, note, paired_lines, table
from simcheck.bound_text import bound_words, coverage_words, result_lines, units_text
from simcheck.cli.options import add_closing_options, add_scenario_argument

#: how run_task's arguments are called on the command line
CLI_FIELDS = {
    "n": "--n",
    "n_min": "--n-min",
    "n_max": "--n-max",
    "step": "--step",
    "method": "--method",
    "replicates": "--replicates",
    "seed": "--seed",
}


def add_parser(subparsers) -> None:
    p = subparsers.add_parser(
        "check",
        help="coverage and achieved margin at one n",
        description=(
            "Simulate many samples of size N from the scenario's data model and report how often "
            "the interval covers the true value (with its Monte Carlo standard error), the misses "
            "below and above, the achieved half-width (mean, median, 90th percentile) and the "
            "assurance: the share of samples whose half-width is at most the target margin. "
            "Where mathematics allows (0/1 data, normal data with z or t) the numbers are exact."
        ),
    )
    add_scenario_argument(p)
    p.add_argument("--n", type=int, required=True, metavar="N",
                   help="sample size to check (group a for two-sample estimands; clusters when clustered)")
    add_closing_options(p, run, method=True, simulation=True, outside_files=True)


def bound_overrides(args: argparse.Namespace) -> dict[str, Any]:
    """Scenario overrides from --bound (empty when not given)."""
    b = getattr(args, "bound", None)
    return {} if b is None else {"target.bound": b}


def run(args: argparse.Namespace) -> int:
    from simcheck.scenario import load_scenario
    from simcheck.tasks import run_task

    scenario = load_scenario(args.scenario, bound_overrides(args) or None, allow_outside_files=args.allow_outside_files)
    seed = run_seed(scenario, args.seed)
    with Progress() as prog:
        res = run_task(scenario, "check", n=args.n, method=args.method, replicates=args.replicates,
                       seed=seed, progress=prog, fields=CLI_FIELDS)
    if args.json:
        emit_json(res.to_dict())
        return 0
    sys.stdout.write(report(scenario, [res]) + "\n")
    return 0


def run_seed(scenario, seed: int | None) -> int:
    """The run's root seed; when neither --seed nor the file gives one, draw it and say so.

    Also prints the scenario's notices (implausible values, settings not used)
    on stderr: every computing command calls this right after loading.
    """
    from simcheck.tasks import resolve_seed

    for t in getattr(scenario, "notices", ()):
        note(f"simcheck: {t}")
    root, drawn = resolve_seed(scenario, seed)
    if drawn:
        note(f"simcheck: no seed given; using seed {root} (add --seed {root} to repeat this run)")
    return root


# --- readable output ----------------------------------------------------------------
def _g(x: Any, digits: int = 4) -> str:
    if x is None:
        return "-"
    if isinstance(x, float):
        return f"{x:.{digits}g}"
    return str(x)


def _p(x: Any) -> str:
    return "-" if x is None else f"{x:.4f}"


def report(scenario, rows: Sequence[Any]) -> str:
    """Scenario header, one table row per result, exactness and the caution line."""
    d = scenario.design.with_method(rows[0].method) if rows else scenario.design
    lines = [scenario.title, "", *data_lines(d)]
    if d.clusters is not None:
        cl = d.clusters
        size = f"size {cl.size}" if cl.size is not None else f"size mean {cl.size_mean:g}, CV {cl.size_cv:g}"
        lines.append(f"clusters:    ICC {cl.icc:g}, {size}, {cl.effect} effect (n counts clusters)")
    if d.population is not None:
        pop = d.population
        fpc = "with" if pop.fpc else "without"
        count = f", {pop.events} with the event (a fixed count)" if pop.events is not None else ""
        lines.append(f"population:  {pop.size} units{count}, sampled without replacement ({fpc} finite population correction)")
    lines += _target_lines(scenario, d, rows)
    lines.append("")
    lines.append(_rows_table(d, rows))
    lines.append("")
    lines += _closing_lines(d, rows)
    return "\n".join(lines)


def data_lines(d) -> list[str]:
    """The data model(s) of a design: groups a and b, each stratum, or the one model."""
    if d.two_sample:
        return [f"data a:      {d.model.describe()}",
                f"data b:      {d.model_b.describe()}  (n_b = {d.ratio:g} x n)"]
    if d.paired:
        return paired_lines(d)
    if d.strata is not None:
        return [*(f"stratum:     {name} (N = {size}): {m.describe()}"
                  for name, size, m in zip(d.strata.names, d.strata.sizes, d.strata.models)),
                f"allocation:  {d.strata.rule}; n counts the whole sample"]
    return [f"data:        {d.model.describe()}"]


def _target_lines(scenario, d, rows: Sequence[Any]) -> list[str]:
    """The true value, the method and its target, and how the rows were computed."""
    what = {"mean": "mean", "proportion": "proportion", "mean-diff": "difference of means a - b",
            "proportion-diff": "difference of proportions a - b", "total": "population total"}.get(d.estimand)
    if what is None:
        from simcheck.estimands import spec_for

        what = spec_for(d.estimand).label
    # the result's true value: for a finite population it is the population's mean, not the model's
    true = rows[0].true_value if rows else d.true_value
    lines = [f"true value:  {_g(float(true), 6)} ({what})"]
    for m in (d.model, d.model_b):
        if m is not None and m.true_value_note:
            lines.append(f"             note: {m.true_value_note}")
    lines.append(f"method:      {d.method} {bound_words(d.bound)}, {d.confidence:.4g} confidence, target margin {_g(d.margin, 6)}"
                 + (f" {d.units}" if d.units and d.margin is not None else "")
                 + (f" ({d.relative_margin:g} of the true value)" if d.relative_margin is not None else ""))
    if len(scenario.methods) > 1:
        lines.append(f"             (the scenario lists {', '.join(scenario.methods)}; choose one with --method)")
    if rows:
        r0 = rows[0]
        sim = "exact (no simulation)" if all(r.exact for r in rows) else f"{r0.replicates} replicates"
        lines.append(f"run:         {sim}, seed {r0.seed}")
    return lines


def _rows_table(d, rows: Sequence[Any]) -> str:
    two = d.two_sample
    headers = ["n"] + (["n_b"] if two else []) + [
        "coverage", "+/- mcse", "miss low", "miss high",
        "margin mean", "median", "p90", "assurance", "+/- mcse",
    ]
    body = []
    for r in rows:
        row = [str(r.n)] + ([str(r.n_b)] if two else []) + [
            _p(r.coverage), _p(r.coverage_mcse), _p(r.miss_low), _p(r.miss_high),
            _g(r.margin_mean), _g(r.margin_median), _g(r.margin_p90),
            _p(r.assurance), _p(r.assurance_mcse),
        ]
        if r.exact and not all(x.exact for x in rows):
            row[0] += "*"
        body.append(row)
    return table(headers, body)


def _closing_lines(d, rows: Sequence[Any]) -> list[str]:
    """What exact means, what the measures are, the results in words, the notes and the caution."""
    lines = []
    if rows and all(r.exact for r in rows):
        lines.append("exact: computed by enumeration or exact law, not simulation (MCSE 0).")
    elif any(r.exact for r in rows):
        lines.append("* exact: computed by enumeration or exact law, not simulation (MCSE 0).")
    half = "half-width" if d.bound == "two-sided" else "margin (distance from estimate to limit)"
    if d.ratio_scale:
        half = "margin factor"
    scale = ("margins are factors f (the interval within estimate / f to estimate x f)" if d.ratio_scale
             else f"margins {units_text(d.units)}")
    lines.append(f"coverage = {coverage_words(d.bound)} (nominal {d.confidence:.4g}); "
                 f"assurance = share with {half} <= {_g(d.margin, 6)} "
                 f"(zero-width intervals that miss the true value do not count); {scale}.")
    lines += result_lines(rows, d.units)
    notes: list[str] = []
    for r in rows:
        for t in r.notes:  # zero-width (degenerate) intervals are named in the notes
            if t not in notes:
                notes.append(t)
    for t in notes:
        lines.append(f"note: {t}")
    lines.append("")
    lines.append(CAUTION)
    return lines


# --- progress (stderr only) -----------------------------------------------------
class Progress:
    """``progress(done, total)`` for the engine, shown only when a run is slow.

    On a terminal a tqdm bar appears after ``delay`` seconds; otherwise
    (logs, pipes) a plain line at most every ``every`` seconds once the run
    has taken ``quiet`` seconds. Never writes to stdout.
    """

    def __init__(self, delay: float = 2.0, quiet: float = 10.0, every: float = 30.0, stream=None) -> None:
        self.stream = stream if stream is not None else sys.stderr
        self.tty = bool(getattr(self.stream, "isatty", lambda: False)())
        self.delay, self.quiet, self.every = delay, quiet, every
        self.start = time.monotonic()
        self.last = None
        self.bar = None

    def _has_bar(self, elapsed: float, total: int | None) -> bool:
        """Whether the terminal bar shows (it appears once the run has taken ``delay`` seconds)."""
        if self.bar is None:
            if elapsed < self.delay:
                return False
            from tqdm import tqdm

            self.bar = tqdm(total=total, file=self.stream, unit="rep", leave=False, dynamic_ncols=True)
        return True

    def _line_due(self, now: float, elapsed: float) -> bool:
        """Whether a plain progress line is due (after ``quiet`` seconds, then every ``every``)."""
        if elapsed < self.quiet or (self.last is not None and now - self.last < self.every):
            return False
        self.last = now
        return True

    def __call__(self, done: int, total: int) -> None:
        now = time.monotonic()
        elapsed = now - self.start
        if self.tty:
            if not self._has_bar(elapsed, total):
                return
            if self.bar.total != total:
                self.bar.total = total
            self.bar.n = min(done, total)
            self.bar.refresh()
            return
        if not self._line_due(now, elapsed):
            return
        share = 100.0 * done / total if total else 100.0
        self.stream.write(f"simcheck: {share:.0f}% done ({done} of {total}), {elapsed:.0f} s\n")
        self.stream.flush()

    def close(self) -> None:
        """Remove the bar (it never stays above or below the results printed next)."""
        if self.bar is not None:
            self.bar.close()
            self.bar = None
            self.stream.flush()

    def __enter__(self) -> "Progress":
        return self

    def __exit__(self, *exc) -> None:
        self.close()


class SearchProgress(Progress):
    """Progress of a whole search: which evaluation (stage) it is in and how much it has simulated overall.

    The search runs many engine evaluations one after another (bracketing, the
    whole-curve location, confirmations on fresh replicates), each reporting
    ``progress(done, total)`` from zero; a bar per evaluation would jump back
    and forth. Here a new evaluation is recognised when ``done`` falls back or
    ``total`` changes; the line shows the stage number and the replicates
    simulated so far (and their share of the budget when it is known).
    ``progress(done, total, stage="confirm")`` names the stage when the search
    passes one.
    """

    def __init__(self, budget: int | None = None, **kwargs: Any) -> None:
        super().__init__(**kwargs)
        self.budget = budget
        self.stage = 0
        self.stage_name: str | None = None
        self.base = 0
        self.prev = (0, -1)

    def overall(self, done: int, total: int, stage: str | None = None) -> int:
        """Replicates simulated so far over all evaluations (and move to a new stage when one starts)."""
        p_done, p_total = self.prev
        if total != p_total or done < p_done or (stage is not None and stage != self.stage_name):
            self.base += max(p_done, 0) if p_total >= 0 else 0
            self.stage += 1
            self.stage_name = stage
        self.prev = (done, total)
        return self.base + done

    def describe(self, done: int, total: int) -> str:
        what = f"stage {self.stage}" + (f" ({self.stage_name})" if self.stage_name else "")
        share = f", {100.0 * done / total:.0f}% of this evaluation" if total else ""
        return f"search {what}{share}"

    def __call__(self, done: int, total: int, stage: str | None = None) -> None:
        overall = self.overall(done, total, stage)
        now = time.monotonic()
        elapsed = now - self.start
        if self.tty:
            if not self._has_bar(elapsed, self.budget):
                return
            self.bar.set_description(self.describe(done, total), refresh=False)
            self.bar.n = min(overall, self.budget) if self.budget else overall
            self.bar.refresh()
            return
        if not self._line_due(now, elapsed):
            return
        of = f" ({100.0 * overall / self.budget:.0f}% of the budget {self.budget:,})" if self.budget else ""
        self.stream.write(f"simcheck: {self.describe(done, total)}; {overall:,} replicates simulated so far{of}, "
                          f"{elapsed:.0f} s\n")
        self.stream.flush()
