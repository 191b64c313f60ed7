"""Scenario files: read, validate and resolve them into the Python API's objects.

A scenario file (TOML, read with the standard library's :mod:`tomllib`) names
the target (estimand, confidence, margin, assurance, coverage tolerance), the
data model(s), the interval method(s) and the simulation settings; the format
is the "Scenario file (TOML)" section of the command-line contract. This
module is the one place where a scenario is validated: :func:`validate`
collects *every* problem (file, dotted key, what was expected, what was found)
and raises a single :class:`~simcheck.errors.InputError`, so the user fixes
them all in one go.

Defaults and limits (chosen here; documented in :data:`KNOWN_KEYS`):

=============================  ==========================================
``target.confidence``          0.95, in (0, 1)
``target.margin``              required, > 0 (the point of the tool)
``target.assurance``           0.5, in (0, 1)
``target.coverage_tolerance``  0.005, in [0, 0.5) and below the confidence
``target.window``              1.25, in [1, 4] (exact searches: window criterion)
``method.interval``            required: a name or a list of names
``method.resamples``           1999, whole number in [99, 10**6]
``simulation.replicates``      10000, whole number in [100, 10**8]
``simulation.seed``            integer in [0, 2**63 - 1]; when absent the run
                               picks one from OS entropy and reports it
                               (:func:`simcheck.tasks.fresh_seed`)
``simulation.n_min``           2, whole number >= 2
``simulation.n_max``           5000 (or the population size, if smaller),
                               whole number > n_min and <= 10**6
``simulation.ratio``           1.0, in (0, 100]; other values only for
                               two-sample estimands
``simulation.budget``          optional, whole number in [100, 10**12]
``simulation.path``            "auto" (auto, exact, sufficient, nested, full)
``clusters.effect``            "normal" (normal or gamma)
``population.fpc``             true
=============================  ==========================================

An absent seed stays ``None`` in :class:`Scenario` (and in
:meth:`Scenario.to_dict`, which sweeps hash), so loading is deterministic; the
seed is drawn when a task runs.
"""

from __future__ import annotations

import copy
import datetime as _dt
import difflib
import math
import sys
from dataclasses import dataclass, field
from numbers import Integral
from pathlib import Path
from typing import Any, Mapping

from simcheck.design import ESTIMAND_PARAMS, ESTIMANDS, STRATIFIED_METHODS, TWO_GROUP_DATA, TWO_SAMPLE, ClusterSpec, Design, PopulationSpec
from simcheck.errors import Collector, InputError, Problem, shown
from simcheck.files import read_csv_column, read_toml, regular_file, resolve_data_path
from simcheck.scenario_strata import KNOWN_KEYS as STRATA_KEYS
from simcheck.scenario_strata import read_strata, strata_tables
from simcheck.scenario_selection import KNOWN_KEYS as SELECTION_KEYS
from simcheck.scenario_selection import read_selection, selection_tables, supplies_data

__all__ = [
    "KNOWN_KEYS",
    "Scenario",
    "load_scenario",
    "scenario_from_dict",
    "set_dotted",
    "validate",
]

# --- defaults and limits ------------------------------------------------------
DEFAULT_CONFIDENCE = 0.95
DEFAULT_ASSURANCE = 0.5
DEFAULT_COVERAGE_TOLERANCE = 0.005
DEFAULT_RESAMPLES = 1999
DEFAULT_REPLICATES = 10_000
DEFAULT_N_MIN = 2
DEFAULT_N_MAX = 5000
DEFAULT_RATIO = 1.0
DEFAULT_PATH = "auto"
REPLICATES_MIN, REPLICATES_MAX = 100, 10**8
RESAMPLES_MIN, RESAMPLES_MAX = 99, 10**6
N_LIMIT = 10**6
SEED_MAX = 2**63 - 1  # fits an SQLite INTEGER (sweep stores)
CLUSTER_COUNT_MAX = 10**7
BUDGET_MIN, BUDGET_MAX = 100, 10**12
RATIO_MAX = 100.0
CLUSTER_SIZE_MAX = 10**5
POPULATION_MAX = 10**9
PATHS = ("auto", "exact", "sufficient", "nested", "full")
CLUSTER_EFFECTS = ("normal", "gamma")
NESTING_MAX = 32  # tables and lists inside each other; real scenarios use fewer than 6
INT_LIMIT = int(sys.float_info.max)  # larger integers cannot become floats

#: Every key of a scenario file (dotted) with what it holds. ``data`` (and
#: ``data.a`` / ``data.b``) are model tables whose keys the models validate.
KNOWN_KEYS: dict[str, str] = {
    "title": "text; default: the file name",
    "target.estimand": "required: " + " | ".join(ESTIMANDS),
    "target.confidence": f"nominal confidence level in (0, 1); default {DEFAULT_CONFIDENCE}",
    "target.margin": "required: target half-width in the data's units, > 0",
    "target.assurance": f"required share of samples with half-width <= margin, in (0, 1); default {DEFAULT_ASSURANCE}",
    "target.coverage_tolerance": f"accepted coverage shortfall below the confidence, in [0, 0.5); default {DEFAULT_COVERAGE_TOLERANCE}",
    "target.window": "exact searches: the targets must hold at every n from n to ceil(window x n), in [1, 4]; default 1.25 (1: the first n that meets them)",
    "target.dropout": "share of enrolled units lost before analysis, in [0, 1); default 0: search also reports n_enrolled = ceil(n / (1 - dropout))",
    "target.event_values": "proportion estimand on a discrete non-0/1 model: the values that count (list of numbers)",
    "target.event_above": "proportion estimand on a non-0/1 model: values strictly above this number count",
    "target.bound": "two-sided (default) | upper | lower: an interval or a one-sided confidence limit",
    "target.relative_margin": "target half-width as a share of the true value, > 0 (instead of target.margin)",
    "target.units": "units of the data, text (used in tables, figures and the methods paragraph)",
    "target.limit": "demonstration plan: the proportion in (0, 1) the upper limit must stay below (bound = upper)",
    "target.events_allowed": "demonstration plan: events allowed while the plan still passes, whole number >= 0; default 0",
    "target.quantile": "estimand quantile: the quantile estimated, in (0, 1) (0.5 = the median)",
    "target.exposure": "estimands rate, rate-ratio and rate-diff: exposure of each observation unit (person-years, litres, m^2), > 0; default 1",
    "data": "one-sample model table: model = \"...\" and its parameters",
    "data.a": "two-sample: model table of group a (the difference is a - b); paired: the first measurement",
    "data.b": "two-sample: model table of group b; paired: the second measurement",
    "data.correlation": "paired estimands: correlation of the two measurements' normal scores, in (-1, 1)",
    "method.interval": "required: interval method name, or a list of names",
    "method.resamples": f"bootstrap resamples, whole number in [{RESAMPLES_MIN}, {RESAMPLES_MAX}]; default {DEFAULT_RESAMPLES}",
    "simulation.replicates": f"simulated samples per n, whole number in [{REPLICATES_MIN}, {REPLICATES_MAX}]; default {DEFAULT_REPLICATES}",
    "simulation.seed": f"root random seed, integer in [0, {SEED_MAX}]; default: drawn from OS entropy and reported",
    "simulation.n_min": f"smallest n considered, whole number >= 2; default {DEFAULT_N_MIN}",
    "simulation.n_max": f"largest n considered, whole number > n_min and <= {N_LIMIT}; default {DEFAULT_N_MAX}",
    "simulation.ratio": f"n_b / n_a for two-sample estimands, in (0, {RATIO_MAX:g}]; default {DEFAULT_RATIO}",
    "simulation.budget": f"optional cap on the replicates a search spends, whole number in [{BUDGET_MIN}, {BUDGET_MAX}]",
    "simulation.path": f"computation path: {' | '.join(PATHS)}; default {DEFAULT_PATH}",
    "simulation.random_dropout": "check: draw each study's analysed n from Binomial(n_enrolled, 1 - target.dropout): true | false; default false",
    "clusters.icc": "intracluster correlation in [0, 1); n then counts clusters",
    "clusters.size": f"observations per cluster, whole number in [1, {CLUSTER_SIZE_MAX}] (or size_mean and size_cv)",
    "clusters.size_mean": "mean cluster size, >= 1 (varying sizes)",
    "clusters.size_cv": "coefficient of variation of the cluster sizes, >= 0 (with size_mean)",
    "clusters.effect": "distribution of the cluster effect: normal | gamma; default normal",
    "clusters.count": f"clusters in the population (M), whole number in [2, {CLUSTER_COUNT_MAX}]: n clusters drawn without replacement, cluster-t with sqrt(1 - n/M)",
    "population.size": f"finite population size, whole number in [2, {POPULATION_MAX}] (default: the rows of file)",
    "population.fpc": "apply the finite population correction: true | false; default true",
    "population.file": "CSV file of the population's values, relative to the scenario file's folder and inside it (unless --allow-outside-files)",
    "population.column": "column of population.file holding the values",
    "population.values": "the population's unit values as a list (instead of file; from Python an array or Series)",
    "population.events": "a 0/1 population with exactly this many events (units of value 1), whole number in [0, size]; no [data] needed",
    **STRATA_KEYS,
    **SELECTION_KEYS,
}

