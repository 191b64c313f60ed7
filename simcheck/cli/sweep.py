"""``simcheck sweep``: run every cell of a sweep file into a store, resumably."""

from __future__ import annotations

import argparse
import signal
import sys
import time

from simcheck.cli.common import emit_json, error_line, note
from simcheck.cli.options import add_closing_options

# Plain progress lines (stderr not a terminal) at most this often, in seconds.
PLAIN_EVERY = 30.0


def add_parser(subparsers) -> None:
    p = subparsers.add_parser(
        "sweep",
        help="run every combination of a sweep file into a store (resumable)",
        description=(
            "Run every cell (combination of [vary] values) of a sweep file and store each result in an "
            "SQLite file as soon as it finishes. The whole grid is validated first. Re-running the same "
            "command resumes: only cells the store lacks (or that failed) are run. Ctrl-C or kill stops; "
            "only the cells in flight are lost. Results do not depend on --jobs, the backend or interruptions."
        ),
    )
    p.add_argument("sweep", metavar="SWEEP", help="sweep file (TOML): base, task, [vary]")
    p.add_argument("--store", required=True, metavar="FILE.sqlite", help="SQLite store (created when missing)")
    p.add_argument("--jobs", type=int, default=1, metavar="J",
                   help="local worker processes (default 1, at most 1024); not used with --backend dask (every cluster worker runs cells)")
    p.add_argument("--backend", choices=("local", "dask"), default=None,
                   help="local processes (default) or an existing Dask cluster (needs --scheduler)")
    p.add_argument("--scheduler", metavar="ADDR",
                   help="Dask scheduler address, e.g. tcp://10.0.0.5:8786 (implies --backend dask)")
    add_closing_options(p, run, outside_files=True)


class _Progress:
    """tqdm bar on a terminal; otherwise a plain line every PLAIN_EVERY seconds."""

    def __init__(self) -> None:
        self.tty = sys.stderr.isatty()
        self.bar = None
        self.t0 = time.monotonic()
        self.last = self.t0
        self.before = 0
        self.failed = 0

    def start(self, before: int, total: int) -> None:
        self.before = before
        self.t0 = self.last = time.monotonic()
        if before == total:
            note(f"sweep: all {total} cells are already stored; nothing to run")
        elif before:
            note(f"sweep: {before} of {total} cells already stored; running the other {total - before}")
        if self.tty and total > before:
            from tqdm import tqdm

            self.bar = tqdm(total=total, initial=before, unit="cell", file=sys.stderr, dynamic_ncols=True)

    def cell(self, out, done: int, total: int) -> None:
        self.failed += out.status != "ok"
        if self.bar is not None:
            self.bar.update(1)
            if self.failed:
                self.bar.set_postfix(failed=self.failed, refresh=False)
            return
        now = time.monotonic()
        if now - self.last >= PLAIN_EVERY or done == total:
            self.last = now
            ran = done - self.before
            left = (now - self.t0) / ran * (total - done) if ran else float("nan")
            note(f"sweep: {done}/{total} cells stored ({self.failed} failed), about {_duration(left)} left")

    def close(self) -> None:
        if self.bar is not None:
            self.bar.close()
            self.bar = None


def resume_command(args: argparse.Namespace) -> str:
    """The command that resumes this sweep: the same arguments, --jobs and the backend included."""
    import shlex

    parts = ["simcheck", "sweep", args.sweep, "--store", args.store]
    if getattr(args, "jobs", 1) != 1:
        parts += ["--jobs", str(args.jobs)]
    if getattr(args, "backend", None):
        parts += ["--backend", args.backend]
    if getattr(args, "scheduler", None):
        parts += ["--scheduler", args.scheduler]
    return " ".join(shlex.quote(str(p)) for p in parts)


