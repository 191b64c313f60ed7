"""Sweeps: grid validation, store, resume after kill -9, workers and backends.

The checks here are about bookkeeping, not statistics: a sweep must give
bitwise the same stored results whatever the worker count, backend or number
of interruptions (common practice for resumable simulation studies: results
are a pure function of the seed and the cell), so they compare stored result
JSON text exactly.
"""

from __future__ import annotations

import json
import signal
import sqlite3
import subprocess
import sys
import time
from pathlib import Path

import pandas as pd
import pytest

from simcheck.cli import main
from simcheck.errors import InputError
from simcheck.sweep.runner import SweepInterrupted, cell_seed, run_cell, run_sweep
from simcheck.sweep.grid import load_sweep, read_sweep
from simcheck.sweep.store import cells_frame

from fixtures import repair_times, toml_text, write_toml

REPO = Path(__file__).resolve().parents[1]

# Invented example: skewed repair times, the t interval, small but not tiny cells
# (each about 0.1-0.3 s) so that a subprocess can be killed half-way.
# the base scenario as TOML text with a {replicates} slot (other test files build on it)
BASE = toml_text(repair_times(simulation__replicates=0)).replace("replicates = 0", "replicates = {replicates}")

# the sweep below spells [vary] keys without quotes (nested tables), as users may
SWEEP = """\
base = "base.toml"
task = "check"
n = [20, 40]

[vary]
data.cv = [0.5, 1.0, 1.5, 2.0]
"method.interval" = ["t", "johnson-t"]
"""


def write_sweep(folder: Path, sweep: str = SWEEP, replicates: int = 60000) -> Path:
    folder.mkdir(parents=True, exist_ok=True)
    write_toml(folder / "base.toml", repair_times(simulation__replicates=replicates))
    path = folder / "sweep.toml"
    path.write_text(sweep)
    return path


def stored(store: Path) -> dict[str, tuple[str, str | None]]:
    conn = sqlite3.connect(f"{store.resolve().as_uri()}?mode=ro", uri=True)
    try:
        return {k: (s, r) for k, s, r in conn.execute("SELECT cell_key, status, result_json FROM cells")}
    finally:
        conn.close()


def count(store: Path) -> int:
    if not store.exists():
        return 0
    try:
        return len(stored(store))
    except sqlite3.OperationalError:  # the schema is not written yet
        return 0


@pytest.fixture(scope="module")
def reference(tmp_path_factory):
    """The uninterrupted single-process run that the others must reproduce bitwise."""
    folder = tmp_path_factory.mktemp("ref")
    sweep = write_sweep(folder)
    store = folder / "ref.sqlite"
    summary = run_sweep(sweep, store, jobs=1)
    assert summary.run_now == summary.cells_total == 8 and summary.failed == 0
    return sweep, stored(store)


# --- the grid ----------------------------------------------------------------
def test_grid_is_every_combination_with_stable_distinct_keys(tmp_path):
    sweep = write_sweep(tmp_path, replicates=500)
    spec, cells = load_sweep(sweep)
    assert spec.size == len(cells) == 8
    assert [c.values for c in cells[:2]] == [
        {"data.cv": 0.5, "method.interval": "t"},
        {"data.cv": 0.5, "method.interval": "johnson-t"},
    ]
    assert len({c.key for c in cells}) == 8
    assert [c.key for c in load_sweep(sweep)[1]] == [c.key for c in cells]
    assert spec.seed == 20261201  # default: the base scenario's simulation.seed
    # a quoted dotted key is the same key as a nested one; another root seed makes other cells
    other = write_sweep(tmp_path / "b", SWEEP.replace("data.cv", '"data.cv"') + "", replicates=500)
    assert [c.key for c in load_sweep(other)[1]] == [c.key for c in cells]
    seeded = write_sweep(tmp_path / "c", "seed = 5\n" + SWEEP, replicates=500)
    assert not {c.key for c in load_sweep(seeded)[1]} & {c.key for c in cells}