_TOP = ("title", "target", "data", "method", "simulation", "clusters", "population", "strata", "allocation", "selection",
        "misstatement")
_TABLES: dict[str, tuple[str, ...]] = {}
for _k in KNOWN_KEYS:
    if "." in _k and not _k.startswith(("data", "allocation")):
        _t, _leaf = _k.split(".", 1)
        _TABLES.setdefault(_t, ())
        _TABLES[_t] = _TABLES[_t] + (_leaf,)
_FIXED_KEYS = [k for k in KNOWN_KEYS if not k.startswith("data")]


# --- the resolved scenario ----------------------------------------------------
@dataclass(frozen=True)
class Scenario:
    """A validated scenario: the :class:`~simcheck.design.Design` plus the run settings.

    Attributes
    ----------
    title : str
    design : Design
        The design with the first listed interval method.
    methods : tuple of str
        Every listed interval method (``method.interval``), in file order.
    assurance, coverage_tolerance : float
        Search targets.
    replicates : int
    seed : int or None
        None when the file gives none (a run then draws one and reports it).
    n_min, n_max : int
    budget : int or None
    path : str
    source : str or None
        The file as named by the user (None for a dict).
    base_dir : str or None
        Folder that relative file paths are resolved against.
    table : dict
        The TOML table as read, with overrides applied.
    event_values, event_above
        The event of a proportion estimand on a non-0/1 model.
    """

    title: str
    design: Design
    methods: tuple[str, ...]
    assurance: float = DEFAULT_ASSURANCE
    coverage_tolerance: float = DEFAULT_COVERAGE_TOLERANCE
    replicates: int = DEFAULT_REPLICATES
    seed: int | None = None
    n_min: int = DEFAULT_N_MIN
    n_max: int = DEFAULT_N_MAX
    budget: int | None = None
    path: str = DEFAULT_PATH
    source: str | None = None
    base_dir: str | None = None
    table: dict[str, Any] = field(default_factory=dict, compare=False, hash=False, repr=False)
    event_values: tuple[float, ...] | None = None
    event_above: float | None = None
    window: float = 1.25
    #: warnings about values allowed but implausible, and settings not used;
    #: the command line prints them on stderr
    dropout: float = 0.0
    random_dropout: bool = False
    #: planning values given as distributions (simcheck.uncertain); the design uses their point values
    uncertain: tuple[Any, ...] = ()
    notices: tuple[str, ...] = ()

    @property
    def two_sample(self) -> bool:
        return self.design.two_sample

    def designs(self) -> tuple[Design, ...]:
        """One Design per listed interval method (the first is :attr:`design`)."""
        return (self.design,) + tuple(self.design.with_method(m) for m in self.methods[1:])

    def describe_data(self) -> str:
        """The data model(s) in one line."""
        d = self.design
        if d.selection is not None:
            from simcheck.scenario_selection import describe

            return describe(d, self.table)
        if d.strata is not None:
            return "; ".join(f"{name} (N = {size}): {m.describe()}"
                             for name, size, m in zip(d.strata.names, d.strata.sizes, d.strata.models))
        if d.two_sample:
            return f"a: {d.model.describe()}; b: {d.model_b.describe()}"
        pop = d.population
        if pop is not None and pop.file is not None:
            given = self.table.get("population", {}).get("file", pop.file)
            return f"the {pop.size} values of column {pop.column!r} of {given}"
        return d.model.describe()

    def to_dict(self) -> dict[str, Any]:
        """The resolved scenario, defaults filled in: itself a valid scenario table.

        JSON-safe and deterministic (equal scenarios give equal dicts), so
        sweeps hash it; ``scenario_from_dict(s.to_dict())`` gives back ``s``.
        Keys whose value is absent (no seed, no budget) are left out, as TOML
        has no null. Model tables are as given (models own their defaults).
        """
        d = self.design
        target: dict[str, Any] = {
            "estimand": d.estimand,
            "confidence": float(d.confidence),
            "margin": None if d.margin is None else float(d.margin),
            "assurance": float(self.assurance),
            "coverage_tolerance": float(self.coverage_tolerance),
        }
        if d.relative_margin is not None:
            del target["margin"]
            target["relative_margin"] = float(d.relative_margin)
        elif d.margin is None:
            del target["margin"]
        if d.bound != "two-sided":
            target["bound"] = d.bound
        if d.units is not None:
            target["units"] = d.units
        if d.limit is not None:
            target["limit"] = float(d.limit)
            target["events_allowed"] = int(d.events_allowed or 0)
        if self.window != 1.25:
            target["window"] = float(self.window)  # only when set: default scenarios keep their hash
        if self.event_values is not None:
            target["event_values"] = [float(v) for v in self.event_values]
        if self.event_above is not None:
            target["event_above"] = float(self.event_above)
        if self.dropout:  # only when given, so scenarios without it hash as before
            target["dropout"] = float(self.dropout)
        for key, attr in ESTIMAND_PARAMS.items():  # target.quantile, target.exposure (data.correlation is in data)
            section, name = key.split(".")
            if section == "target" and getattr(d, attr) is not None:
                target[name] = float(getattr(d, attr))
        sim: dict[str, Any] = {
            "replicates": int(self.replicates),
            "n_min": int(self.n_min),
            "n_max": int(self.n_max),
            "ratio": float(d.ratio),
            "path": self.path,
        }
        if self.seed is not None:
            sim["seed"] = int(self.seed)
        if self.budget is not None:
            sim["budget"] = int(self.budget)
        if self.random_dropout:  # only when set, so scenarios without it hash as before
            sim["random_dropout"] = True
        out: dict[str, Any] = {
            "title": self.title,
            "target": target,
            "data": _json_safe(copy.deepcopy(self.table.get("data", {}))),
            "method": {
                "interval": self.methods[0] if len(self.methods) == 1 else list(self.methods),
                "resamples": int(d.resamples),
            },
            "simulation": sim,
        }
        if d.strata is not None:
            out.pop("data")
            out.update(_json_safe(copy.deepcopy(strata_tables(self.table))))
        if d.selection is not None:
            out.update(_json_safe(copy.deepcopy(selection_tables(self.table))))
            if d.selection.monetary_unit:
                out.pop("data")  # the book values and misstatements come from [selection] and [misstatement]
        if d.clusters is not None:
            out["clusters"] = _json_safe(d.clusters.to_dict())
        if d.population is not None:
            pop = d.population.to_dict()
            given = self.table.get("population", {})
            if "file" in given:  # as written, not the resolved absolute path
                pop["file"] = given["file"]
            out["population"] = _json_safe(pop)
        return out

    def to_frame(self):
        """One-row DataFrame: the resolved scenario flattened to dotted keys,
        plus the true value and the data model description."""
        import json

        import pandas as pd

        flat: dict[str, Any] = {}
        _flatten(self.to_dict(), "", flat)
        row = {k: (json.dumps(v) if isinstance(v, (list, dict)) else v) for k, v in flat.items()}
        row["true_value"] = float(self.design.true_value)
        row["model"] = self.describe_data()
        row["source"] = self.source
        return pd.DataFrame([row])


