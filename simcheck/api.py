"""The Python API: build a scenario, check, search, sweep and report from Python.

Everything here is also reachable from the top level (``import simcheck as sc;
sc.check(...)``). The functions take a scenario in any of three forms: a
:class:`~simcheck.scenario.Scenario` (from :func:`scenario`), a dict with the
keys of a scenario file, or the path of a scenario file. They validate their
arguments as the command line does (``n = 10.5`` or ``replicates = 5`` are
refused, not truncated) and raise one :class:`~simcheck.errors.InputError`
naming every bad argument by its Python name.

Conventions
-----------
Seeds
    Every function that simulates takes ``rng``: an int, a
    :class:`numpy.random.SeedSequence`, a :class:`numpy.random.Generator` or
    None (Scientific Python SPEC 7). It is turned into one integer root seed,
    which the result records in its ``seed`` field, so any result can be
    repeated with ``rng=result.seed``. ``rng=None`` uses the scenario's
    ``seed`` if it has one, else a fresh seed from OS entropy (recorded too).
    An int is used as it is (``rng=5`` and ``seed = 5`` in a file give the same
    numbers); a SeedSequence created from an int is that int; any other
    SeedSequence, and a Generator, gives a 63-bit seed drawn from it.
Progress
    ``progress(done, total)`` with two ints, called as work finishes:
    replicates of the current evaluation for :func:`check`, :func:`curve`,
    :func:`search` and :func:`compare` (a search runs several evaluations,
    each counting from 0 to its own total), cells for :func:`sweep`, stages
    for :func:`report`. It must return quickly; its return value is ignored.

Caution: simulated results hold only under the assumed data model; regulated
studies follow their own guidance and a qualified statistician's review.
"""

from __future__ import annotations

import difflib
import json
import math
import shutil
from dataclasses import dataclass, replace
from importlib import resources
from numbers import Integral
from pathlib import Path
from typing import Any, Callable, Mapping, NamedTuple, Sequence

import numpy as np

from simcheck.errors import InputError, Problem
from simcheck.results import CheckResult, CurveResult, MethodComparison, SearchResult
from simcheck.scenario import KNOWN_KEYS, SEED_MAX, Scenario, load_scenario
from simcheck.scenario import scenario_from_dict as _validate_table

__all__ = [
    "scenario", "scenario_from_dict", "check", "curve", "search", "compare", "sweep", "report",
    "methods", "examples", "example", "example_list", "copy_examples", "SweepRun", "Report",
]

Progress = Callable[[int, int], None] | None
ScenarioLike = Scenario | Mapping[str, Any] | str | Path

#: keyword of :func:`scenario` -> dotted key of a scenario file
KEYWORDS: dict[str, str] = {
    "title": "title",
    "estimand": "target.estimand",
    "confidence": "target.confidence",
    "margin": "target.margin",
    "assurance": "target.assurance",
    "coverage_tolerance": "target.coverage_tolerance",
    "event_values": "target.event_values",
    "event_above": "target.event_above",
    "data": "data",
    "data_a": "data.a",
    "data_b": "data.b",
    "correlation": "data.correlation",
    "interval": "method.interval",
    "resamples": "method.resamples",
    "replicates": "simulation.replicates",
    "seed": "simulation.seed",
    "n_min": "simulation.n_min",
    "n_max": "simulation.n_max",
    "ratio": "simulation.ratio",
    "budget": "simulation.budget",
    "path": "simulation.path",
    "clusters": "clusters",
    "population": "population",
    "strata": "strata",
    "allocation": "allocation",
}


def _more_keywords() -> dict[str, str]:
    # Keys other branches add to the file format (target.bound, ...) work as
    # keywords by their last part, unless that part is ambiguous.
    leaves: dict[str, list[str]] = {}
    for k in KNOWN_KEYS:
        if "." in k and not k.startswith(("data", "clusters", "population", "strata", "allocation")):
            leaves.setdefault(k.rsplit(".", 1)[1], []).append(k)
    return {leaf: ks[0] for leaf, ks in leaves.items() if len(ks) == 1 and leaf not in KEYWORDS}


