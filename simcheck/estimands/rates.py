"""Event rates per unit of exposure: one rate, the ratio and the difference of two rates.

The data model gives the count of one observation unit (a person followed
for t years, a litre of water, a square metre of surface): ``poisson``
(``mean`` = expected count per unit) or ``negative-binomial`` (``mean`` and
``dispersion`` k, variance mean + mean^2 / k: over-dispersed counts). Every
unit has the same exposure t, ``target.exposure`` (1 when not given). The
rate is events per unit of exposure, lambda = mean / t, estimated by the
total count over the total exposure n t. The rate ratio compares group a
with group b (same exposure per unit, n_b = ceil(ratio n) units in b);
its margin is a factor f > 1 (the interval within RR / f and RR f).

Closed-form baselines (large-sample variances of the estimates):

* rate: Var(X / (n t)) = lambda (1 + lambda t / k) / (n t) (Poisson: k =
  infinity), so n = z^2 lambda (1 + lambda t / k) / (t E^2) for a half-width
  E;
* rate ratio: Var(log RR) = (1 + mu_a / k) / (n mu_a) + (1 + mu_b / k) /
  (n_b mu_b) with mu = lambda t per unit (the delta method; Breslow & Day
  1987), so n = z^2 [(1 + mu_a/k) / mu_a + (1 + mu_b/k) / (r mu_b)] / (ln f)^2;
* rate difference: Var = lambda_a (1 + mu_a/k) / (n t) + lambda_b (1 + mu_b/k)
  / (n_b t), so n = z^2 [lambda_a (1 + mu_a/k) + lambda_b (1 + mu_b/k) / r] /
  (t E^2).

References
----------
.. [1] Breslow, N. E. & Day, N. E. (1987). Statistical Methods in Cancer
   Research, vol. II: The Design and Analysis of Cohort Studies. IARC,
   Lyon (variance of a rate and of the log rate ratio; from memory).
.. [2] Cameron, A. C. & Trivedi, P. K. (2013). Regression Analysis of Count
   Data, 2nd ed., sec. 3.3 (the NB2 variance mu + mu^2 / k; from memory).
"""

from __future__ import annotations

import math

from simcheck.estimands.base import EstimandSpec, check_finite_in, formula_result, register_estimand, z_two_sided
from simcheck.errors import Collector

_INF = float("inf")
_REFS = ("Breslow & Day (1987), Statistical Methods in Cancer Research vol. II, IARC (from memory)",)


def _exposure(design) -> float:
    return 1.0 if design.exposure is None else float(design.exposure)


def _inflation(mu: float, dispersion: float | None) -> float:
    """Variance of a count over its mean: 1 + mu / k (1 for Poisson counts)."""
    return 1.0 if dispersion is None else 1.0 + mu / dispersion


def _check_common(c: Collector, margin, confidence, exposure, dispersion) -> None:
    check_finite_in(c, "--confidence", confidence, 0, 1)
    if exposure is not None:
        check_finite_in(c, "--exposure", exposure, 0, _INF)
    if dispersion is not None:
        check_finite_in(c, "--dispersion", dispersion, 0, _INF)


def rate_formula(margin: float, confidence: float, *, rate: float, exposure: float | None = None,
                 dispersion: float | None = None):
    """n units for a two-sided interval for a rate of half-width ``margin`` (events per unit of exposure)."""
    c = Collector()
    check_finite_in(c, "--margin", margin, 0, _INF)
    check_finite_in(c, "--rate", rate, 0, _INF)
    _check_common(c, margin, confidence, exposure, dispersion)
    c.raise_if_any()
    t = 1.0 if exposure is None else float(exposure)
    z = z_two_sided(confidence)
    n0 = z * z * rate * _inflation(rate * t, dispersion) / (t * margin * margin)
    law = "Poisson counts" if dispersion is None else f"negative-binomial counts, dispersion k = {dispersion:g}"
    return formula_result(
        "rate", n0, margin, confidence,
        formula="n = z^2 rate (1 + rate exposure / k) / (exposure B^2)  (Poisson: k = infinity)",
        assumptions=(f"large-sample half-width of the total count over the total exposure, {law}",
                     f"every unit observed for exposure {t:g}"),
        planning={"rate": float(rate), "exposure": t, "dispersion": dispersion}, multiplier=z, minimum=2,
    )


def _two_group_inputs(margin_low, margin, confidence, rate, rate_b, exposure, ratio, dispersion):
    """Check the planning values of two groups (all problems at once); (exposure, ratio, z)."""
    c = Collector()
    check_finite_in(c, "--margin", margin, margin_low, _INF)
    check_finite_in(c, "--rate", rate, 0, _INF)
    check_finite_in(c, "--rate-b", rate_b, 0, _INF)
    if ratio is not None:
        check_finite_in(c, "--ratio", ratio, 0, _INF)
    _check_common(c, margin, confidence, exposure, dispersion)
    c.raise_if_any()
    t = 1.0 if exposure is None else float(exposure)
    r = 1.0 if ratio is None else float(ratio)
    return t, r, z_two_sided(confidence)