# --- dotted keys --------------------------------------------------------------
def set_dotted(table: Mapping[str, Any], key: str, value: Any) -> dict[str, Any]:
    """A deep copy of ``table`` with ``value`` at the dotted ``key``.

    Missing intermediate tables are created; ``value=None`` removes the key
    (TOML has no null, so None can only mean "not given").

    Examples
    --------
    >>> set_dotted({"data": {"model": "lognormal", "cv": 1.0}}, "data.cv", 2.0)
    {'data': {'model': 'lognormal', 'cv': 2.0}}
    """
    if not isinstance(key, str) or not key or any(not part for part in key.split(".")):
        raise InputError(str(key), "not a dotted scenario key such as 'data.cv'")
    if not isinstance(table, Mapping):
        raise InputError(key, f"cannot set a key in {type(table).__name__}; a table is needed")
    out = copy.deepcopy(dict(table))
    parts = key.split(".")
    node = out
    for i, part in enumerate(parts[:-1]):
        nxt = node.get(part)
        if nxt is None:
            if value is None:
                return out
            nxt = node[part] = {}
        elif not isinstance(nxt, dict):
            raise InputError(key, f"cannot set: {'.'.join(parts[: i + 1])} is {nxt!r}, not a table")
        node = nxt
    if value is None:
        node.pop(parts[-1], None)
    else:
        node[parts[-1]] = copy.deepcopy(value)
    return out


# --- reading ------------------------------------------------------------------
def load_scenario(
    path: str | Path,
    overrides: Mapping[str, object] | None = None,
    *,
    allow_outside_files: bool = False,
) -> Scenario:
    """Read and validate a scenario file.

    Parameters
    ----------
    path : str or Path
        The TOML file. Problems are reported prefixed with it as given.
    overrides : dict, optional
        Dotted keys and values set before validation, e.g.
        ``{"simulation.replicates": 1000, "data.cv": 2.0}``.
    allow_outside_files : bool, default False
        Let ``population.file`` and an empirical model's ``file`` name a file
        outside the scenario's folder (an absolute path, ``..``, a symbolic
        link pointing out). The command line's ``--allow-outside-files``.

    Raises
    ------
    InputError
        One error listing every problem: missing file, a folder or other
        non-regular file, a file over 1 MiB, non-UTF-8 text or a byte-order
        mark, TOML syntax (with line and column), bad values.
    """
    label = str(path)
    table = read_table(path)
    for k, v in (overrides or {}).items():
        try:
            table = set_dotted(table, k, v)
        except InputError as e:
            raise e.with_source(label) from None
    p = Path(path)
    return scenario_from_dict(table, source=label, base_dir=str(p.resolve().parent),
                              allow_outside_files=allow_outside_files)


def read_table(path: str | Path) -> dict[str, Any]:
    """The TOML table of a file, or one InputError saying why it cannot be read.

    Only regular files of at most :data:`simcheck.files.TEXT_MAX` bytes are
    read (a FIFO or ``/dev/zero`` is refused, not waited on); errors give a
    line and column, never the file's text.
    """
    return read_toml(path, label=str(path))


def scenario_from_dict(
    table: Mapping[str, Any],
    *,
    source: str | None = None,
    base_dir: str | Path | None = None,
    allow_outside_files: bool = False,
) -> Scenario:
    """Validate a scenario table (as read from TOML) into a :class:`Scenario`.

    ``source`` names the file in error messages; ``base_dir`` resolves
    relative file paths (empirical models, population files; the current
    folder when None), which must stay inside it unless
    ``allow_outside_files``.
    """
    return validate(table, source=source, base_dir=base_dir, allow_outside_files=allow_outside_files)


# --- validation: the one place ------------------------------------------------
@dataclass(frozen=True)
class _Files:
    """Where a scenario's data files are looked up, and whether they may lie outside."""

    base_dir: str | None
    allow_outside: bool


@dataclass
class _Target:
    estimand: str | None = None
    confidence: float | None = None
    margin: float | None = None
    assurance: float | None = None
    tolerance: float | None = None
    event_values: list[float] | None = None
    event_above: float | None = None
    window: float | None = None
    dropout: float = 0.0
    bounds: dict[str, Any] = field(default_factory=dict)
    #: keys only some estimands use (see design.ESTIMAND_PARAMS)
    quantile: float | None = None
    exposure: float | None = None
    correlation: float | None = None


@dataclass
class _Simulation:
    replicates: int | None
    seed: int | None
    n_min: int | None
    n_max: int | None
    n_max_given: bool
    ratio: float | None
    budget: int | None
    path: str | None
    random_dropout: bool = False


