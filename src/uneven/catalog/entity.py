"""Concentration measures on the entity pass: values summed per entity, ranked largest first.

Context columns (row level): ``v`` = an entity's total, ``r`` = its rank by total, largest first
(row_number, so ties are broken arbitrarily; the sums below do not depend on how). Without an
entity argument every row is its own entity.
"""

from __future__ import annotations

from uneven import reference as ref
from uneven.catalog.moment import build_hhi_rows
from uneven.catalog.scaling import finite, plain_or_scaled, times
from uneven.catalog.spec import Measure, Param
from uneven.sqltree import build as s

ZERO = s.lit(0.0)


def _total(ctx):
    # the group total, NULL past the double range: an infinite total (an entity's sum or the sum of
    # the entities overflowing) passes a test "> 0" and would make every share 0
    return finite(s.agg_sum(ctx.v))


def _defined(ctx):
    return s.and_(s.gte(s.agg_min(ctx.v), s.lit(0.0)), s.gt(_total(ctx), s.lit(0.0)))


def build_hhi(ctx, params=()):
    # 10000 Σ v² / total², as (Σ v² / total) / total; on v·2⁻⁵¹² where v² overflows although the
    # total fits (catalog/scaling.py)
    def at(scale):
        v = times(ctx.v, scale)
        return s.div(s.div(s.agg_sum(s.mul(v, v.copy())), times(_total(ctx), scale)), times(_total(ctx), scale))
    return s.case(_defined(ctx), s.mul(s.lit(10000.0), plain_or_scaled(at)))


def build_cr(ctx, params):
    k = params[0] if hasattr(params[0], "to_expression") else int(params[0])  # run-time k: a macro argument
    top = s.agg_sum(s.case(s.lte(ctx.r, s.lit(k)), ctx.v, s.lit(0.0)))
    return s.case(_defined(ctx), s.div(top, _total(ctx)))


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
