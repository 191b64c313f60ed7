"""The package's shape (issue 13): functions a screen long at most, no private names
across module borders, no import circle.

These read the source with :mod:`ast`; nothing is imported or run.
"""

from __future__ import annotations

import ast
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
PACKAGE = ROOT / "simcheck"

#: lines of code one function may have (its docstring not counted: the numpydoc text of a
#: public function, with its parameters and doctested examples, is not code to read through)
MAX_LINES = 80

#: functions allowed to be longer, as "module:function" -> why; each must say why in a comment
#: inside it that contains NOTE_MARK as well (none is needed today)
ALLOWED_LONG: dict[str, str] = {}
NOTE_MARK = "longer than a screen"


def _modules() -> dict[str, Path]:
    out = {}
    for path in sorted(PACKAGE.rglob("*.py")):
        parts = path.relative_to(ROOT).with_suffix("").parts
        name = ".".join(parts[:-1] if parts[-1] == "__init__" else parts)
        out[name] = path
    return out


MODULES = _modules()


def _code_lines(f: ast.FunctionDef | ast.AsyncFunctionDef) -> int:
    """Lines from ``def`` to the end of the body, less the docstring's."""
    n = f.end_lineno - f.lineno + 1
    first = f.body[0]
    if isinstance(first, ast.Expr) and isinstance(first.value, ast.Constant) and isinstance(first.value.value, str):
        n -= first.end_lineno - first.lineno + 1
    return n


def _functions():
    for name, path in MODULES.items():
        text = path.read_text(encoding="utf-8")
        for node in ast.walk(ast.parse(text)):
            if isinstance(node, (ast.FunctionDef, ast.AsyncFunctionDef)):
                yield f"{name}:{node.name}", node, text


def test_the_length_measure_counts_code_and_not_the_docstring():
    f = ast.parse('def f():\n    """One\n\n    two.\n    """\n    x = 1\n    return x\n').body[0]
    assert _code_lines(f) == 3
    g = ast.parse("def g():\n    return 1\n").body[0]
    assert _code_lines(g) == 2


def test_no_function_is_longer_than_a_screen():
    long = {key: _code_lines(f) for key, f, _ in _functions() if _code_lines(f) > MAX_LINES}
    unexplained = sorted(k for k in long if k not in ALLOWED_LONG)
    assert unexplained == [], f"over {MAX_LINES} lines of code (split along the natural steps): " + ", ".join(
        f"{k} ({long[k]})" for k in unexplained)


@pytest.mark.parametrize("key", sorted(ALLOWED_LONG) or [None])
def test_each_allowed_long_function_says_why_in_the_code(key):
    if key is None:
        pytest.skip("no function is allowed to be longer")
    found = [(f, text) for k, f, text in _functions() if k == key]
    assert found, f"{key} is allowed but does not exist any more; take it off ALLOWED_LONG"
    f, text = found[0]
    body = "\n".join(text.splitlines()[f.lineno - 1:f.end_lineno])
    assert NOTE_MARK in body, f"{key}: add a comment saying why it is {NOTE_MARK}"


def test_no_private_name_is_imported_across_modules():
    found = []
    for name, path in MODULES.items():
        for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
            if isinstance(node, ast.ImportFrom) and node.module and node.module.startswith("simcheck"):
                found += [f"{name} imports {node.module}.{a.name}" for a in node.names
                          if a.name.startswith("_") and not a.name.startswith("__")]
    assert found == []


def _import_graph() -> dict[str, set[str]]:
    """Module -> the package modules it imports at its top level (imports inside functions
    and ``if TYPE_CHECKING:`` blocks are deliberate deferrals and not counted); ``from
    package import submodule`` is an edge to the submodule."""
    graph: dict[str, set[str]] = {name: set() for name in MODULES}
    for name, path in MODULES.items():
        for node in ast.parse(path.read_text(encoding="utf-8")).body:
            targets = []
            if isinstance(node, ast.ImportFrom) and node.level == 0 and (node.module or "").startswith("simcheck"):
                for a in node.names:
                    sub = f"{node.module}.{a.name}"
                    targets.append(sub if sub in MODULES else node.module)
            elif isinstance(node, ast.Import):
                targets += [a.name for a in node.names if a.name.startswith("simcheck")]
            graph[name] |= {t for t in targets if t in MODULES and t != name}
    return graph


def _cycles(graph: dict[str, set[str]]) -> list[list[str]]:
    cycles, state = [], {}

    def visit(u: str, stack: list[str]) -> None:
        state[u] = "open"
        stack.append(u)
        for v in sorted(graph[u]):
            if state.get(v) == "open":
                cycles.append(stack[stack.index(v):] + [v])
            elif v not in state:
                visit(v, stack)
        stack.pop()
        state[u] = "done"

    for u in sorted(graph):
        if u not in state:
            visit(u, [])
    return cycles


def test_the_cycle_finder_finds_a_circle():
    assert _cycles({"a": {"b"}, "b": {"c"}, "c": {"a"}}) == [["a", "b", "c", "a"]]
    assert _cycles({"a": {"b"}, "b": set()}) == []


def test_there_is_no_import_circle():
    graph = _import_graph()
    assert graph["simcheck.engine"], "the graph reads the engine's imports"
    assert _cycles(graph) == []
