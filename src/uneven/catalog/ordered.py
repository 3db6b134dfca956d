"""Measures computed on the ordered pass: rows sorted by value within each group.
(Hoover needs no order: it lives in moment.py and runs on the centred pass.)

Context columns (row level): ``x``, ``w`` (literal 1.0 when unweighted), ``c`` = running weight C_i,
``min_row`` = the group's smallest value, ``W_row`` = the group's total weight (an extra window
aggregate: use it only when needed). Aggregates: ``W``,
``T``, ``n``. Every build returns one aggregate expression per group.
"""

from __future__ import annotations

from sqlglot import exp

from uneven import reference as ref
from uneven.catalog import kernels as k
from uneven.catalog.scaling import plain_or_scaled, times
from uneven.catalog.spec import Measure, Param
from uneven.sqltree import build as s

P = Param("p", "fraction", "population fraction in [0, 1]")


def _if_positive_total(ctx, value):
    return s.case(s.gt(ctx.T, s.lit(0.0)), value)


def _below_mass(ctx, p: float) -> exp.Expression:
    """Σ x_i · clamp(p·W − C_{i−1}, 0, w_i): the value held by the poorest fraction p of the weight."""
    room = s.sub(s.mul(s.lit(p), ctx.W_row), s.sub(ctx.c, ctx.w))
    return s.agg_sum(s.mul(ctx.x, s.clamp(room, s.lit(0.0), ctx.w)))


def _above_mass(ctx, p: float) -> exp.Expression:
    """Σ x_i · clamp(C_i − (1−p)·W, 0, w_i): the value held by the richest fraction p of the weight."""
    room = s.sub(ctx.c, s.mul(s.lit(1.0 - p), ctx.W_row))
    return s.agg_sum(s.mul(ctx.x, s.clamp(room, s.lit(0.0), ctx.w)))


def lorenz_at(ctx, p: float) -> exp.Expression:
    return _if_positive_total(ctx, s.div(_below_mass(ctx, p), ctx.T))


def top_share_at(ctx, p: float) -> exp.Expression:
    return _if_positive_total(ctx, s.div(_above_mass(ctx, p), ctx.T))


def _ratio(num, den):
    return s.case(s.neq(den, s.lit(0.0)), s.div(num, den.copy()))  # den stands in two places


def quantile_at(ctx, p: float) -> exp.Expression:
    """Smallest x_i with C_i/W ≥ p (weighted inverted CDF).

    The running sum C_n and the group total W are summed in different orders, so C_n/W can come
    out a hair below 1 and leave no row reaching p = 1 (or p within rounding of it): then the
    answer is the last row, the largest x.
    """
    reached = s.gte(s.div(ctx.c, ctx.W_row), s.lit(p))
    return exp.Coalesce(this=s.agg_min(s.case(reached, ctx.x)), expressions=[s.agg_max(ctx.x)])


def upper_rank_term(ctx) -> exp.Expression:
    """w_k · 2((C_k − W)·d_k − S_d,k), d = x − m, S_d the running Σ w·d = S − C·m: the Gini's rank term
    w_k · 2(C_k x_k − S_k) (S the running Σ w·x) less 2W·w_k·d_k. On the upper rows C − W is small, so
    the term stays of the order of the spread there (catalog/linearize.gini). Ties: (C_k − W)·d_k − S_d,k
    = Σ_{j≤k} w_j (d_k − d_j) − W d_k does not depend on the order of tied values."""
    d = s.sub(ctx.x, ctx.min_row)
    s_d = s.sub(ctx.s, s.mul(ctx.c, ctx.min_row))
    return s.mul(ctx.w, s.mul(s.lit(2.0), s.sub(s.mul(s.paren(s.sub(ctx.c, ctx.W_row)), d), s_d)))


def build_gini(ctx, params):
    # Σ w_i x_i (2C_i − w_i − W) / (W·T). Shifting x by a per-group constant m leaves the numerator
    # unchanged (Σ w_i (2C_i − w_i − W) = 0), so it is computed on x − m with m the group's smallest
    # value: Σ w (x − m)(2C − w) − W · Σ w (x − m). The shift removes a large common offset, so
    # the sums keep their digits, and it needs no group total at row level (one window spec only).
    # Divided by W, then by T: W·T may overflow where the ratio does not. Values whose products
    # overflow although T fits (x near 1e308) take the form on x·2⁻⁵¹² (catalog/scaling.py).
    def at(scale):
        shifted = s.mul(ctx.w, times(s.sub(ctx.x, ctx.min_row), scale, 2.0 ** -400))
        num = s.sub(s.agg_sum(s.mul(shifted, s.sub(s.mul(s.lit(2.0), ctx.c), ctx.w))),
                    s.mul(ctx.W, s.agg_sum(shifted.copy())))
        return s.div(s.div(num, ctx.W), times(ctx.T, scale))
    return _if_positive_total(ctx, plain_or_scaled(at))


