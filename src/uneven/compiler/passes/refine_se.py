"""Standard errors of the cut-based measures on the refine plan (passes/refine.py, docs/refine.md).

The linearized pass (passes/linearized.py) sorts every row to get each row's score
u_k = w_k·z_k. For the cut-based measures the score is piecewise linear in x_k:

    u_k = w_k·(a + b·d_k + Σ_c 1_c(k)·(e_c + f_c·d_k)),   d_k = x_k − m (m the group's smallest value)

with group-level coefficients (the same as catalog/linearize.py's) and indicators of two kinds: a
*below* indicator 1(C_k ≤ p·W) (the Lorenz scores) and a *value* indicator 1(x_k ≤ Q_p) (the
quantile scores). Both are constant on a bin that holds no cut: every row of a bin before the cut's
bin has C_k < p·W and x_k < Q_p, every row after it neither. So the with-replacement variance
v = n/(n−1)·[Σu² − (Σu)²/n] needs only, per bin, Σw, Σw·x, Σw², Σw²·x and Σw²·x² (added to the bin
pass), and row by row only the rows the plan reads anyway (the cut bins, whose running weight it
has). A bin of one value needs no rows: its x_k − Q_p is 0 (a below cut's bin of one value holds
Q_p), so either indicator gives the same score.

The bin sums are in x itself, not in d: expanding Σw²(α + β·x)² cancels digits when the values
are close together compared with their size (the loss grows as (max|x|/spread)²). A group whose
spread is below TIGHT of its largest |x| therefore has every bin read row by row (no bin sums),
where d_k is formed exactly as the linearized pass forms it.

The density at a quantile (Hall–Sheather bandwidth, catalog/linearize.py) needs the quantiles at
p ± h, h depending on the group's row count: two more quantile cuts, whose level is an expression
of n instead of a constant.
"""

from __future__ import annotations

from dataclasses import dataclass, field

from sqlglot import exp

from uneven.catalog import variance_floor
from uneven.catalog.linearize import hall_sheather
from uneven.compiler.passes.linearized import output
from uneven.compiler.passes.source import cte, key_name, table
from uneven.sqltree import build as s

TIGHT = 0.1  # a group with max − min < TIGHT·max|x| is read row by row for its variance
ZERO, ONE = 0.0, 1.0
SE_BASES = ("lorenz", "bottom_share", "top_share", "generalized_lorenz", "palma", "s80s20", "quantile_w",
            "percentile_ratio")
ROLES = {"se": "se", "ci_lo": "lo", "ci_hi": "hi"}


def split_name(name: str) -> tuple[str, str] | None:
    """(base measure, role) of an SE or interval measure whose score the refine plan computes."""
    for suffix, role in ROLES.items():
        base = name[:-len(suffix) - 1]
        if name.endswith("_" + suffix) and base in SE_BASES:
            return base, role
    return None


@dataclass
class Score:
    """An estimate and its score's coefficients: {(kind, cut index): coefficient}, kind one of
    "one" (w), "d" (w·d), "bel" (w·1(C ≤ pW)), "dbel" (w·d·1(C ≤ pW)), "qle" (w·1(x ≤ Q))."""

    est: exp.Expression
    parts: list[tuple[tuple[str, int], exp.Expression]] = field(default_factory=list)
    defined: bool = True

    def scaled(self, factor: exp.Expression) -> list[tuple[tuple[str, int], exp.Expression]]:
        return [(k, s.mul(c, factor.copy())) for k, c in self.parts]


def _lorenz(ctx, builds, p: float) -> Score:
    # catalog/linearize.py lorenz: z = [p Q_d + (d − Q_d) 1(C ≤ pW) − L d + m (p − L)] / T
    L = builds["lorenz"](ctx, (p,))
    Qd = s.sub(ctx.quantile(p), ctx.m)
    inv_T = s.div(s.lit(ONE), ctx.T)
    b = ctx.below_index(p)
    one = s.mul(s.add(s.mul(s.lit(p), Qd), s.mul(ctx.m, s.sub(s.lit(p), L.copy()))), inv_T)
    return Score(L, [(("one", 0), one), (("dbel", b), inv_T.copy()),
                     (("bel", b), s.mul(exp.Neg(this=s.paren(Qd.copy())), inv_T.copy())),
                     (("d", 0), s.mul(exp.Neg(this=s.paren(L.copy())), inv_T.copy()))])


