"""Resolve a scope's GROUP BY into key expressions: positions, select aliases and GROUP BY ALL."""

from __future__ import annotations

from sqlglot import exp

from uneven.compiler.calls import is_aggregate, is_measure
from uneven.compiler.context import CompileContext
from uneven.errors import UnsupportedSqlError
from uneven.sqltree.grouping import reads_source_column


def _aggregated(e: exp.Expr) -> bool:
    return any(is_measure(n) or is_aggregate(n) for n in e.walk())


def resolve_group_keys(select: exp.Select, ctx: CompileContext) -> list[exp.Expression]:
    """The GROUP BY expressions as written against the FROM clause, in order."""
    group = select.args.get("group")
    if group is None:
        return []
    for arg in ("grouping_sets", "cube", "rollup", "totals"):
        if group.args.get(arg):
            raise ctx.error(UnsupportedSqlError, "GROUP BY ROLLUP / CUBE / GROUPING SETS cannot be combined "
                            "with measure calls yet; use one query per grouping", group)
    projections = select.expressions
    if group.args.get("all"):
        return [p.unalias().copy() for p in projections if not _aggregated(p) and reads_source_column(p)]
    aliases = {p.alias_or_name: p.unalias() for p in projections if isinstance(p, exp.Alias)}
    keys = []
    for e in group.expressions:
        if isinstance(e, (exp.Rollup, exp.Cube, exp.GroupingSets)):
            raise ctx.error(UnsupportedSqlError, "GROUP BY ROLLUP / CUBE / GROUPING SETS cannot be combined "
                            "with measure calls yet; use one query per grouping", e)
        if isinstance(e, exp.Literal) and not e.is_string:
            pos = int(e.this)
            if not 1 <= pos <= len(projections):
                raise ctx.error(UnsupportedSqlError, f"GROUP BY position {pos} is not in the select list "
                                f"(it has {len(projections)} items)", e)
            target = projections[pos - 1].unalias()
            if _aggregated(target):
                raise ctx.error(UnsupportedSqlError, f"GROUP BY {pos} refers to an aggregate", e)
            keys.append(target.copy())
        elif isinstance(e, exp.Column) and not e.table and e.name in aliases \
                and not (isinstance(aliases[e.name], exp.Column) and aliases[e.name].name == e.name) \
                and not _is_source_column(select, e.name, ctx):
            # a select alias (DuckDB allows GROUP BY alias); the aliased expression is the key
            if _aggregated(aliases[e.name]):
                raise ctx.error(UnsupportedSqlError, f"GROUP BY {e.name} refers to an aggregate", e)
            keys.append(aliases[e.name].copy())
        else:
            keys.append(e.copy())
    return keys


def same_key(node: exp.Expression, key: exp.Expression) -> bool:
    """Structural equality, letting an unqualified column match a qualified one of the same name."""
    if node == key:
        return True
    if isinstance(node, exp.Column) and isinstance(key, exp.Column) and node.name == key.name:
        return not node.table or not key.table or node.table == key.table
    return False


def _is_source_column(select: exp.Select, name: str, ctx: CompileContext) -> bool:
    """DuckDB binds a GROUP BY name to a column of the FROM clause before a select alias. Without an
    engine to ask (``compile`` alone) the columns are unknown and the alias is taken."""
    if ctx.engine is None:
        return False
    columns = ctx.engine.source_columns(select)
    return columns is not None and name.lower() in columns
