"""Poverty-line indicators and the Wolfson polarization index (docs/poverty.md, docs/polarization.md).

Relative line z = frac·M, M the group's weighted median (quantile_w at 0.5). The measures at a
relative line run on the ordered pass and read the line on every row (``ctx.median_row``,
``ctx.below_weight_row(frac)``: the window layers of compiler/passes/line.py); FGT at an absolute
line needs no order and runs on the moment pass. Wolfson is built from the ordered pass's own
aggregates (μ, the median, L(0.5), the Gini).

A group whose median is ≤ 0 has no relative line: its results are NULL.
"""

from __future__ import annotations

from sqlglot import exp

from uneven.catalog import kernels as k
from uneven.catalog import kernels_line as kl
from uneven.catalog import ordered as ordc
from uneven.catalog.spec import Measure, Param
from uneven.reference import poverty as ref
from uneven.sqltree import build as s

ZERO, ONE = s.lit(0.0), s.lit(1.0)

FRAC = Param("frac", "fraction", "the line as a fraction of the group's weighted median, in (0, 1]")
ALPHA = Param("alpha", "nonnegative", "poverty aversion: 0 headcount, 1 gap, 2 squared gap")
LINE = Param("line", "number", "the absolute poverty line, above 0")


def _frac_positive(params) -> str | None:
    return None if params[-1] > 0 else f"frac must be above 0, got {params[-1]!r}"


def _line_positive(params) -> str | None:
    return None if params[1] > 0 else f"line must be above 0, got {params[1]!r}"


def _line_row(ctx, frac: float) -> exp.Expression:
    return s.mul(s.lit(frac), ctx.median_row)


def _has_line(ctx) -> exp.Expression:
    """The group's median is above 0 (a relative line exists)."""
    return s.gt(s.agg_min(ctx.median_row), ZERO)


def below_row(ctx, frac: float) -> exp.Expression:
    """1(x < frac·M) on every row, as a condition."""
    return s.lt(ctx.x, _line_row(ctx, frac))


def build_below_line_share(ctx, params):
    frac = params[0]
    below = s.agg_sum(s.case(below_row(ctx, frac), ctx.w, ZERO))
    return s.case(_has_line(ctx), s.div(below, ctx.W))


def poor_median(ctx, frac: float) -> exp.Expression:
    """M_p: the smallest x below the line with C ≥ P/2 (the weighted median of the rows below it:
    they come first in the sort, so their running weight is the group's)."""
    half = s.mul(s.lit(0.5), ctx.below_weight_row(frac))
    return s.agg_min(s.case(s.and_(below_row(ctx, frac), s.gte(ctx.c, half)), ctx.x))


def build_median_gap(ctx, params):
    frac = params[0]
    z = s.mul(s.lit(frac), s.agg_min(ctx.median_row))
    anyone = s.gt(s.agg_max(ctx.below_weight_row(frac)), ZERO)
    return s.case(s.and_(_has_line(ctx), anyone), s.div(s.sub(z, poor_median(ctx, frac)), z.copy()))


def gap_term(x, z, w, alpha: float) -> exp.Expression:
    """w·((z − x)/z)^α for x < z, else 0 (z > 0 where it is read; the base is then > 0)."""
    if alpha == 0:
        value = w
    elif alpha == 1:
        value = s.mul(w, s.div(s.sub(z, x), z.copy()))
    else:
        value = s.mul(w, s.power(s.div(s.sub(z, x), z.copy()), s.lit(alpha)))
    return s.case(s.lt(x.copy(), z.copy()), value, ZERO)


def build_fgt_relative(ctx, params):
    alpha, frac = params
    z = _line_row(ctx, frac)
    term = s.case(s.gt(ctx.median_row, ZERO), gap_term(ctx.x, z, ctx.w, alpha), ZERO)
    return s.case(_has_line(ctx), s.div(s.agg_sum(term), ctx.W))


def build_fgt(ctx, params):
    alpha, line = params
    total = ctx.sum(gap_term(ctx.x, s.lit(line), ctx.w, alpha))
    return s.case(s.gt(ctx.W, ZERO), s.div(total, ctx.W))


def build_wolfson(ctx, params):
    # 2·(μ/M)·(1 − 2·L(0.5) − G), μ = T/W (Wolfson 1994, from memory)
    M = ordc.quantile_at(ctx, 0.5)
    mu = s.div(ctx.T, ctx.W)
    inner = s.sub(s.sub(ONE, s.mul(s.lit(2.0), ordc.lorenz_at(ctx, 0.5))), ordc.build_gini(ctx, ()))
    value = s.mul(s.mul(s.lit(2.0), s.div(mu, M)), inner)
    return s.case(s.and_(s.gt(ctx.T, ZERO), s.gt(M.copy(), ZERO)), value)


MEASURES = [
    Measure("below_line_share", "ordered", (FRAC,), "weight",
            "Σ w·1(x < frac·M) / W, M the weighted median", build_below_line_share, ref.below_line_share,
            domain="any x; NULL when the median ≤ 0", check=_frac_positive, stream=kl.median),
    Measure("median_gap", "ordered", (FRAC,), "weight",
            "(z − M_p) / z, z = frac·M, M_p the weighted median of the rows below z", build_median_gap,
            ref.median_gap, domain="any x; NULL when the median ≤ 0 or nobody is below the line",
            check=_frac_positive, stream=kl.median),
    Measure("fgt_relative", "ordered", (ALPHA, FRAC), "weight",
            "Σ w·1(x < z)·((z − x)/z)^alpha / W, z = frac·M", build_fgt_relative, ref.fgt_relative,
            domain="any x; NULL when the median ≤ 0", check=_frac_positive, stream=kl.median),
    Measure("fgt", "moment", (ALPHA, LINE), "weight",
            "Σ w·1(x < line)·((line − x)/line)^alpha / W (Foster–Greer–Thorbecke)", build_fgt, ref.fgt,
            domain="any x; line > 0", check=_line_positive),
    Measure("wolfson", "ordered", (), "weight", "2·(μ/M)·(1 − 2·L(0.5) − G)", build_wolfson, ref.wolfson,
            domain="any x; NULL when T ≤ 0 or the median ≤ 0", stream=k.wolfson),
]
