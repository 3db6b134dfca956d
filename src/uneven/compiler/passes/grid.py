"""Lorenz points on a grid of k+1 fractions, from the ordered pass's window rows in one hash
aggregate whatever k (instead of k+1 clamped sums on every row).

cells CTE: per group and cell u = ceil(k·C_i/W) (the grid cell where row i's running weight ends):
           s_u = Σ w·x, c_u = max C, x_u = min x.
grid CTE:  per group, for j = 0..k with p = j/k:
           L(p)·T = Σ_{u ≤ j} s_u + (p·W − max_{u ≤ j} c_u) · min_{u > j} x_u

Why: rows are sorted by x, so u never decreases along them. The rows with u ≤ j are exactly those
with C_i ≤ p·W; they hold Σ_{u ≤ j} s_u. The row that crosses p·W is the first row with u > j: its
value is min_{u > j} x_u and it starts at C = max_{u ≤ j} c_u, so it adds (p·W − that)·x. A row
put in a neighbouring cell by rounding of k·C_i/W changes the sum by (rounding of C) × (gap to the
next value): negligible. W = the largest C, T = Σ s_u.
"""

from __future__ import annotations

from sqlglot import exp

from uneven.compiler.passes.source import cte, finite_or_null, table
from uneven.sqltree import build as s


def grid_table(name: str, k: int) -> str:
    return f"{name}_grid_{k}"


def lower_lorenz_grid(ctx, keys: list[exp.Expression], name: str, k: int) -> list[exp.CTE]:
    """The cells and grid CTEs of one k, reading the window CTE ``{name}_win``."""
    cell = exp.Ceil(this=s.div(s.mul(ctx.c, s.lit(float(k))), ctx.W_row))
    cells = exp.Select(expressions=[k_.copy() for k_ in keys] + [
        s.alias(cell, "_uv_u"),
        s.alias(s.agg_sum(s.mul(ctx.w, ctx.x)), "_uv_s"),
        s.alias(s.agg_max(ctx.c), "_uv_cmax"),
        s.alias(s.agg_min(ctx.x), "_uv_xmin"),
    ]).from_(table(f"{name}_win"))
    cells.set("group", exp.Group(expressions=[k_.copy() for k_ in keys] + [cell.copy()]))

    u, zero = s.col("_uv_u"), s.lit(0.0)
    total_w, total_t = s.agg_max(s.col("_uv_cmax")), s.agg_sum(s.col("_uv_s"))

    def upto(agg, col, j):  # agg(col) over cells u ≤ j, 0 when there are none
        return exp.Coalesce(this=agg(s.case(s.lte(u.copy(), s.lit(j)), s.col(col))), expressions=[zero.copy()])

    points = []
    for j in range(k + 1):
        p = j / k
        after = exp.Coalesce(this=s.agg_min(s.case(s.gt(u.copy(), s.lit(j)), s.col("_uv_xmin"))),
                             expressions=[zero.copy()])
        crossing = s.mul(s.sub(s.mul(s.lit(p), total_w.copy()), upto(s.agg_max, "_uv_cmax", j)), after)
        held = s.add(upto(s.agg_sum, "_uv_s", j), crossing)
        points.append(s.struct(p=s.lit(p), lorenz=s.cast_double(s.div(held, total_t.copy()))))
    curve = s.case(s.gt(finite_or_null(total_t), zero.copy()), s.array(*points))
    grid = exp.Select(expressions=[k_.copy() for k_ in keys] + [s.alias(curve, "_uv_curve")]).from_(
        table(f"{name}_cells_{k}"))
    if keys:
        grid.set("group", exp.Group(expressions=[k_.copy() for k_ in keys]))
    return [cte(cells, f"{name}_cells_{k}"), cte(grid, grid_table(name, k))]