# ---------------------------------------------------------------------------
# building a scenario
# ---------------------------------------------------------------------------
def scenario(
    *,
    estimand: str | None = None,
    margin: float | None = None,
    interval: str | Sequence[str] | None = None,
    data: Any = None,
    data_a: Any = None,
    data_b: Any = None,
    confidence: float | None = None,
    assurance: float | None = None,
    coverage_tolerance: float | None = None,
    event_values: Sequence[float] | None = None,
    event_above: float | None = None,
    resamples: int | None = None,
    replicates: int | None = None,
    seed: int | None = None,
    n_min: int | None = None,
    n_max: int | None = None,
    ratio: float | None = None,
    budget: int | None = None,
    path: str | None = None,
    clusters: Mapping[str, Any] | None = None,
    population: Mapping[str, Any] | None = None,
    strata: Sequence[Mapping[str, Any]] | None = None,
    allocation: Mapping[str, Any] | None = None,
    title: str | None = None,
    **more: Any,
) -> Scenario:
    """Build and validate a scenario from keyword arguments, without a file.

    The keywords are the keys of a scenario file without their table
    (``margin`` is ``target.margin``, ``replicates`` is
    ``simulation.replicates``); the checks and limits are those of the file.
    Arguments left as None take the file's defaults.

    Parameters
    ----------
    estimand : {"mean", "proportion", "mean-diff", "proportion-diff"}
        What the interval estimates (required).
    margin : float
        Target half-width in the data's units, > 0 (required).
    interval : str or list of str
        Interval method name, or several to compare (required); see :func:`methods`.
    data : dict, scipy.stats distribution or Model, optional
        One-sample data model, e.g. ``{"model": "lognormal", "mean": 6, "cv": 1.2}``.
        An ``empirical`` model takes ``values`` (a list, numpy array or
        pandas Series of pilot data) instead of a file; a frozen scipy.stats
        distribution is wrapped with :func:`simcheck.models.from_scipy`.
    data_a, data_b : dict, scipy.stats distribution or Model, optional
        The two groups of a two-sample estimand (difference a - b).
    confidence : float, optional
        Nominal confidence level in (0, 1); default 0.95.
    assurance : float, optional
        Required share of samples whose half-width is at most ``margin``; default 0.5.
    coverage_tolerance : float, optional
        Accepted coverage shortfall below ``confidence``; default 0.005.
    event_values : list of float, optional
        Proportion on a discrete model: the values that count as the event.
    event_above : float, optional
        Proportion on a model: values strictly above this count.
    resamples : int, optional
        Bootstrap resamples, in [99, 10**6]; default 1999.
    replicates : int, optional
        Simulated samples per n, a whole number in [100, 10**8]; default 10,000.
    seed : int, optional
        The scenario's root seed (used when a run gets ``rng=None``).
    n_min, n_max : int, optional
        Range of n considered by curves and searches; defaults 2 and 5000.
    ratio : float, optional
        n_b / n_a for two-sample estimands; default 1.
    budget : int, optional
        Cap on the replicates a search spends.
    path : {"auto", "exact", "sufficient", "nested", "full"}, optional
        Computation path; default "auto".
    clusters : dict, optional
        ``{"icc": ..., "size": ...}`` (or ``size_mean`` and ``size_cv``): n counts clusters.
    population : dict, optional
        ``{"size": N}`` or ``{"values": array}``: a finite population sampled
        without replacement (its values as a list, numpy array or pandas Series).
    strata : list of dict, optional
        A stratified design: one dict per stratum with ``name``, ``size`` and
        ``data`` (a model table), as the file's ``[[strata]]`` tables.
    allocation : dict, optional
        How n is shared among the strata, e.g. ``{"rule": "neyman"}``.
    title : str, optional
        A title for reports.
    **more
        Further keys of the file format by their last part (for example
        keys added to ``[target]`` in later versions).

    Returns
    -------
    Scenario
        The validated scenario; pass it to :func:`check`, :func:`search`, ...

    Raises
    ------
    InputError
        Every problem at once, each naming its keyword (``margin``, ``data.cv``).

    Examples
    --------
    >>> import simcheck as sc
    >>> s = sc.scenario(estimand="mean", margin=1.0, interval="t",
    ...                 data={"model": "lognormal", "mean": 6.0, "cv": 1.2})
    >>> s.design.true_value
    6.0
    >>> sc.scenario(estimand="mean", margin=1.0, interval="t", replicates=5,
    ...             data={"model": "normal", "mean": 0, "sd": 1})
    Traceback (most recent call last):
    ...
    simcheck.errors.InputError: replicates: must be in [100, 100000000], got 5
    """
    given = {k: v for k, v in locals().items() if k not in ("more",) and v is not None}
    extra = _more_keywords()
    given.update(_more_given(more, extra))
    return _from_table(_keyword_table(given, extra), keyword_names=True)


def _more_given(more: Mapping[str, Any], extra: Mapping[str, str]) -> dict[str, Any]:
    """The ``**more`` keywords that are keys of the file format (None left out); refuses any other."""
    for k in more:
        if k not in extra:
            near = difflib.get_close_matches(k, list(KEYWORDS) + list(extra), n=1, cutoff=0.6)
            hint = f"; did you mean {near[0]!r}?" if near else ""
            raise InputError(k, f"unknown keyword of simcheck.scenario{hint}")
    return {k: v for k, v in more.items() if v is not None}


def _keyword_table(given: Mapping[str, Any], extra: Mapping[str, str]) -> dict[str, Any]:
    """The scenario table of keyword values, each at its dotted key (data models as models)."""
    table: dict[str, Any] = {}
    for k, v in given.items():
        dotted = KEYWORDS.get(k) or extra[k]
        node = table
        parts = dotted.split(".")
        for part in parts[:-1]:
            node = node.setdefault(part, {})
        node[parts[-1]] = _data_value(v) if parts[0] == "data" else v
    return table


