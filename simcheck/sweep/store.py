"""The sweep store: one SQLite file, one row per finished cell.

Only the driver process writes, one transaction per finished cell, so a
killed sweep loses at most the cells in flight and a store never holds half a
row. The file is in WAL mode: readers (``simcheck export``, reports) open it
read-only while a sweep is writing, and see every committed cell. Committed
cells sit in ``FILE.sqlite-wal`` until a checkpoint copies them into the main
file; the driver checkpoints at least every :data:`CHECKPOINT_SECONDS` and at
every exit it lives through, so a copy of the ``.sqlite`` file alone holds
every cell but those of the last seconds before a ``kill -9``.

Schema (``schema_version`` 2)
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
    ``simcheck_version``, ``run_id``, ``checksum`` (SHA-256 of the row's
    result-making columns, :mod:`simcheck.sweep.integrity`).
``meta``
    key/value text: ``schema_version``, ``simcheck_version``,
    ``numpy_version``, ``scipy_version``, ``python_version``, ``root_seed``,
    ``task``, ``sweep_path``, ``sweep_text``, ``base_path``, ``base_text``,
    ``created_at``, ``updated_at`` (the values of the latest run),
    ``sweep_id`` and ``sweep_binding`` (the sweep this store belongs to, see
    :func:`simcheck.sweep.grid.sweep_binding`), ``migrated_from`` (when an
    older store was upgraded).
``runs``
    one row per invocation: ``run_id``, ``started_at``, the same versions,
    ``root_seed``, ``sweep_text``, ``base_text``, ``cells_total``,
    ``cells_before``, ``backend``, ``jobs``.
``writer``
    at most one row (``id`` = 1): ``pid``, ``host``, ``started_at`` of the
    sweep writing the store now; removed at exit. A row left by a killed
    sweep on this host is taken over when its process is gone.

Schema 1 stores (no checksums, no binding, an older cell-key normalisation)
are upgraded in place the first time a sweep opens them: each row is re-keyed
with today's :func:`simcheck.sweep.grid.cell_key` from its own stored
scenario, task arguments and seed, and gets its checksum.
"""

from __future__ import annotations

import json
import os
import socket
import sqlite3
import sys
import time
from dataclasses import dataclass
from datetime import datetime, timezone
from pathlib import Path
from typing import Any, Iterator

from simcheck.errors import InputError
from simcheck.sweep.integrity import cell_checksum, cell_problem, has_checksums

SCHEMA_VERSION = "2"

#: the longest time committed cells wait in the -wal file before a checkpoint
CHECKPOINT_SECONDS = 2.0

