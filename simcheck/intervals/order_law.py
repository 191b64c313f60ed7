"""The law of order statistics of a continuous model, for exact paths of quantile intervals.

For n values from a continuous law with quantile function Q, X_(r) = Q(U_(r))
with U_(r) ~ Beta(r, n - r + 1); given U_(j) = u, (U_(k) - u) / (1 - u) ~
Beta(k - j, n - k + 1) (David & Nagaraja 2003, sec. 2.2 and 2.5; from memory).
So the half-width h = (X_(k) - X_(j)) / 2 of the order-statistic interval has

    P(h <= m) = E[ P(V <= (F(Q(U_(j)) + 2 m) - U_(j)) / (1 - U_(j))) ],

a one-dimensional integral over the law of U_(j) (Gauss-Legendre on its
probability scale), and E[h] = integral of P(h > m) over m >= 0 (adaptive quadrature).
"""

from __future__ import annotations

import math

import numpy as np
from scipy import integrate, optimize, stats

#: Gauss-Legendre nodes on the probability scale of U_(j)
_NODES, _WEIGHTS = np.polynomial.legendre.leggauss(160)
_P = 0.5 * (_NODES + 1.0)
_W = 0.5 * _WEIGHTS
#: grid (per axis) of the weighted half-width values kept for distribution plots
_GRID = 64


class HalfWidthLaw:
    """The law of (X_(k) - X_(j)) / 2 for n values of ``law`` (1 <= j < k <= n)."""

    def __init__(self, law, n: int, j: int, k: int) -> None:
        self.law, self.n, self.j, self.k = law, n, j, k
        u = stats.beta(j, n - j + 1).ppf(_P)
        self.u = np.clip(u, 1e-300, 1.0 - 1e-16)
        self.x = law.ppf(self.u)
        self.v = stats.beta(k - j, n - k + 1)

    def cdf(self, m: float) -> float:
        if m <= 0:
            return 0.0
        with np.errstate(divide="ignore", invalid="ignore"):
            ratio = (self.law.cdf(self.x + 2.0 * m) - self.u) / (1.0 - self.u)
        return float(np.dot(_W, self.v.cdf(np.clip(np.nan_to_num(ratio, nan=1.0), 0.0, 1.0))))

    def mean(self) -> float:
        """E[h] = integral of P(h > m) over m >= 0, up to the 1 - 1e-13 quantile of h."""
        top = self.ppf(1.0 - 1e-13, 1.0)
        val, _ = integrate.quad(lambda m: 1.0 - self.cdf(m), 0.0, top, limit=200, epsabs=1e-13 * top)
        return float(val)

    def ppf(self, p: float, start: float) -> float:
        hi = max(start, 1e-300)
        for _ in range(200):
            if self.cdf(hi) >= p:
                break
            hi *= 2.0
        return float(optimize.brentq(lambda m: self.cdf(m) - p, 0.0, hi, xtol=1e-14 * hi, rtol=1e-12))

    def grid(self) -> np.ndarray:
        p = (np.arange(_GRID) + 0.5) / _GRID
        u = stats.beta(self.j, self.n - self.j + 1).ppf(p)[:, None]
        v = self.v.ppf(p)[None, :]
        uk = u + (1.0 - u) * v
        return (0.5 * (self.law.ppf(uk) - self.law.ppf(u))).ravel()


def half_width_measures(law, n: int, j: int, k: int, margin: float | None, assurance: float) -> dict:
    """Half-width measures of [X_(j), X_(k)] (j = 0 or k = n + 1: an unbounded interval)."""
    weights = np.full(_GRID * _GRID, 1.0 / (_GRID * _GRID))
    if j < 1 or k > n:
        inf = math.inf
        return {"margin_mean": inf, "margin_median": inf, "margin_p90": inf,
                "assurance": None if margin is None else 0.0, "margin_at_assurance": inf,
                "margin_values": np.full(weights.size, inf), "margin_weights": weights}
    h = HalfWidthLaw(law, n, j, k)
    mean = h.mean()
    return {
        "margin_mean": mean,
        "margin_median": h.ppf(0.5, mean),
        "margin_p90": h.ppf(0.9, mean),
        "assurance": None if margin is None else h.cdf(float(margin)),
        "margin_at_assurance": h.ppf(assurance, mean),
        "margin_values": h.grid(), "margin_weights": weights,
    }
