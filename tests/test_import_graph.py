"""The import graph of src/uneven: no cycles, and no module reaching into another's private names.

The graph is read from the source with ``ast`` (nothing is imported). Both module-level imports and
imports inside functions count as edges: a deferred import hides a cycle from the interpreter at
load time but not from the reader, and the layering (sqltree below the compiler, the compiler below
the engine and the front-ends) is meant to hold for both. Importing ``a.b.c`` also loads the
packages ``a`` and ``a.b`` (their ``__init__`` runs), so those are edges too, except the importing
module's own enclosing packages, which are already loading when it runs.

A private name is one with a single leading underscore; using one from another module
(``from m import _x`` or ``m._x`` with ``m`` an imported module) is what this test refuses.
"""

from __future__ import annotations

import ast
from pathlib import Path

import pytest

SRC = Path(__file__).resolve().parents[1] / "src"


def _modules() -> dict[str, tuple[Path, bool]]:
    out = {}
    for path in sorted((SRC / "uneven").rglob("*.py")):
        parts = list(path.relative_to(SRC).with_suffix("").parts)
        is_package = parts[-1] == "__init__"
        if is_package:
            parts = parts[:-1]
        out[".".join(parts)] = (path, is_package)
    return out


MODULES = _modules()


def _owner(name: str) -> str | None:
    """The longest module path that ``name`` starts with (``a.b.c.f`` → ``a.b.c`` if that is a module)."""
    while name and name not in MODULES:
        name = name.rpartition(".")[0]
    return name or None


def _private(name: str) -> bool:
    return name.startswith("_") and not name.startswith("__")


def _absolute(module: str, is_package: bool, node: ast.ImportFrom) -> str:
    if not node.level:
        return node.module or ""
    package = module if is_package else module.rpartition(".")[0]
    for _ in range(node.level - 1):
        package = package.rpartition(".")[0]
    return package + ("." + node.module if node.module else "")


def _read(module: str) -> tuple[set[str], list[str]]:
    """(modules ``module`` imports, its uses of other modules' private names)."""
    path, is_package = MODULES[module]
    tree = ast.parse(path.read_text(encoding="utf-8"), filename=str(path))
    targets: set[str] = set()
    private: list[str] = []
    aliases: dict[str, str] = {}  # local name → module it names
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            for a in node.names:
                if a.name.split(".")[0] == "uneven":
                    targets.add(_owner(a.name))
                    aliases[a.asname or a.name] = _owner(a.name)
        elif isinstance(node, ast.ImportFrom):
            base = _absolute(module, is_package, node)
            if base.split(".")[0] != "uneven":
                continue
            for a in node.names:
                full = f"{base}.{a.name}"
                if full in MODULES:
                    targets.add(full)
                    aliases[a.asname or a.name] = full
                else:
                    targets.add(_owner(base))
                    if _private(a.name):
                        private.append(f"{module}:{node.lineno}: from {base} import {a.name}")
    for node in ast.walk(tree):
        if (isinstance(node, ast.Attribute) and isinstance(node.value, ast.Name) and _private(node.attr)
                and aliases.get(node.value.id) not in (None, module)):
            private.append(f"{module}:{node.lineno}: {node.value.id}.{node.attr} ({aliases[node.value.id]})")
    edges = set()
    own = {".".join(module.split(".")[:i]) for i in range(1, module.count(".") + 1)}
    for t in targets - {None}:
        parts = t.split(".")
        edges |= {".".join(parts[:i]) for i in range(2, len(parts) + 1)}
    return edges - own - {module}, private


GRAPH = {m: _read(m) for m in MODULES}


def _cycle(graph: dict[str, set[str]]) -> list[str] | None:
    """One cycle as a path [a, b, …, a], or None (depth-first search, white/grey/black)."""
    state: dict[str, int] = {}
    stack: list[str] = []

    def visit(v: str) -> list[str] | None:
        state[v] = 1
        stack.append(v)
        for w in sorted(graph[v]):
            if state.get(w) == 1:
                return stack[stack.index(w):] + [w]
            if w not in state and (found := visit(w)):
                return found
        stack.pop()
        state[v] = 2
        return None

    for v in sorted(graph):
        if v not in state and (found := visit(v)):
            return found
    return None


def test_the_graph_is_read():
    # the walk finds the layers it is about: a test over an empty graph would pass vacuously
    assert {"uneven.sqltree.build", "uneven.compiler.pipeline", "uneven.tables.base"} <= set(MODULES)
    assert "uneven.sqltree.build" in GRAPH["uneven.compiler.scope"][0]
    assert "uneven.compiler" in GRAPH["uneven.tables.base"][0]  # from uneven.compiler import compile_sql


def test_no_import_cycle():
    cycle = _cycle({m: edges for m, (edges, _) in GRAPH.items()})
    assert cycle is None, "import cycle: " + " → ".join(cycle)


def test_no_private_name_across_modules():
    uses = [u for _, (_, private) in sorted(GRAPH.items()) for u in private]
    assert uses == []


def test_sqltree_is_the_bottom_layer():
    # sqltree may use sqlglot, duckdb and uneven.errors, nothing of the compiler, catalog or engine
    for m, (edges, _) in GRAPH.items():
        if m.startswith("uneven.sqltree"):
            assert edges <= {n for n in MODULES if n.startswith("uneven.sqltree")} | {"uneven.errors"}, m


def test_bounds_is_below_the_compiler():
    for m, (edges, _) in GRAPH.items():
        if m.startswith("uneven.bounds"):
            assert not any(e.startswith(("uneven.compiler", "uneven.engine", "uneven.catalog")) for e in edges), m


@pytest.mark.parametrize("graph, expected", [
    ({"a": {"b"}, "b": {"c"}, "c": {"a"}}, ["a", "b", "c", "a"]),
    ({"a": {"b"}, "b": {"c"}, "c": set()}, None),
    ({"a": {"a"}}, ["a", "a"]),
])
def test_cycle_finder(graph, expected):
    # the finder itself, on graphs whose answer is known by hand
    assert _cycle(graph) == expected
