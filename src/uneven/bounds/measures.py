"""Per measure: a point estimate and a certified interval [lo, hi] computed from binned summaries.

Every builder is written against ``BinContext``: one row per bin (after overlapping bins are
joined), bins sorted by value, with the bin's stored sums, its exact min ``a`` and max ``c``, the
running weight ``cp`` and running value ``sp`` of the bins *before* it, and the group totals at row
level. It returns ``Interval(point, lo, hi)``: aggregates of one GROUP BY over the bins.

The proofs are in docs/bounded.md (one section per measure); the comments name the section.
Two facts carry most of them, for a bin of weight W_b, mean m, values in [a, c]:
  (F1) the sum of the lowest u units of weight (0 ≤ u ≤ W_b) lies in
       [max(u·a, T_b − (W_b − u)·c), u·m];
  (F2) for a convex φ, W_b·φ(m) ≤ Σ w·φ(x) ≤ W_b·((c − m)·φ(a) + (m − a)·φ(c))/(c − a) (Jensen, and
       the chord above a convex function); reversed for a concave φ.
Bins do not overlap, so every cross-bin comparison is known exactly.
"""

from __future__ import annotations

from collections.abc import Callable, Iterable
from dataclasses import dataclass

from sqlglot import exp

from uneven.bounds import bins as b
from uneven.sqltree import build as s

ZERO, ONE = s.lit(0.0), s.lit(1.0)
SLACK = 1e-11  # rounding allowance: intervals are widened by SLACK·(1 + |bound|) (docs/bounded.md, "Rounding")
QUANTILE_FUZZ = 1e-10  # a quantile's bin is chosen with p·W ± this fraction of W (a jump point in rounding)


@dataclass
class Interval:
    point: exp.Expression
    lo: exp.Expression
    hi: exp.Expression
    exact: bool = False  # the point is computed from exact sums (the interval only covers rounding)


class BinContext:
    """Columns of the running-sums CTE over the bins (see lower.py)."""

    def __init__(self, powers: Iterable[float] = frozenset()):
        self.powers = set(powers)  # exponents whose Σw·x^a the bins store
        # aggregate tree → (column, aggregate); sqlglot trees hash and compare by structure, which is
        # much cheaper than generating SQL text as the key
        self.aggregates: dict[exp.Expression, tuple[str, exp.Expression]] = {}

    def agg(self, expr: exp.Expression) -> exp.Column:
        """Register an aggregate over the bins (computed once per group in the aggregate CTE) and
        return its column: measures combine columns, so shared parts are not repeated."""
        if expr not in self.aggregates:
            self.aggregates[expr] = (f"_uv_a{len(self.aggregates) + 1}", expr)
        return s.col(self.aggregates[expr][0])

    # row level (one row per bin)
    a = property(lambda self: s.col(b.MIN))
    c = property(lambda self: s.col(b.MAX))
    Wb = property(lambda self: s.col(b.W))
    Tb = property(lambda self: s.col(b.WX))
    cp = property(lambda self: s.col("_uv_cp"))
    sp = property(lambda self: s.col("_uv_sp"))
    gw = property(lambda self: s.col("_uv_gw"))
    gt = property(lambda self: s.col("_uv_gt"))

    # the bin mean, clamped into [a, c] (a rounded T_b/W_b may step a hair outside): a column of the cum CTE
    m = property(lambda self: s.col("_uv_m"))

    @property
    def spread(self):
        """c − a."""
        return s.sub(self.c, self.a)

    # group level (aggregates)
    W = property(lambda self: self.agg(s.agg_sum(s.col(b.W))))
    T = property(lambda self: self.agg(s.agg_sum(s.col(b.WX))))
    n = property(lambda self: self.agg(s.agg_sum(s.col(b.N))))
    min_x = property(lambda self: self.agg(s.agg_min(s.col(b.MIN))))
    max_x = property(lambda self: self.agg(s.agg_max(s.col(b.MAX))))

    def total(self, column: str):
        return self.agg(s.agg_sum(s.col(column)))

    def sum(self, term):
        return self.agg(s.agg_sum(term))


