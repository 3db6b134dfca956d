"""The stream plan's stages for the measures at a relative poverty line (catalog/kernels_line.py).

``below_line_share``, ``median_gap`` and ``fgt_relative`` compare every row with z = frac·M, M the
group's weighted median, but the sorted stream passes the rows below z before M is known, and a group
may be too large to keep. So, with memory bounded per group (a few doubles, as every stream):

1. the pass's own stream (passes/stream.py) computes M per group: one column ``_uv_md`` of its table
   ``_uv_str_N`` (the quantile at 0.5, the window plan's median, catalog/ordered.quantile_at);
2. ``below_line_share`` and ``fgt_relative`` are sums over the rows below z: at a line without a
   ``median_gap`` (else see 3.), a CTE of the final query,
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
   Its totals query also sums the other line measures at the same line (P, Σ w·((z − x)/z)^α),
   which its table keeps (``StreamJob.kept_totals``): such a line needs no line CTE, so every row is
   joined to the medians once, not twice; the sums are divided by W from the first stream (``_uv_wa``).

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
from uneven.catalog.poverty import gap_term
from uneven.compiler.passes.source import Source, checked_rows, cte, join_on_keys, key_name
from uneven.sqltree import build as s

MEDIAN = "_uv_md"  # the pass table's column of the group's median
WEIGHT = "_uv_wa"  # the pass table's column of the group's weight (when sums come from a second stream)
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


def poor_rows_job(source: Source, plan, job: Any, frac: float, table: str, folded: list) -> Any:
    """A stream job over the rows below frac·M only, sorted by (keys, x): its column ``_uv_r1`` is M_p.
    Its totals query (a GROUP BY of the same rows) gives P (``_uv_wt``) and, kept in its table, the
    sums of the ``folded`` calls at the same line: Σ w·((z − x)/z)^α per fgt_relative (``_uv_sK``)."""
    weighted = plan.trailing is not None
    median = s.col(MEDIAN, job.table)
    x, w = s.col("_uv_x", ROWS), (s.col("_uv_w", ROWS) if weighted else None)
    base = _joined_rows(source, plan, job.table)
    below = s.lt(x.copy(), s.mul(s.lit(frac), median.copy()))
    base.set("where", exp.Where(this=s.and_(s.gt(median, s.lit(0.0)), below)))
    keys = [s.col(key_name(i), ROWS) for i in range(len(source.keys))]
    rows = base.copy()
    rows.set("expressions", _keys(source) + [s.named(x.copy(), "_uv_x")] + ([s.named(w.copy(), "_uv_w")] if w else []))
    rows.set("order", _order([k.copy() for k in keys] + [x.copy()]))
    fsum = lambda e: exp.Anonymous(this="fsum", expressions=[e])  # noqa: E731
    sums = [s.alias(fsum(w.copy()) if w else s.cast_double(s.agg_count_star()), "_uv_wt"),
            s.alias(fsum(s.mul(w.copy(), x.copy()) if w else x.copy()), "_uv_tt"), s.alias(s.agg_count_star(), "_uv_n")]
    kept = ["_uv_wt"]
    for call in folded:
        if call.measure.name == "fgt_relative":
            term = gap_term(x.copy(), s.mul(s.lit(frac), median.copy()), w.copy() if w else s.lit(1.0), call.params[0])
            kept.append(f"_uv_s{len(kept)}")
            sums.append(s.alias(s.agg_sum(term), kept[-1]))
    totals = base.copy()
    totals.set("expressions", _keys(source) + sums)
    if keys:
        totals.set("group", exp.Group(expressions=[k.copy() for k in keys]))
        totals.set("order", _order([k.copy() for k in keys]))
    with_ = source.select.args.get("with_")
    for select in (rows, totals):
        if with_ is not None:
            select.set("with_", with_.copy())
    recorder = Recorder()
    kl.poor_median(recorder, (frac,))
    return replace(job, table=table, rows=rows, totals=totals, columns=[("_uv_r1", kl.poor_median, (frac,))],
                   needs=recorder.needs, keeps_groups=False, followers=[], kept_totals=kept)


def _order(columns: Sequence[exp.Expression]) -> exp.Order:
    return exp.Order(expressions=[exp.Ordered(this=c, nulls_first=False) for c in columns])


def _frac(call) -> float:
    return float(call.params[-1])  # (frac,) or (alpha, frac)


def lower_line_stage(source: Source, plan, name: str, job: Any, results: dict) -> list[exp.CTE]:
    """Rewrite the results of the pass's median-line calls (their kernels only gave the stream's table
    a median column) into the stages above; returns the CTEs the final query needs. Where a
    median_gap streams the rows below a line, the sums of the other calls at that line come from
    that stream's totals query instead of the line CTE (one join of every row to the medians fewer)."""
    calls = list({c.key: c for c in plan.calls if kl.is_line(c.measure.stream)}.values())
    if not calls:
        return []
    job.columns = [c for c in job.columns if not kl.is_line(c[1])] + [(MEDIAN, kl.median, ())]
    fracs = list(dict.fromkeys(_frac(c) for c in calls if c.measure.name == "median_gap"))
    summed = [c for c in calls if c.measure.name != "median_gap" and _frac(c) not in fracs]
    folded = [c for c in calls if c.measure.name != "median_gap" and _frac(c) in fracs]
    ctes: list[exp.CTE] = []
    if summed:
        line, built = line_cte(source, plan, name, summed, f"{name}_line")
        ctes.append(line)
        results.update(built)
    if folded:  # W for the folded sums: the stream's Σ w (the window plan's SUM(w) to rounding)
        job.columns.append((WEIGHT, kl.weight, ()))
        recorder = Recorder()
        recorder.needs = list(job.needs)
        kl.weight(recorder, ())
        job.needs = recorder.needs
    median = s.col(MEDIAN, name)
    for i, frac in enumerate(fracs, start=1):
        here = [c for c in folded if _frac(c) == frac]
        poor = poor_rows_job(source, plan, job, frac, f"{name}_pm{i}", here)
        job.followers.append(poor)
        sums = iter(poor.kept_totals[1:])
        for call in calls:
            if _frac(call) != frac:
                continue
            if call.measure.name == "median_gap":
                z = s.mul(s.lit(frac), median.copy())
                value: exp.Expression = s.div(s.sub(z, s.col("_uv_r1", poor.table)), z.copy())
            else:
                column = "_uv_wt" if call.measure.name == "below_line_share" else next(sums)
                total = exp.Coalesce(this=s.col(column, poor.table), expressions=[s.lit(0.0)])
                value = s.div(total, s.col(WEIGHT, name))
            results[call.key] = s.case(s.gt(median.copy(), s.lit(0.0)), value)
    stages = [f"their sums in {name}_line, a GROUP BY of the rows joined to the streamed medians"] if summed else []
    if fracs:
        tables = ", ".join(j.table for j in job.followers)
        stages.append(f"a second stream of the rows below the line ({tables}) for median_gap's poor median"
                      + (", its totals query summing the other measures at that line" if folded else ""))
    plan.order_reason += "; the median-line measures: " + "; ".join(stages)
    return ctes
