"""Measures computed on the moment pass (one plain GROUP BY of weighted sums) and on the centred
pass (the same sums over rows joined to their group's mean μ: ``ctx.mu`` and ``ctx.r`` = x/μ).

Context: row-level ``x`` and ``w`` (DOUBLE; w is 1.0 when unweighted) to write terms with, and
``sum(term)`` / ``min(term)`` which register a per-group aggregate over the valid rows and return
an expression for it. Shortcuts: ``W`` = Σw, ``T`` = Σw·x, ``n`` = row count, ``min_x``.
Every ln and power is guarded by a CASE so no engine sees ln(0) or a power of a negative.
"""

from __future__ import annotations

from sqlglot import exp

from uneven import reference as ref
from uneven.catalog.scaling import finite, plain_or_scaled, times
from uneven.catalog.spec import Measure, Param
from uneven.sqltree import build as s

ZERO = s.lit(0.0)


def _mean(ctx):
    return s.div(ctx.T, ctx.W)


def _nonneg(ctx):
    return s.and_(s.gte(ctx.min_x, s.lit(0.0)), s.gt(ctx.T, s.lit(0.0)))


def _positive(ctx):
    return s.and_(s.gt(ctx.min_x, s.lit(0.0)), s.gt(ctx.T, s.lit(0.0)))


# Log and power measures run on the centred pass, as sums of non-negative terms in r = x/μ that
# vanish to second order at r = 1: Σw·(r ln r − (r − 1)) instead of Σw·x·ln x / T − ln μ. Both are
# equal since Σw·(r − 1) = 0, but the one-pass form subtracts two numbers near ln μ and keeps no
# digit of a spread of 1e-6 of the mean, while each centred term carries its own (it also forgives
# a rounding of μ to second order). e^y − 1 and ln(1 + u) near 0 use their series (no portable
# expm1/log1p), so nothing cancels there either.

def _series(y, coefficients):
    """c0·y + c1·y² + c2·y³ + … as a flat sum of powers, smallest term first (for |y| < 1e-3 each
    term is a few ulps and the sum rounds once per term). Flat rather than Horner's nested
    y·(c0 + y·(c1 + …)): a left-deep sum without parentheses keeps the SQL nesting shallow (SQLite's
    parser refuses expressions nested about 100 deep), and POWER with a whole exponent is exact to
    an ulp on every engine."""
    terms = [s.mul(s.lit(c), y.copy() if k == 0 else s.power(y.copy(), s.lit(float(k + 1))))
             for k, c in enumerate(coefficients)]
    acc = terms[-1]
    for term in reversed(terms[:-1]):
        acc = exp.Add(this=acc, expression=term)  # left-deep: a + b + c, no parentheses
    return acc


def expm1(y):
    """e^y − 1, to full relative precision for small |y| (series below 1e-3, error < y^7/5040)."""
    small = _series(y, [1.0, 1 / 2, 1 / 6, 1 / 24, 1 / 120, 1 / 720])
    return s.case(s.lt(s.absval(y.copy()), s.lit(1e-3)), small, s.sub(s.func("exp", y.copy()), s.lit(1.0)))


def binomial_minus_one(u, p):
    """(1 + u)^p − 1, to full relative precision for small |u|: where |u|·(|p| + 6) < 1e-3 the binomial
    series to u⁶ (each term at most 1e-3 of the one before, so the rest is below 1e-18 of the first),
    else POWER; NULL where 1 + u ≤ 0. One series in u: nesting expm1(log1p(u)·p) repeated u about 40
    times in the SQL."""
    coefficients, c = [], 1.0
    for k in range(1, 7):
        c = c * (p - (k - 1)) / k
        coefficients.append(c)
    small = _series(u, coefficients)
    big = s.case(s.gt(s.add(s.lit(1.0), u.copy()), s.lit(0.0)),
                 s.sub(s.power(s.add(s.lit(1.0), u.copy()), s.lit(p)), s.lit(1.0)))
    return s.case(s.lt(s.mul(s.absval(u.copy()), s.lit(abs(p) + 6.0)), s.lit(1e-3)), small, big)


def theil_term(r):
    # r ln r − (r − 1); a zero value adds 0·ln 0 − (0 − 1) = 1
    return s.case(s.gt(r, s.lit(0.0)), s.sub(s.mul(r.copy(), s.ln(r.copy())), s.sub(r.copy(), s.lit(1.0))), s.lit(1.0))


def mld_term(r):
    # (r − 1) − ln r, defined for r > 0 (the measure is NULL when a value is ≤ 0)
    return s.case(s.gt(r, s.lit(0.0)), s.sub(s.sub(r.copy(), s.lit(1.0)), s.ln(r.copy())))


