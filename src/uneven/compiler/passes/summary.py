"""Summary pass (``method="bounded"``): one GROUP BY into log-spaced bins, then intervals per group.

rows CTE:  keys, x, w (checked by the input policy: NaN, ±infinity and negative weights stop the query
           naming the group; NULL x or weight, and zero weights, dropped) and the bin key of x
           (bins.bin_key: sign and index in one BIGINT, one LN per row)
bins CTE:  GROUP BY keys, key: only the bin columns the pass's calls read (a Gini: Σw, Σw·x, min,
           max; Σw·x², Σw·ln x, Σw·x·ln x and the count when a call reads them; Σw·x^a for the
           GE/Atkinson parameters of the calls, so those are exact)
cum CTE and result CTE: see bounds/lower.py (no overlap joining: one GROUP BY gives disjoint bins)

No sort of the rows: the only windows run over the bins (a few thousand per group at most).

Direct form (``plan.direct``, plan.choose_summary_form): the final SELECT reads the result CTE as the
grouped relation, so the pass keeps every group of the user's WHERE. The rows CTE then keeps every
row of the WHERE: a row the pass does not count (outside the FILTER, NULL value, weight NULL or not
> 0) gets a NULL value, weight and bin key, so each such group has one placeholder bin whose
aggregates are NULL (bounds/lower.py, ``present``). The checks run under the same condition as the
joined form's WHERE, so the same rows raise.
"""

from __future__ import annotations

from sqlglot import exp

from uneven.bounds import bins as b
from uneven.bounds.lower import lower_bounds
from uneven.bounds.measures import powers_needed
from uneven.catalog.spec import PassKind
from uneven.compiler.passes.source import Source, binned_rows, checked_rows, cte, table
from uneven.sqltree import build as s


def lower_summary_pass(source: Source, main, plan, name: str, resolution: float | None = None
                       ) -> tuple[list[exp.CTE], dict]:
    """CTEs of one summary pass; results map each call key to its point column and (key, "lo"),
    (key, "hi") to its bounds. ``resolution``: relative bin width (default bins.DEFAULT_RESOLUTION)."""
    resolution = b.DEFAULT_RESOLUTION if resolution is None else resolution
    x, w, condition = plan.x, plan.trailing, plan.condition
    keys = source.key_columns()
    direct = bool(getattr(plan, "direct", False)) and bool(source.keys)
    if direct:
        rows = all_rows(source, x, w, condition, b.bin_key(s.col("_uv_x"), resolution))
    else:
        rows = binned_rows(source, x, w, condition, b.bin_key(s.col("_uv_x"), resolution), b.BIN)

    powers = sorted({a for call in plan.calls for a in powers_needed(call.measure.name, call.params)})
    wcol = s.col("_uv_w") if w is not None else s.lit(1.0)
    aggs = b.bin_aggregates(s.col("_uv_x"), wcol, powers)
    calls = [(call.key, call.measure.name, call.params) for call in plan.calls]
    more, names, exact, read = lower_bounds(f"{name}_bins", keys, [a.alias for a in aggs], calls, name,
                                            merge=False, present=b.BIN if direct else None)
    aggs = [a for a in aggs if a.alias in read]  # only what the calls read (e.g. Gini: no Σw·x², Σw·ln x)
    if direct:  # the placeholder bin's aggregates are NULL; the bin key tells the placeholder apart
        aggs = [s.col(b.BIN)] + [s.alias(s.case(s.not_null(s.col(b.BIN)), a.this), a.alias) for a in aggs]
    bins = exp.Select(expressions=[k.copy() for k in keys] + aggs).from_(table(f"{name}_rows"))
    bins.set("group", exp.Group(expressions=[k.copy() for k in keys] + [s.col(b.BIN)]))
    results = {}
    for key, (point, lo, hi) in names.items():
        results[key] = s.col(point, name)
        results[(key, "lo")] = s.col(lo, name)
        results[(key, "hi")] = s.col(hi, name)
    return [cte(rows, f"{name}_rows"), cte(bins, f"{name}_bins")] + more, results


def all_rows(source: Source, x: exp.Expression, w: exp.Expression | None, condition: exp.Expression | None,
             key: exp.Expression) -> exp.Select:
    """The direct form's rows CTE: every row of the scope's WHERE with its keys; the checked value,
    weight and bin ``key`` (which reads ``_uv_x``) where the row counts, NULL where it does not."""
    proj, cond = checked_rows(source, x, w, condition)
    inner = source.key_projections() + [s.named(s.case(cond, proj[len(source.keys)].this), "_uv_x")]
    if w is not None:  # checked inside ``cond`` (> 0 where the value is kept): the plain DOUBLE here
        inner.append(s.named(s.cast_double(w.copy()), "_uv_w"))
    checked = exp.Subquery(this=source.rows(inner),
                           alias=exp.TableAlias(this=exp.to_identifier("_uv_v", quoted=True)))
    kept = lambda e: s.case(s.not_null(s.col("_uv_x")), e)  # noqa: E731
    cols = source.key_columns() + [s.col("_uv_x")] + ([s.alias(kept(s.col("_uv_w")), "_uv_w")] if w is not None else [])
    bin_ = kept(key)  # the key of a NULL value would be the zero bin's
    return exp.Select(expressions=cols + [s.alias(bin_, b.BIN)]).from_(checked)


# the registry's entry (passes/registry.py)
KIND = PassKind.SUMMARY
PREFIX = "sum"


def lower(source: Source, main, plan, name: str | None, settings) -> tuple[list[exp.CTE], dict]:
    assert name is not None  # a pass with a PREFIX is given its CTE name
    return lower_summary_pass(source, main, plan, name, settings.resolution)
