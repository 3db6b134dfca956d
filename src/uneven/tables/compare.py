"""Comparisons: one measure of two values of the same rows (paired), or of two groups of rows.

``compare(rel, "gross", "disposable")``: the paired Gini difference of two values of the same rows,
with its standard error (gini_diff / gini_diff_se of the catalog, the paired pass).

``compare(rel, "income", group=…, groups=(a, b))`` (``compare_groups``): the difference of a
measure between two groups of rows (two provinces, men and women …), with a standard error, in one
of two forms:

``se="design"`` (Gini only): the linearized difference under one survey design. Every row of the
relation (per block of ``by``) belongs to the design; a row of the first group carries
u_k = w_k·z_k(G₁), a row of the second −w_k·z_k(G₂), every other row 0, with z_k the linearized
Gini of its own group (Langel & Tillé 2013, from memory; docs/uncertainty.md):

    z_k = [2 C_k x_k − 2 S_k + T − W x_k − G (T + W x_k)] / (W T)

and v = Σ_h n_h/(n_h − 1) Σ_c (U_hc − Ū_h)² over the PSUs of the whole design (with-replacement
variance of a total). The covariance of the two estimates through shared PSUs is included; PSUs
with rows of neither group count as zeros (domain estimation, not a subset of the design).

``se="independent"`` (any measure with an ``_se`` form): sqrt(se₁² + se₂²), each group's own
linearized SE (with ``strata``/``psu`` applied within the group). Right for independent samples,
or when the groups are unions of whole strata; it ignores any covariance through shared PSUs.
"""

from __future__ import annotations

import math
from collections.abc import Sequence

import pandas as pd
from sqlglot import exp

from uneven import catalog
from uneven.catalog.spec import Measure
from uneven.engine.frames import callers_frame
from uneven.errors import MeasureArgumentError
from uneven.sqltree import build as s
from uneven.tables.base import Spec, group_labels, parse_expression, session

#: Printed by ``uneven compare`` under its table (stderr) and shown in its help.
MANY_COMPARISONS = ("z = difference / se. Comparing many pairs inflates false positives: with no real "
                    "difference, one comparison in twenty still gives |z| > 1.96, so over many groups or pairs "
                    "adjust the threshold (e.g. 5 % divided by the number of comparisons) or read z as a screen.")



# ---------------------------------------------------------------------------- paired comparison
def compare(relation: str, x1: str, x2: str | None = None, *, group: str | None = None, groups=None,
            measure: str = "gini", params=(), se: str | None = None, strata: str | None = None,
            psu: str | None = None, weight: str | None = None, by=(),
            con=None) -> pd.DataFrame:
    """Two forms.

    Two values of the same rows (``compare(rel, "gross", "disposable")``): Gini of each, their
    difference and its standard error accounting for the pairing (linearised Gini per row,
    with-replacement variance of one stratum: a simple random sample or a design whose first-stage
    units are the rows). Rows where either value or the weight is NULL are skipped.

    Two groups of rows (``compare(rel, "income", group="sex", groups=("f", "m"))``): ``measure`` in
    each group, the difference first − second and its standard error, ``se="design"`` (Gini; the
    linearized difference under the design ``strata``/``psu`` shared by both groups, covariance
    included) or ``se="independent"`` (any measure with an ``_se`` form: sqrt(se₁² + se₂²)); see
    ``uneven.compare_groups``. The column ``se_method`` says which was computed.

    ``z`` = difference / se: with many comparisons (many ``by`` groups or pairs), some |z| > 1.96
    turn up by chance alone (one in twenty where there is no difference): see MANY_COMPARISONS."""
    fn = "compare"
    if group is not None or groups is not None:
        if x2 is not None:
            raise MeasureArgumentError(f"{fn}: give either a second value (two values of the same rows) or "
                                       "group= and groups= (two groups of rows), not both")
        if group is None or groups is None:
            raise MeasureArgumentError(f"{fn}: comparing two groups needs both group= (the column) and groups= "
                                       "(its two values)")
        return compare_groups(relation, x1, group, groups, measure=measure, params=params, se=se, weight=weight,
                              strata=strata, psu=psu, by=by, con=con, frame=callers_frame())
    if x2 is None:
        raise MeasureArgumentError(f"{fn}: give a second value of the same rows, or group= and groups=")
    if measure != "gini" or params or se not in (None, "design") or strata is not None or psu is not None:
        raise MeasureArgumentError(f"{fn}: two values of the same rows are compared by their Gini with the "
                                   "paired SE of one stratum (no measure, params, se, strata or psu options)")
    spec = Spec(fn, relation, by, weight)
    a, b = parse_expression(x1, "first value", fn), parse_expression(x2, "second value", fn)
    items = [s.alias(exp.Count(this=exp.Star()), "rows"), s.alias(spec.measure("gini", a), "gini_1"),
             s.alias(spec.measure("gini", b), "gini_2"), s.alias(spec.measure("gini_diff", a, b), "difference"),
             s.alias(spec.measure("gini_diff_se", a, b), "se")]
    with session(spec, con, callers_frame()) as run:
        out = run(spec.select(items, [a, b]))
    out["z"] = out["difference"] / out["se"].where(out["se"] > 0)
    return spec.rename(out, group_labels(by))