def validate(
    table: Mapping[str, Any],
    *,
    source: str | None = None,
    base_dir: str | Path | None = None,
    allow_outside_files: bool = False,
) -> Scenario:
    """Check every key of a scenario table; raise one InputError with all problems.

    The sections are checked in file order ([target], [data], [method],
    [simulation], [clusters], [population]), then the combination through
    :class:`~simcheck.design.Design` and what the engine would refuse.
    """
    given_table = _prepared(table, source)
    table, planning = _point_values(given_table, source)
    files = _Files(str(base_dir) if base_dir is not None else None, bool(allow_outside_files))
    c = Collector()
    _unknown_keys(c, table)
    _no_nan(c, table, "")
    title = _title(c, table, source)
    target_t = _table(c, table, "target", required=True)
    method_t = _table(c, table, "method", required=True)
    sim_t = _table(c, table, "simulation", required=False)
    clusters_t = _table(c, table, "clusters", required=False) if "clusters" in table else None
    pop_t = _table(c, table, "population", required=False) if "population" in table else None

    tgt = _target(c, target_t) if target_t is not None else _Target()
    # population.file supplies the values: [data] is then neither needed nor used
    from_file = (isinstance(pop_t, dict) and ("file" in pop_t or "events" in pop_t) and tgt.estimand not in TWO_SAMPLE
                 and "strata" not in table) or supplies_data(table)
    notices: list[str] = []
    model, model_b, strata = _data(c, table, tgt, files, from_file, notices)
    if strata is None:
        model, model_b = _events(c, tgt, model, model_b)
    methods: list[str] = []
    resamples = DEFAULT_RESAMPLES
    if method_t is not None:
        methods = _methods(c, method_t, tgt.estimand, stratified="strata" in table)
        resamples = _num(c, method_t, "method", "resamples", DEFAULT_RESAMPLES, low=RESAMPLES_MIN, high=RESAMPLES_MAX, integer=True)
    sim = _simulation(c, sim_t if sim_t is not None else {}, tgt.estimand, tgt.dropout)
    clusters = _clusters(c, clusters_t) if clusters_t is not None else None
    population = _population(c, pop_t, files) if pop_t is not None else None
    if from_file and population is not None and (population.file or population.events is not None) and not c.problems:
        model = _population_model(c, population, tgt.estimand)
    selection, model = read_selection(c, table, population, model, files)
    n_max = _n_range(c, sim, population, clusters)
    _strata_n_min(c, sim, strata, sim_t or {})

    design, designs = None, []
    if not c.problems and model is not None and methods:
        design, designs = _designs(c, tgt, model, model_b, methods, sim, resamples, clusters, population, strata, selection)
    _dedupe(c)
    c.raise_if_any(source=source)
    assert design is not None  # every path without a design recorded a problem
    return Scenario(
        title=title,
        design=design,
        methods=tuple(methods),
        assurance=tgt.assurance,
        coverage_tolerance=tgt.tolerance,
        replicates=sim.replicates,
        seed=sim.seed,
        n_min=sim.n_min,
        n_max=n_max,
        budget=sim.budget,
        path=sim.path,
        source=source,
        base_dir=files.base_dir,
        table=given_table,
        event_values=None if tgt.event_values is None else tuple(tgt.event_values),
        event_above=tgt.event_above,
        window=tgt.window,
        notices=_notices(notices, designs),
        uncertain=planning,
        dropout=float(tgt.dropout or 0.0),
        random_dropout=bool(sim.random_dropout),
    )


# --- validation: the sections -------------------------------------------------
def _point_values(table: dict[str, Any], source: str | None):
    """The table with planning values given as distributions set to their point values, and those values.

    They are validated and run at their point values (the conditional answer);
    the scenario keeps the table as given, so to_dict and sweep keys still see them.
    """
    from simcheck import uncertain

    return uncertain.split(table, source)


def _events(c: Collector, tgt: "_Target", model, model_b):
    """The models of a proportion whose event is named in [target] (event_values / event_above)."""
    if model is None or (tgt.event_values is None and tgt.event_above is None):
        return model, model_b
    model = _wrap_event(c, model, tgt.event_values, tgt.event_above)
    if model_b is not None:
        model_b = _wrap_event(c, model_b, tgt.event_values, tgt.event_above)
    return model, model_b


def _prepared(table: Any, source: str | None) -> dict[str, Any]:
    """A private copy of the table, after the checks that must come before any other."""
    if not isinstance(table, Mapping):
        raise InputError([Problem("", f"a scenario must be a table, got {shown(table)}")], source=source)
    # Too deep a nesting or an integer beyond the float range would break the
    # checks below (recursion, float conversion): refuse them first.
    shape = _shape_problems(table)
    if shape:
        raise InputError(shape, source=source)
    table = copy.deepcopy(dict(table))
    if "base" in table and ("vary" in table or "task" in table) and "target" not in table:
        raise InputError([Problem("", "this is a sweep file (it has base and vary/task), not a scenario; run it with `simcheck sweep`")], source=source)
    return table


def _shape_problems(table: Mapping[str, Any]) -> list[Problem]:
    # Iterative, so a deeply nested table cannot exhaust the interpreter's stack here.
    problems: list[Problem] = []
    stack: list[tuple[str, Any, int]] = [("", table, 0)]
    while stack and len(problems) < 20:
        name, v, depth = stack.pop()
        if isinstance(v, (Mapping, list, tuple)):
            if depth >= NESTING_MAX:
                problems.append(Problem(name, f"nested more than {NESTING_MAX} levels deep; no scenario key needs that"))
                continue
            items = v.items() if isinstance(v, Mapping) else ((f"[{i}]", x) for i, x in enumerate(v))
            for k, x in items:
                sub = f"{name}{k}" if str(k).startswith("[") else _join(name, str(k))
                stack.append((sub, x, depth + 1))
        elif isinstance(v, int) and not isinstance(v, bool) and abs(v) > INT_LIMIT:
            problems.append(Problem(name, f"must be a finite number, got {shown(v)}, beyond the range of floating-point numbers (about 1.8e308)"))
    return problems


def _title(c: Collector, table: dict[str, Any], source: str | None) -> str | None:
    title = table.get("title")
    if title is None:
        return Path(source).stem if source else "untitled scenario"
    if not isinstance(title, str) or not title.strip():
        c.add("title", f"must be a non-empty text, got {shown(title)}")
        return None
    return title


def _target(c: Collector, target: dict[str, Any]) -> _Target:
    t = _Target()
    t.estimand = _choice(c, target, "target", "estimand", ESTIMANDS, required=True)
    t.confidence = _num(c, target, "target", "confidence", DEFAULT_CONFIDENCE, low=0, high=1, low_open=True, high_open=True)
    t.bounds = _bound_keys(c, target, t.estimand)
    t.margin = _num(c, target, "target", "margin", None, required=not t.bounds["optional_margin"], low=0, low_open=True,
                    what="the target half-width in the data's units, > 0 (or target.relative_margin)")
    if t.margin is not None and t.estimand in ("proportion", "proportion-diff") and t.margin >= 1:
        # as `formula` refuses it: every interval of a proportion has half-width <= 1/2 (a difference 1)
        c.add("target.margin", f"must be < 1 for a {t.estimand} (0.05 means 5 percentage points), got {t.margin!r}")
        t.margin = None
    t.assurance = _num(c, target, "target", "assurance", DEFAULT_ASSURANCE, low=0, high=1, low_open=True, high_open=True)
    t.tolerance = _num(c, target, "target", "coverage_tolerance", DEFAULT_COVERAGE_TOLERANCE, low=0, high=0.5, high_open=True)
    if t.tolerance is not None and t.confidence is not None and t.tolerance >= t.confidence:
        c.add("target.coverage_tolerance", f"must be below target.confidence ({t.confidence:g}), got {t.tolerance!r}")
        t.tolerance = None
    t.event_values, t.event_above = _event(c, target, t.estimand)
    t.window = _num(c, target, "target", "window", 1.25, low=1, high=4)
    t.dropout = _num(c, target, "target", "dropout", 0.0, low=0, high=1, high_open=True)
    t.quantile = _num(c, target, "target", "quantile", None, low=0, high=1, low_open=True, high_open=True)
    t.exposure = _num(c, target, "target", "exposure", None, low=0, low_open=True)
    return t


