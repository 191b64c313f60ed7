"""Sweep faults: a worker or the driver killed with SIGKILL at several points.

What must hold (the store's contract, common practice for resumable
simulation studies): no finished cell is lost or stored twice, the final
store equals an uninterrupted run bitwise, a dead worker's cells run again on
a new worker (the sweep goes on), and a killed driver leaves no worker
computing for nobody.
"""

from __future__ import annotations

import os
import signal
import tempfile
import subprocess
import sys
import time
from pathlib import Path

import pytest

from simcheck.sweep.grid import load_sweep
from simcheck.sweep import runner
from simcheck.sweep.runner import SweepAborted, run_cell, run_sweep
from test_sweep import REPO, SWEEP, count, stored, write_sweep


def descendants(pid: int) -> set[int]:
    """Every living process below ``pid`` (from /proc; zombies count as gone)."""
    parent: dict[int, int] = {}
    for entry in os.listdir("/proc"):
        if not entry.isdigit():
            continue
        try:
            stat = Path(f"/proc/{entry}/stat").read_text()
        except OSError:
            continue
        fields = stat.rsplit(")", 1)[1].split()
        if fields[0] != "Z":
            parent[int(entry)] = int(fields[1])
    found, frontier = set(), {pid}
    while frontier:
        frontier = {p for p, pp in parent.items() if pp in frontier} - found
        found |= frontier
    return found


def alive(pids: set[int]) -> set[int]:
    out = set()
    for p in pids:
        try:
            state = Path(f"/proc/{p}/stat").read_text().rsplit(")", 1)[1].split()[0]
        except OSError:
            continue
        if state != "Z":
            out.add(p)
    return out


def workers(driver: int) -> set[int]:
    """The loky worker processes of a driver (not its resource tracker)."""
    out = set()
    for p in descendants(driver):
        try:
            cmd = Path(f"/proc/{p}/cmdline").read_bytes().replace(b"\0", b" ")
        except OSError:
            continue
        if b"loky" in cmd and b"resource_tracker" not in cmd:
            out.add(p)
    return out


def start(sweep: Path, store: Path, jobs: int = 2) -> subprocess.Popen:
    env = {**os.environ, "PYTHONPATH": str(REPO)}
    return subprocess.Popen(
        [sys.executable, "-m", "simcheck", "sweep", str(sweep), "--store", str(store), "--jobs", str(jobs)],
        cwd=REPO, env=env, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, start_new_session=True,
    )


def wait_for(cond, proc: subprocess.Popen, what: str, timeout: float = 60.0) -> None:
    t0 = time.monotonic()
    while not cond():
        assert proc.poll() is None, f"the sweep ended before {what}: {proc.stderr.read()}"
        assert time.monotonic() - t0 < timeout, f"timed out waiting for {what}"
        time.sleep(0.02)


def kill_group(proc: subprocess.Popen) -> None:
    # clean-up only: the group of this test's own driver
    try:
        os.killpg(proc.pid, signal.SIGKILL)
    except ProcessLookupError:
        pass


@pytest.fixture(scope="module")
def clean(tmp_path_factory):
    folder = tmp_path_factory.mktemp("clean")
    sweep = write_sweep(folder, replicates=60000)
    run_sweep(sweep, folder / "ref.sqlite", jobs=1)
    return sweep, stored(folder / "ref.sqlite")


@pytest.mark.slow
def test_kill_a_worker_then_the_driver_then_resume_gives_the_clean_run(clean, tmp_path):
    sweep, ref = clean
    store = tmp_path / "f.sqlite"
    proc = start(sweep, store)
    try:
        # 1. a worker dies after the first stored cell: its cells restart on a new worker, the sweep goes on
        wait_for(lambda: count(store) >= 1 and workers(proc.pid), proc, "a stored cell and a worker")
        first = workers(proc.pid)
        os.kill(sorted(first)[0], signal.SIGKILL)
        # 2. the driver dies after more cells, on the new pool: no process of it stays behind
        wait_for(lambda: count(store) >= 4 and workers(proc.pid) - first, proc, "4 cells on new workers")
        below = descendants(proc.pid)
        os.kill(proc.pid, signal.SIGKILL)
        _, err = proc.communicate(timeout=60)
        t0 = time.monotonic()
        while alive(below) and time.monotonic() - t0 < 5.0:
            time.sleep(0.05)
        assert not alive(below), f"still running 5 s after the driver was killed: {alive(below)}"
    finally:
        kill_group(proc)
    assert "a worker process died" in err and "restart 1 of 3" in err, err
    assert 4 <= count(store) < 8
    # 3. resume on two workers: exactly the clean run's rows, none lost, none doubled
    s = run_sweep(sweep, store, jobs=2)
    assert s.done_before + s.run_now == 8 and s.failed == 0
    assert stored(store) == ref


