"""Run a scenario: the one place that maps a :class:`~simcheck.scenario.Scenario`
onto the engine and search calls. Used by the command line and by sweeps.

Tasks:

``check``   :func:`simcheck.engine.check` at one n (or at each n of a list)
``curve``   :func:`simcheck.engine.curve` over ``n_min..n_max`` (or given n values)
``search``  :func:`simcheck.search.find_n`, or :func:`simcheck.search.compare`
            when the scenario lists several interval methods

The root random seed is the ``seed`` argument, else the scenario's
``simulation.seed``, else one drawn from OS entropy (:func:`fresh_seed`); the
results carry it, so every run can be repeated.
"""

from __future__ import annotations

import dataclasses
import inspect
import secrets
from numbers import Integral
from typing import Any, Callable, Mapping, Sequence

from simcheck.design import Design
from simcheck.errors import Collector
from simcheck.scenario import N_LIMIT, REPLICATES_MAX, REPLICATES_MIN, SEED_MAX, Scenario

TASKS = ("check", "curve", "search")
#: Most values of n one curve evaluates (each keeps up to 2,000 half-widths,
#: 8 KB, for its median and 90th percentile: 160 MB at the limit).
CURVE_POINTS_MAX = 20_000

#: how run_task names its arguments in errors; the CLI passes option names
DEFAULT_FIELDS = {
    "task": "task",
    "n": "n",
    "n_min": "n_min",
    "n_max": "n_max",
    "step": "step",
    "method": "method",
    "replicates": "replicates",
    "seed": "seed",
}

Progress = Callable[[int, int], None] | None


def fresh_seed() -> int:
    """A seed from OS entropy, for runs whose scenario gives none.

    32 bits: short enough to retype after ``--seed``, and a seed only needs
    to name a stream, not to be unguessable.
    """
    return secrets.randbits(32)


def resolve_seed(scenario: Scenario, seed: int | None = None) -> tuple[int, bool]:
    """The root seed of a run and whether it was drawn at random."""
    if seed is not None:
        return int(seed), False
    if scenario.seed is not None:
        return int(scenario.seed), False
    return fresh_seed(), True


def run_task(
    scenario: Scenario,
    task: str,
    *,
    n: int | Sequence[int] | None = None,
    n_min: int | None = None,
    n_max: int | None = None,
    step: int | None = None,
    method: str | None = None,
    replicates: int | None = None,
    seed: int | None = None,
    progress: Progress = None,
    fields: Mapping[str, str] | None = None,
    validate_only: bool = False,
):
    """Run ``task`` on ``scenario``.

    Parameters
    ----------
    scenario : Scenario
    task : {"check", "curve", "search"}
    n : int or list of int
        check: required; a list gives one CheckResult per n (each computed
        as ``check`` alone would, with the same seed). curve: optional list of
        n values instead of the range.
    n_min, n_max : int, optional
        curve / search range; default the scenario's.
    step : int, optional
        curve: spacing of the range (default 1).
    method : str, optional
        check / curve / search: the interval method (default: the first
        listed for check and curve; every listed one for search).
    replicates, seed : int, optional
        Override ``simulation.replicates`` / ``simulation.seed``.
    progress : callable, optional
        ``progress(done, total)``, passed to the engine.
    fields : dict, optional
        Names of the arguments in error messages (the CLI passes ``--n``...).
    validate_only : bool
        Check the arguments against the scenario and return None without
        computing (sweeps check every cell before any runs).

    Returns
    -------
    CheckResult, list of CheckResult, CurveResult, SearchResult or MethodComparison

    Raises
    ------
    InputError
        All problems with the arguments at once.
    """
    names = {**DEFAULT_FIELDS, **(fields or {})}
    a = _checked_arguments(scenario, task, names, n=n, n_min=n_min, n_max=n_max, step=step, method=method,
                           replicates=replicates, seed=seed)
    if validate_only:
        return None
    root, _ = resolve_seed(scenario, seed)
    if scenario.uncertain:
        return conditional_note(run_task(
            dataclasses.replace(scenario, uncertain=()), task, n=n, n_min=n_min, n_max=n_max, step=step,
            method=method, replicates=replicates, seed=seed, progress=progress, fields=fields), scenario)
    if task == "check":
        out = _run_checks(scenario, a, root, progress)
        return out[0] if isinstance(n, Integral) else out
    if task == "curve":
        from simcheck import engine

        return engine.curve(a.design, a.n_list, replicates=a.reps, rng=root, path=scenario.path, progress=progress)
    return _run_search(scenario, a, method, root, progress)


