"""The sweep store under misuse and faults: nothing lost, nothing wrong, nothing leaked.

Bookkeeping checks (common practice for resumable simulation studies: a
store holds one sweep, every finished cell once, and never silently passes on
a changed number). Exit code 2 and one line on stderr is the command line's
contract for bad input (INTERFACE.md).
"""

from __future__ import annotations

import hashlib
import json
import os
import resource
import shlex
import shutil
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
from simcheck.sweep import store as store_mod
from simcheck.sweep.grid import MAX_CELLS, cell_key, expand, load_sweep, read_sweep
from simcheck.sweep.runner import SweepInterrupted, run_sweep
from simcheck.sweep.store import SweepStore, cells_frame
from test_sweep import BASE, REPO, SWEEP, count, stored, write_sweep

SMALL = SWEEP.replace("[0.5, 1.0, 1.5, 2.0]", "[0.5, 1.0]")


def one_line_error(err: str) -> str:
    assert err.count("\n") == 1 and err.startswith("simcheck: error: "), err
    return err


def sweep_store(tmp_path: Path, sweep: str = SMALL) -> tuple[Path, Path]:
    path = write_sweep(tmp_path, sweep, replicates=500)
    store = tmp_path / "s.sqlite"
    run_sweep(path, store)
    return path, store


def cli(*args: str, **kw) -> subprocess.CompletedProcess:
    env = {**os.environ, "PYTHONPATH": str(REPO)}
    return subprocess.run([sys.executable, "-m", "simcheck", *args], cwd=REPO, env=env,
                          capture_output=True, text=True, timeout=120, **kw)


def unprivileged(args: list[str]) -> subprocess.CompletedProcess:
    """Run simcheck where file permissions apply (root bypasses them: drop those capabilities)."""
    cmd = [sys.executable, "-m", "simcheck", *args]
    env = {**os.environ, "PYTHONPATH": str(REPO)}
    if os.geteuid() == 0:
        capsh = shutil.which("capsh")
        if capsh is None:
            pytest.skip("running as root without capsh: permissions cannot be tested")
        cmd = [capsh, "--drop=cap_dac_override,cap_dac_read_search,cap_fowner", "--", "-c", shlex.join(cmd)]
    return subprocess.run(cmd, cwd=REPO, env=env, capture_output=True, text=True, timeout=120)


# --- export never destroys ------------------------------------------------------
def test_export_refuses_the_store_its_sidecars_and_a_symlink_to_it(tmp_path, capsys):
    _, store = sweep_store(tmp_path)
    named_csv = tmp_path / "results.csv"
    shutil.copyfile(store, named_csv)  # a store that happens to end in .csv
    before = named_csv.read_bytes()
    assert main(["export", str(named_csv), "--out", str(named_csv), "--force"]) == 2
    assert "is the sweep store itself" in one_line_error(capsys.readouterr().err)
    assert named_csv.read_bytes() == before
    link = tmp_path / "link.csv"
    link.symlink_to(named_csv)
    assert main(["export", str(named_csv), "--out", str(link), "--force"]) == 2
    assert "is the sweep store itself" in one_line_error(capsys.readouterr().err)
    hard = tmp_path / "hard.csv"
    os.link(named_csv, hard)
    assert main(["export", str(named_csv), "--out", str(hard), "--force"]) == 2
    capsys.readouterr()
    assert named_csv.read_bytes() == before