class _Checking:
    """Progress of the check of every cell before the run (only for grids that take a while)."""

    def __init__(self) -> None:
        self.t0 = self.last = time.monotonic()

    def __call__(self, done: int, total: int) -> None:
        now = time.monotonic()
        if done == 0 and total >= 2000:
            note(f"sweep: checking all {total:,} cells before anything runs")
        elif now - self.last >= 10.0:
            self.last = now
            note(f"sweep: checked {done:,} of {total:,} cells")


def _duration(seconds: float) -> str:
    if seconds != seconds:
        return "?"
    s = int(round(seconds))
    h, rem = divmod(s, 3600)
    m, s = divmod(rem, 60)
    return f"{h}h{m:02d}m{s:02d}s" if h else (f"{m}m{s:02d}s" if m else f"{s}s")


def _sigterm(signum, frame):
    # `kill PID` stops like Ctrl-C: the finished cells are already stored, the message says how to resume
    raise KeyboardInterrupt


def _version_notice(store: str) -> None:
    # Cell keys do not include the version (a bug fix must not orphan a night's work),
    # so say it when a resumed store mixes versions; each row records its own.
    from pathlib import Path

    import simcheck

    if not Path(store).is_file():
        return
    try:
        from simcheck.sweep.store import open_readonly

        conn = open_readonly(store, "--store")
        row = conn.execute("SELECT value FROM meta WHERE key = 'simcheck_version'").fetchone()
        conn.close()
    except Exception:
        return  # the store itself is checked (and refused with a clear message) by run_sweep
    if row and row[0] != simcheck.__version__:
        note(f"sweep: note: {store} was last written by simcheck {row[0]}; this is {simcheck.__version__} "
             "(each row records the version that computed it)")


def run(args: argparse.Namespace) -> int:
    from simcheck.errors import InputError
    from simcheck.sweep.runner import SweepAborted, SweepInterrupted, run_sweep

    backend = args.backend or ("dask" if args.scheduler else "local")
    if args.backend == "local" and args.scheduler:
        raise InputError("--scheduler", "only with --backend dask")
    progress = _Progress()
    failures: list[str] = []

    def on_cell(out, done, total):
        if out.status != "ok" and len(failures) < 5:
            failures.append(out.error or "")
        progress.cell(out, done, total)

    if backend == "dask" and args.jobs != 1:
        note("sweep: note: --jobs is not used with --backend dask; every worker thread of the cluster runs cells")
    _version_notice(args.store)
    old = signal.signal(signal.SIGTERM, _sigterm)
    resume = f"run the same command again to resume: {resume_command(args)}"
    try:
        sweep = args.sweep
        if args.allow_outside_files:
            from simcheck.sweep.grid import read_sweep

            sweep = read_sweep(args.sweep, allow_outside_files=True)
        summary = run_sweep(
            sweep, args.store, jobs=args.jobs, backend=backend, scheduler=args.scheduler,
            on_start=progress.start, on_cell=on_cell,
            on_notice=lambda line: note(f"sweep: note: {line}"), on_validate=_Checking(),
        )
    except (SweepInterrupted, SweepAborted) as exc:
        progress.close()
        s = exc.summary
        interrupted = isinstance(exc, SweepInterrupted)
        what = "interrupted:" if interrupted else f"sweep stopped: {exc};"
        note(error_line(f"{what} {s.stored_ok} of {s.cells_total} cells are stored in {s.store}; {resume}"))
        if args.json:
            emit_json(s.to_dict())
        return 130 if interrupted else 1
    finally:
        progress.close()
        signal.signal(signal.SIGTERM, old)
    for f in failures:
        note(f"sweep: failed cell: {f}")
    if summary.failed:
        note(f"sweep: {summary.failed} cells failed (stored with their error; re-running the command retries them)")
    if args.json:
        emit_json(summary.to_dict())
    else:
        print(
            f"{summary.cells_total} cells: {summary.done_before} stored before, {summary.run_now} run now "
            f"({summary.failed} failed); store: {summary.store}"
        )
    return 0