def _data(c: Collector, table: dict[str, Any], tgt: _Target, files: _Files, from_file: bool, notices: list[str]):
    """The model, group b's model and the strata of the [data] (or [[strata]]) tables.

    With ``from_file`` (population.file supplies the values) there is no model
    yet: it comes from the file once [population] is read.
    """
    data, estimand = table.get("data"), tgt.estimand
    if "allocation" in table and "strata" not in table:
        c.add("allocation", "only with [[strata]] tables")
    if "strata" in table:
        model, strata = _strata_model(c, table, files, tgt.event_values, tgt.event_above)
        if data is not None:
            c.add("data", "not used with [[strata]]: give each stratum its model in [strata.data]")
        return model, None, strata
    if from_file:
        if data and "events" in table.get("population", {}):
            c.add("data", "not used with population.events (the population is 0/1 with that many events); remove [data]")
        elif data:
            notices.append("notice: [data] is not used: population.file supplies the values")
        return None, None, None
    if data is None:
        c.add("data", "missing: a [data] table with model = \"...\" (two-sample: [data.a] and [data.b])")
        return None, None, None
    if _is_model(data) and estimand not in TWO_GROUP_DATA:  # a model object, from Python
        return _model(c, data, "data", files), None, None
    if not isinstance(data, dict):
        c.add("data", f"must be a table, got {shown(data)}")
        return None, None, None
    if estimand in TWO_GROUP_DATA or (estimand is None and data and set(data) <= {"a", "b"}):
        # (an invalid estimand is already reported; still check both groups' models)
        if "model" in data:
            c.add("data", f"estimand {estimand!r} compares two groups: put their models in [data.a] and [data.b]")
            return None, None, None
        if "correlation" in data:
            tgt.correlation = _num(c, data, "data", "correlation", None, low=-1, high=1, low_open=True, high_open=True)
        for k in data:
            if k not in ("a", "b", "correlation"):
                near = difflib.get_close_matches(str(k), ["a", "b"], n=1, cutoff=0.5)
                hint = f"did you mean 'data.{near[0]}'?" if near else "two-sample data has only [data.a] and [data.b]"
                c.add(f"data.{k}", f"unknown key; {hint}")
        return _group(c, data, "a", files), _group(c, data, "b", files), None
    if data and "model" not in data and set(data) <= {"a", "b"}:
        what = f"estimand {estimand!r} is one-sample" if estimand else "a one-sample estimand"
        c.add("data", f"{what}: give one model in [data]; [data.a] and [data.b] are for mean-diff or proportion-diff")
        return None, None, None
    return _model(c, data, "data", files), None, None


def _simulation(c: Collector, sim: dict[str, Any], estimand: str | None, dropout: float | None = 0.0) -> _Simulation:
    ratio = _num(c, sim, "simulation", "ratio", DEFAULT_RATIO, low=0, high=RATIO_MAX, low_open=True)
    out = _Simulation(
        replicates=_num(c, sim, "simulation", "replicates", DEFAULT_REPLICATES, low=REPLICATES_MIN, high=REPLICATES_MAX, integer=True),
        seed=_seed(c, sim),
        n_min=_num(c, sim, "simulation", "n_min", DEFAULT_N_MIN, low=2, high=N_LIMIT - 1, integer=True),
        n_max=_num(c, sim, "simulation", "n_max", None, low=3, high=N_LIMIT, integer=True),
        n_max_given="n_max" in sim,
        ratio=ratio,
        budget=_num(c, sim, "simulation", "budget", None, low=BUDGET_MIN, high=BUDGET_MAX, integer=True),
        path=_choice(c, sim, "simulation", "path", PATHS, default=DEFAULT_PATH),
    )
    if ratio is not None and ratio != 1.0 and estimand is not None and estimand not in TWO_SAMPLE:
        c.add("simulation.ratio", f"only for two-sample estimands ({', '.join(TWO_SAMPLE)}); estimand is {estimand!r}, got {shown(ratio)}")
    out.random_dropout = _random_dropout(c, sim, estimand, dropout)
    return out


def _random_dropout(c: Collector, sim: dict[str, Any], estimand: str | None, dropout: float | None) -> bool:
    random_dropout = sim.get("random_dropout", False)
    if not isinstance(random_dropout, bool):
        c.add("simulation.random_dropout", f"must be true or false, got {shown(random_dropout)}")
        return False
    if random_dropout and not dropout:
        c.add("simulation.random_dropout", "needs target.dropout > 0 (the share lost after enrolment)")
    elif random_dropout and estimand in TWO_SAMPLE:
        c.add("simulation.random_dropout", "is for one-sample estimands only")
    return random_dropout


def _n_range(c: Collector, sim: _Simulation, population, clusters) -> int | None:
    """simulation.n_max after its default (the population bounds n when units are sampled without replacement)."""
    n_min, n_max = sim.n_min, sim.n_max
    if n_max is None and not sim.n_max_given:
        n_max = DEFAULT_N_MAX
        if population is not None and clusters is None:
            n_max = min(n_max, population.size)
    if population is not None and clusters is None and n_max is not None and sim.n_max_given and n_max > population.size:
        c.add("simulation.n_max", f"must be <= population.size ({population.size}) when sampling without replacement, got {n_max}")
        n_max = None
    if clusters is not None and clusters.count is not None and n_max is not None:
        # n counts clusters drawn without replacement from clusters.count
        if sim.n_max_given and n_max > clusters.count:
            c.add("simulation.n_max", f"must be <= clusters.count ({clusters.count}) when clusters are drawn without replacement, got {n_max}")
            n_max = None
        elif not sim.n_max_given:
            n_max = min(n_max, clusters.count)
    if n_min is not None and n_max is not None and n_max <= n_min:
        default = "" if sim.n_max_given else " (the default)"
        c.add("simulation.n_max", f"must be > simulation.n_min ({n_min}), got {n_max}{default}")
    return n_max


def _strata_n_min(c: Collector, sim: _Simulation, strata, sim_t: dict[str, Any]) -> None:
    """A stratified sample has at least allocation.minimum units in every stratum: n_min follows."""
    if strata is None or sim.n_min is None:
        return
    try:
        low = int(sum(min(int(strata.minimum), int(N)) for N in strata.sizes))
    except (TypeError, ValueError):
        return  # the sizes or the minimum are reported elsewhere
    if sim.n_min >= low:
        return
    if "n_min" in sim_t:
        c.add("simulation.n_min", f"must be >= {low} for {len(strata.sizes)} strata of at least "
              f"{strata.minimum} units each, got {sim.n_min}")
    else:
        sim.n_min = low