def _closed_power_term(r, d, a: float):
    """r^a − 1 − a(r − 1) for the usual parameters, factored through d² with d = r − 1 = (x − μ)/μ
    (formed from x − μ, so it keeps its digits when x is near μ); no ln or exp (algebra: expand each
    right-hand side; √r − 1 = d/(√r + 1)). Valid at r = 0 for a > 0 (each gives a − 1); None for
    other parameters."""
    d = s.paren(d)
    if a == 2.0:  # (r − 1)²
        return s.square(d)
    if a == 3.0:  # (r − 1)²(r + 2)
        return s.mul(s.square(d), s.paren(s.add(r.copy(), s.lit(2.0))))
    if a == -1.0:  # (r − 1)² / r
        return s.div(s.square(d), r.copy())
    if a == -2.0:  # (r − 1)²(2r + 1) / r²
        return s.div(s.mul(s.square(d), s.paren(s.add(s.mul(s.lit(2.0), r.copy()), s.lit(1.0)))),
                     s.square(r.copy()))
    root = s.paren(s.add(s.sqrt(r.copy()), s.lit(1.0)))
    half = s.paren(s.div(d, root))  # √r − 1
    if a == 0.5:  # −(√r − 1)² / 2
        return s.mul(s.lit(-0.5), s.square(half))
    if a == -0.5:  # (√r − 1)²(√r + 2) / (2√r)
        return s.div(s.mul(s.square(half), s.paren(s.add(s.sqrt(r.copy()), s.lit(2.0)))),
                     s.mul(s.lit(2.0), s.sqrt(r.copy())))
    return None


def deviation(ctx):
    """(x − μ)/μ at row level: r − 1 without the rounding of r next to 1."""
    return s.div(s.sub(ctx.x, ctx.mu), ctx.mu_divisor)


def power_term(ctx, a: float):
    # r^a − 1 − a(r − 1) = expm1(a ln r) − a(r − 1); at r = 0 (a > 0 only): a − 1
    r = ctx.r
    closed = _closed_power_term(r, deviation(ctx), a)
    if closed is not None:
        return closed if a > 0 else s.case(s.gt(r, s.lit(0.0)), closed)
    y = s.mul(s.lit(a), s.ln(r.copy()))
    return s.case(s.gt(r, s.lit(0.0)), s.sub(expm1(y), s.mul(s.lit(a), s.sub(r.copy(), s.lit(1.0)))), s.lit(a - 1.0))


def mean_of(ctx, term):
    return s.div(ctx.sum(s.mul(ctx.w, term)), ctx.W)


# Two forms of the log and power measures. A context with the group mean at row level (the centred
# pass: ``row_mean``) sums terms in r = x/μ that cancel nothing, so a tiny spread keeps its digits.
# Contexts that see one group's rows only through aggregates (the rows of a standard error or a
# bootstrap replicate, the DuckDB macro lists) take the one-pass sums Σw·x·ln x / T − ln μ …, exact
# to about 1e-9 on ordinary data and losing digits as the spread shrinks (docs/input-policy.md).

def row_mean(ctx) -> bool:
    return getattr(ctx, "row_mean", False)


def sum_w_x_ln_x(ctx):
    return ctx.sum(s.case(s.gt(ctx.x, s.lit(0.0)), s.mul(ctx.w, s.mul(ctx.x, s.ln(ctx.x))), s.lit(0.0)))


def sum_w_ln_x(ctx):
    return ctx.sum(s.case(s.gt(ctx.x, s.lit(0.0)), s.mul(ctx.w, s.ln(ctx.x))))


def _pow(x, a: float):
    # x² and x^½ as a product and a square root (both correctly rounded; POWER is within an ulp),
    # at a fraction of POWER's per-row cost (bench/README.md, "Moment measures")
    if a == 2.0:
        return s.square(x)
    if a == 0.5:
        return s.sqrt(x)
    return s.power(x, s.lit(a))


def sum_w_x_pow(ctx, a: float):
    return ctx.sum(s.case(s.gt(ctx.x, s.lit(0.0)), s.mul(ctx.w, _pow(ctx.x, a)), s.lit(0.0)))


def _moment_of(ctx, a: float):
    """Σ w x^a / W / μ^a (one-pass form)."""
    return s.div(s.div(sum_w_x_pow(ctx, a), ctx.W), s.power(_mean(ctx), s.lit(a)))


def build_theil(ctx, params=()):
    if not row_mean(ctx):  # Σ w x ln x / T − ln μ
        return s.case(_nonneg(ctx), s.sub(s.div(sum_w_x_ln_x(ctx), ctx.T), s.ln(_mean(ctx))))
    # Σ w x ln(x/μ) / T = Σ w (r ln r − (r − 1)) / W
    return s.case(_nonneg(ctx), mean_of(ctx, theil_term(ctx.r)))


