"""Packaging facts that CI relies on: floors, licence metadata, package data."""

from __future__ import annotations

import re
import tomllib
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
PYPROJECT = tomllib.loads((ROOT / "pyproject.toml").read_text(encoding="utf-8"))
FLOORS_FILE = ROOT / ".ci" / "min-versions.txt"


def _version(text: str) -> tuple[int, ...]:
    parts = [int(p) for p in text.split(".")]
    return tuple(parts + [0] * (3 - len(parts)))


def _floors() -> dict[str, str]:
    """name -> floor of every dependency and extra, except the docs tools (built at their newest)."""
    project = PYPROJECT["project"]
    reqs = list(project["dependencies"])
    for extra, items in project["optional-dependencies"].items():
        if extra != "docs":
            reqs += items
    out = {}
    for r in reqs:
        m = re.fullmatch(r"([A-Za-z0-9_.-]+)(\[[^\]]+\])?>=([0-9.]+)", r.replace(" ", ""))
        assert m, f"every requirement states a floor as name>=version: {r!r}"
        out[m.group(1).lower()] = m.group(3)
        if m.group(1).lower() == "dask" and m.group(2) == "[distributed]":
            out["distributed"] = m.group(3)
    return out


def _pins() -> dict[str, str]:
    pins = {}
    for line in FLOORS_FILE.read_text(encoding="utf-8").splitlines():
        line = line.split("#", 1)[0].strip()
        if line:
            name, version = line.split("==")
            pins[name.strip().lower()] = version.strip()
    return pins


def test_min_versions_file_pins_every_declared_floor():
    floors, pins = _floors(), _pins()
    assert set(pins) == set(floors)
    for name, floor in floors.items():
        assert _version(pins[name]) == _version(floor), f"{name}: pyproject says >={floor}, {FLOORS_FILE.name} pins {pins[name]}"


def test_joblib_floor_has_parallel_config_initializer():
    # sweeps call joblib.parallel_config(backend="loky", initializer=...): joblib 1.5 or later
    assert _version(_floors()["joblib"]) >= (1, 5, 0)


def test_licence_metadata_and_nothing_invented():
    project = PYPROJECT["project"]
    assert project["license"] == "MIT"
    assert (ROOT / "LICENSE").read_text(encoding="utf-8").startswith("MIT License")
    assert "classifiers" not in project and "urls" not in project
    requires = PYPROJECT["build-system"]["requires"]
    assert any(re.fullmatch(r"setuptools>=(\d+)", r) and int(r.split(">=")[1]) >= 77 for r in requires)


def test_package_data_ships_typing_marker_and_examples():
    data = PYPROJECT["tool"]["setuptools"]["package-data"]["simcheck"]
    assert "py.typed" in data and "data/examples/*.toml" in data
    assert (ROOT / "simcheck" / "py.typed").is_file()
    examples = ROOT / "simcheck" / "data" / "examples"
    # the repository's scenarios/ folder, packaged (a link, so the two cannot drift)
    assert examples.resolve() == (ROOT / "scenarios").resolve()
