"""Entity pass: values summed per entity (or each row its own entity), ranked largest first.

rows CTE:   keys, v (an entity's total)       (NULL values and NULL entities dropped)
rank CTE:   … , r = row_number by v descending (only when a measure needs ranks)
result CTE: keys, one aggregate per measure call
"""

from __future__ import annotations

from sqlglot import exp

from uneven.catalog.spec import PassKind
from uneven.compiler.passes.source import Source, build_results, cte, grouped, table, valid_value
from uneven.sqltree import build as s


class EntityContext:
    def __init__(self):
        self.used: set[str] = set()

    @property
    def v(self):
        return s.col("_uv_v")

    @property
    def r(self):
        self.used.add("r")
        return s.col("_uv_r")


def lower_entity_pass(source: Source, main, plan, name: str) -> tuple[list[exp.CTE], dict[tuple, exp.Expression]]:
    """CTEs of one entity pass and, for each call key, the column that holds its result."""
    x, entity, calls, condition = plan.x, plan.trailing, plan.calls, plan.condition
    ctx = EntityContext()
    out_cols, results = build_results(calls, ctx, name)

    cond = s.and_(s.paren(condition.copy()) if condition is not None else None, valid_value(x, source.keys))
    if entity is None:
        rows = source.rows(source.key_projections() + [s.alias(s.cast_double(x.copy()), "_uv_v")], cond)
    else:
        cond = s.and_(cond, s.not_null(entity.copy()))
        total = s.agg_sum(s.cast_double(x.copy()))
        rows = source.rows(source.key_projections() + [s.alias(total, "_uv_v")], cond,
                           group_by=[k.copy() for k in source.keys] + [entity.copy()])
    keys = source.key_columns()
    ctes = [cte(rows, f"{name}_rows")]
    below = f"{name}_rows"
    if "r" in ctx.used:
        rank = s.window(exp.RowNumber(), [k.copy() for k in keys], [exp.Ordered(this=s.col("_uv_v"), desc=True)])
        ranked = exp.Select(expressions=[k.copy() for k in keys] + [s.col("_uv_v"), s.alias(rank, "_uv_r")])
        ctes.append(cte(ranked.from_(table(below)), f"{name}_rank"))
        below = f"{name}_rank"
    final = grouped(keys, out_cols, below)
    ctes.append(cte(final, name))
    return ctes, results


# the registry's entry (passes/registry.py)
KIND = PassKind.ENTITY
PREFIX = "ent"


def lower(source: Source, main, plan, name: str | None, settings) -> tuple[list[exp.CTE], dict]:
    assert name is not None  # a pass with a PREFIX is given its CTE name
    return lower_entity_pass(source, main, plan, name)
