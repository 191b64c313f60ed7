"""The interval-method interface and registry.

Interval methods are pure, vectorised functions. They never see a model:
the engine hands them sufficient statistics (or raw samples) as arrays whose
leading axis runs over replicates and returns ``(lower, upper)`` arrays of the
same shape.

Kinds and call signatures (all arrays broadcast together):

``summary``   ``func(s: Summary, confidence) -> (lo, hi)``  one-sample mean
``log``       ``func(s: Summary, confidence) -> (lo, hi)``  Summary of log values; interval for the mean on the original scale
``summary2``  ``func(a: Summary, b: Summary, confidence) -> (lo, hi)``  mean_a - mean_b
``count``     ``func(x, n, confidence) -> (lo, hi)``  proportion from x successes of n
``count2``    ``func(xa, na, xb, nb, confidence) -> (lo, hi)``  p_a - p_b
``sample``    ``func(x, confidence, *, rng, resamples) -> (lo, hi, degenerate)`` raw (R, n) samples (bootstrap)
``sample2``   ``func(xa, xb, confidence, *, rng, resamples) -> (lo, hi, degenerate)``
``cluster``   ``func(values, sizes, confidence) -> (lo, hi)`` see intervals.cluster
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Callable

import numpy as np

from simcheck.errors import InputError

ESTIMANDS = ("mean", "proportion", "mean-diff", "proportion-diff")


@dataclass(frozen=True)
class Summary:
    """Sufficient statistics of samples, one entry per replicate (and n).

    Attributes
    ----------
    n : int or ndarray
        Sample size(s).
    mean : ndarray
        Sample means.
    var : ndarray
        Unbiased sample variances (divisor n - 1).
    m3 : ndarray, optional
        Third central sample moment with divisor n (johnson-t).
    sd_true : float, optional
        The data model's true SD (known-SD z interval).
    """

    n: int | np.ndarray
    mean: np.ndarray
    var: np.ndarray
    m3: np.ndarray | None = None
    sd_true: float | None = None


@dataclass(frozen=True)
class Method:
    """An interval method in the registry."""

    name: str
    estimand: str
    kind: str
    func: Callable = field(repr=False)
    #: True when the interval of x + c is the interval of x shifted by c, so
    #: the engine may work on values centred on the true value (precision).
    shift_equivariant: bool = False
    #: needs the third central moment (johnson-t)
    needs_m3: bool = False
    #: needs the model's true SD (z)
    needs_true_sd: bool = False
    summary: str = ""
    references: tuple[str, ...] = ()
    #: optional ``(s, confidence) -> (centre, half)`` for symmetric intervals;
    #: the engine then skips forming and re-differencing the limits. For
    #: ``count`` methods clipped to [0, 1] (wald, agresti-coull):
    #: ``(x, n, confidence) -> (centre, half)`` before clipping, so that a
    #: finite population correction scales the half-width and clips once
    centre_half: Callable | None = field(default=None, repr=False)


REGISTRY: dict[tuple[str, str], Method] = {}


def register(method: Method) -> Method:
    key = (method.estimand, method.name)
    if key in REGISTRY:
        raise ValueError(f"interval method {key} registered twice")
    REGISTRY[key] = method
    return method


def get_method(estimand: str, name: str, field_name: str = "method.interval") -> Method:
    """Look up a method for an estimand, with a helpful error."""
    try:
        return REGISTRY[(estimand, name)]
    except KeyError:
        names = methods_for(estimand)
        raise InputError(
            field_name,
            f"unknown interval {name!r} for estimand {estimand!r}; choose one of {', '.join(names)}",
        ) from None


def methods_for(estimand: str) -> list[str]:
    return sorted(n for (e, n) in REGISTRY if e == estimand)
