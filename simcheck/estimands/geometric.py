"""The geometric mean of positive data and the ratio of two geometric means.

Both are ratio-scale estimands: the margin is a factor f > 1 (the interval
lies within estimate / f and estimate * f), read on the log scale as the
half-width ln f of an interval for E[log X] (or E[log X_a] - E[log X_b]).

True values: exp(E[log X]) from the model's law (lognormal exp(meanlog);
gamma scale exp(digamma(shape)); others by integration, see
:mod:`simcheck.models.laws`).

Closed-form baselines (the normal approximation for a mean of logs, common
practice; the same sample-size rule as for a mean, applied to the logs):

* geometric mean: z sd_log / sqrt(n) <= ln f, so n = (z sd_log / ln f)^2;
* ratio of geometric means (n_b = ratio n):
  n = z^2 (sd_log^2 + sd_log_b^2 / ratio) / (ln f)^2.

References
----------
.. [1] Olsson, U. (2005). Confidence intervals for the mean of a log-normal
   distribution. Journal of Statistics Education 13(1) (the log-scale t
   interval and its back-transformation; from memory).
.. [2] Julious, S. A. (2004). Sample sizes for clinical trials with normal
   data. Statistics in Medicine 23, 1921-1986, sec. on log-normal data
   (sample sizes from the SD of the logs; from memory).
"""

from __future__ import annotations

import math

from simcheck.errors import Collector
from simcheck.estimands.base import EstimandSpec, check_finite_in, formula_result, register_estimand, z_two_sided
from simcheck.models.laws import log_moments, positive_problem

_REFS = ("common practice (normal approximation for a mean of logs); Julious (2004), Statistics in Medicine "
         "23:1921-1986 (from memory)",)


def _check_factor(c: Collector, margin, label: str) -> None:
    if isinstance(margin, bool) or not isinstance(margin, (int, float)) or not math.isfinite(float(margin)):
        c.add("--margin", f"must be a finite number, got {margin!r}")
    elif not margin > 1:
        c.add("--margin", f"for {label} the margin is a factor > 1 (1.2: within the estimate divided and "
                          f"multiplied by 1.2), got {margin!r}")


def geometric_mean_formula(margin: float, confidence: float, *, sd_log: float):
    """n for a log-scale interval of half-width ln(margin) around the mean of the logs."""
    c = Collector()
    _check_factor(c, margin, "the geometric mean")
    check_finite_in(c, "--confidence", confidence, 0, 1)
    check_finite_in(c, "--sd-log", sd_log, 0, float("inf"))
    c.raise_if_any()
    z = z_two_sided(confidence)
    n0 = (z * sd_log / math.log(margin)) ** 2
    return formula_result(
        "geometric-mean", n0, margin, confidence,
        formula="n = (z sd_log / ln f)^2",
        assumptions=("normal approximation for the mean of the logs; the margin is the factor f",),
        planning={"sd_log": float(sd_log)}, multiplier=z, minimum=2,
    )


def geometric_mean_ratio_formula(margin: float, confidence: float, *, sd_log: float, sd_log_b: float | None = None,
                                 ratio: float | None = None):
    """n (group a) for a log-scale interval of the difference of mean logs with half-width ln(margin)."""
    c = Collector()
    _check_factor(c, margin, "the ratio of geometric means")
    check_finite_in(c, "--confidence", confidence, 0, 1)
    check_finite_in(c, "--sd-log", sd_log, 0, float("inf"))
    if sd_log_b is not None:
        check_finite_in(c, "--sd-log-b", sd_log_b, 0, float("inf"))
    if ratio is not None:
        check_finite_in(c, "--ratio", ratio, 0, float("inf"))
    c.raise_if_any()
    sb = float(sd_log if sd_log_b is None else sd_log_b)
    r = 1.0 if ratio is None else float(ratio)
    z = z_two_sided(confidence)
    n0 = z * z * (sd_log * sd_log + sb * sb / r) / math.log(margin) ** 2
    return formula_result(
        "geometric-mean-ratio", n0, margin, confidence,
        formula="n = z^2 (sd_log^2 + sd_log_b^2 / ratio) / (ln f)^2, n_b = ratio n",
        assumptions=("normal approximation for the difference of the mean logs; the margin is the factor f",),
        planning={"sd_log": float(sd_log), "sd_log_b": sb, "ratio": r}, ratio=r, multiplier=z, minimum=2,
    )


def _mean_log(model) -> float:
    """E[log X], NaN when the values are not all positive (the design then refuses the model)."""
    if positive_problem(model) is not None:
        return math.nan
    return log_moments(model)[0]


def _check_one(design, c: Collector) -> None:
    why = positive_problem(design.model)
    if why is not None:
        c.add("data", why)


def _check_two(design, c: Collector) -> None:
    for key, m in (("data.a", design.model), ("data.b", design.model_b)):
        why = positive_problem(m)
        if why is not None:
            c.add(key, why)


GEOMETRIC_MEAN = register_estimand(EstimandSpec(
    name="geometric-mean",
    label="the geometric mean",
    data="one",
    scale="ratio",
    true_value=lambda d: math.exp(_mean_log(d.model)),
    check=_check_one,
    formula=geometric_mean_formula,
    formula_inputs=("sd_log",),
    required=("sd_log",),
    planning=lambda d: {"sd_log": log_moments(d.model)[1]},
    references=_REFS,
))

GEOMETRIC_MEAN_RATIO = register_estimand(EstimandSpec(
    name="geometric-mean-ratio",
    label="the ratio of geometric means (a / b)",
    data="two",
    scale="ratio",
    true_value=lambda d: math.exp(_mean_log(d.model) - _mean_log(d.model_b)),
    check=_check_two,
    formula=geometric_mean_ratio_formula,
    formula_inputs=("sd_log", "sd_log_b", "ratio"),
    required=("sd_log",),
    planning=lambda d: {"sd_log": log_moments(d.model)[1], "sd_log_b": log_moments(d.model_b)[1],
                        "ratio": float(d.ratio)},
    references=_REFS,
))