def scenario_from_dict(table: Mapping[str, Any]) -> Scenario:
    """Build and validate a scenario from a dict laid out like a scenario file.

    Parameters
    ----------
    table : dict
        Tables ``target``, ``data`` (or ``data.a`` / ``data.b`` as
        ``{"data": {"a": ..., "b": ...}}``), ``method``, and optionally
        ``simulation``, ``clusters``, ``population``, as in a TOML file.
        Model tables and ``population`` may hold arrays or pandas Series
        (``values``); ``data`` may be a frozen scipy.stats distribution.

    Returns
    -------
    Scenario
        The validated scenario.

    Raises
    ------
    InputError
        Every problem at once, each naming its dotted key.

    Examples
    --------
    >>> import simcheck as sc
    >>> s = sc.scenario_from_dict({
    ...     "target": {"estimand": "proportion", "margin": 0.05},
    ...     "data": {"model": "bernoulli", "p": 0.3},
    ...     "method": {"interval": "wilson"},
    ... })
    >>> s.methods
    ('wilson',)
    """
    if not isinstance(table, Mapping):
        raise InputError("table", f"must be a dict laid out like a scenario file, got {type(table).__name__}")
    t = dict(table)
    if "data" in t:
        d = t["data"]
        if isinstance(d, Mapping) and "model" not in d and set(d) <= {"a", "b"} and d:
            t["data"] = {k: _data_value(v) for k, v in d.items()}
        else:
            t["data"] = _data_value(d)
    return _from_table(t, keyword_names=False)


def _data_value(v: Any) -> Any:
    # a frozen scipy.stats law becomes a model; tables are kept as given
    if hasattr(v, "dist") and hasattr(v, "rvs") or _is_rv_sample(v):
        from simcheck.models import from_scipy

        return from_scipy(v)
    return v


def _is_rv_sample(v: Any) -> bool:
    from scipy import stats

    return isinstance(v, stats.rv_discrete) and hasattr(v, "xk")


def _from_table(table: dict[str, Any], *, keyword_names: bool) -> Scenario:
    try:
        return _validate_table(table, source=None, base_dir=None)
    except InputError as e:
        if not keyword_names:
            raise InputError(e.problems) from None
        raise InputError([Problem(_python_name(p.field), p.message) for p in e.problems]) from None


def _python_name(field: str) -> str:
    """``target.margin`` -> ``margin``, ``data.a.cv`` -> ``data_a.cv``: the keyword that holds it."""
    names = {v: k for k, v in KEYWORDS.items()}
    names.update({v: k for k, v in _more_keywords().items()})
    for dotted in sorted(names, key=len, reverse=True):
        if field == dotted:
            return names[dotted]
        if field.startswith(dotted + ".") or field.startswith(dotted + "["):
            rest = field[len(dotted):]
            return names[dotted] + rest
    return field


def _as_scenario(s: ScenarioLike, name: str = "scenario") -> Scenario:
    if isinstance(s, Scenario):
        return s
    if isinstance(s, Mapping):
        return scenario_from_dict(s)
    if isinstance(s, (str, Path)):
        return load_scenario(s)
    raise InputError(name, f"must be a Scenario, a dict or a scenario file path, got {type(s).__name__}")


# ---------------------------------------------------------------------------
# seeds and progress
# ---------------------------------------------------------------------------
def _root_seed(rng: Any, scen: Scenario | None = None) -> int:
    """The integer root seed a run uses (see the module notes on seeds)."""
    if rng is None:
        if scen is not None and scen.seed is not None:
            return int(scen.seed)
        from simcheck.tasks import fresh_seed

        return fresh_seed()
    if isinstance(rng, (bool, np.bool_)):
        raise InputError("rng", f"must be an int, a numpy SeedSequence or Generator, or None, got {rng!r}")
    if isinstance(rng, Integral):
        if not 0 <= int(rng) <= SEED_MAX:
            raise InputError("rng", f"an int seed must be in [0, {SEED_MAX}], got {rng!r}")
        return int(rng)
    if isinstance(rng, np.random.SeedSequence):
        e = rng.entropy
        if isinstance(e, int) and not rng.spawn_key and 0 <= e <= SEED_MAX:
            return e
        return int(rng.generate_state(1, dtype=np.uint64)[0] >> np.uint64(1))
    if isinstance(rng, np.random.Generator):
        return int(rng.integers(0, SEED_MAX, endpoint=True))
    raise InputError("rng", f"must be an int, a numpy SeedSequence or Generator, or None, got {type(rng).__name__}")


def _check_progress(progress: Any) -> None:
    if progress is not None and not callable(progress):
        raise InputError("progress", f"must be a function progress(done, total) or None, got {type(progress).__name__}")


def _run(task: str, scenario: ScenarioLike, rng: Any, progress: Progress, **kwargs: Any):
    from simcheck.tasks import run_task

    scen = _as_scenario(scenario)
    seed = _root_seed(rng, scen)
    _check_progress(progress)
    return scen, run_task(scen, task, seed=seed, progress=progress, fields={"seed": "rng"}, **kwargs)


# ---------------------------------------------------------------------------
# tasks
# ---------------------------------------------------------------------------
#: parameter descriptions that several task functions share word for word; a docstring line
#: ``{name}`` stands for the entry (filled in by :func:`_shared_docs` at import)
_PARAMETER_DOCS = {
    "rng": "rng : int, SeedSequence, Generator or None\n        Root of the random streams.",
    "method": "method : str, optional\n        One interval method; default the scenario's first.",
    "progress": "progress : callable, optional\n        ``progress(done, total)`` in replicates.",
    "progress_each": ("progress : callable, optional\n"
                      "        ``progress(done, total)`` in replicates of each evaluation."),
    "n_range": "n_min, n_max : int, optional\n        The range searched; default the scenario's.",
    "replicates_each": "replicates : int, optional\n        Replicates per evaluation; default the scenario's.",
}


