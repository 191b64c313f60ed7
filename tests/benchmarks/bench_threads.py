"""Threads and large n: ratios measured in one run (not a timed test).

Run:  python tests/benchmarks/bench_threads.py [--quick]

(f) one check (lognormal, t, n = 50, 10^6 replicates) on 2 threads against 1
    thread, wall time; the scaling for every available core count is printed
                                                             target >= 1.7x (2 cores)
(g) whole curve n = 2..400 against one check at n = 400, 20,000 replicates,
    one thread, CPU time, measured in alternation            target <= 2.1x
(h) cost per drawn number at n = 10,000 against n = 50 (one thread, CPU time,
    the same number of values drawn)                         target <= 1.15x
Results are checked to be identical for every thread count (check, curve and
a clustered curve). The load average is printed first: with other jobs on the
machine, wall-time scaling over threads is pessimistic (a second core is not
free) and CPU-time ratios swing by about 10%.
"""

from __future__ import annotations

import argparse
import os
import sys
import time

from simcheck import engine
from simcheck.design import Design
from simcheck.models import make_model
from simcheck.threads import available_cores


def best(fn, repeat, clock):
    times = []
    for _ in range(repeat):
        t0 = clock()
        fn()
        times.append(clock() - t0)
    return min(times)


def paired(fa, fb, repeat, clock):
    """Best times of fa and fb measured in alternation (a busy spell hits both)."""
    ta, tb = [], []
    for _ in range(repeat):
        t0 = clock()
        fa()
        ta.append(clock() - t0)
        t0 = clock()
        fb()
        tb.append(clock() - t0)
    return min(ta), min(tb)


def serial_share(fn) -> float:
    """CPU time of the calling thread / CPU time of the process while ``fn`` runs.

    With two threads the calling thread only merges partial measures and finishes
    (the quantiles); the rest is the workers'. Amdahl's bound 1 / (s + (1 - s) / 2)
    is the two-thread speed-up a free second core would give; unlike wall time it
    hardly depends on other jobs on the machine.
    """
    t0, p0 = time.thread_time(), time.process_time()
    fn()
    return (time.thread_time() - t0) / max(time.process_time() - p0, 1e-9)


def identical_over_threads(cores: int) -> None:
    """Curve and clustered curve: the same numbers on 1, 2 and 3 threads."""
    from simcheck.design import ClusterSpec

    ln = make_model({"model": "lognormal", "mean": 6.0, "cv": 1.2})
    designs = [
        (Design(model=ln, method="t", margin=1.0), range(2, 200)),
        (Design(model=make_model({"model": "normal", "mean": 10.0, "sd": 3.0}), method="cluster-t", margin=1.0,
                clusters=ClusterSpec(icc=0.05, size_mean=8, size_cv=0.5)), range(4, 40)),
    ]
    for d, ns in designs:
        runs = [engine.curve(d, ns, replicates=20_000, rng=2, threads=t) for t in sorted({1, 2, 3, cores})]
        for other in runs[1:]:
            assert [r.to_dict() for r in other.rows] == [r.to_dict() for r in runs[0].rows], "threads changed a curve"


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--quick", action="store_true", help="fewer replicates and repeats (noisier)")
    args = ap.parse_args(argv)
    repeat = 1 if args.quick else 3
    ln = make_model({"model": "lognormal", "mean": 6.0, "cv": 1.2})
    d = Design(model=ln, method="t", margin=1.0)
    results = []
    print("load average (1, 5, 15 min): " + ", ".join(f"{x:.2f}" for x in os.getloadavg()))

    # (f) wall-time scaling of one check over threads
    R = 200_000 if args.quick else 1_000_000
    cores = available_cores()
    wall = {}
    first = None
    for t in sorted({1, 2, *range(1, cores + 1)}):
        r = engine.check(d, 50, replicates=R, rng=1, threads=t)
        first = first or r.to_dict()
        assert r.to_dict() == first, f"threads={t} changed the result"
        wall[t] = best(lambda: engine.check(d, 50, replicates=R, rng=1, threads=t), repeat, time.perf_counter)
    for t, w in wall.items():
        print(f"check n=50, R={R}: {t} thread(s) {w:.3f} s wall, speed-up {wall[1] / w:.2f}x")
    s = min(serial_share(lambda: engine.check(d, 50, replicates=R, rng=1, threads=2)) for _ in range(repeat))
    print(f"2 threads: the calling thread's share of the CPU time {100 * s:.1f}%, "
          f"so at most {1 / (s + (1 - s) / 2):.2f}x with a free second core (Amdahl)")
    results.append(("(f) one check, 2 threads vs 1 (wall, speed-up)", wall[1] / wall[2], ">=", 1.7))

    # (g) whole curve vs one check at 400, single thread, CPU time
    Rc = 20_000
    clock = time.process_time
    t_one, t_curve = paired(lambda: engine.check(d, 400, replicates=Rc, rng=3, threads=1),
                            lambda: engine.curve(d, range(2, 401), replicates=Rc, rng=3, threads=1), 2 * repeat + 1, clock)
    print(f"one check at n=400 {t_one:.3f} s CPU, whole curve 2..400 {t_curve:.3f} s CPU")
    results.append(("(g) curve 2..400 / one check at 400 (CPU)", t_curve / t_one, "<=", 2.1))

    # (h) cost per drawn number at n = 10,000 vs n = 50 (same values drawn)
    values = 20_000_000 if not args.quick else 5_000_000
    t50 = best(lambda: engine.check(d, 50, replicates=values // 50, rng=4, threads=1), repeat, clock)
    t10k = best(lambda: engine.check(d, 10_000, replicates=values // 10_000, rng=4, threads=1), repeat, clock)
    print(f"ns per drawn number: n=50 {t50 / values * 1e9:.1f}, n=10,000 {t10k / values * 1e9:.1f}")
    results.append(("(h) cost per number, n=10,000 / n=50 (CPU)", t10k / t50, "<=", 1.15))

    identical_over_threads(cores)
    print("check, curve and clustered curve: identical for every thread count")
    ok_all = True
    for name, value, op, target in results:
        ok = value <= target if op == "<=" else value >= target
        ok_all &= ok
        print(f"{name:52s} {value:8.2f}  target {op} {target:<5}  {'PASS' if ok else 'FAIL'}")
    return 0 if ok_all else 1


if __name__ == "__main__":
    sys.exit(main())
