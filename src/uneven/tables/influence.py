"""Does one record drive a result? Per group: a measure without the k largest rows, and the exact
leave-one-out change of the Gini, Theil or MLD for the row whose removal changes it most
(Theil/MLD: moment_leave_one_out_sql, from the group totals).

Leave-one-out Gini from the ordered pass. With G = A / (W T), A = ½ Σ_i Σ_j w_i w_j |x_i − x_j|,
removing row k takes its pairs out of A, its weight out of W and w_k x_k out of T:

    G₋ₖ = (A − w_k D_k) / ((W − w_k)(T − w_k x_k)),   D_k = Σ_j w_j |x_k − x_j|
    D_k = x_k (2 C_k − W) − (2 S_k − T)

with C_k, S_k the running Σw and Σw·x in value order (ROWS frame). Rows tied with row k add
x_k·w_j − x_j·w_j = 0 whichever side of k they fall, so the order within ties does not matter; and
Σ_k w_k D_k = 2A gives A without a second pass. Undefined (NULL) when the rest has no weight or
a total ≤ 0.
"""

from __future__ import annotations

import pandas as pd
from sqlglot import exp

from uneven import catalog
from uneven.compiler.clauses import MATERIALIZING
from uneven.engine.frames import callers_frame
from uneven.errors import MeasureArgumentError, UnsupportedSqlError
from uneven.sqltree import build as s
from uneven.tables.base import Spec, group_labels, parse_expression, session

ZERO = s.lit(0.0)


def _check_measure(measure: str, params) -> tuple[str, tuple[float, ...]]:
    m = catalog.lookup(measure) if isinstance(measure, str) else None
    if m is None or m.trailing != "weight" or any(p.kind == "column" for p in m.params) or m.returns != "double":
        raise MeasureArgumentError(f"influence: measure must name a catalog measure of one value with an "
                                   f"optional weight (gini, theil, top_share …), got {measure!r}")
    params = tuple(float(p) for p in (params or ()))
    if len(params) != len(m.params):
        raise MeasureArgumentError(f"influence: {m.signature} needs {len(m.params)} parameter(s), got {len(params)}")
    return m.name, params


def leave_one_out_sql(spec: Spec, x: exp.Expression) -> exp.Select:
    """Per group: G, and the row (value, weight) whose removal changes the Gini most, with G₋ₖ."""
    keys = spec.names()
    part = lambda: [s.col(k) for k in keys]  # noqa: E731
    rows = _rows_cte(spec, x)
    xv, wv = s.col("_uv_x"), s.col("_uv_w")
    win = exp.Select(expressions=part() + [xv, wv,
        s.alias(s.window(s.agg_sum(wv.copy()), part(), [xv.copy()], running=True), "_uv_c"),
        s.alias(s.window(s.agg_sum(s.mul(wv.copy(), xv.copy())), part(), [xv.copy()], running=True), "_uv_s"),
        s.alias(s.window(s.agg_sum(wv.copy()), part()), "_uv_wt"),
        s.alias(s.window(s.agg_sum(s.mul(wv.copy(), xv.copy())), part()), "_uv_t")]).from_(s.table("_uv_loo_rows"))
    W, T = s.col("_uv_wt"), s.col("_uv_t")
    D = s.sub(s.mul(xv.copy(), s.sub(s.mul(s.lit(2.0), s.col("_uv_c")), W.copy())),
              s.sub(s.mul(s.lit(2.0), s.col("_uv_s")), T.copy()))
    lin = exp.Select(expressions=part() + [xv.copy(), wv.copy(), W.copy(), T.copy(), s.alias(D, "_uv_d"),
                                           s.alias(s.window(s.agg_sum(s.mul(wv.copy(), D.copy())), part()), "_uv_a2")]
                     ).from_(s.table("_uv_loo_win"))
    A = s.div(s.col("_uv_a2"), s.lit(2.0))
    gini = s.case(s.gt(T.copy(), ZERO), s.div(A.copy(), s.mul(W.copy(), T.copy())))
    rest_w, rest_t = s.sub(W.copy(), wv.copy()), s.sub(T.copy(), s.mul(wv.copy(), xv.copy()))
    loo = s.case(s.and_(s.gt(T.copy(), ZERO), s.gt(rest_w, ZERO), s.gt(rest_t, ZERO)),
                 s.div(s.sub(A.copy(), s.mul(wv.copy(), s.col("_uv_d"))), s.mul(rest_w.copy(), rest_t.copy())))
    change = exp.Select(expressions=part() + [s.alias(xv.copy(), "value"), s.alias(wv.copy(), "weight"),
                                              s.alias(gini, "_uv_all"), s.alias(loo, "_uv_without")]
                        ).from_(s.table("_uv_loo_lin"))
    return _largest_change(part, [s.cte(rows, "_uv_loo_rows"), s.cte(win, "_uv_loo_win"), s.cte(lin, "_uv_loo_lin")],
                           change, "gini")


