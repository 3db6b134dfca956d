"""Concentration measures on the entity pass: values summed per entity, ranked largest first.

Context columns (row level): ``v`` = an entity's total, ``r`` = its rank by total, largest first
(row_number, so ties are broken arbitrarily; the sums below do not depend on how). Without an
entity argument every row is its own entity.
"""

from __future__ import annotations

from uneven import reference as ref
from uneven.catalog.moment import build_hhi_rows
from uneven.catalog.spec import Measure, Param
from uneven.compiler import sqlx as s

ZERO = s.lit(0.0)


def _defined(ctx):
    total = s.agg_sum(ctx.v)
    return s.and_(s.gte(s.agg_min(ctx.v), ZERO), s.gt(total, ZERO))


def build_hhi(ctx, params=()):
    total = s.agg_sum(ctx.v)
    squares = s.agg_sum(s.mul(ctx.v, ctx.v))
    return s.case(_defined(ctx), s.div(s.mul(s.lit(10000.0), squares), s.mul(total, total)))


def build_cr(ctx, params):
    k = params[0] if hasattr(params[0], "to_expression") else int(params[0])  # run-time k: a macro argument
    top = s.agg_sum(s.case(s.lte(ctx.r, s.lit(k)), ctx.v, ZERO))
    return s.case(_defined(ctx), s.div(top, s.agg_sum(ctx.v)))


def _hhi(ctx, params=()):
    """Dispatch: the moment pass (rows as entities) or the entity pass, by the context given."""
    return build_hhi(ctx, params) if hasattr(ctx, "v") else build_hhi_rows(ctx, params)


MEASURES = [
    Measure("hhi", ("moment", "entity"), (), "entity",
            "10000 Σ s_k², s_k the share of entity k (rows of an entity summed first)", _hhi, ref.hhi,
            domain="entity totals ≥ 0, total > 0"),
    Measure("cr", "entity", (Param("k", "count", "number of largest entities"),), "entity",
            "share of the k largest entities", build_cr, ref.cr, domain="entity totals ≥ 0, total > 0"),
]
