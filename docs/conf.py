"""Sphinx configuration: the API reference, built from the numpydoc docstrings.

Built by .ci/run with warnings as errors and no network:
    python -m sphinx -W --keep-going -b html docs docs/_build/html
"""

import os
import sys

sys.path.insert(0, os.path.abspath(".."))

import simcheck  # noqa: E402

project = "simcheck"
author = "The simcheck authors"
copyright = "2026, The simcheck authors"
version = release = simcheck.__version__

extensions = ["sphinx.ext.autodoc", "numpydoc"]
exclude_patterns = ["_build"]
html_theme = "alabaster"
html_static_path: list[str] = []

autodoc_default_options = {"members": False}
autodoc_typehints = "none"  # the numpydoc sections say the types
numpydoc_show_class_members = False
numpydoc_class_members_toctree = False

# numpydoc's validator on every object this reference documents: a missing or
# misnamed Parameters entry, a missing Returns or Examples section is a warning,
# and the build runs with -W, so it fails.
numpydoc_validation_checks = {"PR01", "PR02", "RT01", "EX01", "GL08"}
# classes owned by the lower layers are shown for their fields only; the
# functions and classes of simcheck.api are held to every check above
numpydoc_validation_exclude = {
    r"^simcheck\.results\.",
    r"^simcheck\.scenario\.",
    r"^simcheck\.errors\.",
}