ZERO, ONE, TWO = s.lit(0.0), s.lit(1.0), s.lit(2.0)
FN = "compare"


def two_levels(groups) -> tuple:
    ok = (str, int, float)
    if (isinstance(groups, (str, bytes)) or not isinstance(groups, (tuple, list)) or len(groups) != 2
            or not all(isinstance(g, ok) and not isinstance(g, bool) for g in groups) or groups[0] == groups[1]
            or any(isinstance(g, float) and not math.isfinite(g) for g in groups)):
        raise MeasureArgumentError(f"{FN}: groups must be two different values of the group column "
                                   f"(text or numbers), got {groups!r}")
    return tuple(groups)


def _measure(measure: str, params) -> tuple[str, tuple[float, ...]]:
    def usable(m: Measure | None) -> bool:
        return (m is not None and catalog.lookup(f"{m.name}_se") is not None and m.trailing == "weight"
                and not any(p.kind == "column" for p in m.params))

    m = catalog.lookup(measure) if isinstance(measure, str) else None
    if m is None or not usable(m):
        have = sorted(n[:-3] for n in catalog.MEASURES if n.endswith("_se") and usable(catalog.lookup(n[:-3])))
        raise MeasureArgumentError(f"{FN}: measure must be one with a standard error ({', '.join(have)}), "
                                   f"got {measure!r}")
    params = tuple(float(p) for p in (params or ()))
    if len(params) != len(m.params):
        raise MeasureArgumentError(f"{FN}: {m.signature} needs {len(m.params)} parameter(s), got {len(params)}")
    return m.name, params


def _by(keys: Sequence[str], *extra: str) -> list[exp.Column]:
    """The columns a block of ``by`` (and ``extra``) is partitioned or grouped on, by name."""
    return [s.col(k) for k in keys] + [s.col(e) for e in extra]


def _is_group(side: int) -> exp.Expression:
    """The row belongs to the first (1) or the second (2) group."""
    return exp.EQ(this=s.col("_uv_d"), expression=s.lit(side))


def _design_rows(spec: Spec, x: exp.Expression, group: exp.Expression, levels: tuple,
                 strata: exp.Expression | None, psu: exp.Expression | None) -> exp.Select:
    """Every row of the design: its ``by`` keys, value, weight, group (1, 2 or NULL), stratum and PSU."""
    w = s.cast_double(spec.weight.copy()) if spec.weight is not None else ONE.copy()
    member = s.and_(s.not_null(x.copy()), s.gt(w.copy(), ZERO.copy()))
    d = s.case(s.and_(member, exp.EQ(this=group.copy(), expression=exp.convert(levels[0]))), s.lit(1))
    d = d.when(s.and_(member.copy(), exp.EQ(this=group.copy(), expression=exp.convert(levels[1]))), s.lit(2))
    # no PSU: each row its own, numbered in any order (Spark requires an ORDER BY in row_number's window)
    unit = psu.copy() if psu is not None else s.window(exp.RowNumber(), [], [x.copy()])
    rows = exp.Select(expressions=[s.alias(b.copy(), n) for b, n in zip(spec.by, spec.names())] + [
        s.alias(s.cast_double(x.copy()), "_uv_x"), s.alias(w, "_uv_w"), s.alias(d, "_uv_d"),
        s.alias(strata.copy() if strata is not None else s.lit(0), "_uv_h"),
        s.alias(unit, "_uv_psu")])
    rows.set("from_", spec.source.copy())
    if spec.weight is not None:
        rows.set("where", exp.Where(this=s.not_null(spec.weight.copy())))
    return rows


def _group_total(keys: Sequence[str], v: exp.Expression) -> exp.Window:
    return s.window(s.agg_sum(v), _by(keys, "_uv_d"))


