"""Which select items GROUP BY ALL groups by, as DuckDB reads it."""

from __future__ import annotations

from sqlglot import exp


def reads_source_column(item: exp.Expression) -> bool:
    """True when the select item reads a column of its own FROM (outside any subquery).

    DuckDB's GROUP BY ALL leaves out items that read no column (``'b' AS k``, ``1 + 1``, ``random()``,
    ``(SELECT 1)``): a query whose other items are aggregates is then a whole-input aggregate, one row
    even over no rows. Checked against DuckDB in tests/test_group_by_all.py."""
    for node in item.walk(prune=lambda n: isinstance(n, (exp.Subquery, exp.Select)) and n is not item):
        if isinstance(node, exp.Column) and not isinstance(node.this, exp.Star):
            return True
    return False