#: the first bytes of every SQLite 3 database file (SQLite file format, section 1.3)
SQLITE_HEADER = b"SQLite format 3\x00"

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
    run_id           INTEGER,
    checksum         TEXT
);
CREATE TABLE IF NOT EXISTS writer (
    id         INTEGER PRIMARY KEY CHECK (id = 1),
    pid        INTEGER NOT NULL,
    host       TEXT NOT NULL,
    started_at TEXT NOT NULL
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


class StoreWriteError(InputError):
    """The store cannot be written (disk full, file size limit, I/O error); what is committed stays."""


def sidecars(path: Path) -> list[Path]:
    """The ``-wal`` and ``-shm`` files SQLite keeps beside a WAL-mode database."""
    return [path.with_name(path.name + "-wal"), path.with_name(path.name + "-shm")]


def pid_alive(pid: int) -> bool:
    """Whether a process of this host with ``pid`` is running (a zombie counts as gone)."""
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    except (OverflowError, ValueError):
        return False
    try:
        stat = Path(f"/proc/{pid}/stat").read_text()
        return stat.rsplit(")", 1)[1].split()[0] != "Z"
    except (OSError, IndexError):
        return True


def _preflight(path: Path) -> bool:
    """Refuse a --store that cannot be (or must not be) a store; True when the file exists."""
    if path.is_dir():
        raise InputError("--store", f"{path} is a folder; name a file, e.g. {path / 'sweep.sqlite'}")
    parent = path.parent if str(path.parent) else Path(".")
    if not parent.is_dir():
        raise InputError("--store", f"folder does not exist: {parent}")
    if not os.access(parent, os.W_OK | os.X_OK):
        raise InputError("--store", f"cannot write in the folder {parent} (a store needs its -wal and -shm files beside it)")
    if not path.exists():
        return False
    if not path.is_file():
        raise InputError("--store", f"{path} is not a regular file")
    if not os.access(path, os.R_OK | os.W_OK):
        raise InputError("--store", f"no permission to write {path}; make it writable or choose another --store file")
    with open(path, "rb") as fh:
        head = fh.read(len(SQLITE_HEADER))
    if head and head != SQLITE_HEADER:
        raise InputError("--store", f"{path} is not an SQLite file (nor a simcheck sweep store); choose another --store file")
    return True


def _foreign_tables(conn: sqlite3.Connection, path: Path) -> None:
    # A store is ours only when it has meta with a schema_version; any other database is someone's data.
    tables = {r[0] for r in conn.execute("SELECT name FROM sqlite_master WHERE type = 'table'")}
    tables.discard("sqlite_sequence")
    if not tables:
        return
    ours = "meta" in tables and "cells" in tables
    if ours:
        ours = conn.execute("SELECT 1 FROM meta WHERE key = 'schema_version'").fetchone() is not None
    if not ours:
        names = ", ".join(sorted(tables)[:5])
        raise InputError(
            "--store", f"{path} is an SQLite database but not a simcheck sweep store (tables: {names}); "
            "it was left untouched: choose another --store file"
        )


class SweepStore:
    """Read-write access for the sweep driver (the only writer of a store).

    Opening refuses a folder, a file that cannot be written, a file that is
    not SQLite, an SQLite database that is not a simcheck store and a store
    of a newer schema, each with one line; it upgrades a schema-1 store.
    A store it created and could not finish is removed again.

    Parameters
    ----------
    path : str or Path
        The SQLite file; created with the schema when missing.
    """

    def __init__(self, path: str | Path) -> None:
        self.path = Path(path)
        existed = _preflight(self.path)
        self.notices: list[str] = []
        self._locked = False
        self._last_checkpoint = time.monotonic()
        self.conn: sqlite3.Connection | None = None
        try:
            # isolation_level=None: we issue BEGIN/COMMIT ourselves, one transaction per cell
            self.conn = sqlite3.connect(str(self.path), timeout=30.0, isolation_level=None)
            _foreign_tables(self.conn, self.path)
            self.conn.execute("PRAGMA journal_mode=WAL")
            # NORMAL is durable across process kills in WAL mode (only an OS crash may lose the last commits)
            self.conn.execute("PRAGMA synchronous=NORMAL")
            self._check_schema()
        except InputError:
            self._abandon(existed)
            raise
        except sqlite3.DatabaseError as exc:
            self._abandon(existed)
            raise _write_error(self.path, exc) from None

    def _abandon(self, existed: bool) -> None:
        # a store this call created and could not finish must not stay behind as a 0-byte or half-made file
        if self.conn is not None:
            self.conn.close()
            self.conn = None
        if not existed:
            for p in [self.path, *sidecars(self.path)]:
                try:
                    p.unlink()
                except OSError:
                    pass

    def _check_schema(self) -> None:
        tables = {r[0] for r in self.conn.execute("SELECT name FROM sqlite_master WHERE type = 'table'")}
        if "meta" not in tables:
            # one transaction: a store is never left with tables but no schema_version
            self.conn.executescript(
                f"BEGIN IMMEDIATE; {_SCHEMA} INSERT INTO meta(key, value) VALUES "
                f"('schema_version', '{SCHEMA_VERSION}'), ('created_at', '{utc_now()}'); COMMIT;"
            )
            return
        row = self.conn.execute("SELECT value FROM meta WHERE key = 'schema_version'").fetchone()
        if row[0] == "1":
            from simcheck.sweep.migrate import upgrade_from_1

            self.notices.append(upgrade_from_1(self))
        elif row[0] != SCHEMA_VERSION:
            raise InputError(
                "--store", f"{self.path} has store schema {row[0]}; this simcheck reads and writes schema {SCHEMA_VERSION} "
                "(and upgrades schema 1): use the simcheck that wrote it, or a new store"
            )

    class _Tx:
        def __init__(self, conn: sqlite3.Connection) -> None:
            self.conn = conn

        def __enter__(self) -> sqlite3.Connection:
            self.conn.execute("BEGIN IMMEDIATE")
            return self.conn

        def __exit__(self, exc_type, exc, tb) -> None:
            if exc_type is None:
                self.conn.execute("COMMIT")
            elif self.conn.in_transaction:
                self.conn.execute("ROLLBACK")

    def transaction(self) -> "SweepStore._Tx":
        return SweepStore._Tx(self.conn)

    # --- the single writer -----------------------------------------------------
    def acquire(self) -> None:
        """Become the store's only writer, or refuse with one line naming the one that is."""
        host, pid = socket.gethostname(), os.getpid()
        with self.transaction() as conn:
            row = conn.execute("SELECT pid, host, started_at FROM writer WHERE id = 1").fetchone()
            if row is not None and (row[0], row[1]) != (pid, host):
                other_pid, other_host, since = row
                if other_host != host or pid_alive(int(other_pid)):
                    where = f"process {other_pid}" + ("" if other_host == host else f" on {other_host}")
                    raise InputError(
                        "--store", f"{self.path} is being written by another sweep ({where}, since {since}); "
                        f"wait for it to finish, or, if no sweep is running, clear it with: simcheck store unlock {self.path}"
                    )
                self.notices.append(
                    f"the sweep that wrote {self.path} before (process {other_pid}, since {since}) ended without "
                    "closing it; carrying on where it stopped"
                )
            conn.execute(
                "INSERT OR REPLACE INTO writer(id, pid, host, started_at) VALUES (1, ?, ?, ?)", (pid, host, utc_now())
            )
        self._locked = True

    def release(self) -> None:
        if self._locked and self.conn is not None:
            try:
                with self.transaction() as conn:
                    conn.execute("DELETE FROM writer WHERE id = 1 AND pid = ? AND host = ?", (os.getpid(), socket.gethostname()))
            except sqlite3.DatabaseError:
                pass  # a full disk must not hide the real error; the next sweep takes the lock over
        self._locked = False

    # --- binding to one sweep ----------------------------------------------------
    def bind(self, sweep_id: str, binding: dict[str, Any], legacy: dict[str, str] | None = None) -> None:
        """Tie the store to one sweep; refuse (one line) a store of another sweep.

        ``binding`` is the readable form of ``sweep_id`` (task, its arguments,
        root seed, base scenario hash, varied keys), used to say what differs.
        """
        meta = self.meta()
        have = meta.get("sweep_id")
        if have is None:
            old = {k: meta[k] for k in ("task", "root_seed") if k in meta}
            new = {"task": binding["task"], "root_seed": str(binding["seed"])}
            diff = [k for k in old if old[k] != new[k]]
            if diff and self.cells_count():
                raise InputError("--store", f"{self.path} holds the cells of another sweep (its {', '.join(diff)} differ); use a new store for this sweep")
            with self.transaction() as conn:
                conn.executemany(
                    "INSERT OR REPLACE INTO meta(key, value) VALUES (?, ?)",
                    [("sweep_id", sweep_id), ("sweep_binding", dumps(binding))],
                )
            return
        if have == sweep_id:
            return
        try:
            stored = json.loads(meta.get("sweep_binding") or "{}")
        except ValueError:
            stored = {}
        diff = [k for k in binding if stored.get(k) != binding[k]] or ["definition"]
        raise InputError(
            "--store", f"{self.path} belongs to another sweep (its {', '.join(diff).replace('_', ' ')} differ"
            f"{'s' if diff == ['definition'] else ''}); use a new store for this sweep"
        )

    # --- reading and writing cells -------------------------------------------------
    def cells_count(self) -> int:
        return int(self.conn.execute("SELECT COUNT(*) FROM cells").fetchone()[0])

    def status_by_key(self) -> dict[str, str]:
        """Each stored cell's status; a cell that fails its checksum is ``'corrupt'`` (and runs again)."""
        self.conn.row_factory = sqlite3.Row
        try:
            return {
                r["cell_key"]: ("corrupt" if cell_problem(dict(r)) else r["status"])
                for r in self.conn.execute("SELECT * FROM cells")
            }
        finally:
            self.conn.row_factory = None

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
                    now, info["simcheck_version"], info["numpy_version"], info["scipy_version"],
                    info["python_version"], spec.seed, str(spec.path), spec.text, spec.base_text,
                    cells_total, cells_before, backend, jobs,
                ),
            )
            conn.executemany("INSERT OR REPLACE INTO meta(key, value) VALUES (?, ?)", list(meta.items()))
            return int(cur.lastrowid)

    def put(self, cell: StoredCell, run_id: int | None = None) -> None:
        """Store one finished cell in its own transaction (replacing an earlier error or corrupt row)."""
        row = {
            "cell_key": cell.cell_key,
            "task": cell.task,
            "vary_json": json.dumps(cell.values, sort_keys=False, allow_nan=False),
            "scenario_json": dumps(cell.scenario),
            "task_json": dumps(cell.task_args),
            "seed": int(cell.seed),
            "status": cell.status,
            "result_json": None if cell.result is None else dumps(cell.result),
            "error": cell.error,
        }
        row.update(
            cell_index=cell.cell_index, traceback=cell.traceback, seconds=cell.seconds, finished_at=utc_now(),
            worker=cell.worker, simcheck_version=versions()["simcheck_version"], run_id=run_id,
            checksum=cell_checksum(row),
        )
        cols = ", ".join(row)
        with self.transaction() as conn:
            conn.execute(f"INSERT OR REPLACE INTO cells({cols}) VALUES ({', '.join('?' * len(row))})", tuple(row.values()))
        if time.monotonic() - self._last_checkpoint >= CHECKPOINT_SECONDS:
            self.checkpoint()

    def checkpoint(self, mode: str = "PASSIVE") -> None:
        """Copy committed cells from the -wal file into the main file (PASSIVE never waits for readers)."""
        self.conn.execute(f"PRAGMA wal_checkpoint({mode})").fetchall()
        self._last_checkpoint = time.monotonic()

    def close(self) -> None:
        if self.conn is None:
            return
        try:
            self.release()
            self.checkpoint("TRUNCATE")
        except sqlite3.DatabaseError:
            pass
        self.conn.close()
        self.conn = None

    def __enter__(self) -> "SweepStore":
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()