@dataclasses.dataclass(frozen=True)
class _Arguments:
    """The checked arguments of :func:`run_task`."""

    design: Design  # the scenario's, or with the method asked for
    reps: int
    lo: int | None  # n_min
    hi: int | None  # n_max
    n_list: list[int] | None  # check: the n given; curve: the n to evaluate


def _checked_arguments(scenario: Scenario, task: str, names: Mapping[str, str], *, n, n_min, n_max, step, method,
                       replicates, seed) -> _Arguments:
    """All problems with the arguments at once, else the values the task runs with."""
    c = Collector()
    if task not in TASKS:
        c.add(names["task"], f"must be one of {', '.join(TASKS)}, got {task!r}")
    reps = scenario.replicates
    if replicates is not None:
        reps = c.number(names["replicates"], replicates, low=REPLICATES_MIN, high=REPLICATES_MAX, integer=True)
    if seed is not None:
        if isinstance(seed, bool) or not isinstance(seed, Integral):
            c.add(names["seed"], f"must be a whole number in [0, {SEED_MAX}], got {seed!r}")
        elif not 0 <= int(seed) <= SEED_MAX:
            c.add(names["seed"], f"must be in [0, {SEED_MAX}], got {seed!r}")
    design = scenario.design
    if method is not None:
        design = _method_design(c, scenario, method, names["method"])
    n_cap = _n_cap(scenario)
    lo = _n_arg(c, names["n_min"], n_min, n_cap - 1) if n_min is not None else scenario.n_min
    hi = _n_arg(c, names["n_max"], n_max, n_cap) if n_max is not None else min(scenario.n_max, n_cap)
    if lo is not None and hi is not None and hi <= lo and task in ("curve", "search"):
        c.add(names["n_max"], f"must be > n_min ({lo}), got {hi}")
    n_list: list[int] | None = None
    if task == "check":
        if n is None:
            c.add(names["n"], "required for task 'check': the sample size(s) to check")
        else:
            n_list = _n_values(c, names["n"], n, n_cap)
    elif task == "curve":
        n_list = _curve_n_values(c, names, n, step, lo, hi, n_cap)
    elif task == "search" and n is not None:
        c.add(names["n"], "not used by task 'search' (it finds n); give n_min / n_max instead")
    c.raise_if_any()
    return _Arguments(design=design, reps=reps, lo=lo, hi=hi, n_list=n_list)


def _curve_n_values(c: Collector, names: Mapping[str, str], n, step, lo: int | None, hi: int | None,
                    n_cap: int) -> list[int] | None:
    """The n of a curve: the values given, else lo..hi in steps (the end always included)."""
    n_list = None
    if n is not None:
        n_list = _n_values(c, names["n"], n, n_cap)
        if n_list is not None and len(set(n_list)) > CURVE_POINTS_MAX:
            c.add(names["n"], f"gives {len(set(n_list))} values of n, over the limit of {CURVE_POINTS_MAX} per curve")
            n_list = None
    st = 1
    if step is not None:
        st = c.number(names["step"], step, low=1, high=N_LIMIT, integer=True)
    if n_list is None and lo is not None and hi is not None and st is not None and hi > lo:
        count = len(range(lo, hi + 1, st)) + ((hi - lo) % st != 0)
        if count > CURVE_POINTS_MAX:
            c.add(names["step"], f"the curve {lo}..{hi} in steps of {st} has {count} values of n, over the limit of "
                                 f"{CURVE_POINTS_MAX} per curve (each keeps its half-widths in memory); "
                                 f"use a larger step or a narrower range")
        else:
            n_list = list(range(lo, hi + 1, st))
            if n_list[-1] != hi:
                n_list.append(hi)  # the range's end is always evaluated
    return n_list


def _run_checks(scenario: Scenario, a: _Arguments, root: int, progress: Progress) -> list:
    """One check per n (a binomial analysed n under simulation.random_dropout)."""
    if scenario.random_dropout:
        from simcheck.dropout import check_random_dropout

        return [check_random_dropout(a.design, k, scenario.dropout, replicates=a.reps, rng=root, path=scenario.path)
                for k in a.n_list]
    from simcheck import engine

    return [engine.check(a.design, k, replicates=a.reps, rng=root, path=scenario.path, progress=progress)
            for k in a.n_list]


