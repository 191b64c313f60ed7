"""Threads inside one computation: same numbers for any thread count; the setting."""

from __future__ import annotations

import os

import numpy as np
import pytest

from simcheck import engine
from simcheck.design import Design
from simcheck.errors import InputError
from simcheck.models import make_model
from simcheck.threads import available_cores, ordered_map, thread_count

LOGNORMAL = {"model": "lognormal", "mean": 6.0, "cv": 1.2}
NORMAL = {"model": "normal", "mean": 10.0, "sd": 3.0}


def _same(a, b):
    da, db = a.to_dict(), b.to_dict()
    assert da == db
    if a.margin_values is not None:
        np.testing.assert_array_equal(a.margin_values, b.margin_values)


CASES = [
    # (label, design keywords, n, path): fused full path, summary methods, counts, two samples
    ("t lognormal full", dict(model=LOGNORMAL, method="t"), 50, "full"),
    ("johnson-t", dict(model=LOGNORMAL, method="johnson-t"), 23, "full"),
    ("welch sufficient", dict(model=NORMAL, model_b={"model": "normal", "mean": 9.0, "sd": 5.0},
                              estimand="mean-diff", method="welch"), 40, "sufficient"),
    ("wilson event", dict(model={"model": "poisson", "mean": 1.5}, estimand="proportion", method="wilson",
                          event_above=2.0), 60, "full"),
    ("cox log", dict(model=LOGNORMAL, method="cox"), 30, "full"),
    ("bootstrap", dict(model=LOGNORMAL, method="bootstrap-percentile", resamples=199), 15, "full"),
]


def _design(kw):
    kw = dict(kw)
    model = make_model(kw.pop("model"))
    if "event_above" in kw:
        from simcheck.models.composite import EventModel

        model = EventModel(model, above=kw.pop("event_above"))
    mb = kw.pop("model_b", None)
    if mb is not None:
        kw["model_b"] = make_model(mb)
    return Design(model=model, margin=1.0, **kw)


@pytest.mark.parametrize("label,kw,n,path", CASES, ids=[c[0] for c in CASES])
def test_check_identical_for_1_2_3_threads(label, kw, n, path):
    # Blocks of replicates are independent streams with fixed boundaries and
    # are accumulated in block order, so the thread count cannot change a bit.
    d = _design(kw)
    R = 3_000 if "bootstrap" in label else 40_000
    runs = [engine.check(d, n, replicates=R, rng=11, path=path, threads=t) for t in (1, 2, 3)]
    for other in runs[1:]:
        _same(runs[0], other)


def test_curve_identical_for_1_2_3_threads():
    d = _design(dict(model=LOGNORMAL, method="t"))
    runs = [engine.curve(d, range(5, 120, 3), replicates=20_000, rng=12, threads=t) for t in (1, 2, 3)]
    for other in runs[1:]:
        for a, b in zip(runs[0].rows, other.rows):
            _same(a, b)


def test_environment_governs_the_engine(monkeypatch):
    d = _design(dict(model=LOGNORMAL, method="t"))
    monkeypatch.setenv("SIMCHECK_THREADS", "1")
    one = engine.check(d, 30, replicates=30_000, rng=13)
    monkeypatch.setenv("SIMCHECK_THREADS", "3")
    three = engine.check(d, 30, replicates=30_000, rng=13)
    _same(one, three)
    monkeypatch.setenv("SIMCHECK_THREADS", "lots")
    with pytest.raises(InputError, match="SIMCHECK_THREADS"):
        engine.check(d, 30, replicates=1_000, rng=13)


def test_thread_count_rules(monkeypatch):
    monkeypatch.delenv("SIMCHECK_THREADS", raising=False)
    assert thread_count() == available_cores()
    assert 1 <= available_cores() <= (os.cpu_count() or 1)
    if hasattr(os, "sched_getaffinity"):
        assert available_cores() <= len(os.sched_getaffinity(0))
    monkeypatch.setenv("SIMCHECK_THREADS", " 2 ")
    assert thread_count() == 2
    assert thread_count(5) == 5  # the argument wins over the environment
    for bad in (0, -1, True, 2.0, 10**6):
        with pytest.raises(InputError, match="threads"):
            thread_count(bad)


def test_ordered_map_keeps_order_and_bounds_work():
    import threading
    import time

    live, peak, lock = [0], [0], threading.Lock()

    def work(i):
        with lock:
            live[0] += 1
            peak[0] = max(peak[0], live[0])
        time.sleep(0.001 * (i % 3))
        with lock:
            live[0] -= 1
        return i * i

    assert list(ordered_map(work, range(50), 3)) == [i * i for i in range(50)]
    assert peak[0] <= 3
    assert list(ordered_map(work, range(7), 1)) == [i * i for i in range(7)]


