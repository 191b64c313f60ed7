"""Threads for one computation: how many, and an ordered map over independent work items.

One setting governs every path: an explicit ``threads`` argument, else the
environment variable ``SIMCHECK_THREADS``, else the cores available to this
process (CPU affinity and cgroup CPU quota respected). Work items are
independent random blocks with fixed boundaries, and their results are consumed
in item order, so the numbers never depend on the thread count.
"""

from __future__ import annotations

import math
import os
from collections import deque
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path
from typing import Callable, Iterable, Iterator, TypeVar

from simcheck.errors import InputError

T = TypeVar("T")
R = TypeVar("R")

#: the environment variable that sets the thread count for every path
ENV = "SIMCHECK_THREADS"
#: a hard ceiling on threads (a typo such as 10**6 must not start a million threads)
MAX_THREADS = 256


def _cgroup_quota() -> float | None:
    """CPUs allowed by a cgroup CPU quota (v2 ``cpu.max``, v1 ``cfs_quota_us``), or None."""
    try:
        text = Path("/sys/fs/cgroup/cpu.max").read_text().split()
        if text and text[0] != "max":
            return int(text[0]) / int(text[1])
        return None
    except (OSError, ValueError, IndexError):
        pass
    try:
        quota = int(Path("/sys/fs/cgroup/cpu/cpu.cfs_quota_us").read_text())
        period = int(Path("/sys/fs/cgroup/cpu/cpu.cfs_period_us").read_text())
        return quota / period if quota > 0 and period > 0 else None
    except (OSError, ValueError):
        return None


def available_cores() -> int:
    """Cores this process may use: CPU affinity, capped by a cgroup CPU quota."""
    try:
        cores = len(os.sched_getaffinity(0))
    except (AttributeError, OSError):
        cores = os.cpu_count() or 1
    quota = _cgroup_quota()
    if quota is not None:
        cores = min(cores, max(1, math.ceil(quota)))
    return max(1, cores)


def thread_count(threads: int | None = None, *, field: str = "threads") -> int:
    """Threads to use: ``threads`` if given, else ``SIMCHECK_THREADS``, else :func:`available_cores`.

    Raises
    ------
    InputError
        ``threads`` or ``SIMCHECK_THREADS`` is not a whole number in [1, MAX_THREADS];
        the message names the argument or the variable.
    """
    if threads is not None:
        if isinstance(threads, bool) or not isinstance(threads, int) or not 1 <= threads <= MAX_THREADS:
            raise InputError(field, f"must be a whole number in [1, {MAX_THREADS}], got {threads!r}")
        return threads
    raw = os.environ.get(ENV)
    if raw is None or not raw.strip():
        return available_cores()
    try:
        value = int(raw.strip())
    except ValueError:
        value = 0
    if not 1 <= value <= MAX_THREADS:
        raise InputError(ENV, f"expected a whole number of threads in [1, {MAX_THREADS}], got {raw!r}")
    return value


def ordered_map(func: Callable[[T], R], items: Iterable[T], threads: int, *, ahead: int = 2) -> Iterator[R]:
    """``map(func, items)`` on ``threads`` threads, yielding results in item order.

    At most ``threads * ahead`` items are in flight, so memory stays bounded
    however many items there are. With one thread it runs inline (no pool).
    numpy's generators and ufuncs release the GIL, which is what makes
    threads pay here.
    """
    if threads <= 1:
        for item in items:
            yield func(item)
        return
    window = max(1, threads * ahead)
    with ThreadPoolExecutor(max_workers=threads, thread_name_prefix="simcheck") as pool:
        pending: deque = deque()
        try:
            for item in items:
                pending.append(pool.submit(func, item))
                if len(pending) >= window:
                    yield pending.popleft().result()
            while pending:
                yield pending.popleft().result()
        finally:
            for f in pending:
                f.cancel()
