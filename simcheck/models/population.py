"""Finite populations and samples drawn from them without replacement.

A :class:`FinitePopulation` is a fixed array of N unit values, drawn once from
a data model or read from a CSV column. Its true values are the population
mean and, for 0/1 populations, the share of events K / N; its variance is
S^2 with divisor N - 1 (Cochran's convention, under which the variance of the
mean of n units drawn without replacement is (1 - n/N) S^2 / n).

:func:`sample_indices` draws uniformly random, uniformly *ordered* samples
without replacement, vectorised over replicates, so that every prefix of a
sample of n_max units is itself a simple random sample (nested curves).

References
----------
.. [1] Cochran, W. G. (1977). *Sampling Techniques*, 3rd ed. Wiley, chapter 2
   (simple random sampling, the finite population correction).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from numbers import Real
from pathlib import Path
from typing import Any

import numpy as np

from simcheck.errors import Collector, InputError
from simcheck.files import read_csv_column
from simcheck.models.base import Model

#: largest population drawn from a model (8 bytes per unit held in memory)
DRAW_MAX = 50_000_000
#: rejection sampling when n * REJECT_RATIO <= N (collisions rare; faster there, measured)
REJECT_RATIO = 8

__all__ = ["FinitePopulation", "draw_population", "fixed_count_population", "read_population", "population_from_values",
           "value_array", "sample_indices", "fpc_factor", "block_columns", "DRAW_MAX"]


@dataclass(frozen=True)
class FinitePopulation:
    """N fixed unit values.

    Attributes
    ----------
    values : ndarray
        The unit values (read-only float64).
    source : str
        Where they came from (for notes).
    """

    values: np.ndarray = field(repr=False)
    source: str = "model"

    @property
    def size(self) -> int:
        return int(self.values.size)

    @property
    def mean(self) -> float:
        return float(self.values.mean())

    @property
    def S(self) -> float:
        """Population SD with divisor N - 1."""
        return float(self.values.std(ddof=1))

    @property
    def zero_one(self) -> bool:
        v = self.values
        return bool(np.all((v == 0.0) | (v == 1.0)))

    @property
    def events(self) -> int:
        """Number of units with value 1 (0/1 populations)."""
        return int(np.count_nonzero(self.values == 1.0))


def _frozen(values: np.ndarray, source: str) -> FinitePopulation:
    v = np.ascontiguousarray(values, dtype=np.float64)
    v.setflags(write=False)
    return FinitePopulation(values=v, source=source)


def draw_population(model: Model, size: int, rng: np.random.Generator) -> FinitePopulation:
    """N values drawn once from ``model`` (iid), the fixed population of one evaluation.

    Raises
    ------
    InputError
        ``population.size`` not a whole number in [2, DRAW_MAX].
    """
    c = Collector()
    c.number("population.size", size, low=2, high=DRAW_MAX, integer=True)
    c.raise_if_any()
    x = model.draw(rng, (1, int(size))).ravel()
    return _frozen(x, f"drawn once from {model.describe()}")


def fixed_count_population(size: int, events: int) -> FinitePopulation:
    """A 0/1 population of ``size`` units with exactly ``events`` of value 1.

    The order of the units does not matter (samples are uniformly random
    subsets), so the events come first. Only the simulated paths form the
    values; the exact path uses N and K alone.

    Raises
    ------
    InputError
        ``population.size`` not in [2, DRAW_MAX] or ``population.events`` not
        a whole number in [0, size].
    """
    c = Collector()
    c.number("population.size", size, low=2, high=DRAW_MAX, integer=True)
    c.number("population.events", events, low=0, high=size, integer=True)
    c.raise_if_any()
    v = np.zeros(int(size), dtype=np.float64)
    v[: int(events)] = 1.0
    return _frozen(v, f"{int(events)} with the event (a fixed count)")


def read_population(file: str, column: str, size: int | None = None) -> FinitePopulation:
    """The population from a CSV column (empty cells skipped).

    Read with :func:`simcheck.files.read_csv_column`: ragged rows and cells
    that are not finite numbers (also the text ``nan``) are refused, naming
    the line and column, never the cell's text.

    Raises
    ------
    InputError
        ``population.file`` / ``population.column`` / ``population.size`` problems.
    """
    p = Path(file)
    v, _ = read_csv_column(p, column, file_field="population.file", column_field="population.column", name=file)
    if v.size < 2:
        raise InputError("population.file", f"{file}: column {column!r} needs at least 2 values, got {v.size}")
    if size is not None and int(size) != v.size:
        raise InputError("population.size", f"must match the {v.size} values in population.file, got {size}")
    return _frozen(v, f"read from {p.name}, column {column!r}")


def value_array(c: Collector, field_name: str, values: Any, *, min_len: int = 2) -> np.ndarray | None:
    """Data values given directly (a list, a numpy array or a pandas Series) as a
    read-only float64 array, or None after recording one problem in ``c``.

    The values must be finite real numbers, at least ``min_len`` of them, and
    not all equal (data that never vary give no interval to check).
    """
    if hasattr(values, "to_numpy") and not isinstance(values, (str, bytes, dict)):
        values = values.to_numpy()
    if isinstance(values, (str, bytes, dict)) or not isinstance(values, (list, tuple, np.ndarray)):
        c.add(field_name, f"must be a list (or array) of numbers, got {type(values).__name__}")
        return None
    try:
        raw = np.asarray(values)
    except ValueError:  # ragged nesting
        raw = np.asarray(values, dtype=object)
    if raw.ndim != 1:
        c.add(field_name, f"must be one-dimensional, got shape {raw.shape}")
        return None
    if raw.dtype.kind not in "iuf":  # bool, text, objects: refuse rather than guess
        items = values.tolist() if isinstance(values, np.ndarray) else list(values)
        bad = next((i for i, x in enumerate(items) if isinstance(x, bool) or not isinstance(x, Real)), 0)
        c.add(f"{field_name}[{bad}]", f"must be a number, got {items[bad]!r}")
        return None
    arr = raw.astype(np.float64, copy=True)
    finite = np.isfinite(arr)
    if not finite.all():
        i = int(np.flatnonzero(~finite)[0])
        c.add(f"{field_name}[{i}]", f"must be a finite number, got {float(arr[i])!r}")
        return None
    if arr.size < min_len:
        c.add(field_name, f"needs at least {min_len} values, got {arr.size}")
        return None
    if float(arr.min()) == float(arr.max()):
        c.add(field_name, f"holds one value only ({arr[0]:g}); the data would not vary")
        return None
    arr.setflags(write=False)
    return arr


def population_from_values(values: Any, field_name: str = "population.values") -> FinitePopulation:
    """The population given as its unit values (list, numpy array or pandas Series).

    Raises
    ------
    InputError
        Not finite numbers, fewer than 2 values, or all values equal.
    """
    c = Collector()
    arr = value_array(c, field_name, values)
    c.raise_if_any()
    return _frozen(arr, f"given as {arr.size} values")


def sample_indices(rng: np.random.Generator, N: int, shape: tuple[int, int], *, ordered: bool = True) -> np.ndarray:
    """Indices of ``shape[0]`` samples of ``shape[1]`` units drawn without replacement from N.

    Each row is a uniformly random subset, in uniformly random order when
    ``ordered`` (needed when prefixes are used; otherwise the order is
    arbitrary and the shuffle is skipped). Two
    vectorised algorithms, chosen by (N, n) only so results are reproducible:

    * ``n * REJECT_RATIO <= N``: draw with replacement, then redraw the
      duplicates until none are left. The kept set is a function of iid
      uniform draws through set operations only, so its law is invariant
      under relabelling the units and hence uniform over n-subsets; a random
      permutation then orders it.
    * otherwise: iid uniform keys for all N units; the n smallest keys, in key
      order, are a uniformly random ordered sample.
    """
    b, n = int(shape[0]), int(shape[1])
    if n > N:
        raise InputError("n", f"must be <= population.size ({N}) when sampling without replacement, got {n}")
    if n * REJECT_RATIO <= N:
        idx = rng.integers(0, N, size=(b, n), dtype=np.int64)
        while True:
            idx.sort(axis=1)
            dup = idx[:, 1:] == idx[:, :-1]
            count = int(np.count_nonzero(dup))
            if not count:
                break
            r, cidx = np.nonzero(dup)
            idx[r, cidx + 1] = rng.integers(0, N, size=count, dtype=np.int64)
        if not ordered:
            return idx
        order = np.argsort(rng.random((b, n)), axis=1)
        return np.take_along_axis(idx, order, axis=1)
    keys = rng.random((b, N))
    if n < N:
        idx = np.argpartition(keys, n - 1, axis=1)[:, :n]
    else:
        idx = np.broadcast_to(np.arange(N), (b, N)).copy()
    if not ordered:
        return idx
    order = np.argsort(np.take_along_axis(keys, idx, axis=1), axis=1)
    return np.take_along_axis(idx, order, axis=1)


def fpc_factor(n, N: int) -> np.ndarray:
    """sqrt(1 - n/N), the finite population correction of a half-width (Cochran 1977, ch. 2);
    :func:`simcheck.formulas.fpc_variance_factor` is the one definition."""
    from simcheck.formulas import fpc_variance_factor

    return np.sqrt(fpc_variance_factor(n, N, "S2"))


def block_columns(N: int, n: int) -> int:
    """Values held per replicate while sampling (N for the key method, else n)."""
    return int(n) if n * REJECT_RATIO <= N else int(N)

