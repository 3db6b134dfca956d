"""Stream pass: an ordered pass that DuckDB sorts and uneven reduces with numpy (engine/stream.py).

Only when uneven runs the query on DuckDB itself (``CompileOptions.stream``; never in ``compile()``'s
portable SQL). The pass adds no CTE: its result is a table registered on the connection under
``_uv_str_N`` with the columns a window pass's result CTE has (``_uv_k1`` … the group keys, one
``_uv_rN`` per measure call), so the final SELECT joins it on the keys like any pass. The lowering
records a ``StreamJob`` on the plan:

rows    keys, x, w — the window plan's rows (input policy checks, FILTER, NULLs and zero weights
        dropped), with the scope's own CTEs — ORDER BY keys, x
totals  keys, W (fsum of w, or the row count; with T and n for a user's kernel) GROUP BY keys, ORDER BY
        keys — only when a measure reads a cut (p·W) before the rows reach it; the groups come in the
        same order as the rows'
columns the result columns with the numpy kernel and parameters of each call (catalog/kernels.py;
        an interval's confidence level comes last)

A linearized pass whose calls all have kernels (gini_se, gini_ci_lo/hi and the plain ordered measures
sharing its sort) is lowered the same way (plan.route_stream); with a survey design the rows also
bring the stratum and PSU (``_uv_h``, ``_uv_psu``: engine/streamdesign.py) and its standard errors
take the design's kernels (catalog/design_kernels.py).

In the direct form (``plan.direct``, compiler/direct.py) the final SELECT reads the result table alone,
so the table must hold every group of the user's WHERE, also those with no row the pass counts (every
value NULL, every weight zero, every row outside the FILTER): the rows query then reads every row of
the WHERE, with ``_uv_x`` and ``_uv_w`` NULL where the FILTER drops a row or its value is NULL (zero
weights as they are); engine/stream.py keeps the groups none of whose rows counts, with NULL results,
and feeds the rest to the kernels.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field

from sqlglot import exp

from uneven.catalog.design_kernels import stream_kernel
from uneven.catalog.kernels import COUNT_NEEDS, TOTAL_NEEDS, Need, Recorder
from uneven.catalog.kernels_se_moment import reads_mean
from uneven.catalog.spec import PassKind
from uneven.compiler.passes import stream_ranked
from uneven.compiler.passes.source import (
    Source,
    checked_rows,
    key_name,
)
from uneven.compiler.passes.stream_line import lower_line_stage
from uneven.sqltree import build as s


@dataclass
class StreamJob:
    table: str  # the name the results are registered under
    keys: list[str]  # the key columns of rows, totals and the result table
    weighted: bool
    rows: exp.Select
    totals: exp.Select | None
    columns: list[tuple[str, Callable, tuple]]  # (result column, kernel, parameters)
    needs: list[Need] = field(default_factory=list)
    rows_sql: str = ""  # filled by the pipeline (the text of rows and totals for DuckDB)
    totals_sql: str = ""
    keeps_groups: bool = False  # direct form with keys: rows the pass does not count come too (NULL x)
    followers: list = field(default_factory=list)  # jobs run right after this one (passes/stream_line.py)
    kept_totals: list[str] = field(default_factory=list)  # totals columns the result table keeps (stream_line.py)
    fast_rows_sql: str = ""  # rows and totals with the input checks left to numpy (passes/stream_checks.py)
    fast_totals_sql: str = ""
    ranked: int = 0  # a ranked pass's job: its number of value columns (engine/streamranked.py)


def _ordered(select: exp.Select, columns: list[str]) -> exp.Select:
    select.set("order", exp.Order(expressions=[exp.Ordered(this=s.col(c), nulls_first=False) for c in columns]))
    return select


def lower_stream_pass(source: Source, plan, name: str) -> tuple[list[exp.CTE], dict]:
    if plan.variant == stream_ranked.VARIANT:
        return lower_ranked(source, plan, name)
    x, w, condition = plan.x, plan.trailing, plan.condition
    keys = [key_name(i) for i in range(len(source.keys))]
    proj, cond = checked_rows(source, x, w, condition)
    proj += design_projections(plan.options)
    rows = source.rows(proj, cond)
    with_ = source.select.args.get("with_")
    recorder = Recorder()
    columns: list[tuple[str, Callable, tuple]] = []
    results: dict[tuple, exp.Expression] = {}
    for call in plan.calls:
        if call.key in results:
            continue
        params = tuple(call.params) + ((call.settings.get("level", 0.95),) if "level" in call.measure.options else ())
        kernel = stream_kernel(call.measure, bool(plan.options))
        assert kernel is not None  # plan.stream_blocked keeps a pass without kernels on the window plan
        kernel(recorder, params)
        column = f"_uv_r{len(columns) + 1}"
        columns.append((column, kernel, params))
        results[call.key] = s.col(column, name)
    totals = None
    if any(n.name in TOTAL_NEEDS for n in recorder.needs):
        weight = (exp.Anonymous(this="fsum", expressions=[s.col("_uv_w")]) if w is not None
                  else s.cast_double(s.agg_count_star()))
        wx = s.mul(s.col("_uv_w"), s.col("_uv_x")) if w is not None else s.col("_uv_x")
        read = {n.name for n in recorder.needs}  # T serves users' kernels' start only; n those and the errors
        sums = [s.alias(weight, "_uv_wt")]
        if "chunk" in read or reads_mean(recorder.needs):  # (the moment errors' μ: catalog/kernels_se_moment.py)
            sums.append(s.alias(exp.Anonymous(this="fsum", expressions=[wx]), "_uv_tt"))
        if "chunk" in read or read & set(COUNT_NEEDS):
            sums.append(s.alias(s.agg_count_star(), "_uv_n"))
        totals = exp.Select(expressions=[s.col(k) for k in keys] + sums).from_(
            exp.Subquery(this=rows.copy(), alias=exp.TableAlias(this=exp.to_identifier("_uv_rows"))), copy=False)
        if keys:
            totals.set("group", exp.Group(expressions=[s.col(k) for k in keys]))
            _ordered(totals, keys)
        if with_ is not None:
            totals.set("with_", with_.copy())
    if plan.direct and keys:  # (without keys the table has its one row whatever the rows)
        kept = s.and_(s.paren(condition.copy()) if condition is not None else None, s.not_null(x.copy()))
        # a value is checked where the window plan checks it: on the rows its WHERE keeps (weight > 0)
        counted = s.and_(kept.copy(), s.gt(s.cast_double(w.copy()), s.lit(0.0))) if w is not None else None
        rows = source.rows(direct_projections(proj, kept, counted))
    _ordered(rows, keys + ["_uv_x"])
    if with_ is not None:
        rows.set("with_", with_.copy())
    plan.job = StreamJob(name, keys, w is not None, rows, totals, columns, recorder.needs,
                         keeps_groups=plan.direct and bool(keys))
    return lower_line_stage(source, plan, name, plan.job, results), results


def lower_ranked(source: Source, plan, name: str) -> tuple[list[exp.CTE], dict]:
    """A ranked pass's job (passes/stream_ranked.py): the rows sorted by (keys, ranking value), no totals."""
    keys = [key_name(i) for i in range(len(source.keys))]
    proj, cond, kept, counted = stream_ranked.ranked_rows(source, plan)
    rows = source.rows(direct_projections(proj, kept, counted)) if plan.direct and keys else source.rows(proj, cond)
    _ordered(rows, keys + ["_uv_x"])
    with_ = source.select.args.get("with_")
    if with_ is not None:
        rows.set("with_", with_.copy())
    columns, results = stream_ranked.kernels(plan, name)
    plan.job = StreamJob(name, keys, plan.trailing is not None, rows, None, columns,
                         keeps_groups=plan.direct and bool(keys), ranked=stream_ranked.nvalues(plan))
    return [], results


