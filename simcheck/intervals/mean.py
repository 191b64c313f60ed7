"""Analytic intervals for a mean and a difference of two means.

All functions work on :class:`~simcheck.intervals.base.Summary` objects whose
fields are arrays broadcasting together (leading axis: replicates). They are
pure, vectorised and silent: a zero sample variance gives a zero-width
interval (for ``t``, ``welch``, ``johnson-t``), never a warning. The engine
always passes n >= 2, so n - 1 > 0.
"""

from __future__ import annotations

import functools
import threading

import numpy as np
from scipy import stats

from simcheck.intervals.base import Method, Summary, register


#: scipy before 1.13 computes the t quantile with Fortran code (cdflib) that keeps
#: global state: two threads calling it at once can loop for ever (seen with scipy
#: 1.11, the declared floor). Every t quantile in simcheck goes through t_ppf.
_T_PPF_LOCK = threading.Lock()


def t_ppf(q, df):
    """``scipy.stats.t.ppf(q, df)``, one call at a time across threads (see ``_T_PPF_LOCK``)."""
    with _T_PPF_LOCK:
        return stats.t.ppf(q, df)


def _t_quantile(q: float, df) -> np.ndarray | float:
    """t quantile; scalar degrees of freedom are cached (scipy's ppf costs far
    more than the interval arithmetic on a chunk of replicates), and so are
    the short rows of degrees of freedom of a whole curve (one per n), which
    the engine asks for once per slab of replicates."""
    if np.ndim(df) == 0:
        return _t_scalar(float(q), float(df))
    df = np.asarray(df, dtype=float)
    if df.size > _T_ROW_MAX or np.ndim(q) != 0 or (df.ndim > 1 and df.shape[0] > 1):  # per-replicate df (Welch): not cached
        return t_ppf(q, df)
    key = (float(q), df.shape, df.tobytes())
    with _T_ROW_LOCK:
        hit = _T_ROWS.get(key)
    if hit is None:
        hit = np.asarray(t_ppf(q, df), dtype=float)
        hit.flags.writeable = False  # shared by every caller
        with _T_ROW_LOCK:
            if len(_T_ROWS) >= _T_ROW_ENTRIES:
                _T_ROWS.pop(next(iter(_T_ROWS)))
            _T_ROWS[key] = hit
    return hit


#: rows of degrees of freedom cached by _t_quantile: at most this many values each, this many rows
_T_ROW_MAX = 20_000
_T_ROW_ENTRIES = 32
_T_ROWS: dict = {}
_T_ROW_LOCK = threading.Lock()


@functools.lru_cache(maxsize=4096)
def _t_scalar(q: float, df: float) -> float:
    return float(t_ppf(q, df))


@functools.lru_cache(maxsize=64)
def _z_quantile(q: float) -> float:
    return float(stats.norm.ppf(q))


def _alpha_half(confidence) -> float:
    return (1.0 - np.asarray(confidence, dtype=float)) / 2.0


def _as_float(a) -> np.ndarray:
    return np.asarray(a, dtype=float)


# ---------------------------------------------------------------- one sample


def z_interval(s: Summary, confidence: float) -> tuple[np.ndarray, np.ndarray]:
    """Known-SD normal interval: mean ± z sd_true / sqrt(n).

    Parameters
    ----------
    s : Summary
        Sample summaries; ``s.sd_true`` (the data model's SD) is required.
    confidence : float
        Confidence level in (0, 1).

    Returns
    -------
    lower, upper : ndarray

    References
    ----------
    Common practice (normal theory with a known variance).
    """
    if s.sd_true is None:
        raise ValueError("the z interval needs Summary.sd_true (the known SD)")
    mean = _as_float(s.mean)
    z = _z_quantile(1.0 - _alpha_half(confidence))
    half = z * _as_float(s.sd_true) / np.sqrt(_as_float(s.n))
    return mean - half, mean + half


def t_interval(s: Summary, confidence: float) -> tuple[np.ndarray, np.ndarray]:
    """Student t interval: mean ± t_{n-1} s / sqrt(n).

    Parameters
    ----------
    s : Summary
        Sample summaries (n >= 2).
    confidence : float
        Confidence level in (0, 1).

    Returns
    -------
    lower, upper : ndarray

    References
    ----------
    Student (1908). The probable error of a mean. *Biometrika* 6(1), 1-25.
    """
    mean, half = t_centre_half(s, confidence)
    return mean - half, mean + half


def t_centre_half(s: Summary, confidence: float) -> tuple[np.ndarray, np.ndarray]:
    """Centre and half-width of the t interval (see :func:`t_interval`)."""
    n = _as_float(s.n)
    mean = _as_float(s.mean)
    t = _t_quantile(1.0 - _alpha_half(confidence), n - 1.0)
    # half = sqrt(var * t^2 / n): the per-n factor first, so that only three
    # passes touch the (replicates, n) arrays in whole-curve evaluations
    half = np.multiply(_as_float(s.var), t * t / n)
    np.maximum(half, 0.0, out=half)  # rounding can leave a tiny negative variance
    np.sqrt(half, out=half)
    return mean, half