def _if(cond, iv: Interval) -> Interval:
    return Interval(s.case(cond, iv.point), s.case(cond.copy(), iv.lo), s.case(cond.copy(), iv.hi), iv.exact)


def _mid(lo, hi):
    return s.mul(s.lit(0.5), s.add(lo, hi))


def _exact(value) -> Interval:
    return Interval(value, value.copy(), value.copy(), exact=True)


# --- Gini (docs/bounded.md, "Gini") ---------------------------------------------------------------

def _gini_parts(ctx: BinContext):
    # between bins, exactly: Σ_b (T_b·C_{<b} − W_b·S_{<b}) (half the cross-bin pair sum), which equals
    # Σ_b T_b·(2·C_{<b} + W_b) − W·T (Σ_b W_b·S_{<b} = Σ_b T_b·(W − C_{<b} − W_b), summing by parts):
    # one running sum, so one window over the bins instead of two
    between = s.sub(ctx.sum(s.mul(ctx.Tb, s.add(s.mul(s.lit(2.0), ctx.cp), ctx.Wb))), s.mul(ctx.W, ctx.T))
    # within a bin, at most W_b²·(c − m)(m − a)/(c − a) (mass at the two ends), at least 0
    within = ctx.sum(s.case(s.gt(ctx.c, ctx.a), s.div(s.mul(s.mul(ctx.Wb, ctx.Wb),
                                                                s.mul(s.sub(ctx.c, ctx.m), s.sub(ctx.m, ctx.a))),
                                                          ctx.spread), ZERO))
    return between, within


def gini(ctx, params):
    between, within = _gini_parts(ctx)
    den = s.mul(ctx.W, ctx.T)
    lo = s.div(between, den)
    hi = s.div(s.add(between.copy(), within), den.copy())
    # point: two thirds of the way, the within-bin term of values spread evenly over a narrow bin
    point = s.add(lo.copy(), s.mul(s.lit(2.0 / 3.0), s.sub(hi.copy(), lo.copy())))
    return _if(s.gt(ctx.T, ZERO), Interval(point, lo, hi))


def gini_corrected(ctx, params):
    g = gini(ctx, params)
    n = s.cast_double(ctx.n)
    f = s.div(n, s.sub(n.copy(), ONE))
    return _if(s.gt(ctx.n, s.lit(1)), Interval(s.mul(g.point, f), s.mul(g.lo, f.copy()), s.mul(g.hi, f.copy())))


# --- Lorenz ordinates and shares (docs/bounded.md, "Lorenz ordinates") -----------------------------

def _below_mass(ctx, p: float) -> tuple[exp.Expression, exp.Expression]:
    """[lo, hi] of the value held by the lowest fraction p of the weight (fact F1 in the bin holding p·W)."""
    target = s.mul(s.lit(float(p)), ctx.gw)
    u = s.sub(target, ctx.cp)
    full = s.lte(s.add(ctx.cp, ctx.Wb), target.copy())
    none = s.gte(ctx.cp, target.copy())
    part_lo = s.greatest(s.mul(u, ctx.a), s.sub(ctx.Tb, s.mul(s.sub(ctx.Wb, u.copy()), ctx.c)))
    part_hi = s.mul(u.copy(), ctx.m)

    def total(part):
        return ctx.sum(exp.Case(ifs=[exp.If(this=full.copy(), true=ctx.Tb), exp.If(this=none.copy(), true=ZERO)],
                                default=part))
    return total(part_lo), total(part_hi)


def lorenz_interval(ctx, p: float) -> Interval:
    lo, hi = _below_mass(ctx, p)
    T = ctx.T
    iv = Interval(_mid(s.div(lo, T), s.div(hi, T.copy())), s.div(lo.copy(), T.copy()), s.div(hi.copy(), T.copy()))
    return _if(s.gt(ctx.T, ZERO), iv)