def rate_ratio_formula(margin: float, confidence: float, *, rate: float, rate_b: float,
                       exposure: float | None = None, ratio: float | None = None, dispersion: float | None = None):
    """n units in group a for a log-scale half-width ln(``margin``) of the rate ratio a / b."""
    t, r, z = _two_group_inputs(1, margin, confidence, rate, rate_b, exposure, ratio, dispersion)
    mu_a, mu_b = rate * t, rate_b * t
    v1 = _inflation(mu_a, dispersion) / mu_a + _inflation(mu_b, dispersion) / (r * mu_b)
    n0 = z * z * v1 / math.log(margin) ** 2
    law = "Poisson counts" if dispersion is None else f"negative-binomial counts, dispersion k = {dispersion:g}"
    return formula_result(
        "rate-ratio", n0, margin, confidence,
        formula="n = z^2 [(1 + mu_a/k)/mu_a + (1 + mu_b/k)/(r mu_b)] / ln(f)^2, mu = rate x exposure per unit",
        assumptions=(f"large-sample half-width of the log rate ratio, {law}", f"every unit observed for exposure {t:g}",
                     "margin f: the interval lies within RR / f and RR x f"),
        planning={"rate": float(rate), "rate_b": float(rate_b), "exposure": t, "ratio": r, "dispersion": dispersion},
        ratio=r, multiplier=z, minimum=2,
    )


def rate_diff_formula(margin: float, confidence: float, *, rate: float, rate_b: float,
                      exposure: float | None = None, ratio: float | None = None, dispersion: float | None = None):
    """n units in group a for a half-width ``margin`` of the rate difference a - b."""
    t, r, z = _two_group_inputs(0, margin, confidence, rate, rate_b, exposure, ratio, dispersion)
    v1 = rate * _inflation(rate * t, dispersion) + rate_b * _inflation(rate_b * t, dispersion) / r
    n0 = z * z * v1 / (t * margin * margin)
    law = "Poisson counts" if dispersion is None else f"negative-binomial counts, dispersion k = {dispersion:g}"
    return formula_result(
        "rate-diff", n0, margin, confidence,
        formula="n = z^2 [rate_a (1 + mu_a/k) + rate_b (1 + mu_b/k) / r] / (exposure B^2), mu = rate x exposure",
        assumptions=(f"large-sample half-width of the difference of the two rates, {law}",
                     f"every unit observed for exposure {t:g}"),
        planning={"rate": float(rate), "rate_b": float(rate_b), "exposure": t, "ratio": r, "dispersion": dispersion},
        ratio=r, multiplier=z, minimum=2,
    )


def _dispersion(*models) -> float | None:
    """The planning dispersion: the smallest k among negative-binomial groups (the most over-dispersed)."""
    ks = [float(m.dispersion) for m in models if getattr(m, "name", None) == "negative-binomial"]
    return min(ks) if ks else None


def _rate_planning(design) -> dict:
    return {"rate": float(design.true_value), "exposure": _exposure(design), "dispersion": _dispersion(design.model)}


def _ratio_planning(design) -> dict:
    t = _exposure(design)
    return {"rate": design.model.mean / t, "rate_b": design.model_b.mean / t, "exposure": t,
            "ratio": float(design.ratio), "dispersion": _dispersion(design.model, design.model_b)}


def _check(design, c: Collector) -> None:
    if design.exposure is not None:
        check_finite_in(c, "target.exposure", design.exposure, 0, _INF)
    for key, m in (("data.a" if design.model_b is not None else "data", design.model), ("data.b", design.model_b)):
        if m is not None and not m.mean > 0:
            c.add(key, f"the expected count per unit must be > 0 for a rate, got {m.mean:g}")


RATE = register_estimand(EstimandSpec(
    name="rate",
    label="the event rate per unit of exposure",
    margin_words="in events per unit of exposure",
    data="one",
    true_value=lambda d: d.model.mean / _exposure(d),
    counts=True,
    check=_check,
    formula=rate_formula,
    formula_inputs=("rate", "exposure", "dispersion"),
    required=("rate",),
    planning=_rate_planning,
    references=_REFS,
    params=("exposure",),
))

RATE_RATIO = register_estimand(EstimandSpec(
    name="rate-ratio",
    label="the ratio of two event rates (a / b)",
    data="two",
    true_value=lambda d: d.model.mean / d.model_b.mean,
    scale="ratio",
    counts=True,
    check=_check,
    formula=rate_ratio_formula,
    formula_inputs=("rate", "rate_b", "exposure", "ratio", "dispersion"),
    required=("rate", "rate_b"),
    planning=_ratio_planning,
    references=_REFS,
    params=("exposure",),
))

RATE_DIFF = register_estimand(EstimandSpec(
    name="rate-diff",
    label="the difference of two event rates (a - b)",
    margin_words="in events per unit of exposure",
    data="two",
    true_value=lambda d: (d.model.mean - d.model_b.mean) / _exposure(d),
    counts=True,
    check=_check,
    formula=rate_diff_formula,
    formula_inputs=("rate", "rate_b", "exposure", "ratio", "dispersion"),
    required=("rate", "rate_b"),
    planning=_ratio_planning,
    references=_REFS,
    params=("exposure",),
))
