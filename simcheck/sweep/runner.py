"""Sweeps: run every cell of a grid, store each as it finishes, resume.

The driver validates the whole grid (:mod:`simcheck.sweep.grid`), opens the
store (:mod:`simcheck.sweep.store`), and hands the cells the store lacks to
joblib: local processes (``backend="local"``, ``jobs`` workers) or an existing
Dask cluster through joblib's dask backend (``backend="dask"``). Results
stream back in completion order and the driver writes each one at once, in
its own transaction; workers never touch the store.

Re-running the same sweep resumes: cells stored with status ``'ok'`` are
skipped, cells stored with status ``'error'`` are run again (an error may have
been a lack of memory or a since-fixed bug; a result never is), and cells new
to the grid are added, keeping the rows of cells no longer in it.

A local worker process that dies (killed, out of memory) loses only the
cells it was running: the driver records it, starts a fresh pool and runs
the unfinished cells again, up to :data:`MAX_RESTARTS` times per invocation.
Workers watch their driver and exit within about a second once it is gone
(e.g. after ``kill -9``), so they never compute on for nobody.

The store is bound to its sweep (:func:`simcheck.sweep.grid.sweep_binding`)
and has one writer at a time (the ``writer`` row); a stored cell that fails
its checksum is computed again.

Every cell draws from its own stream,
``SeedSequence(root_seed, spawn_key=(key_from_text(cell_key),))``, so its
result is bitwise the same whatever the worker count, backend, order or number
of interruptions.
"""

from __future__ import annotations

import os
import socket
import sqlite3
import time
import traceback
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Callable

import numpy as np

from simcheck.errors import InputError
from simcheck.rng import key_from_text
from simcheck.sweep.grid import Cell, SweepSpec, expand, read_sweep
from simcheck.sweep.store import StoredCell, SweepStore, dumps, store_write_error

BACKENDS = ("local", "dask")

#: the most local worker processes one sweep may ask for
MAX_JOBS = 1024

#: fresh worker pools one invocation starts after a worker died, before it stops
MAX_RESTARTS = 3

#: seconds between a worker's checks that its driver is still alive
WATCH_SECONDS = 0.5

#: ``cell_func(scenario, task, seed, **task_kwargs) -> dict`` computes one cell
CellFunc = Callable[..., dict]


@dataclass(frozen=True)
class CellOutcome:
    """What a worker sends back to the driver for one cell."""

    cell_key: str
    status: str
    result: dict[str, Any] | None
    error: str | None
    traceback: str | None
    seconds: float
    worker: str


@dataclass(frozen=True)
class SweepSummary:
    """Counts of one sweep invocation."""

    cells_total: int
    done_before: int
    run_now: int
    failed: int
    store: str
    interrupted: bool = False
    pending: int = 0

    @property
    def stored_ok(self) -> int:
        return self.done_before + self.run_now - self.failed

    def to_dict(self) -> dict[str, Any]:
        return {
            "cells_total": self.cells_total,
            "done_before": self.done_before,
            "run_now": self.run_now,
            "failed": self.failed,
            "remaining": self.pending,
            "interrupted": self.interrupted,
            "store": self.store,
        }


class SweepInterrupted(KeyboardInterrupt):
    """Ctrl-C (or SIGTERM turned into it) during a sweep; finished cells are stored."""

    def __init__(self, summary: SweepSummary) -> None:
        super().__init__("sweep interrupted")
        self.summary = summary


class SweepAborted(RuntimeError):
    """The execution machinery failed (e.g. a worker process died); finished cells are stored."""

    def __init__(self, summary: SweepSummary, cause: BaseException) -> None:
        first = (str(cause).strip().splitlines() or [""])[0].strip()
        super().__init__(f"{type(cause).__name__}: {first}" if first else type(cause).__name__)
        self.summary = summary
        self.cause = cause


def cell_seed(root_seed: int, cell_key: str) -> int:
    """The seed of one cell: a pure function of the root seed and the cell key.

    It is the first 63 bits of ``SeedSequence(root_seed,
    spawn_key=(key_from_text(cell_key),))``, so cells get independent streams,
    and, being a plain int that the cell's result reports, any single cell can
    be repeated with ``simcheck check|curve|search --seed S`` on its scenario.
    """
    ss = np.random.SeedSequence(int(root_seed), spawn_key=(key_from_text(cell_key),))
    return int(ss.generate_state(1, dtype=np.uint64)[0] >> np.uint64(1))