def top_interval(ctx, p: float) -> Interval:
    # top_share(p) = 1 − L(1 − p): the bounds swap
    lo, hi = _below_mass(ctx, 1.0 - p)
    T = ctx.T
    top_lo = s.div(s.sub(T, hi), T.copy())
    top_hi = s.div(s.sub(T.copy(), lo), T.copy())
    return _if(s.gt(ctx.T, ZERO), Interval(_mid(top_lo, top_hi), top_lo.copy(), top_hi.copy()))


def generalized_lorenz(ctx, params):
    lo, hi = _below_mass(ctx, params[0])
    W = ctx.W
    return Interval(_mid(s.div(lo, W), s.div(hi, W.copy())), s.div(lo.copy(), W.copy()), s.div(hi.copy(), W.copy()))


def _ratio(num: Interval, den: Interval) -> Interval:
    """num/den over intervals: the four corner quotients; NULL when den's interval reaches 0
    (the ratio is then unbounded, or undefined)."""
    corners = [s.div(x.copy(), y.copy()) for x in (num.lo, num.hi) for y in (den.lo, den.hi)]
    ok = exp.Or(this=s.gt(den.lo.copy(), ZERO), expression=s.lt(den.hi.copy(), ZERO))
    lo = s.least(*[c.copy() for c in corners])
    hi = s.greatest(*[c.copy() for c in corners])
    return _if(ok, Interval(_mid(lo, hi), lo.copy(), hi.copy()))


def palma(ctx, params):
    return _ratio(top_interval(ctx, 0.1), lorenz_interval(ctx, 0.4))


def s80s20(ctx, params):
    return _ratio(top_interval(ctx, 0.2), lorenz_interval(ctx, 0.2))


# --- quantiles (docs/bounded.md, "Quantiles") -----------------------------------------------------

def quantile_interval(ctx, p: float) -> Interval:
    target = s.mul(s.lit(float(p)), ctx.gw)
    fuzz = s.mul(s.lit(QUANTILE_FUZZ), ctx.gw)
    low_t, high_t = s.sub(target, fuzz), s.add(target.copy(), fuzz.copy())
    # candidate bins: those whose weight range [C_{<b}, C_{<b} + W_b] meets [p·W − fuzz, p·W + fuzz]
    cand = s.and_(s.lte(ctx.cp, high_t), s.gte(s.add(ctx.cp, ctx.Wb), low_t))
    f_lo = s.clamp(s.div(s.sub(low_t.copy(), ctx.cp), ctx.Wb), ZERO, ONE)
    f_hi = s.clamp(s.div(s.sub(high_t.copy(), ctx.cp), ctx.Wb), ZERO, ONE)
    m, a, c = ctx.m, ctx.a, ctx.c
    scale = s.add(s.absval(m), s.add(s.absval(a), s.absval(c)))
    # Q ≥ (m − (1 − f)·c)/f and Q ≤ (m − f·a)/(1 − f), within [a, c]; rounding allowance over f
    low_ref = s.sub(s.div(s.sub(m, s.mul(s.sub(ONE, f_lo), c)), f_lo.copy()),
                    s.div(s.mul(s.lit(SLACK), scale), f_lo.copy()))
    high_ref = s.add(s.div(s.sub(m.copy(), s.mul(f_hi, a)), s.sub(ONE, f_hi.copy())),
                     s.div(s.mul(s.lit(SLACK), scale.copy()), s.sub(ONE, f_hi.copy())))
    lo_b = s.case(s.gt(f_lo.copy(), ZERO), s.greatest(a.copy(), low_ref), a.copy())
    hi_b = s.case(s.lt(f_hi.copy(), ONE), s.least(c.copy(), high_ref), c.copy())
    lo = exp.Coalesce(this=ctx.agg(s.agg_min(s.case(cand, lo_b))), expressions=[ctx.min_x])
    hi = exp.Coalesce(this=ctx.agg(s.agg_max(s.case(cand.copy(), hi_b))), expressions=[ctx.max_x])
    return Interval(_mid(lo, hi), lo.copy(), hi.copy())


def percentile_ratio(ctx, params):
    hi_p, lo_p = params
    return _ratio(quantile_interval(ctx, hi_p), quantile_interval(ctx, lo_p))


