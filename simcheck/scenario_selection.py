"""Reading the ``[selection]`` and ``[misstatement]`` tables of a scenario file.

Selection with probability proportional to size, with replacement:

```toml
[selection]
rule = "pps"                 # pps | monetary-unit
size_column = "floor_area"   # with population.file: the column of sizes
# or, for a population drawn from models (population.size items):
[selection.size]             # model of the item sizes (book values), values > 0
model = "lognormal"
mean = 800.0
cv = 1.2
# rule pps with models: [data] is the value per unit of size (default),
# or the value itself, independent of the size (data_per_size = false)

[misstatement]               # rule monetary-unit only
error_rate = 0.03            # share of items misstated, in [0, 1]
taint = 0.4                  # share of the book value misstated: a number in [0, 1]
# or a model table of values in [0, 1]:
# [misstatement.taint]
# model = "beta"
# ...
```

Rule ``monetary-unit`` takes its book values from ``[selection.size]`` or
from ``population.column`` of ``population.file``; it needs no ``[data]``.
Part of the scenario layer: :func:`read_selection` collects every problem in
the caller's :class:`~simcheck.errors.Collector`.
"""

from __future__ import annotations

from typing import Any

from simcheck.design import SELECTION_RULES, SelectionSpec
from simcheck.errors import Collector, InputError, shown

__all__ = ["KNOWN_KEYS", "read_selection", "selection_tables", "supplies_data", "describe", "TABLES"]

#: the scenario tables this module reads
TABLES = ("selection", "misstatement")

KNOWN_KEYS = {
    "selection.rule": f"selection with probability proportional to size, with replacement: {' | '.join(SELECTION_RULES)}; "
                      "n then counts draws (monetary-unit: monetary units)",
    "selection.size": "model table of the item sizes (monetary-unit: book values), values > 0; "
                      "the population has population.size items drawn once",
    "selection.size_column": "rule pps with population.file: the column holding the sizes (> 0); population.column holds the values",
    "selection.data_per_size": "rule pps with models: [data] is the value per unit of size (true, default) or the value itself (false)",
    "misstatement.error_rate": "rule monetary-unit: share of items misstated, in [0, 1]",
    "misstatement.taint": "rule monetary-unit: share of a misstated item's book value that is misstated: "
                          "a number in [0, 1] or a model table of values in [0, 1]",
}


def supplies_data(table: dict[str, Any]) -> bool:
    """True when the selection gives the population's values itself (rule monetary-unit: no [data])."""
    sel = table.get("selection")
    return isinstance(sel, dict) and sel.get("rule") == "monetary-unit"


def _model(c: Collector, t: Any, name: str, files) -> Any:
    from simcheck.models import Model, make_model

    if isinstance(t, Model):
        return t
    if not isinstance(t, dict):
        c.add(name, f"must be a model table (model = \"...\" and its parameters), got {shown(t)}")
        return None
    try:
        return make_model(t, base_dir=files.base_dir, allow_outside_files=files.allow_outside)
    except InputError as e:
        c.extend(e.prefixed(name))
        return None


def _misstatement(c: Collector, table: dict[str, Any], rule: str | None, files) -> tuple[Any, Any]:
    mis = table.get("misstatement")
    if mis is None:
        return None, None
    if not isinstance(mis, dict):
        c.add("misstatement", f"must be a table ([misstatement]), got {shown(mis)}")
        return None, None
    if rule != "monetary-unit":
        c.add("misstatement", "only with selection.rule = \"monetary-unit\"")
        return None, None
    rate = mis.get("error_rate")
    if rate is not None:
        rate = c.number("misstatement.error_rate", rate, low=0, high=1)
    taint = mis.get("taint")
    if isinstance(taint, dict):
        taint = _model(c, taint, "misstatement.taint", files)
    elif taint is not None:
        taint = c.number("misstatement.taint", taint, low=0, high=1)
    return rate, taint


