"""Search benchmark: a ratio measured in one run (not a timed test).

Run:  python tests/benchmarks/bench_search.py [--quick] [--replicates R] [--old COMMIT]

A whole search (formula start, bracket, locate, confirmation on fresh
replicates, doubling if needed) on lognormal data (CV 1.5), t interval, 95 %
confidence, target margin 0.14, assurance target 0.5, coverage tolerance 0.03,
against one engine.check at the n found with the same replicates.
                                                             target <= 4x

Why a coverage tolerance of 0.03: with the default 0.005 the t interval on
data this skewed does not reach 0.945 coverage before n of about 2,500
(printed below, at n = 300, for reference), so the search would end in the
thousands; with 0.03 the margin (assurance) binds at an n of a few hundred.
The same search by the previous algorithm (point-estimate n, n_range from
the confirmation window only), loaded from git history (``--old COMMIT``,
default the last commit before the stricter search; skipped if git or the
commit is missing), gives the cost of the stricter search in the same run.

Exact paths: the window scan of a two-proportion search (Newcombe, p_a 0.5,
p_b 0.4, margin 0.03: n in the thousands) and of a one-proportion search
(Wilson, p 0.3, margin 0.008, n_max 20000), each against one exact check at
the n found.

Timings: process CPU time (wall time printed beside it), best of five
interleaved runs of each (one with --quick), so that other work on the machine
does not decide the ratio; the search is seed-fixed, so every run does the
same work.
"""

from __future__ import annotations

import argparse
import importlib.util
import subprocess
import sys
import tempfile
import time
from pathlib import Path

from simcheck import engine
from simcheck.design import Design
from simcheck.models import make_model
from simcheck.search import find_n

TARGET = 4.0
OLD_COMMIT = "b9ba9fe"


def old_find_n(commit: str):
    """find_n of the search module as it was at ``commit`` (benchmark only), or None."""
    root = Path(__file__).resolve().parents[2]
    try:
        src = subprocess.run(["git", "-C", str(root), "show", f"{commit}:simcheck/search.py"],
                             capture_output=True, text=True, check=True).stdout
    except (OSError, subprocess.CalledProcessError):
        return None
    path = Path(tempfile.mkdtemp()) / "old_search.py"
    path.write_text(src)
    spec = importlib.util.spec_from_file_location("old_search", path)
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    return mod.find_n


def flat_figures(old, repeat: int) -> None:
    """A flat curve (gamma, CV 1, t, coverage target 0.94): where the stricter search escalates."""
    d = Design(model=make_model({"model": "gamma", "mean": 1.0, "cv": 1.0}), method="t", margin=0.3)
    kw = dict(coverage_tolerance=0.01, replicates=5000, rng=5, n_max=2000)
    from simcheck.search import find_n as fn

    res = fn(d, **kw)
    ts = [timed(lambda: fn(d, **kw))[1] for _ in range(repeat)]
    n = res.n if res.n is not None else res.n_range[1]
    tc = [timed(lambda: engine.check(d, n, replicates=5000, rng=7))[1] for _ in range(repeat)]
    line = (f"flat:     gamma CV 1, t, target 0.94, R = 5000: n = {res.n}, n_range = {res.n_range}, "
            f"decision {res.decision}, replicates_needed {res.replicates_needed}; search {min(ts):.3f} s CPU "
            f"= {min(ts) / min(tc):.1f}x one check at n = {n}")
    if old is not None:
        to = [timed(lambda: old(d, **kw))[1] for _ in range(repeat)]
        ro = old(d, **kw)
        line += f"; old search n = {ro.n}, n_range = {ro.n_range}, {min(ts) / min(to):.2f}x its time"
    print(line)