# --- Hoover (docs/bounded.md, "Hoover") -----------------------------------------------------------

def hoover(ctx, params):
    # ½ Σ w|x − μ| / T = Σ w (x − μ)⁺ / T; a bin wholly above μ adds T_b − W_b μ exactly
    mu = s.div(ctx.gt, ctx.gw)
    above = s.gte(ctx.a, mu)
    below = s.lte(ctx.c, mu.copy())
    exact_above = s.sub(ctx.Tb, s.mul(ctx.Wb, mu.copy()))
    part_lo = s.mul(ctx.Wb, s.greatest(s.sub(ctx.m, mu.copy()), ZERO))  # Jensen
    part_hi = s.div(s.mul(s.mul(ctx.Wb, s.sub(ctx.m, ctx.a)), s.sub(ctx.c, mu.copy())), ctx.spread)  # chord

    def total(part):
        return ctx.sum(exp.Case(ifs=[exp.If(this=above.copy(), true=exact_above.copy()),
                                     exp.If(this=below.copy(), true=ZERO)], default=part))
    T = ctx.T
    lo, hi = s.div(total(part_lo), T), s.div(total(part_hi), T.copy())
    return _if(s.gt(ctx.T, ZERO), Interval(_mid(lo, hi), lo.copy(), hi.copy()))


# --- moment measures (docs/bounded.md, "Moment measures") -----------------------------------------

def _mean(ctx):
    return s.div(ctx.T, ctx.W)


def _nonneg(ctx):
    return s.and_(s.gte(ctx.min_x, ZERO), s.gt(ctx.T, ZERO))


def _positive(ctx):
    return s.gt(ctx.min_x, ZERO)


def theil(ctx, params=()):
    value = s.sub(s.div(ctx.total(b.WXLNX), ctx.T), s.ln(_mean(ctx)))
    return _if(_nonneg(ctx), _exact(value))


def mld(ctx, params=()):
    value = s.sub(s.ln(_mean(ctx)), s.div(ctx.total(b.WLNX), ctx.W))
    return _if(_positive(ctx), _exact(value))


def cv(ctx, params=()):
    # Σw(x − μ)² = Σ_b [W_b (m_b − μ)² + within_b],
    # within_b = Σw x² − T_b²/W_b ∈ [0, W_b (c − m)(m − a)]
    # (Bhatia–Davis); the interval is certified, the point uses the stored Σw·x² (clamped into it)
    mu = s.div(ctx.gt, ctx.gw)
    between = ctx.sum(s.mul(ctx.Wb, s.power(s.sub(ctx.m, mu), s.lit(2.0))))
    cap = s.mul(ctx.Wb, s.mul(s.sub(ctx.c, ctx.m), s.sub(ctx.m, ctx.a)))
    stored = s.sub(s.col(b.WX2), s.div(s.mul(ctx.Tb, ctx.Tb), ctx.Wb))
    within_pt = ctx.sum(s.clamp(stored, ZERO, cap))
    within_hi = ctx.sum(cap.copy())

    def value(ss):
        return s.div(s.sqrt(s.div(ss, ctx.W)), _mean(ctx))
    iv = Interval(value(s.add(between, within_pt)), value(between.copy()), value(s.add(between.copy(), within_hi)))
    return _if(s.gt(ctx.T, ZERO), iv)


def _power_sum(ctx, a: float) -> tuple[exp.Expression, exp.Expression, bool]:
    """[lo, hi] of Σw·x^a over x > 0 rows; exact when the bins store it, else from fact F2."""
    if a in ctx.powers:
        v = ctx.total(b.power_column(a))
        return v, v.copy(), True
    pw = lambda v: s.power(v, s.lit(float(a)))  # noqa: E731
    pos = s.gt(ctx.a, ZERO)
    jensen = s.mul(ctx.Wb, pw(ctx.m))
    mix = s.add(s.mul(s.sub(ctx.c, ctx.m), pw(ctx.a)), s.mul(s.sub(ctx.m, ctx.a), pw(ctx.c)))
    chord = s.case(s.gt(ctx.c, ctx.a), s.div(s.mul(ctx.Wb, mix), ctx.spread), jensen.copy())
    convex = a > 1 or a < 0
    lo_t, hi_t = (jensen, chord) if convex else (chord, jensen)
    lo = exp.Coalesce(this=ctx.sum(s.case(pos, lo_t)), expressions=[ZERO])
    hi = exp.Coalesce(this=ctx.sum(s.case(pos.copy(), hi_t)), expressions=[ZERO])
    return lo, hi, False


