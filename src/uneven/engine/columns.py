"""What DuckDB knows about a query's sources, for the compiler (compiler/context.EngineSchema): which
columns a SELECT's FROM clause provides (GROUP BY name resolution), what types measure arguments have
(compiler/types.py) and how often an ordered pass's values tie (engine/ties.py)."""

from __future__ import annotations

from collections.abc import Sequence

import duckdb
from sqlglot import exp

from uneven.compiler.emit import to_sql
from uneven.engine.ties import duckdb_tie_counts
from uneven.sqltree import build as s


def probe_select(select: exp.Select, projections: Sequence[exp.Expression], limit: bool = True) -> exp.Select | None:
    """SELECT projections FROM <select's FROM, joins, laterals, WITH> [LIMIT 0] (None without FROM);
    the column and type probes of every engine (engine/adapters) build on it."""
    probe = exp.Select(expressions=list(projections))
    for arg in ("from_", "joins", "laterals", "with_"):
        value = select.args.get(arg)
        if value:
            probe.set(arg, [v.copy() for v in value] if isinstance(value, list) else value.copy())
    if probe.args.get("from_") is None:
        return None
    if limit:
        probe.set("limit", exp.Limit(expression=exp.Literal.number(0)))
    return probe


class DuckDBSchema:
    """The compiler's ``EngineSchema`` on a DuckDB connection, for one compilation (its column
    answers are cached by SELECT node). ``types`` and ``ties`` turn those probes off for a caller
    that compiles without them (the structure tables, the report)."""

    def __init__(self, con: duckdb.DuckDBPyConnection, *, types: bool = True, ties: bool = True):
        self.con = con
        self.types = types
        self.probes_ties = ties
        self._columns: dict[int, set[str] | None] = {}

    def source_columns(self, select: exp.Select) -> set[str] | None:
        """Runs ``SELECT * FROM <from> LIMIT 0``; None when it cannot (then aliases are taken)."""
        if id(select) not in self._columns:
            self._columns[id(select)] = self._probe_columns(select)
        return self._columns[id(select)]

    def _probe_columns(self, select: exp.Select) -> set[str] | None:
        from uneven.compiler.context import CompileContext
        from uneven.compiler.pipeline import compile_tree

        probe = probe_select(select, [exp.Star()])
        if probe is None:
            return set()
        try:
            sql = to_sql(compile_tree(probe, CompileContext()))
            return {d[0].lower() for d in self.con.execute(sql).description}
        except Exception:  # the probe is a help, never a failure of its own: fall back to aliases
            return None

    def expression_types(self, select: exp.Select, exprs: list[exp.Expression]) -> list[str] | None:
        """DESCRIBE of ``SELECT exprs FROM <from> LIMIT 0``; None when the probe cannot run (then the
        compiled SQL's own CAST decides)."""
        if not self.types:
            return None
        return self.key_types(select, exprs)

    def key_types(self, select: exp.Select, exprs: list[exp.Expression]) -> list[str] | None:
        """The same probe whatever ``types`` says: the stream plan's direct form reads the group keys'
        types (compiler/direct.py), for query and explain alike."""
        if not exprs:
            return []
        projections = [s.alias(e.copy(), f"_uv_p{i + 1}") for i, e in enumerate(exprs)]
        probe = probe_select(select, projections)
        if probe is None:
            probe = exp.Select(expressions=[p.copy() for p in projections])
        try:
            rows = self.con.execute(exp.Describe(this=probe).sql("duckdb")).fetchall()
        except Exception:  # a help, never a failure of its own
            return None
        return [r[1] for r in rows] if len(rows) == len(exprs) else None

    def tie_counts(self, select: exp.Select, x: exp.Expression, condition: exp.Expression | None,
                   keys: list[exp.Expression]) -> tuple[int, int] | None:
        return duckdb_tie_counts(self.con, select, x, condition, keys) if self.probes_ties else None