# --- clustered samples and finite populations on threads ---------------------
def _cluster_designs():
    from simcheck.design import ClusterSpec, PopulationSpec

    gamma = make_model({"model": "gamma", "mean": 4.0, "cv": 0.8})
    normal = make_model(NORMAL)
    return [
        ("cluster-t nested, varying sizes", Design(model=normal, method="cluster-t", margin=1.0,
                                                   clusters=ClusterSpec(icc=0.05, size_mean=8, size_cv=0.5)),
         range(4, 40, 3), "nested"),
        ("cluster-t full", Design(model=gamma, method="cluster-t", margin=1.0, clusters=ClusterSpec(icc=0.05, size=6)),
         [12], "full"),
        ("wilson on clustered 0/1", Design(model=make_model({"model": "bernoulli", "p": 0.3}), estimand="proportion",
                                           method="wilson", margin=0.1,
                                           clusters=ClusterSpec(icc=0.1, size_mean=5, size_cv=0.3)),
         range(3, 30, 3), "auto"),
        ("finite clusters", Design(model=normal, method="cluster-t", margin=1.0,
                                   clusters=ClusterSpec(icc=0.05, size=6, count=60)), range(4, 61, 4), "auto"),
        ("finite clusters, total", Design(model=gamma, estimand="total", method="cluster-t", margin=400.0,
                                          clusters=ClusterSpec(icc=0.2, size=5, count=40)), range(4, 41, 6), "auto"),
        ("population t", Design(model=gamma, method="t", margin=0.5, population=PopulationSpec(size=500)),
         range(5, 300, 15), "auto"),
        ("population cox, no fpc", Design(model=make_model(LOGNORMAL), method="cox", margin=1.0,
                                          population=PopulationSpec(size=800, fpc=False)), [40], "full"),
        ("population bootstrap", Design(model=make_model(LOGNORMAL), method="bootstrap-percentile", resamples=99,
                                        margin=1.0, population=PopulationSpec(size=300, fpc=False)), [12], "full"),
    ]


@pytest.mark.parametrize("label", [c[0] for c in _cluster_designs()])
def test_clustered_and_population_identical_for_1_2_3_threads(label):
    # the clustered and population paths run their random blocks on threads too;
    # every block is reduced to counts and sums where it was drawn and merged in
    # block order, so the thread count cannot change a bit
    _, d, ns, path = next(c for c in _cluster_designs() if c[0] == label)
    R = 1_500 if "bootstrap" in label else 9_000
    runs = [engine.curve(d, ns, replicates=R, rng=21, path=path, threads=t) for t in (1, 2, 3)]
    for other in runs[1:]:
        for a, b in zip(runs[0].rows, other.rows):
            _same(a, b)


# --- measures reduced where they are computed ---------------------------------
def test_reducing_in_slabs_gives_the_bits_of_one_reduction():
    # A unit reduced slab by slab (``more=True``) must give exactly the float sums
    # of reducing it at once: numpy sums the rows of a C-ordered array one after
    # another along axis 0, and the slabs continue that order.
    from simcheck.engine.measures import Accumulator

    g = np.random.default_rng(5)
    b, k = 203, 7
    centre = g.normal(0.0, 1.0, (b, k))
    half = g.gamma(2.0, 0.5, (b, k)) * 10.0 ** g.uniform(-3, 3, (b, k))
    lo, hi = centre - half, centre + half
    lo[17, 3] = np.nan  # an interval that could not be computed
    half_z = half.copy()
    half_z[40, 2] = 0.0  # a zero-width interval
    for symmetric in (True, False):
        whole = Accumulator(k, b, margin=1.5)
        slabs = Accumulator(k, b, margin=1.5)
        red = slabs.reducer(0.0)
        if symmetric:
            whole.add_symmetric(centre, half_z, 0.0)
            for i in range(0, b, 29):
                red.add_symmetric(centre[i:i + 29], half_z[i:i + 29], more=i > 0)
        else:
            whole.add(lo, hi, 0.0)
            for i in range(0, b, 29):
                red.add(lo[i:i + 29], hi[i:i + 29], more=i > 0)
        slabs.merge(red.partial())
        for acc in (whole, slabs):
            acc.finish()
        assert len(whole.block_sums) == len(slabs.block_sums) == 1
        for name in ("hw_sum", "hw_squares", "low", "high", "nan", "degenerate", "assured", "unbounded", "covered"):
            np.testing.assert_array_equal(getattr(whole, name), getattr(slabs, name), err_msg=name)
        np.testing.assert_array_equal(whole.hw, slabs.hw)


def test_slab_size_changes_no_number(monkeypatch):
    # slabs are a cache device only: whole units give the same bits
    from simcheck.engine import simple

    d = _design(dict(model=LOGNORMAL, method="t"))
    ns = range(2, 90)
    monkeypatch.setattr(simple, "SLAB_VALUES", 1 << 12)  # 46 rows: about 30 slabs per unit
    ref = engine.curve(d, ns, replicates=4_000, rng=22, threads=1)
    monkeypatch.setattr(simple, "SLAB_VALUES", simple.UNIT_VALUES * 4)  # whole units
    other = engine.curve(d, ns, replicates=4_000, rng=22, threads=2)
    for a, b in zip(ref.rows, other.rows):
        _same(a, b)


def test_t_quantiles_of_a_curve_are_cached_but_exact():
    # The t interval along a curve asks for the t quantile of every n once per
    # slab; the cached row must be scipy's own quantiles (reference: scipy.stats.t.ppf
    # called here, element by element), on the first call and on later ones.
    from scipy import stats

    from simcheck.intervals import Summary
    from simcheck.intervals.mean import t_centre_half

    n = np.arange(2, 60)
    var = np.linspace(0.5, 3.0, n.size)
    for _ in range(2):  # the second call is served from the cache
        _, half = t_centre_half(Summary(n=n, mean=np.zeros(n.size), var=var.copy()), 0.9)
        ref = np.array([stats.t.ppf(0.95, k - 1) * np.sqrt(v / k) for k, v in zip(n, var)])
        np.testing.assert_allclose(half, ref, rtol=1e-13)