def _top(ctx, builds, p: float) -> Score:
    return Score(builds["top_share"](ctx, (p,)), _lorenz(ctx, builds, 1.0 - p).scaled(s.lit(-1.0)))


def _generalized_lorenz(ctx, builds, p: float) -> Score:
    # z = [p Q_d + (d − Q_d) 1(C ≤ pW) + (p m − GL)] / W
    GL = builds["generalized_lorenz"](ctx, (p,))
    Qd = s.sub(ctx.quantile(p), ctx.m)
    inv_W = s.div(s.lit(ONE), ctx.W)
    b = ctx.below_index(p)
    one = s.mul(s.add(s.mul(s.lit(p), Qd), s.sub(s.mul(s.lit(p), ctx.m), GL.copy())), inv_W)
    return Score(GL, [(("one", 0), one), (("dbel", b), inv_W.copy()),
                      (("bel", b), s.mul(exp.Neg(this=s.paren(Qd.copy())), inv_W.copy()))])


def _ratio(num: Score, den: Score) -> Score:
    r = s.case(s.neq(den.est, s.lit(ZERO)), s.div(num.est, den.est.copy()))
    parts = num.scaled(s.div(s.lit(ONE), den.est.copy())) + den.scaled(
        s.div(exp.Neg(this=s.paren(r.copy())), den.est.copy()))
    return Score(r, parts, num.defined and den.defined)


def _quantile(ctx, builds, p: float) -> Score:
    # z = (p − 1(x ≤ Q_p)) / (W f(Q_p)), f̂ = (p⁺ − p⁻)/(Q(p⁺) − Q(p⁻)) (catalog/linearize.py)
    Q = ctx.quantile(p)
    if not 0.0 < p < 1.0:
        return Score(Q, defined=False)
    hi, lo = level(p, 1, ctx.n), level(p, -1, ctx.n)
    spread = s.sub(ctx.quantile(p, 1), ctx.quantile(p, -1))
    density = s.case(s.gt(spread, s.lit(ZERO)), s.div(s.sub(hi, lo), spread.copy()))
    scale = s.div(s.lit(ONE), s.mul(ctx.W, density))
    return Score(Q, [(("one", 0), s.mul(s.lit(p), scale)),
                     (("qle", ctx.quantile_index(p)), s.mul(s.lit(-1.0), scale.copy()))])


def level(p: float, side: int, n: exp.Expression) -> exp.Expression:
    """p ± K(p)·n^(−1/3) within [0, 1], n the group's row count as a DOUBLE (the linearized pass's form)."""
    h = s.mul(s.lit(hall_sheather(p)), s.power(n.copy(), s.lit(-1.0 / 3.0)))
    return s.least(s.add(s.lit(p), h), s.lit(ONE)) if side > 0 else s.greatest(s.sub(s.lit(p), h), s.lit(ZERO))


SCORES = {
    "lorenz": lambda c, b, p: _lorenz(c, b, p[0]),
    "bottom_share": lambda c, b, p: _lorenz(c, b, p[0]),
    "top_share": lambda c, b, p: _top(c, b, p[0]),
    "generalized_lorenz": lambda c, b, p: _generalized_lorenz(c, b, p[0]),
    "palma": lambda c, b, p: _ratio(_top(c, b, 0.1), _lorenz(c, b, 0.4)),
    "s80s20": lambda c, b, p: _ratio(_top(c, b, 0.2), _lorenz(c, b, 0.2)),
    "quantile_w": lambda c, b, p: _quantile(c, b, p[0]),
    "percentile_ratio": lambda c, b, p: _ratio(_quantile(c, b, p[0]), _quantile(c, b, p[1])),
}


# --- lowering -----------------------------------------------------------------------------------

@dataclass
class Scored:
    """One SE call: the columns of its coefficients in the coef CTE, by kind."""

    index: int
    role: str
    level: float
    coefs: dict[tuple[str, int], str]
    defined: bool


def coef_columns(calls: list[tuple[int, Score, str, float]], ctx) -> tuple[list[exp.Expression], list[Scored]]:
    """The coef CTE's columns: each SE call's estimate and coefficients, each value cut's Q."""
    cols: list[exp.Expression] = []
    scored = []
    for i, score, role, lvl in calls:
        cols.append(s.alias(score.est, f"_uv_e{i}"))
        coefs: dict[tuple[str, int], str] = {}
        if score.defined:
            summed: dict[tuple[str, int], exp.Expression] = {}
            for key, c in score.parts:
                summed[key] = s.add(summed[key], c) if key in summed else c
            for j, (key, c) in enumerate(summed.items(), 1):
                coefs[key] = f"_uv_f{i}_{j}"
                cols.append(s.alias(c, coefs[key]))
        scored.append(Scored(i, role, lvl, coefs, score.defined))
    for key in dict.fromkeys(k for sc in scored for k in sc.coefs if k[0] == "qle"):
        cols.append(s.alias(ctx.quantile_value(key[1]), f"_uv_qv{key[1]}"))
    return cols, scored


