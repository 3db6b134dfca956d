"""The sorted rows of one (value, weight) pair with running sums, shared by the passes that
compute a measure's sampling variance (linearized.py) and its bootstrap (bootstrap.py).

rows CTE:   keys, x, w [, extra columns such as strata and PSU]   (NULL x or weight, w = 0 dropped)
window CTE: … , C (running weight), S (running Σ w·x), m (group minimum) — one window
            specification, so one sort — and the group totals W and n where used.

``RowContext`` offers both builder interfaces of the catalog: the ordered one (``x, w, c, min_row,
W_row`` and the aggregates ``W, T, n``) and the moment one (``sum(term)``, ``min(term)``,
``min_x``), so every ordered and moment measure builds unchanged against it. Its aggregates are
plain ``SUM``/``MIN``/``MAX``/``COUNT`` over the window CTE's rows, which the passes then lift
into columns of their own group CTEs (see ``lift_aggregates``).
"""

from __future__ import annotations

from collections.abc import Callable, Sequence

from sqlglot import exp

from uneven.compiler.passes.columns import SortedColumns
from uneven.compiler.passes.line import window_ctes
from uneven.compiler.passes.source import Source, cte, table, value_weight_rows
from uneven.errors import MeasureUsageError
from uneven.sqltree import build as s


class RowContext(SortedColumns):
    """Row-level columns of the window CTE and aggregates over them."""

    def __init__(self, weighted: bool, name: str):
        self.weighted = weighted
        self.name = name
        self.used: set[str] = set()

    # row level (x, w, c, min_row, W_row: columns.SortedColumns) --------------------------------
    @property
    def s(self):
        """S_i: the running Σ w·x up to and including row i."""
        self.used.add("s")
        return s.col("_uv_s")

    @property
    def n_row(self):
        self.used.add("nt")
        return s.col("_uv_nt")

    # the group mean at row level, for contexts that set ``row_mean`` (the linearized pass): the log
    # and power measures and their scores then take their forms in r = x/μ (catalog/moment.py)
    row_mean = False

    @property
    def mu(self):
        """μ = T/W of the group on every row, NULL where T ≤ 0 (no engine divides by 0)."""
        self.used.add("mu")
        return s.col("_uv_mup")

    mu_divisor = mu

    @property
    def min_part(self):
        """The group's smallest value on every row, over the partition alone (no order: no sort)."""
        self.used.add("minp")
        return s.col("_uv_mp")

    @property
    def r(self):
        return s.div(self.x, self.mu_divisor)

    def lorenz_grid(self, k: int):
        raise MeasureUsageError("lorenz_curve has no standard error or bootstrap form")

    # aggregates ------------------------------------------------------------------------------
    @property
    def W(self):
        return s.agg_sum(s.col("_uv_w")) if self.weighted else s.cast_double(s.agg_count_star())

    @property
    def T(self):
        return s.agg_sum(s.mul(self.w, self.x))

    @property
    def n(self):
        return s.agg_count_star()

    def sum(self, term):
        return s.agg_sum(term)

    def min(self, term):
        return s.agg_min(term)

    @property
    def min_x(self):
        return s.agg_min(self.x)


