"""What the command line says: one error prefix, suggestions for mistyped options,
the resume hint, progress lines that never outlive the run, report's refusals."""

from __future__ import annotations

import argparse
import io
import sqlite3
from pathlib import Path

import pytest

from simcheck.cli import main
from simcheck.cli.check import SearchProgress
from simcheck.cli.sweep import resume_command

ROOT = Path(__file__).resolve().parents[1]
DEMO = str(ROOT / "scenarios" / "demo.toml")


def _err(capsys, argv) -> tuple[int, str]:
    rc = main(argv)
    return rc, capsys.readouterr().err


@pytest.mark.parametrize("argv, hint", [
    (["search", DEMO, "--replicate", "100"], "(did you mean --replicates?)"),
    (["check", DEMO, "--n", "10", "--sed", "3"], "(did you mean --seed?)"),
    (["formula", "--margn", "1"], "(did you mean --margin?)"),
    (["serch", DEMO], "(did you mean search?)"),
])
def test_unknown_options_and_commands_get_a_suggestion(capsys, argv, hint):
    rc, err = _err(capsys, argv)
    assert rc == 2 and err.count("\n") == 1
    assert err.startswith("simcheck: error: ") and hint in err


def test_abbreviated_options_are_refused_not_guessed(capsys):
    # "--rep" used to mean "--replicates"; a later option starting with "--rep" would change its meaning
    rc, err = _err(capsys, ["check", DEMO, "--n", "10", "--rep", "200"])
    assert rc == 2 and "unrecognized arguments: --rep 200" in err and err.startswith("simcheck: error: ")


@pytest.mark.parametrize("argv", [["search"], ["report"], ["check", DEMO]])
def test_usage_errors_share_the_prefix(capsys, argv):
    rc, err = _err(capsys, argv)
    assert rc == 2 and err.count("\n") == 1
    assert err.startswith(f"simcheck: error: {argv[0]}: ") and f"(see simcheck {argv[0]} --help)" in err


def test_report_on_a_csv_says_what_it_expected(tmp_path, capsys):
    data = tmp_path / "pilot.csv"
    data.write_text("minutes\n3.5\n4.1\n", encoding="utf-8")
    rc, err = _err(capsys, ["report", str(data), "--out", str(tmp_path / "out")])
    assert rc == 2 and err.count("\n") == 1
    assert "expects a scenario file (.toml) or a sweep store (.sqlite)" in err
    assert not (tmp_path / "out").exists()


def test_report_on_an_empty_store_exits_2_with_one_line(tmp_path, capsys):
    import shutil

    from simcheck.sweep.runner import run_sweep

    for name in ("top_box.toml", "top_box_check_sweep.toml"):
        shutil.copy(ROOT / "scenarios" / name, tmp_path / name)
    store = tmp_path / "s.sqlite"
    run_sweep(tmp_path / "top_box_check_sweep.toml", store)
    with sqlite3.connect(store) as conn:  # a store whose sweep never finished a cell
        conn.execute("DELETE FROM cells")
    rc, err = _err(capsys, ["report", str(store), "--out", str(tmp_path / "out")])
    assert rc == 2 and err.count("\n") == 1
    assert err.startswith("simcheck: error: STORE: ") and "no finished cells" in err
    assert not (tmp_path / "out").exists()


def test_resume_hint_repeats_jobs_and_backend():
    args = argparse.Namespace(sweep="night.toml", store="night store.sqlite", jobs=4, backend=None, scheduler=None)
    assert resume_command(args) == "simcheck sweep night.toml --store 'night store.sqlite' --jobs 4"
    args = argparse.Namespace(sweep="s.toml", store="s.sqlite", jobs=1, backend="dask", scheduler="tcp://h:8786")
    assert resume_command(args) == "simcheck sweep s.toml --store s.sqlite --backend dask --scheduler tcp://h:8786"


def test_search_progress_shows_stage_and_overall_progress():
    out = io.StringIO()
    prog = SearchProgress(budget=1000, stream=out, quiet=0.0, every=0.0)
    for done in (50, 100):          # stage 1: 100 replicates
        prog(done, 100)
    for done in (100, 300):         # stage 2: a new evaluation starts from below
        prog(done, 300)
    prog(200, 400, stage="confirm")  # stage 3, named by the search
    lines = out.getvalue().splitlines()
    assert lines[0].startswith("simcheck: search stage 1, 50% of this evaluation; 50 replicates simulated so far (5% of the budget 1,000)")
    assert "search stage 2, 100% of this evaluation; 400 replicates simulated so far (40% of the budget 1,000)" in lines[3]
    assert "search stage 3 (confirm), 50% of this evaluation; 600 replicates simulated so far" in lines[4]


class _Tty(io.StringIO):
    def isatty(self) -> bool:
        return True


def test_progress_bar_is_gone_before_results_are_printed():
    stream = _Tty()
    with SearchProgress(budget=1000, stream=stream, delay=0.0) as prog:
        prog(10, 100)
        prog(100, 100)
        assert prog.bar is not None
    assert prog.bar is None
    # tqdm with leave=False wipes its line on close: nothing printable after the last carriage return
    tail = stream.getvalue().rsplit("\r", 1)[-1]
    assert tail.strip() == ""
