"""Ask DuckDB which columns a SELECT's FROM clause provides (for GROUP BY name resolution)."""

from __future__ import annotations

import duckdb
from sqlglot import exp


def duckdb_source_columns(con: duckdb.DuckDBPyConnection):
    """A ``source_columns`` callback for the compiler: runs ``SELECT * FROM <from> LIMIT 0``."""
    cache: dict[int, set[str] | None] = {}

    def columns(select: exp.Select) -> set[str] | None:
        if id(select) in cache:
            return cache[id(select)]
        from ineqsql.compiler.context import CompileContext
        from ineqsql.compiler.pipeline import compile_tree

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
            sql = compile_tree(probe, CompileContext()).sql("duckdb")
            names = {d[0].lower() for d in con.execute(sql).description}
        except Exception:  # the probe is a help, never a failure of its own: fall back to aliases
            names = None
        cache[id(select)] = names
        return names

    return columns