def window_columns(ctx: RowContext, keys: Sequence[exp.Expression]) -> list[exp.Expression]:
    """C, S and m in one window specification (one sort); W and n over the partition alone."""
    x, w = s.col("_uv_x"), ctx.w
    part = lambda: [k.copy() for k in keys]  # noqa: E731
    cols: list[exp.Expression] = []
    # the unweighted running count is a SUM of 1.0 in the same specification as S, so ties are
    # taken in the same order by both (ROW_NUMBER could order them differently)
    if "c" in ctx.used:
        cols.append(s.alias(s.window(s.agg_sum(w.copy()), part(), [x.copy()], running=True), "_uv_c"))
    if "s" in ctx.used:
        cols.append(s.alias(s.window(s.agg_sum(s.mul(w.copy(), x.copy())), part(), [x.copy()], running=True),
                            "_uv_s"))
    if "min" in ctx.used:
        cols.append(s.alias(s.window(s.agg_min(x.copy()), part(), [x.copy()], whole=True), "_uv_m"))
    if "minp" in ctx.used:
        cols.append(s.alias(s.window(s.agg_min(x.copy()), part()), "_uv_mp"))

    def group_weight():  # W over the partition (the row count when unweighted)
        return (s.window(s.agg_sum(w.copy()), part()) if ctx.weighted
                else s.cast_double(s.window(s.agg_count_star(), part())))

    if "wt" in ctx.used:
        cols.append(s.alias(group_weight(), "_uv_wt"))
    if "mu" in ctx.used:  # Σw·x / Σw over the partition, where Σw·x > 0
        total = s.window(s.agg_sum(s.mul(w.copy(), x.copy())), part())
        cols.append(s.alias(s.case(s.gt(total, s.lit(0.0)), s.div(total.copy(), group_weight())), "_uv_mup"))
    if "nt" in ctx.used:
        counted = getattr(ctx, "count_of", None)  # rows to count (bootstrap: those drawn), else all
        count = exp.Count(this=counted.copy()) if counted is not None else s.agg_count_star()
        cols.append(s.alias(s.cast_double(s.window(count, part())), "_uv_nt"))
    return cols


def lower_rows(source: Source, plan, name: str, ctx: RowContext,
               extra: dict[str, exp.Expression]) -> list[exp.CTE]:
    """The rows CTE (``{name}_rows``) and the window CTE (``{name}_win``); ``extra`` maps column
    names to row-level expressions carried along (strata, PSU, bootstrap key)."""
    x, w, condition = plan.x, plan.trailing, plan.condition
    # x checked as every pass that reads values checks it: a NaN or infinite value stops the query with
    # the input policy's error naming the group (docs/input-policy.md), never a NULL standard error
    columns, cond = value_weight_rows(x, w, condition, keys=source.keys)
    proj = source.key_projections() + columns + [s.alias(e.copy(), n) for n, e in extra.items()]
    rows = source.rows(proj, cond)
    keys = source.key_columns()
    base = keys + [s.col("_uv_x")] + ([s.col("_uv_w")] if w is not None else []) + [s.col(n) for n in extra]
    win = exp.Select(expressions=[k.copy() for k in base] + window_columns(ctx, keys)).from_(table(f"{name}_rows"),
                                                                                            copy=False)
    return [cte(rows, f"{name}_rows")] + window_ctes(win, ctx, keys, name)


# aggregates → group columns ------------------------------------------------------------------

_COMBINE: dict[type[exp.Expression], Callable[[exp.Expression], exp.Expression]] = {
    exp.Sum: s.agg_sum, exp.Count: s.agg_sum, exp.Min: s.agg_min, exp.Max: s.agg_max}


class Aggregates:
    """Registry of the row aggregates an expression uses, each given a column ``_uv_gK``.

    ``lift(expr)`` replaces every aggregate in ``expr`` by its column; ``partial()`` gives the
    aggregates over rows, and ``combined(level)`` the same aggregates over a table of partial
    results (sums of sums, counts summed, minima of minima), so a group's value can be built up
    from PSUs and strata.
    """

    def __init__(self):
        self.items: dict[str, tuple[str, exp.Expression]] = {}
        self.known: dict[str, str] = {}

    def reuse(self, agg: exp.Expression, column: str) -> None:
        """An aggregate the group CTE already computes under ``column`` (lifted to it, not repeated)."""
        self.known[agg.sql("duckdb")] = column

    def lift(self, expr: exp.Expression) -> exp.Expression:
        def fn(node):
            if type(node) in _COMBINE:
                key = node.sql("duckdb")
                if key in self.known:
                    return s.col(self.known[key])
                if key not in self.items:
                    self.items[key] = (f"_uv_g{len(self.items) + 1}", node.copy())
                return s.col(self.items[key][0])
            return node
        return expr.transform(fn)

    def partial(self) -> list[exp.Expression]:
        return [s.alias(agg.copy(), n) for n, agg in self.items.values()]

    def combined(self) -> list[exp.Expression]:
        return [s.alias(_COMBINE[type(agg)](s.col(n)), n) for n, agg in self.items.values()]
