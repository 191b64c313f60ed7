"""simcheck: check by simulation whether a planned sample size delivers the
confidence interval it promises, and find the n that does.

The Python API (implemented in :mod:`simcheck.api`, imported on first use)::

    import simcheck as sc
    s = sc.scenario(estimand="mean", margin=1.0, interval="t",
                    data={"model": "lognormal", "mean": 6.0, "cv": 1.2})
    sc.check(s, 69, rng=1)      # coverage and achieved margin at one n
    sc.curve(s, n_min=10, n_max=300, rng=1)
    sc.search(s, rng=1)         # the smallest n meeting the targets
    sc.compare(s, ["t", "bootstrap-bca"], rng=1)
    sc.sweep(s, {"data.cv": [0.6, 1.2]}, store="cv.sqlite", rng=1)
    sc.report(s, "reports/costs", rng=1)

``sc.models`` holds the data models (``make_model``, ``from_scipy``) and
``sc.methods()`` lists the interval methods. The top-level names ``search``,
``sweep``, ``report`` and ``scenario`` are these functions; the modules of the same names
are imported by their full path (``from simcheck.search import find_n``).

Results hold only under the assumed data model. Regulated studies follow their
own guidance and a qualified statistician's review; simcheck replaces neither.
"""

from __future__ import annotations

import importlib
import importlib.util
import sys
import types

__version__ = "0.1.0"

CAUTION = (
    "Simulated results hold only under the assumed data model. Regulated "
    "studies (clinical, safety, regulatory) follow their own guidance and a "
    "qualified statistician's review; simcheck does not replace either."
)

#: public name -> module that defines it (imported on first use: ``import simcheck`` stays light)
_LAZY = {
    "scenario": "simcheck.api",
    "scenario_from_dict": "simcheck.api",
    "check": "simcheck.api",
    "curve": "simcheck.api",
    "search": "simcheck.api",
    "compare": "simcheck.api",
    "sweep": "simcheck.api",
    "report": "simcheck.api",
    "methods": "simcheck.api",
    "examples": "simcheck.api",
    "example": "simcheck.api",
    "SweepRun": "simcheck.api",
    "Report": "simcheck.api",
    "Scenario": "simcheck.scenario",
    "InputError": "simcheck.errors",
    "CheckResult": "simcheck.results",
    "CurveResult": "simcheck.results",
    "SearchResult": "simcheck.results",
    "MethodComparison": "simcheck.results",
}
# `fit` (pilot data -> model) is exported when its module is part of this version
if importlib.util.find_spec("simcheck.fit") is not None:
    _LAZY["fit"] = "simcheck.fit"

#: top-level functions whose name is also a module or subpackage of simcheck
_SHADOWED = ("scenario", "search", "sweep", "report", "fit")

__all__ = ["__version__", "CAUTION", "models", *_LAZY]


def __getattr__(name: str):
    if name == "models":
        return importlib.import_module("simcheck.models")
    if name in _LAZY:
        return getattr(importlib.import_module(_LAZY[name]), name)
    raise AttributeError(f"module 'simcheck' has no attribute {name!r}")


def __dir__() -> list[str]:
    return sorted(set(globals()) | set(__all__))


class _Package(types.ModuleType):
    """The simcheck package: keeps ``simcheck.search`` (and scenario, sweep, report, fit) the API functions.

    Importing the submodule ``simcheck.search`` would otherwise bind the module
    to the package attribute ``search`` and hide the function. The submodules
    stay importable by their full path, e.g. ``from simcheck.search import find_n``.
    """

    def __setattr__(self, name: str, value) -> None:
        if name in _SHADOWED and isinstance(value, types.ModuleType):
            return
        super().__setattr__(name, value)


sys.modules[__name__].__class__ = _Package
