"""Engine benchmarks: ratios measured in one run (not a timed test).

Run:  python tests/benchmarks/bench_engine.py [--quick]

(a) check at n = 50, one million replicates, lognormal, t interval, against
    drawing the same lognormal numbers with numpy            target <= 1.2x
(b) against a per-replicate loop calling scipy.stats.t.interval
    (on a subsample, scaled)                                 target >= 300x faster
(c) whole curve n = 2..400, 20,000 replicates, against one check at n = 400
                                                             target <= 2.5x
    and against separate checks at every n                   target >= 50x faster
(d) normal data through sufficient statistics against full draws at n = 100
                                                             target >= 20x faster
(e) peak extra memory of (a) (tracemalloc)                   target <= 16 MiB
"""

from __future__ import annotations

import argparse
import sys
import time
import tracemalloc

import numpy as np
from scipy import stats

from simcheck import engine
from simcheck.design import Design
from simcheck.models import make_model


# CPU time of this process: the work is single-threaded, and CPU time is far
# less disturbed than wall time by other jobs on a shared machine.
clock = time.process_time


def best_of(fn, repeat=3):
    times = []
    for _ in range(repeat):
        t0 = clock()
        fn()
        times.append(clock() - t0)
    return min(times)


def paired(fa, fb, repeat=5):
    """Best times of fa and fb measured in alternation, so that a busy spell
    on a shared machine hits both sides of a ratio alike."""
    ta, tb = [], []
    for _ in range(repeat):
        t0 = clock()
        fa()
        ta.append(clock() - t0)
        t0 = clock()
        fb()
        tb.append(clock() - t0)
    return min(ta), min(tb)


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--quick", action="store_true", help="fewer repeats (noisier)")
    args = ap.parse_args(argv)
    repeat = 1 if args.quick else 3
    ln = make_model({"model": "lognormal", "mean": 6.0, "cv": 1.2})
    d = Design(model=ln, method="t", margin=1.0)
    results = []

    # (a) check vs drawing the numbers with numpy, in the same chunking
    R, n = 1_000_000, 50
    rows = 20_000

    def draw_only():
        g = np.random.default_rng(1)
        for _ in range(R // rows):
            g.lognormal(ln.meanlog, ln.sdlog, size=(rows, n))

    buf = np.empty((rows, n))

    def draw_in_place():
        # the very numbers the check uses: the model's own in-place draw
        g = np.random.default_rng(1)
        for _ in range(R // rows):
            ln.draw(g, (rows, n), out=buf)

    t_draw_np = best_of(draw_only, repeat)
    t_draw, t_check = paired(draw_in_place, lambda: engine.check(d, n, replicates=R, rng=1), 2 * repeat - 1)
    results.append(("(a) check / in-place draws of the same numbers, n=50, 1e6", t_check / t_draw, "<=", 1.2))
    results.append(("(a') check / numpy Generator.lognormal draws", t_check / t_draw_np, "<=", 1.2))

    # (b) per-replicate scipy loop on a subsample, scaled to R
    sub = 20_000
    g = np.random.default_rng(2)
    x = g.lognormal(ln.meanlog, ln.sdlog, size=(sub, n))
    t0 = clock()
    cover = 0
    for row in x:
        lo, hi = stats.t.interval(0.95, n - 1, loc=row.mean(), scale=stats.sem(row))
        cover += lo <= ln.mean <= hi
    t_loop = (clock() - t0) * (R / sub)
    results.append(("(b) scipy per-replicate loop / check (speed-up)", t_loop / t_check, ">=", 300))

    # (c) whole curve vs one check at n_max and vs separate checks at every n
    Rc = 20_000
    t_one, t_curve = paired(
        lambda: engine.check(d, 400, replicates=Rc, rng=3),
        lambda: engine.curve(d, range(2, 401), replicates=Rc, rng=3),
        2 * repeat - 1,
    )
    # separate checks at every n: measured on every 10th n, scaled
    sample_ns = list(range(2, 401, 10))
    t0 = clock()
    for nn in sample_ns:
        engine.check(d, nn, replicates=Rc, rng=3)
    t_sep = (clock() - t0) * (399 / len(sample_ns))
    results.append(("(c) curve 2..400 / one check at 400", t_curve / t_one, "<=", 2.5))
    results.append(("(c) separate checks at every n / curve (speed-up)", t_sep / t_curve, ">=", 50))

    # (d) sufficient statistics vs full draws for normal data
    dn = Design(model=make_model({"model": "normal", "mean": 10.0, "sd": 3.0}), method="t", margin=1.0)
    Rd = 200_000
    t_suff, t_full = paired(
        lambda: engine.check(dn, 100, replicates=Rd, rng=4, path="sufficient"),
        lambda: engine.check(dn, 100, replicates=Rd, rng=4, path="full"),
        2 * repeat - 1,
    )
    results.append(("(d) full draws / sufficient statistics, n=100 (speed-up)", t_full / t_suff, ">=", 20))

    # (e) peak extra memory at one million replicates
    tracemalloc.start()
    engine.check(d, n, replicates=R, rng=1)
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    results.append(("(e) peak extra memory at 1e6 replicates (MiB)", peak / 2**20, "<=", 16))

    print(f"timings (s): numpy lognormal {t_draw_np:.3f}  in-place draw {t_draw:.3f}  check {t_check:.3f}  scipy-loop(scaled) {t_loop:.1f}  "
          f"one-check@400 {t_one:.3f}  curve {t_curve:.3f}  separate(scaled) {t_sep:.2f}  "
          f"sufficient {t_suff:.3f}  full {t_full:.3f}")
    ok_all = True
    for name, value, op, target in results:
        ok = value <= target if op == "<=" else value >= target
        ok_all &= ok
        print(f"{name:58s} {value:10.2f}  target {op} {target:<6}  {'PASS' if ok else 'FAIL'}")
    return 0 if ok_all else 1


if __name__ == "__main__":
    sys.exit(main())
