"""Linearizations (influence functions) of the measures, written against ``RowContext``
(compiler/passes/rows.py): each returns a ``Lin`` — the estimate and the per-row score
u_k = w_k·z_k as a list of (row term, coefficient) pairs, where a row term is a row-level
expression that includes the weight and a coefficient is built from group aggregates.

z_k is the derivative of the estimator with respect to the weight of row k (Deville 1999,
"Variance estimation for complex statistics and estimators: linearization and residual
techniques", Survey Methodology 25(2); cited from memory); the formulas and their sources are in
docs/uncertainty.md.
``LINEARIZE[name](ctx, params) -> Lin`` is the reusable entry point (e.g. for paired
differences: the score of θ_a − θ_b is the difference of the two lists).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from statistics import NormalDist

from sqlglot import exp

from uneven.catalog import moment as mom
from uneven.catalog import ordered as ordc
from uneven.sqltree import build as s

ZERO, ONE = s.lit(0.0), s.lit(1.0)


def neg(e: exp.Expression) -> exp.Expression:
    return exp.Neg(this=s.paren(e))


@dataclass
class Lin:
    estimate: exp.Expression
    terms: list[tuple[exp.Expression, exp.Expression]] = field(default_factory=list)
    defined: bool = True  # False: no standard error exists for these parameters (NULL)

    def scaled(self, factor: exp.Expression) -> list[tuple[exp.Expression, exp.Expression]]:
        return [(t, s.mul(c, factor)) for t, c in self.terms]


def combine(estimate: exp.Expression, *parts: tuple[exp.Expression, Lin]) -> Lin:
    """The linearization of a smooth function of several measures: Σ (∂f/∂θ_i) · u_i."""
    terms = []
    for factor, lin in parts:
        terms += lin.scaled(factor)
    return Lin(estimate, terms, all(lin.defined for _, lin in parts))


# --- ordered measures ------------------------------------------------------------------------

def gini(ctx, params=()) -> Lin:
    # z_k = [2 C_k x_k − 2 S_k + T − W x_k − G (T + W x_k)] / (W T)   (Langel & Tillé 2013, from memory)
    # written on d = x − m, m the group's smallest value (T − W x_k = T_d − W d_k, T_d = Σ w d), with
    # the rank term less 2W·d_k (ordered.upper_rank_term: 2((C_k − W) d_k − S_d,k)):
    #   z_k = [2 ((C_k − W) d_k − S_d,k) + (1 − G) W d_k + T_d − G T − G W m] / (W T)
    # so every term or coefficient is of the order of the spread δ. In x itself, w/W and w·x/T
    # (each of order 1) cancel across terms, and the quadratic form of the variance loses
    # (μ/δ)² times the rounding: 3e-3 relative at δ = 1e-6·μ, 3.7e-9 instead of 0 at δ = 0. With the
    # plain rank term 2(C_k d_k − S_d,k), its 2W·d_k on the upper rows (C ≈ W) and the w·d term's
    # −(1 + G) W d_k cancel to (1 − G) W d_k: where G is near 1 and the largest rows carry the variance,
    # the quadratic form lost (2/(1 − G))² times the rounding (1e-9 relative at G = 0.997).
    G = ordc.build_gini(ctx, ())
    W, T = ctx.W, ctx.T
    w, x = ctx.w, ctx.x
    wd = s.mul(w.copy(), s.sub(x.copy(), ctx.min_row))
    T_d = ctx.sum(wd.copy())
    m_G = s.mul(ctx.min_x, G.copy())
    return Lin(G, [
        (ordc.upper_rank_term(ctx), s.div(ONE, s.mul(W, T))),
        (wd, s.div(s.paren(s.sub(ONE, G.copy())), ctx.T)),
        (w.copy(), s.sub(s.div(s.div(s.sub(T_d, s.mul(G.copy(), ctx.T)), ctx.W), ctx.T), s.div(m_G, ctx.T))),
    ])


def below_indicator(ctx, p: float) -> exp.Expression:
    """1 when row k lies wholly within the poorest fraction p of the weight (C_k ≤ p·W). It differs
    from 1(x_k ≤ Q_p) only on rows tied at Q_p, where the Lorenz scores multiply it by
    x_k − Q_p = 0: those scores do not depend on the order of ties, and need no Q_p on every row."""
    return s.case(s.lte(ctx.c, s.mul(s.lit(p), ctx.W_row)), ONE, ZERO)


def _below_mass_terms(ctx, p: float, Q: exp.Expression, T_factor: exp.Expression, w_extra: exp.Expression):
    """Score of B(p) = Σ x_i clamp(pW − C_{i−1}, 0, w_i), times ``T_factor``, plus ``w_extra``·w_k:
    ∂B/∂w_k = p·Q_p + (x_k − Q_p)·1(C_k ≤ pW), written on d = x − m (m the group's smallest value,
    Q_d = Q_p − m) as p·m + p·Q_d + (d_k − Q_d)·1(C_k ≤ pW); the caller folds p·m into ``w_extra``
    against its own term of order m, so every term is of the order of the spread (see gini)."""
    ind = below_indicator(ctx, p)
    Qd = s.sub(Q, ctx.min_x)
    d = s.sub(ctx.x, ctx.min_row)
    return [(ctx.w, s.mul(s.add(s.mul(s.lit(p), Qd), w_extra), T_factor)),
            (s.mul(ctx.w, s.mul(d, ind)), T_factor.copy()),
            (s.mul(ctx.w, ind.copy()), s.mul(neg(Qd.copy()), T_factor.copy()))]


def lorenz(ctx, p: float) -> Lin:
    # L = B/T: z_k = [p Q_p + (x_k − Q_p) 1(x_k ≤ Q_p) − L x_k] / T
    #              = [p Q_d + (d_k − Q_d) 1(x_k ≤ Q_p) − L d_k + m (p − L)] / T   (d = x − m)
    L = ordc.lorenz_at(ctx, p)
    if p <= 0.0 or p >= 1.0:  # L(0) = 0 and L(1) = 1 whatever the rows: a score of exactly 0 (the terms
        return Lin(L, [(ctx.w, ZERO)])  # below would cancel only to a rounding residue, ~1e-8 after the root)
    Q = ordc.quantile_at(ctx, p)
    inv_T = s.div(ONE, ctx.T)
    w_extra = s.mul(ctx.min_x, s.sub(s.lit(p), L.copy()))
    d = s.sub(ctx.x, ctx.min_row)
    terms = _below_mass_terms(ctx, p, Q, inv_T, w_extra) + [(s.mul(ctx.w, d), s.mul(neg(L.copy()), inv_T.copy()))]
    return Lin(L, terms)


def top_share(ctx, p: float) -> Lin:
    # 1 − L(1 − p): the negated score of L(1 − p)
    low = lorenz(ctx, 1.0 - p)
    return Lin(ordc.top_share_at(ctx, p), low.scaled(s.lit(-1.0)))


def generalized_lorenz(ctx, p: float) -> Lin:
    # GL = B/W: z_k = [∂B/∂w_k − GL] / W = [p Q_d + (d_k − Q_d) 1(x_k ≤ Q_p) + (p m − GL)] / W
    GL = ordc.build_generalized_lorenz(ctx, (p,))
    inv_W = s.div(ONE, ctx.W)
    w_extra = s.sub(s.mul(s.lit(p), ctx.min_x), GL.copy())
    return Lin(GL, _below_mass_terms(ctx, p, ordc.quantile_at(ctx, p), inv_W, w_extra))


def _ratio(num: Lin, den: Lin) -> Lin:
    # r = a/b: z_r = (z_a − r z_b)/b
    r = s.case(s.neq(den.estimate, ZERO), s.div(num.estimate, den.estimate))
    return combine(r, (s.div(ONE, den.estimate), num), (s.div(neg(r.copy()), den.estimate), den))


def palma(ctx, params=()) -> Lin:
    return _ratio(top_share(ctx, 0.1), lorenz(ctx, 0.4))


def s80s20(ctx, params=()) -> Lin:
    return _ratio(top_share(ctx, 0.2), lorenz(ctx, 0.2))


def hall_sheather(p: float, alpha: float = 0.05) -> float:
    """The constant K(p) of the Hall & Sheather (1988; from memory) bandwidth h = K(p)·n^(−1/3):
    K = z_{1−α/2}^(2/3) · [1.5 φ(Φ⁻¹(p))² / (2 Φ⁻¹(p)² + 1)]^(1/3)."""
    nd = NormalDist()
    q = nd.inv_cdf(p)
    return nd.inv_cdf(1 - alpha / 2) ** (2 / 3) * (1.5 * nd.pdf(q) ** 2 / (2 * q * q + 1)) ** (1 / 3)


def quantile_at_expr(ctx, p: exp.Expression) -> exp.Expression:
    reached = s.gte(s.div(ctx.c, ctx.W_row), p)
    return exp.Coalesce(this=s.agg_min(s.case(reached, ctx.x)), expressions=[s.agg_max(ctx.x)])


def density_at_quantile(ctx, p: float) -> exp.Expression:
    """f̂(Q_p) = (p⁺ − p⁻) / (Q(p⁺) − Q(p⁻)), p± = p ± h clamped to [0, 1], h Hall–Sheather
    (Siddiqui 1960; Bloch & Gastwirth 1968; both from memory). NULL when the two quantiles coincide."""
    K = hall_sheather(p)
    h_row = s.mul(s.lit(K), s.power(ctx.n_row, s.lit(-1.0 / 3.0)))
    h_grp = s.mul(s.lit(K), s.power(s.cast_double(ctx.n), s.lit(-1.0 / 3.0)))
    hi_row, lo_row = s.least(s.add(s.lit(p), h_row), ONE), s.greatest(s.sub(s.lit(p), h_row.copy()), ZERO)
    hi_grp, lo_grp = s.least(s.add(s.lit(p), h_grp), ONE), s.greatest(s.sub(s.lit(p), h_grp.copy()), ZERO)
    spread = s.sub(quantile_at_expr(ctx, hi_row), quantile_at_expr(ctx, lo_row))
    return s.case(s.gt(spread, ZERO), s.div(s.sub(hi_grp, lo_grp), spread.copy()))


def quantile(ctx, p: float) -> Lin:
    # z_k = (p − 1(x_k ≤ Q_p)) / (W f(Q_p)). The indicator compares the value with Q_p read on
    # every row (passes/line.py), not the running weight with p·W: rows tied at Q_p then count
    # alike, so the score depends on the rows' (x, w) alone, not on how the sort orders ties.
    Q = ordc.quantile_at(ctx, p)
    if not 0.0 < p < 1.0:
        return Lin(Q, defined=False)  # the sample minimum or maximum: not asymptotically normal
    scale = s.div(ONE, s.mul(ctx.W, density_at_quantile(ctx, p)))
    ind = s.case(s.lte(ctx.x, ctx.quantile_row(p)), ONE, ZERO)
    return Lin(Q, [(ctx.w, s.mul(s.lit(p), scale)), (s.mul(ctx.w, ind), s.mul(s.lit(-1.0), scale.copy()))])


def percentile_ratio(ctx, hi: float, lo: float) -> Lin:
    return _ratio(quantile(ctx, hi), quantile(ctx, lo))


# --- moment measures -------------------------------------------------------------------------

def _pos(ctx, value):
    return s.case(s.gt(ctx.x, ZERO), value, ZERO)


# Scores of the log and power measures. On a context with the group mean at row level (``row_mean``:
# the linearized pass) they are written in r = x/μ and d = r − 1 = (x − μ)/μ through the centred
# terms of catalog/moment.py, each of the order of the spread or its square:
#   Theil     z = [g(r) − Th·d − Th] / W,                 g = r ln r − (r − 1)
#   MLD       z = [h(r) − M] / W,                         h = (r − 1) − ln r
#   GE(α)     z = [p(r) − P − α·P·d] / (W α(α−1)),        p = r^α − 1 − α(r − 1), P = mean p = α(α−1)·GE
#   Atkinson  z = −E/(W R) · [(p_β − P)/β − P·d],         β = 1 − ε, R = 1 + P = E^β, E = 1 − A
#             ε = 1: z = E·(h − M) / W,                    E = exp(−M)
# (each is the textbook score below, rewritten with x = μ r, Σ w x^a = W μ^a (1 + P); algebra in
# docs/uncertainty.md). In x itself, terms of order 1 (x ln x / T against 1/W …) cancel to the
# spread's square, and the variance's quadratic form loses (μ/δ)² times the rounding: 2e-5
# relative at a spread of 1 %, all digits at 1e-6. Contexts without a row mean (the macros) keep the
# textbook forms.

def _theil_centred(ctx) -> Lin:
    est, W = mom.build_theil(ctx), ctx.W
    d = mom.deviation(ctx)
    return Lin(est, [(s.mul(ctx.w, mom.theil_term(ctx.r)), s.div(ONE, W)),
                     (s.mul(ctx.w, d), s.div(neg(est.copy()), W.copy())),
                     (ctx.w, s.div(neg(est.copy()), W.copy()))])


def _mld_centred(ctx) -> Lin:
    est, W = mom.build_mld(ctx), ctx.W
    return Lin(est, [(s.mul(ctx.w, mom.mld_term(ctx.r)), s.div(ONE, W)),
                     (ctx.w, s.div(neg(est.copy()), W.copy()))])


def _ge_centred(ctx, alpha: float) -> Lin:
    est, W = mom.build_ge(ctx, (alpha,)), ctx.W
    a2 = alpha * (alpha - 1.0)
    return Lin(est, [(s.mul(ctx.w, mom.power_term(ctx, alpha)), s.div(ONE, s.mul(W, s.lit(a2)))),
                     (ctx.w, s.div(neg(est.copy()), W.copy())),
                     (s.mul(ctx.w, mom.deviation(ctx)), s.div(neg(s.mul(s.lit(alpha), est.copy())), W.copy()))])


def _atkinson_centred(ctx, eps: float) -> Lin:
    est, W = mom.build_atkinson(ctx, (eps,)), ctx.W
    E = s.paren(s.sub(ONE, est.copy()))
    if eps == 1:
        M = mom.mean_of(ctx, mom.mld_term(ctx.r))
        return Lin(est, [(s.mul(ctx.w, mom.mld_term(ctx.r)), s.div(E, W)),
                         (ctx.w, s.div(neg(s.mul(E.copy(), M)), W.copy()))])
    beta = 1.0 - eps
    P = mom.mean_of(ctx, mom.power_term(ctx, beta))
    scale = s.div(E, s.mul(W, s.paren(s.add(ONE, P))))  # E / (W R)
    return Lin(est, [(s.mul(ctx.w, mom.power_term(ctx, beta)), s.div(neg(scale), s.lit(beta))),
                     (ctx.w, s.div(s.mul(scale.copy(), P.copy()), s.lit(beta))),
                     (s.mul(ctx.w, mom.deviation(ctx)), s.mul(scale.copy(), P.copy()))])


def theil(ctx, params=()) -> Lin:
    if mom.row_mean(ctx):
        return _theil_centred(ctx)
    # Th = A/T − ln(T/W), A = Σ w x ln x: z_k = [x_k ln x_k − (A/T + 1) x_k]/T + 1/W
    est = mom.build_theil(ctx)
    A, T = mom.sum_w_x_ln_x(ctx), ctx.T
    return Lin(est, [(s.mul(ctx.w, _pos(ctx, s.mul(ctx.x, s.ln(ctx.x)))), s.div(ONE, T)),
                     (s.mul(ctx.w, ctx.x), s.div(neg(s.add(s.div(A, T.copy()), ONE)), T.copy())),
                     (ctx.w, s.div(ONE, ctx.W))])


def mld(ctx, params=()) -> Lin:
    if mom.row_mean(ctx):
        return _mld_centred(ctx)
    # MLD = ln(T/W) − Lg/W, Lg = Σ w ln x: z_k = x_k/T − 1/W − ln x_k/W + Lg/W²
    est = mom.build_mld(ctx)
    Lg, W = mom.sum_w_ln_x(ctx), ctx.W
    return Lin(est, [(s.mul(ctx.w, ctx.x), s.div(ONE, ctx.T)),
                     (ctx.w, s.div(s.sub(s.div(Lg, W), ONE), W.copy())),
                     (s.mul(ctx.w, _pos(ctx, s.ln(ctx.x))), s.div(s.lit(-1.0), W.copy()))])


def ge(ctx, alpha: float) -> Lin:
    if alpha == 0:
        return mld(ctx)
    if alpha == 1:
        return theil(ctx)
    if mom.row_mean(ctx):
        return _ge_centred(ctx, alpha)
    # R = (V/W)/μ^α, V = Σ w x^α: z_k = [x_k^α R/V + (α−1) R/W − α R x_k/T] / (α(α−1))
    est = mom.build_ge(ctx, (alpha,))
    V, W, T = mom.sum_w_x_pow(ctx, alpha), ctx.W, ctx.T
    R = s.div(s.div(V, W), s.power(s.div(T, W.copy()), s.lit(alpha)))
    return Lin(est, [(s.mul(ctx.w, _pos(ctx, s.power(ctx.x, s.lit(alpha)))),
                      s.div(R, s.mul(V.copy(), s.lit(alpha * (alpha - 1.0))))),
                     (ctx.w, s.div(R.copy(), s.mul(W.copy(), s.lit(alpha)))),
                     (s.mul(ctx.w, ctx.x), s.div(neg(R.copy()), s.mul(T.copy(), s.lit(alpha - 1.0))))])


def atkinson(ctx, eps: float) -> Lin:
    if eps == 0:  # A = 0 wherever defined: its score is exactly 0
        return Lin(mom.build_atkinson(ctx, (eps,)), [(ctx.w, ZERO)])
    if mom.row_mean(ctx):
        return _atkinson_centred(ctx, eps)
    est = mom.build_atkinson(ctx, (eps,))
    W, T = ctx.W, ctx.T
    if eps == 1:
        # E = exp(Lg/W): z_k = −[E ln x_k/T + E (1 − Lg/W)/T − E W x_k/T²]
        Lg = mom.sum_w_ln_x(ctx)
        E = s.func("exp", s.div(Lg, W))
        return Lin(est, [(s.mul(ctx.w, _pos(ctx, s.ln(ctx.x))), s.div(neg(E), T)),
                         (ctx.w, s.div(s.mul(E.copy(), s.sub(s.div(Lg.copy(), W.copy()), ONE)), T.copy())),
                         (s.mul(ctx.w, ctx.x), s.div(s.mul(E.copy(), W.copy()), s.mul(T.copy(), T.copy())))])
    # E = (V/W)^(1/(1−ε)), V = Σ w x^(1−ε), A = 1 − E W/T:
    # z_k = −[E W/(T(1−ε)) (x_k^(1−ε)/V − 1/W) + E/T − E W x_k/T²]
    b = 1.0 - eps
    V = mom.sum_w_x_pow(ctx, b)
    E = s.power(s.div(V, W), s.lit(1.0 / b))
    return Lin(est, [(s.mul(ctx.w, _pos(ctx, s.power(ctx.x, s.lit(b)))),
                      s.div(neg(s.mul(E, W.copy())), s.mul(s.mul(T.copy(), s.lit(b)), V.copy()))),
                     (ctx.w, s.div(s.mul(E.copy(), s.lit(eps / b)), T.copy())),
                     (s.mul(ctx.w, ctx.x), s.div(s.mul(E.copy(), W.copy()), s.mul(T.copy(), T.copy())))])


# name → (linearize(ctx, params), how params are passed)
LINEARIZE = {
    "gini": lambda c, p: gini(c),
    "lorenz": lambda c, p: lorenz(c, p[0]),
    "bottom_share": lambda c, p: lorenz(c, p[0]),
    "generalized_lorenz": lambda c, p: generalized_lorenz(c, p[0]),
    "top_share": lambda c, p: top_share(c, p[0]),
    "palma": lambda c, p: palma(c),
    "s80s20": lambda c, p: s80s20(c),
    "quantile_w": lambda c, p: quantile(c, p[0]),
    "percentile_ratio": lambda c, p: percentile_ratio(c, p[0], p[1]),
    "theil": lambda c, p: theil(c),
    "mld": lambda c, p: mld(c),
    "ge": lambda c, p: ge(c, p[0]),
    "atkinson": lambda c, p: atkinson(c, p[0]),
}

__all__ = ["Lin", "LINEARIZE", "combine", "hall_sheather", "neg"]
