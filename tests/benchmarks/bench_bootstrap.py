"""Benchmark: bootstrap intervals fast enough for coverage studies.

Run with ``python tests/benchmarks/bench_bootstrap.py``. A coverage study of
2,000 replicates of n = 50 lognormal values (meanlog 0, sdlog 1; an invented
setting), 1,999 resamples, 95% BCa, timed against scipy.stats.bootstrap in
the same process:

* scipy called once on the (2000, 50) array with ``axis=-1,
  vectorized=True, method='BCa'`` (its fastest use): target >= 3x;
* scipy called per replicate (on 50 replicates, scaled up to 2,000):
  target >= 10x.

Ours is timed end to end through ``simcheck.engine.check`` when the engine
exists, else as the interval function on the (2000, 50) block; the function
alone is always printed too. Ours runs twice: with the default thread count
(:func:`simcheck.intervals.bootstrap.bootstrap_threads`, i.e.
``SIMCHECK_THREADS`` or ``min(4, cpu count)``) and with one thread
(``SIMCHECK_THREADS=1``, as in sweep workers). PASS/FAIL is judged on the
default's wall time (threads are the point); the one-thread figures are
always printed beside it. Timings are the best of a few interleaved rounds,
so that load from other processes hits all sides alike; CPU time
(``time.process_time``, summed over threads) is printed beside wall time
because the machine may be shared. Exit status 1 when a target fails. It
also prints the quantile stage on a (2000, 1999) block with a full sort
(used) and with ``np.partition`` at the needed order statistics.
"""

from __future__ import annotations

import os
import sys
import time
from pathlib import Path

import numpy as np
from scipy import stats

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

from simcheck.intervals.bootstrap import MAX_THREADS, bca_mean, bootstrap_threads  # noqa: E402

R, N, B, CONF = 2000, 50, 1999, 0.95
PER_REPLICATE = 50
ROUNDS = 5


def best(f, rounds=ROUNDS):
    times = []
    for _ in range(rounds):
        t0 = time.perf_counter()
        f()
        times.append(time.perf_counter() - t0)
    return min(times)


class _one_thread:
    """SIMCHECK_THREADS=1 for the duration (the engine passes no thread count)."""

    def __enter__(self):
        self.old = os.environ.get("SIMCHECK_THREADS")
        os.environ["SIMCHECK_THREADS"] = "1"

    def __exit__(self, *exc):
        if self.old is None:
            del os.environ["SIMCHECK_THREADS"]
        else:
            os.environ["SIMCHECK_THREADS"] = self.old


def main() -> int:
    threads = min(bootstrap_threads(), MAX_THREADS)
    data_rng = np.random.default_rng(20240601)
    x = data_rng.lognormal(0.0, 1.0, size=(R, N))

    try:
        from simcheck import engine
        from simcheck.design import Design
        from simcheck.models import make_model

        design = Design(make_model({"model": "lognormal", "meanlog": 0.0, "sdlog": 1.0}), method="bootstrap-bca",
                        confidence=CONF, resamples=B)

        def ours_engine():
            engine.check(design, N, replicates=R, rng=1)

        def ours_engine_1():
            with _one_thread():
                engine.check(design, N, replicates=R, rng=1)
    except ImportError:
        ours_engine = ours_engine_1 = None

    def ours_func():
        bca_mean(x, CONF, rng=np.random.default_rng(1), resamples=B)

    def ours_func_1():
        bca_mean(x, CONF, rng=np.random.default_rng(1), resamples=B, threads=1)

    def scipy_vectorised():
        stats.bootstrap((x,), np.mean, axis=-1, vectorized=True, method="BCa", n_resamples=B,
                        confidence_level=CONF, rng=np.random.default_rng(2))

    def scipy_per_replicate():
        g = np.random.default_rng(3)
        for r in range(PER_REPLICATE):
            stats.bootstrap((x[r],), np.mean, vectorized=True, method="BCa", n_resamples=B,
                            confidence_level=CONF, rng=g)

    def timed(f, scale=1.0):
        w0, c0 = time.perf_counter(), time.process_time()
        f()
        return (time.perf_counter() - w0) * scale, (time.process_time() - c0) * scale

    funcs = {"func": ours_func, "func1": ours_func_1, "engine": ours_engine, "engine1": ours_engine_1,
             "vec": scipy_vectorised, "per": scipy_per_replicate}
    runs = {k: [] for k, f in funcs.items() if f is not None}
    for _ in range(ROUNDS):  # interleaved rounds, so load from other processes hits all alike
        for k in runs:
            runs[k].append(timed(funcs[k], R / PER_REPLICATE if k == "per" else 1.0))
    wall = {k: min(w for w, _ in v) for k, v in runs.items()}
    cpu = {k: min(c for _, c in v) for k, v in runs.items()}
    ours = "engine" if "engine" in wall else "func"

    names = {"func": f"bca_mean, {threads} threads (default)", "func1": "bca_mean, 1 thread",
             "engine": f"engine.check, {threads} threads (default)", "engine1": "engine.check, 1 thread",
             "vec": "scipy.stats.bootstrap vectorised (once)",
             "per": f"scipy.stats.bootstrap per replicate (x{R // PER_REPLICATE})"}
    print(f"coverage study: {R} replicates, n = {N}, {B} resamples, lognormal(0, 1), BCa {CONF:.0%}")
    print(f"threads: default {threads} (bootstrap_threads(); SIMCHECK_THREADS="
          f"{os.environ.get('SIMCHECK_THREADS', 'unset')}, cpu count {os.cpu_count()}), and 1")
    print(f"best of {ROUNDS} interleaved rounds                  wall (s)   CPU (s)")
    for k in ("func", "func1", "engine", "engine1", "vec", "per"):
        if k in wall:
            print(f"  {names[k]:48s} {wall[k]:8.3f}  {cpu[k]:8.3f}")
    ok = True
    for base, target in (("vec", 3.0), ("per", 10.0)):
        print(f"vs {names[base]} (target >= {target:.0f}x on wall time, default threads):")
        for k in (ours, ours + "1", "func", "func1") if ours == "engine" else ("func", "func1"):
            rw, rc = wall[base] / wall[k], cpu[base] / cpu[k]
            if k == ours:
                verdict = "PASS" if rw >= target else "FAIL"
                ok &= rw >= target
            else:
                verdict = "(info)"
            print(f"  {names[k]:48s} {rw:5.1f}x wall, {rc:5.1f}x CPU  {verdict}")

    # quantile stage: why rows are fully sorted
    a = data_rng.lognormal(0.0, 1.0, size=(R, B))
    k = [int(np.floor((B - 1) * 0.025)), int(np.floor((B - 1) * 0.025)) + 1,
         int(np.floor((B - 1) * 0.975)), int(np.floor((B - 1) * 0.975)) + 1]
    ts = best(lambda: np.sort(a, axis=1))
    tpn = best(lambda: np.partition(a, k, axis=1))
    print(f"quantile stage on a ({R}, {B}) block: np.sort {ts * 1e3:.0f} ms, np.partition at {k} {tpn * 1e3:.0f} ms")
    return 0 if ok else 1


if __name__ == "__main__":
    raise SystemExit(main())