def test_export_refuses_an_input_file_of_the_sweep(tmp_path, capsys):
    (tmp_path / "ledger.csv").write_text("amount\n" + "\n".join(str(10 + i % 7) for i in range(50)) + "\n")
    base = BASE.format(replicates=500).replace("[method]", '[population]\nfile = "ledger.csv"\ncolumn = "amount"\n\n[method]')
    base = base.replace('model = "lognormal"\nmean = 6.0\ncv = 1.0\n', 'model = "normal"\nmean = 6.0\nsd = 1.0\n')
    base = base.replace("n_max = 400", "n_max = 40")
    (tmp_path / "base.toml").write_text(base)
    (tmp_path / "sweep.toml").write_text('base = "base.toml"\ntask = "check"\nn = [10]\n\n[vary]\n"target.margin" = [1.0, 2.0]\n')
    store = tmp_path / "s.sqlite"
    assert main(["sweep", str(tmp_path / "sweep.toml"), "--store", str(store)]) == 0
    capsys.readouterr()
    data = (tmp_path / "ledger.csv").read_bytes()
    for target in ("ledger.csv", "sweep.toml.csv"):
        if target == "sweep.toml.csv":
            (tmp_path / target).symlink_to(tmp_path / "ledger.csv")
        assert main(["export", str(store), "--out", str(tmp_path / target), "--force"]) == 2
        assert "is an input of the sweep" in one_line_error(capsys.readouterr().err)
    assert (tmp_path / "ledger.csv").read_bytes() == data


def test_export_refuses_an_existing_file_without_force_and_a_folder(tmp_path, capsys):
    _, store = sweep_store(tmp_path)
    out = tmp_path / "out.csv"
    out.write_text("keep me\n")
    assert main(["export", str(store), "--out", str(out)]) == 2
    assert "exists; pass --force" in one_line_error(capsys.readouterr().err)
    assert out.read_text() == "keep me\n"
    assert main(["export", str(store), "--out", str(out), "--force"]) == 0
    assert len(pd.read_csv(out)) == 8  # one row per cell and n
    capsys.readouterr()
    assert main(["export", str(store), "--out", str(tmp_path)]) == 2
    assert "is a folder" in one_line_error(capsys.readouterr().err)
    # written through a temporary file in the target folder: nothing else is left there
    assert sorted(p.name for p in tmp_path.iterdir() if p.name.startswith(".")) == []


def test_export_from_a_read_only_folder(tmp_path):
    _, store = sweep_store(tmp_path)
    archive = tmp_path / "archive"
    archive.mkdir()
    shutil.copyfile(store, archive / "s.sqlite")
    # a store copied while a sweep held cells in its -wal file: both files travel together
    live = tmp_path / "live.sqlite"
    shutil.copyfile(store, live)
    conn = sqlite3.connect(live)
    conn.execute("PRAGMA journal_mode=WAL")
    conn.execute("PRAGMA wal_autocheckpoint=0")
    conn.execute("UPDATE meta SET value = 'x' WHERE key = 'updated_at'")
    conn.commit()
    shutil.copyfile(live, archive / "w.sqlite")
    shutil.copyfile(tmp_path / "live.sqlite-wal", archive / "w.sqlite-wal")
    conn.close()
    archive.chmod(0o555)
    try:
        for name in ("s.sqlite", "w.sqlite"):
            out = tmp_path / f"{name}.csv"
            r = unprivileged(["export", str(archive / name), "--out", str(out)])
            assert r.returncode == 0, r.stderr
            assert pd.read_csv(out)["cell_key"].nunique() == 4
        r = unprivileged(["store", "check", str(archive / "w.sqlite")])
        assert r.returncode == 0, r.stderr
        r = unprivileged(["report", str(archive / "w.sqlite"), "--out", str(tmp_path / "rep")])
        assert r.returncode == 0, r.stderr
        assert any((tmp_path / "rep").iterdir())
    finally:
        archive.chmod(0o755)


# --- what a sweep refuses before it writes anything ----------------------------
def test_a_foreign_sqlite_database_is_left_untouched(tmp_path, capsys):
    db = tmp_path / "foreign.db"
    conn = sqlite3.connect(db)
    conn.execute("CREATE TABLE orders (id INTEGER, amount REAL)")
    conn.execute("INSERT INTO orders VALUES (1, 9.5)")
    conn.commit()
    conn.close()
    before = hashlib.sha256(db.read_bytes()).hexdigest()
    sweep = write_sweep(tmp_path, SMALL, replicates=500)
    assert main(["sweep", str(sweep), "--store", str(db)]) == 2
    assert "not a simcheck sweep store" in one_line_error(capsys.readouterr().err)
    assert hashlib.sha256(db.read_bytes()).hexdigest() == before
    assert not (tmp_path / "foreign.db-wal").exists()
    text = tmp_path / "notes.sqlite"
    text.write_text("not a database at all\n")
    assert main(["sweep", str(sweep), "--store", str(text)]) == 2
    assert "not an SQLite file" in one_line_error(capsys.readouterr().err)
    assert text.read_text() == "not a database at all\n"