def _designs(c: Collector, tgt: _Target, model, model_b, methods: list[str], sim: _Simulation,
             resamples, clusters, population, strata, selection=None) -> tuple[Design | None, list[Design]]:
    """The combination: Design's constructor is the one check of model / estimand / method."""
    try:
        design = Design(
            model=model,
            estimand=tgt.estimand,
            method=methods[0],
            confidence=tgt.confidence,
            margin=tgt.margin,
            model_b=model_b,
            ratio=sim.ratio,
            resamples=resamples,
            clusters=clusters,
            population=population,
            strata=strata,
            selection=selection,
            quantile=tgt.quantile,
            exposure=tgt.exposure,
            correlation=tgt.correlation,
            **_design_bound_args(tgt.bounds, tgt.assurance),
        )
    except InputError as e:
        _extend_design(c, e, tgt.estimand)
        return None, []
    designs = [design]
    for m in methods[1:]:
        try:
            designs.append(design.with_method(m))
        except InputError as e:
            _extend_design(c, e, tgt.estimand)
    _check_engine(c, designs, sim.path)
    return design, designs


def _population_model(c: Collector, population: PopulationSpec, estimand: str | None):
    """The data model standing for the values of population.file (mean, Cochran's S; 0/1: bernoulli).

    The engine samples the file's values themselves; this model only gives the
    design its estimand checks and the closed-form n its planning values.
    """
    from simcheck.models import make_model
    from simcheck.models.population import read_population

    if population.events is not None:
        # planning value of the closed form (kept inside (0, 1)); the engine uses the fixed count itself
        p = min(max(population.events / population.size, 1e-9), 1 - 1e-9)
        return make_model({"model": "bernoulli", "p": p})
    try:
        fp = read_population(population.file, population.column, population.size)
    except InputError as e:
        c.extend(e)
        return None
    if estimand == "proportion" and not fp.zero_one:
        c.add("population.file", f"a proportion estimand needs 0/1 values in column {population.column!r}")
        return None
    if fp.zero_one:
        return make_model({"model": "bernoulli", "p": fp.mean})
    if not fp.S > 0:
        c.add("population.file", "all values are equal: there is nothing to estimate")
        return None
    return make_model({"model": "normal", "mean": fp.mean, "sd": fp.S})


def _notices(extra: list[str], designs: list[Design]) -> tuple[str, ...]:
    from simcheck.engine.measures import plausibility_notes

    out = list(extra)
    for d in designs:
        out += [t for t in plausibility_notes(d) if t not in out]
    return tuple(out)
# --- validation helpers -------------------------------------------------------
def _unknown_keys(c: Collector, table: dict[str, Any]) -> None:
    for k in table:
        if k not in _TOP:
            c.add(str(k), f"unknown key; {_suggest(str(k), '', _TOP)}")
    for t, keys in _TABLES.items():
        sub = table.get(t)
        if isinstance(sub, dict):
            for k in sub:
                if k not in keys:
                    c.add(f"{t}.{k}", f"unknown key; {_suggest(str(k), t, keys)}")


def _suggest(leaf: str, table: str, keys: tuple[str, ...]) -> str:
    # a key written under the wrong table header (TOML keys belong to the last header above them)
    if leaf in _TOP and table:
        return f"did you mean the top-level {leaf!r}? (top-level keys go before the first [table])"
    near = difflib.get_close_matches(leaf, list(keys), n=1, cutoff=0.6)
    if near:
        return f"did you mean {_join(table, near[0])!r}?"
    elsewhere = [k for k in KNOWN_KEYS if k.rsplit(".", 1)[-1] == leaf and k != _join(table, leaf)]
    if elsewhere:
        return f"did you mean {elsewhere[0]!r}?"
    near = difflib.get_close_matches(_join(table, leaf), _FIXED_KEYS, n=1, cutoff=0.6)
    if near:
        return f"did you mean {near[0]!r}?"
    return f"known keys here: {', '.join(keys)}"


def _join(table: str, leaf: str) -> str:
    return f"{table}.{leaf}" if table else leaf


def _no_nan(c: Collector, value: Any, name: str) -> None:
    # NaN is never a meaningful input; the typed checks below refuse infinities
    # where they make no sense, and models decide for their own parameters.
    if isinstance(value, dict):
        for k, v in value.items():
            _no_nan(c, v, _join(name, str(k)))
    elif isinstance(value, list):
        for i, v in enumerate(value):
            _no_nan(c, v, f"{name}[{i}]")
    elif isinstance(value, float) and math.isnan(value):
        c.add(name, "must be a finite number, got nan")


def _table(c: Collector, table: dict[str, Any], name: str, *, required: bool) -> dict[str, Any] | None:
    v = table.get(name)
    if v is None:
        if required:
            keys = ", ".join(k for k in _TABLES[name])
            c.add(name, f"missing: a [{name}] table is required ({keys})")
        return None
    if not isinstance(v, dict):
        c.add(name, f"must be a table ([{name}]), got {shown(v)}")
        return None
    return v


def _is_nan(v: Any) -> bool:
    return isinstance(v, float) and math.isnan(v)


def _num(
    c: Collector,
    tbl: dict[str, Any],
    prefix: str,
    key: str,
    default: Any,
    *,
    required: bool = False,
    what: str | None = None,
    **limits: Any,
) -> Any:
    name = f"{prefix}.{key}"
    if key not in tbl:
        if required:
            c.add(name, f"missing (required: {what or KNOWN_KEYS.get(name, 'a number')})")
        return default
    v = tbl[key]
    if _is_nan(v):  # already reported by _no_nan
        return None
    return c.number(name, v, **limits)


def _choice(
    c: Collector,
    tbl: dict[str, Any],
    prefix: str,
    key: str,
    choices: tuple[str, ...],
    *,
    required: bool = False,
    default: str | None = None,
) -> str | None:
    name = f"{prefix}.{key}"
    if key not in tbl:
        if required:
            c.add(name, f"missing (required: one of {', '.join(choices)})")
        return default
    v = tbl[key]
    if not isinstance(v, str):
        c.add(name, f"must be one of {', '.join(choices)} (text), got {shown(v)}")
        return None
    if v not in choices:
        near = difflib.get_close_matches(v, list(choices), n=1, cutoff=0.5)
        hint = f"did you mean {near[0]!r}? " if near else ""
        c.add(name, f"unknown value {v!r}; {hint}choose one of {', '.join(choices)}")
        return None
    return v


def _bound_keys(c: Collector, target: dict[str, Any], estimand: str | None) -> dict[str, Any]:
    """target.bound, relative_margin, units, limit and events_allowed (one-sided
    limits, relative precision, demonstration plans)."""
    from simcheck.design import BOUNDS

    out: dict[str, Any] = {}
    out["bound"] = _choice(c, target, "target", "bound", BOUNDS, default="two-sided")
    out["relative_margin"] = _num(c, target, "target", "relative_margin", None, low=0, low_open=True)
    if "relative_margin" in target and "margin" in target:
        c.add("target.relative_margin", "give target.margin or target.relative_margin, not both")
        out["relative_margin"] = None
    units = target.get("units")
    if units is not None and (not isinstance(units, str) or not units.strip()):
        c.add("target.units", f"must be a non-empty text such as \"mg/L\", got {units!r}")
        units = None
    out["units"] = units
    out["limit"] = _num(c, target, "target", "limit", None, low=0, high=1, low_open=True, high_open=True)
    out["events_allowed"] = _num(c, target, "target", "events_allowed", None, low=0, high=10**6, integer=True)
    if "limit" in target and "bound" not in target:
        out["bound"] = "upper"  # a demonstration plan is an upper limit
    out["optional_margin"] = "relative_margin" in target or "limit" in target
    return out