def build_mld(ctx, params=()):
    if not row_mean(ctx):  # ln μ − Σ w ln x / W
        return s.case(_positive(ctx), s.sub(s.ln(_mean(ctx)), s.div(sum_w_ln_x(ctx), ctx.W)))
    # Σ w ln(μ/x) / W = Σ w ((r − 1) − ln r) / W
    return s.case(_positive(ctx), mean_of(ctx, mld_term(ctx.r)))


def build_ge(ctx, params):
    (alpha,) = params
    if alpha == 0:
        return build_mld(ctx)
    if alpha == 1:
        return build_theil(ctx)
    domain = _nonneg(ctx) if alpha > 0 else _positive(ctx)
    if not row_mean(ctx):
        return s.case(domain, s.div(s.sub(_moment_of(ctx, alpha), s.lit(1.0)), s.lit(alpha * (alpha - 1.0))))
    # (Σ w r^α / W − 1) / (α(α−1)) = Σ w (r^α − 1 − α(r − 1)) / W / (α(α−1))
    return s.case(domain, s.div(mean_of(ctx, power_term(ctx, alpha)), s.lit(alpha * (alpha - 1.0))))


def build_atkinson(ctx, params):
    (eps,) = params
    if eps == 0:  # 1 − μ/μ: exactly 0 wherever defined (no rounding of μ/μ or of its series)
        return s.case(_nonneg(ctx), s.lit(0.0))
    if not row_mean(ctx):  # 1 − (Σ w x^(1−ε) / W)^(1/(1−ε)) / μ; ε = 1: 1 − exp(Σ w ln x / W) / μ
        domain = _nonneg(ctx) if eps < 1 else _positive(ctx)
        if eps == 1:
            return s.case(domain, s.sub(s.lit(1.0), s.div(s.func("exp", s.div(sum_w_ln_x(ctx), ctx.W)), _mean(ctx))))
        return s.case(domain, s.sub(s.lit(1.0), s.power(_moment_of(ctx, 1.0 - eps), s.lit(1.0 / (1.0 - eps)))))
    if eps == 1:
        # 1 − exp(Σ w ln x / W) / μ = 1 − exp(−mld) = −expm1(−mld)
        mld = mean_of(ctx, mld_term(ctx.r))
        return s.case(_positive(ctx), exp.Neg(this=s.paren(expm1(exp.Neg(this=s.paren(mld))))))
    beta = 1.0 - eps
    domain = _nonneg(ctx) if eps < 1 else _positive(ctx)
    # 1 − (Σ w r^β / W)^(1/β) = −((1 + u)^(1/β) − 1) with u = Σ w (r^β − 1 − β(r − 1)) / W
    u = mean_of(ctx, power_term(ctx, beta))
    return s.case(domain, exp.Neg(this=s.paren(binomial_minus_one(u, 1.0 / beta))))


# ---- error bounds of the one-pass forms (the adaptive centred variant) ------------------------------
# On a context with compensated sums (DuckDB's FSUM), each sum S of terms t_i is within F·Σ|t_i| of
# the exact sum of the exact terms, F = 1.2e-15: about 9u for the rounding of a term (a
# product or two and one ln, pow or sqrt, each within an ulp) and of the compensated sum (2u + O(n u²),
# u = 2^-53; Higham, "Accuracy and Stability of Numerical Algorithms", §4.3, from memory). W and T have
# positive terms, so μ = T/W is within 2F + u relatively. Each bound below propagates those
# to first order with a margin (constants rounded up); the centred pass is taken where the bound
# exceeds ADAPTIVE_ACCURACY of the value, and tests check the result against mpmath.

ADAPTIVE_ACCURACY = 1e-11


SUM_ERROR = 1.2e-15  # F; the O(n u²) part is below u for any n < 2^53 rows: 1e-15 + u, rounded up


def _log_range(ctx):
    """L = max |ln x| over the group's positive values (from their min and max: no ln per row), so
    Σ w x |ln x| ≤ L·T and Σ w |ln x| ≤ L·W."""
    def make():
        lo = ctx.min(s.case(s.gt(ctx.x, s.lit(0.0)), ctx.x))
        return s.greatest(s.absval(s.ln(lo)), s.absval(s.ln(ctx.max(ctx.x))))
    return ctx._once("log_range", make)


def _log_bound(ctx):
    # Σ w x ln x / T − ln μ (theil) or ln μ − Σ w ln x / W (mld): F·L from the sum, as much again from
    # T (or W) and the division, 3F + u|ln μ| from ln μ (coefficients rounded up)
    return s.mul(s.lit(SUM_ERROR), s.add(s.add(s.mul(s.lit(3.0), _log_range(ctx)), s.absval(s.ln(_mean(ctx)))),
                                        s.lit(4.0)))


def bound_theil(ctx, params, value):
    return s.case(_nonneg(ctx), _log_bound(ctx))


