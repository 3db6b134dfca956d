"""What DuckDB knows about a query's sources, for the compiler (compiler/context.EngineSchema): which
columns a SELECT's FROM clause provides (GROUP BY name resolution), what types measure arguments have
(compiler/types.py) and how often an ordered pass's values tie (engine/ties.py)."""

from __future__ import annotations

from collections.abc import Sequence

import duckdb
from sqlglot import exp

from uneven.compiler.emit import to_sql
from uneven.engine.groups import duckdb_group_counts
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


# pairs of different strings that a collation may compare equal: case, accents, Unicode normal forms
_DIFFERENT_STRINGS = (("a", "A"), ("e", "\u00e9"), ("\u00e9", "e\u0301"), ("a", "a "))


class DuckDBSchema:
    """The compiler's ``EngineSchema`` on a DuckDB connection, for one compilation (its column
    answers are cached by SELECT node). ``types`` and ``ties`` turn those probes off for a caller
    that compiles without them (the structure tables, the report); ``ties`` the data scans: the tie
    probe and the group-size probe."""

    def __init__(self, con: duckdb.DuckDBPyConnection, *, types: bool = True, ties: bool = True):
        self.con = con
        self.types = types
        self.probes_ties = ties
        self._columns: dict[int, set[str] | None] = {}
        self._types: dict[tuple, list[str] | None] = {}  # the planner's stream checks ask for the keys twice

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
        key = (id(select), tuple(e.sql("duckdb") for e in exprs))
        if key not in self._types:
            self._types[key] = self._probe_types(select, exprs)
        return self._types[key]

    def _probe_types(self, select: exp.Select, exprs: list[exp.Expression]) -> list[str] | None:
        projections = [s.alias(e.copy(), f"_uv_p{i + 1}") for i, e in enumerate(exprs)]
        probe = probe_select(select, projections)
        if probe is None:
            probe = exp.Select(expressions=[p.copy() for p in projections])
        try:
            rows = self.con.execute(exp.Describe(this=probe).sql("duckdb")).fetchall()
        except Exception:  # a help, never a failure of its own
            return None
        return [r[1] for r in rows] if len(rows) == len(exprs) else None

    def collated_keys(self, select: exp.Select, keys: list[exp.Expression]) -> str | None:
        """The first text group key (as SQL) whose comparisons make different strings equal (a collation,
        the key column's own or ``default_collation``), or None: GROUP BY then merges what the stream,
        which compares bytes, would keep apart. Read without data: a CASE keeps the key's collation."""
        if not keys:
            return None
        types = self.key_types(select, keys)
        if types is None:  # unknown types: only the session's collation can be read
            found = self.con.execute("SELECT current_setting('default_collation')").fetchone()
            return keys[0].sql("duckdb") if found and found[0] else None
        for key, kind in zip(keys, types):
            if kind.upper().startswith("VARCHAR") and self._merges_strings(select, key):
                return key.sql("duckdb")
        return None

    def _merges_strings(self, select: exp.Select, key: exp.Expression) -> bool:
        inner = probe_select(select, [s.alias(key.copy(), "_uv_p")])
        if inner is None:
            return False
        key_col = exp.column("_uv_p", "_uv_q")
        tests = [exp.EQ(this=exp.If(this=exp.Is(this=key_col.copy(), expression=exp.Null()),
                                    true=exp.Literal.string(a), false=key_col.copy()),
                        expression=exp.Literal.string(b)) for a, b in _DIFFERENT_STRINGS]
        probe = exp.select(exp.or_(*tests)).from_(exp.select("1").subquery("_uv_one")).join(
            inner.subquery("_uv_q"), on=exp.true(), join_type="left")
        sql = probe.sql("duckdb")
        try:
            found = self.con.execute(sql).fetchone()
        except Exception:  # a probe that cannot run: assume the worst, the window plan is always right
            return True
        return bool(found and found[0])

    def tie_counts(self, select: exp.Select, x: exp.Expression, condition: exp.Expression | None,
                   keys: list[exp.Expression]) -> tuple[int, int] | None:
        return duckdb_tie_counts(self.con, select, x, condition, keys) if self.probes_ties else None

    def group_counts(self, select: exp.Select, keys: list[exp.Expression], x: exp.Expression,
                     condition: exp.Expression | None) -> tuple[int, int] | None:
        """(about how many groups, rows) of an ordered pass (compiler/group_sizes.py; engine/groups.py)."""
        return duckdb_group_counts(self.con, select, keys, x, condition) if self.probes_ties else None
