"""Reading the ``[[strata]]`` and ``[allocation]`` tables of a scenario file.

```toml
[[strata]]
name = "north"          # text, unique
size = 4000             # units in the stratum (N_h)
cost = 1.5              # per-unit cost (rule "optimum")
n = 40                  # given sample size (rule "given")
[strata.data]           # the stratum's data model
model = "lognormal"
mean = 120.0
cv = 0.8

[allocation]
rule = "neyman"         # proportional | neyman | optimum | given
minimum = 2             # least n per stratum, >= 2
```

Part of the scenario layer: :func:`read_strata` collects every problem in the
caller's :class:`~simcheck.errors.Collector`.
"""

from __future__ import annotations

from typing import Any

from simcheck.design import StrataSpec
from simcheck.errors import Collector, InputError
from simcheck.strata import MINIMUM, RULES

STRATUM_KEYS = ("name", "size", "cost", "n", "data")
ALLOCATION_KEYS = ("rule", "minimum")
#: at most this many strata (a larger list is almost surely a mistake)
STRATA_MAX = 1000

KNOWN_KEYS = {
    "strata": "stratified design: a list of [[strata]] tables with name, size (N_h), data (model table), "
              "and cost (rule optimum) or n (rule given); n then counts the whole sample",
    "allocation.rule": f"how n is shared among the strata: {' | '.join(RULES)}; default proportional",
    "allocation.minimum": f"least n per stratum, whole number >= 2; default {MINIMUM}",
}


def _stratum(c: Collector, i: int, t: Any, base_dir: str | None, wrap, allow_outside_files: bool = False) -> tuple | None:
    from simcheck.models import make_model

    where = f"strata[{i}]"
    if not isinstance(t, dict):
        c.add(where, f"must be a table with name, size and data, got {t!r}")
        return None
    for k in t:
        if k not in STRATUM_KEYS:
            c.add(f"{where}.{k}", f"unknown key; known keys here: {', '.join(STRATUM_KEYS)}")
    name = t.get("name", f"stratum {i + 1}")
    if not isinstance(name, str) or not name.strip():
        c.add(f"{where}.name", f"must be a non-empty text, got {name!r}")
    size = t.get("size")
    if size is None:
        c.add(f"{where}.size", "missing (required: the number of units in the stratum)")
    data = t.get("data")
    model = None
    if not isinstance(data, dict):
        c.add(f"{where}.data", f"missing or not a table: give [strata.data] with model = \"...\" (got {data!r})")
    else:
        try:
            model = wrap(make_model(data, base_dir=base_dir, allow_outside_files=allow_outside_files))
        except InputError as e:
            c.extend(e.prefixed(f"{where}.data"))
    return name, size, t.get("cost"), t.get("n"), model


def read_strata(c: Collector, table: dict[str, Any], base_dir: str | None, wrap=lambda m: m,
                allow_outside_files: bool = False) -> StrataSpec | None:
    """The :class:`StrataSpec` of ``table`` (None after recording problems in ``c``).

    ``base_dir`` and ``allow_outside_files`` locate data files of the strata's
    models (see :func:`simcheck.files.resolve_data_path`).

    ``wrap`` turns each stratum's model into the model of the estimand (for
    example an event indicator for a proportion).
    """
    raw = table.get("strata")
    if not isinstance(raw, list) or not raw:
        c.add("strata", f"must be a list of [[strata]] tables, got {raw!r}")
        return None
    if len(raw) > STRATA_MAX:
        c.add("strata", f"at most {STRATA_MAX} strata, got {len(raw)}")
        return None
    alloc = table.get("allocation", {})
    if not isinstance(alloc, dict):
        c.add("allocation", f"must be a table, got {alloc!r}")
        alloc = {}
    for k in alloc:
        if k not in ALLOCATION_KEYS:
            c.add(f"allocation.{k}", f"unknown key; known keys here: {', '.join(ALLOCATION_KEYS)}")
    rule = alloc.get("rule", "proportional")
    minimum = alloc.get("minimum", MINIMUM)
    before = len(c.problems)
    parts = [_stratum(c, i, t, base_dir, wrap, allow_outside_files) for i, t in enumerate(raw)]
    if len(c.problems) > before or any(p is None for p in parts):
        return None
    names, sizes, costs, given, models = zip(*parts)
    has_cost = any(v is not None for v in costs)
    has_n = any(v is not None for v in given)
    if has_cost and rule != "optimum":
        c.add("strata.cost", f"only with allocation.rule = 'optimum' (the rule is {rule!r})")
    if has_n and rule != "given":
        c.add("strata.n", f"only with allocation.rule = 'given' (the rule is {rule!r})")
    try:
        return StrataSpec(
            names=tuple(names), sizes=tuple(sizes), models=tuple(models), rule=rule,
            costs=tuple(costs) if rule == "optimum" else None,
            given=tuple(given) if rule == "given" else None, minimum=minimum,
        )
    except (TypeError, ValueError) as e:  # pragma: no cover - values are checked by Design
        c.add("strata", str(e))
        return None


def strata_tables(table: dict[str, Any]) -> dict[str, Any]:
    """The ``strata`` and ``allocation`` entries of a scenario table, as given (for to_dict)."""
    out: dict[str, Any] = {"strata": table.get("strata")}
    if "allocation" in table:
        out["allocation"] = table["allocation"]
    return out