def johnson_t_interval(s: Summary, confidence: float) -> tuple[np.ndarray, np.ndarray]:
    """Johnson's skewness-corrected t interval.

    ``mean + m3 / (6 s^2 n) ± t_{n-1} s / sqrt(n)``, where ``m3`` is the third
    central sample moment (divisor n, Johnson's mu3-hat) and ``s^2`` the
    unbiased variance.

    Johnson (1978) corrects the t statistic to
    ``t1 = [(xbar - mu) + m3/(6 s^2 n) + m3/(3 s^4) (xbar - mu)^2] / (s/sqrt(n))``.
    The interval here inverts ``t1`` with the quadratic term dropped, which is of
    smaller order than the bias term near the centre of the interval; inverting
    the full quadratic is not done. Zero variance (then also m3 = 0) gives a
    zero-width interval at the mean.

    Parameters
    ----------
    s : Summary
        Sample summaries; ``s.m3`` is required.
    confidence : float
        Confidence level in (0, 1).

    Returns
    -------
    lower, upper : ndarray

    References
    ----------
    Johnson, N. J. (1978). Modified t tests and confidence intervals for
    asymmetrical populations. *Journal of the American Statistical
    Association* 73(363), 536-544.
    """
    if s.m3 is None:
        raise ValueError("the johnson-t interval needs Summary.m3 (third central moment)")
    n = _as_float(s.n)
    var = np.maximum(_as_float(s.var), 0.0)
    m3 = _as_float(s.m3)
    num = m3 / (6.0 * n)
    num, var_b = np.broadcast_arrays(num, var)
    # var == 0 implies m3 == 0: the correction is 0, not 0/0
    shift = np.divide(num, var_b, out=np.zeros(num.shape, dtype=float), where=var_b > 0)
    centre = _as_float(s.mean) + shift
    t = _t_quantile(1.0 - _alpha_half(confidence), n - 1.0)
    half = t * np.sqrt(var / n)
    return centre - half, centre + half


def cox_interval(s: Summary, confidence: float) -> tuple[np.ndarray, np.ndarray]:
    """Cox's interval for the mean of a lognormal population.

    ``s`` summarises the *log* values (mean ``ybar``, unbiased variance ``s^2``).
    The interval for the original-scale mean ``exp(mu + sigma^2/2)`` is
    ``exp(ybar + s^2/2 ± z sqrt(s^2/n + s^4 / (2 (n - 1))))``.

    Parameters
    ----------
    s : Summary
        Summaries of the log-transformed sample (n >= 2).
    confidence : float
        Confidence level in (0, 1).

    Returns
    -------
    lower, upper : ndarray
        Limits on the original scale.

    References
    ----------
    Zhou, X.-H. and Gao, S. (1997). Confidence intervals for the log-normal
    mean. *Statistics in Medicine* 16(7), 783-790 (Cox's method).
    Land, C. E. (1972). An evaluation of approximate confidence interval
    estimation methods for lognormal means. *Technometrics* 14(1), 145-158.
    """
    n = _as_float(s.n)
    var = np.maximum(_as_float(s.var), 0.0)
    centre = _as_float(s.mean) + var / 2.0
    z = _z_quantile(1.0 - _alpha_half(confidence))
    half = z * np.sqrt(var / n + var * var / (2.0 * (n - 1.0)))
    return np.exp(centre - half), np.exp(centre + half)


# ---------------------------------------------------------------- two samples


def z_diff_interval(a: Summary, b: Summary, confidence: float) -> tuple[np.ndarray, np.ndarray]:
    """Known-SD interval for mean_a - mean_b: diff ± z sqrt(sd_a^2/n_a + sd_b^2/n_b).

    Parameters
    ----------
    a, b : Summary
        Summaries of the two groups; ``sd_true`` required for both.
    confidence : float
        Confidence level in (0, 1).

    Returns
    -------
    lower, upper : ndarray

    References
    ----------
    Common practice (normal theory with known variances).
    """
    if a.sd_true is None or b.sd_true is None:
        raise ValueError("the z interval needs Summary.sd_true for both groups")
    diff = _as_float(a.mean) - _as_float(b.mean)
    z = _z_quantile(1.0 - _alpha_half(confidence))
    se = np.sqrt(_as_float(a.sd_true) ** 2 / _as_float(a.n) + _as_float(b.sd_true) ** 2 / _as_float(b.n))
    return diff - z * se, diff + z * se


