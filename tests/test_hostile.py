"""Generated hostile input: scenario tables, file bytes and command lines (issue 19).

Hypothesis builds scenario tables (valid templates with random keys, wrong
types, huge, tiny, NaN and infinite numbers, deep nesting and broken model
tables), raw file bytes (byte-order marks, other encodings, NUL bytes) and
command lines, runs ``simcheck.cli.main`` in process and checks the contract
of INTERFACE.md on every one (sweep files are validated only, never run, and
must raise nothing but a one-line InputError):

* exit code 0 or 2 only (1 means an unexpected failure; no traceback ever);
* exit 2: stdout empty and exactly one ``simcheck: error:`` line, the last on
  stderr (only the seed notice may come before it);
* exit 0: the JSON object holds no NaN and only possible figures (shares in
  [0, 1], n >= 1, finite non-negative half-widths);
* no run takes more than 60 s (an interval timer fails the example).

The budget is fixed and seeded (``derandomize=True``): 200 scenario tables,
40 byte strings, 90 command lines and 40 sweep files (370 generated cases)
plus 3 real processes per run, about 35-50 s on the (loaded) project machine. Runs are tiny (100 replicates, n <= 60), and the value
strategies avoid inputs that are valid but expensive (bootstrap methods,
populations of millions), which would test patience rather than the contract.
"""

from __future__ import annotations

import json
import math
import os
import re
import signal
import subprocess
import sys
import tempfile
from pathlib import Path

import pytest
from hypothesis import HealthCheck, event, given, settings
from hypothesis import strategies as st

from fixtures import run_cli, toml_text

ROOT = Path(__file__).resolve().parents[1]
HANG_SECONDS = 60
SETTINGS = dict(derandomize=True, deadline=None, database=None,
                suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large,
                                       HealthCheck.filter_too_much])
NOTICE_PREFIXES = ("simcheck: no seed given", "simcheck: notice", "simcheck: warning", "notice:", "warning:")
ERROR_LINE = re.compile(r"^simcheck(: error: | (formula|check|curve|search): )")

# --- values ---------------------------------------------------------------------------
SPECIAL_FLOATS = [0.0, -0.0, 1e-300, 5e-324, 2.2250738585072014e-308, 1e-16, 0.5, 1.0, 2.0, 1e15, 1e150,
                  1e200, 1e300, 1.7976931348623157e308, -1e308, math.nan, math.inf, -math.inf]
SPECIAL_INTS = [0, 1, 2, -1, 3, 99, 2**31, 2**53 + 1, 2**63 - 1, 2**63, 2**64, -(2**63), 10**309, -(10**400)]

numbers = st.one_of(
    st.sampled_from(SPECIAL_FLOATS),
    st.sampled_from(SPECIAL_INTS),
    st.floats(allow_nan=True, allow_infinity=True),
    st.floats(min_value=-100, max_value=100),
    st.integers(min_value=-(10**400), max_value=10**400),
    st.integers(min_value=-5, max_value=60),
)
texts = st.one_of(
    st.sampled_from(["", " ", "t", "mean", "normal", "nan", "../x.csv", "/etc/passwd", "a" * 300, "\u00e9", "1e5"]),
    st.text(alphabet=st.characters(blacklist_categories=("Cs",)), max_size=12),
)
scalars = st.one_of(numbers, texts, st.booleans())
hostile = st.recursive(
    scalars,
    lambda inner: st.one_of(st.lists(inner, max_size=3), st.dictionaries(texts, inner, max_size=3)),
    max_leaves=8,
)


# plausible values too, so that many generated scenarios are valid and run to exit 0
plausible = st.one_of(st.floats(min_value=0.01, max_value=100), st.integers(min_value=1, max_value=50),
                      st.sampled_from([0.5, 0.9, 0.95, 0.99, 0.001, 0.2]))
