"""Ranked pass: values summed per tie group of a ranking variable, then a running weight over the
tie groups (concentration indices, Kakwani, Reynolds–Smolensky).

rows CTE:   keys, r (the ranking value), W_g = Σw and Σw·v for each value v, per tie group
            GROUP BY keys, r     (rows with any NULL argument or NULL/zero weight dropped)
window CTE: … , c = running Σ W_g over the tie groups in order of r (ROWS frame: r is unique
            within a group here, so every tie group gets its cumulative weight)
result CTE: keys, one aggregate per measure call

Grouping by the ranking value first gives every row of a tie group the same fractional rank, the
mid-rank (weight strictly below + half the tie group's weight) / W, without a RANGE frame.
"""

from __future__ import annotations

from sqlglot import exp

from uneven.catalog.spec import PassKind
from uneven.compiler.passes.source import (
    Source,
    build_results,
    checked_values,
    cte,
    grouped,
    table,
)
from uneven.sqltree import build as s


class RankedContext:
    """Tie-group columns: ``Wg``, ``c`` (cumulative weight to the end of the tie group) and
    ``total(i)`` = Σ w·v_i of value i (0: the ranking variable, 1…: the other column arguments);
    group aggregates ``W``, ``T(i)``, ``vmin(i)``, ``vmax(i)`` and ``conc(i)``."""

    def __init__(self, weighted: bool, nvalues: int):
        self.weighted = weighted
        self.nvalues = nvalues
        self.sums: dict[str, tuple[str, exp.Expression]] = {}

    def value(self, i: int) -> exp.Expression:
        return s.col(f"_uv_v{i}")

    @property
    def w(self):
        return s.col("_uv_w") if self.weighted else s.lit(1.0)

    def _register(self, agg: exp.Expression) -> exp.Column:
        key = agg.sql("duckdb")
        if key not in self.sums:
            self.sums[key] = (f"_uv_s{len(self.sums) + 1}", agg)
        return s.col(self.sums[key][0])

    def total(self, i: int) -> exp.Column:
        return self._register(s.agg_sum(s.mul(self.w, self.value(i))))

    @property
    def Wg(self):
        return self._register(s.agg_sum(self.w))

    @property
    def c(self):
        return s.col("_uv_c")

    @property
    def W(self):
        return s.agg_sum(self.Wg)

    def T(self, i: int):
        return s.agg_sum(self.total(i))

    def vmin(self, i: int):
        return s.agg_min(self._register(s.agg_min(self.value(i))))

    def vmax(self, i: int):
        return s.agg_max(self._register(s.agg_max(self.value(i))))

    def conc(self, i: int, gini: bool = False) -> exp.Expression:
        """Concentration index of value i: Σ_g Y_g (2c_g − W_g − W) / (W · T_i) (equals Σ w y (2R − 1) / T
        with R the mid-rank fractional rank); NULL when T_i = 0, or T_i ≤ 0 with ``gini`` (value i
        ranked by itself is its Gini, whose contract asks T > 0)."""
        y = self.total(i)
        num = s.sub(s.agg_sum(s.mul(y, s.sub(s.mul(s.lit(2.0), self.c), self.Wg))), s.mul(self.W, s.agg_sum(y.copy())))
        defined = s.gt(self.T(i), s.lit(0.0)) if gini else s.neq(self.T(i), s.lit(0.0))
        return s.case(defined, s.div(num, s.mul(self.W, self.T(i))))


def ranked_rows(source: Source, plan, names: list[str]) -> tuple[list[exp.Expression], exp.Expression,
                                                                   exp.Expression]:
    """(projections, row condition, kept) of the ranked pass's rows, on the window plan and the stream
    (passes/stream_ranked.py): the keys, each value argument (the ranking value first) checked as every
    pass checks its values — NaN or ±infinity stops the query with the input policy's error naming the
    group (docs/input-policy.md) — under ``names``, the checked weight as ``_uv_w``; ``kept`` the FILTER
    and every value present, the row condition ``kept`` and the weight > 0."""
    return checked_values(source, list(zip([plan.x, *plan.columns], names)), plan.trailing, plan.condition)


def lower_ranked_pass(source: Source, main, plan, name: str) -> tuple[list[exp.CTE], dict[tuple, exp.Expression]]:
    """CTEs of one ranked pass and, for each call key, the column that holds its result."""
    values = [plan.x, *plan.columns]
    ctx = RankedContext(weighted=plan.trailing is not None, nvalues=len(values))
    ctx.Wg  # every pass needs the tie-group weight for the running sum
    out_cols, results = build_results(plan.calls, ctx, name)

    proj, cond, _ = ranked_rows(source, plan, [f"_uv_v{i}" for i in range(len(values))])
    rows = source.rows(proj, cond)
    keys = source.key_columns()
    ties = exp.Select(expressions=keys + [s.col("_uv_v0")] + [s.alias(e, n) for n, e in ctx.sums.values()])
    ties = ties.from_(exp.Subquery(this=rows, alias=exp.TableAlias(this=exp.to_identifier("_uv_r", quoted=True))))
    ties.set("group", exp.Group(expressions=[k.copy() for k in keys] + [s.col("_uv_v0")]))

    wg = ctx.Wg.name
    running = s.window(s.agg_sum(s.col(wg)), [k.copy() for k in keys], [s.col("_uv_v0")], running=True)
    win = exp.Select(expressions=[k.copy() for k in keys] + [s.col(n) for n, _ in ctx.sums.values()]
                     + [s.alias(running, "_uv_c")]).from_(table(f"{name}_rows"), copy=False)
    ctes = [cte(ties, f"{name}_rows"), cte(win, f"{name}_win"), cte(grouped(keys, out_cols, f"{name}_win"), name)]
    return ctes, results


# the registry's entry (passes/registry.py)
KIND = PassKind.RANKED
PREFIX = "rnk"


def lower(source: Source, main, plan, name: str | None, settings) -> tuple[list[exp.CTE], dict]:
    assert name is not None  # a pass with a PREFIX is given its CTE name
    return lower_ranked_pass(source, main, plan, name)
