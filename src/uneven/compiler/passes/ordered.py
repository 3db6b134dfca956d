"""Ordered pass: per group, rows sorted by value with running weight C_i, then one GROUP BY.

rows CTE:   keys, x, w                     (NULL x or weight, and zero weights, dropped)
ties CTE:   keys, x, w = Σ w (or the row count), n = row count   GROUP BY keys, x
            (only in the "ties" variant the planner picks when values repeat: see plan.py)
window CTE: … , C (running weight), m (group minimum), W (group weight), μ (group mean)
            (only the columns the measures use; C and m share one window specification, W and μ
            are partition totals)
result CTE: keys, one aggregate per measure call
grid CTEs:  Lorenz points on a grid (lorenz_curve), from the window rows (see grid.py)
"""

from __future__ import annotations

from sqlglot import exp

from uneven.catalog.spec import PassKind
from uneven.compiler.passes.columns import SortedColumns
from uneven.compiler.passes.grid import grid_table, lower_lorenz_grid
from uneven.compiler.passes.line import window_ctes
from uneven.compiler.passes.source import (
    Source,
    build_results,
    checked_rows,
    cte,
    finite_or_null,
    grouped,
    key_name,
    table,
)
from uneven.sqltree import build as s


class OrderedContext(SortedColumns):
    """Columns of the window CTE that measure builders write against (see catalog/ordered.py)."""

    def __init__(self, weighted: bool, name: str = "_uv_ord", ties: bool = False):
        # ties: one row per distinct value carrying its total weight (and row count), so even an
        # unweighted pass reads a weight column and a running weight sum
        self.weighted = weighted or ties
        self.ties = ties
        self.name = name
        self.used: set[str] = set()
        self.grids: list[int] = []

    def lorenz_grid(self, k: int) -> exp.Column:
        """The column holding [(p, L(p)) for p = 0, 1/k, …, 1] per group (see passes/grid.py)."""
        self.c, self.W_row  # the grid reads both from the window CTE
        if k not in self.grids:
            self.grids.append(k)
        return s.col("_uv_curve", grid_table(self.name, k))

    @property
    def mu(self):
        """The group mean T/W on every row (partition totals): lets centred measures (cv, hoover)
        ride on this pass instead of a second scan joined to the group means (plan.fuse_centred)."""
        self.used.add("mu")
        return s.col("_uv_mu")

    row_mean = True  # r = x/μ at row level: the log and power measures take their cancellation-free form

    @property
    def r(self):
        """x/μ on every row. Where the group's T ≤ 0 the measures are NULL by their domain test,
        whatever this gives (engines that raise on x/0 get NULLIF from their dialect rules)."""
        return s.div(s.col("_uv_x"), self.mu)

    @property
    def mu_divisor(self):
        return self.mu

    def sum(self, term: exp.Expression) -> exp.Expression:
        """Σ term over the group's rows (they are all valid here), for centred measures."""
        return s.agg_sum(term)

    @property
    def min_x(self):
        return s.agg_min(s.col("_uv_x"))

    @property
    def W(self):
        return s.agg_sum(s.col("_uv_w")) if self.weighted else s.cast_double(s.agg_count_star())

    @property
    def T(self):
        return finite_or_null(s.agg_sum(s.mul(self.w, self.x)))

    @property
    def n(self):
        if self.ties:
            self.used.add("n")
            return s.agg_sum(s.col("_uv_n"))
        return s.agg_count_star()


