"""The stream plan's stages for the measures at a relative poverty line (catalog/kernels_line.py).

``below_line_share``, ``median_gap`` and ``fgt_relative`` compare every row with z = frac·M, M the
group's weighted median, but the sorted stream passes the rows below z before M is known, and a group
may be too large to keep. So, with memory bounded per group (a few doubles, as every stream):

1. the pass's own stream (passes/stream.py) computes M per group: one column ``_uv_md`` of its table
   ``_uv_str_N`` (the quantile at 0.5, the window plan's median, catalog/ordered.quantile_at);
2. ``below_line_share`` and ``fgt_relative`` are sums over the rows below z: a CTE of the final query,
   ``{name}_line``, groups the pass's rows (the window plan's rows: input checks, FILTER, NULLs and
   zero weights dropped) joined to that table on the keys (NULL keys: IS NOT DISTINCT FROM) and
   applies the catalog's own builders to them, with the median read from the table instead of the
   window layers of passes/line.py: the same formulas and the same SQL sums as the window plan. A
   hash join and a GROUP BY, no sort; in the final query rather than a job of its own, since the
   table exists before the query runs and the final SELECT joins the result on the keys like a pass;
3. ``median_gap`` needs M_p, the weighted median of the rows below z: a second stream job per line
   (``{name}_pmK``), whose rows are only those below z (the same rows joined to the first table),
   sorted by (keys, x); its totals query gives P, their weight, so the job's quantile at 0.5 is
   the smallest x below z with C ≥ P/2, the window plan's ``poor_median`` (the rows below z come
   first in the group's sort, so their running weight is the group's). Jobs run in order, so its
   SQL reads the first job's registered table. A group nobody is below has no row there: NULL.

The final SELECT joins ``{name}_line`` and ``{name}_pmK`` on the keys, to the main aggregate in the
joined form or to the pass's table in the direct form (compiler/direct.py), which the stages keep:
each gives one row per group that has rows, and a group without one reads NULL, as its M is NULL.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import replace
from typing import Any

from sqlglot import exp

from uneven.catalog import kernels_line as kl
from uneven.catalog.kernels import Recorder
from uneven.compiler.passes.source import Source, checked_rows, cte, join_on_keys, key_name
from uneven.sqltree import build as s

MEDIAN = "_uv_md"  # the pass table's column of the group's median
ROWS = "_uv_v"  # the pass's rows, as a subquery joined to the pass's table


class LineSums:
    """What the catalog's builders of the line measures read (catalog/poverty.py), over the pass's
    rows joined to the stream's table: x, w, W and the median M of the row's group."""

    def __init__(self, weighted: bool, table: str):
        self.weighted, self.table = weighted, table

    @property
    def x(self) -> exp.Expression:
        return s.col("_uv_x", ROWS)

    @property
    def w(self) -> exp.Expression:
        return s.col("_uv_w", ROWS) if self.weighted else s.lit(1.0)

    @property
    def W(self) -> exp.Expression:
        """Σ w, as the ordered pass's W (passes/ordered.OrderedContext.W)."""
        return s.agg_sum(s.col("_uv_w", ROWS)) if self.weighted else s.cast_double(s.agg_count_star())

    @property
    def median_row(self) -> exp.Expression:
        return s.col(MEDIAN, self.table)


def _joined_rows(source: Source, plan, table: str) -> exp.Select:
    """SELECT … FROM (the pass's checked rows) AS _uv_v LEFT JOIN table ON keys (every row's group is
    in the table: the stream saw the same rows)."""
    proj, cond = checked_rows(source, plan.x, plan.trailing, plan.condition)
    rows = exp.Subquery(this=source.rows(proj, cond), alias=exp.TableAlias(this=exp.to_identifier(ROWS, quoted=True)))
    out = exp.Select().from_(rows, copy=False)
    out.append("joins", join_on_keys(source.keys, table, left=ROWS))
    return out


def _keys(source: Source) -> list[exp.Expression]:
    return [s.named(s.col(key_name(i), ROWS), key_name(i)) for i in range(len(source.keys))]


def line_cte(source: Source, plan, table: str, calls: list, name: str) -> tuple[exp.CTE, dict]:
    """The GROUP BY of the rows joined to the medians: one column per call (the catalog's builder)."""
    ctx = LineSums(plan.trailing is not None, table)
    select = _joined_rows(source, plan, table)
    results: dict[tuple, exp.Expression] = {}
    cols: list[exp.Expression] = []
    for call in calls:
        column = f"_uv_l{len(cols) + 1}"
        cols.append(s.named(call.measure.build(ctx, call.params), column))
        results[call.key] = s.col(column, name)
    select.set("expressions", _keys(source) + cols)
    if source.keys:
        select.set("group", exp.Group(expressions=[s.col(key_name(i), ROWS) for i in range(len(source.keys))]))
    return cte(select, name), results