def _design_windows(keys: Sequence[str]) -> exp.Select:
    """Per row, within its group: running weight C and weighted value S (in order of the value),
    and the group's totals W and T."""
    xv, wv = s.col("_uv_x"), s.col("_uv_w")

    def running(v: exp.Expression) -> exp.Window:
        return s.window(s.agg_sum(v), _by(keys, "_uv_d"), [xv.copy()], running=True)

    return exp.Select(expressions=_by(keys, "_uv_d", "_uv_h", "_uv_psu") + [
        xv, wv, s.alias(running(wv.copy()), "_uv_c"), s.alias(running(s.mul(wv.copy(), xv.copy())), "_uv_s"),
        s.alias(_group_total(keys, wv.copy()), "_uv_wt"),
        s.alias(_group_total(keys, s.mul(wv.copy(), xv.copy())), "_uv_t")]).from_(s.table("_uv_cmp_rows"))


def _design_gini(keys: Sequence[str]) -> exp.Select:
    """Each row with its group's Gini, G = Σ w x (2C − w − W) / (W T)."""
    xv, wv = s.col("_uv_x"), s.col("_uv_w")
    W, T, C, S = s.col("_uv_wt"), s.col("_uv_t"), s.col("_uv_c"), s.col("_uv_s")
    term = s.mul(s.mul(wv.copy(), xv.copy()), s.sub(s.sub(s.mul(TWO.copy(), C.copy()), wv.copy()), W.copy()))
    gini = s.case(s.gt(T.copy(), ZERO.copy()), s.div(_group_total(keys, term), s.mul(W.copy(), T.copy())))
    return exp.Select(expressions=_by(keys, "_uv_d", "_uv_h", "_uv_psu") + [
        xv.copy(), wv.copy(), C.copy(), S.copy(), W.copy(), T.copy(), s.alias(gini, "_uv_g")]
    ).from_(s.table("_uv_cmp_win"))


def _design_score() -> exp.Expression:
    """u_k: w·z of the row's own group's Gini, negated in the second group, 0 outside both, with
    z = [2 C x − 2 S + T − W x − G (T + W x)] / (W T)."""
    xv, wv = s.col("_uv_x"), s.col("_uv_w")
    W, T, C, S, G = s.col("_uv_wt"), s.col("_uv_t"), s.col("_uv_c"), s.col("_uv_s"), s.col("_uv_g")
    z = s.div(s.sub(s.add(s.sub(s.mul(s.mul(TWO.copy(), C.copy()), xv.copy()), s.mul(TWO.copy(), S.copy())),
                          s.sub(T.copy(), s.mul(W.copy(), xv.copy()))),
                    s.mul(G.copy(), s.add(T.copy(), s.mul(W.copy(), xv.copy())))), s.mul(W.copy(), T.copy()))
    u = s.case(_is_group(1), s.mul(wv.copy(), z))
    u = u.when(_is_group(2), exp.Neg(this=exp.Paren(this=s.mul(wv.copy(), z.copy()))))
    return exp.Coalesce(this=u, expressions=[ZERO.copy()])


def _design_psus(keys: Sequence[str]) -> exp.Select:
    """Per PSU: the total of u, the rows of each group, each group's Gini, whether each group has
    rows and whether its Gini is undefined."""
    G = s.col("_uv_g")

    def in_group(side: int, value: exp.Expression) -> exp.Case:
        return s.case(_is_group(side), value)

    def undefined(side: int) -> exp.Case:
        return s.case(s.and_(_is_group(side), exp.Is(this=G.copy(), expression=exp.Null())), s.lit(1))

    return exp.Select(expressions=_by(keys, "_uv_h", "_uv_psu") + [
        s.alias(s.agg_sum(_design_score()), "_uv_u"),
        s.alias(exp.Count(this=in_group(1, s.lit(1))), "_uv_n1"),
        s.alias(exp.Count(this=in_group(2, s.lit(1))), "_uv_n2"),
        s.alias(exp.Max(this=in_group(1, G.copy())), "_uv_g1"), s.alias(exp.Max(this=in_group(2, G.copy())), "_uv_g2"),
        s.alias(exp.Max(this=in_group(1, s.lit(1))), "_uv_has1"),
        s.alias(exp.Max(this=in_group(2, s.lit(1))), "_uv_has2"),
        s.alias(exp.Max(this=undefined(1)), "_uv_bad1"), s.alias(exp.Max(this=undefined(2)), "_uv_bad2"),
    ]).from_(s.table("_uv_cmp_lin")).group_by(*_by(keys, "_uv_h", "_uv_psu"))


