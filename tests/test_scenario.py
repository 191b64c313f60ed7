"""Scenario files: loading, defaults, overrides, the resolved dict, and the bad-file corpus.

Each file in tests/bad_scenarios/ starts with a comment saying what is wrong,
then ``# field: KEY[, KEY...]`` (the dotted keys the error must name; ``-``
for a problem with the file as a whole) and optionally ``# says: TEXT`` (a
phrase the message must contain).
"""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
import pytest

from simcheck.errors import InputError
from simcheck.scenario import (
    DEFAULT_N_MAX,
    KNOWN_KEYS,
    Scenario,
    load_scenario,
    scenario_from_dict,
    set_dotted,
)

from fixtures import minimal

ROOT = Path(__file__).resolve().parents[1]

def _is_sweep(path: Path) -> bool:
    import tomllib

    return "base" in tomllib.loads(path.read_text())


# scenarios/ also holds sweep files (a base scenario and [vary]); those are tested with sweeps
EXAMPLES = sorted(p for p in (ROOT / "scenarios").glob("*.toml") if not _is_sweep(p))
SWEEPS = sorted(p for p in (ROOT / "scenarios").glob("*.toml") if _is_sweep(p))
BAD = sorted((ROOT / "tests" / "bad_scenarios").glob("*.toml"))


def expectations(path: Path) -> tuple[str, list[str], list[str]]:
    """(what is wrong, fields, phrases) from a corpus file's header comments."""
    lines = path.read_bytes().decode("latin-1").splitlines()
    why = lines[0]
    fields = [ln.split(":", 1)[1].strip() for ln in lines if ln.startswith("# field:")]
    says = [ln.split(":", 1)[1].strip() for ln in lines if ln.startswith("# says:")]
    assert why.startswith("# ") and fields, f"{path.name}: header comments missing"
    keys = [] if fields[0] == "-" else [k.strip() for k in fields[0].split(",")]
    return why, keys, says


# --- example files -------------------------------------------------------------
def test_there_are_examples():
    assert len(EXAMPLES) >= 5


@pytest.mark.parametrize("path", EXAMPLES, ids=lambda p: p.name)
def test_example_loads_and_round_trips(path):
    s = load_scenario(path)
    assert isinstance(s, Scenario)
    assert "(invented example)" in s.title
    assert s.design.margin > 0 and s.methods[0] == s.design.method
    d = s.to_dict()
    text = json.dumps(d, sort_keys=True, allow_nan=False)  # JSON-safe
    # the resolved dict is itself a valid scenario that resolves to itself
    again = scenario_from_dict(json.loads(text), source=str(path), base_dir=path.parent)
    assert again.to_dict() == d
    assert again.design.true_value == pytest.approx(s.design.true_value)


def test_every_key_of_the_examples_is_documented():
    import tomllib

    for path in EXAMPLES:
        table = tomllib.loads(path.read_text())
        for t, sub in table.items():
            if t == "data":
                continue
            if isinstance(sub, dict):
                for k in sub:
                    assert f"{t}.{k}" in KNOWN_KEYS, (path.name, t, k)
            else:
                assert t in KNOWN_KEYS


# --- the bad corpus: direct --------------------------------------------------------
def test_corpus_is_large_enough():
    assert len(BAD) >= 30


@pytest.mark.parametrize("path", BAD, ids=lambda p: p.name)
def test_bad_file_raises_naming_the_field(path):
    _, keys, says = expectations(path)
    with pytest.raises(InputError) as info:
        load_scenario(str(path))
    err = info.value
    line = err.one_line()
    assert "\n" not in line
    assert line.startswith(str(path) + ": ")
    fields = [p.field for p in err.problems]
    for k in keys:
        assert k in fields, f"{path.name}: expected a problem with {k}, got {line}"
    for phrase in says:
        assert phrase in line, f"{path.name}: expected {phrase!r} in {line}"


def test_message_names_file_key_expected_and_found():
    path = ROOT / "tests" / "bad_scenarios" / "margin_negative.toml"
    with pytest.raises(InputError) as info:
        load_scenario(str(path))
    assert info.value.one_line() == f"{path}: target.margin: must be > 0, got -1"


