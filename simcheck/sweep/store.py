"""The sweep store: one SQLite file, one row per finished cell.

Only the driver process writes, one transaction per finished cell, so a
killed sweep loses at most the cells in flight and a store never holds half a
row. The file is in WAL mode: readers (``simcheck export``, reports) open it
read-only while a sweep is writing, and see every committed cell.

Schema (``schema_version`` 1)
-----------------------------
``cells``
    ``cell_key`` (SHA-256 hex of the cell's canonical resolved scenario, task,
    task arguments and root seed; primary key), ``cell_index`` (position in
    the grid of the run that stored it), ``task``, ``vary_json`` (the cell's
    varied values as a JSON object, dotted key -> value), ``scenario_json``
    (the resolved scenario), ``task_json`` (task arguments), ``seed`` (root
    seed), ``status`` (``'ok'`` or ``'error'``), ``result_json`` (the task
    result's ``to_dict()``, NULL on error), ``error`` (one line, NULL when
    ok), ``traceback``, ``seconds`` (compute time in the worker),
    ``finished_at`` (UTC, ISO 8601), ``worker`` (host:pid),
    ``simcheck_version``, ``run_id``.
``meta``
    key/value text: ``schema_version``, ``simcheck_version``,
    ``numpy_version``, ``scipy_version``, ``python_version``, ``root_seed``,
    ``task``, ``sweep_path``, ``sweep_text``, ``base_path``, ``base_text``,
    ``created_at``, ``updated_at`` (the values of the latest run).
``runs``
    one row per invocation: ``run_id``, ``started_at``, the same versions,
    ``root_seed``, ``sweep_text``, ``base_text``, ``cells_total``,
    ``cells_before``, ``backend``, ``jobs``.
"""

from __future__ import annotations

import json
import sqlite3
import sys
from dataclasses import dataclass
from datetime import datetime, timezone
from pathlib import Path
from typing import Any, Iterator

from simcheck.errors import InputError

SCHEMA_VERSION = "1"

_SCHEMA = """
CREATE TABLE IF NOT EXISTS meta (
    key   TEXT PRIMARY KEY,
    value TEXT
);
CREATE TABLE IF NOT EXISTS runs (
    run_id           INTEGER PRIMARY KEY AUTOINCREMENT,
    started_at       TEXT NOT NULL,
    simcheck_version TEXT,
    numpy_version    TEXT,
    scipy_version    TEXT,
    python_version   TEXT,
    root_seed        INTEGER,
    sweep_path       TEXT,
    sweep_text       TEXT,
    base_text        TEXT,
    cells_total      INTEGER,
    cells_before     INTEGER,
    backend          TEXT,
    jobs             INTEGER
);
CREATE TABLE IF NOT EXISTS cells (
    cell_key         TEXT PRIMARY KEY,
    cell_index       INTEGER,
    task             TEXT NOT NULL,
    vary_json        TEXT NOT NULL,
    scenario_json    TEXT NOT NULL,
    task_json        TEXT NOT NULL,
    seed             INTEGER NOT NULL,
    status           TEXT NOT NULL CHECK (status IN ('ok', 'error')),
    result_json      TEXT,
    error            TEXT,
    traceback        TEXT,
    seconds          REAL,
    finished_at      TEXT NOT NULL,
    worker           TEXT,
    simcheck_version TEXT,
    run_id           INTEGER
);
"""


def utc_now() -> str:
    return datetime.now(timezone.utc).isoformat(timespec="seconds")


def dumps(value: Any) -> str:
    """Canonical JSON: sorted keys, no NaN (results are compared as text)."""
    return json.dumps(value, sort_keys=True, separators=(",", ":"), allow_nan=False)


def versions() -> dict[str, str]:
    import numpy
    import scipy

    import simcheck

    return {
        "simcheck_version": simcheck.__version__,
        "numpy_version": numpy.__version__,
        "scipy_version": scipy.__version__,
        "python_version": sys.version.split()[0],
    }


@dataclass(frozen=True)
class StoredCell:
    """What the driver writes for one finished cell."""

    cell_key: str
    cell_index: int
    task: str
    values: dict[str, Any]
    scenario: dict[str, Any]
    task_args: dict[str, Any]
    seed: int
    status: str
    result: dict[str, Any] | None
    error: str | None
    traceback: str | None
    seconds: float
    worker: str | None


