"""The emission invariant as a test helper: SQL we emit, parsed back with its dialect, gives the tree
we built (src/uneven/compiler/emit.py has the rule and the comparison).

    assert_faithful("SELECT g, gini(x) FROM t WHERE a OR b GROUP BY g", "sqlite")  # a query
    assert_faithful(tree, "postgres")                                             # a tree we built

The normalisation: the emitted text and a fully parenthesized rendering of the same tree (every
operand of an operator wrapped, right whatever the precedence rules) are both parsed with the
dialect, exp.Paren nodes are dropped from both, and the two trees must be equal. Both texts come
from the same generator, so a dialect's own rewrites appear on both sides and only a lost grouping
makes them differ.
"""

from __future__ import annotations

import os
from contextlib import contextmanager

from sqlglot import exp

import uneven
from uneven.compiler import emit
from uneven.compiler.generate import SUPPORTED_DIALECTS, generate, lower_tree

DIALECTS = tuple(SUPPORTED_DIALECTS)  # duckdb, postgres, spark, sqlite, trino, bigquery, snowflake


@contextmanager
def emission_checked():
    """Every compile inside the block checks its emitted text (UNEVEN_CHECK_EMISSION=1)."""
    before = os.environ.get("UNEVEN_CHECK_EMISSION")
    os.environ["UNEVEN_CHECK_EMISSION"] = "1"
    try:
        yield
    finally:
        if before is None:
            del os.environ["UNEVEN_CHECK_EMISSION"]
        else:
            os.environ["UNEVEN_CHECK_EMISSION"] = before


def assert_faithful(tree_or_sql: exp.Expression | str, dialect: str = "duckdb", **compile_options) -> str:
    """Emit ``tree_or_sql`` for ``dialect`` and fail when the text loses the tree's grouping; returns
    the text. A string is a query with measure calls, compiled with ``uneven.compile(**compile_options)``
    (read, method, strict …); a tree is printed as ``generate`` prints compiled trees."""
    if isinstance(tree_or_sql, str):
        with emission_checked():
            return uneven.compile(tree_or_sql, dialect=dialect, **compile_options)
    text = generate(tree_or_sql, dialect)
    lowered = lower_tree(tree_or_sql, dialect)
    key = (dialect, text, lowered)  # a tree hashes and compares by its structure
    if key not in _FAITHFUL:
        err = emit.emission_error(lowered, text, dialect)
        assert err is None, err
        _FAITHFUL.add(key)
    return text


# (dialect, text, lowered tree) found faithful: the same tree printed the same way is checked once
# per run (tests print one tree for several purposes, e.g. checked alone and then executed)
_FAITHFUL: set = set()