def run_cell(scenario: Any, task: str, seed: int, **task_kwargs: Any) -> dict[str, Any]:
    """Compute one cell with :func:`simcheck.tasks.run_task` (the default ``cell_func``).

    A check over a list of n gives ``{"rows": [check, ...]}``, the shape of a curve.
    """
    from simcheck.tasks import run_task

    out = run_task(scenario, task, seed=seed, **task_kwargs)
    if isinstance(out, list):
        return {"rows": [r.to_dict() for r in out]}
    return out.to_dict()


def _execute(cell_func: CellFunc, cell_key: str, scenario: Any, task: str, kwargs: dict, seed, in_worker: bool = False) -> CellOutcome:
    # Runs in a worker. Any exception of the cell becomes an 'error' row so the
    # sweep goes on; only the machinery itself (a dead worker) can stop it.
    worker = f"{socket.gethostname()}:{os.getpid()}"
    if in_worker:
        _one_thread_per_worker()
    t0 = time.perf_counter()
    try:
        result = cell_func(scenario, task, seed, **kwargs)
        from simcheck.results import clean_json

        result = clean_json(result)
        dumps(result)  # a result the store cannot hold is this cell's error, not the sweep's
        return CellOutcome(cell_key, "ok", result, None, None, time.perf_counter() - t0, worker)
    except Exception as exc:
        text = exc.one_line() if isinstance(exc, InputError) else f"{type(exc).__name__}: {exc}"
        return CellOutcome(
            cell_key,
            "error",
            None,
            text.replace("\n", " "),
            traceback.format_exc(),
            time.perf_counter() - t0,
            worker,
        )


def _worker_init(driver: int | None = None) -> None:
    # Ctrl-C on a terminal reaches the whole process group; only the driver should
    # react (it stops the workers and keeps what is stored), not every worker with a traceback.
    import signal

    signal.signal(signal.SIGINT, signal.SIG_IGN)
    _one_thread_per_worker()
    # the driver's pid comes from the driver: a worker that starts after the driver died must notice too
    _watch_driver(os.getppid() if driver is None else driver)


def _watch_driver(driver: int) -> None:
    # A killed driver (kill -9) cannot stop its workers; without this they would
    # finish their cells for nobody and hold the terminal's pipes for minutes.
    import threading

    def watch() -> None:
        while os.getppid() == driver:
            time.sleep(WATCH_SECONDS)
        os._exit(1)

    threading.Thread(target=watch, name="simcheck-driver-watch", daemon=True).start()


def _one_thread_per_worker() -> None:
    # Parallel cells already fill the cores: bootstrap threads inside each
    # worker would only oversubscribe them (results do not depend on it).
    os.environ.setdefault("SIMCHECK_THREADS", "1")


def _worker_version() -> str:
    import simcheck

    return simcheck.__version__


def connect_dask(scheduler: str | None):
    """A ``distributed.Client`` for an existing cluster whose workers run this simcheck version.

    Raises
    ------
    InputError
        dask.distributed missing, no address, cluster unreachable, or workers
        without simcheck (or with another version).
    """
    if not scheduler:
        raise InputError("--scheduler", "--backend dask needs the scheduler address, e.g. tcp://10.0.0.5:8786")
    try:
        from distributed import Client
    except ImportError:
        raise InputError(
            "--backend", "dask needs dask.distributed: pip install 'simcheck[distributed]'"
        ) from None
    import simcheck

    try:
        client = Client(scheduler, timeout="20s")
    except (OSError, TimeoutError, ValueError) as exc:
        raise InputError("--scheduler", f"cannot connect to {scheduler}: {exc}") from None
    try:
        got = client.run(_worker_version)
    except Exception as exc:
        client.close()
        raise InputError(
            "--scheduler",
            f"the workers of {scheduler} cannot run simcheck ({type(exc).__name__}: {exc}); "
            f"install simcheck {simcheck.__version__} on every worker",
        ) from None
    if not got:
        client.close()
        raise InputError(
            "--scheduler", f"the cluster at {scheduler} has no workers; start some (dask worker {scheduler}) and run again"
        )
    wrong = sorted(f"{w} has {v}" for w, v in got.items() if v != simcheck.__version__)
    if wrong:
        client.close()
        raise InputError(
            "--scheduler", f"workers must run simcheck {simcheck.__version__}: " + ", ".join(wrong)
        )
    return client


