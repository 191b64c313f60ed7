"""The estimand registry: what an estimand beyond a mean and a proportion must say.

The four original estimands (mean, proportion and their differences) and the
total are built into the design, the engine and the formulas. Every further
estimand is an :class:`EstimandSpec` registered here; the rest of the program
asks the registry instead of naming the estimand:

* the :class:`~simcheck.design.Design` takes the true value, the extra
  validation and the kind of data (one sample, two independent groups, pairs)
  from the spec;
* the engine evaluates its methods through the ``raw`` method kind
  (:mod:`simcheck.engine.raw`): methods get the drawn values and return
  interval limits; a method may add an exact path;
* ``simcheck formula`` and the search's closed-form baseline call
  :attr:`EstimandSpec.formula` with the planning values the spec names;
* reports describe it with :attr:`EstimandSpec.label`.

A new estimand is one module in :mod:`simcheck.estimands` (its spec) plus
one in :mod:`simcheck.intervals` (its methods), and their tests.

This module imports nothing from the design or the engine: specs receive a
design object and read its attributes.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any, Callable

from simcheck.errors import Collector, InputError
from simcheck.formulas import N_LIMIT, FormulaResult, ceil_robust

#: kinds of data an estimand is computed from
DATA_KINDS = ("one", "two", "paired")
#: ``absolute``: the margin is a half-width in the estimand's units;
#: ``ratio``: the margin is a factor > 1 (the interval lies within estimate / f
#: and estimate * f), measured as exp of the half-width on the log scale
SCALES = ("absolute", "ratio")

#: planning values ``simcheck formula`` may pass to an estimand's formula,
#: with the help text of the matching command-line option
PLANNING_VALUES: dict[str, str] = {
    "sd": "planning standard deviation of the data (group a)",
    "sd_b": "planning standard deviation of group b",
    "p": "expected proportion of group a",
    "p_b": "expected proportion of group b",
    "ratio": "allocation ratio n_b / n_a",
    "kurtosis": "planning kurtosis of the data (3 for normal data)",
    "sd_log": "planning SD of the natural logs of the data (group a)",
    "sd_log_b": "planning SD of the natural logs of group b",
    "quantile": "the quantile estimated, in (0, 1) (0.5 = the median)",
    "density": "planning density of the data at the quantile",
    "rate": "planning event rate per unit of exposure (group a)",
    "rate_b": "planning event rate per unit of exposure (group b)",
    "exposure": "exposure per observation unit (person-years, litres, m^2), > 0",
    "dispersion": "over-dispersion k of negative-binomial counts (variance mu + mu^2 / k)",
    "correlation": "planning correlation",
}


@dataclass(frozen=True)
class EstimandSpec:
    """An estimand known to the registry.

    Attributes
    ----------
    name : str
        The key users write (``target.estimand``), lower-case words.
    label : str
        Words for tables, figures and the methods paragraph ("the median").
    data : {"one", "two", "paired"}
        One sample; two independent groups (``[data.a]``, ``[data.b]``,
        ``simulation.ratio``); or n pairs of two correlated measurements
        (``[data.a]``, ``[data.b]``, ``data.correlation``).
    true_value : callable
        ``true_value(design) -> float``, the estimand's value under the
        data model(s).
    scale : {"absolute", "ratio"}
        How the margin is read (see :data:`SCALES`).
    zero_one : bool
        The data must be 0/1 (risk ratio, odds ratio).
    counts : bool
        The data must be counts (whole numbers >= 0: rates).
    check : callable, optional
        ``check(design, collector)``: further rules, each problem added to
        the collector with the scenario key it concerns.
    formula : callable, optional
        ``formula(margin, confidence, **planning) -> FormulaResult``: the
        closed-form baseline; ``planning`` holds the values named in
        ``formula_inputs``.
    formula_inputs : tuple of str
        Names from :data:`PLANNING_VALUES` the formula takes; ``required``
        those it cannot do without.
    planning : callable, optional
        ``planning(design) -> dict``: the planning values of a design (the
        search's baseline).
    references : tuple of str
        Where the estimand's baseline comes from.
    params : tuple of str
        Design attributes it uses (``quantile``, ``exposure``,
        ``correlation``); the design refuses them for other estimands.
    notes : callable, optional
        ``notes(design) -> tuple of str``: sentences every result of the
        design carries (e.g. that ties in discrete data make an exact
        interval conservative).
    """

    name: str
    label: str
    data: str
    true_value: Callable[[Any], float]
    scale: str = "absolute"
    zero_one: bool = False
    counts: bool = False
    check: Callable[[Any, Collector], None] | None = field(default=None, repr=False)
    formula: Callable[..., Any] | None = field(default=None, repr=False)
    formula_inputs: tuple[str, ...] = ()
    required: tuple[str, ...] = ()
    planning: Callable[[Any], dict] | None = field(default=None, repr=False)
    references: tuple[str, ...] = ()
    #: design attributes the estimand uses: ``quantile``, ``exposure``, ``correlation``
    params: tuple[str, ...] = ()
    notes: Callable[[Any], tuple[str, ...]] | None = field(default=None, repr=False)

    def __post_init__(self) -> None:
        if self.data not in DATA_KINDS:
            raise ValueError(f"data must be one of {DATA_KINDS}, got {self.data!r}")
        if self.scale not in SCALES:
            raise ValueError(f"scale must be one of {SCALES}, got {self.scale!r}")
        unknown = [k for k in self.formula_inputs + self.required if k not in PLANNING_VALUES]
        if unknown:
            raise ValueError(f"unknown planning values {unknown}; add them to PLANNING_VALUES")

    @property
    def ratio_scale(self) -> bool:
        return self.scale == "ratio"


REGISTRY: dict[str, EstimandSpec] = {}


def register_estimand(spec: EstimandSpec) -> EstimandSpec:
    """Add ``spec`` to the registry (each name once)."""
    if spec.name in REGISTRY:
        raise ValueError(f"estimand {spec.name!r} is registered already")
    REGISTRY[spec.name] = spec
    return spec


def spec_for(name: str) -> EstimandSpec | None:
    """The registered spec of ``name``, or None for the built-in estimands."""
    return REGISTRY.get(name)


def formula_for(name: str, margin: float, confidence: float, planning: dict[str, Any], problems: Collector | None = None):
    """The closed-form baseline of a registered estimand, with its inputs checked.

    Raises
    ------
    InputError
        A required planning value is missing, or a value is not used by
        this estimand (field names are the ``simcheck formula`` options);
        with the problems already in ``problems``.
    """
    spec = REGISTRY[name]
    if spec.formula is None:
        raise InputError("--estimand", f"{name!r} has no closed-form sample size; use simcheck search")
    c = problems if problems is not None else Collector()
    given = {k: v for k, v in planning.items() if v is not None}
    for k in spec.required:
        if k not in given:
            c.add(_option(k), f"required for estimand {name!r} ({PLANNING_VALUES[k]})")
    for k in given:
        if k not in spec.formula_inputs:
            c.add(_option(k), f"is not used by estimand {name!r}; it takes {', '.join(_option(i) for i in spec.formula_inputs)}")
    c.raise_if_any()
    return spec.formula(margin, confidence, **given)


def _option(key: str) -> str:
    return "--" + key.replace("_", "-")


def z_two_sided(confidence: float) -> float:
    """The normal quantile z_{1 - alpha/2} of a two-sided interval."""
    from scipy import stats

    return float(stats.norm.ppf(0.5 + confidence / 2.0))


def check_finite_in(c: Collector, key: str, value: Any, low: float, high: float, *, low_open=True, high_open=True):
    """Add a problem unless ``value`` is a finite number in the stated range; return it as float or None."""
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(float(value)):
        c.add(key, f"must be a finite number, got {value!r}")
        return None
    v = float(value)
    lo_ok = v > low if low_open else v >= low
    hi_ok = v < high if high_open else v <= high
    if not (lo_ok and hi_ok):
        lb = "(" if low_open else "["
        hb = ")" if high_open else "]"
        c.add(key, f"must be in {lb}{low:g}, {high:g}{hb}, got {value!r}")
        return None
    return v


def formula_result(name: str, n_unrounded: float, margin: float, confidence: float, *, formula: str,
                   assumptions: tuple[str, ...], planning: dict[str, Any], ratio: float | None = None,
                   multiplier: float | None = None, minimum: int = 2):
    """A :class:`~simcheck.formulas.FormulaResult` for a registered estimand.

    ``n`` is ``n_unrounded`` rounded up (robustly) and at least ``minimum``;
    with ``ratio`` the estimand has two groups and ``n_b = ceil(ratio n)``.
    The planning values go into the result's ``planning`` (JSON) and the
    mean/proportion fields it shares with the built-in estimands.
    """
    if not (math.isfinite(n_unrounded) and n_unrounded <= N_LIMIT):
        raise InputError("--margin", f"gives n = {n_unrounded:.3g}, beyond any plausible sample size; check the units")
    n = max(int(ceil_robust(n_unrounded)), minimum)
    n_b = None if ratio is None else max(int(ceil_robust(ratio * n)), minimum)
    return EstimandFormula(
        estimand=name, n=n, n_b=n_b, n_unrounded=float(n_unrounded),
        multiplier=float(multiplier if multiplier is not None else z_two_sided(confidence)), multiplier_kind="z",
        design_effect=1.0, clusters=None, clusters_b=None, confidence=float(confidence), margin=float(margin),
        ratio=ratio, df=None, iterations=None, n_before_fpc=None, population_size=None, cluster_size=None,
        sd=planning.get("sd"), sd_b=planning.get("sd_b"), p=planning.get("p"), p_b=planning.get("p_b"),
        assumptions=tuple(assumptions) + (_planning_text(planning),), formula=formula, planning=dict(planning),
    )


@dataclass(frozen=True)
class EstimandFormula(FormulaResult):
    """A closed-form n of a registered estimand; ``planning`` holds the values it was computed from."""

    planning: dict = field(default_factory=dict)

    def to_dict(self) -> dict[str, Any]:
        d = super().to_dict()
        d["planning"] = {k: v for k, v in self.planning.items() if v is not None}
        return d


def _planning_text(planning: dict[str, Any]) -> str:
    return "planning values: " + ", ".join(f"{k} = {v:g}" for k, v in planning.items() if v is not None)
