"""Clusters drawn without replacement from a finite number of clusters (clusters.count).

The engine's simulated coverage of cluster-t with the first-stage correction
sqrt(1 - k/M) is checked against the exact coverage over *every* sample of k of
the M clusters of the same population, computed here with our own ratio
estimator and linearisation variance (Cochran 1977, Sampling Techniques, ch. 6,
the ratio estimator's variance with the factor 1 - k/M; from memory), and the
closed form against a brute-force search over k written in the test.
"""

from __future__ import annotations

import itertools
import math

import numpy as np
import pytest
from scipy import stats

from simcheck import engine
from simcheck import rng as rngmod
from simcheck.cli import main
from simcheck.design import ClusterSpec, Design, PopulationSpec
from simcheck.engine.clustered import cluster_population_for
from simcheck.errors import InputError
from simcheck.models import make_model
from simcheck.scenario import scenario_from_dict


def _exact_over_all_samples(sizes, totals, k, conf, clip):
    """Coverage and mean half-width of cluster-t with FPC over all C(M, k) samples."""
    M = sizes.size
    truth = totals.sum() / sizes.sum()
    t = stats.t.ppf(0.5 + conf / 2, k - 1)
    cover, hws = [], []
    for s in itertools.combinations(range(M), k):
        y, m = totals[list(s)], sizes[list(s)]
        r = y.sum() / m.sum()
        var = (1 - k / M) * np.sum((y - r * m) ** 2) / (k - 1) / (k * m.mean() ** 2)
        lo, hi = r - t * math.sqrt(var), r + t * math.sqrt(var)
        if clip:
            lo, hi = max(lo, 0.0), min(hi, 1.0)
        cover.append(lo <= truth <= hi)
        hws.append((hi - lo) / 2)
    return float(np.mean(cover)), float(np.mean(hws)), truth


@pytest.mark.parametrize("data,clusters,estimand,k", [
    ({"model": "gamma", "mean": 30.0, "cv": 0.8}, dict(icc=0.1, size_mean=8.0, size_cv=0.5), "mean", 4),
    ({"model": "normal", "mean": 10.0, "sd": 3.0}, dict(icc=0.2, size=6), "mean", 6),
    ({"model": "bernoulli", "p": 0.3}, dict(icc=0.1, size=12), "proportion", 5),
])
def test_simulated_coverage_matches_enumeration_of_every_sample(data, clusters, estimand, k):
    M, R, seed, conf = 11, 20_000, 17, 0.95
    d = Design(model=make_model(data), estimand=estimand, method="cluster-t", margin=1.0 if estimand == "mean" else 0.1,
               clusters=ClusterSpec(count=M, **clusters))
    sizes, totals, mean = cluster_population_for(d, rngmod.root_sequence(seed)[0])
    cov, hw, truth = _exact_over_all_samples(sizes, totals, k, conf, clip=estimand == "proportion")
    r = engine.check(d, k, replicates=R, rng=seed)
    assert r.true_value == pytest.approx(truth, rel=1e-12) and mean == pytest.approx(truth, rel=1e-12)
    se = math.sqrt(cov * (1 - cov) / R)
    assert abs(r.coverage - cov) <= 4 * se + 1e-12, (r.coverage, cov)
    assert abs(r.margin_mean - hw) <= 4 * r.margin_mean_mcse + 1e-12, (r.margin_mean, hw)


def test_census_of_clusters_is_exact():
    d = Design(model=make_model({"model": "normal", "mean": 5.0, "sd": 2.0}), estimand="mean", method="cluster-t",
               margin=0.5, clusters=ClusterSpec(icc=0.1, size=5, count=30))
    r = engine.check(d, 30, replicates=500, rng=2)
    assert r.coverage == 1.0 and r.margin_mean == 0.0 and r.assurance == 1.0


def _smallest_k(M, sd, B, deff, m, conf=0.95):
    """Brute force: the smallest k with z sqrt((1 - k/M) sd^2 deff / (k m)) <= B."""
    z = stats.norm.isf((1 - conf) / 2)
    return next(k for k in range(1, M + 1) if z * math.sqrt((1 - k / M) * sd * sd * deff / (k * m)) <= B)


@pytest.mark.parametrize("M,sd,B,icc,m", [(60, 12.0, 2.0, 0.05, 20), (400, 5.0, 0.4, 0.1, 8), (25, 3.0, 1.0, 0.3, 4)])
def test_formula_cluster_count_matches_brute_force(capsys, M, sd, B, icc, m):
    import json

    code = main(["formula", "--estimand", "mean", "--sd", str(sd), "--margin", str(B), "--icc", str(icc),
                 "--cluster-size", str(m), "--cluster-count", str(M), "--json"])
    obj = json.loads(capsys.readouterr().out)
    assert code == 0
    assert obj["clusters"] == _smallest_k(M, sd, B, 1 + (m - 1) * icc, m)  # Kish's design effect


def test_refusals_are_one_line(capsys, tmp_path):
    m = make_model({"model": "normal", "mean": 5.0, "sd": 2.0})
    with pytest.raises(InputError, match="clusters.count"):
        engine.check(Design(model=m, method="t", margin=1.0, clusters=ClusterSpec(icc=0.1, size=5, count=30)), 10,
                     replicates=200, rng=1)
    with pytest.raises(InputError, match="clusters.count"):
        engine.check(Design(model=m, method="cluster-t", margin=1.0, clusters=ClusterSpec(icc=0.1, size=5, count=30)), 31,
                     replicates=200, rng=1)
    base = {"target": {"estimand": "mean", "margin": 1.0}, "data": {"model": "normal", "mean": 5.0, "sd": 2.0},
            "method": {"interval": "cluster-t"}}
    for clusters, sim, field in (({"icc": 0.1, "size": 5, "count": 2.5}, {}, "clusters.count"),
                                 ({"icc": 0.1, "size": 5, "count": 30}, {"n_max": 40}, "simulation.n_max")):
        with pytest.raises(InputError) as e:
            scenario_from_dict({**base, "clusters": clusters, "simulation": sim})
        assert [p.field for p in e.value.problems] == [field]
    s = scenario_from_dict({**base, "clusters": {"icc": 0.1, "size": 5, "count": 30}})
    assert s.n_max == 30
    with pytest.raises(InputError) as e:
        scenario_from_dict({**base, "clusters": {"icc": 0.1, "size": 5}, "population": {"size": 500}})
    assert "clusters.count" in str(e.value)
    for args, field in ((["--population-size", "1000", "--icc", "0.1", "--cluster-size", "5"], "--population-size"),
                        (["--cluster-count", "40"], "--cluster-count")):
        code = main(["formula", "--estimand", "mean", "--sd", "3", "--margin", "1", *args])
        err = capsys.readouterr().err.strip().splitlines()
        assert code == 2 and len(err) == 1 and field in err[0], err