def _design_strata(keys: Sequence[str]) -> exp.Select:
    """Per stratum: the number of PSUs and the sums of U and U², the group rows added up, the
    flags and Gini carried."""
    U = s.col("_uv_u")
    summed = ["_uv_n1", "_uv_n2"]
    highest = ["_uv_g1", "_uv_g2", "_uv_has1", "_uv_has2", "_uv_bad1", "_uv_bad2"]
    return exp.Select(expressions=_by(keys, "_uv_h") + [
        s.alias(s.agg_count_star(), "_uv_nu"), s.alias(s.agg_sum(U.copy()), "_uv_s1"),
        s.alias(s.agg_sum(s.mul(U.copy(), U.copy())), "_uv_s2")]
        + [s.alias(s.agg_sum(s.col(c)), c) for c in summed] + [s.alias(exp.Max(this=s.col(c)), c) for c in highest]
    ).from_(s.table("_uv_cmp_psu")).group_by(*_by(keys, "_uv_h"))


def _design_blocks(keys: Sequence[str]) -> exp.Select:
    """Per block of ``by``: rows of each group, the two Gini, v = Σ_h n_h/(n_h − 1) Σ_c (U_hc − Ū_h)²
    (as (n Σ U² − (Σ U)²)/(n − 1)), the fewest PSUs of a stratum and the flags."""
    n = s.cast_double(s.col("_uv_nu"))
    v_h = s.case(s.gt(s.col("_uv_nu"), s.lit(1)),
                 s.div(s.sub(s.mul(n, s.col("_uv_s2")), s.mul(s.col("_uv_s1"), s.col("_uv_s1"))),
                       s.sub(n.copy(), ONE.copy())))
    fin = exp.Select(expressions=_by(keys) + [
        s.alias(s.agg_sum(s.col("_uv_n1")), "rows_1"), s.alias(s.agg_sum(s.col("_uv_n2")), "rows_2"),
        s.alias(exp.Max(this=s.col("_uv_g1")), "_uv_g1"), s.alias(exp.Max(this=s.col("_uv_g2")), "_uv_g2"),
        s.alias(s.agg_sum(v_h), "_uv_v"), s.alias(exp.Min(this=s.col("_uv_nu")), "_uv_fewest"),
        s.alias(exp.Max(this=s.col("_uv_bad1")), "_uv_bad1"), s.alias(exp.Max(this=s.col("_uv_bad2")), "_uv_bad2"),
        s.alias(exp.Max(this=s.col("_uv_has1")), "_uv_has1"), s.alias(exp.Max(this=s.col("_uv_has2")), "_uv_has2"),
    ]).from_(s.table("_uv_cmp_str"))
    return fin.group_by(*_by(keys)) if keys else fin


def _design_result(keys: Sequence[str]) -> exp.Select:
    """The output columns: NULL Gini where a group has no rows or an undefined Gini, NULL SE also
    where a stratum has a single PSU."""
    ok = s.and_(exp.Is(this=s.col("_uv_bad1"), expression=exp.Null()),
                exp.Is(this=s.col("_uv_bad2"), expression=exp.Null()),
                s.not_null(s.col("_uv_has1")), s.not_null(s.col("_uv_has2")))
    g1 = s.case(ok, s.col("_uv_g1"))
    g2 = s.case(ok.copy(), s.col("_uv_g2"))
    se = s.case(s.and_(ok.copy(), s.gt(s.col("_uv_fewest"), s.lit(1))),
                s.sqrt(s.greatest(s.col("_uv_v"), ZERO.copy())))
    return exp.Select(expressions=_by(keys) + [
        s.col("rows_1"), s.col("rows_2"), s.alias(g1, "gini_1"), s.alias(g2, "gini_2"),
        s.alias(s.sub(g1.copy(), g2.copy()), "difference"), s.alias(se, "se")]).from_(s.table("_uv_cmp_fin"))


def design_difference_sql(spec: Spec, x: exp.Expression, group: exp.Expression, levels: tuple,
                          strata: exp.Expression | None, psu: exp.Expression | None) -> exp.Select:
    """Per block of ``by``: rows and Gini of each group, and the linearized SE of G₁ − G₂ under the
    shared design (strata, PSUs). One CTE per step: rows, windows, Gini, PSUs, strata, blocks."""
    keys = spec.names()
    final = _design_result(keys)
    final.set("with_", exp.With(expressions=[
        s.cte(_design_rows(spec, x, group, levels, strata, psu), "_uv_cmp_rows"),
        s.cte(_design_windows(keys), "_uv_cmp_win"), s.cte(_design_gini(keys), "_uv_cmp_lin"),
        s.cte(_design_psus(keys), "_uv_cmp_psu"), s.cte(_design_strata(keys), "_uv_cmp_str"),
        s.cte(_design_blocks(keys), "_uv_cmp_fin")]))
    return final