def read_selection(c: Collector, table: dict[str, Any], population, model, files) -> tuple[SelectionSpec | None, Any]:
    """The :class:`SelectionSpec` of ``table`` and the design's model (None without a
    [selection] table, or after recording problems).

    ``model`` is the model read so far ([data], or the summary of
    population.file's column); rule monetary-unit without a file gets the
    book values' model instead.
    """
    sel = table.get("selection")
    if sel is None:
        if "misstatement" in table:
            c.add("misstatement", "only with a [selection] table (rule = \"monetary-unit\")")
        return None, model
    if not isinstance(sel, dict):
        c.add("selection", f"must be a table ([selection]), got {shown(sel)}")
        return None, model
    rule = sel.get("rule")
    if rule is None:
        c.add("selection.rule", f"missing (required: one of {', '.join(SELECTION_RULES)})")
    elif rule not in SELECTION_RULES:
        c.add("selection.rule", f"unknown value {shown(rule)}; choose one of {', '.join(SELECTION_RULES)}")
        rule = None
    n0 = len(c.problems)
    size_model = _model(c, sel["size"], "selection.size", files) if "size" in sel else None
    column = sel.get("size_column")
    if column is not None and (not isinstance(column, str) or not column.strip()):
        c.add("selection.size_column", f"must be a column name (text), got {shown(column)}")
        column = None
    per_size = sel.get("data_per_size", True)
    if not isinstance(per_size, bool):
        c.add("selection.data_per_size", f"must be true or false, got {shown(per_size)}")
    elif "data_per_size" in sel and rule != "pps":
        c.add("selection.data_per_size", "only with rule pps (the value of an item is size x [data] or [data] itself)")
    rate, taint = _misstatement(c, table, rule, files)
    if rule == "monetary-unit" and table.get("data"):
        c.add("data", "not used with selection.rule = \"monetary-unit\": the book values come from selection.size "
              "or population.column, the misstatements from [misstatement]; remove [data]")
    if rule is None or len(c.problems) > n0:
        return None, model
    if rule == "monetary-unit" and (population is None or population.file is None):
        if size_model is None:
            c.add("selection.size", "missing: a model of the book values ([selection.size]) or population.file and column")
            return None, model
        if population is None:
            c.add("population.size", "missing (required: the number of items in the ledger)")
            return None, model
        model = size_model
    _file_sizes(c, rule, column, population)
    return SelectionSpec(rule=rule, size_model=size_model, size_column=column, data_per_size=bool(per_size),
                         error_rate=rate, taint=taint), model


def _file_sizes(c: Collector, rule: str, column: str | None, population) -> None:
    """Sizes read from population.file must be > 0 and paired with the values (checked at load)."""
    if population is None or population.file is None or population.column is None:
        return
    if rule == "pps" and column is None:
        return  # Design reports the missing size_column
    from simcheck.engine.pps import read_size_columns

    try:
        if rule == "monetary-unit":
            read_size_columns(population.file, population.column, None)
        else:
            read_size_columns(population.file, column, population.column)
    except InputError as e:
        c.extend(e)


def selection_tables(table: dict[str, Any]) -> dict[str, Any]:
    """The ``selection`` and ``misstatement`` entries of a scenario table, as given (for to_dict)."""
    return {k: table[k] for k in TABLES if k in table}


def describe(design, table: dict[str, Any]) -> str:
    """The population of a selection design in one line."""
    sel, pop = design.selection, design.population
    if pop.file is not None:
        given = table.get("population", {}).get("file", pop.file)
        src = (f"book values in column {pop.column!r} of {given}" if sel.monetary_unit
               else f"values in column {pop.column!r}, sizes in column {sel.size_column!r} of {given}")
    elif sel.monetary_unit:
        src = f"{pop.size} items, book values {sel.size_model.describe()}"
    else:
        what = "value per unit of size" if sel.data_per_size else "value"
        src = f"{pop.size} items, sizes {sel.size_model.describe()}, {what} {design.model.describe()}"
    if sel.monetary_unit:
        taint = sel.taint.describe() if hasattr(sel.taint, "describe") else f"{float(sel.taint):g}"
        src += f"; misstated items {float(sel.error_rate):g}, taint {taint}"
    return f"{sel.rule} selection: {src}"
