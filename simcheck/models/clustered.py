"""Two-level (clustered) data: cluster sizes and cluster-level sufficient sums.

A sample is k clusters; cluster j holds m_j observations. The engine never
needs the observations themselves, only per-cluster power sums
``s_p,j = sum_i (x_ij - c)^p`` (p = 1, 2 and, for skewness-corrected methods,
3) about a centring constant c, so this module returns those, shape (R, k).

Continuous models
    ``x_ij = mu + b_j + e_ij`` with ``var(b) = ICC sd^2`` and
    ``var(e) = (1 - ICC) sd^2``, where mu and sd are the base model's mean and
    SD. ``e_ij = sqrt(1 - ICC) sd z_ij`` with ``z_ij`` a *standardised draw of
    the base model* ((x - mean) / sd), so the within-cluster law has the base
    model's shape. The cluster effect is normal, or (``effect = "gamma"``) a
    gamma variable shifted to mean 0 and scaled to SD ``sqrt(ICC) sd``, with
    shape ``4 / skew^2`` so that its skewness equals the base model's
    skewness (mirrored when that is negative; shape 1, skewness 2, when the
    base model is symmetric or its skewness unknown).

    Preserved exactly: the mean, the total SD and the ICC (correlation of two
    observations of one cluster). Not preserved: the marginal distribution is
    the base law convolved with the effect law (equal to the base model only
    when ICC = 0), so bounds such as positivity or integer values of the base
    model do not carry over.

0/1 models (``zero_one``)
    Beta-binomial: cluster probability ``p_j ~ Beta(p (1 - ICC) / ICC,
    (1 - p)(1 - ICC) / ICC)`` and the cluster total ``y_j ~ Binomial(m_j,
    p_j)``; the mean is p, and two observations of one cluster correlate with
    exactly ICC. ICC = 0 gives independent Bernoulli(p) values.

Cluster sizes (:func:`size_law`)
    Fixed ``size``; or ``1 + Y`` with mean ``size_mean`` and coefficient of
    variation ``size_cv`` (SD with divisor k, as in Eldridge et al. 2006), Y
    a gamma-Poisson (negative binomial) mixture with mean ``size_mean - 1``
    and variance ``(size_cv size_mean)^2``. That matches the mean and CV
    exactly whenever the variance is at least the Poisson variance
    ``size_mean - 1``; below it Y is binomial with the asked mean and the
    closest variance a whole number of trials allows (:class:`SizeLaw`
    reports the achieved CV, which the engine puts in its notes). Sizes are
    always >= 1.

References
----------
.. [1] Kish, L. (1965). *Survey Sampling*. Wiley, New York.
.. [2] Donner, A. & Klar, N. (2000). *Design and Analysis of Cluster
   Randomization Trials in Health Research*. Arnold, London (ICC of the
   beta-binomial model).
.. [3] Eldridge, S. M., Ashby, D. & Kerry, S. (2006). Sample size for cluster
   randomized trials: effect of coefficient of variation of cluster size and
   analysis method. *International Journal of Epidemiology* 35, 1292-1300.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from simcheck.errors import Collector
from simcheck.models.base import Model

EFFECTS = ("normal", "gamma")

__all__ = ["EFFECTS", "SizeLaw", "size_law", "ClusteredModel"]


@dataclass(frozen=True)
class SizeLaw:
    """Law of one cluster's size: ``fixed`` m, or ``1 + Y`` (Y gamma-Poisson or binomial).

    Attributes
    ----------
    kind : {"fixed", "gamma-poisson", "poisson", "binomial"}
    mean, cv : float
        Exact mean and coefficient of variation of the law.
    asked_cv : float
        The CV that was asked for.
    a, b : float
        Parameters: fixed size (a); gamma shape and scale (gamma-poisson);
        Poisson mean (a); binomial trials and probability.
    """

    kind: str
    mean: float
    cv: float
    asked_cv: float
    a: float = 0.0
    b: float = 0.0

    @property
    def fixed(self) -> bool:
        return self.kind == "fixed"

    def draw(self, rng: np.random.Generator, shape: tuple[int, int]) -> np.ndarray:
        """Sizes (int64, >= 1) of shape ``(replicates, clusters)``."""
        if self.kind == "fixed":
            return np.full(shape, int(self.a), dtype=np.int64)
        if self.kind == "gamma-poisson":
            lam = rng.standard_gamma(self.a, size=shape) * self.b
            return 1 + rng.poisson(lam).astype(np.int64)
        if self.kind == "poisson":
            return 1 + rng.poisson(self.a, size=shape).astype(np.int64)
        return 1 + rng.binomial(int(self.a), self.b, size=shape).astype(np.int64)

    def describe(self) -> str:
        if self.kind == "fixed":
            return f"{int(self.a)} per cluster"
        law = {"gamma-poisson": "1 + gamma-Poisson (negative binomial)", "poisson": "1 + Poisson",
               "binomial": "1 + binomial"}[self.kind]
        return f"varying: {law}, mean {self.mean:g}, CV {self.cv:.4g} (asked {self.asked_cv:g})"


def size_law(size: int | None = None, size_mean: float | None = None, size_cv: float | None = None) -> SizeLaw:
    """The cluster-size law for a fixed ``size`` or for ``size_mean`` and ``size_cv``.

    Raises
    ------
    InputError
        Naming ``clusters.size`` / ``clusters.size_mean`` / ``clusters.size_cv``.
    """
    c = Collector()
    if size is not None:
        if size_mean is not None or size_cv is not None:
            c.add("clusters.size", "give size (equal clusters) or size_mean and size_cv (varying sizes), not both")
        else:
            m = c.number("clusters.size", size, low=1, integer=True)
            c.raise_if_any()
            return SizeLaw("fixed", float(m), 0.0, 0.0, a=float(m))
    if size_mean is None:
        c.add("clusters.size", "missing (required: size, or size_mean and size_cv)")
        c.raise_if_any()
    mu = c.number("clusters.size_mean", size_mean, low=1)
    cv = c.number("clusters.size_cv", 0.0 if size_cv is None else size_cv, low=0)
    c.raise_if_any()
    a = mu - 1.0
    var = (cv * mu) ** 2
    if a <= 0.0:
        # every size is 1: no spread is possible with sizes >= 1 and mean 1
        return SizeLaw("fixed", 1.0, 0.0, cv, a=1.0)
    if math.isclose(var, a, rel_tol=1e-12):
        return SizeLaw("poisson", mu, math.sqrt(a) / mu, cv, a=a)
    if var > a:
        shape = a * a / (var - a)
        return SizeLaw("gamma-poisson", mu, cv, cv, a=shape, b=a / shape)
    # under-dispersed: binomial(t, a/t) has variance a (1 - a/t) <= a
    t = math.ceil(a) if var == 0.0 else max(math.ceil(a), round(a * a / (a - var)))
    q = a / t
    if q >= 1.0 - 1e-15:
        return SizeLaw("fixed", mu, 0.0, cv, a=float(round(mu)))
    achieved = math.sqrt(a * (1.0 - q)) / mu
    return SizeLaw("binomial", mu, achieved, cv, a=float(t), b=q)


class ClusteredModel:
    """Two-level version of a base model with a given ICC (see the module docstring).

    Parameters
    ----------
    model : Model
        Base model: its mean and SD (continuous) or p (0/1 models).
    icc : float
        Intracluster correlation in [0, 1).
    effect : {"normal", "gamma"}
        Law of the cluster effect (continuous models only).
    """

    def __init__(self, model: Model, icc: float, effect: str = "normal") -> None:
        c = Collector()
        c.number("clusters.icc", icc, low=0, high=1, high_open=True)
        if effect not in EFFECTS:
            c.add("clusters.effect", f"must be one of {', '.join(EFFECTS)}, got {effect!r}")
        c.raise_if_any()
        self.model = model
        self.icc = float(icc)
        self.effect = effect
        self.binary = bool(model.zero_one)
        self.mean = float(model.mean)
        self.sd = float(model.sd)
        if self.binary:
            p = self.mean
            self.alpha = p * (1.0 - icc) / icc if icc > 0 else math.inf
            self.beta = (1.0 - p) * (1.0 - icc) / icc if icc > 0 else math.inf
        self.sd_between = self.sd * math.sqrt(self.icc)
        self.sd_within = self.sd * math.sqrt(1.0 - self.icc)
        self.normal_within = (not self.binary) and model.normal_params() is not None
        skew = model.skewness
        if skew is None or not math.isfinite(skew) or abs(skew) < 1e-12:
            self.gamma_shape, self.gamma_sign = 1.0, 1.0
        else:
            self.gamma_shape, self.gamma_sign = 4.0 / (skew * skew), math.copysign(1.0, skew)

    # ------------------------------------------------------------------
    def fast_ok(self, powers: int) -> bool:
        """True when per-cluster sums can be drawn from their exact law (no observations)."""
        return self.binary or (self.normal_within and powers <= 2)

    def describe(self) -> str:
        if self.binary:
            if self.icc == 0:
                return f"ICC 0: independent Bernoulli({self.mean:g}) values"
            return f"beta-binomial: cluster p_j ~ Beta({self.alpha:.4g}, {self.beta:.4g}), ICC {self.icc:g}"
        eff = "normal" if self.effect == "normal" else f"gamma (shape {self.gamma_shape:.4g}, shifted to mean 0)"
        return (f"value = mean + b_j + e_ij: cluster effect b_j {eff} with SD {self.sd_between:.4g}, "
                f"e_ij a standardised {self.model.describe()} draw with SD {self.sd_within:.4g}; "
                f"mean {self.mean:g}, SD {self.sd:g} and ICC {self.icc:g} as asked")

    def _effects(self, rng: np.random.Generator, shape) -> np.ndarray:
        if self.icc == 0.0:
            return np.zeros(shape)
        if self.effect == "normal":
            return rng.standard_normal(shape) * self.sd_between
        k = self.gamma_shape
        g = rng.standard_gamma(k, size=shape)
        g -= k
        g *= self.gamma_sign * self.sd_between / math.sqrt(k)
        return g

    def cluster_sums(
        self,
        rng: np.random.Generator,
        sizes: np.ndarray,
        *,
        centre: float = 0.0,
        powers: int = 2,
        fast: bool = True,
    ) -> tuple[np.ndarray, np.ndarray, np.ndarray | None]:
        """Per-cluster sums of ``(x - centre)^p`` for p = 1, 2 (and 3 if ``powers == 3``).

        Parameters
        ----------
        rng : Generator
            Stream to draw from.
        sizes : ndarray of int
            Cluster sizes, shape (R, k), all >= 1.
        centre : float
            Subtracted from every value before the powers (precision).
        powers : {2, 3}
        fast : bool
            Draw cluster sums from their exact law when possible (normal
            within-cluster values: cluster mean normal, within sum of squares
            sigma_w^2 chi2(m - 1), independent); otherwise draw every value.

        Returns
        -------
        s1, s2, s3 : ndarray of shape (R, k) (s3 None unless ``powers == 3``)
        """
        m = np.asarray(sizes, dtype=np.int64)
        mf = m.astype(np.float64)
        if self.binary:
            if self.icc == 0.0:
                y = rng.binomial(m, self.mean).astype(np.float64)
            else:
                p = rng.beta(self.alpha, self.beta, size=m.shape)
                y = rng.binomial(m, p).astype(np.float64)
            # a cluster's values are y ones and m - y zeros
            one, zero = 1.0 - centre, -centre
            s1 = y * one + (mf - y) * zero
            s2 = y * one**2 + (mf - y) * zero**2
            s3 = y * one**3 + (mf - y) * zero**3 if powers == 3 else None
            return s1, s2, s3
        b = self._effects(rng, m.shape)
        b += self.mean - centre
        if fast and self.fast_ok(powers):
            sw = self.sd_within
            cm = rng.standard_normal(m.shape)
            cm *= sw / np.sqrt(mf)
            cm += b
            ss = rng.standard_gamma((mf - 1.0) / 2.0) * (2.0 * sw * sw)
            s1 = cm * mf
            s2 = ss + s1 * cm
            return s1, s2, None
        flat = m.ravel()
        total = int(flat.sum())
        x = self.model.draw(rng, (1, total)).ravel()
        x -= self.mean
        x *= self.sd_within / self.sd
        x += np.repeat(b.ravel(), flat)
        starts = np.zeros(flat.size, dtype=np.int64)
        np.cumsum(flat[:-1], out=starts[1:])
        s1 = np.add.reduceat(x, starts).reshape(m.shape)
        sq = x * x
        s2 = np.add.reduceat(sq, starts).reshape(m.shape)
        s3 = None
        if powers == 3:
            sq *= x
            s3 = np.add.reduceat(sq, starts).reshape(m.shape)
        return s1, s2, s3
