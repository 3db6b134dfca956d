"""Structure measures: GE decomposition by subgroup (subgroup pass), concentration indices and
progressivity (ranked pass), the paired Gini difference and its standard error (paired pass).

Subgroup context (passes/subgroup.py): subgroup-level ``Wg``, ``Tg``, ``sub_sum(term)`` of row-level
``x``, ``w``; group-level ``W``, ``T``, ``min_x``. With v_g = W_g/W, s_g = T_g/T, μ_g = T_g/W_g:
  between = GE of the subgroup means = (Σ_g W_g (μ_g/μ)^α / W − 1) / (α(α−1))
  within  = Σ_g v_g^(1−α) s_g^α GE_g = Σ_g (Σ_{i∈g} w x^α − W_g μ_g^α) / (W μ^α α(α−1))
so between + within = GE(α) term by term (Shorrocks 1980, cited from memory); α = 1 (Theil) and α = 0 (MLD) are the
limits: between = Σ_g s_g ln(μ_g/μ) resp. Σ_g v_g ln(μ/μ_g).
"""

from __future__ import annotations

from uneven.catalog import kernels_ranked as kr
from uneven.catalog.spec import Measure, Param
from uneven.reference import structure as rs
from uneven.sqltree import build as s

ZERO = s.lit(0.0)
ALPHA = Param("alpha", "number")
SUBGROUP = Param("subgroup", "column", "the subgroup of each row")


def _domain(ctx, alpha: float):
    if alpha > 0:
        return s.and_(s.gte(ctx.min_x, s.lit(0.0)), s.gt(ctx.T, s.lit(0.0)))
    return s.gt(ctx.min_x, s.lit(0.0))


def _if_pos(cond_value, then, otherwise=None):
    return s.case(s.gt(cond_value, s.lit(0.0)), then, otherwise)


def _sub_mean_term(ctx, alpha: float):
    """Per subgroup: W_g μ_g^α (α ∉ {0, 1}), T_g ln μ_g (α = 1) or W_g ln μ_g (α = 0); 0 for a
    subgroup of zeros when α > 0."""
    mu_g = s.div(ctx.Tg, ctx.Wg)
    if alpha == 1:
        return _if_pos(ctx.Tg, s.mul(ctx.Tg, s.ln(mu_g)), s.lit(0.0))
    if alpha == 0:
        return _if_pos(ctx.Tg, s.mul(ctx.Wg, s.ln(mu_g)))
    return _if_pos(ctx.Tg, s.mul(ctx.Wg, s.power(mu_g, s.lit(alpha))), s.lit(0.0))


def build_ge_between(ctx, params):
    (alpha,) = params
    mean = s.div(ctx.T, ctx.W)
    terms = s.agg_sum(_sub_mean_term(ctx, alpha))
    if alpha == 1:
        value = s.sub(s.div(terms, ctx.T), s.ln(mean))
    elif alpha == 0:
        value = s.sub(s.ln(mean), s.div(terms, ctx.W))
    else:
        value = s.div(s.sub(s.div(s.div(terms, ctx.W), s.power(mean, s.lit(alpha))), s.lit(1.0)),
                      s.lit(alpha * (alpha - 1.0)))
    return s.case(_domain(ctx, alpha), value)


def build_ge_within(ctx, params):
    (alpha,) = params
    x, w = ctx.x, ctx.w
    pos = s.gt(x, s.lit(0.0))
    if alpha == 1:
        own = ctx.sub_sum(s.case(pos, s.mul(w, s.mul(x, s.ln(x))), s.lit(0.0)))  # Σ w x ln x per subgroup
        value = s.div(s.agg_sum(s.sub(own, _sub_mean_term(ctx, alpha))), ctx.T)
    elif alpha == 0:
        own = ctx.sub_sum(s.case(pos, s.mul(w, s.ln(x))))  # Σ w ln x per subgroup
        value = s.div(s.agg_sum(s.sub(_sub_mean_term(ctx, alpha), own)), ctx.W)
    else:
        own = ctx.sub_sum(s.case(pos, s.mul(w, s.power(x, s.lit(alpha))), s.lit(0.0)))  # Σ w x^α per subgroup
        mean = s.div(ctx.T, ctx.W)
        value = s.div(s.agg_sum(s.sub(own, _sub_mean_term(ctx, alpha))),
                      s.mul(s.mul(ctx.W, s.power(mean, s.lit(alpha))), s.lit(alpha * (alpha - 1.0))))
    return s.case(_domain(ctx, alpha), value)


# ------------------------------------------------------------------ concentration (ranked pass)
# The ranked pass sorts by one argument (``sort_arg``) and gives it index 0; the other column
# arguments follow in order (1, 2 …).

RANK_BY = Param("rank_by", "column", "the variable whose order ranks the rows")
LO, HI = Param("lo", "number", "lower bound of the outcome"), Param("hi", "number", "upper bound of the outcome")