def _shared_docs(func: Callable) -> Callable:
    """The function with the ``{name}`` lines of its docstring replaced by :data:`_PARAMETER_DOCS`."""
    if func.__doc__:  # None under python -OO
        for key, text in _PARAMETER_DOCS.items():
            func.__doc__ = func.__doc__.replace("{" + key + "}", text)
    return func


@_shared_docs
def check(
    scenario: ScenarioLike,
    n: int | Sequence[int],
    *,
    rng: Any = None,
    replicates: int | None = None,
    method: str | None = None,
    progress: Progress = None,
) -> CheckResult | CurveResult:
    """Coverage, misses, achieved margin and assurance at one n.

    Parameters
    ----------
    scenario : Scenario, dict or path
        What to simulate (see :func:`scenario`).
    n : int or list of int
        Sample size (group a for two-sample estimands; clusters when
        clustered). A list checks each n separately with the same seed.
    rng : int, SeedSequence, Generator or None
        Root of the random streams (see the module notes on seeds).
    replicates : int, optional
        Simulated samples, in [100, 10**8]; default the scenario's.
    {method}
    {progress}

    Returns
    -------
    CheckResult or CurveResult
        One result for one n (``to_dict()``, ``to_frame()``); a
        :class:`~simcheck.results.CurveResult` of the rows for a list.

    Examples
    --------
    >>> import simcheck as sc
    >>> s = sc.scenario(estimand="mean", margin=1.0, interval="t",
    ...                 data={"model": "lognormal", "mean": 6.0, "cv": 1.2})
    >>> r = sc.check(s, 50, rng=1, replicates=400)
    >>> (r.n, r.replicates, r.seed)
    (50, 400, 1)
    >>> 0.8 < r.coverage < 1.0
    True
    """
    _, out = _run("check", scenario, rng, progress, n=n, replicates=replicates, method=method)
    return CurveResult(rows=tuple(out)) if isinstance(out, list) else out


@_shared_docs
def curve(
    scenario: ScenarioLike,
    *,
    n: Sequence[int] | None = None,
    n_min: int | None = None,
    n_max: int | None = None,
    step: int | None = None,
    rng: Any = None,
    replicates: int | None = None,
    method: str | None = None,
    progress: Progress = None,
) -> CurveResult:
    """The same measures as :func:`check` for every n of a range, from one nested draw.

    Parameters
    ----------
    scenario : Scenario, dict or path
        What to simulate.
    n : list of int, optional
        The sample sizes; default every n from ``n_min`` to ``n_max``.
    n_min, n_max : int, optional
        The range; default the scenario's.
    step : int, optional
        Spacing of the range (default 1; ``n_max`` is always included).
    {rng}
    replicates : int, optional
        Simulated samples per n; default the scenario's.
    {method}
    {progress}

    Returns
    -------
    CurveResult
        One :class:`~simcheck.results.CheckResult` per n; ``to_frame()``
        gives one row per n.

    Examples
    --------
    >>> import simcheck as sc
    >>> s = sc.scenario(estimand="proportion", margin=0.1, interval="wilson",
    ...                 data={"model": "bernoulli", "p": 0.2})
    >>> c = sc.curve(s, n_min=20, n_max=40, step=10, rng=3)
    >>> c.to_frame()[["n", "exact"]].values.tolist()
    [[20, True], [30, True], [40, True]]
    """
    _, out = _run("curve", scenario, rng, progress, n=n, n_min=n_min, n_max=n_max, step=step,
                  replicates=replicates, method=method)
    return out


@_shared_docs
def search(
    scenario: ScenarioLike,
    *,
    rng: Any = None,
    replicates: int | None = None,
    method: str | None = None,
    n_min: int | None = None,
    n_max: int | None = None,
    progress: Progress = None,
) -> SearchResult | MethodComparison:
    """The smallest n that meets the coverage and assurance targets.

    Parameters
    ----------
    scenario : Scenario, dict or path
        What to simulate and the targets (``assurance``, ``coverage_tolerance``).
    {rng}
    {replicates_each}
    method : str, optional
        Search for this method only. By default a scenario with several
        methods compares them all (see :func:`compare`).
    {n_range}
    {progress_each}

    Returns
    -------
    SearchResult or MethodComparison
        ``n`` (None when not reached), ``n_range``, ``decision``, the
        criterion and the coverage at n; a
        :class:`~simcheck.results.MethodComparison` when the scenario
        lists several methods and ``method`` is None.

    Examples
    --------
    >>> import simcheck as sc
    >>> s = sc.scenario(estimand="proportion", margin=0.1, interval="wilson",
    ...                 data={"model": "bernoulli", "p": 0.2}, coverage_tolerance=0.02)
    >>> r = sc.search(s, rng=2)
    >>> r.reached, r.exact, r.decision
    (True, True, 'clear')
    """
    _, out = _run("search", scenario, rng, progress, method=method, replicates=replicates,
                  n_min=n_min, n_max=n_max)
    return out