def t_diff_interval(a: Summary, b: Summary, confidence: float) -> tuple[np.ndarray, np.ndarray]:
    """Pooled-variance t interval for mean_a - mean_b with n_a + n_b - 2 df.

    Parameters
    ----------
    a, b : Summary
        Summaries of the two groups (n >= 2 each).
    confidence : float
        Confidence level in (0, 1).

    Returns
    -------
    lower, upper : ndarray

    References
    ----------
    Student (1908). The probable error of a mean. *Biometrika* 6(1), 1-25;
    the two-sample pooled form is common practice.
    """
    na, nb = _as_float(a.n), _as_float(b.n)
    df = na + nb - 2.0
    pooled = ((na - 1.0) * np.maximum(_as_float(a.var), 0.0) + (nb - 1.0) * np.maximum(_as_float(b.var), 0.0)) / df
    se = np.sqrt(pooled * (1.0 / na + 1.0 / nb))
    t = _t_quantile(1.0 - _alpha_half(confidence), df)
    diff = _as_float(a.mean) - _as_float(b.mean)
    return diff - t * se, diff + t * se


def welch_df(a: Summary, b: Summary) -> np.ndarray:
    """Welch–Satterthwaite degrees of freedom.

    ``(va/na + vb/nb)^2 / ((va/na)^2/(na-1) + (vb/nb)^2/(nb-1))``; where both
    variances are zero (df undefined) the pooled df ``na + nb - 2`` is
    returned, which does not matter because the interval then has zero width.

    References
    ----------
    Welch, B. L. (1947). The generalization of "Student's" problem when several
    different population variances are involved. *Biometrika* 34, 28-35.
    Satterthwaite, F. E. (1946). An approximate distribution of estimates of
    variance components. *Biometrics Bulletin* 2(6), 110-114.
    """
    na, nb = _as_float(a.n), _as_float(b.n)
    ua = np.maximum(_as_float(a.var), 0.0) / na
    ub = np.maximum(_as_float(b.var), 0.0) / nb
    num = (ua + ub) ** 2
    den = ua * ua / (na - 1.0) + ub * ub / (nb - 1.0)
    num, den, fallback = np.broadcast_arrays(num, den, na + nb - 2.0)
    out = np.array(fallback, dtype=float, copy=True)
    np.divide(num, den, out=out, where=den > 0)
    return out


def welch_interval(a: Summary, b: Summary, confidence: float) -> tuple[np.ndarray, np.ndarray]:
    """Welch interval for mean_a - mean_b (unequal variances).

    ``diff ± t_df sqrt(va/na + vb/nb)`` with the Welch–Satterthwaite df
    (:func:`welch_df`).

    Parameters
    ----------
    a, b : Summary
        Summaries of the two groups (n >= 2 each).
    confidence : float
        Confidence level in (0, 1).

    Returns
    -------
    lower, upper : ndarray

    References
    ----------
    Welch, B. L. (1947). The generalization of "Student's" problem when several
    different population variances are involved. *Biometrika* 34, 28-35.
    """
    na, nb = _as_float(a.n), _as_float(b.n)
    se = np.sqrt(np.maximum(_as_float(a.var), 0.0) / na + np.maximum(_as_float(b.var), 0.0) / nb)
    t = t_ppf(1.0 - _alpha_half(confidence), welch_df(a, b))
    diff = _as_float(a.mean) - _as_float(b.mean)
    return diff - t * se, diff + t * se


# ---------------------------------------------------------------- registry

register(Method(
    name="z", estimand="mean", kind="summary", func=z_interval, shift_equivariant=True,
    needs_true_sd=True, summary="normal interval with the known (model) SD",
    references=("common practice",),
))
register(Method(
    name="t", estimand="mean", kind="summary", func=t_interval, shift_equivariant=True,
    centre_half=t_centre_half,
    summary="Student t interval, n - 1 df",
    references=("Student (1908), Biometrika 6:1-25",),
))
register(Method(
    name="johnson-t", estimand="mean", kind="summary", func=johnson_t_interval, shift_equivariant=True,
    needs_m3=True, summary="t interval shifted by Johnson's skewness correction m3/(6 s^2 n)",
    references=("Johnson (1978), JASA 73:536-544",),
))
register(Method(
    name="cox", estimand="mean", kind="log", func=cox_interval, shift_equivariant=False,
    summary="Cox's method for a lognormal mean (from the logs)",
    references=("Zhou & Gao (1997), Statistics in Medicine 16:783-790", "Land (1972), Technometrics 14:145-158"),
))
register(Method(
    name="z", estimand="mean-diff", kind="summary2", func=z_diff_interval, shift_equivariant=True,
    needs_true_sd=True, summary="normal interval for a difference with the known (model) SDs",
    references=("common practice",),
))
register(Method(
    name="t", estimand="mean-diff", kind="summary2", func=t_diff_interval, shift_equivariant=True,
    summary="pooled-variance t interval, n_a + n_b - 2 df",
    references=("Student (1908), Biometrika 6:1-25",),
))
register(Method(
    name="welch", estimand="mean-diff", kind="summary2", func=welch_interval, shift_equivariant=True,
    summary="Welch interval with Welch-Satterthwaite df",
    references=("Welch (1947), Biometrika 34:28-35", "Satterthwaite (1946), Biometrics Bulletin 2:110-114"),
))
