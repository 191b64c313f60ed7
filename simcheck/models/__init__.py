"""Data-generating models (see :mod:`simcheck.models.base` for the interface).

Use :func:`make_model` with a scenario ``[data]`` table as a dict, or
:func:`from_scipy` with any frozen scipy.stats distribution.
"""

from __future__ import annotations

from typing import Any

from simcheck.errors import InputError, shown
from simcheck.models.base import REGISTRY, Model, register

# Importing the submodules fills REGISTRY.
from simcheck.models import continuous as _continuous  # noqa: F401
from simcheck.models import discrete as _discrete  # noqa: F401
from simcheck.models import composite as _composite  # noqa: F401

__all__ = ["Model", "REGISTRY", "register", "make_model", "from_scipy", "model_names"]


def model_names() -> list[str]:
    return sorted(REGISTRY)


def make_model(spec: dict[str, Any] | Model, *, base_dir: str | None = None,
               allow_outside_files: bool = False) -> Model:
    """Build a model from a table such as ``{"model": "lognormal", "mean": 6, "cv": 1.2}``.

    Field names in errors are relative to the table (``model``, ``cv``, ...).
    ``base_dir`` resolves relative file paths (empirical models; the current
    folder when None); a file outside it is refused unless
    ``allow_outside_files`` (see :func:`simcheck.files.resolve_data_path`).
    """
    if isinstance(spec, Model):
        return spec
    if not isinstance(spec, dict):
        raise InputError("model", f"a data model must be a table, got {shown(spec)}")
    name = spec.get("model")
    if name is None:
        raise InputError("model", f"missing; choose one of {', '.join(model_names())}")
    if not isinstance(name, str) or name not in REGISTRY:
        raise InputError("model", f"unknown model {shown(name)}; choose one of {', '.join(model_names())}")
    params = {k: v for k, v in spec.items() if k != "model"}
    factory = REGISTRY[name]
    if getattr(factory, "wants_base_dir", False):
        return factory(params, base_dir=base_dir, allow_outside_files=allow_outside_files)
    return factory(params)


def from_scipy(dist, *, discrete: bool | None = None) -> Model:
    """Wrap a frozen scipy.stats distribution as a model."""
    from simcheck.models.composite import ScipyModel

    return ScipyModel(dist, discrete=discrete)