@_shared_docs
def compare(
    scenario: ScenarioLike,
    methods: Sequence[str] | None = None,
    *,
    rng: Any = None,
    replicates: int | None = None,
    n_min: int | None = None,
    n_max: int | None = None,
    progress: Progress = None,
) -> MethodComparison:
    """Search the smallest n for several interval methods on the same random streams.

    Parameters
    ----------
    scenario : Scenario, dict or path
        What to simulate and the targets.
    methods : list of str, optional
        Interval methods to compare; default the scenario's list.
    rng : int, SeedSequence, Generator or None
        Root of the random streams (one seed for every method).
    {replicates_each}
    {n_range}
    {progress_each}

    Returns
    -------
    MethodComparison
        ``by_method`` (one :class:`~simcheck.results.SearchResult` each)
        and ``best``, the method needing the least n.

    Examples
    --------
    >>> import simcheck as sc
    >>> s = sc.scenario(estimand="proportion", margin=0.1, interval="wilson",
    ...                 data={"model": "bernoulli", "p": 0.2}, n_max=400)
    >>> c = sc.compare(s, ["wald", "wilson"], rng=2)
    >>> [r.method for r in c.by_method]
    ['wald', 'wilson']
    """
    scen = _as_scenario(scenario)
    if methods is not None:
        scen = _with_methods(scen, methods)
    _, out = _run("search", scen, rng, progress, replicates=replicates, n_min=n_min, n_max=n_max)
    if isinstance(out, SearchResult):
        return MethodComparison(by_method=(out,), best=out.method if out.reached else None)
    return out


def _with_methods(scen: Scenario, methods: Sequence[str]) -> Scenario:
    from simcheck.intervals import REGISTRY, methods_for

    if isinstance(methods, str) or not isinstance(methods, Sequence) or not methods:
        raise InputError("methods", f"must be a non-empty list of interval names, got {methods!r}")
    est = scen.design.estimand
    problems = []
    for i, m in enumerate(methods):
        if not isinstance(m, str) or (scen.design.strata is None and (est, m) not in REGISTRY):
            problems.append(Problem(f"methods[{i}]", f"unknown interval {m!r} for estimand {est!r}; "
                                                     f"choose from {', '.join(methods_for(est))}"))
    if len(set(methods)) != len(methods) and not problems:
        problems.append(Problem("methods", f"lists a method twice: {list(methods)!r}"))
    if problems:
        raise InputError(problems)
    try:
        design = scen.design.with_method(methods[0])
    except InputError as e:
        raise InputError([Problem("methods", p.message) for p in e.problems]) from None
    return replace(scen, design=design, methods=tuple(methods))


# ---------------------------------------------------------------------------
# sweeps
# ---------------------------------------------------------------------------
@dataclass(frozen=True)
class SweepRun:
    """A sweep run from Python: the store, what this run did and the cells.

    Returned by :func:`sweep`; ``to_frame()`` gives one row per stored cell.

    Parameters
    ----------
    store : str
        The SQLite store (resume by calling :func:`sweep` again with the same
        arguments and an int ``rng``).
    summary : dict
        ``cells_total``, ``done_before``, ``run_now``, ``failed``,
        ``remaining``, ``interrupted``, ``store``.
    results : SweepResults
        The cells as read back from the store (what :func:`report` shows).

    Examples
    --------
    >>> import tempfile, pathlib
    >>> import simcheck as sc
    >>> s = sc.scenario(estimand="proportion", margin=0.1, interval="wilson",
    ...                 data={"model": "bernoulli", "p": 0.2})
    >>> store = pathlib.Path(tempfile.mkdtemp()) / "s.sqlite"
    >>> run = sc.sweep(s, {"data.p": [0.1, 0.2]}, store=store, task="check", n=[40], rng=1)
    >>> run.to_frame()["data.p"].tolist()
    [0.1, 0.2]
    """

    store: str
    summary: dict
    results: Any

    def to_dict(self) -> dict[str, Any]:
        """The run's summary and the sweep's description (JSON-safe)."""
        return {"summary": dict(self.summary), "sweep": self.results.to_dict()}

    def to_frame(self):
        """One row per stored cell (per n, per method), as ``simcheck export`` writes."""
        return self.results.to_frame()

    def __repr__(self) -> str:
        s = self.summary
        return (f"SweepRun(store={self.store!r}, task={self.results.task!r}, vary={list(self.results.vary)}, "
                f"cells={s.get('cells_total')}, run_now={s.get('run_now')}, failed={s.get('failed')})")

    def _repr_html_(self) -> str:
        from simcheck.notebook import frame_html, html_table

        s = self.summary
        head = html_table("Sweep", [("store", self.store), ("task", self.results.task),
                                    ("varied", ", ".join(self.results.vary)), ("cells", s.get("cells_total")),
                                    ("run now", s.get("run_now")), ("failed", s.get("failed"))])
        return head + frame_html(self.to_frame(), max_rows=12)


