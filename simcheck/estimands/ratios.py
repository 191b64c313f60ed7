"""The risk ratio and the odds ratio of two independent groups of 0/1 data.

The true values come from the two event probabilities: RR = p_a / p_b and
OR = p_a (1 - p_b) / ((1 - p_a) p_b). Both are planned on the ratio scale:
the margin is a factor f > 1, met when the interval lies within estimate / f
and estimate x f, that is when its half-width on the log scale is at most
ln f.

Closed-form baselines: the large-sample half-width of the log interval with
the planning proportions in place of the estimates,

* risk ratio: z sqrt((1 - p_a) / (n p_a) + (1 - p_b) / (n_b p_b)) <= ln f
  (the variance of log RR of Katz et al. 1978), so
  n = z^2 ((1 - p_a) / p_a + (1 - p_b) / (r p_b)) / (ln f)^2;
* odds ratio: z sqrt(1 / (n p_a (1 - p_a)) + 1 / (n_b p_b (1 - p_b))) <= ln f
  (the variance of log OR of Woolf 1955), so
  n = z^2 (1 / (p_a (1 - p_a)) + 1 / (r p_b (1 - p_b))) / (ln f)^2,

with n_b = ceil(r n), r the allocation ratio.

References
----------
.. [1] Katz, D., Baptista, J., Azen, S. P. & Pike, M. C. (1978). Obtaining
   confidence intervals for the risk ratio in cohort studies. Biometrics
   34, 469-474.
.. [2] Woolf, B. (1955). On estimating the relation between blood group and
   disease. Annals of Human Genetics 19, 251-253.
"""

from __future__ import annotations

import math

from simcheck.estimands.base import EstimandSpec, check_finite_in, formula_result, register_estimand, z_two_sided
from simcheck.errors import Collector

_KATZ = "Katz, Baptista, Azen & Pike (1978), Biometrics 34:469-474 (variance of log RR)"
_WOOLF = "Woolf (1955), Annals of Human Genetics 19:251-253 (variance of log OR)"


def _check_inputs(margin, confidence, p, p_b, ratio, p_high_open: bool) -> float:
    c = Collector()
    m = check_finite_in(c, "--margin", margin, 0, float("inf"))
    if m is not None and m <= 1:
        c.add("--margin", f"is a factor > 1 for a ratio (1.5: the interval lies within the estimate / 1.5 and "
                          f"x 1.5), got {margin!r}")
    check_finite_in(c, "--confidence", confidence, 0, 1)
    check_finite_in(c, "--p", p, 0, 1, high_open=p_high_open)
    check_finite_in(c, "--p-b", p_b, 0, 1, high_open=p_high_open)
    r = 1.0 if ratio is None else check_finite_in(c, "--ratio", ratio, 0, float("inf"))
    c.raise_if_any()
    return float(r)


def risk_ratio_formula(margin: float, confidence: float, *, p: float, p_b: float, ratio: float | None = None):
    """n per group a for a log-scale half-width ln(margin) of the risk ratio (large-sample, Katz's variance)."""
    r = _check_inputs(margin, confidence, p, p_b, ratio, p_high_open=False)
    z = z_two_sided(confidence)
    n0 = z * z * ((1 - p) / p + (1 - p_b) / (r * p_b)) / math.log(margin) ** 2
    return formula_result(
        "risk-ratio", n0, margin, confidence,
        formula="n = z^2 ((1 - p) / p + (1 - p_b) / (r p_b)) / (ln f)^2, n_b = ceil(r n)",
        assumptions=("large-sample half-width of the log risk ratio (Katz et al. 1978) with the planning "
                     "proportions; the margin is a factor f: the interval lies within RR / f and RR x f",),
        planning={"p": float(p), "p_b": float(p_b), "ratio": r}, ratio=r, multiplier=z, minimum=2,
    )


def odds_ratio_formula(margin: float, confidence: float, *, p: float, p_b: float, ratio: float | None = None):
    """n per group a for a log-scale half-width ln(margin) of the odds ratio (large-sample, Woolf's variance)."""
    r = _check_inputs(margin, confidence, p, p_b, ratio, p_high_open=True)
    z = z_two_sided(confidence)
    n0 = z * z * (1 / (p * (1 - p)) + 1 / (r * p_b * (1 - p_b))) / math.log(margin) ** 2
    return formula_result(
        "odds-ratio", n0, margin, confidence,
        formula="n = z^2 (1 / (p (1 - p)) + 1 / (r p_b (1 - p_b))) / (ln f)^2, n_b = ceil(r n)",
        assumptions=("large-sample half-width of the log odds ratio (Woolf 1955) with the planning "
                     "proportions; the margin is a factor f: the interval lies within OR / f and OR x f",),
        planning={"p": float(p), "p_b": float(p_b), "ratio": r}, ratio=r, multiplier=z, minimum=2,
    )


def _probabilities(design) -> tuple[float, float]:
    return float(design.model.mean), float(design.model_b.mean)


def _planning(design) -> dict:
    pa, pb = _probabilities(design)
    return {"p": pa, "p_b": pb, "ratio": float(design.ratio)}


# 0/1 models refuse p = 0 and p = 1 (data that would not vary), so both ratios are finite and positive
def _rr(design) -> float:
    pa, pb = _probabilities(design)
    return pa / pb


def _or(design) -> float:
    pa, pb = _probabilities(design)
    return pa * (1 - pb) / ((1 - pa) * pb)


RISK_RATIO = register_estimand(EstimandSpec(
    name="risk-ratio",
    label="the risk ratio",
    data="two",
    true_value=_rr,
    scale="ratio",
    zero_one=True,
    formula=risk_ratio_formula,
    formula_inputs=("p", "p_b", "ratio"),
    required=("p", "p_b"),
    planning=_planning,
    references=(_KATZ,),
))

ODDS_RATIO = register_estimand(EstimandSpec(
    name="odds-ratio",
    label="the odds ratio",
    data="two",
    true_value=_or,
    scale="ratio",
    zero_one=True,
    formula=odds_ratio_formula,
    formula_inputs=("p", "p_b", "ratio"),
    required=("p", "p_b"),
    planning=_planning,
    references=(_WOOLF,),
))