def _write_error(path: Path, exc: sqlite3.DatabaseError) -> InputError:
    text = str(exc)
    if "readonly" in text or "read-only" in text:
        return InputError("--store", f"no permission to write {path}; make it writable or choose another --store file")
    if "not a database" in text or "malformed" in text:
        return InputError("--store", f"{path} is not a simcheck sweep store ({text})")
    return StoreWriteError("--store", f"cannot write {path}: {text} (a full disk or a file size limit?)")


def store_write_error(path: Path, exc: sqlite3.DatabaseError) -> InputError:
    """One line for a store that stopped accepting writes mid-sweep."""
    return _write_error(path, exc)


_COPIES: list[Any] = []


def _readonly_copy(p: Path) -> sqlite3.Connection:
    # A WAL store in a folder nobody may write (an archive, a read-only mount) cannot
    # be opened even read-only while its -wal file holds cells: SQLite needs a -shm
    # beside it. Read a private copy of the file and its -wal instead.
    import atexit
    import shutil
    import tempfile

    tmp = tempfile.TemporaryDirectory(prefix="simcheck-store-")
    _COPIES.append(tmp)
    atexit.register(tmp.cleanup)
    target = Path(tmp.name) / p.name
    shutil.copyfile(p, target)
    wal = sidecars(p)[0]
    if wal.is_file():
        shutil.copyfile(wal, sidecars(target)[0])
    return sqlite3.connect(f"{target.as_uri()}?mode=ro", uri=True, timeout=30.0)