def _window_columns(ctx: OrderedContext, keys: list[exp.Expression],
                    minimum: exp.Select | None) -> list[exp.Expression]:
    x, w = s.col("_uv_x"), ctx.w
    part = lambda: [k.copy() for k in keys]  # noqa: E731
    cols: list[exp.Expression] = []
    if "c" in ctx.used:
        running = (s.window(s.agg_sum(w.copy()), part(), [x.copy()], running=True) if ctx.weighted
                   else s.window(exp.RowNumber(), part(), [x.copy()]))
        cols.append(s.alias(running, "_uv_c"))
    if "min" in ctx.used:
        first: exp.Expression
        if keys:
            # the partition minimum over the whole frame, in the same specification as C: DuckDB
            # computes it once per partition (FIRST_VALUE over the running frame cost about ten
            # times as much: bench/README.md)
            first = s.window(s.agg_min(x.copy()), part(), [x.copy()], whole=True)
        else:
            # one group: a scalar subquery over the same rows is cheaper than a second window
            # expression (which the window operator must carry through its sort and spills)
            first = exp.Subquery(this=minimum)
        cols.append(s.alias(first, "_uv_m"))
    if "wt" in ctx.used:
        total = (s.window(s.agg_sum(w.copy()), part()) if ctx.weighted
                 else s.cast_double(s.window(s.agg_count_star(), part())))
        cols.append(s.alias(total, "_uv_wt"))
    if "mu" in ctx.used:
        # Σ w·x / Σ w over the partition; only planned with group keys (plan.fuse_centred)
        wx = s.mul(w.copy(), x.copy()) if ctx.weighted else x.copy()
        total = (s.window(s.agg_sum(w.copy()), part()) if ctx.weighted
                 else s.cast_double(s.window(s.agg_count_star(), part())))
        cols.append(s.alias(s.div(s.window(s.agg_sum(wx), part()), total), "_uv_mu"))
    return cols


def tie_rows(keys: list[exp.Expression], weighted: bool, with_count: bool, below: str) -> exp.Select:
    """One row per group and distinct value: its total weight (the row count when unweighted).

    Exact for every measure of the pass: over a run of tied values the running weight only
    matters through its ends (e.g. Σ w_i (2C_i − w_i) = C_last² − C_before² for Gini; a clamp over
    the run adds up to one clamp of the run's total weight), so the run can be one row.
    """
    total = s.agg_sum(s.col("_uv_w")) if weighted else s.cast_double(s.agg_count_star())
    cols = [s.alias(total, "_uv_w")] + ([s.alias(s.agg_count_star(), "_uv_n")] if with_count else [])
    group = [k.copy() for k in keys] + [s.col("_uv_x")]
    out = exp.Select(expressions=[k.copy() for k in group] + cols).from_(table(below), copy=False)
    out.set("group", exp.Group(expressions=group))
    return out


def lower_ordered_pass(source: Source, main, plan, name: str) -> tuple[list[exp.CTE], dict[tuple, exp.Expression]]:
    """CTEs of one ordered pass and, for each call key, the column that holds its result."""
    x, w, calls, condition = plan.x, plan.trailing, plan.calls, plan.condition
    ties = plan.variant == "ties"
    ctx = OrderedContext(weighted=w is not None, name=name, ties=ties)
    out_cols, results = build_results(calls, ctx, name)

    xd = s.cast_double(x.copy())
    proj, cond = checked_rows(source, x, w, condition)
    rows = source.rows(proj, cond)

    keys: list[exp.Expression] = list(source.key_columns())
    base_cols = keys + [s.col("_uv_x")] + ([s.col("_uv_w")] if ctx.weighted else [])
    base_cols += [s.col("_uv_n")] if "n" in ctx.used else []
    minimum = None if keys else source.rows([s.agg_min(xd.copy())], cond.copy())  # one group only
    ctes = [cte(rows, f"{name}_rows")]
    if ties:
        ctes.append(cte(tie_rows(keys, w is not None, "n" in ctx.used, f"{name}_rows"), f"{name}_ties"))
    win = exp.Select(expressions=[k.copy() for k in base_cols] + _window_columns(ctx, keys, minimum)).from_(
        table(f"{name}_ties" if ties else f"{name}_rows"), copy=False)
    ctes += window_ctes(win, ctx, keys, name)  # + the relative poverty line's layers (line.py)
    if out_cols:
        ctes.append(cte(grouped(keys, out_cols, f"{name}_win"), name))
    for k in ctx.grids:
        ctes += lower_lorenz_grid(ctx, keys, name, k)
    return ctes, results


# the registry's entry (passes/registry.py)
KIND = PassKind.ORDERED
PREFIX = "ord"


def lower(source: Source, main, plan, name: str | None, settings) -> tuple[list[exp.CTE], dict]:
    assert name is not None  # a pass with a PREFIX is given its CTE name
    return lower_ordered_pass(source, main, plan, name)


__all__ = ["KIND", "PREFIX", "lower", "lower_ordered_pass", "OrderedContext", "key_name"]