def _marker() -> Path:
    # in a worker, the parent is the test process: one marker per test session
    return Path(tempfile.gettempdir()) / f"simcheck-test-worker-death-{os.getppid()}"


def die_once(scenario, task, seed, **kw):
    """Kill this worker (SIGKILL) the first time any cell runs; compute normally after."""
    m = _marker()
    if not m.exists():
        m.write_text("killed")
        os.kill(os.getpid(), signal.SIGKILL)
    return run_cell(scenario, task, seed, **kw)


def die_on_johnson(scenario, task, seed, **kw):
    """A cell that kills every worker that runs it (think: a crash in native code)."""
    if scenario.design.method == "johnson-t":
        os.kill(os.getpid(), signal.SIGKILL)
    return run_cell(scenario, task, seed, **kw)


@pytest.mark.slow
def test_a_worker_killed_mid_sweep_restarts_its_cells_on_new_workers(tmp_path):
    sweep = write_sweep(tmp_path, replicates=500)
    run_sweep(sweep, tmp_path / "ref.sqlite", jobs=1)
    marker = Path(tempfile.gettempdir()) / f"simcheck-test-worker-death-{os.getpid()}"
    marker.unlink(missing_ok=True)
    notices: list[str] = []
    try:
        s = run_sweep(sweep, tmp_path / "s.sqlite", jobs=2, cell_func=die_once, on_notice=notices.append)
    finally:
        assert marker.exists()  # the kill did happen
        marker.unlink(missing_ok=True)
    assert (s.run_now, s.failed) == (8, 0)
    assert len(notices) == 1 and "a worker process died" in notices[0] and "restart 1 of 3" in notices[0]
    assert "\n" not in notices[0]
    assert stored(tmp_path / "s.sqlite") == stored(tmp_path / "ref.sqlite")


@pytest.mark.slow
def test_a_cell_that_kills_every_worker_stops_the_sweep_with_one_line(tmp_path, monkeypatch):
    monkeypatch.setattr(runner, "MAX_RESTARTS", 1)  # each restart starts a pool: keep the test short
    sweep = write_sweep(tmp_path, SWEEP.replace("[0.5, 1.0, 1.5, 2.0]", "[0.5]"), replicates=500)
    with pytest.raises(SweepAborted) as info:
        run_sweep(sweep, tmp_path / "s.sqlite", jobs=2, cell_func=die_on_johnson)
    text = str(info.value)
    assert "\n" not in text and text.startswith("TerminatedWorkerError: ")
    assert stored(tmp_path / "s.sqlite").keys() <= {c.key for c in load_sweep(sweep)[1]}
    # the t cell is stored (once) unless every attempt lost it together with the johnson-t cell
    assert info.value.summary.pending + info.value.summary.stored_ok == 2


LONG = """\
base = "base.toml"
task = "check"
n = [400]

[vary]
"data.cv" = [0.5, 1.0]
"""


@pytest.mark.slow
def test_workers_of_a_killed_driver_stop_computing_at_once(tmp_path):
    # each cell computes for many seconds; without a watch on the driver its workers would go on
    sweep = write_sweep(tmp_path, LONG, replicates=1_000_000)
    store = tmp_path / "long.sqlite"
    proc = start(sweep, store)
    try:
        wait_for(lambda: len(workers(proc.pid)) == 2, proc, "two workers")
        time.sleep(1.0)  # both are now inside a cell
        below = descendants(proc.pid)
        os.kill(proc.pid, signal.SIGKILL)
        proc.communicate(timeout=60)
        t0 = time.monotonic()
        while alive(below) and time.monotonic() - t0 < 3.0:
            time.sleep(0.05)
        assert not alive(below), f"still running 3 s after the driver was killed: {alive(below)}"
    finally:
        kill_group(proc)
        for p in alive(descendants(proc.pid)):
            os.kill(p, signal.SIGKILL)
