"""Estimands of paired measurements: the mean paired difference and the correlation.

Both are computed from n pairs of two correlated measurements: ``[data.a]``
and ``[data.b]`` are the margins of the first and second measurement and
``data.correlation`` the correlation of their normal scores (a Gaussian
copula, :mod:`simcheck.models.pairs`).

``paired-mean-diff``
    mean_a - mean_b. Baseline: the normal-approximation n for a mean of the
    differences, whose SD is sd_d = sqrt(sd_a^2 + sd_b^2 - 2 r sd_a sd_b)
    (r the Pearson correlation of the measurements): n = (z sd_d / E)^2.
``correlation``
    the Pearson correlation of the two measurements: ``data.correlation``
    itself for two normal margins, otherwise the correlation the copula
    produces (:func:`simcheck.models.pairs.pearson_correlation`). Baseline:
    the first-stage formula of Bonett & Wright (2000), from the large-sample
    variance (1 - r^2)^2 / (n - 3) of the Fisher-z interval's width:
    n = 4 z^2 (1 - r^2)^2 / w^2 + 3 with w = 2 E the full width.

References
----------
.. [1] Bonett, D. G. & Wright, T. A. (2000). Sample size requirements for
   estimating Pearson, Kendall and Spearman correlations. Psychometrika 65,
   23-28 (the first-stage n0 with c = 1 for Pearson's r; their two-stage
   refinement is not applied).
.. [2] Student (1908). The probable error of a mean. Biometrika 6, 1-25 (the
   paired t interval is the one-sample t interval of the differences).
"""

from __future__ import annotations

import math

from simcheck.estimands.base import EstimandSpec, check_finite_in, formula_result, register_estimand, z_two_sided
from simcheck.errors import Collector, InputError
from simcheck.models.pairs import drawable, pearson_correlation

_BONETT_WRIGHT = "Bonett & Wright (2000), Psychometrika 65:23-28 (first-stage n0, Pearson's r)"


def paired_formula(margin: float, confidence: float, *, sd: float, sd_b: float, correlation: float):
    """n pairs for a paired mean difference within ``margin`` (normal approximation, z)."""
    c = Collector()
    check_finite_in(c, "--margin", margin, 0, float("inf"))
    check_finite_in(c, "--confidence", confidence, 0, 1)
    check_finite_in(c, "--sd", sd, 0, float("inf"))
    check_finite_in(c, "--sd-b", sd_b, 0, float("inf"))
    check_finite_in(c, "--correlation", correlation, -1, 1)
    c.raise_if_any()
    var_d = sd * sd + sd_b * sd_b - 2.0 * correlation * sd * sd_b
    if not var_d > 0:
        raise InputError("--correlation", f"gives differences with SD 0 (sd = sd_b and correlation {correlation:g}); "
                                          "no sample size is needed or the planning values are wrong")
    sd_d = math.sqrt(var_d)
    z = z_two_sided(confidence)
    n0 = (z * sd_d / margin) ** 2
    return formula_result(
        "paired-mean-diff", n0, margin, confidence,
        formula="n = (z sd_d / B)^2, sd_d = sqrt(sd^2 + sd_b^2 - 2 r sd sd_b)",
        assumptions=(f"normal approximation for the mean of the paired differences (SD of the differences {sd_d:.6g})",),
        planning={"sd": float(sd), "sd_b": float(sd_b), "correlation": float(correlation)}, multiplier=z, minimum=2,
    )


def correlation_formula(margin: float, confidence: float, *, correlation: float):
    """n pairs for a Pearson correlation within ``margin`` (Bonett & Wright 2000, first stage)."""
    c = Collector()
    check_finite_in(c, "--margin", margin, 0, 1, high_open=False)
    check_finite_in(c, "--confidence", confidence, 0, 1)
    check_finite_in(c, "--correlation", correlation, -1, 1)
    c.raise_if_any()
    z = z_two_sided(confidence)
    w = 2.0 * margin
    n0 = 4.0 * z * z * (1.0 - correlation * correlation) ** 2 / (w * w) + 3.0
    return formula_result(
        "correlation", n0, margin, confidence,
        formula="n = 4 z^2 (1 - r^2)^2 / w^2 + 3, w = 2 B (Bonett & Wright 2000)",
        assumptions=("large-sample width of the Fisher-z interval for a Pearson correlation (bivariate normal data)",),
        planning={"correlation": float(correlation)}, multiplier=z, minimum=4,
    )


def correlation_of(design) -> float:
    """The Pearson correlation of the design's pairs (the copula's, for non-normal margins)."""
    rho = 0.0 if design.correlation is None else float(design.correlation)
    return pearson_correlation(design.model, design.model_b, rho)


def _check_pairs(design, c: Collector) -> None:
    """Rules shared by the paired estimands: the correlation and two drawable margins with a finite SD."""
    if design.correlation is None:
        c.add("data.correlation", f"required for estimand {design.estimand!r}: the correlation of the two "
                                  "measurements' normal scores, in (-1, 1)")
    else:
        check_finite_in(c, "data.correlation", design.correlation, -1, 1)
    for key, m in (("data.a", design.model), ("data.b", design.model_b)):
        if not drawable(m):
            c.add(key, f"model {m.describe()} has no closed-form law (quantile function), so it cannot be one "
                       "measurement of a pair; choose a model such as normal, lognormal, gamma or poisson")
        elif not (math.isfinite(m.mean) and math.isfinite(m.sd)):
            c.add(key, f"model {m.describe()} has no finite mean and SD; paired estimands need both")


def _check_correlation(design, c: Collector) -> None:
    _check_pairs(design, c)
    if c.problems:
        return
    if not math.isfinite(correlation_of(design)):
        c.add("data", "the Pearson correlation of these two margins cannot be computed (a discrete margin whose "
                      "values are not whole-number steps, or a margin without spread); choose other margin models")
    if design.margin is not None and design.margin >= 1:
        c.add("target.margin", f"a correlation lies in [-1, 1]: a margin of {design.margin:g} or more says nothing")


def _paired_planning(design) -> dict:
    return {"sd": float(design.model.sd), "sd_b": float(design.model_b.sd), "correlation": correlation_of(design)}


PAIRED_MEAN_DIFF = register_estimand(EstimandSpec(
    name="paired-mean-diff",
    label="the mean paired difference a - b",
    data="paired",
    true_value=lambda d: d.model.mean - d.model_b.mean,
    check=_check_pairs,
    formula=paired_formula,
    formula_inputs=("sd", "sd_b", "correlation"),
    required=("sd", "sd_b", "correlation"),
    planning=_paired_planning,
    references=("common practice (normal-approximation n for the mean of the differences)",),
    params=("correlation",),
))

CORRELATION = register_estimand(EstimandSpec(
    name="correlation",
    label="the Pearson correlation of measurements a and b",
    data="paired",
    true_value=correlation_of,
    check=_check_correlation,
    formula=correlation_formula,
    formula_inputs=("correlation",),
    required=("correlation",),
    planning=lambda d: {"correlation": correlation_of(d)},
    references=(_BONETT_WRIGHT,),
    params=("correlation",),
))
