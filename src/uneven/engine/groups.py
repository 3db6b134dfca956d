"""Ask DuckDB how many rows an ordered pass's groups hold on average (compiler/group_sizes.py).

One scan over the scope's own FROM, joins and WHERE, the pass's FILTER and its value not NULL:
``SELECT count(*), approx_count_distinct(hash(keys…))``: the rows the pass reads and about how many
groups they fall in (HyperLogLog, a few per cent off: enough to tell groups of a few rows from groups
of thousands). Asked only where uneven runs the query on DuckDB itself and the answer may change the
plan. A probe that fails answers None: the planner then keeps the plan it would take without it.
"""

from __future__ import annotations

import duckdb
from sqlglot import exp

from uneven.compiler.emit import to_sql
from uneven.sqltree import build as s


def duckdb_group_counts(con: duckdb.DuckDBPyConnection, select: exp.Select, keys: list[exp.Expression],
                        x: exp.Expression, condition: exp.Expression | None) -> tuple[int, int] | None:
    """(about how many groups, rows) of the pass's rows, or None (no keys, no FROM, a probe that fails)."""
    if not keys:
        return None
    groups = exp.ApproxDistinct(this=exp.Anonymous(this="hash", expressions=[k.copy() for k in keys]))
    if select.args.get("from_") is None:
        return None
    probe = exp.Select(expressions=[s.agg_count_star(), groups])
    for arg in ("from_", "joins", "laterals", "with_"):
        value = select.args.get(arg)
        if value:
            probe.set(arg, [v.copy() for v in value] if isinstance(value, list) else value.copy())
    where = select.args.get("where")
    cond = s.and_(where.this.copy() if where else None,
                  s.and_(s.paren(condition.copy()) if condition is not None else None, s.not_null(x.copy())))
    probe.set("where", exp.Where(this=cond))
    try:
        found = con.execute(to_sql(probe)).fetchone()
    except Exception:  # noqa: BLE001  the probe never fails a query: keep the plan chosen without it
        return None
    if found is None:
        return None
    rows, distinct = found
    return int(distinct or 0), int(rows or 0)