@pytest.mark.parametrize(
    "edit, field",
    [
        (lambda s: s.replace("n = [20, 40]", "n = [2000000]"), "n[0]"),
        (lambda s: s.replace('task = "check"\nn = [20, 40]', 'task = "curve"\nn_min = 50\nn_max = 50'), "n_max"),
        (lambda s: s.replace('task = "check"\nn = [20, 40]', 'task = "curve"\nn_max = 10000000'), "n_max"),
        (lambda s: "seed = 18446744073709551616\n" + s, "seed"),
        (lambda s: s.replace("[0.5, 1.0]", "[1, 1.0]"), "vary.data.cv"),
    ],
)
def test_bad_task_arguments_seed_and_duplicates_are_refused_before_anything_runs(tmp_path, capsys, edit, field):
    sweep = write_sweep(tmp_path, edit(SMALL), replicates=500)
    store = tmp_path / "s.sqlite"
    assert main(["sweep", str(sweep), "--store", str(store)]) == 2
    err = one_line_error(capsys.readouterr().err)
    assert f": {field}: " in err
    assert not store.exists()


def test_a_cell_whose_task_arguments_fail_for_that_cell_is_refused_up_front(tmp_path, capsys):
    # n = 100 is fine for a population of 500 but not for one of 50: known only per cell
    sweep = write_sweep(tmp_path, SMALL.replace("n = [20, 40]", "n = [100]")
                        .replace('"method.interval" = ["t", "johnson-t"]', '"population.size" = [500, 50]'), replicates=500)
    base = tmp_path / "base.toml"
    base.write_text(base.read_text().replace("n_max = 400", "n_max = 40"))
    store = tmp_path / "s.sqlite"
    assert main(["sweep", str(sweep), "--store", str(store)]) == 2
    err = one_line_error(capsys.readouterr().err)
    assert "cell {data.cv=0.5, population.size=50}" in err and "n: must be" in err
    assert not store.exists()


def test_jobs_out_of_range_leaves_no_store(tmp_path, capsys):
    sweep = write_sweep(tmp_path, SMALL, replicates=500)
    store = tmp_path / "s.sqlite"
    assert main(["sweep", str(sweep), "--store", str(store), "--jobs", str(2**63)]) == 2
    assert "--jobs: must be a whole number in [1, 1024]" in one_line_error(capsys.readouterr().err)
    assert not store.exists()


def test_store_naming_a_folder_or_an_unwritable_file(tmp_path, capsys):
    sweep = write_sweep(tmp_path, SMALL, replicates=500)
    assert main(["sweep", str(sweep), "--store", str(tmp_path)]) == 2
    assert "is a folder" in one_line_error(capsys.readouterr().err)
    _, store = sweep_store(tmp_path / "b")
    store.chmod(0o444)
    try:
        r = unprivileged(["sweep", str(tmp_path / "b" / "sweep.toml"), "--store", str(store)])
    finally:
        store.chmod(0o644)
    assert r.returncode == 2, r.stderr
    assert "no permission to write" in one_line_error(r.stderr)


def test_a_grid_too_large_is_refused_with_its_size(tmp_path, capsys):
    values = ", ".join(str(0.1 + i / 1000) for i in range(400))
    sweep = write_sweep(tmp_path, SMALL.replace("[0.5, 1.0]", f"[{values}]")
                        .replace('"method.interval" = ["t", "johnson-t"]', f'"target.margin" = [{values}]'), 500)
    t0 = time.monotonic()
    assert main(["sweep", str(sweep), "--store", str(tmp_path / "s.sqlite")]) == 2
    err = one_line_error(capsys.readouterr().err)
    assert "the grid has 160,000 cells" in err and f"at most {MAX_CELLS:,}" in err
    assert time.monotonic() - t0 < 10


