"""The window criterion: the smallest n whose targets hold over a window of n above it.

Coverage of intervals for count data oscillates in n (Brown, Cai & DasGupta
2001, Figures 1-5): the targets can hold at one n, fail at n + 1 and hold
again. "The smallest n from which the targets hold at every larger n up to
the search ceiling" then follows the ceiling, not the data. The window
criterion asks instead for the smallest n such that the targets hold at
*every* n in ``[n, top(n)]`` with ``top(n) = ceil(window * n)`` (window >=
1; window = 1 is the first n that meets the targets). Its answer depends
only on the targets and the data model, never on ``n_max``, as long as
``n_max >= top(n)``.

The scan is exact and skips where it can prove the answer cannot be: if the
targets fail at g, no n with ``n <= g <= top(n)`` can be the answer. Probes
at ``g_0 = start`` and ``g_{i+1} = top(g_i + 1)`` (geometric steps of about
``window``) therefore exclude every n up to the last failing probe, so a scan
costs a few dozen probes plus one dense pass over the answer's own window.

Only a ``passes(ns) -> bool array`` callback is needed; no engine import.

References
----------
.. [1] Brown, L. D., Cai, T. T. & DasGupta, A. (2001). Interval estimation for
   a binomial proportion. Statistical Science 16, 101-133 (oscillation of
   coverage in n; local and average coverage).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Callable, Sequence

import numpy as np

__all__ = ["DEFAULT_WINDOW", "WINDOW_MAX", "window_top", "WindowScan", "ScanOutcome"]

#: default window factor: the targets must hold for every n up to 1.25 n
DEFAULT_WINDOW = 1.25
#: largest window factor accepted
WINDOW_MAX = 4.0
#: probes evaluated per batch while skipping
PROBE_BATCH = 6
#: first chunk of the dense pass (doubles after each chunk that passes)
FIRST_CHUNK = 16
#: with no answer at all, n_first is looked for densely only over ranges shorter than this
FIRST_SCAN_NONE = 2000

Passes = Callable[[Sequence[int]], np.ndarray]


def window_top(n: int, window: float) -> int:
    """``ceil(window * n)``, robust to floating-point rounding (1.25 * 4 is 5)."""
    return max(int(n), int(math.ceil(round(window * n, 9))))


@dataclass(frozen=True)
class ScanOutcome:
    """What a window scan found.

    ``n`` is the answer (None if none). ``status`` is ``"found"``,
    ``"window beyond n_max"`` (the targets hold at every n from ``candidate``
    to ``n_max``, but ``top(candidate)`` lies above ``n_max``) or ``"none"``
    (no n in ``[n_min, n_max]`` can be the answer). ``n_first`` is the first
    n meeting the targets (None if none in range, or, with status "none", if
    the range spans :data:`FIRST_SCAN_NONE` n or more). ``evaluated`` counts the n
    evaluated.
    """

    n: int | None
    status: str
    candidate: int | None
    n_first: int | None
    evaluated: int


class WindowScan:
    """Exact scan for the window criterion over ``[lo_n, hi_n]``; ``passes`` is cached."""

    def __init__(self, passes: Passes, lo_n: int, hi_n: int, window: float, cap: int | None = None) -> None:
        self.passes, self.lo_n, self.hi_n, self.window = passes, int(lo_n), int(hi_n), float(window)
        #: largest n that exists (a finite population's size): windows stop there
        self.cap = cap
        self.cache: dict[int, bool] = {}

    def ok(self, ns: Sequence[int]) -> list[bool]:
        todo = [int(n) for n in ns if int(n) not in self.cache]
        if todo:
            for n, o in zip(todo, np.asarray(self.passes(todo), dtype=bool)):
                self.cache[n] = bool(o)
        return [self.cache[int(n)] for n in ns]

    def top(self, n: int) -> int:
        t = window_top(n, self.window)
        return t if self.cap is None else min(t, int(self.cap))

    def lower_bound(self, start: int) -> int | None:
        """Smallest n >= start not excluded by failing probes; None if all of [start, hi_n] is excluded."""
        prev, g = None, start
        while g <= self.hi_n:
            batch = []
            while g <= self.hi_n and len(batch) < PROBE_BATCH:
                batch.append(g)
                g = self.hi_n + 1 if g == self.hi_n else min(self.hi_n, self.top(g + 1))
            for b, o in zip(batch, self.ok(batch)):
                if o:
                    return start if prev is None else prev + 1
                prev = b
        return None

    def first_pass(self, upto: int) -> int | None:
        """First n in [lo_n, upto] meeting the targets (dense, in growing chunks)."""
        n, chunk = self.lo_n, FIRST_CHUNK
        while n <= upto:
            ns = list(range(n, min(upto, n + chunk - 1) + 1))
            for k, o in zip(ns, self.ok(ns)):
                if o:
                    return k
            n, chunk = ns[-1] + 1, chunk * 2
        return None

    def run(self) -> ScanOutcome:
        cand = self.lower_bound(self.lo_n)
        n_found, status = None, "none"
        while cand is not None:
            n, chunk = cand, FIRST_CHUNK
            restart = None
            while True:
                end = min(self.top(cand), self.hi_n, n + chunk - 1)
                ns = list(range(n, end + 1))
                bad = [k for k, o in zip(ns, self.ok(ns)) if not o]
                if bad:
                    restart = bad[-1] + 1
                    break
                if end == self.top(cand):
                    n_found, status = cand, "found"
                    break
                if end == self.hi_n:
                    status = "window beyond n_max"
                    break
                n, chunk = end + 1, chunk * 2
            if restart is None:
                break
            cand = self.lower_bound(restart) if restart <= self.hi_n else None
        if n_found is not None or cand is not None:
            n_first = self.first_pass(n_found if n_found is not None else cand)
        elif self.hi_n - self.lo_n < FIRST_SCAN_NONE:
            n_first = self.first_pass(self.hi_n)
        else:
            # nothing qualifies: a dense pass over a long range only to name a first n is not worth it
            n_first = None
        return ScanOutcome(n=n_found, status=status, candidate=cand, n_first=n_first, evaluated=len(self.cache))
