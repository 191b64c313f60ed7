"""Sweep benchmark: 24 check cells on 2 local workers against 1 (a ratio measured in one run).

Run:  python tests/benchmarks/bench_sweep.py [--replicates R] [--repeats K]

Each cell checks three n (20, 40, 80) of a lognormal scenario (invented
example) with R replicates (default 200,000: about 0.5-1 s a cell on one core).
The same sweep runs into a fresh store with ``--jobs 1`` and ``--jobs 2``;
both stores must hold bitwise the same results.

Printed:
  (a) speed-up of 2 workers, pool already started (the steady state of an
      overnight sweep)                                        target >= 1.7x
  (b) the same including the start of the worker processes (for information)
  (c) the machine's own ceiling: two independent processes doing the same
      fixed numpy work at once, against one alone (2 x t_one / t_pair). On a
      machine whose 2 CPUs are shared with other load this is well below 2,
      and no scheduler can beat it; (a) / (c) is the sweep's efficiency.
"""

from __future__ import annotations

import argparse
import os
import sqlite3
import subprocess
import sys
import tempfile
import time
from pathlib import Path

from simcheck.sweep.runner import run_sweep

BASE = """\
title = "Repair times at a depot (invented example)"

[target]
estimand = "mean"
confidence = 0.95
margin = 1.0

[data]
model = "lognormal"
mean = 6.0
cv = 1.0

[method]
interval = "t"

[simulation]
replicates = {replicates}
seed = 4242
"""

SWEEP = """\
base = "base.toml"
task = "check"
n = [20, 40, 80]

[vary]
"data.cv" = [0.5, 0.75, 1.0, 1.5, 2.0, 3.0]
"data.mean" = [4.0, 8.0]
"method.interval" = {methods}
"""


def _rows(store: Path) -> dict[str, str]:
    return dict(sqlite3.connect(store).execute("SELECT cell_key, result_json FROM cells"))


_KERNEL = (
    "import numpy as np, time\n"
    "g = np.random.default_rng(1)\n"
    "for _ in range(40): x = g.lognormal(size=(2000, 500)); x.mean(axis=1); x.std(axis=1)\n"
)


def _ceiling() -> tuple[float, float, float]:
    """Wall time of the kernel alone, of two at once, and the ratio 2 x alone / pair."""

    def run(k: int) -> float:
        t0 = time.perf_counter()
        procs = [subprocess.Popen([sys.executable, "-c", _KERNEL]) for _ in range(k)]
        for p in procs:
            p.wait()
        return time.perf_counter() - t0

    run(1)  # warm the file cache
    one = min(run(1), run(1))
    pair = min(run(2), run(2))
    return one, pair, 2 * one / pair


def _timed(sweep: Path, store: Path, jobs: int) -> float:
    t0 = time.perf_counter()
    s = run_sweep(sweep, store, jobs=jobs)
    dt = time.perf_counter() - t0
    assert s.run_now == s.cells_total and s.failed == 0, s
    return dt


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--replicates", type=int, default=200000)
    ap.add_argument("--repeats", type=int, default=2, help="interleaved repeats of each timing (best is used)")
    args = ap.parse_args()
    import simcheck.tasks  # noqa: F401  (the driver's own imports are not what (b) measures)
    with tempfile.TemporaryDirectory() as tmp:
        d = Path(tmp)
        (d / "base.toml").write_text(BASE.format(replicates=args.replicates))
        sweep = d / "sweep.toml"
        sweep.write_text(SWEEP.format(methods='["t", "johnson-t"]'))
        warm = d / "warm.toml"
        warm.write_text(SWEEP.format(methods='["t"]').replace("[0.5, 0.75, 1.0, 1.5, 2.0, 3.0]", "[0.5, 0.75]"))

        t_cold = _timed(sweep, d / "cold2.sqlite", 2)  # includes starting 2 worker processes
        _timed(warm, d / "warm.sqlite", 2)  # the pool is reused by the next 2-worker runs
        # interleaved repeats, best of each: other load on the machine hits both alike
        t1s, t2s = [], []
        for r in range(args.repeats):
            t1s.append(_timed(sweep, d / f"one{r}.sqlite", 1))
            t2s.append(_timed(sweep, d / f"two{r}.sqlite", 2))
        t1, t2 = min(t1s), min(t2s)
        ref = _rows(d / "one0.sqlite")
        same = all(_rows(p) == ref for p in d.glob("*.sqlite") if p.name != "warm.sqlite")
    one, pair, ceiling = _ceiling()

    print(f"cpus: {os.cpu_count()}, load average: {os.getloadavg()[0]:.2f}, replicates per cell: {args.replicates}")
    print(f"24 cells, --jobs 1: {t1:.2f} s ({t1 / 24:.2f} s a cell); runs: {', '.join(f'{t:.2f}' for t in t1s)}")
    print(f"24 cells, --jobs 2: {t2:.2f} s (pool started; runs: {', '.join(f'{t:.2f}' for t in t2s)}), {t_cold:.2f} s (cold)")
    print(f"(a) speed-up of 2 workers, pool started: {t1 / t2:.2f}x  (target >= 1.7x)  {'ok' if t1 / t2 >= 1.7 else 'MISSED'}")
    print(f"(b) speed-up of 2 workers, cold start:   {t1 / t_cold:.2f}x  (for information)")
    print(f"(c) machine ceiling, 2 processes vs 1:  {ceiling:.2f}x  ({one:.2f} s alone, {pair:.2f} s for two at once)")
    print(f"    sweep efficiency (a) / (c): {t1 / t2 / ceiling:.0%}")
    print(f"stores bitwise identical: {same}")
    return 0 if same else 1


if __name__ == "__main__":
    sys.exit(main())