def run_sweep(
    sweep: str | Path | SweepSpec,
    store: str | Path,
    *,
    jobs: int = 1,
    backend: str = "local",
    scheduler: str | None = None,
    cell_func: CellFunc | None = None,
    on_start: Callable[[int, int], None] | None = None,
    on_cell: Callable[[CellOutcome, int, int], None] | None = None,
    on_notice: Callable[[str], None] | None = None,
    on_validate: Callable[[int, int], None] | None = None,
) -> SweepSummary:
    """Run the cells of a sweep that ``store`` lacks, storing each as it finishes.

    Parameters
    ----------
    sweep : path or SweepSpec
        The sweep file (or an already read one).
    store : path
        SQLite file; created when missing. Only this process writes to it.
    jobs : int
        Local worker processes (``backend="local"``), at most :data:`MAX_JOBS`;
        not used with ``backend="dask"``, where every worker thread of the
        cluster runs cells.
    backend : {"local", "dask"}
    scheduler : str, optional
        Address of the Dask scheduler (``backend="dask"``).
    cell_func : callable, optional
        ``cell_func(scenario, task, seed, **task_kwargs) -> dict``; default
        :func:`run_cell`. Must be importable by the workers.
    on_start : callable, optional
        ``on_start(done_before, total)`` once the store is open.
    on_cell : callable, optional
        ``on_cell(outcome, done, total)`` after each cell is stored.
    on_notice : callable, optional
        ``on_notice(line)`` for what the user should know (store upgraded,
        corrupt cells computed again, a worker died and its cells restart).
    on_validate : callable, optional
        ``on_validate(done, total)`` while the grid's cells are checked.

    Returns
    -------
    SweepSummary

    Raises
    ------
    InputError
        Bad sweep file, grid cell, options or store (another sweep's, one
        being written by another sweep, not a store, not writable, full);
        nothing is run, and a store this call created is removed again.
    SweepInterrupted
        Ctrl-C; every finished cell is stored (carries the summary).
    SweepAborted
        The execution machinery failed; every finished cell is stored.
    """
    from simcheck.sweep.grid import sweep_binding

    _check_options(jobs, backend, scheduler)
    spec = sweep if isinstance(sweep, SweepSpec) else read_sweep(sweep)
    cells = expand(spec, progress=on_validate)
    sweep_id, binding = sweep_binding(spec)
    func = cell_func or run_cell
    notice = on_notice or (lambda line: None)
    # Connect before creating the store: a wrong address must leave nothing behind.
    client = connect_dask(scheduler) if backend == "dask" else None
    try:
        with SweepStore(store) as st:
            try:
                _open_store(st, sweep_id, binding, notice)
                return _drive(spec, cells, st, func, jobs, backend, on_start, on_cell, notice)
            except sqlite3.DatabaseError as exc:
                err = store_write_error(st.path, exc)
                raise type(err)(
                    "--store", f"{err.problems[0].message}; {st.cells_count()} of {len(cells)} cells are stored; "
                    "free space (or raise the limit) and run the same command again"
                ) from None
    finally:
        if client is not None:
            client.close()


def _check_options(jobs: Any, backend: Any, scheduler: str | None) -> None:
    if isinstance(jobs, bool) or not isinstance(jobs, int) or not 1 <= jobs <= MAX_JOBS:
        raise InputError("--jobs", f"must be a whole number in [1, {MAX_JOBS}], got {jobs!r}")
    if backend not in BACKENDS:
        raise InputError("--backend", f"must be one of {', '.join(BACKENDS)}, got {backend!r}")
    if backend == "local" and scheduler:
        raise InputError("--scheduler", "only with --backend dask")


def _open_store(st: SweepStore, sweep_id: str, binding: dict[str, Any], notice: Callable[[str], None]) -> None:
    """Take the store for this sweep: its notices said, the writer's lock taken, the sweep bound."""
    for line in st.notices:
        notice(line)
    st.notices.clear()
    st.acquire()
    for line in st.notices:
        notice(line)
    st.bind(sweep_id, binding)