class SweepStore:
    """Read-write access for the sweep driver.

    Parameters
    ----------
    path : str or Path
        The SQLite file; created with the schema when missing.
    """

    def __init__(self, path: str | Path) -> None:
        self.path = Path(path)
        if self.path.parent and not self.path.parent.exists():
            raise InputError("--store", f"folder does not exist: {self.path.parent}")
        try:
            # isolation_level=None: we issue BEGIN/COMMIT ourselves, one transaction per cell
            self.conn = sqlite3.connect(str(self.path), timeout=30.0, isolation_level=None)
            self.conn.execute("PRAGMA journal_mode=WAL")
            # NORMAL is durable across process kills in WAL mode (only an OS crash may lose the last commits)
            self.conn.execute("PRAGMA synchronous=NORMAL")
            self.conn.executescript(_SCHEMA)
        except sqlite3.DatabaseError as exc:
            raise InputError("--store", f"{self.path} is not a simcheck sweep store ({exc})") from None
        self._check_schema()

    def _check_schema(self) -> None:
        row = self.conn.execute("SELECT value FROM meta WHERE key = 'schema_version'").fetchone()
        if row is None:
            with self.transaction():
                self.conn.execute(
                    "INSERT INTO meta(key, value) VALUES ('schema_version', ?), ('created_at', ?)",
                    (SCHEMA_VERSION, utc_now()),
                )
        elif row[0] != SCHEMA_VERSION:
            raise InputError("--store", f"{self.path} has store schema {row[0]}; this simcheck writes {SCHEMA_VERSION}")

    class _Tx:
        def __init__(self, conn: sqlite3.Connection) -> None:
            self.conn = conn

        def __enter__(self) -> sqlite3.Connection:
            self.conn.execute("BEGIN IMMEDIATE")
            return self.conn

        def __exit__(self, exc_type, exc, tb) -> None:
            self.conn.execute("COMMIT" if exc_type is None else "ROLLBACK")

    def transaction(self) -> "SweepStore._Tx":
        return SweepStore._Tx(self.conn)

    def status_by_key(self) -> dict[str, str]:
        return dict(self.conn.execute("SELECT cell_key, status FROM cells"))

    def meta(self) -> dict[str, str]:
        return dict(self.conn.execute("SELECT key, value FROM meta"))

    def begin_run(self, *, spec: Any, cells_total: int, cells_before: int, backend: str, jobs: int) -> int:
        """Record one invocation and make ``meta`` describe it."""
        info = versions()
        now = utc_now()
        meta = {
            **info,
            "root_seed": str(spec.seed),
            "task": spec.task,
            "sweep_path": str(spec.path),
            "sweep_text": spec.text,
            "base_path": str(spec.base_path),
            "base_text": spec.base_text,
            "updated_at": now,
        }
        with self.transaction() as conn:
            cur = conn.execute(
                "INSERT INTO runs(started_at, simcheck_version, numpy_version, scipy_version, python_version,"
                " root_seed, sweep_path, sweep_text, base_text, cells_total, cells_before, backend, jobs)"
                " VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)",
                (
                    now,
                    info["simcheck_version"],
                    info["numpy_version"],
                    info["scipy_version"],
                    info["python_version"],
                    spec.seed,
                    str(spec.path),
                    spec.text,
                    spec.base_text,
                    cells_total,
                    cells_before,
                    backend,
                    jobs,
                ),
            )
            conn.executemany("INSERT OR REPLACE INTO meta(key, value) VALUES (?, ?)", list(meta.items()))
            return int(cur.lastrowid)

    def put(self, cell: StoredCell, run_id: int | None = None) -> None:
        """Store one finished cell in its own transaction (replacing an earlier error row)."""
        with self.transaction() as conn:
            conn.execute(
                "INSERT OR REPLACE INTO cells(cell_key, cell_index, task, vary_json, scenario_json, task_json, seed,"
                " status, result_json, error, traceback, seconds, finished_at, worker, simcheck_version, run_id)"
                " VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)",
                (
                    cell.cell_key,
                    cell.cell_index,
                    cell.task,
                    json.dumps(cell.values, sort_keys=False, allow_nan=False),
                    dumps(cell.scenario),
                    dumps(cell.task_args),
                    cell.seed,
                    cell.status,
                    None if cell.result is None else dumps(cell.result),
                    cell.error,
                    cell.traceback,
                    cell.seconds,
                    utc_now(),
                    cell.worker,
                    versions()["simcheck_version"],
                    run_id,
                ),
            )

    def close(self) -> None:
        self.conn.close()

    def __enter__(self) -> "SweepStore":
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()


def open_readonly(path: str | Path, field: str = "FILE.sqlite") -> sqlite3.Connection:
    """Open a store read-only (safe while a sweep writes to it).

    Raises
    ------
    InputError
        When the file is missing or is not a sweep store.
    """
    p = Path(path)
    if not p.is_file():
        raise InputError(field, f"file not found: {p}")
    try:
        conn = sqlite3.connect(f"{p.resolve().as_uri()}?mode=ro", uri=True, timeout=30.0)
        conn.execute("SELECT value FROM meta WHERE key = 'schema_version'").fetchone()
        conn.execute("SELECT cell_key FROM cells LIMIT 1").fetchall()
    except sqlite3.DatabaseError as exc:
        raise InputError(field, f"{p} is not a simcheck sweep store ({exc})") from None
    return conn


