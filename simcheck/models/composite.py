"""Models built from other models or from outside: zero-inflated, mixture,
empirical (resampled pilot data), the 0/1 event indicator of any model, and
any frozen scipy.stats distribution.

``zero-inflated``, ``mixture`` and ``empirical`` are in the registry;
:class:`EventModel` (built by the scenario layer for a proportion estimand on
a non-bernoulli model) and :class:`ScipyModel` (Python API,
:func:`simcheck.models.from_scipy`) are not.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np
from scipy import stats

from simcheck.errors import Collector, InputError
from simcheck.files import read_csv_column, regular_file, resolve_data_path
from simcheck.models.base import Model, StoredMoments, ZeroOneMoments, register
from simcheck.models.continuous import ParamTable, event_args, prob_ok
from simcheck.models.discrete import SUM_TOL

__all__ = ["ZeroInflated", "Mixture", "Empirical", "EventModel", "ScipyModel"]


def _build(spec: Any, base_dir: str | None, allow_outside_files: bool = False) -> Model:
    # Imported here: simcheck.models imports this module while it initialises.
    from simcheck.models import make_model

    return make_model(spec, base_dir=base_dir, allow_outside_files=allow_outside_files)


def _raw_moments(m: Model) -> tuple[float, float, float | None]:
    """E[X], E[X^2], E[X^3] (None when the skewness is unknown)."""
    mu, sd, g = m.mean, m.sd, m.skewness
    r2 = sd * sd + mu * mu
    r3 = None if g is None else g * sd**3 + 3 * mu * sd * sd + mu**3
    return mu, r2, r3


def _from_raw(r1: float, r2: float, r3: float | None) -> tuple[float, float, float | None]:
    """Mean, SD and skewness from the first three raw moments."""
    var = max(r2 - r1 * r1, 0.0)
    sd = math.sqrt(var)
    if r3 is None or var == 0.0:
        return r1, sd, None
    mu3 = r3 - 3 * r1 * r2 + 2 * r1**3
    return r1, sd, mu3 / var**1.5


def _table_of(m: Model) -> dict[str, Any]:
    return {"model": m.name, **m.params()}


@register("zero-inflated")
class ZeroInflated(StoredMoments):
    """0 with probability ``zero_prob``, otherwise a draw from the ``inner`` model.

    Parameters (table keys)
    -----------------------
    zero_prob : float in (0, 1)
    inner : table, a model, e.g. ``{model = "lognormal", mean = 50, cv = 1}``
    """

    name = "zero-inflated"
    wants_base_dir = True

    def __init__(self, params: dict[str, Any], *, base_dir: str | None = None,
                 allow_outside_files: bool = False) -> None:
        t = ParamTable(self.name, params, ["zero_prob", "inner"])
        pi = t.number("zero_prob", low=0, high=1, low_open=True, high_open=True)
        prob_ok(t.c, "zero_prob", pi, upper=True)
        inner = None
        if not t.has("inner"):
            t.c.add("inner", 'missing; give the non-zero part as a table, e.g. inner = {model = "lognormal", mean = 50, cv = 1}')
        else:
            try:
                inner = _build(t.p["inner"], base_dir, allow_outside_files)
            except InputError as e:
                t.c.extend(e.prefixed("inner"))
        t.done()
        self._given = t.given()
        self.zero_prob, self.inner = float(pi), inner
        self.discrete = inner.discrete
        self.zero_one = inner.zero_one
        self.iid = inner.iid
        self.true_value_note = inner.true_value_note
        w = 1.0 - self.zero_prob
        r1, r2, r3 = _raw_moments(inner)
        self._m, self._s, self._g = _from_raw(w * r1, w * r2, None if r3 is None else w * r3)

    def bernoulli_p(self) -> float | None:
        # Zeros mixed into iid 0/1 draws are Bernoulli((1 - zero_prob) p).
        return self._m if self.zero_one and self.iid else None

    def params(self) -> dict[str, Any]:
        return {"zero_prob": self._given["zero_prob"], "inner": _table_of(self.inner)}

    def describe(self) -> str:
        return f"zero-inflated(zero_prob={self.zero_prob:g}, inner={self.inner.describe()})"

    def event_probability(self, *, values=None, above=None) -> float:
        vals, a = event_args(values, above)
        pi = self.zero_prob
        if vals is not None:
            zero_in = bool(np.any(vals == 0.0))
            return pi * zero_in + (1 - pi) * self.inner.event_probability(values=list(vals))
        return pi * (0.0 > a) + (1 - pi) * self.inner.event_probability(above=a)

    def _draw(self, rng, size, out) -> None:
        self.inner._draw(rng, size, out)
        zero = rng.random(size=size) < self.zero_prob
        out[zero] = 0.0


@register("mixture")
class Mixture(StoredMoments):
    """Component k with probability ``weights[k]``.

    Parameters (table keys)
    -----------------------
    weights : list of float in (0, 1], summing to 1
    components : list of model tables, e.g.
        ``[{model = "normal", mean = 10, sd = 2}, {model = "normal", mean = 30, sd = 5}]``
    """

    name = "mixture"
    wants_base_dir = True

    def __init__(self, params: dict[str, Any], *, base_dir: str | None = None,
                 allow_outside_files: bool = False) -> None:
        t = ParamTable(self.name, params, ["weights", "components"])
        w = t.numbers("weights", low=0, high=1, low_open=True)
        for i, wi in enumerate(w or []):
            prob_ok(t.c, f"weights[{i}]", wi)
        comps: list[Model] | None = None
        if not t.has("components"):
            t.c.add("components", 'missing; give a list of model tables, e.g. components = [{model = "normal", mean = 10, sd = 2}, ...]')
        elif not isinstance(t.p["components"], (list, tuple)) or not t.p["components"]:
            t.c.add("components", f"must be a non-empty list of model tables, got {t.p['components']!r}")
        else:
            comps, ok = [], True
            for i, spec in enumerate(t.p["components"]):
                try:
                    comps.append(_build(spec, base_dir, allow_outside_files))
                except InputError as e:
                    t.c.extend(e.prefixed(f"components[{i}]"))
                    ok = False
            if not ok:
                comps = None
        if w is not None:
            n_c = len(t.p["components"]) if isinstance(t.p.get("components"), (list, tuple)) else None
            if n_c is not None and n_c and len(w) != n_c:
                t.c.add("weights", f"has {len(w)} entries but components has {n_c}; give one weight per component")
            else:
                s = math.fsum(w)
                if abs(s - 1.0) > SUM_TOL:
                    t.c.add("weights", f"must sum to 1, got {s:.12g}")
        t.done()
        self._given = t.given()
        wa = np.asarray(w, dtype=np.float64)
        self.weights = wa / wa.sum()
        cum = np.cumsum(self.weights)
        cum[-1] = 1.0
        self._cum = cum
        self.components = comps
        self.discrete = all(c.discrete for c in comps)
        self.zero_one = all(c.zero_one for c in comps)
        self.iid = all(c.iid for c in comps)
        notes = [c.true_value_note for c in comps if c.true_value_note]
        self.true_value_note = "; ".join(notes) if notes else None
        raws = [_raw_moments(c) for c in comps]
        r1 = float(sum(wk * r[0] for wk, r in zip(self.weights, raws)))
        r2 = float(sum(wk * r[1] for wk, r in zip(self.weights, raws)))
        r3 = None if any(r[2] is None for r in raws) else float(sum(wk * r[2] for wk, r in zip(self.weights, raws)))
        self._m, self._s, self._g = _from_raw(r1, r2, r3)

    def bernoulli_p(self) -> float | None:
        # A mixture of iid Bernoulli laws is itself Bernoulli(sum w_k p_k).
        return self._m if self.zero_one and self.iid else None

    def params(self) -> dict[str, Any]:
        return {"weights": self._given["weights"], "components": [_table_of(c) for c in self.components]}

    def describe(self) -> str:
        parts = ", ".join(f"{w:g}*{c.describe()}" for w, c in zip(self.weights, self.components))
        return f"mixture({parts})"

    def event_probability(self, *, values=None, above=None) -> float:
        vals, a = event_args(values, above)
        kw = {"values": list(vals)} if vals is not None else {"above": a}
        return float(sum(w * c.event_probability(**kw) for w, c in zip(self.weights, self.components)))

    def _draw(self, rng, size, out) -> None:
        which = np.searchsorted(self._cum, rng.random(size=size), side="right")
        for k, comp in enumerate(self.components):
            mask = which == k
            cnt = int(np.count_nonzero(mask))
            if cnt:
                out[mask] = comp.draw(rng, (1, cnt)).ravel()


def pd_series(values: np.ndarray):
    """A pandas Series of already-checked numbers (for the shared checks of pilot values)."""
    import pandas as pd

    return pd.Series(values)


@register("empirical")
class Empirical(StoredMoments):
    """Resampling with replacement from pilot values: a CSV column or values given directly.

    The true value of the simulation is the pilot mean (the resampling law's
    mean); ``sd`` and ``skewness`` are those of the pilot values as a
    population: the SD uses divisor n (``sd_divisor = "n"``), because the
    resampling law puts mass 1/n on each value; the usual sample SD (divisor
    n - 1) is ``sample_sd``. Empty cells (missing values) are dropped (see
    ``notes``). ``discrete`` is True when every pilot value is a whole number
    (counts, ratings), where the sample mean lives on a lattice.

    Parameters (table keys)
    -----------------------
    file : str, path to a CSV (relative to the scenario file's folder)
    column : str, the column name
    or values : list of numbers (from Python also a numpy array or a pandas Series)
    """

    name = "empirical"
    wants_base_dir = True
    sd_divisor = "n"

    def __init__(self, params: dict[str, Any], *, base_dir: str | None = None,
                 allow_outside_files: bool = False) -> None:
        t = ParamTable(self.name, params, ["file", "column", "values"])
        self.notes: tuple[str, ...] = ()
        which = t.choose(("file", "column"), ("values",))
        file = column = path = None
        values = None
        if which == 0:
            file, column = t.text("file"), t.text("column")
            path, values = self._from_file(t.c, file, column, base_dir, allow_outside_files)
        elif which == 1:
            values = self._from_values(t.c, t.p["values"])
        t.done()
        self._given = t.given()
        if which == 1:
            # the values actually resampled, as plain floats (a Series or array is not a table value)
            self._given["values"] = [float(v) for v in values]
        self.file, self.column, self.path = file, column, path
        self.values = values
        n = values.size
        self._m = float(values.mean())
        self._s = float(values.std())
        self.sample_sd = float(values.std(ddof=1))
        self._g = float(stats.skew(values, bias=True)) if self._s > 0 else None
        self.discrete = bool(np.all(values == np.floor(values)))
        self.zero_one = bool(np.all((values == 0.0) | (values == 1.0)))
        where = f"file {file}" if file is not None else "values given directly"
        note = (f"true value = mean of the pilot data (n={n}, {where}); its SD {self._s:.6g} uses divisor n "
                f"(the sample SD with divisor n - 1 is {self.sample_sd:.6g})")
        if self.notes:
            note += "; " + "; ".join(self.notes)
        self.true_value_note = note

    @classmethod
    def from_values(cls, values: Any) -> "Empirical":
        """The empirical model of values given from Python (list, numpy array or pandas Series)."""
        return cls({"values": values})

    def _from_file(self, c: Collector, file, column, base_dir, allow_outside_files: bool = False):
        # Errors name the line and column, never a cell's text (see simcheck.files).
        if file is None:
            return None, None
        try:
            path = str(resolve_data_path(file, base_dir, field="file", allow_outside=allow_outside_files))
            if column is None:
                regular_file(path, field="file", what="data file")
                return path, None
            v, k = read_csv_column(path, column, file_field="file", column_field="column",
                                   value_field="column", name=file)
        except InputError as e:
            for pr in e.problems:
                c.add(pr.field, pr.message if file in pr.message else f"{file}: {pr.message}")
            return None, None
        if k:
            self.notes = (f"{k} empty value{'s' if k != 1 else ''} dropped from column {column!r}",)
        return path, self._numeric(c, "column", pd_series(v), f"column {column!r} of {file}")

    def _from_values(self, c: Collector, raw: Any) -> np.ndarray | None:
        import pandas as pd

        if isinstance(raw, (str, bytes, dict)) or not hasattr(raw, "__len__"):
            c.add("values", f"must be a list of numbers, got {raw!r}")
            return None
        series = pd.Series(np.asarray(raw, dtype=object).ravel() if not isinstance(raw, pd.Series) else raw)
        if series.map(lambda v: isinstance(v, bool)).any():
            c.add("values", "must be numbers, got a boolean")
            return None
        return self._numeric(c, "values", series.reset_index(drop=True), "values")

    def _numeric(self, c: Collector, field: str, col, what: str) -> np.ndarray | None:
        import pandas as pd

        empty = col.isna()
        num = pd.to_numeric(col, errors="coerce")
        bad = num.isna() & ~empty
        if bad.any():
            i = int(np.flatnonzero(bad.to_numpy())[0])
            c.add(field, f"{what} holds non-numeric values, e.g. {col.iloc[i]!r} in data row {i + 1}")
            return None
        v = num[~empty].to_numpy(dtype=np.float64)
        if not np.all(np.isfinite(v)):
            c.add(field, f"{what} holds infinite values")
            return None
        if v.size < 2:
            c.add(field, f"{what} has {v.size} value{'s' if v.size != 1 else ''}; at least 2 are needed to resample")
            return None
        if float(v.std()) == 0.0:
            c.add(field, f"{what} has one value only ({v[0]:g}); the data would not vary")
            return None
        k = int(empty.sum())
        if k:
            self.notes = (f"{k} empty value{'s' if k != 1 else ''} dropped from {what}",)
        return v

    def bernoulli_p(self) -> float | None:
        return self._m if self.zero_one else None

    def params(self) -> dict[str, Any]:
        return dict(self._given)

    def describe(self) -> str:
        if self.file is None:  # values given: their count, not every value
            return f"empirical({self.values.size} pilot values, mean {self._m:g})"
        return super().describe()

    def event_probability(self, *, values=None, above=None) -> float:
        vals, a = event_args(values, above)
        if vals is not None:
            return float(np.isin(self.values, vals).mean())
        return float((self.values > a).mean())

    def _draw(self, rng, size, out) -> None:
        idx = rng.integers(0, self.values.size, size=size)
        np.take(self.values, idx, out=out)


class EventModel(ZeroOneMoments):
    """0/1 indicator that a draw of ``inner`` falls in ``values`` or above ``above``.

    Built by the scenario layer for a proportion estimand on a model other
    than ``bernoulli`` (``[target] event_values`` / ``event_above``). Its
    mean is ``p = inner.event_probability(...)``, exact. Errors name
    ``event_values`` / ``event_above`` (keys of ``[target]``).

    Parameters
    ----------
    inner : Model
    values : list of float, optional
        Values that count (for discrete models).
    above : float, optional
        Values strictly above this count.
    """

    name = "event"
    discrete = True
    zero_one = True

    def __init__(self, inner: Model, values: list[float] | None = None, above: float | None = None) -> None:
        if not isinstance(inner, Model):
            raise TypeError(f"inner must be a simcheck model, got {type(inner).__name__}")
        vals, a = event_args(values, above)
        field = "event_values" if vals is not None else "event_above"
        p = float(inner.event_probability(values=None if vals is None else list(vals), above=a))
        what = f"share of {inner.describe()} values {self._event_text(vals, a)}"
        if p <= 0.0 and vals is not None and not inner.discrete:
            raise InputError(
                "event_values",
                f"model {inner.describe()} is continuous: any single value has probability 0; use event_above instead",
            )
        if p <= 0.0:
            raise InputError(field, f"the event never happens (P = 0): {what}")
        if p >= 1.0:
            raise InputError(field, f"the event always happens (P = 1): {what}")
        c = Collector()
        if not prob_ok(c, field, p, upper=True):
            raise InputError(field, f"the event's probability {p:.3g} is too close to {'1' if p > 0.5 else '0'} "
                                    f"for simulated draws to follow it (the generator's resolution is 2^-53): {what}")
        self.inner, self.values, self.above, self.p = inner, vals, a, p
        self.iid = inner.iid
        self.true_value_note = inner.true_value_note

    @staticmethod
    def _event_text(vals, a) -> str:
        if vals is not None:
            return "in {" + ", ".join(f"{v:g}" for v in vals) + "}"
        return f"> {a:g}"

    def bernoulli_p(self) -> float | None:
        return self.p if self.inner.iid else None

    def params(self) -> dict[str, Any]:
        d: dict[str, Any] = {"inner": _table_of(self.inner)}
        if self.values is not None:
            d["event_values"] = [float(v) for v in self.values]
        else:
            d["event_above"] = self.above
        return d

    def describe(self) -> str:
        return f"share of {self.inner.describe()} values {self._event_text(self.values, self.above)}"

    def event_probability(self, *, values=None, above=None) -> float:
        vals, a = event_args(values, above)
        if vals is not None:
            return float((1 - self.p) * (0.0 in vals) + self.p * (1.0 in vals))
        return float((1 - self.p) * (0.0 > a) + self.p * (1.0 > a))

    def _draw(self, rng, size, out) -> None:
        self.inner._draw(rng, size, out)
        if self.values is None:
            np.greater(out, self.above, out=out)
        elif self.values.size == 1:
            np.equal(out, self.values[0], out=out)
        else:
            out[...] = np.isin(out, self.values)


class ScipyModel(StoredMoments):
    """Any frozen scipy.stats distribution, continuous or discrete.

    Mean, SD and skewness come from ``dist.stats(moments="mvs")``; a law
    without finite mean or variance is refused (field ``distribution``).
    Draws use ``dist.rvs(size=..., random_state=rng)``.

    Parameters
    ----------
    dist : frozen scipy.stats distribution, e.g. ``scipy.stats.gamma(2, scale=3)``,
        or a discrete law built with ``scipy.stats.rv_discrete(values=(xk, pk))``
        (frozen or not)
    discrete : bool, optional
        Override the detection from ``isinstance(dist.dist, rv_discrete)``.
    """

    name = "scipy"

    def __init__(self, dist, discrete: bool | None = None) -> None:
        if isinstance(dist, stats.rv_discrete) and hasattr(dist, "xk") and hasattr(dist, "pk"):
            # rv_discrete(values=(xk, pk)) is fully specified without freezing
            dist = dist()
        base = getattr(dist, "dist", None)
        if not isinstance(base, (stats.rv_continuous, stats.rv_discrete)):
            raise InputError("distribution", f"must be a frozen scipy.stats distribution, got {dist!r}")
        self.dist = dist
        self.dist_name = getattr(base, "name", type(base).__name__)
        is_disc = isinstance(base, stats.rv_discrete)
        self.discrete = is_disc if discrete is None else bool(discrete)
        with np.errstate(all="ignore"):
            m, v, g = (float(x) for x in dist.stats(moments="mvs"))
        if not (math.isfinite(m) and math.isfinite(v)):
            raise InputError("distribution", f"{self.describe()} has no finite mean and variance (mean={m:g}, variance={v:g})")
        if not v > 0:
            raise InputError("distribution", f"{self.describe()} has variance 0; the data would not vary")
        self._m, self._s = m, math.sqrt(v)
        self._g = g if math.isfinite(g) else None
        lo, hi = dist.support()
        self.zero_one = bool(is_disc and lo >= 0 and hi <= 1)

    def bernoulli_p(self) -> float | None:
        return self._m if self.zero_one else None

    def params(self) -> dict[str, Any]:
        d: dict[str, Any] = {"distribution": self.dist_name, "args": [_num(a) for a in self.dist.args],
                             "kwds": {k: _num(v) for k, v in self.dist.kwds.items()}}
        xk = _support_points(self.dist)
        if xk is not None:
            d["distribution"] = "rv_discrete"
            d["values"] = [float(v) for v in xk]
            d["probs"] = [float(v) for v in self.dist.dist.pk]
        return d

    def describe(self) -> str:
        xk = _support_points(self.dist)
        if xk is not None:
            pk = self.dist.dist.pk
            pairs = ", ".join(f"{x:g}: {p:g}" for x, p in zip(xk[:6], pk[:6]))
            more = f", ... ({xk.size} values)" if xk.size > 6 else ""
            loc = self.dist.kwds.get("loc")
            shift = f" + {float(loc):g}" if loc else ""
            return f"scipy.stats.rv_discrete(values {{{pairs}{more}}}){shift}"
        args = [f"{_num(a):g}" if isinstance(_num(a), float) else repr(a) for a in self.dist.args]
        args += [f"{k}={_num(v):g}" if isinstance(_num(v), float) else f"{k}={v!r}" for k, v in self.dist.kwds.items()]
        return f"scipy.stats.{self.dist_name}({', '.join(args)})"

    def event_probability(self, *, values=None, above=None) -> float:
        vals, a = event_args(values, above)
        if vals is not None:
            if not isinstance(self.dist.dist, stats.rv_discrete):
                return 0.0
            return float(np.sum(self.dist.pmf(vals)))
        return float(self.dist.sf(a))

    def _draw(self, rng, size, out) -> None:
        out[...] = self.dist.rvs(size=size, random_state=rng)


def _support_points(dist) -> np.ndarray | None:
    """The support of a frozen ``rv_discrete(values=...)`` law, else None."""
    base = getattr(dist, "dist", None)
    if isinstance(base, stats.rv_discrete) and hasattr(base, "xk") and hasattr(base, "pk"):
        return np.asarray(base.xk, dtype=float)
    return None


def _num(v: Any) -> Any:
    try:
        return float(v)
    except (TypeError, ValueError):
        return v