specials = st.sampled_from(SPECIAL_FLOATS + SPECIAL_INTS + [[1e-300, 1.0], [0.0, 1e308], [], {}, "nan"])
values = st.one_of(specials, numbers, hostile, plausible)


def nested(depth: int) -> object:
    v: object = 1
    for _ in range(depth):
        v = [v]
    return v


# --- models and scenario templates ---------------------------------------------------------------
MODEL_KEYS = {
    "normal": ["mean", "sd"], "lognormal": ["mean", "cv", "meanlog", "sdlog"],
    "gamma": ["mean", "cv", "shape", "scale"], "exponential": ["mean"], "weibull": ["shape", "scale"],
    "beta": ["mean", "sd", "a", "b", "lower", "upper"], "uniform": ["lower", "upper"],
    "truncated-normal": ["mean", "sd", "lower", "upper"], "student-t": ["df", "mean", "scale"],
    "categorical": ["values", "probs"], "bernoulli": ["p"], "poisson": ["mean"],
    "negative-binomial": ["mean", "dispersion"], "zero-inflated": ["zero_prob", "inner"],
    "mixture": ["weights", "components"], "empirical": ["file", "column"],
}
GOOD_MODELS = [
    {"model": "normal", "mean": 10.0, "sd": 3.0},
    {"model": "lognormal", "mean": 6.0, "cv": 1.0},
    {"model": "gamma", "shape": 2.0, "scale": 3.0},
    {"model": "exponential", "mean": 2.0},
    {"model": "weibull", "shape": 1.5, "scale": 2.0},
    {"model": "beta", "a": 2.0, "b": 5.0},
    {"model": "uniform", "lower": 0.0, "upper": 4.0},
    {"model": "truncated-normal", "mean": 0.0, "sd": 1.0, "lower": 0.0},
    {"model": "student-t", "df": 5.0, "mean": 1.0, "scale": 2.0},
    {"model": "categorical", "values": [1.0, 2.0, 5.0], "probs": [0.2, 0.5, 0.3]},
    {"model": "poisson", "mean": 3.0},
    {"model": "negative-binomial", "mean": 4.0, "dispersion": 2.0},
    {"model": "zero-inflated", "zero_prob": 0.3, "inner": {"model": "gamma", "mean": 5.0, "cv": 1.0}},
    {"model": "mixture", "weights": [0.4, 0.6],
     "components": [{"model": "normal", "mean": 0.0, "sd": 1.0}, {"model": "normal", "mean": 4.0, "sd": 1.0}]},
    {"model": "empirical", "file": "pilot.csv", "column": "hours"},
]
METHODS = {  # bootstrap methods left out: valid but costly (see the module docstring)
    "mean": ["t", "z", "cox", "johnson-t", "cluster-t"],
    "proportion": ["wald", "wilson", "agresti-coull", "clopper-pearson", "jeffreys", "cluster-t"],
    "mean-diff": ["t", "welch", "z"],
    "proportion-diff": ["newcombe", "agresti-caffo", "wald"],
}
PILOT = "site,hours\na,1.5\nb,2.5\nc,4.0\nd,7.0\ne,3.0\nf,\n"


@st.composite
def model_tables(draw, depth: int = 0):
    kind = draw(st.sampled_from(["good", "good", "good", "mutated", "mutated", "random"]))
    base = dict(draw(st.sampled_from(GOOD_MODELS)))
    if kind == "good":
        return base
    if kind == "mutated":
        key = draw(st.sampled_from(MODEL_KEYS[base["model"]] + ["model", "extra"]))
        if draw(st.booleans()) and key in base:
            del base[key]
        else:
            base[key] = draw(values if key != "inner" or depth > 1 else model_tables(depth + 1))
        return base
    name = draw(st.sampled_from(sorted(MODEL_KEYS)))
    keys = draw(st.lists(st.sampled_from(MODEL_KEYS[name]), max_size=4, unique=True))
    out = {"model": name}
    for k in keys:
        out[k] = draw(numbers) if draw(st.booleans()) else draw(hostile)
    return out


