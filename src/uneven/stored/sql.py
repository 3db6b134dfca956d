"""SQL trees for stored summaries: the summary of a source, the union of summaries, and measures
computed from a summary table (bins may overlap when summaries from different engines or
resolutions were combined: bounds/lower.py joins them first)."""

from __future__ import annotations

from sqlglot import exp

from uneven.bounds import bins as b
from uneven.bounds.lower import lower_bounds
from uneven.compiler.passes.source import value_weight_rows
from uneven.sqltree import build as s
from uneven.sqltree.build import cte, table

RESERVED_PREFIX = "uv_"


def summary_select(source: exp.Expression, value: exp.Expression, weight: exp.Expression | None,
                   keys: list[tuple[str, exp.Expression]], resolution: float, powers=(),
                   where: exp.Expression | None = None) -> exp.Select:
    """SELECT keys, sign, bin, <bin columns>, resolution FROM (rows of source) GROUP BY keys, sign, bin."""
    columns, cond = value_weight_rows(value, weight, where, keys=[e for _, e in keys])
    checked = exp.Select(expressions=[s.alias(e.copy(), n) for n, e in keys] + columns).from_(source.copy())
    checked.set("where", exp.Where(this=cond))
    key_cols = [s.col(n) for n, _ in keys]
    # sign and bin read the checked value: NaN or ±infinity stops the query with the input policy's
    # error (naming the group) before LN or the cast to BIGINT can fail on it
    rows = exp.Select(expressions=[k.copy() for k in key_cols] + [s.col(c.alias) for c in columns]
                      + b.bin_keys(s.col("_uv_x"), resolution)).from_(
        exp.Subquery(this=checked, alias=exp.TableAlias(this=exp.to_identifier("_uv_v", quoted=True))))
    w = s.col("_uv_w") if weight is not None else s.lit(1.0)
    out = exp.Select(expressions=[k.copy() for k in key_cols] + [s.col(b.SIGN), s.col(b.BIN)]
                     + b.bin_aggregates(s.col("_uv_x"), w, powers) + [s.alias(s.lit(float(resolution)), b.RESOLUTION)])
    out.from_(exp.Subquery(this=rows, alias=exp.TableAlias(this=exp.to_identifier("_uv_rows", quoted=True))),
              copy=False)
    out.set("group", exp.Group(expressions=[k.copy() for k in key_cols] + [s.col(b.SIGN), s.col(b.BIN)]))
    return out


def merged_select(source: exp.Expression, keys: list[str], columns: list[str]) -> exp.Select:
    """Add up the bins of a union of summaries: GROUP BY keys, sign, bin (same resolution: the same
    bins; different resolutions give overlapping bins, joined when measures are computed)."""
    group = [s.col(k) for k in keys] + [s.col(b.SIGN), s.col(b.BIN)]
    out = exp.Select(expressions=[g.copy() for g in group] + b.merged_aggregates(columns)).from_(source.copy())
    out.set("group", exp.Group(expressions=group))
    return out


def measures_select(source: exp.Expression, keys: list[str], columns: list[str],
                    calls: list[tuple[str, str, tuple]]) -> exp.Select:
    """Measures with intervals from a summary table, grouped by ``keys`` (a subset of its keys:
    the bins are first added up per (keys, sign, bin), which rolls the summary up)."""
    key_cols = [s.col(k) for k in keys]
    sums = [c for c in columns if c != b.RESOLUTION]
    # roll up: add the bins of the same index (same resolution: the same bin; across resolutions the
    # result is still a valid bin, its min and max being exact), then join bins that overlap
    rolled = exp.Select(expressions=[k.copy() for k in key_cols] + b.merged_aggregates(sums)).from_(source.copy())
    rolled.set("group", exp.Group(expressions=[k.copy() for k in key_cols] + [s.col(b.SIGN), s.col(b.BIN)]))
    ctes = [cte(rolled, "_uv_sm_bins")]
    more, names, _, _ = lower_bounds("_uv_sm_bins", key_cols, sums, [(c[0], c[1], c[2]) for c in calls],
                                  "_uv_sm", merge=True)
    ctes += more
    final = exp.Select(expressions=[k.copy() for k in key_cols]).from_(table("_uv_sm"))
    for label, _measure, _params in calls:
        point, lo, hi = names[label]
        final.append("expressions", s.alias(s.col(point), label))
        final.append("expressions", s.alias(s.col(lo), f"{label}_lo"))
        final.append("expressions", s.alias(s.col(hi), f"{label}_hi"))
    if key_cols:
        final.set("order", exp.Order(expressions=[exp.Ordered(this=k.copy(), nulls_first=False) for k in key_cols]))
    final.set("with_", exp.With(expressions=ctes))
    return final
