"""Sweep files: read, validate and expand into cells.

A sweep file names a base scenario, a task and, under ``[vary]``, dotted
scenario keys with lists of values; every combination of values is one
*cell*. Under ``[zip]``, lists of one common length vary together: the i-th
values of all of them make one row, and each row is crossed with the
``[vary]`` combinations. The whole grid is validated before any work starts, so an overnight
run never stops at cell 317 on a typo.

Each cell is identified by its *key*: the SHA-256 of the canonical JSON of
everything that decides its result (the resolved scenario, the task and its
arguments, and the sweep's root seed). The key names the cell's row in the
store and, through :func:`simcheck.rng.key_from_text`, its random stream, so
a cell's result depends on nothing else: not on worker count, backend, order
or interruptions. Numbers are normalised before hashing (:func:`normalise`:
``1`` and ``1.0`` are one value), so two spellings of one scenario are one cell.

A sweep as a whole is identified by :func:`sweep_binding` (task, task
arguments, root seed, base scenario, varied keys); a store holds the cells of
one sweep only.
"""

from __future__ import annotations

import difflib
import hashlib
import itertools
import json
import math
import tomllib
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Callable

from simcheck.errors import Collector, InputError, Problem
from simcheck.files import parse_toml, read_text, resolve_data_path
from simcheck.scenario import N_LIMIT, SEED_MAX

TASKS = ("search", "check", "curve")

#: the largest grid one sweep may have; a bigger one is refused before anything runs
MAX_CELLS = 100_000

#: floats with an integral value up to this size hash as the integer they equal
_EXACT_INT = 2**53
SWEEP_KEYS = ("title", "base", "task", "n", "n_min", "n_max", "seed", "vary", "zip")


@dataclass(frozen=True)
class Cell:
    """One combination of the varied values, validated into a scenario."""

    index: int
    values: dict[str, Any]
    scenario: Any = field(repr=False)
    key: str = ""

    def label(self) -> str:
        """The values as ``{data.cv=0.5, method.interval='t'}`` (for messages)."""
        return cell_label(self.values)


@dataclass(frozen=True)
class SweepSpec:
    """A validated sweep file (before expansion)."""

    path: Path
    text: str
    base_path: Path
    base_text: str
    task: str
    seed: int
    vary: tuple[tuple[str, tuple[Any, ...]], ...]
    n: tuple[int, ...] | None = None
    n_min: int | None = None
    n_max: int | None = None
    title: str | None = None
    zipped: tuple[tuple[str, tuple[Any, ...]], ...] = ()
    #: data files and the base may lie outside the sweep's folder (``--allow-outside-files``)
    allow_outside_files: bool = field(default=False, compare=False)

    @property
    def size(self) -> int:
        """Number of cells in the grid: the ``[zip]`` rows times the ``[vary]`` combinations."""
        rows = len(self.zipped[0][1]) if self.zipped else 1
        return rows * math.prod(len(v) for _, v in self.vary)

    def task_kwargs(self) -> dict[str, Any]:
        """Keyword arguments of :func:`simcheck.tasks.run_task` besides scenario, task and seed."""
        if self.task == "check":
            return {"n": list(self.n or ())}
        if self.task == "curve":
            return {"n_min": self.n_min, "n_max": self.n_max}
        return {}

    def combinations(self) -> list[dict[str, Any]]:
        """Every cell's values: each ``[zip]`` row (its lists taken together, position by
        position) crossed with every ``[vary]`` combination (last key fastest), zip rows outermost."""
        keys = [k for k, _ in self.vary]
        crossed = [dict(zip(keys, combo)) for combo in itertools.product(*(v for _, v in self.vary))]
        if not self.zipped:
            return crossed
        zkeys = [k for k, _ in self.zipped]
        rows = [dict(zip(zkeys, row)) for row in zip(*(v for _, v in self.zipped))]
        return [{**row, **combo} for row in rows for combo in crossed]


def cell_label(values: dict[str, Any]) -> str:
    return "{" + ", ".join(f"{k}={v!r}" for k, v in values.items()) + "}"


def normalise(value: Any) -> Any:
    """The value as hashed: integral floats as ints, tuples and sets as lists, numpy scalars as Python ones.

    ``1``, ``1.0`` and ``numpy.float64(1)`` are one value; booleans stay
    booleans (``true`` is not ``1``).
    """
    if hasattr(value, "item") and not isinstance(value, (list, tuple, dict, str)):
        value = value.item()
    if isinstance(value, bool) or value is None or isinstance(value, (str, int)):
        return value
    if isinstance(value, float):
        if value.is_integer() and abs(value) <= _EXACT_INT:
            return int(value)
        return value
    if isinstance(value, dict):
        return {str(k): normalise(v) for k, v in value.items()}
    if isinstance(value, (set, frozenset)):
        return sorted(normalise(v) for v in value)
    if isinstance(value, (list, tuple)):
        return [normalise(v) for v in value]
    raise TypeError(f"cannot hash a value of type {type(value).__name__}")