SCENARIO_KEYS = [
    "title", "target.estimand", "target.confidence", "target.margin", "target.assurance",
    "target.coverage_tolerance", "target.event_values", "target.event_above", "method.interval",
    "method.resamples", "simulation.replicates", "simulation.seed", "simulation.n_min", "simulation.n_max",
    "simulation.ratio", "simulation.budget", "simulation.path", "clusters.icc", "clusters.size",
    "clusters.size_mean", "clusters.size_cv", "clusters.effect", "population.size", "population.fpc",
    "population.file", "population.column", "data", "target", "method", "simulation", "extra.key", "vary",
    "strata", "allocation.rule", "allocation.minimum",
]
# valid values that would make a run slow: refused by the strategy, not by simcheck
MUTATE = 1
COSTLY = {"population.size": 10_000, "clusters.size": 200, "clusters.size_mean": 200,
          "simulation.n_min": 60, "simulation.n_max": 60, "method.resamples": 999}


def _cheap(key: str, value: object) -> bool:
    limit = COSTLY.get(key)
    if limit is None or isinstance(value, bool) or not isinstance(value, (int, float)):
        return True
    try:
        return not (limit < float(value) <= 10**9)
    except OverflowError:
        return True


@st.composite
def scenario_tables(draw):
    estimand = draw(st.sampled_from(sorted(METHODS)))

    def one() -> dict:
        if estimand in ("proportion", "proportion-diff"):
            return {"model": "bernoulli", "p": draw(st.sampled_from([0.05, 0.3, 0.5]))}
        return draw(model_tables())

    data = {"a": one(), "b": one()} if estimand.endswith("-diff") else one()
    method = draw(st.sampled_from(METHODS[estimand]))
    table = {
        "title": "Hostile input (invented example)",
        "target": {"estimand": estimand, "margin": draw(st.sampled_from([0.05, 0.5, 1.0, 3.0]))},
        "data": data,
        "method": {"interval": method},
        "simulation": {"replicates": 100, "seed": 7, "n_max": 40},
    }
    extra = "none" if estimand.endswith("-diff") else draw(
        st.sampled_from(["none", "clusters", "population", "population-file", "strata"]))
    if extra == "strata" and estimand == "mean" and method in ("t", "z"):
        table.pop("data")
        table["strata"] = [{"name": "north", "size": 300, "data": data},
                           {"name": "south", "size": draw(st.sampled_from([200, 5, 1])), "data": one()}]
        table["allocation"] = {"rule": draw(st.sampled_from(["proportional", "neyman", "x"]))}
    elif extra == "clusters" or method == "cluster-t":
        table["clusters"] = {"icc": 0.05, "size": 4}
    elif extra == "population":
        table["population"] = {"size": 200}
    elif extra == "population-file":
        table["population"] = {"file": "pilot.csv", "column": "hours"}
        table["simulation"]["n_max"] = 4
    from simcheck.scenario import set_dotted

    for _ in range(draw(st.sampled_from([0, 0, 1, 1, 1, 2, 3])) * MUTATE):
        key = draw(st.sampled_from(SCENARIO_KEYS))
        action = draw(st.sampled_from(["set", "set", "set", "delete", "deep"]))
        if action == "delete":
            value = None
        elif action == "deep":
            value = nested(draw(st.sampled_from([5, 31, 33, 40])))
        else:
            value = draw(values)
            if not _cheap(key, value):
                continue
        try:
            table = set_dotted(table, key, value)
        except Exception:  # a key under a non-table value: keep the table as it is
            continue
    return table


# --- running and judging --------------------------------------------------------------------
class Hang(Exception):
    pass


def _alarm(signum, frame):
    raise Hang(f"a run took more than {HANG_SECONDS} s")


def run_bounded(argv: list) -> tuple[int, str, str]:
    old = signal.signal(signal.SIGALRM, _alarm)
    signal.setitimer(signal.ITIMER_REAL, HANG_SECONDS)
    try:
        return run_cli(argv)
    finally:
        signal.setitimer(signal.ITIMER_REAL, 0)
        signal.signal(signal.SIGALRM, old)