def build_gini_corrected(ctx, params):
    n = ctx.n
    factor = s.div(s.cast_double(n), s.sub(s.cast_double(n), s.lit(1.0)))
    return s.case(s.gt(n, s.lit(1)), s.mul(build_gini(ctx, params), factor))


def build_palma(ctx, params):
    return _ratio(top_share_at(ctx, 0.1), lorenz_at(ctx, 0.4))


def build_s80s20(ctx, params):
    return _ratio(top_share_at(ctx, 0.2), lorenz_at(ctx, 0.2))


def build_generalized_lorenz(ctx, params):
    return s.div(_below_mass(ctx, params[0]), ctx.W)


def build_percentile_ratio(ctx, params):
    hi, lo = params
    return _ratio(quantile_at(ctx, hi), quantile_at(ctx, lo))


def build_lorenz_curve(ctx, params):
    # k+1 points from one hash aggregate over grid cells (compiler/passes/grid.py), not k+1 sums per row
    return ctx.lorenz_grid(int(params[0]))


MEASURES = [
    Measure("gini", "ordered", (), "weight", "Σ w_i x_i (2C_i − w_i − W) / (W·T)", build_gini, ref.gini,
            domain="any x; NULL when T ≤ 0", stream=k.gini),
    Measure("gini_corrected", "ordered", (), "weight", "gini · n/(n−1), n rows (small-sample variant)",
            build_gini_corrected, ref.gini_corrected, domain="any x; NULL when T ≤ 0 or n < 2",
            stream=k.gini_corrected),
    Measure("lorenz", "ordered", (P,), "weight", "L(p): Lorenz curve through (C_i/W, S_i/T), linear between",
            lambda c, p: lorenz_at(c, p[0]), ref.lorenz, domain="any x; NULL when T ≤ 0", stream=k.lorenz),
    Measure("generalized_lorenz", "ordered", (P,), "weight", "μ·L(p)", build_generalized_lorenz,
            ref.generalized_lorenz, domain="any x", stream=k.generalized_lorenz),
    Measure("bottom_share", "ordered", (P,), "weight", "L(p): share of the poorest fraction p",
            lambda c, p: lorenz_at(c, p[0]), ref.bottom_share, domain="any x; NULL when T ≤ 0",
            stream=k.lorenz),
    Measure("top_share", "ordered", (P,), "weight", "1 − L(1 − p): share of the richest fraction p",
            lambda c, p: top_share_at(c, p[0]), ref.top_share, domain="any x; NULL when T ≤ 0",
            stream=k.top_share),
    Measure("palma", "ordered", (), "weight", "top_share(0.1) / bottom_share(0.4)", build_palma, ref.palma,
            domain="any x; NULL when T ≤ 0 or the bottom share is 0", stream=k.palma),
    Measure("s80s20", "ordered", (), "weight", "top_share(0.2) / bottom_share(0.2)", build_s80s20, ref.s80s20,
            domain="any x; NULL when T ≤ 0 or the bottom share is 0", stream=k.s80s20),
    Measure("quantile_w", "ordered", (P,), "weight", "smallest x_i with C_i/W ≥ p (weighted inverted CDF)",
            lambda c, p: quantile_at(c, p[0]), ref.quantile_w, domain="any x", stream=k.quantile_w),
    Measure("percentile_ratio", "ordered", (Param("hi", "fraction"), Param("lo", "fraction")), "weight",
            "Q(hi) / Q(lo)", build_percentile_ratio, ref.percentile_ratio, domain="any x; NULL when Q(lo) = 0",
            stream=k.percentile_ratio),
    Measure("lorenz_curve", "ordered", (Param("k", "count", "number of segments"),), "weight",
            "[(p, L(p)) for p = 0, 1/k, …, 1] as a list of structs", build_lorenz_curve, ref.lorenz_curve,
            returns="lorenz_points", domain="any x; NULL when T ≤ 0", max_count=1000,
            stream=k.lorenz_curve),
]