def read_cells(conn: sqlite3.Connection) -> Iterator[dict[str, Any]]:
    """Every stored cell in grid order, with JSON columns decoded."""
    conn.row_factory = sqlite3.Row
    for row in conn.execute("SELECT * FROM cells ORDER BY cell_index, cell_key"):
        d = dict(row)
        d["values"] = json.loads(d.pop("vary_json"))
        d["scenario"] = json.loads(d.pop("scenario_json"))
        d["task_args"] = json.loads(d.pop("task_json"))
        rj = d.pop("result_json")
        d["result"] = None if rj is None else json.loads(rj)
        yield d


# Result fields in the order of the command-line contract (INTERFACE.md); others follow alphabetically.
_RESULT_ORDER = (
    "n", "n_b", "reached", "n_formula", "n_range_low", "n_range_high", "coverage", "coverage_mcse",
    "miss_low", "miss_high", "margin_mean", "margin_median", "margin_p90", "assurance", "assurance_mcse",
    "replicates", "replicates_used", "true_value", "method", "best", "seed", "exact",
)

_CELL_COLUMNS = ("status", "task", "error", "seconds", "finished_at", "worker", "root_seed", "cell_index", "cell_key")


def _scalar(value: Any) -> Any:
    if isinstance(value, (dict, list)):
        return json.dumps(value, sort_keys=True)
    return value


def _flatten_result(d: dict[str, Any], prefix: str = "") -> dict[str, Any]:
    out: dict[str, Any] = {}
    for k, v in d.items():
        name = f"{prefix}{k}"
        if isinstance(v, dict):
            out.update(_flatten_result(v, f"{name}."))
        elif k == "n_range" and isinstance(v, list) and len(v) == 2:
            out[f"{name}_low"], out[f"{name}_high"] = v
        elif k == "n_range" and v is None:
            out[f"{name}_low"] = out[f"{name}_high"] = None
        elif isinstance(v, list):
            out[name] = " | ".join(str(x) for x in v) if all(not isinstance(x, (dict, list)) for x in v) else json.dumps(v)
        else:
            out[name] = v
    return out


def result_rows(result: dict[str, Any] | None) -> list[dict[str, Any]]:
    """The flat table rows of one cell's result.

    A check or curve result gives one row per n; a search over several
    interval methods one row per method (with the column ``best``); a single
    search one row. An error cell gives one empty row.
    """
    if result is None:
        return [{}]
    if isinstance(result.get("rows"), list):
        return [_flatten_result(r) for r in result["rows"]] or [{}]
    if isinstance(result.get("by_method"), list):
        return [{**_flatten_result(r), "best": result.get("best")} for r in result["by_method"]] or [{}]
    return [_flatten_result(result)]


def cells_frame(path: str | Path):
    """The store as a pandas DataFrame: one row per cell (per n for check and curve, per method for comparisons).

    Columns: ``status``, one column per varied dotted key (``data.cv``, ...),
    the flattened result fields (nested keys joined with dots, e.g.
    ``targets.assurance``; ``n_range`` as ``n_range_low`` / ``n_range_high``),
    then the cell's bookkeeping (``task``, ``error``, ``seconds``,
    ``finished_at``, ``worker``, ``root_seed``, ``cell_index``, ``cell_key``).
    Opens the file read-only, so it works while a sweep writes to it.
    """
    import pandas as pd

    conn = open_readonly(path)
    try:
        records: list[dict[str, Any]] = []
        vary_cols: list[str] = []
        result_cols: list[str] = []
        for cell in read_cells(conn):
            for k in cell["values"]:
                if k not in vary_cols:
                    vary_cols.append(k)
            base = {
                "cell_key": cell["cell_key"],
                "cell_index": cell["cell_index"],
                "task": cell["task"],
                "status": cell["status"],
                "error": cell["error"],
                "seconds": cell["seconds"],
                "finished_at": cell["finished_at"],
                "worker": cell["worker"],
                "root_seed": cell["seed"],
            }
            values = {k: _scalar(v) for k, v in cell["values"].items()}
            for r in result_rows(cell["result"]):
                for k in r:
                    if k not in result_cols:
                        result_cols.append(k)
                records.append({**r, **base, **values})
    finally:
        conn.close()
    # a result field never shadows a bookkeeping or varied column
    result_cols = [c for c in result_cols if c not in _CELL_COLUMNS and c not in vary_cols]
    rank = {c: i for i, c in enumerate(_RESULT_ORDER)}
    result_cols.sort(key=lambda c: (rank.get(c, len(rank)), c))
    # what an analyst reads first (status, the varied values, the results), bookkeeping last
    tail = [c for c in _CELL_COLUMNS if c != "status"]
    return pd.DataFrame.from_records(records, columns=["status"] + vary_cols + result_cols + tail)