def _design_bound_args(b: dict[str, Any], assurance: float | None) -> dict[str, Any]:
    args: dict[str, Any] = {k: b[k] for k in ("relative_margin", "units", "limit", "events_allowed") if b.get(k) is not None}
    if b.get("bound"):
        args["bound"] = b["bound"]
    if b.get("limit") is not None and b.get("events_allowed") is None:
        args["events_allowed"] = 0
    if assurance is not None:
        args["assurance"] = assurance
    return args


def _event(c: Collector, target: dict[str, Any], estimand: str | None):
    has_v, has_a = "event_values" in target, "event_above" in target
    if not (has_v or has_a):
        return None, None
    if estimand is not None and estimand not in ("proportion", "proportion-diff"):
        key = "target.event_values" if has_v else "target.event_above"
        c.add(key, f"only for proportion estimands (proportion, proportion-diff); estimand is {estimand!r}")
        return None, None
    if has_v and has_a:
        c.add("target.event_above", "give event_values or event_above, not both")
        return None, None
    if has_a:
        a = target["event_above"]
        if _is_nan(a):
            return None, None
        return None, c.number("target.event_above", a)
    vals = target["event_values"]
    if isinstance(vals, bool) or not isinstance(vals, list):
        c.add("target.event_values", f"must be a list of numbers such as [6, 7], got {shown(vals)}")
        return None, None
    if not vals:
        c.add("target.event_values", "must list at least one value, got []")
        return None, None
    out = []
    for i, v in enumerate(vals):
        if _is_nan(v):
            return None, None
        x = c.number(f"target.event_values[{i}]", v)
        if x is None:
            return None, None
        out.append(float(x))
    return out, None


def _is_model(v: Any) -> bool:
    from simcheck.models import Model

    return isinstance(v, Model)


def _model(c: Collector, tbl: Any, prefix: str, files: _Files):
    from simcheck.models import make_model

    if not isinstance(tbl, dict) and not _is_model(tbl):
        c.add(prefix, f"must be a model table (model = \"...\" and its parameters), got {shown(tbl)}")
        return None
    try:
        return make_model(tbl, base_dir=files.base_dir, allow_outside_files=files.allow_outside)
    except InputError as e:
        c.extend(e.prefixed(prefix))
        return None


def _strata_model(c: Collector, table: dict[str, Any], files: _Files, values, above):
    """The strata and the population's model (their mixture, weighted by stratum size)."""
    from simcheck.models import make_model

    def wrap(m):
        return _wrap_event(c, m, values, above) if (values is not None or above is not None) else m

    strata = read_strata(c, table, files.base_dir, wrap, allow_outside_files=files.allow_outside)
    if strata is None:
        return None, None
    sizes = strata.sizes
    if not all(isinstance(v, (int, float)) and not isinstance(v, bool) and v > 0 for v in sizes):
        return None, strata  # Design reports the sizes
    total = float(sum(sizes))
    try:
        mix = make_model({"model": "mixture", "weights": [v / total for v in sizes],
                          "components": [t["data"] for t in table["strata"]]},
                         base_dir=files.base_dir, allow_outside_files=files.allow_outside)
    except InputError as e:
        c.extend(e.prefixed("strata"))
        return None, strata
    return wrap(mix), strata


def _group(c: Collector, data: dict[str, Any], g: str, files: _Files):
    if g not in data:
        c.add(f"data.{g}", f"missing: a two-sample or paired estimand needs [data.a] and [data.b]; [data.{g}] is not given")
        return None
    return _model(c, data[g], f"data.{g}", files)


def _wrap_event(c: Collector, model, values, above):
    from simcheck.models.composite import EventModel

    try:
        return EventModel(model, values=values, above=above)
    except InputError as e:
        for p in e.problems:
            c.add(f"target.{p.field}" if p.field else "target", p.message)
        return None


def _methods(c: Collector, method: dict[str, Any], estimand: str | None, stratified: bool = False) -> list[str]:
    from simcheck.intervals import REGISTRY, methods_for

    if "interval" not in method:
        known = f"; for {estimand!r} choose from {', '.join(methods_for(estimand))}" if estimand else ""
        c.add("method.interval", f"missing (required: an interval method name or a list of names{known})")
        return []
    v = method["interval"]
    names = [v] if isinstance(v, str) else v
    if not isinstance(names, list) or not names:
        c.add("method.interval", f"must be a method name or a non-empty list of names, got {shown(v)}")
        return []
    out: list[str] = []
    for i, m in enumerate(names):
        name = "method.interval" if isinstance(v, str) else f"method.interval[{i}]"
        if not isinstance(m, str):
            c.add(name, f"must be a method name (text), got {shown(m)}")
            continue
        if m in out:
            c.add(name, f"{m!r} is listed twice")
            continue
        if stratified and estimand in STRATIFIED_METHODS:
            if m not in STRATIFIED_METHODS[estimand]:
                c.add(name, f"stratified {estimand} intervals: {', '.join(STRATIFIED_METHODS[estimand])}; got {m!r}")
                continue
        elif estimand is not None and (estimand, m) not in REGISTRY:
            known = methods_for(estimand)
            near = difflib.get_close_matches(m, known, n=1, cutoff=0.5)
            hint = f"did you mean {near[0]!r}? " if near else ""
            others = sorted(e for (e, n) in REGISTRY if n == m)
            where = f"{m!r} is for {', '.join(others)}; " if others else ""
            c.add(name, f"unknown interval {m!r} for estimand {estimand!r}; {where}{hint}choose one of {', '.join(known)}")
            continue
        out.append(m)
    return out if len(out) == len(names) else []


def _seed(c: Collector, sim: dict[str, Any]) -> int | None:
    if "seed" not in sim:
        return None
    v = sim["seed"]
    # a float seed would silently lose digits above 2**53
    if isinstance(v, bool) or not isinstance(v, Integral):
        c.add("simulation.seed", f"must be a whole number (integer) in [0, {SEED_MAX}], got {shown(v)}")
        return None
    if not 0 <= int(v) <= SEED_MAX:
        c.add("simulation.seed", f"must be in [0, {SEED_MAX}], got {shown(v)}")
        return None
    return int(v)


def _clusters(c: Collector, t: dict[str, Any]) -> ClusterSpec | None:
    n0 = len(c.problems)
    icc = _num(c, t, "clusters", "icc", None, required=True, low=0, high=1, high_open=True)
    size = size_mean = size_cv = None
    if "size" in t:
        if "size_mean" in t or "size_cv" in t:
            c.add("clusters.size", "give size (equal clusters) or size_mean and size_cv (varying sizes), not both")
        else:
            size = _num(c, t, "clusters", "size", None, low=1, high=CLUSTER_SIZE_MAX, integer=True)
    elif "size_mean" in t:
        size_mean = _num(c, t, "clusters", "size_mean", None, low=1, high=CLUSTER_SIZE_MAX)
        size_cv = _num(c, t, "clusters", "size_cv", None, required=True, low=0,
                       what="coefficient of variation of the cluster sizes, >= 0")
    elif "size_cv" in t:
        c.add("clusters.size_mean", "missing: size_cv needs size_mean (the mean cluster size)")
    else:
        c.add("clusters.size", "missing (required: size, or size_mean and size_cv)")
    effect = _choice(c, t, "clusters", "effect", CLUSTER_EFFECTS, default="normal")
    count = _num(c, t, "clusters", "count", None, low=2, high=CLUSTER_COUNT_MAX, integer=True) if "count" in t else None
    if len(c.problems) > n0:
        return None
    return ClusterSpec(icc=icc, size=size, size_mean=size_mean, size_cv=size_cv, effect=effect, count=count)


