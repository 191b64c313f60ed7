"""The answer when planning values are uncertain: conditional, unconditional and closed-form, side by side.

:func:`run_predictive` takes a scenario table in which some planning values
are distributions (:mod:`simcheck.uncertain`) and gives

- the *conditional* answer: the usual search at the point values, and the
  unconditional assurance that this n really has;
- the *unconditional* (predictive) answer: the smallest n whose coverage and
  assurance, averaged over the planning values' distributions, meet the
  targets;
- Browne's (1995) closed-form alternative where it applies (an SD from a
  pilot): the formula n with the SD at its upper one-sided confidence limit.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Callable

from simcheck import rng as rngmod
from simcheck.errors import Collector
from simcheck.uncertain import (PredictiveCheck, Uncertain, draw_values, point_designs, predictive_check, split,
                                upper_sd_limit)

DEFAULT_DRAWS = 400
DEFAULT_PILOT_CONFIDENCE = 0.8
CRITERION = "predictive-crossing"
CRITERION_TEXT = ("n_unconditional is the smallest n at which the estimated unconditional coverage and assurance "
                  "meet the targets, located by doubling and bisection with the same parameter draws and streams "
                  "at every n; the decision is clear when at n both measures exceed their targets by more than "
                  "2 MCSE and at n - 1 one of them falls short by more than 2 MCSE")


@dataclass(frozen=True)
class PredictiveResult:
    """Conditional and unconditional answers for a scenario with uncertain planning values."""

    title: str
    uncertain: tuple[Uncertain, ...]
    targets: dict[str, Any]
    n_conditional: int | None
    conditional: Any  # SearchResult at the point values
    unconditional_at_conditional_n: PredictiveCheck | None
    n_unconditional: int | None
    unconditional: PredictiveCheck | None
    unconditional_below: PredictiveCheck | None
    browne: dict[str, Any] | None
    seed: int
    draws: int
    replicates_per_draw: int
    notes: tuple[str, ...] = ()
    checked: dict[int, PredictiveCheck] = field(default_factory=dict, repr=False, compare=False)
    #: the design at the point values (for the conditional curve of a report)
    point_design: Any = field(default=None, repr=False, compare=False)
    path: str = "auto"
    dropout: float = 0.0

    def enrolled(self, n: int | None) -> int | None:
        """n to enrol for ``n`` analysed under ``target.dropout`` (n itself without dropout)."""
        from simcheck.formulas import enrolled_n

        return None if n is None else enrolled_n(n, self.dropout)

    @property
    def reached(self) -> bool:
        return self.n_unconditional is not None

    @property
    def decision(self) -> str:
        """"clear" when the Monte Carlo error cannot move n_unconditional, else "undecided"."""
        un, below = self.unconditional, self.unconditional_below
        if un is None:
            return "clear" if self.n_unconditional is None else "undecided"
        clear_above = all(z > 2 for z in _scores(un, self.targets))
        clear_below = below is None or any(z < -2 for z in _scores(below, self.targets))
        return "clear" if clear_above and clear_below else "undecided"

    def to_dict(self) -> dict[str, Any]:
        from simcheck.results import clean_json

        return clean_json({
            "title": self.title,
            "n_conditional": self.n_conditional,
            "n_unconditional": self.n_unconditional,
            "reached": self.reached,
            "decision": self.decision,
            "criterion": CRITERION,
            "criterion_text": CRITERION_TEXT,
            "dropout": self.dropout,
            "n_enrolled_conditional": self.enrolled(self.n_conditional),
            "n_enrolled_unconditional": self.enrolled(self.n_unconditional),
            "assurance_conditional_n": _get(self.unconditional_at_conditional_n, "assurance"),
            "conditional": None if self.conditional is None else self.conditional.to_dict(),
            "unconditional_at_conditional_n": _dict(self.unconditional_at_conditional_n),
            "unconditional": _dict(self.unconditional),
            "unconditional_below": _dict(self.unconditional_below),
            "browne": self.browne,
            "uncertain": [u.to_dict() for u in self.uncertain],
            "targets": self.targets,
            "seed": self.seed,
            "draws": self.draws,
            "replicates_per_draw": self.replicates_per_draw,
            "notes": list(self.notes),
        })

    def to_frame(self):
        import pandas as pd

        rows = [{"n": k, **v.to_dict()} for k, v in sorted(self.checked.items())]
        return pd.DataFrame(rows)


def _scores(r: PredictiveCheck, targets: dict[str, Any]) -> list[float]:
    """(measure - target) / MCSE for coverage and assurance (+-inf when the MCSE is 0)."""
    out = []
    for value, se, target in ((r.coverage, r.coverage_mcse, targets["coverage"]),
                              (r.assurance, r.assurance_mcse, targets["assurance"])):
        if value is None:
            continue
        diff = value - target
        out.append(diff / se if se and se > 1e-12 else (math.inf if diff >= 0 else -math.inf))
    return out


def _get(obj, name):
    return None if obj is None else getattr(obj, name)


def _dict(obj):
    return None if obj is None else obj.to_dict()


def _passes(r: PredictiveCheck, cov_target: float, ass_target: float) -> bool:
    return r.coverage >= cov_target and (r.assurance is None or r.assurance >= ass_target)


def find_predictive_n(evaluate: Callable[[int], PredictiveCheck], passes: Callable[[PredictiveCheck], bool],
                      start: int, n_min: int, n_max: int) -> int | None:
    """Smallest n in [n_min, n_max] at which ``passes`` holds, by doubling then bisection.

    ``evaluate`` uses the same parameter draws and streams at every n, so the
    measures are smooth in n and the crossing is well defined.
    """
    n = min(max(start, n_min), n_max)
    if passes(evaluate(n)):
        hi = n
        lo = n_min - 1
        while hi > n_min:  # halve down until a failing n brackets the crossing
            m = max(n_min, hi // 2)
            if passes(evaluate(m)):
                hi = m
                if m == n_min:
                    return n_min
            else:
                lo = m
                break
        if lo < n_min:
            return hi
    else:
        lo = n
        hi = None
        while hi is None:
            if lo >= n_max:
                return None
            m = min(n_max, lo * 2)
            if passes(evaluate(m)):
                hi = m
            else:
                lo = m
    while hi - lo > 1:
        m = (lo + hi) // 2
        if passes(evaluate(m)):
            hi = m
        else:
            lo = m
    return hi


def browne_n(scenario, specs: tuple[Uncertain, ...], level: float) -> dict[str, Any] | None:
    """The formula n with each pilot SD at its upper ``level`` confidence limit (Browne 1995), or None."""
    from simcheck.formulas import sample_size

    d = scenario.design
    pilots = [u for u in specs if u.kind == "pilot"]
    if not pilots or len(pilots) != len(specs) or d.estimand not in ("mean", "mean-diff"):
        return None
    if d.clusters is not None or d.population is not None:
        return None
    upper = {u.key: upper_sd_limit(u.pilot_sd, u.pilot_n, level) for u in pilots}
    kw: dict[str, Any] = {}
    if d.estimand == "mean":
        kw["sd"] = upper.get("data.sd", d.model.sd)
    else:
        kw["sd"] = upper.get("data.a.sd", d.model.sd)
        kw["sd_b"] = upper.get("data.b.sd", d.model_b.sd)
        kw["ratio"] = d.ratio
    mult = "t" if d.method in ("t", "welch") else "z"
    res = sample_size(d.estimand, d.margin, confidence=d.confidence, multiplier=mult, **kw)
    at_point = {**kw, "sd": d.model.sd, **({"sd_b": d.model_b.sd} if "sd_b" in kw else {})}
    point = sample_size(d.estimand, d.margin, confidence=d.confidence, multiplier=mult, **at_point)
    return {
        "n": res.n, "n_b": res.n_b, "level": level, "sd_upper": upper, "multiplier": mult,
        "n_point": point.n,
        "text": (f"formula n with each pilot SD raised to its upper {level:g} one-sided confidence limit "
                 "(Browne 1995)"),
    }


def run_predictive(
    table: dict[str, Any],
    *,
    source: str | None = None,
    base_dir: str | None = None,
    draws: int | None = None,
    replicates: int | None = None,
    seed: int | None = None,
    pilot_confidence: float = DEFAULT_PILOT_CONFIDENCE,
    n: int | None = None,
) -> PredictiveResult:
    """Conditional, unconditional and closed-form answers for a scenario table.

    Parameters
    ----------
    table : dict
        A scenario table in which some ``[data]`` parameters may be
        distributions (see :mod:`simcheck.uncertain`).
    draws : int, optional
        Parameter draws (default 400).
    replicates : int, optional
        Replicates per point-value evaluation (default the scenario's); each
        draw gets ``ceil(replicates / draws)`` of them.
    seed : int, optional
        Root seed (default the scenario's, else fresh and reported).
    pilot_confidence : float
        Level of the upper confidence limit in Browne's method (default 0.8).
    n : int, optional
        Also evaluate this n (conditional and unconditional).

    References
    ----------
    Browne, R. H. (1995). On the use of a pilot sample for sample size
    determination. Statistics in Medicine 14, 1933-1940.
    O'Hagan, A., Stevens, J. W. and Campbell, M. J. (2005). Assurance in
    clinical trial design. Pharmaceutical Statistics 4, 187-201 (averaging
    over the uncertainty of the planning values).
    """
    from simcheck.scenario import scenario_from_dict
    from simcheck.tasks import resolve_seed

    point_table, specs = split(table, source)
    scenario = scenario_from_dict(point_table, source=source, base_dir=base_dir)
    k, reps, level = _arguments(scenario, specs, draws, replicates, pilot_confidence, n)
    used_seed, fresh = resolve_seed(scenario, seed)
    root, _ = rngmod.root_sequence(used_seed)
    per_draw = max(1, math.ceil(reps / k))
    values = draw_values(specs, k, root)
    designs = point_designs(point_table, specs, values, source=source, base_dir=base_dir)
    evaluate, cache = _evaluator(designs, per_draw, root, scenario.path)
    cov_target = scenario.design.confidence - scenario.coverage_tolerance
    targets = {"confidence": scenario.design.confidence, "coverage_tolerance": scenario.coverage_tolerance,
               "coverage": cov_target, "assurance": scenario.assurance, "margin": scenario.design.margin}
    cond = _conditional_search(scenario, used_seed)
    n_cond = cond.n
    at_cond = evaluate(n_cond) if n_cond is not None else None
    start = n_cond or scenario.n_min
    n_unc = find_predictive_n(evaluate, lambda r: _passes(r, cov_target, scenario.assurance),
                              start, scenario.n_min, scenario.n_max)
    if n_unc is not None and n_unc - 1 >= scenario.n_min:
        evaluate(n_unc - 1)  # the neighbour below, for the decision status
    if n is not None:
        evaluate(n)
    notes = _notes(specs, used_seed if fresh else None)
    notes.append(_method_note(scenario))
    return PredictiveResult(
        title=scenario.title, uncertain=specs, targets=targets, n_conditional=n_cond, conditional=cond,
        unconditional_at_conditional_n=at_cond, n_unconditional=n_unc,
        unconditional=None if n_unc is None else cache[n_unc],
        unconditional_below=cache.get(n_unc - 1) if n_unc is not None and n_unc - 1 >= scenario.n_min
        and (n_unc - 1) in cache else None,
        browne=browne_n(scenario, specs, level), seed=used_seed, draws=k, replicates_per_draw=per_draw,
        notes=tuple(notes), checked=dict(cache), point_design=scenario.design, path=scenario.path,
        dropout=scenario.dropout,
    )


def _evaluator(designs, per_draw: int, root, path: str):
    """``evaluate(n)``, the predictive check at n computed once, and the cache of checks by n."""
    cache: dict[int, PredictiveCheck] = {}

    def evaluate(m: int) -> PredictiveCheck:
        if m not in cache:
            cache[m] = predictive_check(designs, m, replicates_per_draw=per_draw, root=root, path=path)
        return cache[m]

    return evaluate, cache


def _conditional_search(scenario, seed: int):
    """The usual search at the point values, with the scenario's (first) method."""
    from simcheck.tasks import run_task

    cond = run_task(scenario, "search", seed=seed, method=scenario.design.method)
    if hasattr(cond, "by_method"):  # a comparison object, should the search return one for one method
        cond = cond.by_method[0]
    return cond


def _method_note(scenario) -> str:
    return (f"interval method: {scenario.design.method}"
            + (f" (the first of {', '.join(scenario.methods)}; the others are not evaluated)"
               if len(scenario.methods) > 1 else ""))


def _arguments(scenario, specs, draws, replicates, pilot_confidence, n) -> tuple[int, int, float]:
    """Draws, replicates and the Browne level, checked together (one InputError with every problem)."""
    c = Collector()
    if not specs:
        c.add("data", "no planning value is given as a distribution, e.g. sd = { pilot_n = 20, pilot_sd = 12 }")
    k = DEFAULT_DRAWS if draws is None else c.number("--draws", draws, low=20, high=10**6, integer=True)
    reps = scenario.replicates if replicates is None else c.number("--replicates", replicates, low=100, integer=True)
    level = c.number("--pilot-confidence", pilot_confidence, low=0, high=1, low_open=True, high_open=True)
    if n is not None:
        c.number("--n", n, low=2, high=scenario.n_max, integer=True)
    c.raise_if_any()
    return k, reps, level


def _notes(specs, fresh_seed: int | None) -> list[str]:
    notes = [
        "unconditional (predictive): coverage and assurance averaged over the planning values' distributions; "
        "each parameter draw is evaluated on its own block of replicates",
        "n_unconditional is where the estimated measures cross the targets, with the same parameter draws and "
        "streams at every n (common random numbers)",
        "results hold only under the assumed data model and the stated distributions of the planning values",
    ]
    if fresh_seed is not None:
        notes.append(f"no seed given: ran with seed {fresh_seed}")
    if any(u.kind == "bootstrap" for u in specs):
        notes.append("a model with pilot_n is drawn by parametric bootstrap: refitted to pilot_n values simulated "
                     "from the fitted model, the sampling law of the fit standing in for the uncertainty of its "
                     "parameters")
    if any(u.kind == "pilot" for u in specs):
        notes.append("a pilot SD is taken as sigma^2 = s^2 (m - 1) / chi2(m - 1): the pilot's sampling law of s^2 "
                     "turned round (reference prior 1 / sigma^2), assuming normal pilot data")
    return notes


def load_predictive(path: str | Path, **kwargs: Any) -> PredictiveResult:
    """:func:`run_predictive` on a scenario file."""
    from simcheck.scenario import read_table

    p = Path(path)
    table = read_table(p)  # its errors name the file
    return run_predictive(table, source=str(path), base_dir=str(p.resolve().parent), **kwargs)
