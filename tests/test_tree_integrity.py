"""The compiled tree is a tree: every node stands in one place, and its ``parent`` is that place.

The compiler builds new nodes around shared leaves instead of deep-copying argument trees for every
use, and generation lowers the compiled tree in place (compiler/generate.py, ``copy=False``). Both
are safe only while no node object is placed in two parents: sqlglot re-parents a node on
assignment, and the dialect rules and the parenthesizing rule mutate nodes in place, so a node
standing in two places would be rewritten twice or walked up to the wrong parent. This test
compiles the golden inputs and a draw of the fuzzer's shapes for every target and checks both the
compiled tree and the lowered tree (after the dialect's rules and the parentheses) node by node.
"""

from __future__ import annotations

import random

import pytest
from sqlglot import exp

import uneven
from grammar import Grammar
from test_golden import GOLDEN, read_fixture
from uneven.compiler import generate as generate_module
from uneven.compiler.dialects import SUPPORTED_DIALECTS


def misplaced(tree: exp.Expression) -> list[str]:
    """Nodes seen twice, or whose parent / arg_key / index is not where they stand."""
    seen: set[int] = set()
    problems: list[str] = []
    stack = [tree]
    while stack:
        node = stack.pop()
        if id(node) in seen:
            problems.append(f"{type(node).__name__} placed twice: {node.sql('duckdb')[:80]}")
            continue
        seen.add(id(node))
        for key, value in node.args.items():
            children = value if isinstance(value, list) else [value]
            for i, child in enumerate(children):
                if not isinstance(child, exp.Expression):
                    continue
                if child.parent is not node or child.arg_key != key or (
                        isinstance(value, list) and child.index != i):
                    problems.append(f"{type(child).__name__} under {type(node).__name__}.{key} names another "
                                    f"parent: {child.sql('duckdb')[:80]}")
                stack.append(child)
    return problems


def _queries() -> list[str]:
    golden = [read_fixture(p)[0] for p in GOLDEN]
    g = Grammar(random.Random(4242), {"limit"}, wide_params=True, se_measures=True)
    return golden + [g.shape().sql() for _ in range(12)]


QUERIES = _queries()


@pytest.mark.parametrize("dialect", SUPPORTED_DIALECTS)
def test_compiled_and_lowered_trees_place_each_node_once(dialect, monkeypatch):
    original = generate_module.lower_tree
    checked = {"trees": 0}

    def checking_lower(tree, dialect_name="duckdb", copy=True):
        assert not misplaced(tree), misplaced(tree)[:3]
        lowered = original(tree, dialect_name, copy=copy)
        assert not misplaced(lowered), misplaced(lowered)[:3]
        checked["trees"] += 1
        return lowered

    monkeypatch.setattr(generate_module, "lower_tree", checking_lower)
    for query in QUERIES:
        try:
            uneven.compile(query, dialect=dialect)
        except uneven.UnevenError:
            continue  # refused for this target (named error): nothing was generated
    # every golden fixture compiles for every target but a few; the shapes mostly do too
    assert checked["trees"] >= len(QUERIES) // 2


def test_misplaced_finds_a_node_in_two_parents():
    # the checker itself: a column placed into a second parent is reported
    col = exp.column("x")
    first = exp.Add(this=col, expression=exp.Literal.number(1))
    second = exp.Mul(this=col, expression=exp.Literal.number(2))
    tree = exp.Select(expressions=[first, second])
    assert misplaced(tree)  # col's parent is now `second`, so under `first` it names another parent
    assert misplaced(exp.Select(expressions=[first.copy(), second.copy()])) == []
