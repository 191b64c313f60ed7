"""The data-model interface.

A data model draws blocks of shape (replicates, n) from a numpy Generator and
knows the true value of its estimand (its mean; for 0/1 models the event
probability). Models are immutable after construction and validate their
parameters in the constructor, raising :class:`simcheck.errors.InputError`
with all problems at once (field names relative to the model's table, e.g.
``cv``; the scenario layer prefixes ``data.``).
"""

from __future__ import annotations

from abc import ABC, abstractmethod
from typing import Any, Callable

import numpy as np


class Model(ABC):
    """Base class of every data-generating model.

    Subclasses set ``name`` (the registry name used in scenario files) and
    implement :meth:`_draw`, :attr:`mean`, :attr:`sd` and :meth:`params`.
    """

    name: str = "model"
    #: True when values are integers or a finite set (coverage may oscillate in n).
    discrete: bool = False
    #: True when the n values of one replicate are independent draws.
    iid: bool = True
    #: True when every value is 0 or 1 (proportion estimands need this).
    zero_one: bool = False
    #: Said in outputs when the "true value" is not a model parameter
    #: (e.g. the pilot mean of an empirical model).
    true_value_note: str | None = None

    # --- what the engine needs -------------------------------------------
    @property
    @abstractmethod
    def mean(self) -> float:
        """True mean of one observation."""

    @property
    @abstractmethod
    def sd(self) -> float:
        """True standard deviation of one observation."""

    @property
    def skewness(self) -> float | None:
        """True skewness, or None when unknown or undefined."""
        return None

    @abstractmethod
    def _draw(self, rng: np.random.Generator, size: tuple[int, int], out: np.ndarray) -> None:
        """Fill ``out`` (float64, C-contiguous, shape ``size``) with draws."""

    def draw(
        self,
        rng: np.random.Generator,
        size: tuple[int, int],
        out: np.ndarray | None = None,
    ) -> np.ndarray:
        """Draw a (replicates, n) block of float64 values.

        Parameters
        ----------
        rng : numpy.random.Generator
            The stream to draw from (the engine owns stream bookkeeping).
        size : tuple of int
            ``(replicates, n)``.
        out : ndarray, optional
            Preallocated float64 buffer of shape ``size``, reused across
            blocks to keep memory bounded.
        """
        if out is None:
            out = np.empty(size, dtype=np.float64)
        elif out.shape != tuple(size) or out.dtype != np.float64:
            raise ValueError(f"out must be float64 of shape {size}, got {out.dtype} {out.shape}")
        self._draw(rng, tuple(size), out)
        return out

    def bernoulli_p(self) -> float | None:
        """p when the values are iid Bernoulli(p) 0/1 draws, else None.

        The engine uses it for the exact binomial enumeration path.
        """
        return None

    def normal_params(self) -> tuple[float, float] | None:
        """(mean, sd) when the values are iid normal, else None.

        The engine uses it for the exact and sufficient-statistics paths.
        """
        return None

    def law(self):
        """The law of one observation as a frozen scipy.stats distribution, or None.

        Estimands beyond the mean (quantiles, geometric means, correlations
        of transformed margins) compute their true values and planning
        values from it; models without a closed-form law return None.
        """
        return None

    def event_probability(self, *, values: list[float] | None = None, above: float | None = None) -> float:
        """P(X in values) or P(X > above) for a proportion estimand.

        The default estimates nothing: subclasses with a known law override it.
        """
        raise NotImplementedError(f"model {self.name!r} cannot compute event probabilities")

    # --- description ------------------------------------------------------
    @abstractmethod
    def params(self) -> dict[str, Any]:
        """The parameters as given by the user (for reports and hashing)."""

    def describe(self) -> str:
        inner = ", ".join(f"{k}={_fmt(v)}" for k, v in self.params().items())
        return f"{self.name}({inner})"

    def to_dict(self) -> dict[str, Any]:
        d: dict[str, Any] = {"model": self.name, **self.params()}
        d["true_mean"] = float(self.mean)
        d["true_sd"] = float(self.sd)
        sk = self.skewness
        d["true_skewness"] = None if sk is None else float(sk)
        if self.true_value_note:
            d["true_value_note"] = self.true_value_note
        return d

    def __repr__(self) -> str:
        return self.describe()


def _fmt(v: Any) -> str:
    if isinstance(v, float):
        return f"{v:g}"
    if isinstance(v, Model):
        return v.describe()
    return repr(v) if isinstance(v, str) else str(v)


class StoredMoments(Model):
    """A model whose constructor computes its moments once into ``_m``
    (mean), ``_s`` (SD) and ``_g`` (skewness or None)."""

    _m: float
    _s: float
    _g: float | None

    @property
    def mean(self) -> float:
        return self._m

    @property
    def sd(self) -> float:
        return self._s

    @property
    def skewness(self) -> float | None:
        return self._g


class ZeroOneMoments(Model):
    """A 0/1 model with event probability ``p`` (set by the constructor)."""

    p: float

    @property
    def mean(self) -> float:
        return self.p

    @property
    def sd(self) -> float:
        return float(np.sqrt(self.p * (1 - self.p)))

    @property
    def skewness(self) -> float:
        return (1 - 2 * self.p) / self.sd


#: name -> factory(params: dict) -> Model. Factories validate and raise InputError.
REGISTRY: dict[str, Callable[[dict[str, Any]], Model]] = {}


def register(name: str) -> Callable:
    """Class or function decorator adding a model factory to the registry."""

    def deco(factory):
        REGISTRY[name] = factory
        return factory

    return deco