def test_checking_a_grid_reports_progress(tmp_path):
    spec = read_sweep(write_sweep(tmp_path, SWEEP, replicates=500))
    seen: list[tuple[int, int]] = []
    expand(spec, progress=lambda done, total: seen.append((done, total)))
    assert seen == [(i, 8) for i in range(8)]


def test_numbers_are_normalised_before_hashing():
    scen = {"data": {"cv": 1, "mean": 6.0}, "simulation": {"replicates": 500}}
    same = {"data": {"cv": 1.0, "mean": 6}, "simulation": {"replicates": 500.0}}
    assert cell_key(scen, "check", {"n": [20]}, 7) == cell_key(same, "check", {"n": [20.0]}, 7)
    assert cell_key(scen, "check", {"n": [20]}, 7) != cell_key({**scen, "data": {"cv": 1.5, "mean": 6}}, "check", {"n": [20]}, 7)
    assert cell_key({"x": True}, "check", {}, 7) != cell_key({"x": 1}, "check", {}, 7)


# --- full disk ---------------------------------------------------------------------
def _limited(limit: int):
    def pre() -> None:
        # a file size limit makes writes fail like a full disk (EFBIG instead of ENOSPC), not kill the process
        signal.signal(signal.SIGXFSZ, signal.SIG_IGN)
        resource.setrlimit(resource.RLIMIT_FSIZE, (limit, limit))
    return pre


@pytest.mark.parametrize("limit", [6_000, 60_000])
def test_a_full_disk_stops_with_one_line_and_leaves_no_empty_store(tmp_path, limit):
    sweep = write_sweep(tmp_path, SWEEP, replicates=500)
    store = tmp_path / "s.sqlite"
    r = cli("sweep", str(sweep), "--store", str(store), preexec_fn=_limited(limit))
    assert r.returncode == 2, r.stderr
    lines = [l for l in r.stderr.splitlines() if l.startswith("simcheck:")]
    assert len(lines) == 1 and "cannot write" in lines[0], r.stderr
    assert "Traceback" not in r.stderr
    if store.exists():
        assert store.stat().st_size > 0
        kept = count(store)
        assert f"{kept} of 8 cells are stored" in lines[0]
        check = cli("store", "check", str(store))
        assert check.returncode == 0, check.stderr
        # with room again, the same command finishes the job
        assert cli("sweep", str(sweep), "--store", str(store)).returncode == 0
        assert count(store) == 8
    else:
        assert not any(tmp_path.glob("s.sqlite*"))


# --- the WAL and copies --------------------------------------------------------------
def test_a_copy_of_the_sqlite_file_alone_holds_every_stored_cell(tmp_path, monkeypatch):
    sweep = write_sweep(tmp_path, SWEEP, replicates=500)
    store = tmp_path / "s.sqlite"
    monkeypatch.setattr(store_mod, "CHECKPOINT_SECONDS", 0.0)
    copies: list[int] = []

    def copy_now(out, done, total):
        # what a backup taken at this moment (or a kill -9 now) keeps without the -wal file
        shutil.copyfile(store, tmp_path / "copy.sqlite")
        copies.append(len(stored(tmp_path / "copy.sqlite")))
        if done == 5:
            raise KeyboardInterrupt

    with pytest.raises(SweepInterrupted):
        run_sweep(sweep, store, on_cell=copy_now)
    assert copies == [1, 2, 3, 4, 5]
    shutil.copyfile(store, tmp_path / "after.sqlite")
    assert len(stored(tmp_path / "after.sqlite")) == 5


def test_store_check_finds_a_changed_digit(tmp_path, capsys):
    _, store = sweep_store(tmp_path)
    assert main(["store", "check", str(store), "--json"]) == 0
    info = json.loads(capsys.readouterr().out)
    assert info["ok"] is True and info["cells"] == 4 and info["integrity"] == "ok"
    conn = sqlite3.connect(store)
    key, text = conn.execute("SELECT cell_key, result_json FROM cells LIMIT 1").fetchone()
    conn.execute("UPDATE cells SET result_json = ? WHERE cell_key = ?", (text.replace('"coverage":0.', '"coverage":1.', 1), key))
    conn.commit()
    conn.close()
    assert main(["store", "check", str(store)]) == 2
    err = one_line_error(capsys.readouterr().err)
    assert "1 of 4 cells cannot be trusted" in err and "checksum mismatch" in err


