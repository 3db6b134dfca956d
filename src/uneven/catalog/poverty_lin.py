"""Linearizations of the poverty-line indicators and the Wolfson index (docs/poverty.md,
docs/polarization.md), in the form of catalog/linearize.py: the estimate and the score
u_k = w_k·z_k as (row term, coefficient) pairs.

A relative line z = frac·M moves with the sample: its own influence enters through the median's,
IF_M(x_k) = (0.5 − 1(x_k ≤ M)) / (W·f(M)) (the quantile linearization already used by quantile_w),
times ∂F/∂z·frac, where F is the indicator at a fixed line (Berger and Skinner 2003 and
Osier 2009 linearize the at-risk-of-poverty rate this way; both from memory):

    FGT_α at a fixed line:  z_k = (g_k − F_α)/W,   g_k = 1(x_k < z)·((z − x_k)/z)^α
    ∂F_0/∂z = f(z), the density at the line;   ∂F_α/∂z = (α/z)·(F_{α−1} − F_α) for α ≥ 1

f(M) is the Siddiqui / Bloch–Gastwirth quantile-spacing estimate with the Hall–Sheather bandwidth
(linearize.density_at_quantile); f(z) is the same spacing around p = H (the share below the
line) with the median's bandwidth, capped at H so it stays inside the distribution. For
0 < α < 1 the derivative has no stable sample form: no standard error (NULL). The relative median
gap adds the density at the median of the rows below the line (median_gap, docs/poverty.md).
"""

from __future__ import annotations

from sqlglot import exp

from uneven.catalog import linearize as lz
from uneven.catalog import ordered as ordc
from uneven.catalog import poverty as pov
from uneven.catalog.linearize import Lin, combine, neg
from uneven.sqltree import build as s

ZERO, ONE = s.lit(0.0), s.lit(1.0)
K_MEDIAN = lz.hall_sheather(0.5)


def _gap_sum(ctx, alpha: float, frac: float) -> exp.Expression:
    """Σ w·1(x < z)·((z − x)/z)^α, z = frac·M on every row."""
    z = s.mul(s.lit(frac), ctx.median_row)
    return s.agg_sum(s.case(s.gt(ctx.median_row, ZERO), pov.gap_term(ctx.x, z, ctx.w, alpha), ZERO))


def density_at_line(ctx, frac: float) -> exp.Expression:
    """f̂(z) = (p⁺ − p⁻)/(Q(p⁺) − Q(p⁻)), p± = H ± h, h = min(K(0.5)·n^(−1/3), H), H the share
    below the line: row-level forms inside the quantiles' conditions, group-level in the numerator."""
    P_row = ctx.below_weight_row(frac)
    H_row = s.div(P_row, ctx.W_row)
    h_row = s.least(s.mul(s.lit(K_MEDIAN), s.power(ctx.n_row, s.lit(-1.0 / 3.0))), H_row)
    H_grp = s.div(s.agg_max(P_row.copy()), ctx.W)
    h_grp = s.least(s.mul(s.lit(K_MEDIAN), s.power(s.cast_double(ctx.n), s.lit(-1.0 / 3.0))), H_grp)
    hi_row, lo_row = s.least(s.add(H_row.copy(), h_row), ONE), s.sub(H_row.copy(), h_row.copy())
    hi_grp, lo_grp = s.least(s.add(H_grp.copy(), h_grp), ONE), s.sub(H_grp.copy(), h_grp.copy())
    spread = s.sub(lz.quantile_at_expr(ctx, hi_row), lz.quantile_at_expr(ctx, lo_row))
    return s.case(s.gt(spread, ZERO), s.div(s.sub(hi_grp, lo_grp), spread.copy()))


