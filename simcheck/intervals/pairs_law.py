"""The exact law of Pearson's r under bivariate normality, and the Fisher-z interval's measures from it.

The density of the sample correlation r of n bivariate normal pairs with
correlation rho (Hotelling 1953, eq. (27); the form with the Gauss
hypergeometric function):

    f(r) = (n - 2) Gamma(n - 1) (1 - rho^2)^((n-1)/2) (1 - r^2)^((n-4)/2)
           / (sqrt(2 pi) Gamma(n - 1/2) (1 - rho r)^(n - 3/2))
           * 2F1(1/2, 1/2; n - 1/2; (1 + rho r) / 2).

It is evaluated on the Fisher scale zeta = atanh(r), where the law is close
to normal with SD 1 / sqrt(n - 3), on a fine uniform grid, in logarithms
(the powers overflow for large n), and integrated by the trapezoid rule
(spectrally accurate for a smooth density that vanishes at both ends of the
grid). The Fisher-z interval tanh(zeta_hat ± c), c = z_{1-alpha/2} /
sqrt(n - 3), covers rho exactly when |zeta_hat - atanh(rho)| <= c, and its
half-width (tanh(zeta_hat + c) - tanh(zeta_hat - c)) / 2 =
sinh(2c) / (cosh(2 zeta_hat) + cosh(2c)) falls as |zeta_hat| grows, so
every measure is an integral of the law of zeta_hat.

References
----------
.. [1] Hotelling, H. (1953). New light on the correlation coefficient and its
   transforms. Journal of the Royal Statistical Society B 15, 193-232
   (equation number from memory).
.. [2] Fisher, R. A. (1915). Frequency distribution of the values of the
   correlation coefficient in samples from an indefinitely large
   population. Biometrika 10, 507-521.
"""

from __future__ import annotations

import math

import numpy as np
from scipy import special

#: grid points of the law of zeta_hat and its half-range in SDs 1 / sqrt(n - 3)
GRID_POINTS = 4001
GRID_SDS = 16.0


def zeta_grid(n: int, rho: float) -> tuple[np.ndarray, np.ndarray]:
    """A uniform grid of zeta = atanh(r) and the density of zeta_hat on it (n >= 4 pairs)."""
    centre = math.atanh(rho)
    half = GRID_SDS / math.sqrt(n - 3.0)
    zeta = np.linspace(centre - half, centre + half, GRID_POINTS)
    return zeta, np.exp(log_density_zeta(zeta, n, rho))


def log_density_zeta(zeta: np.ndarray, n: int, rho: float) -> np.ndarray:
    """log of the density of atanh(r) at ``zeta`` (n bivariate normal pairs, correlation ``rho``)."""
    r = np.tanh(zeta)
    # 1 - r^2 = sech^2(zeta), computed without cancellation: log sech^2 = -2 log cosh
    log_sech2 = -2.0 * (np.abs(zeta) + np.log1p(np.exp(-2.0 * np.abs(zeta))) - math.log(2.0))
    const = (math.log(n - 2.0) + math.lgamma(n - 1.0) + 0.5 * (n - 1.0) * math.log1p(-rho * rho)
             - 0.5 * math.log(2.0 * math.pi) - math.lgamma(n - 0.5))
    hyp = special.hyp2f1(0.5, 0.5, n - 0.5, 0.5 * (1.0 + rho * r))
    # the Jacobian dr / dzeta = sech^2 adds one more log_sech2
    return (const + 0.5 * (n - 4.0) * log_sech2 + log_sech2 - (n - 1.5) * np.log1p(-rho * r) + np.log(hyp))


def _cdf(zeta: np.ndarray, dens: np.ndarray) -> np.ndarray:
    step = zeta[1] - zeta[0]
    cdf = np.concatenate([[0.0], np.cumsum(0.5 * (dens[1:] + dens[:-1]) * step)])
    # Euler-Maclaurin end correction of each partial trapezoid sum: - h^2 / 12 (f'(x) - f'(x_0))
    slope = np.gradient(dens, step, edge_order=2)
    cdf -= step * step / 12.0 * (slope - slope[0])
    return cdf / cdf[-1]