def _largest_change(part, ctes: list[exp.CTE], change: exp.Select, name: str) -> exp.Select:
    """From per-row (value, weight, _uv_all, _uv_without): the row whose removal changes the measure
    most (ties: the larger value), as (keys, name, value, weight, name_without_row, change)."""
    size = s.absval(s.sub(s.col("_uv_without"), s.col("_uv_all")))
    rank = s.window(exp.RowNumber(), part(), [exp.Ordered(this=size, desc=True, nulls_first=False),
                                              exp.Ordered(this=s.col("value"), desc=True, nulls_first=False)])
    ranked = exp.Select(expressions=part() + [s.col("value"), s.col("weight"), s.col("_uv_all"), s.col("_uv_without"),
                                              s.alias(rank, "_uv_n")]).from_(s.table("_uv_loo_change"))
    final = exp.Select(expressions=part() + [s.alias(s.col("_uv_all"), name), s.col("value"), s.col("weight"),
                                             s.alias(s.col("_uv_without"), f"{name}_without_row"),
                                             s.alias(s.sub(s.col("_uv_without"), s.col("_uv_all")), "change")])
    final = final.from_(s.table("_uv_loo_ranked")).where(exp.EQ(this=s.col("_uv_n"), expression=exp.Literal.number(1)))
    final.set("with_", exp.With(expressions=ctes + [s.cte(change, "_uv_loo_change"), s.cte(ranked, "_uv_loo_ranked")]))
    return final


def _rows_cte(spec: Spec, x: exp.Expression) -> exp.Select:
    keys = spec.names()
    w = s.cast_double(spec.weight.copy()) if spec.weight is not None else s.lit(1.0)
    rows = exp.Select(expressions=[s.alias(b.copy(), n) for b, n in zip(spec.by, keys)]
                      + [s.alias(s.cast_double(x.copy()), "_uv_x"), s.alias(w, "_uv_w")])
    rows.set("from_", spec.source.copy())
    cond = s.and_(s.not_null(x.copy()), *([s.not_null(spec.weight.copy()), s.gt(w.copy(), ZERO)]
                                          if spec.weight is not None else []))
    rows.set("where", exp.Where(this=cond))
    return rows


def moment_leave_one_out_sql(spec: Spec, x: exp.Expression, name: str) -> exp.Select:
    """Per group: Theil or MLD, and the row whose removal changes it most, from the group totals
    W = Σw, T = Σw·x, A = Σw·x·ln x (x > 0), L = Σw·ln x (x > 0): without row k they are
    W − w_k, T − w_k·x_k, A − w_k·x_k·ln x_k, L − w_k·ln x_k, and

        Theil = A/T − ln(T/W),   MLD = ln(T/W) − L/W

    (exact; NULL where the measure on all rows or on the rest is undefined)."""
    keys = spec.names()
    part = lambda: [s.col(k) for k in keys]  # noqa: E731
    xv, wv = s.col("_uv_x"), s.col("_uv_w")
    pos = s.gt(xv.copy(), ZERO)
    xlnx = s.case(pos, s.mul(xv.copy(), s.ln(xv.copy())), ZERO.copy())
    lnx = s.case(pos.copy(), s.ln(xv.copy()))
    tot = lambda v: s.window(s.agg_sum(v), part())  # noqa: E731
    win = exp.Select(expressions=part() + [xv, wv, s.alias(xlnx, "_uv_xlnx"), s.alias(lnx, "_uv_lnx"),
        s.alias(tot(wv.copy()), "_uv_wt"), s.alias(tot(s.mul(wv.copy(), xv.copy())), "_uv_t"),
        s.alias(tot(s.mul(wv.copy(), xlnx.copy())), "_uv_a"), s.alias(tot(s.mul(wv.copy(), lnx.copy())), "_uv_l"),
        s.alias(s.window(s.agg_min(xv.copy()), part()), "_uv_mn")]).from_(s.table("_uv_loo_rows"))
    W, T, A, L, mn = (s.col(c) for c in ("_uv_wt", "_uv_t", "_uv_a", "_uv_l", "_uv_mn"))
    W1, T1 = s.sub(W.copy(), wv.copy()), s.sub(T.copy(), s.mul(wv.copy(), xv.copy()))
    if name == "theil":
        ok = s.and_(s.gte(mn.copy(), ZERO), s.gt(T.copy(), ZERO))
        full = s.sub(s.div(A.copy(), T.copy()), s.ln(s.div(T.copy(), W.copy())))
        A1 = s.sub(A.copy(), s.mul(wv.copy(), s.col("_uv_xlnx")))
        rest = s.sub(s.div(A1, T1.copy()), s.ln(s.div(T1.copy(), W1.copy())))
    else:  # mld
        ok = s.gt(mn.copy(), ZERO)
        full = s.sub(s.ln(s.div(T.copy(), W.copy())), s.div(L.copy(), W.copy()))
        L1 = s.sub(L.copy(), s.mul(wv.copy(), s.col("_uv_lnx")))
        rest = s.sub(s.ln(s.div(T1.copy(), W1.copy())), s.div(L1, W1.copy()))
    rest_ok = s.and_(ok.copy(), s.gt(W1.copy(), ZERO), s.gt(T1.copy(), ZERO))
    change = exp.Select(expressions=part() + [s.alias(xv.copy(), "value"), s.alias(wv.copy(), "weight"),
                                              s.alias(s.case(ok, full), "_uv_all"),
                                              s.alias(s.case(rest_ok, rest), "_uv_without")]
                        ).from_(s.table("_uv_loo_win"))
    return _largest_change(part, [s.cte(_rows_cte(spec, x), "_uv_loo_rows"), s.cte(win, "_uv_loo_win")], change, name)