def fgt_relative(ctx, alpha: float, frac: float) -> Lin:
    est = pov.build_fgt_relative(ctx, (alpha, frac))
    if 0 < alpha < 1:
        return Lin(est, defined=False)
    W = ctx.W
    F = s.div(_gap_sum(ctx, alpha, frac), W)
    if alpha == 0:
        slope = density_at_line(ctx, frac)
    else:  # (α/z)(F_{α−1} − F_α), z = frac·M
        z = s.mul(s.lit(frac), s.agg_min(ctx.median_row))
        slope = s.mul(s.div(s.lit(alpha), z), s.sub(s.div(_gap_sum(ctx, alpha - 1.0, frac), W.copy()), F.copy()))
    z = s.mul(s.lit(frac), ctx.median_row)
    g = s.case(s.gt(ctx.median_row, ZERO), pov.gap_term(ctx.x, z, ctx.w, alpha), ZERO)
    # F(ẑ), ẑ = frac·M̂: z_k = (g_k − F)/W + frac·∂F/∂z·z_M,k
    fixed = Lin(est, [(g, s.div(ONE, W.copy())), (ctx.w, s.div(neg(F.copy()), W.copy()))])
    return combine(est.copy(), (ONE, fixed), (s.mul(s.lit(frac), slope), median(ctx)))


def density_at_poor_median(ctx, frac: float) -> exp.Expression:
    """f̂(M_p) = (q⁺ − q⁻)/(Q(q⁺) − Q(q⁻)), q± = H/2 ± h clamped to [0, 1], h = K(0.5)·n^(−1/3): the
    spacing of density_at_quantile around the level H/2 of the median of the rows below the line.
    Clamped, not capped at H/2: q⁺ would then be H itself, a jump of the weighted CDF (the last row
    below the line), where the running and the total weight round differently across engines."""
    q_row = s.div(s.mul(s.lit(0.5), ctx.below_weight_row(frac)), ctx.W_row)
    h_row = s.mul(s.lit(K_MEDIAN), s.power(ctx.n_row, s.lit(-1.0 / 3.0)))
    q_grp = s.div(s.mul(s.lit(0.5), s.agg_max(ctx.below_weight_row(frac))), ctx.W)
    h_grp = s.mul(s.lit(K_MEDIAN), s.power(s.cast_double(ctx.n), s.lit(-1.0 / 3.0)))
    hi_row, lo_row = s.least(s.add(q_row.copy(), h_row), ONE), s.greatest(s.sub(q_row.copy(), h_row.copy()), ZERO)
    hi_grp, lo_grp = s.least(s.add(q_grp.copy(), h_grp), ONE), s.greatest(s.sub(q_grp.copy(), h_grp.copy()), ZERO)
    spread = s.sub(lz.quantile_at_expr(ctx, hi_row), lz.quantile_at_expr(ctx, lo_row))
    return s.case(s.gt(spread, ZERO), s.div(s.sub(hi_grp, lo_grp), spread.copy()))


def median_gap(ctx, frac: float) -> Lin:
    """G = 1 − M_p/z, z = frac·M, M_p = Q(H/2) the median of the rows below the line (docs/poverty.md):

        z_k(M_p) = [½·1(x_k < z) − 1(x_k ≤ M_p)] / (W f(M_p)) + frac·f(z)/(2 f(M_p)) · z_M,k
        z_k(G)   = −z_k(M_p)/z + (1 − G)·frac/z · z_M,k
    """
    G = pov.build_median_gap(ctx, (frac,))
    z = s.mul(s.lit(frac), s.agg_min(ctx.median_row))
    f_p = density_at_poor_median(ctx, frac)
    scale = s.div(ONE, s.mul(ctx.W, f_p))
    below = s.case(pov.below_row(ctx, frac), ctx.w, ZERO)
    at_or_below = s.case(s.lte(ctx.x, ctx.poor_median_row(frac)), ctx.w, ZERO)
    direct = Lin(pov.poor_median(ctx, frac), [(below, s.mul(s.lit(0.5), scale)), (at_or_below, neg(scale.copy()))])
    line = s.div(s.mul(s.lit(0.5 * frac), density_at_line(ctx, frac)), f_p.copy())
    poor = combine(pov.poor_median(ctx, frac), (ONE, direct), (line, median(ctx)))
    return combine(G, (s.div(s.lit(-1.0), z), poor),
                   (s.div(s.mul(s.lit(frac), s.sub(ONE, G.copy())), z.copy()), median(ctx)))


def median(ctx) -> Lin:
    """The weighted median M: z_k = (0.5 − 1(x_k ≤ M))/(W f(M)). The indicator reads M on every row
    (passes/line.py), so tied values on both sides of the half weight count alike, whatever their
    order in the sort."""
    M = ordc.quantile_at(ctx, 0.5)
    scale = s.div(ONE, s.mul(ctx.W, lz.density_at_quantile(ctx, 0.5)))
    at_or_below = s.case(s.lte(ctx.x, ctx.median_row), ONE, ZERO)
    return Lin(M, [(ctx.w, s.mul(s.lit(0.5), scale)), (s.mul(ctx.w, at_or_below), neg(scale.copy()))])