# --- checksums on resume and export ----------------------------------------------------
def test_a_corrupted_cell_is_run_again_and_export_flags_invalid_json(tmp_path, capsys):
    sweep, store = sweep_store(tmp_path)
    clean = stored(store)
    conn = sqlite3.connect(store)
    keys = [k for (k,) in conn.execute("SELECT cell_key FROM cells ORDER BY cell_key")]
    conn.execute("UPDATE cells SET result_json = '{\"rows\": [' WHERE cell_key = ?", (keys[0],))
    conn.execute("UPDATE cells SET result_json = replace(result_json, '\"coverage\":0.', '\"coverage\":0.0') WHERE cell_key = ?", (keys[1],))
    conn.commit()
    conn.close()
    # export: no crash, the two cells marked, no numbers passed on
    out = tmp_path / "x.csv"
    assert main(["export", str(store), "--out", str(out)]) == 0
    assert "2 cells failed their checksum" in capsys.readouterr().err
    frame = pd.read_csv(out)
    bad = frame[frame["cell_key"].isin(keys[:2])]
    assert set(bad["status"]) == {"corrupt"} and bad["coverage"].isna().all()
    assert cells_frame(store).attrs["corrupt_cells"] == 2
    # resume: the two run again (with a notice), and the store equals the clean one
    notices: list[str] = []
    s = run_sweep(sweep, store, on_notice=notices.append)
    assert s.run_now == 2 and s.done_before == 2
    assert any("2 stored cells failed their checksum" in n for n in notices)
    assert stored(store) == clean


# --- one sweep per store, one writer at a time --------------------------------------------
def test_a_store_refuses_another_sweep_and_another_task(tmp_path, capsys):
    sweep, store = sweep_store(tmp_path)
    other = write_sweep(tmp_path / "b", SMALL.replace('"method.interval" = ["t", "johnson-t"]', '"target.margin" = [1.0, 2.0]'), 500)
    assert main(["sweep", str(other), "--store", str(store)]) == 2
    assert "belongs to another sweep (its varied keys differ)" in one_line_error(capsys.readouterr().err)
    search = write_sweep(tmp_path / "c", SMALL.replace('task = "check"\nn = [20, 40]', 'task = "search"'), 500)
    assert main(["sweep", str(search), "--store", str(store)]) == 2
    err = one_line_error(capsys.readouterr().err)
    assert "belongs to another sweep" in err and "task" in err
    reseeded = write_sweep(tmp_path / "d", "seed = 3\n" + SMALL, 500)
    assert main(["sweep", str(reseeded), "--store", str(store)]) == 2
    capsys.readouterr()
    assert len(stored(store)) == 4
    # more values of the same keys: the same sweep, grown
    grown = write_sweep(tmp_path, SMALL.replace("[0.5, 1.0]", "[0.5, 1.0, 2.0]"), 500)
    assert run_sweep(grown, store).run_now == 2


def _writer(store: Path, pid: int, host: str) -> None:
    conn = sqlite3.connect(store)
    conn.execute("INSERT OR REPLACE INTO writer(id, pid, host, started_at) VALUES (1, ?, ?, '2026-12-01T00:00:00+00:00')", (pid, host))
    conn.commit()
    conn.close()