def _connect_readonly(p: Path) -> sqlite3.Connection:
    conn = sqlite3.connect(f"{p.resolve().as_uri()}?mode=ro", uri=True, timeout=30.0)
    try:
        conn.execute("SELECT name FROM sqlite_master LIMIT 1").fetchall()
        return conn
    except sqlite3.OperationalError:
        conn.close()
        if os.access(p.parent, os.W_OK):
            raise
    wal = sidecars(p)[0]
    if not wal.exists() or wal.stat().st_size == 0:
        # immutable: nothing can change the file, so SQLite needs no -shm and takes no locks
        return sqlite3.connect(f"{p.resolve().as_uri()}?immutable=1", uri=True, timeout=30.0)
    return _readonly_copy(p)


def open_readonly(path: str | Path, field: str = "FILE.sqlite") -> sqlite3.Connection:
    """Open a store read-only (safe while a sweep writes to it, and in a read-only folder).

    Raises
    ------
    InputError
        When the file is missing or is not a sweep store.
    """
    p = Path(path)
    if p.is_dir():
        raise InputError(field, f"{p} is a folder, not a sweep store")
    if not p.is_file():
        raise InputError(field, f"file not found: {p}")
    try:
        with open(p, "rb") as fh:
            if fh.read(len(SQLITE_HEADER)) != SQLITE_HEADER:
                raise InputError(field, f"{p} is not a simcheck sweep store (not an SQLite file)")
    except OSError as exc:
        raise InputError(field, f"cannot read {p}: {exc.strerror or exc}") from None
    try:
        conn = _connect_readonly(p)
        conn.execute("SELECT value FROM meta WHERE key = 'schema_version'").fetchone()
        conn.execute("SELECT cell_key FROM cells LIMIT 1").fetchall()
    except sqlite3.DatabaseError as exc:
        raise InputError(field, f"{p} is not a simcheck sweep store ({exc})") from None
    return conn