def test_all_problems_reported_at_once():
    path = ROOT / "tests" / "bad_scenarios" / "several_problems.toml"
    with pytest.raises(InputError) as info:
        load_scenario(path)
    fields = {p.field for p in info.value.problems}
    assert {"target.margin", "simulation.replicates", "method.intervals"} <= fields


def test_unknown_key_suggests_the_nearest():
    with pytest.raises(InputError) as info:
        scenario_from_dict(minimal(target__confidance=0.9), source="costs.toml")
    assert info.value.one_line() == "costs.toml: target.confidance: unknown key; did you mean 'target.confidence'?"


def test_key_under_the_wrong_table_points_to_its_home():
    with pytest.raises(InputError) as info:
        scenario_from_dict(minimal(target__replicates=500))
    assert "did you mean 'simulation.replicates'?" in str(info.value)


def test_syntax_error_gives_line_and_column(tmp_path):
    p = tmp_path / "broken.toml"
    p.write_text('title = "x"\n[target]\nmargin = = 1\n')
    with pytest.raises(InputError) as info:
        load_scenario(p)
    msg = info.value.one_line()
    assert msg.startswith(f"{p}: TOML syntax error:") and "line 3" in msg and "column" in msg


def test_missing_file_and_folder(tmp_path):
    with pytest.raises(InputError, match="no such file"):
        load_scenario(tmp_path / "absent.toml")
    with pytest.raises(InputError, match="is a folder"):
        load_scenario(tmp_path)


def test_model_errors_are_prefixed_by_their_table():
    table = minimal()
    table["target"]["estimand"] = "mean-diff"
    table["data"] = {"a": {"model": "normal", "mean": 1.0, "sd": 1.0}, "b": {"model": "normal", "mean": 1.0, "sd": -1.0}}
    table["method"]["interval"] = "welch"
    with pytest.raises(InputError) as info:
        scenario_from_dict(table)
    assert [p.field for p in info.value.problems] == ["data.b.sd"]


def test_proportion_of_non_binary_data_is_refused_on_group_a():
    table = minimal(target__estimand="proportion-diff", method__interval="newcombe")
    table["target"]["margin"] = 0.1
    table["data"] = {"a": {"model": "poisson", "mean": 2.0}, "b": {"model": "bernoulli", "p": 0.3}}
    with pytest.raises(InputError) as info:
        scenario_from_dict(table)
    assert [p.field for p in info.value.problems] == ["data.a"]


# --- defaults, overrides, the resolved dict -------------------------------------------
def test_defaults():
    s = scenario_from_dict(minimal())
    d = s.design
    assert (d.confidence, d.ratio, d.resamples) == (0.95, 1.0, 1999)
    assert (s.assurance, s.coverage_tolerance, s.replicates) == (0.5, 0.005, 10_000)
    assert (s.n_min, s.n_max, s.seed, s.budget, s.path) == (2, DEFAULT_N_MAX, None, None, "auto")
    assert s.title == "untitled scenario" and s.source is None
    # the title defaults to the file's name
    assert scenario_from_dict(minimal(), source="dir/plan.toml").title == "plan"


def test_value_equal_to_default_resolves_to_the_same_dict():
    a = scenario_from_dict(minimal()).to_dict()
    b = scenario_from_dict(minimal(target__confidence=0.95, simulation__replicates=10000, method__resamples=1999)).to_dict()
    assert a == b
    assert "seed" not in a["simulation"] and "budget" not in a["simulation"]
    assert json.dumps(a, sort_keys=True) == json.dumps(scenario_from_dict(minimal()).to_dict(), sort_keys=True)


def test_overrides_apply_before_validation():
    path = ROOT / "scenarios" / "turnaround.toml"
    s = load_scenario(path, {"simulation.replicates": 1000, "data.cv": 2.0})
    assert s.replicates == 1000
    assert s.design.model.sd == pytest.approx(12.0)  # sd = cv * mean = 2 * 6
    assert s.table["data"]["cv"] == 2.0 and s.table["simulation"]["replicates"] == 1000
    assert load_scenario(path).design.model.sd == pytest.approx(7.2)
    with pytest.raises(InputError) as info:
        load_scenario(path, {"simulation.replicates": 5})
    assert info.value.one_line().startswith(f"{path}: simulation.replicates:")


def test_numpy_scalars_from_sweeps_are_accepted_and_json_safe():
    s = scenario_from_dict(minimal(data__sd=np.float64(2.0), simulation__replicates=np.int64(500), simulation__seed=np.int64(3)))
    assert s.replicates == 500 and s.seed == 3
    json.dumps(s.to_dict(), allow_nan=False)