def exact_figures(repeat: int) -> None:
    from simcheck.search import find_n as fn

    two = Design(model=make_model({"model": "bernoulli", "p": 0.5}), model_b=make_model({"model": "bernoulli", "p": 0.4}),
                 estimand="proportion-diff", method="newcombe", margin=0.03)
    one = Design(model=make_model({"model": "bernoulli", "p": 0.3}), estimand="proportion", method="wilson", margin=0.008)
    for name, d, n_max in (("two proportions, newcombe", two, 20_000), ("one proportion, wilson", one, 20_000)):
        res = fn(d, n_max=n_max)
        ts = [timed(lambda: fn(d, n_max=n_max))[1] for _ in range(repeat)]
        tc = [timed(lambda: engine.check(d, res.n, replicates=1))[1] for _ in range(repeat)]
        print(f"exact:    {name}: n = {res.n} (n_first {res.n_first}, {res.criterion}), search {min(ts):.2f} s CPU, "
              f"one exact check at n {min(tc):.3f} s CPU ({min(ts) / min(tc):.0f}x)")


def timed(fn):
    w0, c0 = time.perf_counter(), time.process_time()
    out = fn()
    return time.perf_counter() - w0, time.process_time() - c0, out


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--quick", action="store_true", help="one repeat (noisier)")
    ap.add_argument("--replicates", type=int, default=10_000, help="replicates (default 10000)")
    ap.add_argument("--seed", type=int, default=20261201, help="root seed of the search (default 20261201)")
    ap.add_argument("--old", default=OLD_COMMIT, help=f"commit holding the previous search (default {OLD_COMMIT})")
    args = ap.parse_args(argv)
    repeat = 1 if args.quick else 5
    R = args.replicates
    d = Design(model=make_model({"model": "lognormal", "mean": 1.0, "cv": 1.5}), method="t", margin=0.14)

    # warm-up: imports and first-call costs are not the search's
    engine.check(d, 50, replicates=200, rng=0)

    def search():
        return find_n(d, assurance=0.5, coverage_tolerance=0.03, replicates=R, rng=args.seed)

    old = old_find_n(args.old)

    def old_search():
        return old(d, assurance=0.5, coverage_tolerance=0.03, replicates=R, rng=args.seed)

    res = search()
    n = res.n
    res_old = old_search() if old is not None else None
    # interleaved, best of each: other processes on the machine slow all alike
    ws, cs, wc, cc, co = [], [], [], [], []
    for _ in range(repeat):
        w, c, _ = timed(search)
        ws.append(w), cs.append(c)
        w, c, _ = timed(lambda: engine.check(d, n, replicates=R, rng=7))
        wc.append(w), cc.append(c)
        if old is not None:
            co.append(timed(old_search)[1])
    t_search, t_check = min(cs), min(cc)
    ratio = t_search / t_check
    ok = ratio <= TARGET
    ref = engine.check(d, 300, replicates=R, rng=8)
    print(f"scenario: lognormal(mean 1, CV 1.5), t interval, 95 %, margin 0.14, assurance 0.5, tolerance 0.03, R = {R}")
    print(f"search:   n = {n}, n_range = {res.n_range}, n_formula = {res.n_formula}, stop = {res.stop_reason!r}, "
          f"replicates used = {res.replicates_used}")
    print(f"          coverage {res.coverage:.4f} +/- {res.coverage_mcse:.4f}, assurance {res.assurance:.4f} +/- {res.assurance_mcse:.4f}")
    print(f"reference: coverage at n = 300 is {ref.coverage:.4f} +/- {ref.coverage_mcse:.4f} (default target 0.945)")
    print(f"time:     search {t_search:.3f} s CPU ({min(ws):.3f} s wall), "
          f"one check at n = {n} {t_check:.3f} s CPU ({min(wc):.3f} s wall)")
    print(f"          decision {res.decision}, criterion {res.criterion}, n_first {res.n_first}")
    if res_old is not None:
        print(f"old:      n = {res_old.n}, n_range = {res_old.n_range}, {min(co):.3f} s CPU; "
              f"stricter / old = {t_search / min(co):.2f}x")
    print(f"ratio:    {ratio:.2f}x one check (target <= {TARGET:g}x)  {'PASS' if ok else 'FAIL'}")
    flat_figures(old, repeat)
    exact_figures(repeat)
    return 0 if ok else 1


if __name__ == "__main__":
    sys.exit(main())