def sweep(
    scenario: ScenarioLike,
    vary: Mapping[str, Sequence[Any]],
    *,
    store: str | Path,
    task: str = "search",
    n: Sequence[int] | None = None,
    n_min: int | None = None,
    n_max: int | None = None,
    rng: Any = None,
    jobs: int = 1,
    backend: str = "local",
    scheduler: str | None = None,
    progress: Progress = None,
) -> SweepRun:
    """Run one task for every combination of assumptions, stored cell by cell.

    The scenario and the sweep are written as TOML beside the store
    (``STORE.scenario.toml``, ``STORE.sweep.toml``), because the store
    records the text of both; the sweep then runs as ``simcheck sweep``
    does: resumable, each cell on its own stream.

    Parameters
    ----------
    scenario : Scenario, dict or path
        The base scenario. Its data must be writable as TOML (named models,
        pilot ``values``); a scipy.stats model is refused.
    vary : dict
        Dotted scenario keys (``"data.cv"``, ``"method.interval"``) or
        :func:`scenario` keywords (``"margin"``) mapped to lists of values;
        every combination is one cell.
    store : str or Path
        The SQLite store, created when missing.
    task : {"search", "check", "curve"}
        What each cell runs.
    n : list of int, optional
        ``task="check"``: the sample sizes each cell checks.
    n_min, n_max : int, optional
        ``task="curve"``: the range.
    rng : int, SeedSequence, Generator or None
        The sweep's root seed; give an int to resume a stopped sweep.
    jobs : int
        Local worker processes.
    backend : {"local", "dask"}
        Where cells run.
    scheduler : str, optional
        Dask scheduler address (``backend="dask"``).
    progress : callable, optional
        ``progress(done, total)`` in cells.

    Returns
    -------
    SweepRun
        The store, this run's counts and the cells (``to_frame()``).

    Examples
    --------
    >>> import tempfile, pathlib
    >>> import simcheck as sc
    >>> s = sc.scenario(estimand="proportion", margin=0.1, interval="wilson",
    ...                 data={"model": "bernoulli", "p": 0.2}, n_max=300)
    >>> folder = pathlib.Path(tempfile.mkdtemp())
    >>> run = sc.sweep(s, {"data.p": [0.1, 0.3]}, store=folder / "p.sqlite", task="check", n=[50], rng=7)
    >>> run.summary["cells_total"], run.summary["failed"]
    (2, 0)
    """
    from simcheck.sweep.runner import run_sweep

    scen = _as_scenario(scenario)
    seed = _root_seed(rng, scen)
    _check_progress(progress)
    store = Path(store)
    sweep_file = _write_sweep_files(scen, vary, store, task=task, n=n, n_min=n_min, n_max=n_max, seed=seed)
    on_cell = None if progress is None else (lambda _out, done, total: progress(done, total))
    summary = run_sweep(sweep_file, store, jobs=jobs, backend=backend, scheduler=scheduler, on_cell=on_cell)
    from simcheck.report import read_sweep

    return SweepRun(store=str(store), summary=summary.to_dict(), results=read_sweep(store))


def _write_sweep_files(scen: Scenario, vary: Mapping[str, Sequence[Any]], store: Path, *, task: str,
                       n: Any, n_min: Any, n_max: Any, seed: int) -> Path:
    if not isinstance(vary, Mapping) or not vary:
        raise InputError("vary", f"must be a dict of scenario keys to lists of values, got {vary!r}")
    extra = _more_keywords()
    flat = {KEYWORDS.get(k) or extra.get(k) or k: v for k, v in vary.items()}
    for k, v in flat.items():
        if isinstance(v, (str, bytes)) or not isinstance(v, Sequence):
            raise InputError(f"vary[{k!r}]", f"must be a list of values, got {v!r}")
    table = _absolute_files(scen.to_dict(), scen.base_dir)
    data = table.get("data", {})
    for group in (data, data.get("a"), data.get("b")):
        if isinstance(group, dict) and group.get("model") == "scipy":
            raise InputError("scenario", "a sweep writes its base scenario as TOML, and a scipy.stats model "
                                         "cannot be written; use a named model or pilot values")
    base_text = _toml(table)
    sweep: dict[str, Any] = {"base": store.name + ".scenario.toml", "task": task, "seed": seed}
    for key, value in (("n", n), ("n_min", n_min), ("n_max", n_max)):
        if value is not None:
            sweep[key] = [_plain(x) for x in value] if key == "n" and not isinstance(value, Integral) else _plain(value)
    sweep["vary"] = {k: [_plain(x) for x in v] for k, v in flat.items()}
    folder = store.parent if str(store.parent) else Path(".")
    if not folder.is_dir():
        raise InputError("store", f"folder does not exist: {folder}")
    (folder / (store.name + ".scenario.toml")).write_text(base_text, encoding="utf-8")
    path = folder / (store.name + ".sweep.toml")
    path.write_text(_toml(sweep), encoding="utf-8")
    return path


def _absolute_files(table: Any, base_dir: str | None) -> Any:
    # the generated scenario sits beside the store, not beside the original file
    if isinstance(table, dict):
        out = {k: _absolute_files(v, base_dir) for k, v in table.items()}
        f = out.get("file")
        if isinstance(f, str) and base_dir is not None and not Path(f).is_absolute():
            out["file"] = str(Path(base_dir) / f)
        return out
    if isinstance(table, list):
        return [_absolute_files(v, base_dir) for v in table]
    return table


def _plain(v: Any) -> Any:
    if isinstance(v, np.generic):
        return v.item()
    if isinstance(v, np.ndarray):
        return v.tolist()
    return v