def test_invalid_cell_is_one_line_exit_2_and_nothing_stored(tmp_path, capsys):
    sweep = write_sweep(tmp_path, SWEEP.replace("[0.5, 1.0, 1.5, 2.0]", "[0.5, -1]"), replicates=500)
    store = tmp_path / "s.sqlite"
    assert main(["sweep", str(sweep), "--store", str(store)]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1
    assert err.startswith(f"simcheck: error: {sweep}: cell {{data.cv=-1, method.interval='t'}}: data.cv: ")
    assert "(and 1 more invalid cells)" in err  # the johnson-t cell with cv = -1
    assert not store.exists()


def test_unknown_sweep_key_is_refused_with_a_suggestion(tmp_path, capsys):
    sweep = write_sweep(tmp_path, SWEEP.replace("task =", "tsak ="), replicates=500)
    assert main(["sweep", str(sweep), "--store", str(tmp_path / "s.sqlite")]) == 2
    err = capsys.readouterr().err
    assert "tsak: unknown key (did you mean 'task'?)" in err and err.count("\n") == 1
    with pytest.raises(InputError, match="n: only for task = 'check'"):
        read_sweep(write_sweep(tmp_path / "b", SWEEP.replace('"check"', '"search"'), replicates=500))


@pytest.mark.parametrize("name", ["turnaround_sweep.toml", "top_box_check_sweep.toml"])
def test_example_sweep_files_are_valid(name):
    spec, cells = load_sweep(REPO / "scenarios" / name)
    assert len(cells) == spec.size > 1


# --- store, seeds, resume ----------------------------------------------------
def test_cells_run_once_resume_adds_new_cells_and_reruns_errors(tmp_path):
    small = SWEEP.replace("[0.5, 1.0, 1.5, 2.0]", "[0.5, 1.0]")
    sweep = write_sweep(tmp_path, small, replicates=500)
    store = tmp_path / "s.sqlite"
    calls = []

    def flaky(scenario, task, seed, **kw):
        calls.append(seed)
        if scenario.design.method == "johnson-t" and len(calls) <= 4:
            raise RuntimeError("out of memory (invented failure)")
        return run_cell(scenario, task, seed, **kw)

    s1 = run_sweep(sweep, store, cell_func=flaky)
    assert (s1.cells_total, s1.run_now, s1.failed) == (4, 4, 2)  # the failures did not stop the others
    rows = stored(store)
    assert sorted(s for s, _ in rows.values()) == ["error", "error", "ok", "ok"]
    conn = sqlite3.connect(store)
    errors = [e for (e,) in conn.execute("SELECT error FROM cells WHERE status = 'error'")]
    assert errors == ["RuntimeError: out of memory (invented failure)"] * 2
    conn.close()
    # re-run: only the two failed cells run again
    s2 = run_sweep(sweep, store, cell_func=flaky)
    assert (s2.done_before, s2.run_now, s2.failed) == (2, 2, 0)
    # a larger grid keeps the old rows and runs only the new cells
    s3 = run_sweep(write_sweep(tmp_path, SWEEP.replace("[0.5, 1.0, 1.5, 2.0]", "[0.5, 1.0, 2.0]"), 500), store)
    assert (s3.cells_total, s3.done_before, s3.run_now) == (6, 4, 2)
    assert len(stored(store)) == 6
    # the store's metadata says what produced it
    meta = dict(sqlite3.connect(store).execute("SELECT key, value FROM meta"))
    import numpy, scipy, simcheck

    assert meta["simcheck_version"] == simcheck.__version__
    assert meta["numpy_version"] == numpy.__version__ and meta["scipy_version"] == scipy.__version__
    assert meta["root_seed"] == "20261201" and "[vary]" in meta["sweep_text"] and "lognormal" in meta["base_text"]


def test_a_cell_refused_by_the_task_is_stored_with_its_one_line_error(tmp_path):
    sweep = write_sweep(tmp_path, SWEEP.replace("[0.5, 1.0, 1.5, 2.0]", "[0.5, 1.0]"), replicates=500)

    def picky(scenario, task, seed, **kw):
        if scenario.design.method == "johnson-t":
            raise InputError("n", "must be <= 10 (invented limit)")
        return run_cell(scenario, task, seed, **kw)

    s = run_sweep(sweep, tmp_path / "s.sqlite", cell_func=picky)
    assert (s.run_now, s.failed) == (4, 2)
    frame = cells_frame(tmp_path / "s.sqlite")
    bad = frame[frame["status"] == "error"]
    assert set(bad["method.interval"]) == {"johnson-t"}
    assert set(bad["error"]) == {"n: must be <= 10 (invented limit)"}
    assert bad["coverage"].isna().all() and len(bad) == 2  # one empty row per failed cell
    assert frame.loc[frame["status"] == "ok", "coverage"].notna().all()


def test_a_stored_cell_is_repeatable_from_its_seed(reference):
    sweep, rows = reference
    spec, cells = load_sweep(sweep)
    cell = cells[3]
    result = json.loads(rows[cell.key][1])
    seed = cell_seed(spec.seed, cell.key)
    assert result["rows"][0]["seed"] == seed
    again = run_cell(cell.scenario, "check", seed, n=[20, 40])
    assert json.dumps(again, sort_keys=True, separators=(",", ":")) == rows[cell.key][1]


# --- workers and backends ----------------------------------------------------
def test_two_local_workers_store_bitwise_the_same(reference, tmp_path):
    sweep, ref = reference
    store = tmp_path / "j2.sqlite"
    run_sweep(sweep, store, jobs=2)
    assert stored(store) == ref


def test_dask_cluster_stores_bitwise_the_same(reference, tmp_path):
    distributed = pytest.importorskip("distributed", reason="dask.distributed not installed (extra 'distributed')")
    sweep, ref = reference
    store = tmp_path / "dask.sqlite"
    with distributed.LocalCluster(
        n_workers=2, threads_per_worker=1, processes=False, dashboard_address=None
    ) as cluster:
        s = run_sweep(sweep, store, backend="dask", scheduler=cluster.scheduler_address)
    assert s.run_now == 8
    assert stored(store) == ref


# --- stop, kill -9, resume; export while running ------------------------------
def _start(sweep: Path, store: Path) -> subprocess.Popen:
    return subprocess.Popen(
        [sys.executable, "-m", "simcheck", "sweep", str(sweep), "--store", str(store), "--json"],
        cwd=REPO,
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        text=True,
    )


def _wait_for(store: Path, k: int, proc: subprocess.Popen, timeout: float = 60.0) -> None:
    t0 = time.monotonic()
    while count(store) < k:
        assert proc.poll() is None, proc.stderr.read()
        assert time.monotonic() - t0 < timeout, "the sweep stored nothing in time"
        time.sleep(0.02)


def test_stop_kill_and_resume_give_the_uninterrupted_rows(reference, tmp_path):
    sweep, ref = reference
    store = tmp_path / "s.sqlite"
    # 1. `kill` (SIGTERM) stops cleanly: exit 130, the message says how many cells are stored
    proc = _start(sweep, store)
    _wait_for(store, 2, proc)
    proc.send_signal(signal.SIGTERM)
    out, err = proc.communicate(timeout=60)
    assert proc.returncode == 130, err
    kept = count(store)
    assert 2 <= kept <= 4  # one process: at most the cell in flight finished after the signal
    assert f"{kept} of 8 cells are stored" in err and "run the same command again to resume" in err
    assert json.loads(out)["interrupted"] is True

    # 2. resume, export while it runs, then kill -9 in mid-sweep
    proc = _start(sweep, store)
    _wait_for(store, kept + 1, proc)
    csv = tmp_path / "partial.csv"
    assert main(["export", str(store), "--out", str(csv)]) == 0
    partial = pd.read_csv(csv)
    assert kept + 1 <= partial["cell_key"].nunique() <= 8
    assert len(partial) == 2 * partial["cell_key"].nunique()  # one row per cell and n
    assert {"data.cv", "method.interval", "n", "coverage", "margin_mean"} <= set(partial.columns)
    _wait_for(store, kept + 2, proc)
    proc.kill()  # SIGKILL: no clean-up at all
    proc.communicate(timeout=60)
    assert proc.returncode == -signal.SIGKILL
    assert count(store) < 8  # the kill came in mid-sweep

    # 3. resume to the end: exactly the uninterrupted rows, none lost, none doubled
    s = run_sweep(sweep, store)
    assert s.done_before + s.run_now == 8 and s.failed == 0
    assert stored(store) == ref


def test_export_csv_and_parquet_one_row_per_cell_and_n(reference, tmp_path, capsys, monkeypatch):
    sweep, ref = reference
    store = tmp_path / "s.sqlite"
    run_sweep(sweep, store)
    pq = tmp_path / "out.parquet"
    assert main(["export", str(store), "--out", str(pq), "--json"]) == 0
    info = json.loads(capsys.readouterr().out)
    assert info["rows"] == 16 and info["cells"] == 8
    frame = pd.read_parquet(pq)
    assert sorted(frame["n"].unique()) == [20, 40]
    assert set(frame["data.cv"]) == {0.5, 1.0, 1.5, 2.0}
    # the exported numbers are the stored ones
    key = frame["cell_key"].iloc[0]
    first = json.loads(ref[key][1])["rows"]
    got = frame[frame["cell_key"] == key].sort_values("n")["coverage"].tolist()
    assert got == [r["coverage"] for r in first]
    # without pyarrow: one line, exit 2
    monkeypatch.setitem(sys.modules, "pyarrow", None)
    assert main(["export", str(store), "--out", str(tmp_path / "x.parquet")]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "pip install 'simcheck[parquet]'" in err
    assert main(["export", str(store), "--out", str(tmp_path / "x.xlsx")]) == 2
    assert main(["export", str(tmp_path / "missing.sqlite"), "--out", str(tmp_path / "x.csv")]) == 2


def test_interrupt_keeps_finished_cells(tmp_path):
    sweep = write_sweep(tmp_path, replicates=500)
    store = tmp_path / "s.sqlite"

    def stop_after_three(out, done, total):
        if done == 3:
            raise KeyboardInterrupt

    with pytest.raises(SweepInterrupted) as info:
        run_sweep(sweep, store, on_cell=stop_after_three)
    assert info.value.summary.stored_ok == 3 == count(store)
    assert run_sweep(sweep, store).run_now == 5