def test_a_second_writer_is_refused_and_a_dead_one_is_taken_over(tmp_path, capsys):
    import socket

    sweep, store = sweep_store(tmp_path)
    sleeper = subprocess.Popen([sys.executable, "-c", "import time; time.sleep(60)"])
    try:
        _writer(store, sleeper.pid, socket.gethostname())
        assert main(["sweep", str(sweep), "--store", str(store)]) == 2
        err = one_line_error(capsys.readouterr().err)
        assert f"is being written by another sweep (process {sleeper.pid}" in err
        assert main(["store", "unlock", str(store)]) == 2  # it is still running
        capsys.readouterr()
    finally:
        sleeper.kill()
        sleeper.wait()
    # the same process gone (as after kill -9): taken over, with a notice
    notices: list[str] = []
    assert run_sweep(sweep, store, on_notice=notices.append).done_before == 4
    assert any("ended without closing it" in n for n in notices)
    # a writer on another machine cannot be checked: refused until `store unlock`
    _writer(store, 12345, "another-host.invalid")
    assert main(["sweep", str(sweep), "--store", str(store)]) == 2
    assert "simcheck store unlock" in one_line_error(capsys.readouterr().err)
    assert main(["store", "unlock", str(store)]) == 0
    assert "another-host.invalid" in capsys.readouterr().out
    assert main(["sweep", str(sweep), "--store", str(store)]) == 0
    conn = sqlite3.connect(store)
    assert conn.execute("SELECT COUNT(*) FROM writer").fetchone()[0] == 0  # released at exit
    conn.close()


# --- stores of the previous version -------------------------------------------------------
def _old_key(scenario: dict, task: str, args: dict, seed: int) -> str:
    # the schema-1 cell key: canonical JSON without number normalisation
    payload = {"scenario": scenario, "task": task, "seed": int(seed)}
    payload.update({k: v for k, v in args.items() if v is not None})
    return hashlib.sha256(json.dumps(payload, sort_keys=True, separators=(",", ":")).encode()).hexdigest()


def test_a_schema_1_store_is_upgraded_and_keeps_its_cells(tmp_path):
    sweep, store = sweep_store(tmp_path)
    clean = stored(store)
    conn = sqlite3.connect(store)
    rows = conn.execute("SELECT cell_key, scenario_json, task, task_json, seed FROM cells").fetchall()
    for key, scen, task, args, seed in rows:
        conn.execute("UPDATE cells SET cell_key = ? WHERE cell_key = ?",
                     (_old_key(json.loads(scen), task, json.loads(args), seed), key))
    assert {r[0] for r in rows} != {k for (k,) in conn.execute("SELECT cell_key FROM cells")}
    conn.execute("ALTER TABLE cells DROP COLUMN checksum")
    conn.execute("DROP TABLE writer")
    conn.execute("DELETE FROM meta WHERE key IN ('sweep_id', 'sweep_binding')")
    conn.execute("UPDATE meta SET value = '1' WHERE key = 'schema_version'")
    conn.commit()
    conn.close()
    assert cells_frame(store)["status"].eq("ok").all()  # still readable before the upgrade
    notices: list[str] = []
    s = run_sweep(sweep, store, on_notice=notices.append)
    assert (s.done_before, s.run_now) == (4, 0)
    assert any("upgraded" in n and "schema 1 to 2: 4 cells kept" in n for n in notices)
    assert stored(store) == clean
    assert dict(sqlite3.connect(store).execute("SELECT key, value FROM meta"))["migrated_from"] == "1"


@pytest.mark.slow
def test_two_sweeps_at_once_on_one_store_the_second_is_refused(tmp_path):
    sweep = write_sweep(tmp_path, SWEEP, replicates=400000)  # cells of a second or more: the first is still running
    store = tmp_path / "s.sqlite"
    env = {**os.environ, "PYTHONPATH": str(REPO)}
    first = subprocess.Popen([sys.executable, "-m", "simcheck", "sweep", str(sweep), "--store", str(store)],
                             cwd=REPO, env=env, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    try:
        t0 = time.monotonic()
        while count(store) < 1:
            assert first.poll() is None and time.monotonic() - t0 < 60
            time.sleep(0.05)
        second = cli("sweep", str(sweep), "--store", str(store))
        assert second.returncode == 2
        assert f"is being written by another sweep (process {first.pid}" in one_line_error(second.stderr)
    finally:
        first.send_signal(signal.SIGTERM)
        first.communicate(timeout=60)
    assert first.returncode == 130
    # the first one's mark went with it: the store is free again
    conn = sqlite3.connect(store)
    assert conn.execute("SELECT COUNT(*) FROM writer").fetchone()[0] == 0
    conn.close()
