"""Cornfield's exact conditional interval for the odds ratio.

References
----------
.. [1] Cornfield, J. (1956). A statistical problem arising from
   retrospective studies. Proceedings of the Third Berkeley Symposium on
   Mathematical Statistics and Probability 4, 135-148.
"""

from __future__ import annotations

import numpy as np
from scipy.special import gammaln

from simcheck.intervals.ratios_roots import count_arrays, decreasing_roots

#: padded support cells of the exact conditional interval evaluated at once (memory)
COND_CELLS = 1 << 20


def exact_conditional_limits(xa, na, xb, nb, confidence: float):
    """Cornfield's exact conditional interval for the odds ratio.

    Given the event total m = x_a + x_b, x_a follows Fisher's noncentral
    hypergeometric law, P(x) proportional to C(n_a, x) C(n_b, m - x) psi^x
    on max(0, m - n_b) <= x <= min(n_a, m); the lower limit solves
    P(X >= x_a; psi) = alpha/2 (0 when x_a is the smallest possible count),
    the upper P(X <= x_a; psi) = alpha/2 (infinity when x_a is the
    largest). Each distinct table is solved once; the supports are padded
    into one matrix, in chunks of at most ``COND_CELLS`` cells.
    """
    xa, na, xb, nb = count_arrays(xa, na, xb, nb)
    shape = xa.shape
    if xa.size == 0:
        return np.empty(shape), np.empty(shape)
    tables, back = np.unique(np.stack([v.ravel() for v in (xa, na, xb + xa, nb)], axis=1), axis=0,
                             return_inverse=True)
    lo, hi = np.empty(len(tables)), np.empty(len(tables))
    half = (1.0 - confidence) / 2.0
    width = int(np.max(np.minimum(tables[:, 1], tables[:, 2]) - np.maximum(0, tables[:, 2] - tables[:, 3]))) + 1
    step = max(1, COND_CELLS // width)
    for s0 in range(0, len(tables), step):
        part = slice(s0, s0 + step)
        lw, pos = _conditional_support(tables[part], width)
        lo[part] = decreasing_roots(_conditional_tail(lw, pos, half, upper=False), len(pos))
        hi[part] = decreasing_roots(_conditional_tail(lw, pos, half, upper=True), len(pos))
    back = back.ravel()
    return lo[back].reshape(shape), hi[back].reshape(shape)


def _conditional_support(tables, width):
    """Log weights log C(n_a, x) + log C(n_b, m - x) (up to a constant) on each table's
    support, padded with -inf to ``width`` columns, and the column of the observed x_a."""
    xa, na, m, nb = tables.T
    first = np.maximum(0.0, m - nb)
    xs = first[:, None] + np.arange(width)[None, :]
    valid = xs <= np.minimum(na, m)[:, None]
    xv = np.where(valid, xs, first[:, None])  # keep gammaln's arguments positive off the support
    lw = -(gammaln(xv + 1) + gammaln(na[:, None] - xv + 1) + gammaln(m[:, None] - xv + 1)
           + gammaln(nb[:, None] - m[:, None] + xv + 1))
    return np.where(valid, lw, -np.inf), (xa - first).astype(np.int64)


def _conditional_tail(lw, pos, half, *, upper: bool):
    """f(t, idx), decreasing in t = log psi: P(X <= x_a) - alpha/2, or alpha/2 - P(X >= x_a)."""
    cols = np.arange(lw.shape[1])

    def f(t, idx):
        w = lw[idx] + t[:, None] * cols[None, :]
        w -= w.max(axis=1, keepdims=True)
        cum = np.cumsum(np.exp(w), axis=1)
        total = cum[:, -1]
        p = pos[idx]
        rows = np.arange(idx.size)
        if upper:
            return cum[rows, p] / total - half
        before = np.where(p > 0, cum[rows, np.maximum(p - 1, 0)], 0.0)
        return half - (total - before) / total

    return f
