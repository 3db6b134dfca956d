"""The ranked pass on the stream plan (concentration indices, Kakwani, Reynolds–Smolensky): its rows
query and its result columns; passes/stream.lower_ranked makes the job, engine/streamranked.py
carries the tie groups across the batches and catalog/kernels_ranked.py forms the measures.

rows    keys, the ranking value as ``_uv_x``, the other value arguments as ``_uv_v1`` …, the weight
        ``_uv_w`` — the window plan's rows (compiler/passes/ranked.py: every value not NULL, the
        weight checked and > 0, the FILTER), with the scope's CTEs — ORDER BY keys, ranking value

No totals query: a group's weight W is known at its end, and the numerator is formed as
Σ_g Y_g (2c_g − W_g) − W·Σ_g Y_g, as the window plan forms it. Kakwani and Reynolds–Smolensky read
the Gini of the ranking value itself (value 0 in its own order), so one sort serves every measure.
"""

from __future__ import annotations

from collections.abc import Callable

from sqlglot import exp

from uneven.catalog.design_kernels import stream_kernel
from uneven.compiler.passes import ranked
from uneven.compiler.passes.source import Source
from uneven.sqltree import build as s

VARIANT = "ranked"  # a stream pass planned from a ranked pass (plan.route_stream)

REASON = ("stream plan: DuckDB sorts the rows by (keys, ranking value), numpy carries each group's running "
          "weight and its open tie group (whose mid-rank needs its whole weight) across the batches")


def ranked_rows(source: Source, plan) -> tuple[list[exp.Expression], exp.Expression, exp.Expression,
                                                 exp.Expression | None]:
    """(projections, row condition, kept, counted): the window plan's rows of the ranked pass
    (passes/ranked.ranked_rows), the ranking value as ``_uv_x``; ``kept`` (FILTER, every value present)
    and ``counted`` (kept, weight > 0) for the direct form's rows (passes/stream.direct_projections)."""
    names = ["_uv_x"] + [f"_uv_v{i}" for i in range(1, nvalues(plan))]
    proj, cond, kept = ranked.ranked_rows(source, plan, names)
    w = plan.trailing
    counted = None if w is None else s.and_(kept.copy(), s.gt(s.cast_double(w.copy()), s.lit(0.0)))
    return proj, cond, kept, counted


def nvalues(plan) -> int:
    """The pass's value columns: the ranking value and the other value arguments."""
    return 1 + len(plan.columns)


def kernels(plan, table: str) -> tuple[list[tuple[str, Callable, tuple]], dict[tuple, exp.Expression]]:
    """Each call's result column ``_uv_rN`` of the job's table, with its kernel and parameters."""
    columns: list[tuple[str, Callable, tuple]] = []
    results: dict[tuple, exp.Expression] = {}
    for call in plan.calls:
        if call.key in results:
            continue
        kernel = stream_kernel(call.measure, False)
        assert kernel is not None  # plan.stream_blocked keeps a pass without kernels on the window plan
        column = f"_uv_r{len(columns) + 1}"
        columns.append((column, kernel, tuple(call.params)))
        results[call.key] = s.col(column, table)
    return columns, results