def compare_groups(relation: str, x: str, group: str, groups, *, measure: str = "gini", params=(),
                   se: str | None = None, weight: str | None = None, strata: str | None = None,
                   psu: str | None = None, by=(), con=None, frame=None) -> pd.DataFrame:
    """``measure`` of ``x`` in the first and second of ``groups`` (values of ``group``), their
    difference, its standard error and difference/se, per block of ``by``. ``se`` is ``"design"``
    (Gini only, the default for it) or ``"independent"`` (the default for other measures); see the
    module documentation for what each computes."""
    levels = two_levels(groups)
    name, params = _measure(measure, params)
    method = se or ("design" if name == "gini" else "independent")
    if method not in ("design", "independent"):
        raise MeasureArgumentError(f"{FN}: se must be 'design' or 'independent', got {se!r}")
    if method == "design" and name != "gini":
        raise MeasureArgumentError(f"{FN}: se='design' (the linearized difference under one design) is built "
                                   f"for the Gini; use se='independent' for {name}")
    spec = Spec(FN, relation, by, weight)
    xv, gv = parse_expression(x, "value", FN), parse_expression(group, "group column", FN)
    h = parse_expression(strata, "strata", FN) if strata is not None else None
    c = parse_expression(psu, "psu", FN) if psu is not None else None
    keys = spec.names()
    with session(spec, con, frame or callers_frame()) as run:
        if method == "design":
            out = run(design_difference_sql(spec, xv, gv, levels, h, c))
        else:
            out = _independent(spec, run, name, params, xv, gv, levels, h, c)
    out = out.astype({"rows_1": "int64", "rows_2": "int64", "difference": float, "se": float})
    out["z"] = out["difference"] / out["se"].where(out["se"] > 0)
    out["se_method"] = method
    if name != "gini":
        out = out.rename(columns={"gini_1": f"{name}_1", "gini_2": f"{name}_2"})
    out = out.sort_values(keys, kind="stable").reset_index(drop=True) if keys else out
    return spec.rename(out, group_labels(by))


def _independent(spec, run, name, params, xv, gv, levels, h, c) -> pd.DataFrame:
    keys = spec.names()
    consts = [s.lit(p) for p in params]
    opts = [exp.PropertyEQ(this=exp.to_identifier(k), expression=v.copy()) for k, v in (("strata", h), ("psu", c))
            if v is not None]
    se_call = spec.measure(f"{name}_se", xv, *consts)
    se_call.set("expressions", se_call.expressions + opts)
    items = [s.alias(exp.Count(this=exp.Star()), "rows"), s.alias(spec.measure(name, xv, *consts), "est"),
             s.alias(se_call, "se")]
    sel = spec.select(items, [xv, gv], [gv])
    sel.expressions.append(s.alias(gv.copy(), "_uv_grp"))
    where = exp.In(this=gv.copy(), expressions=[exp.convert(v) for v in levels])
    sel.set("where", exp.Where(this=s.and_(sel.args["where"].this, where)))
    res = run(sel)
    label = {str(levels[0]): 1, str(levels[1]): 2}
    res["_uv_side"] = res["_uv_grp"].map(lambda v: label.get(str(v)))
    blocks = res[keys].drop_duplicates() if keys else pd.DataFrame(index=[0])
    rows = []
    for _, b in blocks.iterrows():
        mine = res
        for k in keys:
            mine = mine[mine[k].isna()] if pd.isna(b[k]) else mine[mine[k] == b[k]]
        side = {i: mine[mine["_uv_side"] == i] for i in (1, 2)}
        def get(i, col, side=side):
            return None if side[i].empty or pd.isna(side[i][col].iloc[0]) else float(side[i][col].iloc[0])
        e1, e2, s1, s2 = get(1, "est"), get(2, "est"), get(1, "se"), get(2, "se")
        rows.append({**{k: b[k] for k in keys},
                     "rows_1": int(side[1]["rows"].sum()), "rows_2": int(side[2]["rows"].sum()),
                     "gini_1": e1, "gini_2": e2, "difference": e1 - e2 if None not in (e1, e2) else None,
                     "se": math.hypot(s1, s2) if None not in (s1, s2) else None})
    return pd.DataFrame(rows).astype({"difference": float, "se": float, "gini_1": float, "gini_2": float})