def _no_nan(text: str) -> object:
    def refuse(c):
        raise AssertionError(f"{c} in JSON output")

    return json.loads(text, parse_constant=refuse)


def _share(d: dict, key: str) -> None:
    v = d.get(key)
    if v is not None:
        assert 0.0 <= v <= 1.0, f"{key} = {v}"


def _check_row(d: dict) -> None:
    assert d["n"] is None or d["n"] >= 1, d
    for k in ("coverage", "miss_low", "miss_high", "assurance"):
        _share(d, k)
    for k in ("coverage_mcse", "assurance_mcse", "margin_mean", "margin_median", "margin_p90"):
        v = d.get(k)
        assert v is None or (math.isfinite(v) and v >= 0), f"{k} = {v}"
    if d.get("coverage") is not None and d.get("miss_low") is not None and d.get("miss_high") is not None:
        assert d["coverage"] + d["miss_low"] + d["miss_high"] <= 1 + 1e-9


def judge(code: int, out: str, err: str, command: str) -> None:
    event(f"{command}: exit {code}")  # pytest --hypothesis-show-statistics shows the mix
    assert "Traceback" not in err and "Traceback" not in out
    assert code in (0, 2), f"exit {code}: {err.strip()[-300:]}"
    if code == 2:
        assert out == "", out[:200]
        lines = err.splitlines()
        # "simcheck: error: ..." (input) or "simcheck check: ..." (argparse usage)
        assert lines and ERROR_LINE.match(lines[-1]), err
        assert all(ln.startswith(NOTICE_PREFIXES) for ln in lines[:-1]), err
        return
    d = _no_nan(out)
    if command == "check":
        _check_row(d)
    elif command == "curve":
        for row in d["rows"]:
            _check_row(row)
    elif command == "search":
        for s in d.get("by_method") or [d]:
            assert s["n"] is None or s["n"] >= 1, s
            _share(s, "coverage")
            _share(s, "assurance")
    elif command == "formula":
        assert d["n"] >= 1 and d["n_total"] >= 1, d
        assert d.get("n_b") is None or d["n_b"] >= 1, d


@pytest.fixture(scope="module")
def folder():
    with tempfile.TemporaryDirectory() as d:
        p = Path(d)
        (p / "pilot.csv").write_text(PILOT, encoding="utf-8")
        yield p


COMMANDS = st.sampled_from([
    ["check", "--n", "10"], ["check", "--n", "2"], ["check", "--n", "40"],
    ["curve", "--n-min", "2", "--n-max", "30", "--step", "7"],
    ["search", "--n-max", "40", "--budget", "500"],
])


@settings(max_examples=200, **SETTINGS)
@given(table=scenario_tables(), command=COMMANDS)
def test_generated_scenarios_keep_the_contract(folder, table, command):
    path = folder / "scenario.toml"
    path.write_text(toml_text(table), encoding="utf-8")
    argv = [command[0], path, *command[1:], "--replicates", "100", "--json"]
    judge(*run_bounded(argv), command[0])


# --- raw bytes ----------------------------------------------------------------------------------
GOOD_TEXT = toml_text({
    "title": "Bytes (invented example)",
    "target": {"estimand": "mean", "margin": 1.0},
    "data": {"model": "normal", "mean": 10.0, "sd": 3.0},
    "method": {"interval": "t"},
    "simulation": {"replicates": 100, "seed": 5, "n_max": 40},
}).encode()