class _Run:
    """The bookkeeping of one invocation: what is pending, what is stored."""

    def __init__(self, spec: SweepSpec, cells: list[Cell], st: SweepStore, notice) -> None:
        status = st.status_by_key()
        corrupt = [c for c in cells if status.get(c.key) == "corrupt"]
        if corrupt:
            notice(f"{len(corrupt)} stored cells failed their checksum (changed after they were written); computing them again")
        self.spec, self.st = spec, st
        self.pending = [c for c in cells if status.get(c.key) != "ok"]
        self.total = len(cells)
        self.before = self.total - len(self.pending)
        self.by_key = {c.key: c for c in self.pending}
        self.done: set[str] = set()
        self.failed = 0
        self.run_id = 0

    def summary(self, interrupted: bool = False) -> SweepSummary:
        return SweepSummary(
            cells_total=self.total, done_before=self.before, run_now=len(self.done), failed=self.failed,
            store=str(self.st.path), interrupted=interrupted, pending=len(self.pending) - len(self.done),
        )

    def store(self, out: CellOutcome) -> None:
        cell = self.by_key[out.cell_key]
        stored = StoredCell(
            cell_key=cell.key, cell_index=cell.index, task=self.spec.task, values=cell.values,
            scenario=cell.scenario.to_dict(), task_args=self.spec.task_kwargs(), seed=self.spec.seed,
            status=out.status, result=out.result, error=out.error, traceback=out.traceback,
            seconds=out.seconds, worker=out.worker,
        )
        try:
            self.st.put(stored, self.run_id)
        except sqlite3.DatabaseError as exc:
            s = self.summary(interrupted=True)
            err = store_write_error(self.st.path, exc)
            raise type(err)(
                "--store", f"{err.problems[0].message}; {s.stored_ok} of {s.cells_total} cells are stored; "
                "free space (or raise the limit) and run the same command again"
            ) from None
        self.done.add(out.cell_key)
        self.failed += out.status != "ok"


def _drive(spec, cells, st, func, jobs, backend, on_start, on_cell, notice) -> SweepSummary:
    run = _Run(spec, cells, st, notice)
    run.run_id = st.begin_run(spec=spec, cells_total=run.total, cells_before=run.before, backend=backend, jobs=jobs)
    if on_start is not None:
        on_start(run.before, run.total)
    restarts = 0
    while True:
        todo = [c for c in run.pending if c.key not in run.done]
        if not todo:
            return run.summary()
        results = None
        try:
            results = _launch(spec, todo, func, jobs, backend)
            for out in results:
                run.store(out)
                if on_cell is not None:
                    on_cell(out, run.before + len(run.done), run.total)
            return run.summary()
        except KeyboardInterrupt:
            _close(results)
            raise SweepInterrupted(run.summary(interrupted=True)) from None
        except InputError:
            _close(results)
            raise
        except Exception as exc:
            _close(results)
            if backend != "local" or not _worker_died(exc) or restarts >= MAX_RESTARTS:
                raise SweepAborted(run.summary(interrupted=True), exc) from exc
            restarts += 1
            left = len(run.pending) - len(run.done)
            notice(f"a worker process died ({_first_line(exc)}); running the {left} unfinished cells "
                   f"on new workers (restart {restarts} of {MAX_RESTARTS})")
        finally:
            try:
                st.checkpoint()  # a copy of the .sqlite alone then holds every stored cell
            except sqlite3.DatabaseError:
                pass  # the error that stopped the run is the one to report


def _launch(spec: SweepSpec, todo: list[Cell], func: CellFunc, jobs: int, backend: str):
    """An iterator of :class:`CellOutcome` in completion order (joblib over loky processes or Dask)."""
    import joblib

    kwargs = spec.task_kwargs()
    tasks = (
        joblib.delayed(_execute)(func, c.key, c.scenario, spec.task, kwargs, cell_seed(spec.seed, c.key), backend == "dask")
        for c in todo
    )
    if backend == "dask":
        config = joblib.parallel_config(backend="dask")
        n_jobs = -1  # every worker thread of the cluster
    else:
        config = joblib.parallel_config(backend="loky", initializer=_worker_init, initargs=(os.getpid(),))
        # --jobs > 1 always means worker processes (joblib runs n_jobs=1 in the driver itself),
        # so a cell that crashes its process cannot take the driver with it, even when it runs last
        n_jobs = 1 if jobs == 1 else max(2, min(jobs, len(todo)))
    with config:
        # batch_size=1: each cell comes back (and is stored) on its own, as soon as it is done
        parallel = joblib.Parallel(n_jobs=n_jobs, return_as="generator_unordered", batch_size=1, pre_dispatch="2*n_jobs")
        return parallel(tasks)


def _worker_died(exc: BaseException) -> bool:
    try:
        from joblib.externals.loky.process_executor import BrokenProcessPool, TerminatedWorkerError
    except ImportError:  # pragma: no cover - joblib always vendors loky
        return False
    return isinstance(exc, (TerminatedWorkerError, BrokenProcessPool))


def _first_line(exc: BaseException) -> str:
    text = (str(exc).strip().splitlines() or [""])[0].strip()
    return f"{type(exc).__name__}: {text}" if text else type(exc).__name__


def _close(results: Any) -> None:
    # Closing joblib's generator cancels the cells not yet started and stops the workers.
    if results is not None and hasattr(results, "close"):
        try:
            results.close()
        except BaseException:
            pass
