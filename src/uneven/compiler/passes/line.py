"""The relative poverty line on every row: window layers after a pass's sorted rows.

A line at a fraction of the group's weighted median needs the median before any row can be
compared with it, and a window cannot read a window of the same SELECT. So a pass whose measures
read ``ctx.median_row`` or ``ctx.below_weight_row(frac)`` gets, after its window CTE:

    _srt  (the window CTE: C, W, … over the sorted rows)
    _med  M = COALESCE(MIN(CASE WHEN C/W ≥ 0.5 THEN x END), MAX(x)) OVER (PARTITION BY keys)
          — the weighted median exactly as quantile_w defines it (catalog/ordered.quantile_at),
          and Q_p = the same at p for each quantile whose standard error reads 1(x ≤ Q_p)
    _win  P_k = SUM(CASE WHEN x < frac_k·M THEN w ELSE 0 END) OVER (PARTITION BY keys)
          — the weight strictly below each line (only when a measure reads it)
    _med2 M_p = MIN(CASE WHEN x < frac_k·M AND C ≥ P_k/2 THEN x END) OVER (PARTITION BY keys)
          — the weighted median of the rows below the line (only for median_gap's standard error)

The last layer takes the window CTE's usual name ``{name}_win``, so everything that reads the
pass downstream (the GROUP BY of the measures, the linearized terms, the bootstrap) is unchanged.
The layers are partition totals (no ORDER BY): no second sort.
"""

from __future__ import annotations

from sqlglot import exp

from uneven.compiler.passes.source import cte, table
from uneven.sqltree import build as s


def _partition(keys):
    return [k.copy() for k in keys]


def _quantile_column(keys, p: float, name: str) -> exp.Expression:
    x = s.col("_uv_x")
    reached = s.gte(s.div(s.col("_uv_c"), s.col("_uv_wt")), s.lit(p))
    first = s.window(s.agg_min(s.case(reached, x)), _partition(keys))
    return s.alias(exp.Coalesce(this=first, expressions=[s.window(s.agg_max(x.copy()), _partition(keys))]), name)


def median_column(ctx, keys) -> exp.Expression:
    return _quantile_column(keys, 0.5, "_uv_md")


def quantile_columns(ctx, keys) -> list[exp.Expression]:
    """Q_p on every row for the quantiles a standard error's indicator reads (columns.quantile_row)."""
    return [_quantile_column(keys, p, f"_uv_q{i}") for i, p in enumerate(ctx.__dict__.get("quantile_ps", []), start=1)]


def below_columns(ctx, keys) -> list[exp.Expression]:
    cols: list[exp.Expression] = []
    for i, frac in enumerate(ctx.__dict__.get("line_fracs", []), start=1):
        below = s.lt(s.col("_uv_x"), s.mul(s.lit(frac), s.col("_uv_md")))
        cols.append(s.alias(s.window(s.agg_sum(s.case(below, ctx.w, s.lit(0.0))), _partition(keys)), f"_uv_pw{i}"))
    return cols


def poor_median_columns(ctx, keys) -> list[exp.Expression]:
    cols: list[exp.Expression] = []
    fracs = ctx.__dict__.get("line_fracs", [])
    for i, frac in enumerate(ctx.__dict__.get("poor_fracs", []), start=1):
        below = s.lt(s.col("_uv_x"), s.mul(s.lit(frac), s.col("_uv_md")))
        half = s.gte(s.col("_uv_c"), s.mul(s.lit(0.5), s.col(f"_uv_pw{fracs.index(frac) + 1}")))
        first = s.window(s.agg_min(s.case(s.and_(below, half), s.col("_uv_x"))), _partition(keys))
        cols.append(s.alias(first, f"_uv_pm{i}"))
    return cols


def window_ctes(win: exp.Select, ctx, keys, name: str) -> list[exp.CTE]:
    """``win`` as ``{name}_win``, or, when the measures read the line, ``win`` as ``{name}_srt``
    followed by the line layers, the last named ``{name}_win``."""
    if "med" not in ctx.used:
        return [cte(win, f"{name}_win")]
    layers = [[median_column(ctx, keys)] + quantile_columns(ctx, keys)]
    below = below_columns(ctx, keys)
    if below:
        layers.append(below)
    poor = poor_median_columns(ctx, keys)
    if poor:
        layers.append(poor)
    middle = [f"{name}_med" + (str(i) if i > 1 else "") for i in range(1, len(layers))]
    names = [f"{name}_srt"] + middle + [f"{name}_win"]
    out = [cte(win, names[0])]
    for i, cols in enumerate(layers, start=1):
        out.append(cte(exp.Select(expressions=[exp.Star()] + cols).from_(table(names[i - 1]), copy=False), names[i]))
    return out