def hermite_cdf(t, zeta: np.ndarray, cdf: np.ndarray, dens: np.ndarray) -> np.ndarray:
    """The CDF between grid points by cubic Hermite interpolation (values and slopes = density): error O(h^4)."""
    t = np.asarray(t, dtype=np.float64)
    step = zeta[1] - zeta[0]
    i = np.clip(((t - zeta[0]) // step).astype(np.intp), 0, len(zeta) - 2)
    u = np.clip((t - zeta[i]) / step, 0.0, 1.0)
    u2, u3 = u * u, u * u * u
    v = ((2 * u3 - 3 * u2 + 1) * cdf[i] + (u3 - 2 * u2 + u) * step * dens[i]
         + (-2 * u3 + 3 * u2) * cdf[i + 1] + (u3 - u2) * step * dens[i + 1])
    return np.where(t <= zeta[0], 0.0, np.where(t >= zeta[-1], 1.0, v))


def fisher_z_measures(n: int, rho: float, confidence: float, margin: float | None, assurance: float,
                      probs: np.ndarray) -> dict:
    """Exact measures of the Fisher-z interval for n bivariate normal pairs.

    ``probs`` are the levels at which the half-width's quantiles are given
    as ``margin_values`` (equal weights), for figures.
    """
    if n < 4:
        nan = math.nan
        return {"coverage": 0.0, "miss_low": 0.0, "miss_high": 0.0, "margin_mean": nan, "margin_median": nan,
                "margin_p90": nan, "assurance": None if margin is None else 0.0, "margin_at_assurance": nan}
    zeta, dens = zeta_grid(n, rho)
    cdf = _cdf(zeta, dens)
    c = float(special.ndtri(0.5 + confidence / 2.0)) / math.sqrt(n - 3.0)
    centre = math.atanh(rho)

    def F(t):
        return hermite_cdf(t, zeta, cdf, dens / (cdf[-1] if cdf[-1] > 0 else 1.0))

    miss_low = float(F(centre - c))
    miss_high = float(1.0 - F(centre + c))
    half = math.sinh(2 * c) / (np.cosh(2 * zeta) + math.cosh(2 * c))
    step = zeta[1] - zeta[0]
    w = dens * step
    w[0] *= 0.5
    w[-1] *= 0.5
    mean = float(np.sum(w * half) / np.sum(w))

    def share_within(m):
        """P(half-width <= m) = P(|zeta_hat| >= t_m)."""
        if m >= math.tanh(c):
            return 1.0
        t = 0.5 * math.acosh(max(math.sinh(2 * c) / m - math.cosh(2 * c), 1.0))
        return float(F(-t) + 1.0 - F(t))

    # G(t) = P(|zeta_hat| < t), tabulated once: every quantile of the half-width is read from it
    t_grid = np.linspace(0.0, float(np.max(np.abs(zeta))), 2 * GRID_POINTS)
    g_grid = np.maximum.accumulate(F(t_grid) - F(-t_grid))

    def quantile(q):
        """The half-width's q-quantile: the t with P(|zeta_hat| < t) = 1 - q, then its half-width."""
        t = np.interp(1.0 - np.asarray(q, dtype=np.float64), g_grid, t_grid)
        return math.sinh(2 * c) / (np.cosh(2 * t) + math.cosh(2 * c))

    return {
        "coverage": 1.0 - miss_low - miss_high, "miss_low": miss_low, "miss_high": miss_high,
        "margin_mean": mean, "margin_median": float(quantile(0.5)), "margin_p90": float(quantile(0.9)),
        "assurance": None if margin is None else share_within(margin),
        "margin_at_assurance": float(quantile(assurance)),
        "margin_values": quantile(probs),
        "margin_weights": np.full(len(probs), 1.0 / len(probs)),
    }