def fgt(ctx, alpha: float, line: float) -> Lin:
    # a fixed line: z_k = (g_k − F)/W, written on the gap less g₀ = g(m), m the group's smallest value:
    #   w_k·z_k = [w_k·(g_k − g₀) − D·w_k] / W,   D = Σ w·(g − g₀) / W = F − g₀
    # so both terms are of the order of the spread of g. In g itself (rows far below the line, g near 0.85
    # and varying by 1e-3) w·g/W and F·w/W cancel to the score, and the variance's quadratic form lost
    # (g/δg)² times the rounding: 3e-8 relative (docs/plans.md, "The moment measures' standard errors")
    est = pov.build_fgt(ctx, (alpha, line))
    W = ctx.W
    shifted = gap_shifted(ctx.x, ctx.min_part, s.lit(line), ctx.w, alpha)
    D = s.div(ctx.sum(shifted.copy()), W)
    return Lin(est, [(shifted, s.div(ONE, W.copy())), (ctx.w, s.div(neg(D), W.copy()))])


def gap_shifted(x, m, z, w, alpha: float) -> exp.Expression:
    """w·(g(x) − g(m)), g(v) = 1(v < z)·((z − v)/z)^α, m ≤ x the group's smallest value (all owned). Below the
    line (then m < z too) the difference is formed without cancelling where it can: 0 at α = 0, (m − x)/z at
    α = 1, ((m − x)/z)·((z − x + z − m)/z) at α = 2 (x near m: m − x exact); else the two powers' difference."""
    gm = pov.gap_term(m.copy(), z.copy(), ONE.copy(), alpha)
    above = neg(s.mul(w.copy(), gm))
    base = lambda v: s.div(s.sub(z.copy(), v.copy()), z.copy())  # noqa: E731
    diff: exp.Expression
    if alpha == 0:
        return s.case(s.lt(x.copy(), z.copy()), ZERO.copy(), above)
    if alpha == 1:
        diff = s.div(s.sub(m.copy(), x.copy()), z.copy())
    elif alpha == 2:
        both = s.div(s.add(s.sub(z.copy(), x.copy()), s.sub(z.copy(), m.copy())), z.copy())
        diff = s.mul(s.div(s.sub(m.copy(), x.copy()), z.copy()), both)
    else:
        diff = s.sub(s.power(base(x), s.lit(alpha)), s.power(base(m), s.lit(alpha)))
    return s.case(s.lt(x, z), s.mul(w, diff), above)


def mean(ctx) -> Lin:
    # μ = T/W: z_k = (x_k − μ)/W
    mu = s.div(ctx.T, ctx.W)
    return Lin(mu, [(s.mul(ctx.w, ctx.x), s.div(ONE, ctx.W)), (ctx.w, s.div(neg(mu.copy()), ctx.W))])


def wolfson(ctx) -> Lin:
    # P = 2(μ/M)(1 − 2L − G): ∂P/∂μ = P/μ, ∂P/∂M = −P/M, ∂P/∂L = −4μ/M, ∂P/∂G = −2μ/M
    P = pov.build_wolfson(ctx, ())
    mu = s.div(ctx.T, ctx.W)
    M = ordc.quantile_at(ctx, 0.5)
    return combine(P, (s.div(P.copy(), mu), mean(ctx)), (s.div(neg(P.copy()), M), median(ctx)),
                   (s.div(s.mul(s.lit(-4.0), mu.copy()), M.copy()), lz.lorenz(ctx, 0.5)),
                   (s.div(s.mul(s.lit(-2.0), mu.copy()), M.copy()), lz.gini(ctx)))


LINEARIZE = {
    "below_line_share": lambda c, p: fgt_relative(c, 0.0, p[0]),
    "median_gap": lambda c, p: median_gap(c, p[0]),
    "fgt_relative": lambda c, p: fgt_relative(c, p[0], p[1]),
    "fgt": lambda c, p: fgt(c, p[0], p[1]),
    "wolfson": lambda c, p: wolfson(c),
}