def _bounds_check(params):
    lo, hi = params
    return None if lo < hi else f"lo must be below hi, got lo={lo:g}, hi={hi:g}"


def _within_bounds(ctx, lo: float, hi: float):
    return s.and_(s.gte(ctx.vmin(1), s.lit(lo)), s.lte(ctx.vmax(1), s.lit(hi)))


def build_wagstaff(ctx, params):
    lo, hi = params
    mu = s.div(ctx.T(1), ctx.W)
    value = s.div(s.mul(s.mul(ctx.conc(1), s.lit(hi - lo)), mu),
                  s.mul(s.sub(s.lit(hi), mu.copy()), s.sub(mu.copy(), s.lit(lo))))
    inside = s.and_(_within_bounds(ctx, lo, hi), s.gt(mu.copy(), s.lit(lo)), s.lt(mu.copy(), s.lit(hi)))
    return s.case(inside, value)


def build_erreygers(ctx, params):
    lo, hi = params
    mu = s.div(ctx.T(1), ctx.W)
    value = s.div(s.mul(s.mul(s.lit(4.0), mu), ctx.conc(1)), s.lit(hi - lo))
    return s.case(_within_bounds(ctx, lo, hi), value)


MEASURES = [
    Measure("ge_between", "subgroup", (ALPHA, SUBGROUP), "weight",
            "(Σ_g W_g (μ_g/μ)^α / W − 1) / (α(α−1)): GE of the subgroup means; α = 1: Σ s_g ln(μ_g/μ), "
            "α = 0: Σ v_g ln(μ/μ_g)", build_ge_between, rs.ge_between,
            domain="as ge; rows with a NULL subgroup are skipped"),
    Measure("ge_within", "subgroup", (ALPHA, SUBGROUP), "weight",
            "Σ_g v_g^(1−α) s_g^α GE_g (v, s: the subgroup's weight share and value share); ge = ge_between + ge_within",
            build_ge_within, rs.ge_within, domain="as ge; rows with a NULL subgroup are skipped"),
    Measure("concentration", "ranked", (RANK_BY,), "weight",
            "Σ w y (2R − 1) / Σ w y, R the fractional rank of rank_by (mid-rank for ties)",
            lambda c, p: c.conc(1), rs.concentration, value="y", sort_arg=1,
            domain="any y; NULL when Σ w y = 0", stream=kr.concentration),
    Measure("concentration_wagstaff", "ranked", (RANK_BY, LO, HI), "weight",
            "C · (hi − lo) · μ / ((hi − μ)(μ − lo)) for y bounded in [lo, hi] (Wagstaff 2005)", build_wagstaff,
            rs.concentration_wagstaff, value="y", sort_arg=1, check=_bounds_check,
            domain="lo ≤ y ≤ hi, lo < μ < hi", stream=kr.wagstaff),
    Measure("concentration_erreygers", "ranked", (RANK_BY, LO, HI), "weight",
            "4 · μ · C / (hi − lo) for y bounded in [lo, hi] (Erreygers 2009)", build_erreygers,
            rs.concentration_erreygers, value="y", sort_arg=1, check=_bounds_check, domain="lo ≤ y ≤ hi",
            stream=kr.erreygers),
    Measure("kakwani", "ranked", (Param("income", "column", "pre-tax income"),), "weight",
            "concentration(tax, income) − gini(income): > 0 progressive, < 0 regressive",
            lambda c, p: s.sub(c.conc(1), c.conc(0, gini=True)), rs.kakwani, value="tax", sort_arg=1,
            domain="NULL when Σ w tax = 0 or Σ w income ≤ 0", stream=kr.kakwani),
    Measure("reynolds_smolensky", "ranked", (Param("post", "column", "post-tax income"),), "weight",
            "gini(pre) − concentration(post, pre): > 0 the tax reduces inequality",
            lambda c, p: s.sub(c.conc(0, gini=True), c.conc(1)), rs.reynolds_smolensky, value="pre", sort_arg=0,
            domain="NULL when Σ w pre ≤ 0 or Σ w post = 0", stream=kr.reynolds_smolensky),
    Measure("gini_diff", "paired", (Param("x2", "column", "the second value of the same rows"),), "weight",
            "gini(x1) − gini(x2) over the rows where both are present", lambda c, p: c.diff, rs.gini_diff,
            value="x1", domain="NULL when either total ≤ 0"),
    Measure("gini_diff_se", "paired", (Param("x2", "column", "the second value of the same rows"),), "weight",
            "standard error of gini(x1) − gini(x2) on the same rows: linearised Gini of each row, "
            "x1 minus x2, as a with-replacement total", lambda c, p: c.diff_se, rs.gini_diff_se, value="x1",
            domain="NULL when either total ≤ 0 or n < 2"),
]