def bound_mld(ctx, params, value):
    return s.case(_positive(ctx), _log_bound(ctx))


def bound_ge(ctx, params, value):
    # (Q − 1)/(α(α−1)) with Q = Σ w x^α / W / μ^α, positive terms: Q within (4 + 3|α|)F relatively
    (alpha,) = params
    if alpha == 0:
        return bound_mld(ctx, (), value)
    if alpha == 1:
        return bound_theil(ctx, (), value)
    domain = _nonneg(ctx) if alpha > 0 else _positive(ctx)
    q = _moment_of(ctx, alpha)
    return s.case(domain, s.div(s.mul(s.mul(s.lit(SUM_ERROR), s.lit(4.0 + 3.0 * abs(alpha))), q),
                                s.lit(abs(alpha * (alpha - 1.0)))))


def bound_atkinson(ctx, params, value):
    # 1 − V: ε = 1, V = exp(Σ w ln x / W)/μ within (3L + 4)F; otherwise
    # V = (Σ w x^β / W / μ^β)^(1/β), β = 1 − ε, within (4/|β| + 4)F relatively
    (eps,) = params
    v = s.paren(s.sub(s.lit(1.0), value.copy()))
    if eps == 1:
        factor = s.add(s.mul(s.lit(3.0), _log_range(ctx)), s.lit(4.0))
    else:
        factor = s.lit(4.0 / abs(1.0 - eps) + 4.0)
    return s.mul(s.mul(s.lit(SUM_ERROR), factor), v)


def build_cv(ctx, params=()):
    # centred: sqrt(Σ w d² / W) with d = (x − μ)/μ = sqrt(Σ w (x − μ)² / W) / μ, μ joined per group
    # (no cancellation). Dividing by μ first keeps (x − μ)² from overflowing where the total fits
    # (for x ≥ 0, |d| ≤ W); a sum that still overflows gives NULL.
    divisor = getattr(ctx, "mu_divisor", None)
    d = s.div(s.sub(ctx.x, ctx.mu), divisor if divisor is not None else ctx.mu)
    spread = ctx.sum(s.mul(ctx.w, s.square(d)))
    return s.case(s.gt(ctx.T, s.lit(0.0)), finite(s.sqrt(s.div(spread, ctx.W))))


def build_hoover(ctx, params=()):
    # centred pass: ½ Σ |w_i x_i / T − w_i / W| = ½ Σ w_i |x_i − μ| / T (no sort needed)
    spread = ctx.sum(s.mul(ctx.w, s.absval(s.sub(ctx.x, ctx.mu))))
    return s.case(s.gt(ctx.T, s.lit(0.0)), s.div(s.mul(s.lit(0.5), spread), ctx.T))


def build_hhi_rows(ctx, params=()):
    # every row its own entity: 10000 Σ x² / T², as (Σ x² / T) / T; on x·2⁻⁵¹² where x² overflows
    # although T fits (catalog/scaling.py)
    def at(scale):
        xs = times(ctx.x, scale)
        return s.div(s.div(ctx.sum(s.mul(xs, xs.copy())), times(ctx.T, scale)), times(ctx.T, scale))
    return s.case(_nonneg(ctx), s.mul(s.lit(10000.0), plain_or_scaled(at)))


MEASURES = [
    Measure("theil", "centred", (), "weight", "Σ w x ln(x/μ) / T", build_theil, ref.theil,
            domain="x ≥ 0, T > 0", error_bound=bound_theil),
    Measure("mld", "centred", (), "weight", "Σ w ln(μ/x) / W (mean log deviation)", build_mld, ref.mld,
            domain="x > 0", error_bound=bound_mld),
    Measure("ge", "centred", (Param("alpha", "number"),), "weight",
            "(Σ w (x/μ)^α / W − 1) / (α(α−1)); α = 0 is mld, α = 1 is theil", build_ge, ref.ge,
            domain="α > 0: x ≥ 0; α ≤ 0: x > 0", error_bound=bound_ge),
    Measure("atkinson", "centred", (Param("eps", "nonnegative"),), "weight",
            "1 − (Σ w x^(1−ε) / W)^(1/(1−ε)) / μ; ε = 1: 1 − exp(Σ w ln x / W) / μ", build_atkinson,
            ref.atkinson, domain="0 ≤ ε < 1: x ≥ 0; ε ≥ 1: x > 0", error_bound=bound_atkinson),
    Measure("cv", "centred", (), "weight", "sqrt(Σ w (x − μ)² / W) / μ", build_cv, ref.cv,
            domain="μ > 0"),
    Measure("hoover", "centred", (), "weight", "½ Σ |w_i x_i / T − w_i / W|", build_hoover, ref.hoover,
            domain="any x; NULL when T ≤ 0"),
]
