"""The median and other quantiles of one sample.

``median`` is the quantile 0.5; ``quantile`` takes its level from
``target.quantile`` in (0, 1). The true value is the model's quantile
``law().ppf(q)`` (for discrete laws the smallest x with F(x) >= q).

Closed-form baseline: the sample q-quantile is asymptotically normal with
variance q (1 - q) / (n f(xi_q)^2), f the density at the true quantile
(Serfling 1980, sec. 2.3.3; David & Nagaraja 2003, sec. 10.2), so an interval
of half-width E needs

    n = z^2 q (1 - q) / (f^2 E^2).

The density comes from ``--density`` or, with ``--sd`` only, from normal
data: f = phi(z_q) / sd (said in the result). From a design it is the
model's density at its quantile; discrete models have none, and their
baseline assumes normal data with the model's SD.

Ties: with discrete data (counts, rounded values, pilot values resampled)
the order-statistic interval keeps at least its nominal coverage but is no
longer exact; every result of such a design says so.

References
----------
.. [1] Serfling, R. J. (1980). Approximation Theorems of Mathematical
   Statistics. Wiley, sec. 2.3.3 (asymptotic normality of the sample quantile;
   section from memory).
.. [2] David, H. A. & Nagaraja, H. N. (2003). Order Statistics, 3rd ed.
   Wiley, sec. 10.2 (from memory).
"""

from __future__ import annotations

import math

from scipy import stats

from simcheck.errors import Collector
from simcheck.estimands.base import EstimandSpec, check_finite_in, formula_result, register_estimand, z_two_sided
from simcheck.models.laws import has_ties, is_discrete_law, law_of

_REFS = ("Serfling (1980), Approximation Theorems of Mathematical Statistics, sec. 2.3.3 (from memory)",
         "David & Nagaraja (2003), Order Statistics, 3rd ed., sec. 10.2 (from memory)")

TIES_NOTE = ("the data are discrete (ties occur): the order-statistic interval keeps at least its nominal "
             "coverage but is no longer exact, and its coverage depends on the model")


def level(design) -> float:
    """The quantile a design estimates (0.5 for the median)."""
    return 0.5 if design.quantile is None else float(design.quantile)


def quantile_formula(margin: float, confidence: float, *, quantile: float = 0.5, density: float | None = None,
                     sd: float | None = None, name: str = "quantile"):
    """n for an interval of half-width ``margin`` for the q-quantile (large-sample variance of the sample quantile)."""
    c = Collector()
    check_finite_in(c, "--margin", margin, 0, float("inf"))
    check_finite_in(c, "--confidence", confidence, 0, 1)
    check_finite_in(c, "--quantile", quantile, 0, 1)
    if density is not None and sd is not None:
        c.add("--sd", "give --density or --sd (normal data), not both")
    elif density is None and sd is None:
        c.add("--density", f"required for estimand {name!r}: the density of the data at the quantile "
                           "(or --sd to assume normal data)")
    elif density is not None:
        check_finite_in(c, "--density", density, 0, float("inf"))
    else:
        check_finite_in(c, "--sd", sd, 0, float("inf"))
    c.raise_if_any()
    q = float(quantile)
    if density is None:
        f = float(stats.norm.pdf(stats.norm.ppf(q)) / sd)
        assumed = f"normal data with SD {sd:g}: density at the quantile phi(z_q) / sd = {f:.6g}"
    else:
        f = float(density)
        assumed = f"density {f:g} at the quantile"
    z = z_two_sided(confidence)
    n0 = z * z * q * (1.0 - q) / (f * f * margin * margin)
    planning = {"quantile": q, "density": f} if name == "quantile" else {"density": f}
    if sd is not None:
        planning["sd"] = float(sd)
    return formula_result(
        name, n0, margin, confidence,
        formula="n = z^2 q (1 - q) / (f^2 B^2)",
        assumptions=(f"large-sample variance q (1 - q) / (n f^2) of the sample quantile (q = {q:g}), {assumed}",),
        planning=planning, multiplier=z, minimum=2,
    )


def median_formula(margin: float, confidence: float, *, density: float | None = None, sd: float | None = None):
    """n for an interval of half-width ``margin`` for the median."""
    return quantile_formula(margin, confidence, quantile=0.5, density=density, sd=sd, name="median")


def _law(design):
    return law_of(design.model)


def true_quantile(design) -> float:
    law = _law(design)
    if law is None:
        return math.nan
    return float(law.ppf(level(design)))


def planning(design) -> dict:
    """The baseline's planning values: the density at the quantile, or (discrete data) the SD."""
    q = level(design)
    law = _law(design)
    out: dict = {"quantile": q} if design.quantile is not None else {}
    if law is not None and not is_discrete_law(law):
        out["density"] = float(law.pdf(law.ppf(q)))
    else:
        out["sd"] = float(design.model.sd)
    return out


def check(design, c: Collector) -> None:
    if design.estimand == "quantile":
        if design.quantile is None:
            c.add("target.quantile", "required for estimand 'quantile': the level in (0, 1) (0.5 = the median)")
        else:
            check_finite_in(c, "target.quantile", design.quantile, 0, 1)
    if _law(design) is None:
        c.add("data", f"model {design.model.name!r} has no known law of one observation, so the true quantile is "
                      "unknown; use a model such as normal, lognormal, gamma, poisson or empirical")


def notes(design) -> tuple[str, ...]:
    out = [] if design.quantile is None else [f"estimand: the {design.quantile:g} quantile of the data (target.quantile)"]
    if has_ties(design.model):
        out.append(TIES_NOTE)
    return tuple(out)


MEDIAN = register_estimand(EstimandSpec(
    name="median",
    label="the median",
    data="one",
    true_value=true_quantile,
    check=check,
    formula=median_formula,
    formula_inputs=("density", "sd"),
    planning=planning,
    references=_REFS,
    notes=notes,
))

QUANTILE = register_estimand(EstimandSpec(
    name="quantile",
    label="the q-quantile (q = target.quantile)",
    data="one",
    true_value=true_quantile,
    check=check,
    formula=quantile_formula,
    formula_inputs=("quantile", "density", "sd"),
    required=("quantile",),
    planning=planning,
    references=_REFS,
    params=("quantile",),
    notes=notes,
))
