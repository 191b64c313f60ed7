"""numpydoc's validator on the public Python API: Parameters, Returns and Examples.

Runs where numpydoc is installed (the ``docs`` extra, which CI installs);
the Sphinx build (.ci/run) applies the same checks with warnings as errors.
"""

from __future__ import annotations

import pytest

import simcheck

validate = pytest.importorskip("numpydoc.validate")

#: missing or unknown parameters, missing Returns, missing Examples, no docstring
CHECKS = {"PR01", "PR02", "RT01", "EX01", "GL08"}

PUBLIC = ["scenario", "scenario_from_dict", "check", "curve", "search", "compare", "sweep", "report",
          "methods", "examples", "example", "SweepRun", "Report"]


@pytest.mark.parametrize("name", PUBLIC)
def test_public_api_docstrings_are_complete(name):
    obj = getattr(simcheck, name)
    result = validate.validate(f"{obj.__module__}.{obj.__qualname__}")
    errors = [(code, msg) for code, msg in result["errors"] if code in CHECKS]
    if isinstance(obj, type):  # a dataclass: its fields are the parameters; no return value
        errors = [e for e in errors if e[0] != "RT01"]
    assert not errors, f"simcheck.{name}: {errors}"


def test_the_list_covers_every_public_function():
    import simcheck.api as api

    exported = {n for n in simcheck.__all__ if getattr(simcheck, n, None) is not None
                and getattr(getattr(simcheck, n), "__module__", "") == "simcheck.api"}
    assert exported <= set(PUBLIC) | {"fit"}
    assert set(PUBLIC) <= set(api.__all__)