@st.composite
def file_bytes(draw):
    how = draw(st.sampled_from(["bom", "latin1", "utf16", "nul", "truncate", "random", "splice"]))
    if how == "bom":
        return b"\xef\xbb\xbf" + GOOD_TEXT
    if how == "latin1":
        return GOOD_TEXT.replace(b"Bytes", "Caf\u00e9".encode("latin-1"))
    if how == "utf16":
        return GOOD_TEXT.decode().encode("utf-16")
    if how == "nul":
        i = draw(st.integers(0, len(GOOD_TEXT)))
        return GOOD_TEXT[:i] + b"\x00" + GOOD_TEXT[i:]
    if how == "truncate":
        return GOOD_TEXT[: draw(st.integers(0, len(GOOD_TEXT)))]
    if how == "random":
        return draw(st.binary(max_size=200))
    i = draw(st.integers(0, len(GOOD_TEXT)))
    return GOOD_TEXT[:i] + draw(st.binary(max_size=8)) + GOOD_TEXT[i:]


@settings(max_examples=40, **SETTINGS)
@given(data=file_bytes())
def test_generated_file_bytes_keep_the_contract(folder, data):
    path = folder / "bytes.toml"
    path.write_bytes(data)
    judge(*run_bounded(["check", path, "--n", "10", "--replicates", "100", "--json"]), "check")


# --- command lines -------------------------------------------------------------------------------
OPTION_VALUES = st.one_of(
    st.sampled_from(["0", "-1", "1", "2", "1e300", "1e-300", "nan", "inf", "-inf", "", "x", "10" * 200,
                     str(2**63), str(2**64), "0.5", "1e6", "1000000", "3"]),
    st.integers(-10, 10**7).map(str),
    st.floats(allow_nan=True, allow_infinity=True).map(repr),
)
FORMULA_OPTIONS = ["--estimand", "--margin", "--confidence", "--sd", "--sd-b", "--p", "--p-b", "--multiplier",
                   "--population-size", "--design-effect", "--icc", "--cluster-size", "--cluster-size-cv", "--ratio"]
RUN_OPTIONS = {
    "check": ["--n", "--replicates", "--seed", "--method"],
    "curve": ["--n-min", "--n-max", "--step", "--n-values", "--replicates", "--seed", "--method"],
    "search": ["--n-min", "--n-max", "--budget", "--replicates", "--seed", "--method"],
}


@st.composite
def command_lines(draw):
    command = draw(st.sampled_from(["formula", "formula", "check", "curve", "search"]))
    if command == "formula":
        estimand = draw(st.sampled_from(["mean", "proportion", "mean-diff", "proportion-diff", "x"]))
        argv = ["formula", "--estimand", estimand]
        opts = draw(st.sampled_from([[], [], ["--margin"]]) | st.lists(st.sampled_from(FORMULA_OPTIONS[1:]), max_size=3, unique=True))
        for o in opts:
            choice = st.sampled_from(["z", "t", "mean"]) if o in ("--multiplier", "--estimand") else st.one_of(
                OPTION_VALUES, plausible.map(str))
            argv += [o, draw(choice)]
        if "--margin" not in opts:
            argv += ["--margin", draw(st.sampled_from(["0.05", "1", "1e300", "1e-300", "0.5"]))]
        if "--sd" not in opts and "mean" in estimand:
            argv += ["--sd", "2"]
        return command, argv + ["--json"]
    argv = [command, "SCENARIO"]
    opts = draw(st.lists(st.sampled_from(RUN_OPTIONS[command]), min_size=1, max_size=3, unique=True))
    for o in opts:
        v = draw(st.sampled_from(["t", "z", "wilson", "bootstrap-t", "1"]) if o == "--method" else OPTION_VALUES)
        argv += [o, v]
    if command == "check" and "--n" not in opts:
        argv += ["--n", "10"]
    # keep valid runs tiny: a replicates value the strategy drew may be large but valid
    argv = [a if not (b == "--replicates" and a.isdigit() and int(a) > 200) else "200"
            for b, a in zip([""] + argv[:-1], argv)]
    if command == "search" and "--n-max" not in opts:
        argv += ["--n-max", "40"]
    if command == "curve" and not {"--n-max", "--n-values"} & set(opts):
        argv += ["--n-max", "30"]
    if "--replicates" not in opts:
        argv += ["--replicates", "100"]
    return command, argv + ["--json"]