def design_projections(options: dict) -> list[exp.Expression]:
    """A survey design's row columns (``strata``, ``psu``) as ``_uv_h`` and ``_uv_psu``, which
    engine/streamdesign.py reads (the window plan's linearized pass carries them the same way)."""
    names = {"strata": "_uv_h", "psu": "_uv_psu"}
    return [s.named(options[k].copy(), names[k]) for k in ("strata", "psu") if k in options]


def direct_projections(proj: list[exp.Expression], kept: exp.Expression,
                       counted: exp.Expression | None = None) -> list[exp.Expression]:
    """The checked rows' projections with x and w NULL where ``kept`` (the FILTER, x not NULL) does not
    hold: every row of the user's WHERE comes, so every group does; the values and weights are checked
    on the rows the window plan checks (x only where ``counted``, the weight > 0, holds too: a value
    beside a zero or NULL weight is dropped unchecked, as the window plan's WHERE drops it). Zero
    weights come as they are (engine/stream.py drops them)."""
    out: list[exp.Expression] = []
    for p in proj:
        if isinstance(p, exp.Alias) and p.alias in ("_uv_x", "_uv_w"):
            when = counted if p.alias == "_uv_x" and counted is not None else kept
            out.append(s.named(s.case(when.copy(), p.this.copy()), p.alias))
        else:
            out.append(p.copy())
    return out


# the registry's entry (passes/registry.py)
KIND = PassKind.STREAM
PREFIX = "str"


def lower(source: Source, main, plan, name: str | None, settings) -> tuple[list[exp.CTE], dict]:
    assert name is not None
    return lower_stream_pass(source, plan, name)
