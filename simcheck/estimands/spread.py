"""The standard deviation of one sample.

The closed-form baseline is the large-sample half-width of an interval for
sigma: by the delta method Var(s) ~ sigma^2 (kappa - 1) / (4 n), kappa the
kurtosis (3 for normal data, where it is the Greenwood & Sandomire 1950
result sigma / sqrt(2 (n - 1))), so n = 1 + z^2 sigma^2 (kappa - 1) / (4 E^2).

References
----------
.. [1] Greenwood, J. A. & Sandomire, M. M. (1950). Sample size required for
   estimating the standard deviation as a per cent of its true value. JASA
   45, 257-260 (from memory).
"""

from __future__ import annotations

from simcheck.estimands.base import EstimandSpec, check_finite_in, formula_result, register_estimand, z_two_sided
from simcheck.errors import Collector


def sd_formula(margin: float, confidence: float, *, sd: float, kurtosis: float | None = None):
    """n for a two-sided interval for sigma of half-width ``margin`` (large-sample, delta method)."""
    c = Collector()
    check_finite_in(c, "--margin", margin, 0, float("inf"))
    check_finite_in(c, "--confidence", confidence, 0, 1)
    check_finite_in(c, "--sd", sd, 0, float("inf"))
    if kurtosis is not None:
        check_finite_in(c, "--kurtosis", kurtosis, 1, float("inf"))
    c.raise_if_any()
    k = 3.0 if kurtosis is None else float(kurtosis)
    z = z_two_sided(confidence)
    n0 = 1.0 + z * z * sd * sd * (k - 1.0) / (4.0 * margin * margin)
    assumed = "normal data (kurtosis 3)" if kurtosis is None else f"kurtosis {k:g}"
    return formula_result(
        "sd", n0, margin, confidence,
        formula="n = 1 + z^2 sd^2 (kurtosis - 1) / (4 B^2)",
        assumptions=(f"large-sample half-width of an interval for the SD, {assumed}",),
        planning={"sd": float(sd), "kurtosis": k}, multiplier=z, minimum=2,
    )


def _planning(design) -> dict:
    return {"sd": float(design.model.sd)}


SD = register_estimand(EstimandSpec(
    name="sd",
    label="the standard deviation",
    data="one",
    true_value=lambda d: d.model.sd,
    formula=sd_formula,
    formula_inputs=("sd", "kurtosis"),
    required=("sd",),
    planning=_planning,
    references=("Greenwood & Sandomire (1950), JASA 45:257-260 (from memory)",),
))
