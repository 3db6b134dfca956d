"""Paired pass: two values of the same rows, each with its own running sums, for the Gini difference
and its linearised standard error.

rows CTE:   keys, x, y, w                  (rows where x, y and w are all present, w > 0)
window CTE: … , running Σw and Σw·v in the order of x and, separately, of y; the group's W, T_x, T_y
lin CTE:    … , D_v = Σ_j w_j |v_k − v_j| = v_k (2C_k − W) − (2S_k − T_v) for v = x, y (ROWS running
            sums: rows tied with row k add 0 on either side, so the order within ties is free),
            and A_v = Σ_k w_k D_v,k over the group (a partition total)
result CTE: keys, G_v = A_v / (2 W T_v), Σ u, Σ u², n, where u_k = w_k (z_x,k − z_y,k) and
            z_v,k = D_v,k / (W T_v) − G_v (1/W + v_k / T_v) is ∂G_v/∂w_k, the linearised Gini.
SE of G_x − G_y = sqrt(n/(n−1) · Σ (u_k − ū)²): the with-replacement variance of a total.
"""

from __future__ import annotations

from sqlglot import exp

from uneven.catalog.spec import PassKind
from uneven.compiler.passes.source import (
    Source,
    build_results,
    checked_values,
    cte,
    grouped,
    table,
)
from uneven.sqltree import build as s

ZERO = s.lit(0.0)


class PairedContext:
    """Per group: ``gini(v)`` for v in ("x", "y"), ``diff`` = G_x − G_y and ``diff_se``."""

    def __init__(self, weighted: bool):
        self.weighted = weighted

    @property
    def n(self):
        return s.agg_count_star()

    def _defined(self):
        return s.and_(s.gt(s.agg_min(s.col("_uv_tx")), s.lit(0.0)), s.gt(s.agg_min(s.col("_uv_ty")), s.lit(0.0)))

    def gini(self, v: str) -> exp.Expression:
        return s.agg_min(s.col(f"_uv_g{v}"))

    @property
    def diff(self):
        return s.case(self._defined(), s.sub(self.gini("x"), self.gini("y")))

    @property
    def diff_se(self):
        u = s.col("_uv_u")
        n = s.cast_double(self.n)
        centred = s.sub(s.agg_sum(s.mul(u, u)), s.div(s.mul(s.agg_sum(u.copy()), s.agg_sum(u.copy())), n))
        var = s.mul(s.div(n.copy(), s.sub(n.copy(), s.lit(1.0))), s.greatest(s.lit(0.0), centred))
        return s.case(s.and_(self._defined(), s.gt(self.n, s.lit(1))), s.sqrt(var))


def _running(fn, keys, order):
    return s.window(fn, [k.copy() for k in keys], [order], running=True)


def lower_paired_pass(source: Source, main, plan, name: str) -> tuple[list[exp.CTE], dict[tuple, exp.Expression]]:
    x, (y,) = plan.x, plan.columns
    w, condition = plan.trailing, plan.condition
    ctx = PairedContext(weighted=w is not None)
    out_cols, results = build_results(plan.calls, ctx, name)

    # both values checked as every pass checks its values (docs/input-policy.md): NaN or ±infinity stops
    # the query with the error naming the group, never a NULL difference
    proj, cond, _ = checked_values(source, [(x, "_uv_x"), (y, "_uv_y")], w, condition)
    rows = source.rows(proj, cond)
    keys = source.key_columns()
    wv = s.col("_uv_w") if w is not None else s.lit(1.0)
    cols: list[exp.Expression] = [*(k.copy() for k in keys), s.col("_uv_x"), s.col("_uv_y")]
    cols += [s.col("_uv_w")] if w is not None else []
    win_cols = list(cols)
    for v in ("x", "y"):
        val = s.col(f"_uv_{v}")
        win_cols += [s.alias(_running(s.agg_sum(wv.copy()), keys, val.copy()), f"_uv_c{v}"),
                     s.alias(_running(s.agg_sum(s.mul(wv.copy(), val.copy())), keys, val.copy()), f"_uv_s{v}"),
                     s.alias(s.window(s.agg_sum(s.mul(wv.copy(), val.copy())), [k.copy() for k in keys]), f"_uv_t{v}")]
    win_cols.append(s.alias(s.window(s.agg_sum(wv.copy()), [k.copy() for k in keys]), "_uv_wt"))
    win = exp.Select(expressions=win_cols).from_(table(f"{name}_rows"))

    W = s.col("_uv_wt")
    lin_cols = list(cols) + [W.copy(), s.col("_uv_tx"), s.col("_uv_ty")]
    for v in ("x", "y"):
        val, T = s.col(f"_uv_{v}"), s.col(f"_uv_t{v}")
        D = s.sub(s.mul(val, s.sub(s.mul(s.lit(2.0), s.col(f"_uv_c{v}")), W.copy())),
                  s.sub(s.mul(s.lit(2.0), s.col(f"_uv_s{v}")), T))
        lin_cols += [s.alias(D, f"_uv_d{v}"),
                     s.alias(s.window(s.agg_sum(s.mul(wv.copy(), D.copy())), [k.copy() for k in keys]), f"_uv_a{v}")]
    lin = exp.Select(expressions=lin_cols).from_(table(f"{name}_win"))

    # G_v and u_k at row level; the final GROUP BY sums them
    z = {}
    gini_cols = []
    for v in ("x", "y"):
        T, val = s.col(f"_uv_t{v}"), s.col(f"_uv_{v}")
        G = s.case(s.gt(T, s.lit(0.0)), s.div(s.col(f"_uv_a{v}"), s.mul(s.mul(s.lit(2.0), W.copy()), T.copy())))
        gini_cols.append(s.alias(G, f"_uv_g{v}"))
        z[v] = s.sub(s.div(s.col(f"_uv_d{v}"), s.mul(W.copy(), T.copy())),
                     s.mul(G.copy(), s.add(s.div(s.lit(1.0), W.copy()), s.div(val.copy(), T.copy()))))
    u = s.mul(wv.copy(), s.sub(z["x"], z["y"]))
    both = s.and_(s.gt(s.col("_uv_tx"), s.lit(0.0)), s.gt(s.col("_uv_ty"), s.lit(0.0)))
    lin_u = exp.Select(expressions=[k.copy() for k in keys] + [s.col("_uv_tx"), s.col("_uv_ty")] + gini_cols
                       + [s.alias(s.case(both, u), "_uv_u")]).from_(table(f"{name}_lin"))
    ctes = [cte(rows, f"{name}_rows"), cte(win, f"{name}_win"), cte(lin, f"{name}_lin"),
            cte(lin_u, f"{name}_u"), cte(grouped(keys, out_cols, f"{name}_u"), name)]
    return ctes, results


# the registry's entry (passes/registry.py)
KIND = PassKind.PAIRED
PREFIX = "pair"


def lower(source: Source, main, plan, name: str | None, settings) -> tuple[list[exp.CTE], dict]:
    assert name is not None  # a pass with a PREFIX is given its CTE name
    return lower_paired_pass(source, main, plan, name)