def canonical_json(value: Any) -> str:
    """Sorted keys, no spaces, no NaN, numbers normalised (:func:`normalise`)."""
    return json.dumps(normalise(value), sort_keys=True, separators=(",", ":"), allow_nan=False)


def cell_key(scenario_dict: dict[str, Any], task: str, task_kwargs: dict[str, Any], root_seed: int) -> str:
    """SHA-256 (hex) of the canonical JSON of what decides a cell's result."""
    payload = {"scenario": scenario_dict, "task": task, "seed": int(root_seed)}
    payload.update({k: v for k, v in task_kwargs.items() if v is not None})
    return hashlib.sha256(canonical_json(payload).encode("utf-8")).hexdigest()


def sweep_binding(spec: "SweepSpec") -> tuple[str, dict[str, Any]]:
    """The identity of a sweep: ``(sweep_id, parts)``.

    ``parts`` are the task, its arguments, the root seed, the SHA-256 of the
    base scenario's canonical JSON (comments and spacing do not count) and
    the sorted varied keys; ``sweep_id`` is the SHA-256 of their canonical
    JSON. Adding values to a varied key keeps the sweep (the grid grows);
    changing anything else makes another sweep, which needs another store.
    """
    base = tomllib.loads(spec.base_text)
    try:
        base_text = canonical_json(base)
    except (TypeError, ValueError):  # a TOML date or an inf in the base: still one fixed text
        base_text = json.dumps(base, sort_keys=True, default=str)
    first = spec.combinations()[:1]
    parts = {
        "task": spec.task,
        "task_args": {k: v for k, v in spec.task_kwargs().items() if v is not None},
        "seed": int(spec.seed),
        "base": hashlib.sha256(base_text.encode("utf-8")).hexdigest(),
        "varied_keys": sorted(first[0]) if first else [],
    }
    return hashlib.sha256(canonical_json(parts).encode("utf-8")).hexdigest(), parts


def _flatten_vary(table: dict[str, Any], prefix: str, out: dict[str, Any]) -> None:
    # `[vary] data.cv = [...]` without quotes arrives as nested tables; both spellings mean the same key
    for k, v in table.items():
        name = f"{prefix}.{k}" if prefix else k
        if isinstance(v, dict):
            _flatten_vary(v, name, out)
        else:
            out[name] = v


def _canonical(value: Any) -> str:
    try:
        return canonical_json(value)
    except (TypeError, ValueError):
        return json.dumps(value, sort_keys=True, default=str)


def read_sweep(path: str | Path, *, allow_outside_files: bool = False) -> SweepSpec:
    """Read and validate a sweep file (the sweep-level keys only).

    ``base`` is resolved relative to the sweep file's folder and must stay
    inside it unless ``allow_outside_files`` (which also reaches the
    scenarios' data files).

    Raises
    ------
    InputError
        All problems at once, prefixed with the file name.
    """
    path = Path(path)
    source = str(path)
    # regular files of at most 1 MiB, UTF-8 without BOM; TOML errors by line and column only
    text = read_text(path, label=source, what="sweep file")
    table = parse_toml(text, label=source)

    c = Collector()
    _check_keys(c, table)
    title = table.get("title")
    if title is not None and not isinstance(title, str):
        c.add("title", f"must be a string, got {title!r}")
    task = _read_task(c, table)
    n_values = _read_n(c, table, task)
    bounds = _read_bounds(c, table, task)
    seed = c.number("seed", table["seed"], low=0, high=SEED_MAX, integer=True) if "seed" in table else None
    vary = _read_vary(c, table.get("vary", {}))
    zipped = _read_zip(c, table.get("zip", {}), {k for k, _ in vary})
    if zipped and len(zipped[0][1]) * math.prod(len(v) for _, v in vary) > MAX_CELLS:
        c.add("zip", f"the grid has {len(zipped[0][1]) * math.prod(len(v) for _, v in vary):,} cells "
              f"(zip rows x vary combinations); one sweep may have at most {MAX_CELLS:,}")
    base_path, base_text = _read_base(c, table, path, allow_outside_files)
    c.raise_if_any(source)

    if seed is None:
        seed = _base_seed(base_path, base_text, source, allow_outside_files)
    return SweepSpec(
        path=path,
        text=text,
        base_path=base_path,  # type: ignore[arg-type]
        base_text=base_text,
        task=task,  # type: ignore[arg-type]
        seed=int(seed),
        vary=tuple(vary),
        zipped=zipped,
        n=n_values,
        n_min=bounds["n_min"],
        n_max=bounds["n_max"],
        title=title,
        allow_outside_files=allow_outside_files,
    )


