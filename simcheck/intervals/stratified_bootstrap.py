"""Rescaling bootstrap for a stratified sample drawn without replacement in each stratum.

Rao & Wu (1988): in stratum h, with n_h sampled units of mean ybar_h, draw
m_h units with replacement from the n_h and rescale the resample mean
ybar*_h to

    ytilde_h = ybar_h + lambda_h (ybar*_h - ybar_h),
    lambda_h = sqrt(m_h (1 - f_h) / (n_h - 1)),   f_h = n_h / N_h.

The bootstrap estimate of the stratified mean is ``sum_h W_h ytilde_h``. Its
bootstrap mean is ``ybar_st`` and its bootstrap variance is exactly the usual
estimator ``sum_h W_h^2 (1 - f_h) s_h^2 / n_h`` (Rao & Wu 1988;
Cochran 1977, Theorem 5.4), whatever m_h. Here ``m_h = n_h - 1``, the choice
Rao & Wu recommend and survey software uses, so ``lambda_h = sqrt(1 - f_h)``:
the rescaled mean is a convex combination of ybar_h and ybar*_h, so a 0/1
variable's estimates stay in [0, 1]. A census stratum (f_h = 1) contributes
its exact mean. The interval is the percentile interval of the ``resamples``
rescaled estimates (quantiles by linear interpolation, as
``numpy.quantile`` and ``scipy.stats.bootstrap``).

Pure numpy. Work is cut into tiles of replicates (and of resamples when one
replicate's resamples alone are large) whose sizes depend only on the n_h and
the number of resamples, and the tiles draw from ``rng`` in a fixed order, so
the result is a pure function of the samples, ``resamples`` and the state of
``rng``; memory stays near ``TILE_VALUES`` drawn indices.

References
----------
.. [1] Rao, J. N. K. & Wu, C. F. J. (1988). Resampling inference with complex
   survey data. *Journal of the American Statistical Association* 83,
   231-241.
.. [2] Cochran, W. G. (1977). *Sampling Techniques*, 3rd ed. Wiley, sections
   5.2-5.4 (the stratified mean and its variance estimator).
"""

from __future__ import annotations

from typing import Sequence

import numpy as np

__all__ = ["rescaled_estimates", "rescaled_bootstrap", "rescale_factors", "TILE_VALUES"]

#: drawn indices held at once (8 bytes each)
TILE_VALUES = 1 << 20


def rescale_factors(n_h: Sequence[int], fractions: Sequence[float]) -> np.ndarray:
    """``lambda_h = sqrt(m_h (1 - f_h) / (n_h - 1))`` with ``m_h = n_h - 1``: ``sqrt(1 - f_h)``."""
    f = np.clip(np.asarray(fractions, dtype=np.float64), 0.0, 1.0)
    n = np.asarray(n_h, dtype=np.float64)
    m = n - 1.0
    return np.sqrt(m * (1.0 - f) / (n - 1.0))


def _tile_rows(n_h: Sequence[int], resamples: int) -> int:
    return int(max(1, TILE_VALUES // max(1, resamples * max(int(k) - 1 for k in n_h))))


def _add_stratum(est: np.ndarray, x: np.ndarray, scale: float, rng: np.random.Generator) -> None:
    """Add ``scale (ybar*_h - ybar_h)`` for every resample of every row of ``x`` (t, n_h) to ``est`` (t, B)."""
    t, n = x.shape
    m = n - 1
    B = est.shape[1]
    centre = x.mean(axis=1)
    flat = np.ascontiguousarray(x).ravel()
    offset = (np.arange(t, dtype=np.intp) * n)[:, None, None]
    cols = max(1, TILE_VALUES // max(1, t * m))
    for c0 in range(0, B, cols):
        c1 = min(B, c0 + cols)
        idx = rng.integers(0, n, size=(t, c1 - c0, m), dtype=np.intp)
        idx += offset
        star = flat[idx].sum(axis=2)
        star /= m
        star -= centre[:, None]
        star *= scale
        est[:, c0:c1] += star


def rescaled_estimates(samples: Sequence[np.ndarray], weights: Sequence[float], fractions: Sequence[float],
                       rng: np.random.Generator, resamples: int, rows: slice | None = None) -> np.ndarray:
    """Rescaled bootstrap estimates of the stratified mean, shape (rows, resamples).

    Parameters
    ----------
    samples : sequence of ndarray
        One (R, n_h) array per stratum (n_h >= 2): R independent samples.
    weights : sequence of float
        Stratum weights ``W_h = N_h / N``.
    fractions : sequence of float
        Sampling fractions ``f_h = n_h / N_h`` (0 without the finite
        population correction).
    rng : numpy.random.Generator
        Draws the resampled indices.
    resamples : int
        Bootstrap resamples B per sample.
    rows : slice, optional
        Only these rows of the samples (default all).

    Returns
    -------
    ndarray
        ``sum_h W_h (ybar_h + lambda_h (ybar*_h - ybar_h))`` per row and resample.

    References
    ----------
    .. [1] Rao, J. N. K. & Wu, C. F. J. (1988). Resampling inference with
       complex survey data. *JASA* 83, 231-241.
    """
    xs = [np.asarray(x, dtype=np.float64) for x in samples]
    if rows is not None:
        xs = [x[rows] for x in xs]
    W = np.asarray(weights, dtype=np.float64)
    lam = rescale_factors([x.shape[1] for x in xs], fractions)
    centre = sum(w * x.mean(axis=1) for w, x in zip(W, xs))
    est = np.repeat(np.asarray(centre, dtype=np.float64)[:, None], int(resamples), axis=1)
    for w, l, x in zip(W, lam, xs):
        if w * l > 0:
            _add_stratum(est, x, float(w * l), rng)
    return est


def rescaled_bootstrap(samples: Sequence[np.ndarray], weights: Sequence[float], fractions: Sequence[float],
                       confidence: float, rng: np.random.Generator, resamples: int) -> tuple[np.ndarray, np.ndarray]:
    """Percentile interval of the rescaled bootstrap estimates of a stratified mean, one per row.

    Parameters
    ----------
    samples, weights, fractions, rng, resamples
        As in :func:`rescaled_estimates`.
    confidence : float
        Two-sided level in (0, 1).

    Returns
    -------
    lower, upper : ndarray
        Shape (R,).

    References
    ----------
    .. [1] Rao, J. N. K. & Wu, C. F. J. (1988). Resampling inference with
       complex survey data. *JASA* 83, 231-241.
    """
    R = int(np.shape(samples[0])[0])
    alpha = 1.0 - float(confidence)
    step = _tile_rows([np.shape(x)[1] for x in samples], int(resamples))
    lo = np.empty(R)
    hi = np.empty(R)
    for r0 in range(0, R, step):
        r1 = min(R, r0 + step)
        est = rescaled_estimates(samples, weights, fractions, rng, resamples, rows=slice(r0, r1))
        q = np.quantile(est, [alpha / 2.0, 1.0 - alpha / 2.0], axis=1)
        lo[r0:r1], hi[r0:r1] = q[0], q[1]
    return lo, hi
