"""Ask DuckDB whether an ordered pass's values repeat enough to group ties first (see compiler/plan.py).

Two probes, both built as sqlglot trees over the scope's own FROM, joins and WHERE:

1. the value's type, from ``SELECT x … LIMIT 0`` (free): only integer, decimal and boolean
   values are probed further; floating-point values rarely tie, and a count of their distinct
   values would cost a scan for nothing;
2. ``SELECT count(*), approx_count_distinct(hash(keys…, x)) … WHERE x IS NOT NULL [AND filter]``:
   one scan (about the cost of a GROUP BY over the groups, a tenth to a fifth of the sort the pass
   does) giving the share of distinct (keys, value) pairs.

A probe that fails (e.g. a source it cannot rebuild on its own) answers None: the planner then
keeps the plain variant. It is a help, never a failure of its own.
"""

from __future__ import annotations

import duckdb
from sqlglot import exp

from uneven.compiler.emit import to_sql
from uneven.sqltree import build as s

_TIE_PRONE = ("TINYINT", "SMALLINT", "INTEGER", "BIGINT", "HUGEINT", "UTINYINT", "USMALLINT", "UINTEGER",
              "UBIGINT", "UHUGEINT", "DECIMAL", "BOOLEAN")


def _over_source(select: exp.Select, projections: list[exp.Expression], condition=None) -> exp.Select:
    out = exp.Select(expressions=projections)
    for arg in ("from_", "joins", "laterals", "with_"):
        value = select.args.get(arg)
        if value:
            out.set(arg, [v.copy() for v in value] if isinstance(value, list) else value.copy())
    where = select.args.get("where")
    cond = s.and_(where.this.copy() if where else None, condition)
    if cond is not None:
        out.set("where", exp.Where(this=cond))
    return out


def is_tie_prone(type_name: object) -> bool:
    """Whether a column type (its name, or DuckDB's type object) is one whose values often tie."""
    return str(type_name).upper().split("(")[0] in _TIE_PRONE


def duckdb_tie_counts(con: duckdb.DuckDBPyConnection, select: exp.Select, x: exp.Expression, condition,
                      keys) -> tuple[int, int] | None:
    """(distinct (keys, x) pairs, rows) of an ordered pass's value, or None (engine/columns.DuckDBSchema)."""
    if select.args.get("from_") is None:
        return None
    try:
        typed = _over_source(select, [s.alias(x.copy(), "v")])
        typed.set("limit", exp.Limit(expression=exp.Literal.number(0)))
        kind = con.execute(to_sql(typed)).description[0][1]
        if not is_tie_prone(kind):
            return None
        cond = s.and_(s.paren(condition.copy()) if condition is not None else None, s.not_null(x.copy()))
        pairs = exp.ApproxDistinct(this=exp.Anonymous(this="hash", expressions=[k.copy() for k in keys] + [x.copy()]))
        counted = _over_source(select, [s.agg_count_star(), pairs], cond)
        counts = con.execute(to_sql(counted)).fetchone()
        if counts is None:
            return None
        rows, distinct = counts
    except Exception:  # noqa: BLE001  the probe never fails a query: keep the plain plan
        return None
    return int(distinct or 0), int(rows or 0)


def adapter_tie_counts(adapter, select: exp.Select, x: exp.Expression, condition, keys) -> tuple[int, int] | None:
    """The same probe for ``query(con=…)`` on another engine (engine/adapters): the value's type from the
    adapter's type probe, then ``SELECT count(*), sum(n) FROM (SELECT count(*) AS n … GROUP BY keys, x)``,
    an exact count of the distinct (keys, value) pairs in SQL every engine runs (PostgreSQL and SQLite
    have no approximate distinct count). SQLite keeps no column types, so there the count always runs
    (an in-process database: one GROUP BY). A probe that fails answers None, as on DuckDB."""
    if select.args.get("from_") is None:
        return None
    try:
        if adapter.dialect != "sqlite":
            types = adapter.argument_types(select, [x])
            if not types or not is_tie_prone(types[0]):
                return None
        cond = s.and_(s.paren(condition.copy()) if condition is not None else None, s.not_null(x.copy()))
        pairs = _over_source(select, [s.alias(s.agg_count_star(), "_uv_n")], cond)
        pairs.set("group", exp.Group(expressions=[k.copy() for k in keys] + [x.copy()]))
        counted = exp.select(s.agg_count_star(), exp.Sum(this=exp.column("_uv_n", quoted=True))).from_(
            exp.Subquery(this=pairs, alias=exp.TableAlias(this=exp.to_identifier("_uv_t"))))
        _, rows, _ = adapter.fetch(adapter.compile_probe(counted))
        distinct, total = rows[0]
    except Exception:  # noqa: BLE001  the probe never fails a query: keep the plain plan
        return None
    return int(distinct or 0), int(total or 0)