def _check_keys(c: Collector, table: dict[str, Any]) -> None:
    for k in table:
        if k not in SWEEP_KEYS:
            close = difflib.get_close_matches(k, SWEEP_KEYS, n=1)
            hint = f" (did you mean '{close[0]}'?)" if close else f" (known: {', '.join(SWEEP_KEYS)})"
            c.add(k, f"unknown key{hint}")


def _read_task(c: Collector, table: dict[str, Any]) -> Any:
    task = table.get("task")
    if task is None:
        c.add("task", f"required: one of {', '.join(TASKS)}")
    elif task not in TASKS:
        close = difflib.get_close_matches(str(task), TASKS, n=1)
        hint = f" (did you mean '{close[0]}'?)" if close else ""
        c.add("task", f"must be one of {', '.join(TASKS)}, got {task!r}{hint}")
    return task


def _read_n(c: Collector, table: dict[str, Any], task: Any) -> tuple[int, ...] | None:
    """``n``: the sample sizes a check task checks (sorted, each once)."""
    if "n" not in table:
        if task == "check":
            c.add("n", "required for task = 'check': a list of sample sizes, e.g. n = [50, 100]")
        return None
    raw = table["n"]
    if task is not None and task != "check":
        c.add("n", "only for task = 'check'")
    elif not isinstance(raw, list) or not raw:
        c.add("n", f"must be a non-empty list of sample sizes, got {raw!r}")
    else:
        got = [c.number(f"n[{i}]", v, low=2, high=N_LIMIT, integer=True) for i, v in enumerate(raw)]
        if all(v is not None for v in got):
            if len(set(got)) != len(got):
                c.add("n", f"each sample size at most once, got {raw!r}")
            return tuple(sorted(got))  # type: ignore[arg-type]
    return None


def _read_bounds(c: Collector, table: dict[str, Any], task: Any) -> dict[str, int | None]:
    """``n_min`` and ``n_max`` of a curve task."""
    bounds: dict[str, int | None] = {"n_min": None, "n_max": None}
    for name in bounds:
        if name in table:
            if task is not None and task != "curve":
                c.add(name, "only for task = 'curve' (for search, set simulation." + name + " in the scenario)")
            else:
                high = N_LIMIT - 1 if name == "n_min" else N_LIMIT
                bounds[name] = c.number(name, table[name], low=2, high=high, integer=True)  # type: ignore[assignment]
    if bounds["n_min"] is not None and bounds["n_max"] is not None and bounds["n_min"] >= bounds["n_max"]:
        c.add("n_max", f"must be > n_min ({bounds['n_min']}), got {bounds['n_max']}")
    return bounds


def _plain_values(c: Collector, field: str, values: Any) -> bool:
    """Whether ``values`` can be hashed into a cell key (JSON without dates, nan or inf)."""
    try:
        json.dumps(values, allow_nan=False)
    except (TypeError, ValueError):
        c.add(field, "values must be numbers, strings, booleans, lists or tables (no dates, nan or inf)")
        return False
    return True


def _read_vary(c: Collector, raw_vary: Any) -> list[tuple[str, tuple[Any, ...]]]:
    """The ``[vary]`` table: dotted keys -> lists of distinct values, crossed."""
    vary: list[tuple[str, tuple[Any, ...]]] = []
    if not isinstance(raw_vary, dict):
        c.add("vary", "must be a table of dotted scenario keys with lists of values")
        return vary
    flat: dict[str, Any] = {}
    _flatten_vary(raw_vary, "", flat)
    for k, values in flat.items():
        if not isinstance(values, list) or not values:
            c.add(f"vary.{k}", f"must be a non-empty list of values, got {values!r}")
            continue
        if not _plain_values(c, f"vary.{k}", values):
            continue
        seen = [_canonical(v) for v in values]
        if len(set(seen)) != len(seen):
            dup = sorted({repr(v) for v, t in zip(values, seen) if seen.count(t) > 1})
            c.add(f"vary.{k}", f"each value at most once ({' and '.join(dup)} are the same value), got {values!r}")
            continue
        vary.append((k, tuple(values)))
    size = math.prod(len(v) for _, v in vary)
    if size > MAX_CELLS:
        c.add("vary", f"the grid has {size:,} cells; one sweep may have at most {MAX_CELLS:,} "
              "(split it into several sweep files, each with its own store)")
    return vary


def _read_base(c: Collector, table: dict[str, Any], path: Path, allow_outside_files: bool) -> tuple[Path | None, str]:
    """``base``: the scenario file's path (inside the sweep's folder unless allowed) and text."""
    base = table.get("base")
    if base is None:
        c.add("base", "required: the scenario file, relative to the sweep file")
    elif not isinstance(base, str) or not base:
        c.add("base", f"must be a file name, got {base!r}")
    else:
        try:
            base_path = resolve_data_path(base, path.parent, field="base", allow_outside=allow_outside_files,
                                          folder="the sweep file's folder")
            return base_path, read_text(base_path, field="base", what="base scenario")
        except InputError as exc:
            for p in exc.problems:
                c.add("base", p.message if base in p.message else f"{base}: {p.message}")
    return None, ""


