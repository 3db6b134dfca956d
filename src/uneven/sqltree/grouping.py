"""Which select items GROUP BY ALL groups by, as DuckDB reads it."""

from __future__ import annotations

from sqlglot import exp


def scope_columns(part: exp.Expression):
    """The column references of ``part`` that belong to its own scope (none inside a subquery)."""
    for node in part.walk(prune=lambda n: isinstance(n, (exp.Select, exp.Subquery)) and n is not part):
        if isinstance(node, exp.Column) and not isinstance(node.this, exp.Star):
            yield node


def reads_source_column(item: exp.Expression) -> bool:
    """True when the select item reads a column of its own FROM (outside any subquery).

    DuckDB's GROUP BY ALL leaves out items that read no column (``'b' AS k``, ``1 + 1``, ``random()``,
    ``(SELECT 1)``): a query whose other items are aggregates is then a whole-input aggregate, one row
    even over no rows. Checked against DuckDB in tests/test_group_by_all.py."""
    return next(scope_columns(item), None) is not None
