"""Shared test material: scenario tables and texts (invented examples), a small
TOML writer and an in-process runner of the command line.

Several test files used to repeat the same scenario and sweep texts; they are
built here from tables, so a change of the file format touches one place.
Import with ``from fixtures import ...`` (pytest puts ``tests/`` on the path).
"""

from __future__ import annotations

import copy
import io
import math
import re
from contextlib import redirect_stderr, redirect_stdout
from pathlib import Path
from typing import Any

from simcheck.scenario import set_dotted

__all__ = [
    "toml_text", "toml_value", "write_toml", "minimal", "repair_times", "sweep_table",
    "write_sweep_folder", "run_cli",
]

_BARE = re.compile(r"^[A-Za-z0-9_-]+$")


# --- a small TOML writer ---------------------------------------------------------
def toml_key(key: str) -> str:
    """A TOML key: bare when possible, else a basic string."""
    return key if _BARE.match(key) else toml_string(key)


def toml_string(s: str) -> str:
    """A TOML basic string (control characters, quotes and backslashes escaped)."""
    out = []
    for ch in s:
        o = ord(ch)
        if ch == "\\":
            out.append("\\\\")
        elif ch == '"':
            out.append('\\"')
        elif o < 0x20 or o == 0x7F:
            out.append(f"\\u{o:04x}")
        else:
            out.append(ch)
    return '"' + "".join(out) + '"'


def toml_value(v: Any) -> str:
    """One value as TOML text (tables inline)."""
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, int):
        return str(v)
    if isinstance(v, float):
        if math.isnan(v):
            return "nan"
        if math.isinf(v):
            return "inf" if v > 0 else "-inf"
        return repr(v)
    if isinstance(v, str):
        return toml_string(v)
    if isinstance(v, (list, tuple)):
        return "[" + ", ".join(toml_value(x) for x in v) + "]"
    if isinstance(v, dict):
        return "{" + ", ".join(f"{toml_key(str(k))} = {toml_value(x)}" for k, x in v.items()) + "}"
    raise TypeError(f"no TOML form for {type(v).__name__}")


def toml_text(table: dict[str, Any]) -> str:
    """A TOML document: top-level values first, then one ``[header]`` per table
    (``[a.b]`` for tables of tables, inline tables below that level)."""
    lines: list[str] = []
    tables: list[tuple[str, dict]] = []
    for k, v in table.items():
        if isinstance(v, dict):
            tables.append((toml_key(str(k)), v))
        else:
            lines.append(f"{toml_key(str(k))} = {toml_value(v)}")
    for name, sub in tables:
        plain = {k: v for k, v in sub.items() if not isinstance(v, dict)}
        nested = {k: v for k, v in sub.items() if isinstance(v, dict)}
        if plain or not nested:
            lines.append(f"[{name}]")
            lines.extend(f"{toml_key(str(k))} = {toml_value(v)}" for k, v in plain.items())
        for k, v in nested.items():
            lines.append(f"[{name}.{toml_key(str(k))}]")
            lines.extend(f"{toml_key(str(kk))} = {toml_value(vv)}" for kk, vv in v.items())
    return "\n".join(lines) + "\n"


def write_toml(path: Path, table: dict[str, Any]) -> Path:
    path.write_text(toml_text(table), encoding="utf-8")
    return path


# --- scenarios (invented examples) -------------------------------------------------
def _changed(table: dict[str, Any], changes: dict[str, Any]) -> dict[str, Any]:
    # keyword names use "__" for the dots of dotted keys: target__margin=2.0
    for k, v in changes.items():
        table = set_dotted(table, k.replace("__", "."), v)
    return table


def minimal(**changes: Any) -> dict[str, Any]:
    """The smallest valid scenario table: the mean of normal(10, 3) data, t interval, margin 1."""
    table = {
        "target": {"estimand": "mean", "margin": 1.0},
        "data": {"model": "normal", "mean": 10.0, "sd": 3.0},
        "method": {"interval": "t"},
    }
    return _changed(table, changes)


_REPAIR_TIMES = {
    "title": "Repair times at a depot (invented example)",
    "target": {"estimand": "mean", "confidence": 0.95, "margin": 1.0},
    "data": {"model": "lognormal", "mean": 6.0, "cv": 1.0},
    "method": {"interval": "t"},
    "simulation": {"replicates": 1000, "seed": 20261201, "n_max": 400},
}


def repair_times(**changes: Any) -> dict[str, Any]:
    """Skewed repair times (lognormal, mean 6, CV 1), the t interval, margin 1: the base of
    the sweep and report tests."""
    return _changed(copy.deepcopy(_REPAIR_TIMES), changes)


def sweep_table(base: str = "base.toml", task: str = "check", n: list[int] | None = None,
                vary: dict[str, list] | None = None, **top: Any) -> dict[str, Any]:
    """A sweep file's table (``vary`` keys dotted, written quoted)."""
    out: dict[str, Any] = {"base": base, "task": task}
    if n is not None:
        out["n"] = list(n)
    out.update(top)
    out["vary"] = dict(vary or {"data.cv": [0.5, 1.5], "method.interval": ["t", "johnson-t"]})
    return out


def write_sweep_folder(folder: Path, base: dict[str, Any], sweep: dict[str, Any] | str) -> Path:
    """``base.toml`` and ``sweep.toml`` in ``folder``; returns the sweep file."""
    folder.mkdir(parents=True, exist_ok=True)
    write_toml(folder / "base.toml", base)
    path = folder / "sweep.toml"
    path.write_text(sweep if isinstance(sweep, str) else toml_text(sweep), encoding="utf-8")
    return path


# --- the command line, in process ----------------------------------------------------
def run_cli(argv: list[Any]) -> tuple[int, str, str]:
    """``simcheck.cli.main(argv)`` with stdout and stderr captured: (exit code, stdout, stderr)."""
    from simcheck.cli import main

    out, err = io.StringIO(), io.StringIO()
    with redirect_stdout(out), redirect_stderr(err):
        code = main([str(a) for a in argv])
    return code, out.getvalue(), err.getvalue()