def _run_search(scenario: Scenario, a: _Arguments, method: str | None, root: int, progress: Progress) -> Any:
    """find_n for one method, compare for several; with dropout, allocation and the random-dropout note."""
    import importlib

    # the module: the package attribute `simcheck.search` is the API function
    search = importlib.import_module("simcheck.search")

    kwargs: dict[str, Any] = dict(
        assurance=scenario.assurance,
        coverage_tolerance=scenario.coverage_tolerance,
        replicates=a.reps,
        rng=root,
        n_min=a.lo,
        n_max=a.hi,
        budget=scenario.budget,
        progress=progress,
        window=scenario.window,
    )
    if method is None and len(scenario.methods) > 1:
        fn = search.compare
        args: tuple = (a.design, list(scenario.methods))
    else:
        fn = search.find_n
        args = (a.design,)
    # compare() forwards its keywords to find_n()
    if scenario.path != "auto" and "path" in inspect.signature(search.find_n).parameters:
        kwargs["path"] = scenario.path
    result = with_allocation(with_dropout(fn(*args, **kwargs), scenario.dropout), a.design)
    if scenario.random_dropout:
        text = ("simulation.random_dropout applies to check only: this search uses the analysed n as fixed "
                "and reports n_enrolled = ceil(n / (1 - dropout))")
        return _each(result, lambda r: dataclasses.replace(r, notes=tuple(r.notes) + (text,)))
    return result


def _each(result: Any, one: Callable[[Any], Any]) -> Any:
    """``one`` applied to a search result, or to each method's result of a comparison."""
    if hasattr(result, "by_method"):
        return dataclasses.replace(result, by_method=tuple(one(r) for r in result.by_method))
    return one(result)


def conditional_note(result: Any, scenario: Scenario) -> Any:
    """The result(s) noting that they hold at the point values of uncertain planning values."""
    from simcheck.results import CurveResult

    keys = ", ".join(u.key for u in scenario.uncertain)
    text = (f"conditional on the point values of {keys} (given as distributions); "
            "`simcheck predictive` gives the unconditional answer")

    def one(r):
        return dataclasses.replace(r, notes=tuple(r.notes) + (text,))

    if isinstance(result, list):
        return [one(r) for r in result]
    if isinstance(result, CurveResult):
        return dataclasses.replace(result, rows=tuple(one(r) for r in result.rows))
    return _each(result, one)


def with_allocation(result: Any, design: Design) -> Any:
    """Stratified designs: the search result(s) with the n of each stratum at the n found."""
    if design.strata is None:
        return result
    from simcheck.engine.stratified import allocation_for

    def one(r):
        return dataclasses.replace(r, allocation=None if r.n is None else allocation_for(design, r.n))

    return _each(result, one)


def with_dropout(result: Any, dropout: float) -> Any:
    """The search result(s) carrying ``target.dropout`` (for ``n_enrolled``)."""
    from simcheck.formulas import enrolled_n

    def one(r):
        return dataclasses.replace(
            r, dropout=dropout,
            n_enrolled=None if r.n is None else enrolled_n(r.n, dropout),
            n_b_enrolled=None if r.n_b is None else enrolled_n(r.n_b, dropout),
        )

    if not dropout:
        return result
    return _each(result, one)


def _method_design(c: Collector, scenario: Scenario, method: Any, name: str) -> Design:
    from simcheck.errors import InputError
    from simcheck.intervals import REGISTRY, methods_for

    d = scenario.design
    # stratified methods are not in the registry: Design.with_method checks them
    if not isinstance(method, str) or (d.strata is None and (d.estimand, method) not in REGISTRY):
        c.add(name, f"unknown interval {method!r} for estimand {d.estimand!r}; choose one of {', '.join(methods_for(d.estimand))}")
        return d
    try:
        return d.with_method(method)
    except InputError as e:
        for p in e.problems:
            c.add(name, p.message)
        return d


def _n_cap(scenario: Scenario) -> int:
    # without replacement, n cannot exceed the population (units, not clusters)
    pop = scenario.design.population
    if pop is not None and scenario.design.clusters is None:
        return min(N_LIMIT, pop.size)
    return N_LIMIT


def _n_arg(c: Collector, name: str, v: Any, high: int) -> int | None:
    return c.number(name, v, low=2, high=high, integer=True)


def _n_values(c: Collector, name: str, v: Any, high: int) -> list[int] | None:
    if isinstance(v, (list, tuple)):
        if not v:
            c.add(name, "needs at least one sample size, got an empty list")
            return None
        vals = [_n_arg(c, f"{name}[{i}]" if len(v) > 1 else name, x, high) for i, x in enumerate(v)]
        return None if any(x is None for x in vals) else vals
    x = _n_arg(c, name, v, high)
    return None if x is None else [x]