def test_set_dotted_copies():
    t = {"data": {"model": "lognormal", "cv": 1.0}, "method": {"interval": ["t"]}}
    u = set_dotted(t, "data.cv", 2.0)
    assert t["data"]["cv"] == 1.0 and u["data"]["cv"] == 2.0
    u["method"]["interval"].append("z")
    assert t["method"]["interval"] == ["t"]  # deep copy
    assert set_dotted(t, "simulation.seed", 4)["simulation"] == {"seed": 4}
    assert "cv" not in set_dotted(t, "data.cv", None)["data"]
    with pytest.raises(InputError, match="not a table"):
        set_dotted(t, "data.cv.x", 1)
    with pytest.raises(InputError):
        set_dotted(t, "data..cv", 1)


def test_designs_one_per_method():
    s = load_scenario(ROOT / "scenarios" / "rare_event.toml")
    ds = s.designs()
    assert [d.method for d in ds] == list(s.methods) and len(ds) == 5
    assert all(d.model is s.design.model and d.margin == 0.02 for d in ds)


def test_to_frame_is_one_row():
    s = load_scenario(ROOT / "scenarios" / "two_groups.toml")
    f = s.to_frame()
    assert len(f) == 1
    assert f.loc[0, "target.margin"] == 5.0 and f.loc[0, "simulation.ratio"] == 1.5
    assert f.loc[0, "true_value"] == pytest.approx(4.0)  # 52 - 48, the file's group means


def test_two_sample_and_event_scenarios():
    s = load_scenario(ROOT / "scenarios" / "two_groups.toml")
    assert s.two_sample and s.design.n_b(10) == 15  # ratio 1.5
    t = load_scenario(ROOT / "scenarios" / "top_box.toml")
    # ratings 4 and 5 count: 0.35 + 0.25 from the file's probabilities
    assert t.design.model.zero_one and t.design.true_value == pytest.approx(0.60)
    assert t.to_dict()["target"]["event_values"] == [4.0, 5.0]


def test_clusters_and_population(tmp_path):
    s = scenario_from_dict(minimal(clusters={"icc": 0.05, "size_mean": 8, "size_cv": 0.4}))
    cl = s.design.clusters
    assert (cl.icc, cl.size, cl.size_mean, cl.size_cv, cl.effect) == (0.05, None, 8.0, 0.4, "normal")
    p = scenario_from_dict(minimal(population={"size": 300}))
    assert p.design.population.size == 300 and p.design.population.fpc is True
    assert p.n_max == 300  # n cannot exceed the population without replacement
    csv = tmp_path / "units.csv"
    csv.write_text("id,value\n" + "".join(f"{i},{i * 1.5}\n" for i in range(40)))
    q = scenario_from_dict(minimal(population={"file": "units.csv", "column": "value"}), base_dir=tmp_path)
    assert q.design.population.size == 40 and q.to_dict()["population"]["file"] == "units.csv"
    with pytest.raises(InputError) as info:
        scenario_from_dict(minimal(population={"file": "units.csv", "column": "valu", "size": 41}), base_dir=tmp_path)
    assert "did you mean 'value'?" in str(info.value)


def test_non_finite_anywhere_is_refused():
    with pytest.raises(InputError) as info:
        scenario_from_dict(minimal(data__sd=math.nan, simulation__ratio=math.inf))
    fields = {p.field for p in info.value.problems}
    assert {"data.sd", "simulation.ratio"} <= fields


def test_scenarios_pickle_for_workers():
    import pickle

    for path in EXAMPLES:
        s = load_scenario(path)
        t = pickle.loads(pickle.dumps(s))
        assert t.to_dict() == s.to_dict() and t.design.true_value == s.design.true_value


def test_a_sweep_file_is_not_a_scenario(tmp_path):
    f = tmp_path / "grid.toml"
    f.write_text('base = "turnaround.toml"\ntask = "search"\n[vary]\n"data.cv" = [1.0, 2.0]\n')
    with pytest.raises(InputError, match="simcheck sweep"):
        load_scenario(f)
    for path in SWEEPS:
        with pytest.raises(InputError, match="simcheck sweep"):
            load_scenario(path)
