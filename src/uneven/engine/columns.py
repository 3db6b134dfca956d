"""Ask DuckDB which columns a SELECT's FROM clause provides (for GROUP BY name resolution) and
what types measure arguments have (for compiler/types.py)."""

from __future__ import annotations

import duckdb
from sqlglot import exp

from uneven.compiler.emit import to_sql


def duckdb_source_columns(con: duckdb.DuckDBPyConnection):
    """A ``source_columns`` callback for the compiler: runs ``SELECT * FROM <from> LIMIT 0``."""
    cache: dict[int, set[str] | None] = {}

    def columns(select: exp.Select) -> set[str] | None:
        if id(select) in cache:
            return cache[id(select)]
        from uneven.compiler.context import CompileContext
        from uneven.compiler.pipeline import compile_tree

        probe = exp.Select(expressions=[exp.Star()])
        for arg in ("from_", "joins", "laterals", "with_"):
            value = select.args.get(arg)
            if value:
                probe.set(arg, [v.copy() for v in value] if isinstance(value, list) else value.copy())
        if probe.args.get("from_") is None:
            cache[id(select)] = set()
            return cache[id(select)]
        probe.set("limit", exp.Limit(expression=exp.Literal.number(0)))
        try:
            sql = to_sql(compile_tree(probe, CompileContext()))
            names = {d[0].lower() for d in con.execute(sql).description}
        except Exception:  # the probe is a help, never a failure of its own: fall back to aliases
            names = None
        cache[id(select)] = names
        return names

    return columns


def probe_select(select: exp.Select, projections: list[exp.Expression], limit: bool = True) -> exp.Select | None:
    """SELECT projections FROM <select's FROM, joins, laterals, WITH> [LIMIT 0] (None without FROM);
    the column and type probes of every engine (engine/adapters) build on it."""
    probe = exp.Select(expressions=projections)
    for arg in ("from_", "joins", "laterals", "with_"):
        value = select.args.get(arg)
        if value:
            probe.set(arg, [v.copy() for v in value] if isinstance(value, list) else value.copy())
    if probe.args.get("from_") is None:
        return None
    if limit:
        probe.set("limit", exp.Limit(expression=exp.Literal.number(0)))
    return probe


def duckdb_expression_types(con: duckdb.DuckDBPyConnection):
    """An ``expression_types`` callback: DESCRIBE of ``SELECT exprs FROM <from> LIMIT 0``; None when
    the probe cannot run (then the compiled SQL's own CAST decides)."""

    def types(select: exp.Select, exprs: list[exp.Expression]) -> list[str] | None:
        if not exprs:
            return []
        probe = probe_select(select, [exp.alias_(e.copy(), f"_uv_p{i + 1}", quoted=True) for i, e in enumerate(exprs)])
        if probe is None:
            probe = exp.Select(expressions=[exp.alias_(e.copy(), f"_uv_p{i + 1}", quoted=True)
                                            for i, e in enumerate(exprs)])
        try:
            rows = con.execute(exp.Describe(this=probe).sql("duckdb")).fetchall()
        except Exception:  # a help, never a failure of its own
            return None
        return [r[1] for r in rows] if len(rows) == len(exprs) else None

    return types