def _decode(row: dict[str, Any], checksums: bool) -> dict[str, Any]:
    problem = cell_problem(row, checksums=checksums) or ("unknown status '?'" if row.get("status") == "?" else None)
    d = {k: v for k, v in row.items() if k not in ("vary_json", "scenario_json", "task_json", "result_json")}
    if problem:
        # a corrupt row still names its cell where it can, but passes on no numbers
        try:
            values = json.loads(row.get("vary_json") or "{}")
            values = values if isinstance(values, dict) else {}
        except ValueError:
            values = {}
        d.update(values=values, scenario={}, task_args={}, result=None, status="corrupt",
                 error=f"stored cell cannot be trusted: {problem}; re-run the sweep to compute it again")
        return d
    d["values"] = json.loads(row["vary_json"])
    d["scenario"] = json.loads(row["scenario_json"])
    d["task_args"] = json.loads(row["task_json"])
    rj = row["result_json"]
    d["result"] = None if rj is None else json.loads(rj)
    if not isinstance(d["values"], dict) or not isinstance(d["result"], (dict, type(None))):
        # only a store without checksums (schema 1) can get here
        return _decode({**row, "status": "?"}, checksums=False)
    return d


def read_cells(conn: sqlite3.Connection) -> Iterator[dict[str, Any]]:
    """Every stored cell in grid order, with JSON columns decoded.

    A cell that fails its checksum or holds invalid JSON comes with
    ``status = 'corrupt'``, its ``error`` saying why, and no result.
    """
    checksums = has_checksums(conn)
    conn.row_factory = sqlite3.Row
    for row in conn.execute("SELECT * FROM cells ORDER BY cell_index, cell_key"):
        yield _decode(dict(row), checksums)


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
    Opens the file read-only, so it works while a sweep writes to it. A cell
    that fails its checksum has ``status = 'corrupt'`` and empty results;
    ``frame.attrs["corrupt_cells"]`` counts them.
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
    corrupt = len({r["cell_key"] for r in records if r["status"] == "corrupt"})
    # a result field never shadows a bookkeeping or varied column
    result_cols = [c for c in result_cols if c not in _CELL_COLUMNS and c not in vary_cols]
    rank = {c: i for i, c in enumerate(_RESULT_ORDER)}
    result_cols.sort(key=lambda c: (rank.get(c, len(rank)), c))
    # what an analyst reads first (status, the varied values, the results), bookkeeping last
    tail = [c for c in _CELL_COLUMNS if c != "status"]
    frame = pd.DataFrame.from_records(records, columns=["status"] + vary_cols + result_cols + tail)
    frame.attrs["corrupt_cells"] = corrupt
    return frame


def clear_writer(path: str | Path) -> tuple[int, str, str] | None:
    """Remove the writer row a sweep left (``simcheck store unlock``); the row removed, or None.

    Refuses (one line) while that sweep is still running on this host.
    """
    p = Path(path)
    open_readonly(p, "FILE.sqlite").close()  # the same checks and messages as export
    with SweepStore(p) as st:
        row = st.conn.execute("SELECT pid, host, started_at FROM writer WHERE id = 1").fetchone()
        if row is None:
            return None
        if row[1] == socket.gethostname() and pid_alive(int(row[0])):
            raise InputError("FILE.sqlite", f"{p} is being written by a running sweep (process {row[0]}); stop it first")
        with st.transaction() as conn:
            conn.execute("DELETE FROM writer WHERE id = 1")
        return int(row[0]), str(row[1]), str(row[2])


def input_files(path: str | Path) -> list[Path]:
    """The files a store's sweep read: the sweep file, its base scenario and the data files its scenarios name.

    Relative data-file names are resolved against the base scenario's folder
    (and, to be safe, the sweep file's). Used so that ``export`` never writes
    over an input.
    """
    conn = open_readonly(path)
    try:
        meta = dict(conn.execute("SELECT key, value FROM meta"))
        names: set[str] = set()
        for (text,) in conn.execute("SELECT DISTINCT scenario_json FROM cells"):
            try:
                _file_names(json.loads(text), names)
            except (TypeError, ValueError):
                continue
    finally:
        conn.close()
    out = [Path(meta[k]) for k in ("sweep_path", "base_path") if meta.get(k)]
    folders = {q.parent for q in out}
    for name in names:
        f = Path(name)
        out.extend([f] if f.is_absolute() else [d / f for d in folders] or [f])
    return out


def _file_names(value: Any, out: set[str]) -> None:
    if isinstance(value, dict):
        for k, v in value.items():
            if k == "file" and isinstance(v, str):
                out.add(v)
            else:
                _file_names(v, out)
    elif isinstance(value, list):
        for v in value:
            _file_names(v, out)