def _read_zip(c: Collector, raw: Any, varied: set[str]) -> tuple[tuple[str, tuple[Any, ...]], ...]:
    """The ``[zip]`` table: dotted keys -> lists of one common length, taken together per cell."""
    if not isinstance(raw, dict):
        c.add("zip", "must be a table of dotted scenario keys with lists of values of one length")
        return ()
    flat: dict[str, Any] = {}
    _flatten_vary(raw, "", flat)
    out: list[tuple[str, tuple[Any, ...]]] = []
    for k, values in flat.items():
        if not isinstance(values, list) or not values:
            c.add(f"zip.{k}", f"must be a non-empty list of values, got {values!r}")
        elif k in varied:
            c.add(f"zip.{k}", "is also in [vary]; a key either varies on its own or together with others")
        elif _plain_values(c, f"zip.{k}", values):
            out.append((k, tuple(values)))
    lengths = {k: len(v) for k, v in out}
    if len(set(lengths.values())) > 1:
        c.add("zip", "lists must all have one length (one value each per cell), got "
              + ", ".join(f"{k}: {n}" for k, n in lengths.items()))
        return ()
    return tuple(out)


def _base_seed(base_path: Path, base_text: str, source: str, allow_outside_files: bool = False) -> int:
    # The root seed defaults to the base scenario's simulation.seed; without one a
    # re-run could not reproduce, so resuming would mix two different experiments.
    from simcheck.scenario import scenario_from_dict

    scen = scenario_from_dict(
        parse_toml(base_text, label=str(base_path)), source=str(base_path),
        base_dir=str(base_path.resolve().parent), allow_outside_files=allow_outside_files,
    )
    seed = getattr(scen, "seed", None)
    if seed is None:
        raise InputError(
            "seed",
            "a sweep needs a root seed: set seed = ... in the sweep file or simulation.seed in the base scenario",
            source=source,
        )
    return int(seed)


def expand(spec: SweepSpec, progress: Callable[[int, int], None] | None = None) -> list[Cell]:
    """Validate every cell of the grid and return them in grid order.

    Each cell is the base scenario with the cell's values set at their dotted
    keys, validated by :func:`simcheck.scenario.scenario_from_dict`, and the
    sweep's task arguments are checked against it
    (:func:`simcheck.tasks.run_task` with ``validate_only``), so a cell that
    would fail on its arguments is refused before anything runs.
    ``progress(done, total)`` is called after each cell.

    Raises
    ------
    InputError
        For the first invalid cell, naming its values and the problem (one
        line), and how many other cells are invalid.
    """
    from simcheck.scenario import scenario_from_dict, set_dotted
    from simcheck.tasks import run_task

    source = str(spec.path)
    base_table = parse_toml(spec.base_text, label=str(spec.base_path))

    base_dir = str(spec.base_path.resolve().parent)
    cells: list[Cell] = []
    bad: list[tuple[dict[str, Any], InputError]] = []
    kwargs = spec.task_kwargs()
    keys: dict[str, int] = {}
    combos = spec.combinations()
    for i, values in enumerate(combos):
        if progress is not None:
            progress(i, len(combos))
        table = base_table
        try:
            for k, v in values.items():
                table = set_dotted(table, k, v)  # returns a deep copy; the base stays as read
            scen = scenario_from_dict(table, source=str(spec.base_path), base_dir=base_dir,
                                      allow_outside_files=spec.allow_outside_files)
            run_task(scen, spec.task, validate_only=True, **kwargs)
        except InputError as exc:
            bad.append((values, exc))
            continue
        key = cell_key(scen.to_dict(), spec.task, kwargs, spec.seed)
        if key in keys:
            # two spellings of the same scenario (e.g. a value equal to the default) would share a row
            other = cells[keys[key]]
            bad.append((values, InputError("", f"resolves to the same scenario as cell {other.label()}")))
            continue
        keys[key] = len(cells)
        cells.append(Cell(index=i, values=values, scenario=scen, key=key))
    if bad:
        values, exc = bad[0]
        detail = "; ".join(str(p) for p in exc.problems)
        more = f" (and {len(bad) - 1} more invalid cells)" if len(bad) > 1 else ""
        raise InputError([Problem(f"cell {cell_label(values)}", detail + more)], source=source)
    return cells


def load_sweep(path: str | Path) -> tuple[SweepSpec, list[Cell]]:
    """Read a sweep file and validate its whole grid."""
    spec = read_sweep(path)
    return spec, expand(spec)