def _toml(table: Mapping[str, Any], prefix: str = "") -> str:
    """A TOML document for a table of text, numbers, booleans, lists and tables."""
    lines: list[str] = []
    subtables = []
    for k, v in table.items():
        if isinstance(v, Mapping):
            subtables.append((k, v))
        else:
            lines.append(f"{_toml_key(k)} = {_toml_value(v, k)}")
    out = "\n".join(lines) + ("\n" if lines else "")
    for k, v in subtables:
        name = f"{prefix}.{_toml_key(k)}" if prefix else _toml_key(k)
        out += f"\n[{name}]\n" + _toml(v, name)
    return out


def _toml_key(k: str) -> str:
    k = str(k)
    return k if k and all(ch.isalnum() or ch in "_-" for ch in k) else json.dumps(k)


def _toml_value(v: Any, key: str) -> str:
    v = _plain(v)
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, int):
        return str(v)
    if isinstance(v, float):
        if not math.isfinite(v):
            raise InputError(key, f"must be a finite number, got {v!r}")
        return repr(v)
    if isinstance(v, str):
        return json.dumps(v, ensure_ascii=False)
    if isinstance(v, (list, tuple)):
        return "[" + ", ".join(_toml_value(x, key) for x in v) + "]"
    if isinstance(v, Mapping):
        return "{" + ", ".join(f"{_toml_key(a)} = {_toml_value(b, key)}" for a, b in v.items()) + "}"
    raise InputError(key, f"a sweep writes its base scenario as TOML and cannot write a {type(v).__name__} "
                          "(use a named model, or pilot data as values)")


# ---------------------------------------------------------------------------
# reports
# ---------------------------------------------------------------------------
@dataclass(frozen=True)
class Report:
    """The files a report wrote and the results it shows.

    Returned by :func:`report`; ``to_frame()`` is the results table.

    Parameters
    ----------
    files : ReportFiles
        ``report.md``, ``report.html``, ``results.csv``, ``summary.json`` and the figures.
    results : StudyResults or SweepResults
        What the report shows.

    Examples
    --------
    >>> import tempfile
    >>> import simcheck as sc
    >>> s = sc.scenario(estimand="proportion", margin=0.1, interval="wilson",
    ...                 data={"model": "bernoulli", "p": 0.2}, n_max=300)
    >>> rep = sc.report(s, tempfile.mkdtemp(), rng=1)
    >>> rep.to_frame()["method"].tolist()
    ['wilson']
    """

    files: Any
    results: Any

    def to_dict(self) -> dict[str, Any]:
        """The file paths and the results (JSON-safe)."""
        return {"files": self.files.to_dict(), "results": self.results.to_dict()}

    def to_frame(self):
        """The results table (one row per method, or per sweep cell)."""
        return self.results.to_frame()

    def __repr__(self) -> str:
        return f"Report(html={str(self.files.html)!r}, title={getattr(self.results, 'title', '')!r}, figures={list(self.files.figures)})"

    def _repr_html_(self) -> str:
        from simcheck.notebook import coverage_png, frame_html, html_table, png_html

        head = html_table(f"Report: {getattr(self.results, 'title', '')}",
                          [("HTML", str(self.files.html)), ("folder", str(self.files.out_dir))])
        img = ""
        curves = getattr(self.results, "curves", None)
        if curves:  # a study: the first method's coverage curve, drawn small (the report has the full figures)
            method, c = next(iter(curves.items()))
            s = self.results.searches.get(method)
            png = coverage_png(c.n, c.column("coverage"), c.column("coverage_mcse"),
                               confidence=self.results.confidence, mark=None if s is None else s.n)
            img = png_html(png, f"coverage against n, {method}")
        return head + frame_html(self.to_frame(), max_rows=12) + img


def report(
    source: ScenarioLike | SweepRun,
    out_dir: str | Path,
    *,
    rng: Any = None,
    units: str | None = None,
    progress: Progress = None,
) -> Report:
    """Write the report of a scenario (it runs the study) or of a sweep.

    Parameters
    ----------
    source : Scenario, dict, path or SweepRun
        A scenario (formula n, search per method, curves and checks are run),
        a :class:`SweepRun`, or the path of a scenario file or a sweep store.
    out_dir : str or Path
        Folder for ``report.md``, ``report.html``, ``results.csv``,
        ``summary.json`` and ``figures/``.
    rng : int, SeedSequence, Generator or None
        Root of the random streams (scenarios only).
    units : str, optional
        The data's units, for axis labels.
    progress : callable, optional
        ``progress(done, total)`` in stages of the study.

    Returns
    -------
    Report
        The files written and the results.

    Examples
    --------
    >>> import tempfile
    >>> import simcheck as sc
    >>> s = sc.scenario(estimand="proportion", margin=0.1, interval="wilson",
    ...                 data={"model": "bernoulli", "p": 0.2}, n_max=300)
    >>> rep = sc.report(s, tempfile.mkdtemp(), rng=4)
    >>> rep.files.html.name
    'report.html'
    """
    from simcheck.report import read_sweep, run_study, write_report
    from simcheck.report.study import is_store

    _check_progress(progress)
    if isinstance(source, SweepRun):
        results = source.results
    elif isinstance(source, (str, Path)) and is_store(source):
        results = read_sweep(source)
    else:
        scen = _as_scenario(source, "source")
        seed = _root_seed(rng, scen)
        stages = 2 + 2 * len(scen.methods)
        count = [0]

        def stage(_message: str) -> None:
            count[0] += 1
            if progress is not None:
                progress(min(count[0], stages), stages)

        results = run_study(scen, seed=seed, progress=stage, units=units)
    files = write_report(out_dir, results)
    return Report(files=files, results=results)


