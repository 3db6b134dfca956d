"""Measures computed on the moment pass: one plain GROUP BY of weighted sums.

Context: row-level ``x`` and ``w`` (DOUBLE; w is 1.0 when unweighted) to write terms with, and
``sum(term)`` / ``min(term)`` which register a per-group aggregate over the valid rows and return
an expression for it. Shortcuts: ``W`` = Σw, ``T`` = Σw·x, ``n`` = row count, ``min_x``.
Every ln and power is guarded by a CASE so no engine sees ln(0) or a power of a negative.
"""

from __future__ import annotations

from sqlglot import exp

from ineqsql import reference as ref
from ineqsql.catalog.spec import Measure, Param
from ineqsql.compiler import sqlx as s

ZERO = s.lit(0.0)


def _mean(ctx):
    return s.div(ctx.T, ctx.W)


def _sum_w_x_ln_x(ctx):
    return ctx.sum(s.case(s.gt(ctx.x, ZERO), s.mul(ctx.w, s.mul(ctx.x, s.ln(ctx.x))), ZERO))


def _sum_w_ln_x(ctx):
    return ctx.sum(s.case(s.gt(ctx.x, ZERO), s.mul(ctx.w, s.ln(ctx.x))))


def _pow(x, a: float):
    # x² and x^½ as a product and a square root (both correctly rounded; POWER is within an ulp),
    # at a fraction of POWER's per-row cost (bench/README.md, "Moment measures")
    if a == 2.0:
        return s.square(x)
    if a == 0.5:
        return s.sqrt(x)
    return s.power(x, s.lit(a))


def _sum_w_x_pow(ctx, a: float):
    return ctx.sum(s.case(s.gt(ctx.x, ZERO), s.mul(ctx.w, _pow(ctx.x, a)), ZERO))


def _nonneg(ctx):
    return s.and_(s.gte(ctx.min_x, ZERO), s.gt(ctx.T, ZERO))


def _positive(ctx):
    return s.gt(ctx.min_x, ZERO)


def build_theil(ctx, params=()):
    # Σ w x ln(x/μ) / T = Σ w x ln x / T − ln μ
    return s.case(_nonneg(ctx), s.sub(s.div(_sum_w_x_ln_x(ctx), ctx.T), s.ln(_mean(ctx))))


def build_mld(ctx, params=()):
    # Σ w ln(μ/x) / W = ln μ − Σ w ln x / W
    return s.case(_positive(ctx), s.sub(s.ln(_mean(ctx)), s.div(_sum_w_ln_x(ctx), ctx.W)))


def build_ge(ctx, params):
    (alpha,) = params
    if alpha == 0:
        return build_mld(ctx)
    if alpha == 1:
        return build_theil(ctx)
    domain = _nonneg(ctx) if alpha > 0 else _positive(ctx)
    moment = s.div(_sum_w_x_pow(ctx, alpha), ctx.W)
    value = s.div(s.sub(s.div(moment, s.power(_mean(ctx), s.lit(alpha))), s.lit(1.0)),
                  s.lit(alpha * (alpha - 1.0)))
    return s.case(domain, value)


def build_atkinson(ctx, params):
    (eps,) = params
    if eps == 1:
        geo = s.func("exp", s.div(_sum_w_ln_x(ctx), ctx.W))
        return s.case(_positive(ctx), s.sub(s.lit(1.0), s.div(geo, _mean(ctx))))
    domain = _nonneg(ctx) if eps < 1 else _positive(ctx)
    moment = s.div(_sum_w_x_pow(ctx, 1.0 - eps), ctx.W)
    ede = s.power(moment, s.lit(1.0 / (1.0 - eps)))
    return s.case(domain, s.sub(s.lit(1.0), s.div(ede, _mean(ctx))))


def build_cv(ctx, params=()):
    # centred pass: sqrt(Σ w (x − μ)² / W) / μ, with μ joined per group (no cancellation)
    mean = _mean(ctx)
    spread = ctx.sum(s.mul(ctx.w, s.square(s.sub(ctx.x, ctx.mu))))
    return s.case(s.gt(ctx.T, ZERO), s.div(s.sqrt(s.div(spread, ctx.W)), mean))


def build_hoover(ctx, params=()):
    # centred pass: ½ Σ |w_i x_i / T − w_i / W| = ½ Σ w_i |x_i − μ| / T (no sort needed)
    spread = ctx.sum(s.mul(ctx.w, s.absval(s.sub(ctx.x, ctx.mu))))
    return s.case(s.gt(ctx.T, ZERO), s.div(s.mul(s.lit(0.5), spread), ctx.T))


def build_hhi_rows(ctx, params=()):
    # every row its own entity: 10000 Σ x² / (Σ x)²
    squares = ctx.sum(s.mul(ctx.x, ctx.x))
    return s.case(_nonneg(ctx), s.div(s.mul(s.lit(10000.0), squares), s.mul(ctx.T, ctx.T)))


MEASURES = [
    Measure("theil", "moment", (), "weight", "Σ w x ln(x/μ) / T", build_theil, ref.theil,
            domain="x ≥ 0, T > 0"),
    Measure("mld", "moment", (), "weight", "Σ w ln(μ/x) / W (mean log deviation)", build_mld, ref.mld,
            domain="x > 0"),
    Measure("ge", "moment", (Param("alpha", "number"),), "weight",
            "(Σ w (x/μ)^α / W − 1) / (α(α−1)); α = 0 is mld, α = 1 is theil", build_ge, ref.ge,
            domain="α > 0: x ≥ 0; α ≤ 0: x > 0"),
    Measure("atkinson", "moment", (Param("eps", "nonnegative"),), "weight",
            "1 − (Σ w x^(1−ε) / W)^(1/(1−ε)) / μ; ε = 1: 1 − exp(Σ w ln x / W) / μ", build_atkinson,
            ref.atkinson, domain="0 ≤ ε < 1: x ≥ 0; ε ≥ 1: x > 0"),
    Measure("cv", "centred", (), "weight", "sqrt(Σ w (x − μ)² / W) / μ", build_cv, ref.cv,
            domain="μ > 0"),
    Measure("hoover", "centred", (), "weight", "½ Σ |w_i x_i / T − w_i / W|", build_hoover, ref.hoover,
            domain="any x; NULL when T ≤ 0"),
]
