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
``raw``       ``func(s: Sample, confidence) -> (lo, hi)`` or ``(lo, hi, degenerate)``: the drawn
              values of the estimands in :mod:`simcheck.estimands` (see :class:`Sample`)

A method may also carry an exact path: ``exact_applies(design) -> bool`` and
``exact(design, ns) -> list[dict]``, one dict of measures per n in the keys
of :func:`simcheck.engine.measures.row_from_measures`, margins on the scale
the estimand reports (a factor for ratio-scale estimands), plus optional
``margin_at_assurance`` and ``notes`` (sentences added to the row).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Callable

import numpy as np

from simcheck.errors import InputError

ESTIMANDS = ("mean", "proportion", "mean-diff", "proportion-diff")
#: the kinds of target bound: a two-sided interval or a one-sided limit
BOUNDS = ("two-sided", "upper", "lower")

#: how an equal-tailed method's one-sided limit is defined (the default)
EQUAL_TAILED = (
    "equal-tailed: the one-sided limit at level 1 - alpha is the matching limit of the "
    "two-sided interval at level 1 - 2 alpha"
)


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
class Sample:
    """Drawn values handed to a ``raw`` method, one row per replicate.

    Methods must not write into the arrays: along a curve they are views of
    one draw shared by every n.

    Attributes
    ----------
    x : ndarray
        (R, n) values of the one sample, of group a, or the first
        measurement of each pair.
    n : int
        Sample size (pairs for paired data).
    y : ndarray, optional
        (R, n) second measurement of each pair (paired data).
    xb : ndarray, optional
        (R, n_b) values of group b (two independent groups).
    n_b : int, optional
        Size of group b.
    params : dict
        The design's estimand parameters (``quantile``, ``exposure``).
    rng : numpy.random.Generator, optional
        Stream for resampling methods (bootstrap).
    resamples : int
        Bootstrap resamples.
    """

    x: np.ndarray
    n: int
    y: np.ndarray | None = None
    xb: np.ndarray | None = None
    n_b: int | None = None
    params: dict = field(default_factory=dict)
    rng: np.random.Generator | None = None
    resamples: int = 1999


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
    #: the interval needs the population size N (keyword ``population_size``):
    #: only with a finite population, whose evaluator passes N and never
    #: applies the finite population correction to it (it is exact already)
    needs_population_size: bool = False
    summary: str = ""
    references: tuple[str, ...] = ()
    #: optional ``(s, confidence) -> (centre, half)`` for symmetric intervals;
    #: the engine then skips forming and re-differencing the limits. For
    #: ``count`` methods clipped to [0, 1] (wald, agresti-coull):
    #: ``(x, n, confidence) -> (centre, half)`` before clipping, so that a
    #: finite population correction scales the half-width and clips once
    centre_half: Callable | None = field(default=None, repr=False)
    #: how the method's one-sided limit is defined (see :data:`ONE_SIDED`);
    #: empty means :data:`EQUAL_TAILED`
    one_sided: str = ""
    one_sided_references: tuple[str, ...] = ()
    #: the target bounds the method serves; one-sided-only methods (upper
    #: limits for skewed data) list only ``("upper",)`` and are called at
    #: the one-sided level itself, returning ``lower = -inf``
    bounds: tuple[str, ...] = BOUNDS
    #: the interval is always point estimate ± half-width (no clipping), so
    #: the achieved one-sided margin equals the two-sided half-width
    symmetric: bool = False
    #: an exact path for ``raw`` methods: ``exact_applies(design)`` says whether
    #: ``exact(design, ns)`` can compute the measures without simulation
    exact: Callable | None = field(default=None, repr=False)
    exact_applies: Callable | None = field(default=None, repr=False)
    #: coverage and assurance of the exact path rise monotonically in n (a
    #: continuous law), so a search may bisect; otherwise (counts) it scans
    exact_monotone: bool = False
    #: the method resamples (bootstrap): the engine hands it ``Sample.rng``
    resampling: bool = False
    #: the method's name as written in prose ("Bonett's"), for reports
    prose: str = ""
    #: how its exact path computes, after "computed exactly" in the methods
    #: paragraph ("from the chi-square law of the sample variance of normal data")
    exact_text: str = ""

    @property
    def one_sided_only(self) -> bool:
        return "two-sided" not in self.bounds

    def one_sided_text(self) -> str:
        """How this method's one-sided limit is defined, in one sentence."""
        return self.one_sided or EQUAL_TAILED


REGISTRY: dict[tuple[str, str], Method] = {}
#: methods the engine derives from registered ones (one-sided limits seen as
#: intervals, see :mod:`simcheck.engine.onesided`); never listed to users
DERIVED: dict[tuple[str, str], Method] = {}