def poor_rows_job(source: Source, plan, job: Any, frac: float, table: str) -> Any:
    """A stream job over the rows below frac·M only, sorted by (keys, x); its column ``_uv_r1`` is M_p."""
    weighted = plan.trailing is not None
    rows = _joined_rows(source, plan, job.table)
    median = s.col(MEDIAN, job.table)
    rows.set("expressions", _keys(source) + [s.named(s.col("_uv_x", ROWS), "_uv_x")]
             + ([s.named(s.col("_uv_w", ROWS), "_uv_w")] if weighted else []))
    rows.set("where", exp.Where(this=s.and_(s.gt(median, s.lit(0.0)),
                                            s.lt(s.col("_uv_x", ROWS), s.mul(s.lit(frac), median.copy())))))
    with_ = source.select.args.get("with_")
    weight = exp.Anonymous(this="fsum", expressions=[s.col("_uv_w")]) if weighted else s.cast_double(s.agg_count_star())
    wx = s.mul(s.col("_uv_w"), s.col("_uv_x")) if weighted else s.col("_uv_x")
    sums = [s.alias(weight, "_uv_wt"), s.alias(exp.Anonymous(this="fsum", expressions=[wx]), "_uv_tt"),
            s.alias(s.agg_count_star(), "_uv_n")]
    keys = [key_name(i) for i in range(len(source.keys))]
    below = exp.Subquery(this=rows.copy(), alias=exp.TableAlias(this=exp.to_identifier("_uv_rows", quoted=True)))
    totals = exp.Select(expressions=[s.col(k) for k in keys] + sums).from_(below, copy=False)
    if keys:
        totals.set("group", exp.Group(expressions=[s.col(k) for k in keys]))
        totals.set("order", _order([s.col(k) for k in keys]))
    rows.set("order", _order([s.col(k, ROWS) for k in keys] + [s.col("_uv_x", ROWS)]))
    for select in (rows, totals):
        if with_ is not None:
            select.set("with_", with_.copy())
    recorder = Recorder()
    kl.poor_median(recorder, (frac,))
    return replace(job, table=table, rows=rows, totals=totals, columns=[("_uv_r1", kl.poor_median, (frac,))],
                   needs=recorder.needs, keeps_groups=False, followers=[])


def _order(columns: Sequence[exp.Expression]) -> exp.Order:
    return exp.Order(expressions=[exp.Ordered(this=c, nulls_first=False) for c in columns])


def lower_line_stage(source: Source, plan, name: str, job: Any, results: dict) -> list[exp.CTE]:
    """Rewrite the results of the pass's median-line calls (their kernels only gave the stream's table
    a median column) into the stages above; returns the CTEs the final query needs."""
    calls = list({c.key: c for c in plan.calls if kl.is_line(c.measure.stream)}.values())
    if not calls:
        return []
    job.columns = [c for c in job.columns if not kl.is_line(c[1])] + [(MEDIAN, kl.median, ())]
    summed = [c for c in calls if c.measure.name != "median_gap"]
    ctes: list[exp.CTE] = []
    if summed:
        line, built = line_cte(source, plan, name, summed, f"{name}_line")
        ctes.append(line)
        results.update(built)
    fracs: list[float] = []
    for call in calls:
        if call.measure.name != "median_gap":
            continue
        frac = float(call.params[0])
        if frac not in fracs:
            fracs.append(frac)
            job.followers.append(poor_rows_job(source, plan, job, frac, f"{name}_pm{len(fracs)}"))
        z = s.mul(s.lit(frac), s.col(MEDIAN, name))
        gap = s.div(s.sub(z, s.col("_uv_r1", f"{name}_pm{fracs.index(frac) + 1}")), z.copy())
        results[call.key] = s.case(s.gt(s.col(MEDIAN, name), s.lit(0.0)), gap)
    stages = [f"their sums in {name}_line, a GROUP BY of the rows joined to the streamed medians"] if summed else []
    if fracs:
        tables = ", ".join(j.table for j in job.followers)
        stages.append(f"median_gap's poor median from a second stream of the rows below the line ({tables})")
    plan.order_reason += "; the median-line measures: " + "; ".join(stages)
    return ctes