def _slope_intercept(sc: Scored, coef: str, indicator) -> tuple[exp.Expression, exp.Expression]:
    """(α, β) of u = w·(α + β·d) for rows whose indicators are ``indicator(kind, cut)`` (0/1 trees)."""
    alpha: exp.Expression = s.lit(ZERO)
    beta: exp.Expression = s.lit(ZERO)
    for (kind, cut), name in sc.coefs.items():
        c = s.col(name, coef)
        if kind == "one":
            alpha = s.add(alpha, c)
        elif kind == "d":
            beta = s.add(beta, c)
        elif kind == "dbel":
            beta = s.add(beta, s.mul(indicator("bel", cut), c))
        else:
            alpha = s.add(alpha, s.mul(indicator(kind, cut), c))
    return alpha, beta


def _flag(cond: exp.Expression) -> exp.Expression:
    return s.case(cond, s.lit(ONE), s.lit(ZERO))


def variance_ctes(name: str, nk: int, scored: list[Scored], read: exp.Expression, cut_p,
                  weighted: bool) -> list[exp.CTE]:
    """The var CTE: per group and SE call, Σu (_uv_su{i}) and Σu² (_uv_sq{i}) over the bins not read
    (from their sums) and over the rows read (each row's own score), and the size of Σu²'s products
    before they cancel (_uv_sb{i}, for the rounding bound of result_column)."""
    coef, mark, rows = f"{name}_coef", f"{name}_mark", f"{name}_in"
    if not any(sc.coefs for sc in scored):
        return []

    def on(other: str) -> exp.Expression | None:
        return s.and_(*[exp.NullSafeEQ(this=s.col(key_name(i), other), expression=s.col(key_name(i), coef))
                        for i in range(nk)]) if nk else None

    def joined(below: str) -> exp.Select:
        q = exp.Select().from_(table(below))
        join = exp.Join(this=table(coef), on=on(below)) if nk else exp.Join(this=table(coef), kind="CROSS")
        q.append("joins", join)
        return q

    m = s.col("_uv_m", coef)
    keys = lambda t: [s.alias(s.col(key_name(i), t), key_name(i)) for i in range(nk)]  # noqa: E731

    # bins not read: indicators from the bin's running weight and its largest value
    def bin_indicator(kind: str, cut: int) -> exp.Expression:
        if kind == "bel":
            return _flag(s.lte(s.col("_uv_cb", mark), s.mul(s.lit(cut_p(cut)), s.col("_uv_wt", mark))))
        return _flag(s.lte(s.col("_uv_hi", mark), s.col(f"_uv_qv{cut}", coef)))

    bin_cols = keys(mark)
    for sc in scored:
        if not sc.coefs:
            continue
        a, b = _slope_intercept(sc, coef, bin_indicator)
        a = s.sub(a, s.mul(b.copy(), m.copy()))  # u = w·(a' + b·x): the bin sums are in x
        su = s.add(s.mul(a.copy(), s.col("_uv_wb", mark)), s.mul(b.copy(), s.col("_uv_tb", mark)))
        sq = s.add(s.add(s.mul(s.mul(a.copy(), a.copy()), s.col("_uv_a0", mark)),
                         s.mul(s.mul(s.lit(2.0), s.mul(a.copy(), b.copy())), s.col("_uv_a1", mark))),
                   s.mul(s.mul(b.copy(), b.copy()), s.col("_uv_a2", mark)))
        # Σw²·(|a'| + |b|·|x|)² ≤ (|a'|·sqrt(Σw²) + |b|·sqrt(Σw²x²))² (Cauchy–Schwarz): the size of the
        # products the bin's Σu² cancels, for the variance's rounding bound (result_column)
        size = s.add(s.mul(s.absval(a.copy()), s.sqrt(s.col("_uv_a0", mark))),
                     s.mul(s.absval(b.copy()), s.sqrt(s.col("_uv_a2", mark))))
        bin_cols += [s.alias(su, f"_uv_su{sc.index}"), s.alias(sq, f"_uv_sq{sc.index}"),
                     s.alias(s.mul(size, size.copy()), f"_uv_sb{sc.index}")]
    from_bins = joined(mark).select(*bin_cols, copy=False).where(exp.EQ(this=s.case(read, s.lit(1), s.lit(0)),
                                                                        expression=s.lit(0)))

    # rows read: each row's own indicators, d = x − m formed as the linearized pass forms it
    c_k = s.add(s.col("_uv_cp", rows), s.col("_uv_ci", rows))
    w = s.col("_uv_w", rows) if weighted else s.lit(ONE)

    def row_indicator(kind: str, cut: int) -> exp.Expression:
        if kind == "bel":
            return _flag(s.lte(c_k.copy(), s.mul(s.lit(cut_p(cut)), s.col("_uv_wt", rows))))
        return _flag(s.lte(s.col("_uv_x", rows), s.col(f"_uv_qv{cut}", coef)))

    row_cols = keys(rows)
    d = s.sub(s.col("_uv_x", rows), m.copy())
    for sc in scored:
        if not sc.coefs:
            continue
        a, b = _slope_intercept(sc, coef, row_indicator)
        row_size = s.mul(w.copy(), s.add(s.absval(a.copy()), s.absval(s.mul(b.copy(), d.copy()))))
        u = s.mul(w.copy(), s.add(a, s.mul(b, d.copy())))
        row_cols += [s.alias(u, f"_uv_su{sc.index}"), s.alias(s.mul(u.copy(), u.copy()), f"_uv_sq{sc.index}"),
                     s.alias(s.mul(row_size, row_size.copy()), f"_uv_sb{sc.index}")]
    from_rows = joined(rows).select(*row_cols, copy=False)

    both = exp.union(from_bins, from_rows, distinct=False)
    sums = [s.alias(s.agg_sum(s.col(c.alias_or_name)), c.alias_or_name) for c in bin_cols[nk:]]
    group = [s.col(key_name(i)) for i in range(nk)]
    var = exp.Select(expressions=[k.copy() for k in group] + sums).from_(
        exp.Subquery(this=both, alias=exp.TableAlias(this=exp.to_identifier("_uv_u", quoted=True))))
    if nk:
        var.set("group", exp.Group(expressions=group))
    return [cte(var, f"{name}_var")]