_STUDENT = "Student (1908), Biometrika 6:1-25"
_BCD = "Brown, Cai & DasGupta (2001), Statistical Science 16:101-133, sec. 4.1 (one-sided intervals)"
_ET = "Efron & Tibshirani (1993), An Introduction to the Bootstrap, Chapman & Hall"
#: per method: (how its one-sided limit is defined, references, symmetric)
ONE_SIDED: dict[tuple[str, str], tuple[str, tuple[str, ...], bool]] = {
    ("mean", "z"): ("x̄ ± z_{1-alpha} sigma / sqrt(n), the one-sided normal limit with the known SD", ("common practice",), True),
    ("mean", "t"): ("x̄ ± t_{1-alpha, n-1} s / sqrt(n), the one-sided t limit", (_STUDENT,), True),
    ("mean", "johnson-t"): ("the t limit after Johnson's skewness shift m3 / (6 s^2 n): x̄ + m3 / (6 s^2 n) ± t_{1-alpha} s / sqrt(n)",
                            ("Johnson (1978), JASA 73:536-544 (the one-sided modified t)",), False),
    ("mean", "cox"): ("exp(ȳ + s^2/2 ± z_{1-alpha} sqrt(s^2/n + s^4/(2(n-1)))) on the logs ȳ, s^2",
                      ("Zhou & Gao (1997), Statistics in Medicine 16:783-790",), False),
    ("mean-diff", "z"): ("d ± z_{1-alpha} sqrt(sigma_a^2/n_a + sigma_b^2/n_b)", ("common practice",), True),
    ("mean-diff", "t"): ("d ± t_{1-alpha, n_a+n_b-2} s_p sqrt(1/n_a + 1/n_b)", (_STUDENT,), True),
    ("mean-diff", "welch"): ("d ± t_{1-alpha, nu} sqrt(s_a^2/n_a + s_b^2/n_b), Welch-Satterthwaite nu",
                             ("Welch (1947), Biometrika 34:28-35",), True),
    ("proportion", "wald"): ("p̂ ± z_{1-alpha} sqrt(p̂ (1 - p̂) / n), clipped to [0, 1]", (_BCD,), False),
    ("proportion", "wilson"): ("the Wilson score limit with z_{1-alpha} (one-sided score limit)", (_BCD,), False),
    ("proportion", "agresti-coull"): ("p̃ ± z_{1-alpha} sqrt(p̃ (1 - p̃) / ñ) with ñ = n + z_{1-alpha}^2, clipped", (_BCD,), False),
    ("proportion", "clopper-pearson"): ("one-sided exact: upper Beta_{1-alpha}(x + 1, n - x) (1 when x = n), "
                                        "lower Beta_{alpha}(x, n - x + 1) (0 when x = 0)",
                                        ("Clopper & Pearson (1934), Biometrika 26:404-413", _BCD), False),
    ("proportion", "jeffreys"): ("Beta(x + 1/2, n - x + 1/2) quantile 1 - alpha (upper) or alpha (lower)", (_BCD,), False),
    ("proportion-diff", "wald"): ("d ± z_{1-alpha} SE, clipped to [-1, 1]", ("Newcombe (1998), Statistics in Medicine 17:873-890",), False),
    ("proportion-diff", "newcombe"): ("the hybrid score limit from the Wilson limits at level 1 - 2 alpha",
                                      ("Newcombe (1998), Statistics in Medicine 17:873-890",), False),
    ("proportion-diff", "agresti-caffo"): ("the adjusted Wald limit with z_{1-alpha}", ("Agresti & Caffo (2000), The American Statistician 54:280-288",), False),
    ("mean", "bootstrap-percentile"): ("the 1 - alpha (upper) or alpha (lower) percentile of the bootstrap means", (_ET + ", ch. 13",), False),
    ("mean-diff", "bootstrap-percentile"): ("the 1 - alpha (upper) or alpha (lower) percentile of the bootstrap differences", (_ET + ", ch. 13",), False),
    ("mean", "bootstrap-bca"): ("the BCa limit at 1 - alpha", (_ET + ", ch. 14", "Efron (1987), JASA 82:171-185"), False),
    ("mean-diff", "bootstrap-bca"): ("the BCa limit at 1 - alpha", (_ET + ", ch. 14", "Efron (1987), JASA 82:171-185"), False),
    ("mean", "bootstrap-t"): ("x̄ - t*_{alpha} s / sqrt(n) (upper): the studentised (percentile-t) bootstrap limit, "
                              "Hall's bootstrap-t", (_ET + ", ch. 12", "Hall (1988), Annals of Statistics 16:927-953"), False),
    ("mean-diff", "bootstrap-t"): ("the studentised (percentile-t) bootstrap limit of the difference", (_ET + ", ch. 12",
                                   "Hall (1988), Annals of Statistics 16:927-953"), False),
    ("mean", "cluster-t"): ("ratio mean ± t_{1-alpha, k-1} SE (cluster level)", ("Cochran (1977), Sampling Techniques, ch. 6",), True),
    ("proportion", "cluster-t"): ("ratio proportion ± t_{1-alpha, k-1} SE, clipped to [0, 1]",
                                  ("Cochran (1977), Sampling Techniques, ch. 6",), False),
}


def register(method: Method) -> Method:
    key = (method.estimand, method.name)
    if key in REGISTRY:
        raise ValueError(f"interval method {key} registered twice")
    if not method.one_sided and key in ONE_SIDED:
        text, refs, sym = ONE_SIDED[key]
        from dataclasses import replace

        method = replace(method, one_sided=text, one_sided_references=refs, symmetric=sym)
    REGISTRY[key] = method
    return method


def lookup(estimand: str, name: str) -> Method | None:
    """The registered (or engine-derived) method, or None."""
    return REGISTRY.get((estimand, name)) or DERIVED.get((estimand, name))


def get_method(estimand: str, name: str, field_name: str = "method.interval") -> Method:
    """Look up a method for an estimand, with a helpful error."""
    m = lookup(estimand, name)
    if m is not None:
        return m
    else:
        names = methods_for(estimand)
        raise InputError(
            field_name,
            f"unknown interval {name!r} for estimand {estimand!r}; choose one of {', '.join(names)}",
        ) from None


def methods_for(estimand: str) -> list[str]:
    return sorted(n for (e, n) in REGISTRY if e == estimand)
