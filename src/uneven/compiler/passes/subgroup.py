"""Subgroup pass: sums per (group, subgroup), then per group over its subgroups (GE decomposition).

rows CTE:   keys, W_g = Σw, T_g = Σw·x, min x, and the sums the measures register
            GROUP BY keys, subgroup      (NULL value, weight or subgroup dropped; w = 0 dropped)
result CTE: keys, one aggregate over the subgroup rows per measure call
No sort and no window: two hash aggregates.
"""

from __future__ import annotations

from sqlglot import exp

from uneven.catalog.spec import PassKind
from uneven.compiler.passes.columns import RowColumns
from uneven.compiler.passes.source import (
    Source,
    build_results,
    checked_values,
    cte,
    grouped,
)
from uneven.sqltree import build as s


class SubgroupContext(RowColumns):
    """Row-level ``x``, ``w``; subgroup-level ``Wg``, ``Tg`` and ``sub_sum(term)``; group-level
    ``W``, ``T``, ``min_x`` (aggregates over the subgroup rows)."""

    def __init__(self, weighted: bool):
        self.weighted = weighted
        self.sums: dict[str, tuple[str, exp.Expression]] = {}

    def sub_sum(self, term: exp.Expression) -> exp.Column:
        """Σ term over the rows of a subgroup: a column of the subgroup rows."""
        agg = s.agg_sum(term)
        key = agg.sql("duckdb")
        if key not in self.sums:
            self.sums[key] = (f"_uv_s{len(self.sums) + 1}", agg)
        return s.col(self.sums[key][0])

    @property
    def Wg(self):
        return self.sub_sum(self.w)

    @property
    def Tg(self):
        return self.sub_sum(s.mul(self.w, self.x))

    @property
    def W(self):
        return s.agg_sum(self.Wg)

    @property
    def T(self):
        return s.agg_sum(self.Tg)

    @property
    def min_x(self):
        key = "min"
        if key not in self.sums:
            self.sums[key] = ("_uv_mn", s.agg_min(self.x))
        return s.agg_min(s.col("_uv_mn"))


def lower_subgroup_pass(source: Source, main, plan, name: str) -> tuple[list[exp.CTE], dict[tuple, exp.Expression]]:
    """CTEs of one subgroup pass and, for each call key, the column that holds its result."""
    x, w, condition = plan.x, plan.trailing, plan.condition
    (subgroup,) = plan.columns
    ctx = SubgroupContext(weighted=w is not None)
    out_cols, results = build_results(plan.calls, ctx, name)

    proj, cond, _ = checked_values(source, [(x, "_uv_x")], w, condition,
                                   leading=[s.alias(subgroup, "_uv_g")], present=[subgroup])
    rows = source.rows(proj, cond)
    sub = exp.Select(expressions=source.key_columns() + [s.alias(e, n) for n, e in ctx.sums.values()])
    sub = sub.from_(exp.Subquery(this=rows, alias=exp.TableAlias(this=exp.to_identifier("_uv_r", quoted=True))))
    sub.set("group", exp.Group(expressions=source.key_columns() + [s.col("_uv_g")]))
    keys = source.key_columns()
    return [cte(sub, f"{name}_rows"), cte(grouped(keys, out_cols, f"{name}_rows"), name)], results


# the registry's entry (passes/registry.py)
KIND = PassKind.SUBGROUP
PREFIX = "sub"


def lower(source: Source, main, plan, name: str | None, settings) -> tuple[list[exp.CTE], dict]:
    assert name is not None  # a pass with a PREFIX is given its CTE name
    return lower_subgroup_pass(source, main, plan, name)