def result_column(sc: Scored, name: str) -> exp.Expression:
    """The SE or interval end of one call from its estimate, Σu and Σu² (linearized.py's rules: NULL
    without a variance or with one row, exactly 0 when every value is equal or the variance is within its
    rounding of 0)."""
    coef, var = f"{name}_coef", f"{name}_var"
    e = s.col(f"_uv_e{sc.index}", coef)
    if not sc.coefs:
        return output(sc.role, e, exp.Cast(this=exp.Null(), to=s.DOUBLE.copy()), sc.level)
    n = s.cast_double(s.col("_uv_n", coef))
    su, sq = s.col(f"_uv_su{sc.index}", var), s.col(f"_uv_sq{sc.index}", var)
    v = s.div(s.sub(s.mul(n.copy(), sq), s.mul(su, su.copy())), s.sub(n.copy(), s.lit(ONE)))
    enough = s.gt(n.copy(), s.lit(ONE))
    equal = exp.EQ(this=s.col("_uv_m", coef), expression=s.col("_uv_top", coef))
    # v ≤ k·eps·B, B = n·Σ(size of u)²/(n − 1) (the bins' products before they cancel, the rows' |terms|:
    # catalog/variance_floor.py), k of the u's three terms (a, b·x, their cross product): within the
    # rounding of 0 (below 0 too)
    size = s.col(f"_uv_sb{sc.index}", var)
    bound = s.case(enough.copy(), s.div(s.mul(n.copy(), size), s.sub(n.copy(), s.lit(ONE))))
    negligible = variance_floor.sql_within(v.copy(), bound, 3, n.copy())
    zero = s.or_(s.paren(equal), s.paren(negligible))
    se = s.case(s.and_(s.not_null(e.copy()), enough.copy(), s.not_null(v.copy())),
                s.case(zero, s.lit(ZERO), s.sqrt(v)))
    return output(sc.role, e.copy(), se, sc.level)


__all__ = ["SCORES", "SE_BASES", "Score", "Scored", "TIGHT", "coef_columns", "level", "result_column", "split_name",
           "variance_ctes"]