# ---------------------------------------------------------------------------
# registries and examples
# ---------------------------------------------------------------------------
def methods(estimand: str | None = None):
    """The interval methods simcheck knows, as a table.

    Parameters
    ----------
    estimand : str, optional
        Only the methods of this estimand.

    Returns
    -------
    pandas.DataFrame
        Columns ``estimand``, ``name``, ``kind``, ``summary``, ``references``.

    Examples
    --------
    >>> import simcheck as sc
    >>> "wilson" in set(sc.methods("proportion")["name"])
    True
    """
    import pandas as pd

    from simcheck.intervals import REGISTRY

    if estimand is not None and estimand not in {e for e, _ in REGISTRY}:
        known = sorted({e for e, _ in REGISTRY})
        raise InputError("estimand", f"unknown estimand {estimand!r}; choose one of {', '.join(known)}")
    rows = [{"estimand": m.estimand, "name": m.name, "kind": m.kind, "summary": m.summary,
             "references": "; ".join(m.references)}
            for (e, _), m in sorted(REGISTRY.items()) if estimand is None or e == estimand]
    return pd.DataFrame(rows, columns=["estimand", "name", "kind", "summary", "references"])


class ExampleFile(NamedTuple):
    """One packaged example file."""

    name: str
    kind: str
    title: str
    file: str


def _examples_dir():
    return resources.files("simcheck").joinpath("data", "examples")


def example_list() -> list[ExampleFile]:
    """The packaged example files (all invented settings), by name.

    Returns
    -------
    list of ExampleFile
        ``name`` (file stem), ``kind`` ("scenario" or "sweep"), ``title``, ``file``.

    Examples
    --------
    >>> import simcheck.api as api
    >>> "turnaround" in [e.name for e in api.example_list()]
    True
    """
    import tomllib

    out = []
    for f in sorted(_examples_dir().iterdir(), key=lambda p: p.name):
        if not f.name.endswith(".toml"):
            continue
        table = tomllib.loads(f.read_text(encoding="utf-8"))
        kind = "sweep" if "base" in table and ("vary" in table or "task" in table) else "scenario"
        out.append(ExampleFile(f.name[:-5], kind, str(table.get("title", "")), f.name))
    return out


def examples():
    """The packaged example scenarios and sweeps (invented settings) as a table.

    Returns
    -------
    pandas.DataFrame
        Columns ``name``, ``kind``, ``title``, ``file``.

    Examples
    --------
    >>> import simcheck as sc
    >>> table = sc.examples()
    >>> list(table.columns)
    ['name', 'kind', 'title', 'file']
    """
    import pandas as pd

    return pd.DataFrame([e._asdict() for e in example_list()], columns=["name", "kind", "title", "file"])


def example(name: str) -> Scenario:
    """A packaged example scenario, loaded and validated.

    Parameters
    ----------
    name : str
        The example's name (see :func:`examples`), e.g. ``"turnaround"``.

    Returns
    -------
    Scenario
        The scenario, ready for :func:`check`, :func:`search`, ...

    Examples
    --------
    >>> import simcheck as sc
    >>> sc.example("costs").design.estimand
    'mean'
    """
    names = {e.name: e for e in example_list()}
    if name not in names or names[name].kind != "scenario":
        scen = [n for n, e in names.items() if e.kind == "scenario"]
        near = difflib.get_close_matches(str(name), scen, n=1)
        hint = f"did you mean {near[0]!r}? " if near else ""
        raise InputError("name", f"no example scenario {name!r}; {hint}choose one of {', '.join(scen)}")
    with resources.as_file(_examples_dir().joinpath(names[name].file)) as path:
        return load_scenario(path)


def copy_examples(folder: str | Path) -> tuple[list[str], list[str]]:
    """Copy every packaged example into ``folder`` (created if missing).

    Files that already exist there with the same content are left alone;
    with other content they are not overwritten.

    Parameters
    ----------
    folder : str or Path
        Destination folder.

    Returns
    -------
    tuple of (list of str, list of str)
        Files copied, and files skipped because a different file has that name.

    Examples
    --------
    >>> import tempfile
    >>> import simcheck.api as api
    >>> copied, skipped = api.copy_examples(tempfile.mkdtemp())
    >>> "turnaround.toml" in copied, skipped
    (True, [])
    """
    dest = Path(folder)
    if dest.exists() and not dest.is_dir():
        raise InputError("--copy", f"is a file, not a folder: {dest}")
    try:
        dest.mkdir(parents=True, exist_ok=True)
    except OSError as e:
        raise InputError("--copy", f"cannot create {dest}: {e.strerror or e}") from None
    copied, skipped = [], []
    # scenarios, sweeps and the data files they name (pilot or population CSVs)
    names = sorted(f.name for f in _examples_dir().iterdir() if f.name.endswith((".toml", ".csv")))
    for name in names:
        target = dest / name
        text = _examples_dir().joinpath(name).read_bytes()
        if target.exists():
            if target.read_bytes() != text:
                skipped.append(name)
            continue
        with resources.as_file(_examples_dir().joinpath(name)) as src:
            shutil.copyfile(src, target)
        copied.append(name)
    return copied, skipped
