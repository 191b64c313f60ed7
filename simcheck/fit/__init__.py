"""Fit the data models simcheck knows to pilot values and rank them by AIC.

:func:`fit` takes an array or a pandas Series (:func:`fit_file` a CSV column)
and returns a :class:`FitResult`: every candidate that applies to the values,
ranked by AIC, each with a goodness-of-fit statistic and its ``[data]`` table
in simcheck's own parameterisation, ready to paste into a scenario.

Which candidates apply:

- continuous values: normal; lognormal, gamma, Weibull when all values are
  positive; beta on a bounded range (given, or inferred as [0, 1] when every
  value lies strictly inside it); with zeros among non-negative values, the
  zero-inflated lognormal, gamma and Weibull (zero_prob = the share of zeros).
- whole numbers >= 0: Bernoulli (only 0 and 1), Poisson, negative binomial,
  zero-inflated Poisson (when zeros are present).

AIC compares likelihoods on one footing only: a density, a mass function, or
a density with an atom at 0. Models whose footing differs from the data's
(e.g. a normal density for non-negative values with zeros) are ranked after
those that match and say so in their notes.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np

from simcheck.errors import Collector, InputError
from simcheck.fit import candidates as cands
from simcheck.fit.measures import aic, anderson_darling, chi_square, ks_statistic

__all__ = ["ModelFit", "FitResult", "fit", "fit_file", "read_column", "DESCRIPTIVE"]

DESCRIPTIVE = (
    "goodness-of-fit p-values are descriptive only: the parameters were estimated "
    "from the same values, so the p-values are too large (optimistic)"
)


@dataclass(frozen=True)
class ModelFit:
    """One fitted candidate: its simcheck table, likelihood, AIC and goodness of fit."""

    model: str
    table: dict[str, Any]
    method: str
    parameters: int
    loglik: float
    aic: float
    delta_aic: float
    gof: str
    gof_statistic: float
    gof_pvalue: float | None
    anderson_darling: float | None
    comparable: bool
    notes: tuple[str, ...]
    candidate: Any = None

    def data_table(self, header: str = "[data]") -> str:
        """The TOML ``[data]`` table of this fit."""
        return toml_table(self.table, header)

    def to_dict(self) -> dict[str, Any]:
        return {
            "model": self.model,
            "table": self.table,
            "method": self.method,
            "parameters": self.parameters,
            "loglik": self.loglik,
            "aic": self.aic,
            "delta_aic": self.delta_aic,
            "gof": self.gof,
            "gof_statistic": self.gof_statistic,
            "gof_pvalue": self.gof_pvalue,
            "anderson_darling": self.anderson_darling,
            "comparable": self.comparable,
            "notes": list(self.notes),
        }


@dataclass(frozen=True)
class FitResult:
    """Candidate models ranked by AIC (best first), with what the values looked like."""

    n: int
    source: str
    best: str
    models: tuple[ModelFit, ...]
    whole_numbers: bool
    zeros: int
    mean: float
    sd: float
    notes: tuple[str, ...]
    values: Any = None

    @property
    def best_fit(self) -> ModelFit:
        return self.models[0]

    def data_table(self, model: str | None = None) -> str:
        """The ``[data]`` table of ``model`` (default: the best)."""
        m = self.best_fit if model is None else next(f for f in self.models if f.model == model)
        return m.data_table()

    def to_dict(self) -> dict[str, Any]:
        return {
            "best": self.best,
            "models": [m.to_dict() for m in self.models],
            "n": self.n,
            "source": self.source,
            "whole_numbers": self.whole_numbers,
            "zeros": self.zeros,
            "mean": self.mean,
            "sd": self.sd,
            "sd_divisor": "n - 1",
            "data_table": self.data_table(),
            "notes": list(self.notes),
        }

    def to_frame(self):
        import pandas as pd

        rows = []
        for m in self.models:
            d = m.to_dict()
            d["table"] = toml_inline(m.table)
            d["notes"] = "; ".join(m.notes)
            rows.append(d)
        return pd.DataFrame(rows)


def _toml_value(v: Any) -> str:
    if isinstance(v, dict):
        return toml_inline(v)
    if isinstance(v, str):
        return '"' + v.replace("\\", "\\\\").replace('"', '\\"') + '"'
    if isinstance(v, bool):
        return "true" if v else "false"
    return f"{v:.6g}" if isinstance(v, float) else str(v)


def toml_inline(table: dict[str, Any]) -> str:
    return "{ " + ", ".join(f"{k} = {_toml_value(v)}" for k, v in table.items()) + " }"


def toml_table(table: dict[str, Any], header: str = "[data]") -> str:
    lines = [header]
    lines += [f"{k} = {_toml_value(v)}" for k, v in table.items()]
    return "\n".join(lines)


def _as_values(values: Any, field: str) -> tuple[np.ndarray, int]:
    """Finite float64 values and the count of missing ones dropped; InputError otherwise."""
    import pandas as pd

    if isinstance(values, (pd.Series, pd.Index)):
        series = pd.Series(values).reset_index(drop=True)
    else:
        arr = values if isinstance(values, np.ndarray) else np.asarray(values, dtype=object)
        if arr.ndim != 1:
            raise InputError(field, f"must be one column of values (a 1-d array), got shape {arr.shape}")
        series = pd.Series(arr)
    missing = series.isna()
    num = pd.to_numeric(series[~missing], errors="coerce")
    if num.isna().any():
        i = int(np.flatnonzero(num.isna().to_numpy())[0])
        raise InputError(field, f"holds non-numeric values, e.g. {series[~missing].iloc[i]!r}")
    x = num.to_numpy(dtype=np.float64)
    if not np.all(np.isfinite(x)):
        raise InputError(field, "holds infinite values")
    if x.size < 3:
        raise InputError(field, f"has {x.size} value{'s' if x.size != 1 else ''}; at least 3 are needed to fit a model")
    with np.errstate(over="ignore", invalid="ignore"):  # huge values: the fits say so, not numpy
        spread = float(x.std())
    if spread == 0.0:
        raise InputError(field, f"all {x.size} values are {x[0]:g}; a constant cannot be fitted")
    return x, int(missing.sum())


def _bounds(c: Collector, x: np.ndarray, lower: float | None, upper: float | None) -> tuple[float, float, str] | None:
    if lower is None and upper is None:
        if np.all((x > 0) & (x < 1)):
            return 0.0, 1.0, "inferred (every value lies strictly inside [0, 1])"
        return None
    if lower is None or upper is None:
        c.add("lower" if lower is None else "upper", "give both lower and upper for a bounded range, or neither")
        return None
    lo = c.number("lower", lower)
    hi = c.number("upper", upper)
    if lo is None or hi is None:
        return None
    if not lo < hi:
        c.add("upper", f"must be > lower ({lo:g}), got {hi:g}")
        return None
    if not np.all((x > lo) & (x < hi)):
        c.add("lower", f"every value must lie strictly inside [{lo:g}, {hi:g}] for a beta; "
                       f"the values run from {x.min():g} to {x.max():g}")
        return None
    return float(lo), float(hi), "given"


def _try(fn, *args) -> tuple[cands.Candidate | None, str | None]:
    """A family's fit, or None and a note when scipy's optimiser fails on these values."""
    import warnings

    try:
        with warnings.catch_warnings(), np.errstate(all="ignore"):
            warnings.simplefilter("ignore", RuntimeWarning)
            got = fn(*args)
    except (ValueError, RuntimeError, FloatingPointError, ZeroDivisionError, OverflowError) as exc:
        return None, f"{getattr(fn, '__name__', 'a model')} could not be fitted: {str(exc).splitlines()[0][:120]}"
    if got is not None and not all(np.isfinite(v) for v in _numbers(got.table)):
        return None, f"{got.model} could not be fitted: non-finite parameters"
    return got, None


def _numbers(table: dict[str, Any]):
    for v in table.values():
        if isinstance(v, dict):
            yield from _numbers(v)
        elif isinstance(v, (int, float)):
            yield float(v)


def _candidates(x: np.ndarray, whole: bool, bounds, notes: list[str]) -> list[tuple[cands.Candidate, str]]:
    """(candidate, footing) for every family that applies; footing is density / mass / atom."""
    calls: list[tuple[tuple, str]] = []
    zeros = bool(np.any(x == 0.0))
    if whole and np.all(x >= 0):
        calls += [((cands.bernoulli, x), "mass"), ((cands.poisson, x), "mass"),
                  ((cands.negative_binomial, x), "mass")]
        if zeros:
            calls.append(((cands.zero_inflated_poisson, x), "mass"))
        calls.append(((cands.normal, x), "density"))
    else:
        calls.append(((cands.normal, x), "density"))
        calls += [((f, x), "density") for f in (cands.lognormal, cands.gamma, cands.weibull)]
        if bounds is not None:
            calls.append(((cands.beta, x, *bounds), "density"))
    out = []
    for args, footing in calls:
        got, note = _try(*args)
        if note:
            notes.append(note)
        if got is not None:
            out.append((got, footing))
    pos = x[x > 0]
    if not whole and zeros and np.all(x >= 0) and pos.size >= 3 and float(pos.std()) > 0:
        for family in (cands.lognormal, cands.gamma, cands.weibull):
            inner, note = _try(family, pos)
            if note:
                notes.append("zero-inflated " + note)
            if inner is not None:
                out.append((cands.zero_inflated(x, inner), "atom"))
    return out


def _footing(x: np.ndarray, whole: bool) -> str:
    if whole and np.all(x >= 0):
        return "mass"
    if np.any(x == 0.0) and np.all(x >= 0):
        return "atom"
    return "density"


def _score(x: np.ndarray, cand: cands.Candidate, footing: str, data_footing: str) -> dict[str, Any]:
    with np.errstate(all="ignore"):
        ll = float(np.sum(cand.logpdf(x)))
    notes = list(cand.notes)
    if cand.discrete:
        stat, df, p = chi_square(x, cand)
        gof = f"chi-square (df {df})"
        ad = None
    else:
        stat = ks_statistic(x, cand)
        p = _ks_p(stat, x.size)
        gof = "Kolmogorov-Smirnov"
        ad = anderson_darling(x, cand) if cand.zero_prob == 0.0 else None
    comparable = footing == data_footing
    if not comparable:
        what = {"mass": "a probability mass", "density": "a density", "atom": "a density with an atom at 0"}
        notes.append(f"likelihood is {what[footing]}, the data call for {what[data_footing]}: "
                     "its AIC is not comparable and it is ranked after the comparable models")
    return {"loglik": ll, "aic": aic(ll, cand.k), "gof": gof, "gof_statistic": stat, "gof_pvalue": p,
            "anderson_darling": ad, "comparable": comparable, "notes": tuple(notes)}


def _ks_p(stat: float, n: int) -> float:
    from scipy import stats

    return float(stats.kstwo.sf(stat, n))


def fit(
    values: Any,
    *,
    lower: float | None = None,
    upper: float | None = None,
    source: str = "values",
) -> FitResult:
    """Fit every candidate model that applies to ``values`` and rank them by AIC.

    Parameters
    ----------
    values : array-like or pandas.Series
        The pilot values; missing values (NaN, None) are dropped and noted.
    lower, upper : float, optional
        The bounded range of a beta candidate (both or neither). Without them
        a beta on [0, 1] is fitted when every value lies strictly inside.
    source : str
        Named in messages and the result (e.g. ``"pilot.csv column sbp"``).

    Returns
    -------
    FitResult
        Models ranked by AIC (best first); ``best`` names the first.

    Raises
    ------
    InputError
        Fewer than 3 values, non-numeric or infinite values, constant values,
        or an invalid range.

    References
    ----------
    Akaike, H. (1974). A new look at the statistical model identification.
    IEEE Transactions on Automatic Control 19, 716-723.
    Burnham, K. P. and Anderson, D. R. (2002). Model Selection and Multimodel
    Inference, 2nd ed., Springer, sec. 2.6 (differences of AIC).
    """
    if source == "values" and getattr(values, "name", None) is not None:
        source = f"column {values.name!r}"
    x, dropped = _as_values(values, source)
    c = Collector()
    bounds = _bounds(c, x, lower, upper)
    c.raise_if_any()
    whole = bool(np.all(x == np.floor(x)))
    data_footing = _footing(x, whole)
    scored = []
    fit_notes: list[str] = []
    for cand, footing in _candidates(x, whole, bounds, fit_notes):
        scored.append((cand, _score(x, cand, footing, data_footing)))
    if not scored:
        raise InputError(source, "no candidate model could be fitted to these values"
                         + (f" ({fit_notes[0]})" if fit_notes else ""))
    scored.sort(key=lambda cs: (not cs[1]["comparable"], cs[1]["aic"]))
    best_aic = scored[0][1]["aic"]
    models = tuple(
        ModelFit(model=cand.model, table=_simcheck_table(cand), method=cand.method, parameters=cand.k,
                 delta_aic=s["aic"] - best_aic, candidate=cand, **s)
        for cand, s in scored
    )
    notes = [DESCRIPTIVE, "AIC differences below about 2 do not separate two models (Burnham & Anderson 2002)"]
    notes += fit_notes
    if dropped:
        notes.append(f"{dropped} missing value{'s' if dropped != 1 else ''} dropped")
    if bounds is None and not whole:
        notes.append("no beta fitted: give lower and upper for a bounded range")
    if x.size < 30:
        notes.append(f"with n = {x.size} the ranking is weak: several models usually fit a small pilot equally well")
    with np.errstate(over="ignore", invalid="ignore"):
        mean, sd = float(x.mean()), float(x.std(ddof=1))
    return FitResult(
        n=int(x.size), source=source, best=models[0].model, models=models, whole_numbers=whole,
        zeros=int(np.sum(x == 0.0)), mean=mean, sd=sd, notes=tuple(notes), values=x,
    )


def _simcheck_table(cand: cands.Candidate) -> dict[str, Any]:
    name = "zero-inflated" if cand.model.startswith("zero-inflated") else cand.model
    return {"model": name, **cand.table}


def read_column(path: str, column: str) -> Any:
    """One column of a CSV file as a pandas Series; InputError names the file or column."""
    import os

    import pandas as pd

    if not os.path.isfile(path):
        raise InputError("FILE", f"no such file: {path}")
    try:
        frame = pd.read_csv(path)
    except Exception as e:  # pandas raises many kinds for unreadable files
        first = str(e).splitlines()[0] if str(e) else type(e).__name__
        raise InputError("FILE", f"cannot read {path} as CSV: {first}") from None
    cols = [str(k) for k in frame.columns]
    if column not in cols:
        raise InputError("--column", f"no column {column!r} in {path}; columns: {', '.join(cols)}")
    return frame[frame.columns[cols.index(column)]]


def fit_file(path: str, column: str, *, lower: float | None = None, upper: float | None = None) -> FitResult:
    """:func:`fit` on one column of a CSV file."""
    series = read_column(path, column)
    return fit(series, lower=lower, upper=upper, source=f"column {column!r} of {path}")