def ge(ctx, params):
    (alpha,) = params
    if alpha == 0:
        return mld(ctx)
    if alpha == 1:
        return theil(ctx)
    lo_s, hi_s, exact = _power_sum(ctx, alpha)

    def value(total):
        return s.div(s.sub(s.div(s.div(total, ctx.W), s.power(_mean(ctx), s.lit(float(alpha)))), ONE),
                     s.lit(alpha * (alpha - 1.0)))
    domain = _nonneg(ctx) if alpha > 0 else _positive(ctx)
    if exact:
        return _if(domain, _exact(value(lo_s)))
    lo, hi = value(lo_s), value(hi_s)  # α(α − 1) > 0 exactly where x^α is convex: increasing in the sum
    return _if(domain, Interval(_mid(lo, hi), lo.copy(), hi.copy()))


def atkinson(ctx, params):
    (eps,) = params
    if eps == 1:
        geo = s.func("exp", s.div(ctx.total(b.WLNX), ctx.W))
        return _if(_positive(ctx), _exact(s.sub(ONE, s.div(geo, _mean(ctx)))))
    a = 1.0 - eps
    lo_s, hi_s, exact = _power_sum(ctx, a)

    def value(total):
        return s.sub(ONE, s.div(s.power(s.div(total, ctx.W), s.lit(1.0 / a)), _mean(ctx)))
    domain = _nonneg(ctx) if eps < 1 else _positive(ctx)
    if exact:
        return _if(domain, _exact(value(lo_s)))
    # ε < 1: the equally-distributed equivalent rises with the sum, so Atkinson falls; ε > 1: the reverse
    first, second = (value(hi_s), value(lo_s)) if eps < 1 else (value(lo_s), value(hi_s))
    return _if(domain, Interval(_mid(first, second), first.copy(), second.copy()))


# measure name → its interval builder, called with the bins context and the measure's parameters
BOUNDED: dict[str, Callable[[BinContext, tuple], Interval]] = {
    "gini": gini,
    "gini_corrected": gini_corrected,
    "lorenz": lambda ctx, p: lorenz_interval(ctx, p[0]),
    "bottom_share": lambda ctx, p: lorenz_interval(ctx, p[0]),
    "top_share": lambda ctx, p: top_interval(ctx, p[0]),
    "generalized_lorenz": generalized_lorenz,
    "palma": palma,
    "s80s20": s80s20,
    "quantile_w": lambda ctx, p: quantile_interval(ctx, p[0]),
    "percentile_ratio": percentile_ratio,
    "hoover": hoover,
    "theil": theil,
    "mld": mld,
    "cv": cv,
    "ge": ge,
    "atkinson": atkinson,
}


def powers_needed(name: str, params) -> list[float]:
    """Exponents whose Σw·x^a makes a call exact when the bins store them."""
    if name == "ge" and params[0] not in (0, 1):
        return [float(params[0])]
    if name == "atkinson" and params[0] != 1:
        return [1.0 - float(params[0])]
    return []


def widen(iv: Interval) -> Interval:
    """Widen by the rounding allowance SLACK·(1 + |bound|) (docs/bounded.md, "Rounding")."""
    lo = s.sub(iv.lo, s.mul(s.lit(SLACK), s.add(ONE, s.absval(iv.lo.copy()))))
    hi = s.add(iv.hi, s.mul(s.lit(SLACK), s.add(ONE, s.absval(iv.hi.copy()))))
    return Interval(iv.point, lo, hi, iv.exact)
