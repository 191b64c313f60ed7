"""Design kinds: the one place where a kind of sampling design plugs into the engine.

A design kind (simple random sample, clustered sample, sample from a finite
population, and later stratified or paired designs) supplies three functions:

``applies(design) -> bool``
    whether the kind evaluates ``design``;
``available_paths(design) -> list[str]``
    the computation paths valid for ``design``, cheapest first;
``evaluate(design, ns, replicates, rng, path, progress, chunk_bytes, curve, threads)``
    one :class:`~simcheck.results.CheckResult` per n.

Kinds are tried in registration order, most specific first; the simple
random sample is the fallback registered last. A new design kind is a new
module with these three functions and one :func:`register_kind` call in
:mod:`simcheck.engine`.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Callable

from simcheck.design import Design
from simcheck.errors import InputError


@dataclass(frozen=True)
class DesignKind:
    """A sampling design's evaluator, as the engine sees it."""

    name: str
    applies: Callable[[Design], bool]
    available_paths: Callable[[Design], list]
    evaluate: Callable[..., list]
    #: tried after every other kind (the simple random sample)
    fallback: bool = False
    #: the kind checks n and evaluates one-sided targets itself (its rows are
    #: already one-sided); the engine then only adds the target figures
    self_contained: bool = False


KINDS: list[DesignKind] = []


def register_kind(kind: DesignKind) -> DesignKind:
    """Add ``kind``; a ``fallback`` kind is tried after every other one."""
    if any(k.name == kind.name for k in KINDS):
        raise ValueError(f"design kind {kind.name!r} is registered already")
    if kind.fallback:
        KINDS.append(kind)
    else:
        first_fallback = next((i for i, k in enumerate(KINDS) if k.fallback), len(KINDS))
        KINDS.insert(first_fallback, kind)
    return kind


def kind_for(design: Design) -> DesignKind:
    """The registered design kind that evaluates ``design``."""
    for k in KINDS:
        if k.applies(design):
            return k
    raise InputError("design", "no registered design kind evaluates this design")