def _affordable(command: str, argv: list[str]) -> bool:
    # valid but costly combinations are skipped, as in the scenario strategy
    def value(opt):
        return argv[argv.index(opt) + 1] if opt in argv else None

    def big(opt, limit):
        v = value(opt)
        try:
            return v is not None and any(limit < float(x) <= 10**6 for x in v.split(","))
        except ValueError:
            return False

    if command == "check":
        return not big("--n", 2000)
    if command == "curve":
        return not (big("--n-max", 400) or big("--n-min", 400) or big("--n-values", 400))
    if command == "search":
        return not (big("--n-max", 400) or big("--budget", 5000) or big("--n-min", 400))
    return True


@settings(max_examples=90, **SETTINGS)
@given(case=command_lines())
def test_generated_command_lines_keep_the_contract(folder, case):
    command, argv = case
    if command != "formula":
        path = folder / "cli.toml"
        path.write_bytes(GOOD_TEXT)
        argv = [str(path) if a == "SCENARIO" else a for a in argv]
        if not _affordable(command, argv):
            return
    judge(*run_bounded(argv), command)


# --- a few real processes --------------------------------------------------------------------------
@pytest.mark.parametrize("content", [
    b"\xef\xbb\xbf" + GOOD_TEXT,
    GOOD_TEXT.replace(b"mean = 10.0", b"mean = 1" + b"0" * 5000),
    b"title = " + b"[" * 500 + b"]" * 500 + b"\n" + GOOD_TEXT,
])
def test_real_processes_exit_2_with_one_line(tmp_path, content):
    path = tmp_path / "s.toml"
    path.write_bytes(content)
    p = subprocess.run([sys.executable, "-m", "simcheck", "check", str(path), "--n", "10"],
                       capture_output=True, text=True, cwd=ROOT, timeout=HANG_SECONDS,
                       env={**os.environ, "PYTHONPATH": str(ROOT)})
    assert p.returncode == 2 and p.stdout == "", p.stderr
    assert p.stderr.count("\n") == 1 and p.stderr.startswith("simcheck: error: ") and "Traceback" not in p.stderr


# --- sweep files (validation only: no cell is run) -------------------------------------------------
@st.composite
def sweep_tables(draw):
    table: dict = {"base": "base.toml", "task": draw(st.sampled_from(["check", "curve", "search", "x"])),
                   "vary": {"data.sd": [1.0, 2.0]}}
    if table["task"] == "check":
        table["n"] = [10]
    for _ in range(draw(st.sampled_from([0, 1, 1, 2]))):
        key = draw(st.sampled_from(["base", "task", "n", "n_min", "n_max", "seed", "title", "vary", "extra"]))
        table[key] = draw(values)
    if draw(st.booleans()):
        key = draw(st.sampled_from(["data.sd", "data.mean", "method.interval", "simulation.n_max", "target.margin",
                                    "data", "x.y"]))
        table["vary"] = {key: draw(st.lists(values, max_size=3))}
    return table


@settings(max_examples=40, **SETTINGS)
@given(table=sweep_tables())
def test_generated_sweep_files_raise_only_input_errors(folder, table):
    from simcheck.errors import InputError
    from simcheck.sweep.grid import load_sweep

    (folder / "base.toml").write_bytes(GOOD_TEXT)
    path = folder / "sweep.toml"
    path.write_text(toml_text(table), encoding="utf-8")
    old = signal.signal(signal.SIGALRM, _alarm)
    signal.setitimer(signal.ITIMER_REAL, HANG_SECONDS)
    try:
        load_sweep(path)
        event("sweep: valid")
    except InputError as e:
        event("sweep: refused")
        assert "\n" not in e.one_line()
    finally:
        signal.setitimer(signal.ITIMER_REAL, 0)
        signal.signal(signal.SIGALRM, old)