def _population(c: Collector, t: dict[str, Any], files: _Files) -> PopulationSpec | None:
    n0 = len(c.problems)
    size = _num(c, t, "population", "size", None, low=2, high=POPULATION_MAX, integer=True)
    fpc = t.get("fpc", True)
    if not isinstance(fpc, bool):
        c.add("population.fpc", f"must be true or false, got {shown(fpc)}")
    file = column = resolved = None
    if "file" in t:
        file = t["file"]
        if not isinstance(file, str) or not file.strip():
            c.add("population.file", f"must be a file name (text), got {shown(file)}")
            file = None
        column = t.get("column")
        if column is None:
            c.add("population.column", "missing (required with population.file: the column holding the values)")
        elif not isinstance(column, str) or not column.strip():
            c.add("population.column", f"must be a column name (text), got {shown(column)}")
            column = None
        if file is not None and column is not None:
            resolved, rows = _population_file(c, file, column, files)
            if rows is not None:
                if "size" not in t:
                    size = rows
                elif size is not None and size != rows:
                    c.add("population.size", f"must match the {rows} values in population.file, got {size}")
    elif "column" in t:
        c.add("population.column", "only with population.file")
    values = None
    if "values" in t:
        values, size = _population_values(c, t, size)
    if "size" not in t and "file" not in t and "values" not in t:
        c.add("population.size", "missing (required: the number of units in the population)")
    events = _population_events(c, t, size)
    if len(c.problems) > n0 or size is None:
        return None
    return PopulationSpec(size=size, fpc=fpc, file=resolved, column=column, values=values, events=events)


def _population_events(c: Collector, t: dict[str, Any], size: int | None) -> int | None:
    if "events" not in t:
        return None
    if "file" in t or "values" in t:
        c.add("population.events", "give population.events (a 0/1 population with that many events) or population.file / values, not both")
        return None
    events = _num(c, t, "population", "events", None, low=0, integer=True)
    if events is not None and size is not None and events > size:
        c.add("population.events", f"must be <= population.size ({size}), got {events}")
        return None
    return events


def _population_values(c: Collector, t: dict[str, Any], size: int | None) -> tuple[tuple[float, ...] | None, int | None]:
    from simcheck.models.population import value_array

    if "file" in t:
        c.add("population.values", "give values or file and column, not both")
        return None, size
    arr = value_array(c, "population.values", t["values"])
    if arr is None:
        return None, size
    if arr.size > POPULATION_MAX:
        c.add("population.values", f"holds {arr.size} values; at most {POPULATION_MAX}")
        return None, size
    if "size" in t and size is not None and size != arr.size:
        c.add("population.size", f"must match the {arr.size} values in population.values, got {size}")
        return None, size
    return tuple(arr.tolist()), int(arr.size)


def _population_file(c: Collector, file: str, column: str, files: _Files):
    """The resolved path and the number of values of population.file, or (None, None) after a problem."""
    try:
        p = resolve_data_path(file, files.base_dir, field="population.file", allow_outside=files.allow_outside)
        regular_file(p, field="population.file", what="data file")
        values, _ = read_csv_column(p, column, file_field="population.file", column_field="population.column", name=file)
    except InputError as e:
        for prob in e.problems:
            # regular_file's problems do not name the file: say which one
            msg = prob.message if file in prob.message else f"{_shown_name(file)}: {prob.message}"
            c.add(prob.field, msg)
        return None, None
    if values.size < 2:
        c.add("population.file", f"{file} column {column!r} needs at least 2 values, got {values.size}")
        return None, None
    return str(p.resolve()), int(values.size)


def _shown_name(file: str) -> str:
    return file if len(file) <= 80 else file[:60] + "..."


def _extend_design(c: Collector, e: InputError, estimand: str | None) -> None:
    for p in e.problems:
        f = p.field
        # Design calls group a "data"; in a two-sample file it is [data.a]
        if estimand in TWO_SAMPLE and (f == "data" or f.startswith("data.") and not f.startswith(("data.a", "data.b"))):
            f = "data.a" + f[4:]
        c.add(f, p.message)


def _check_engine(c: Collector, designs: list[Design], path: str) -> None:
    # What the engine would refuse at run time is refused here, at load time:
    # the computation path, and the rules of clustered / finite-population designs.
    from simcheck.engine import available_paths
    from simcheck.intervals import get_method

    for d in designs:
        if d.selection is not None:
            if path != "auto" and path not in available_paths(d):
                c.add("simulation.path", f"{path!r} is not available for this selection design; available: auto, "
                      f"{', '.join(available_paths(d))}")
            continue  # Design checked the rest
        if d.one_sided:
            from simcheck.engine import kind_for, onesided

            try:
                onesided.evaluation_design(d, simple_kind=kind_for(d).name == "simple")
            except InputError as e:
                c.extend(e)
                continue
        if d.clusters is not None or d.population is not None:
            from simcheck.engine import clustered as engine_clustered

            try:
                engine_clustered.validate_design(d, get_method(d.estimand, d.method), [], path)
            except InputError as e:
                c.extend(e)
            continue
        if path == "auto":
            continue
        try:
            ok = available_paths(d)
        except InputError as e:
            c.extend(e)
            continue
        if path not in ok:
            c.add("simulation.path", f"{path!r} is not available for interval {d.method!r} with this model; available: auto, {', '.join(ok)}")


def _dedupe(c: Collector) -> None:
    seen: set[tuple[str, str]] = set()
    out = []
    for p in c.problems:
        if (p.field, p.message) not in seen:
            seen.add((p.field, p.message))
            out.append(p)
    c.problems[:] = out


def _json_safe(v: Any) -> Any:
    if isinstance(v, dict):
        return {str(k): _json_safe(x) for k, x in v.items()}
    if isinstance(v, (list, tuple)):
        return [_json_safe(x) for x in v]
    if isinstance(v, (_dt.date, _dt.time, _dt.datetime)):
        return v.isoformat()
    if _is_model(v):  # a model object given from Python: its table as far as it has one
        return _json_safe({"model": v.name, **v.params()})
    if hasattr(v, "tolist") and getattr(v, "ndim", 0) > 0:  # numpy array or pandas Series given from Python
        return [_json_safe(x) for x in v.tolist()]
    if hasattr(v, "item") and not isinstance(v, (str, bytes)):  # numpy scalar
        return v.item()
    return v


def _flatten(d: dict[str, Any], prefix: str, out: dict[str, Any]) -> None:
    for k, v in d.items():
        name = _join(prefix, k)
        if isinstance(v, dict):
            _flatten(v, name, out)
        else:
            out[name] = v