LEAVE_ONE_OUT = ("gini", "theil", "mld")


def influence(relation: str, x: str, *, weight: str | None = None, by=(), k: int = 3, measure: str = "gini",
              params=(), con=None) -> pd.DataFrame:
    """Per group of ``by``: ``measure`` on all rows and without the 1…k largest rows (by value, then
    weight), and for the Gini, Theil and MLD the exact leave-one-out change of the most influential
    row (its value, weight, the measure without it and the change). Rows with a NULL value or weight, or weight 0, are
    skipped."""
    if isinstance(k, bool) or not isinstance(k, int) or not 0 <= k <= 100:
        raise MeasureArgumentError(f"influence: k must be a whole number from 0 to 100, got {k!r}")
    name, params = _check_measure(measure, params)
    spec = Spec("influence", relation, by, weight)
    xv = parse_expression(x, "value", "influence")
    keys = spec.names()
    order = [exp.Ordered(this=xv.copy(), desc=True, nulls_first=False)]
    if spec.weight is not None:
        order.append(exp.Ordered(this=spec.weight.copy(), desc=True, nulls_first=False))
    rank = s.window(exp.RowNumber(), [b.copy() for b in spec.by], order)
    inner = exp.Select(expressions=[exp.Star()] + ([s.alias(rank, "_uv_rank")] if k else []))
    inner.set("from_", spec.source.copy())
    cond = s.and_(s.not_null(xv.copy()), *([s.not_null(spec.weight.copy()), s.gt(spec.weight.copy(), ZERO)]
                                           if spec.weight is not None else []))
    inner.set("where", exp.Where(this=cond))
    ranked = Spec("influence", "t", by, weight)
    ranked.source = exp.From(this=exp.Subquery(this=inner, alias=exp.TableAlias(this=exp.to_identifier("_uv_ranked"))))
    call = ranked.measure(name, xv, *[s.lit(p) for p in params])
    items = [s.alias(exp.Count(this=exp.Star()), "rows"), s.alias(call, name)]
    for j in range(1, k + 1):
        cut = exp.Filter(this=call.copy(), expression=exp.Where(this=s.gt(s.col("_uv_rank"), exp.Literal.number(j))))
        items.append(s.alias(cut, f"{name}_without_top_{j}"))
    with session(spec, con, callers_frame()) as run:
        if k and run.dialect not in MATERIALIZING:
            raise UnsupportedSqlError(
                f"influence: the measure without the k largest rows cannot run on {run.label}: it numbers the rows "
                f"(row_number() by value, then weight) and reads them once per pass, and {run.label} may number "
                "them again for each read, ranking tied rows differently; use k=0 there (the leave-one-out "
                "columns still run), or DuckDB, PostgreSQL or SQLite")
        out = run(ranked.select(items, []))
        loo = None
        if name == "gini":
            loo = run(leave_one_out_sql(spec, xv))
        elif name in LEAVE_ONE_OUT:
            loo = run(moment_leave_one_out_sql(spec, xv, name))
    if loo is not None:
        loo = loo.drop(columns=[name]).rename(columns={
            "value": "top_row_value", "weight": "top_row_weight",
            f"{name}_without_row": f"{name}_without_top_row", "change": "top_row_change"})
        out = out.merge(loo, on=keys, how="left") if keys else pd.concat([out, loo], axis=1)
        if spec.weight is None:
            out = out.drop(columns=["top_row_weight"])
    return spec.rename(out, group_labels(by))
