"""Sub-bins: the refine plan's second level inside the cut bins (passes/refine.py, docs/refine.md).

A cut bin whose min < max used to be sorted whatever its size; values crowded in a narrow range
(a 2 % bin holding most of a group) made that sort as large as the window plan's. Here the rows of
the cut bins are grouped once more, by a sub-bin key computed from the bin's own min and max,

    sb(x) = CAST((x − lo) / (hi − lo) · SUB_BINS AS BIGINT)        (0 … SUB_BINS)

and only the rows of the sub-bin holding each cut are sorted (none when that sub-bin holds one
value: the closed form of a bin of one value). Each step of sb is a rounded IEEE operation on
positive operands or a cast, all non-decreasing in x, so sub-bins are runs of the sorted rows
exactly as bins are; only that monotonicity is used, never where an engine puts a sub-bin's edge.

cr CTE    the rows of the cut bins with min < max (a join to need), with their sub-bin sb, or −1
          when their bin's row count n_b ≤ WHOLE_BIN_ROWS
wr CTE    the rows with sb = −1, each with its running weight inside its bin: such a bin is sorted
          whole (cheaper than the sub-bin level's passes over it)
sb CTE    keys, b, sb over the rows with sb ≥ 0 (bins of more rows: crowded): Σw, Σw·x, min, max (and the
          bin's C⁻, W, cut bins carried)                                     GROUP BY keys, b, sb
sm CTE    … running weight inside the bin offset by the bin's C_b⁻ (C⁻ before the sub-bin, C with
          it), the value before (S⁻) or after (S⁺) it inside the bin, and per cut c its sub-bin k_c
          (the first reaching the cut; the bin's last when rounding leaves none reaching it)
sn CTE    the cut sub-bins whose min < max
in CTE    their distinct values with each one's total weight (a GROUP BY), and the running weight
          inside the sub-bin                          (the only sort: of the distinct values)
part CTE  keys, per cut, the part of the cut bin: for a crowded bin its sub-bins' totals before
          (or after) the cut's sub-bin plus that sub-bin's own part (closed form, or the sorted
          rows); for a bin sorted whole the sum over its rows          UNION ALL, GROUP BY keys

Each cut bin takes exactly one of the two paths (its row count is a property of the bin, computed
once in the bin GROUP BY and carried), and each path is exact on its own (docs/refine.md).
"""

from __future__ import annotations

from collections.abc import Sequence

from sqlglot import exp

from uneven.compiler.passes.source import cte, key_name, table
from uneven.sqltree import build as s

SUB_BINS = 1024.0  # sub-bins per crowded bin (bench/README.md, "Refine plan", "Sub-bins")
WHOLE_BIN_ROWS = 4096  # a cut bin of at most this many rows is sorted whole, a fuller one gets sub-bins


def frame(fn: exp.Expression, partition: Sequence[exp.Expression], order: str, start, start_side, end,
          end_side=None) -> exp.Window:
    """fn OVER (PARTITION BY partition ORDER BY order ROWS BETWEEN start start_side AND end end_side)."""
    spec = exp.WindowSpec(kind="ROWS", start=start, start_side=start_side, end=end, end_side=end_side)
    return exp.Window(this=fn, partition_by=[k.copy() for k in partition] or None, over="OVER", spec=spec,
                      order=exp.Order(expressions=[exp.Ordered(this=s.col(order), nulls_first=False)]))


def null_safe_keys(n: int, left: str, right: str) -> list[exp.Expression]:
    return [exp.NullSafeEQ(this=s.col(key_name(i), left), expression=s.col(key_name(i), right)) for i in range(n)]


def sub_bin_key(x: exp.Expression, lo: exp.Expression, hi: exp.Expression) -> exp.Expression:
    """CAST((x − lo) / (hi − lo) · SUB_BINS AS BIGINT) for lo ≤ x ≤ hi, lo < hi: non-decreasing in x,
    within 0 … SUB_BINS (the quotient is at most 1 after rounding, so the product cannot overflow)."""
    ratio = s.div(s.sub(x, lo), s.paren(s.sub(hi, lo.copy())))
    return exp.cast(s.mul(ratio, s.lit(SUB_BINS)), "bigint")


def row_part(cut, mine: exp.Expression, x: exp.Expression, c_i: exp.Expression, w: exp.Expression,
             wt: exp.Expression, level) -> exp.Expression:
    """A row's (or a tie run's) contribution to cut ``cut`` inside the stretch of sorted rows that
    holds it (``mine``): x·clamp(p·W − C_{i−1}, 0, w) below, x·clamp(C_i − (1−p)·W, 0, w) above,
    x where C_i/W reaches the level (a quantile: the caller takes the smallest). C_i is ``c_i``."""
    if cut.kind == "quantile":
        return s.case(s.and_(mine, reached(cut, c_i, wt, level)), x.copy())
    if cut.kind == "below":
        room = s.sub(s.mul(s.lit(cut.p), wt.copy()), s.sub(c_i.copy(), w.copy()))
    else:
        room = s.sub(c_i.copy(), s.mul(s.lit(1.0 - cut.p), wt.copy()))
    return s.case(mine, s.mul(x.copy(), s.clamp(room, s.lit(0.0), w.copy())))


def sub_bin_ctes(name: str, rows: exp.Subquery, rows_alias: str, nk: int, cuts, weighted: bool,
                 carried: Sequence[str], level, whole_rows: int | None = None) -> list[exp.CTE]:
    """The CTEs from the cut bins (``{name}_need``: keys, carried columns, _uv_lo, _uv_hi, _uv_j*, and
    with ``whole_rows`` the bin's row count _uv_nb) to ``{name}_part`` (keys, _uv_q{i} per cut: the
    part of cut i inside its bin, added to the bin-level totals by RefineContext). ``cuts`` are
    refine.Cut; ``level(cut, n)`` a quantile cut's level. With ``whole_rows``, a cut bin of at most
    that many rows is sorted whole instead of getting sub-bins."""
    nd, cr, sb, sm, sn, inn = (f"{name}_{t}" for t in ("need", "cr", "sb", "sm", "sn", "in"))
    keys = [s.col(key_name(i)) for i in range(nk)]
    group = lambda extra=(): [k.copy() for k in keys] + list(extra)  # noqa: E731
    x, b, zero = s.col("_uv_x"), s.col("_uv_b"), s.lit(0.0)
    w = s.col("_uv_w") if weighted else s.lit(1.0)
    wt = s.col("_uv_wt")
    js = [s.col(f"_uv_j{i}") for i in range(1, len(cuts) + 1)]
    ks = [s.col(f"_uv_sk{i}") for i in range(1, len(cuts) + 1)]
    kinds = {c.kind for c in cuts}
    passed = [c for c in carried if c != "_uv_b"]  # the bin's C⁻ (_uv_cp), W (_uv_wt), maybe n (_uv_nt)

    # cr: the rows of the cut bins, each with its sub-bin from its bin's own min and max
    on = s.and_(*null_safe_keys(nk, rows_alias, nd),
                exp.EQ(this=s.col("_uv_b", rows_alias), expression=s.col("_uv_b", nd)))
    rx = s.col("_uv_x", rows_alias)
    sb_key: exp.Expression = sub_bin_key(rx.copy(), s.col("_uv_lo", nd), s.col("_uv_hi", nd))
    if whole_rows is not None:  # a bin sorted whole is marked by the sub-bin −1 (no wider rows to store)
        sb_key = s.case(s.lte(s.col("_uv_nb", nd), s.lit(whole_rows)), exp.Neg(this=s.lit(1)), sb_key)
    cr_cols = [s.alias(s.col(key_name(i), rows_alias), key_name(i)) for i in range(nk)] + [
        s.alias(rx.copy(), "_uv_x")] + ([s.alias(s.col("_uv_w", rows_alias), "_uv_w")] if weighted else []) + [
        s.alias(s.col(n, nd), n) for n in ["_uv_b", *passed]] + [
        s.alias(s.col(j.name, nd), j.name) for j in js] + [s.alias(sb_key, "_uv_sb")]
    crow = exp.Select(expressions=cr_cols).from_(rows)
    crow.append("joins", exp.Join(this=table(nd), on=on))

    # sb: one row per (group, bin, sub-bin)
    weight_sum = s.agg_sum(w.copy()) if weighted else s.cast_double(s.agg_count_star())
    sbins = exp.Select(expressions=group([b.copy(), s.col("_uv_sb")]) + [
        s.alias(weight_sum, "_uv_wb"), s.alias(s.agg_sum(s.mul(w.copy(), x.copy())), "_uv_tb"),
        s.alias(s.agg_min(x.copy()), "_uv_lo"), s.alias(s.agg_max(x.copy()), "_uv_hi")] + [
        s.alias(s.agg_max(s.col(n)), n) for n in passed + [j.name for j in js]]).from_(table(cr))
    if whole_rows is not None:  # the crowded bins only; the others are sorted whole (wr)
        sbins = sbins.where(s.gte(s.col("_uv_sb"), s.lit(0)))
    sbins.set("group", exp.Group(expressions=group([b.copy(), s.col("_uv_sb")])))

    # sm: running sums over the sub-bins of each bin (offset by the bin's C⁻), and each cut's sub-bin
    by_bin = group([b.copy()])
    wb, tb, cp = s.col("_uv_wb"), s.col("_uv_tb"), s.col("_uv_cp")
    before = exp.Coalesce(this=frame(s.agg_sum(wb.copy()), by_bin, "_uv_sb", "UNBOUNDED", "PRECEDING", "1",
                                     "PRECEDING"), expressions=[zero.copy()])
    upto = frame(s.agg_sum(wb.copy()), by_bin, "_uv_sb", "UNBOUNDED", "PRECEDING", "CURRENT ROW")
    inner = exp.Select(expressions=group([b.copy(), s.col("_uv_sb")]) + [
        s.col(c) for c in ("_uv_wb", "_uv_lo", "_uv_hi", *[n for n in passed if n != "_uv_cp"])] + [
        j.copy() for j in js] + [
        s.alias(s.add(cp.copy(), before), "_uv_cs"), s.alias(s.add(cp.copy(), upto), "_uv_ck"),
        s.alias(s.window(s.agg_max(s.col("_uv_sb")), by_bin), "_uv_sl")])
    if "below" in kinds:
        inner.append("expressions", s.alias(exp.Coalesce(this=frame(
            s.agg_sum(tb.copy()), by_bin, "_uv_sb", "UNBOUNDED", "PRECEDING", "1", "PRECEDING"),
            expressions=[zero.copy()]), "_uv_sp"))
    if "above" in kinds:
        inner.append("expressions", s.alias(exp.Coalesce(this=frame(
            s.agg_sum(tb.copy()), by_bin, "_uv_sb", "1", "FOLLOWING", "UNBOUNDED", "FOLLOWING"),
            expressions=[zero.copy()]), "_uv_sn"))
    inner = inner.from_(table(sb))
    ck = s.col("_uv_ck")
    mark_cols: list[exp.Expression] = [s.col(c.alias_or_name) for c in inner.expressions]
    for i, cut in enumerate(cuts, 1):
        hit = reached(cut, ck, wt, level)
        first = s.window(s.agg_min(s.case(hit, s.col("_uv_sb"))), by_bin)
        mark_cols.append(s.alias(exp.Coalesce(this=first, expressions=[s.col("_uv_sl")]), f"_uv_sk{i}"))
    smark = exp.Select(expressions=mark_cols).from_(
        exp.Subquery(this=inner, alias=exp.TableAlias(this=exp.to_identifier("_uv_s", quoted=True))))

    def at_cut(i: int) -> exp.Expression:  # this row's (bin, sub-bin) holds cut i
        return s.and_(exp.EQ(this=b.copy(), expression=js[i].copy()),
                      exp.EQ(this=s.col("_uv_sb"), expression=ks[i].copy()))

    any_cut = s.or_(*[s.paren(at_cut(i)) for i in range(len(cuts))])
    any_cut = s.paren(any_cut) if len(cuts) > 1 else any_cut

    # sn: the cut sub-bins whose min < max (a sub-bin of one value needs no order)
    carried_sn = ["_uv_b", "_uv_sb", "_uv_cs", "_uv_wt"] + (["_uv_nt"] if "_uv_nt" in passed else [])
    sneed = exp.Select(expressions=group([s.col(c) for c in carried_sn]) + [j.copy() for j in js] + [
        k.copy() for k in ks]).from_(table(sm)).where(s.and_(s.lt(s.col("_uv_lo"), s.col("_uv_hi")), any_cut.copy()))

    # in: the distinct values of those sub-bins with their total weight (a tie run is one row: its
    # clamps add up to one clamp of its weight), and the running weight inside the sub-bin
    on = s.and_(*null_safe_keys(nk, cr, sn), exp.EQ(this=s.col("_uv_b", cr), expression=s.col("_uv_b", sn)),
                exp.EQ(this=s.col("_uv_sb", cr), expression=s.col("_uv_sb", sn)))
    by_value = [s.col(key_name(i), cr) for i in range(nk)] + [s.col(c, cr) for c in ("_uv_b", "_uv_sb", "_uv_x")]
    tie_weight = s.agg_sum(s.col("_uv_w", cr)) if weighted else s.cast_double(s.agg_count_star())
    values = exp.Select(expressions=[s.alias(c.copy(), c.name) for c in by_value] + [s.alias(tie_weight, "_uv_w")] + [
        s.alias(s.agg_max(s.col(n, sn)), n) for n in carried_sn if n not in ("_uv_b", "_uv_sb")] + [
        s.alias(s.agg_max(s.col(c.name, sn)), c.name) for c in js + ks]).from_(table(cr))
    values.append("joins", exp.Join(this=table(sn), on=on))
    values.set("group", exp.Group(expressions=[c.copy() for c in by_value]))
    running = s.window(s.agg_sum(s.col("_uv_w")), group([b.copy(), s.col("_uv_sb")]), [x.copy()], running=True)
    inside = exp.Select(expressions=[exp.Star(), s.alias(running, "_uv_ci")]).from_(
        exp.Subquery(this=values, alias=exp.TableAlias(this=exp.to_identifier("_uv_t", quoted=True))))

    # part: per cut, the sub-bin totals before (after) its sub-bin plus that sub-bin's own part, from
    # the sub-bins (closed form when it holds one value; its largest value for a quantile, the
    # fallback when rounding leaves no row of it reaching the level) and from its sorted rows
    cs, lo, hi = s.col("_uv_cs"), s.col("_uv_lo"), s.col("_uv_hi")
    wsub = s.col("_uv_wb")
    from_subs, from_rows = group(), group()
    c_i = s.add(cs.copy(), s.col("_uv_ci"))
    tw = s.col("_uv_w")  # the weight of a value's tie run in the in CTE
    for i, cut in enumerate(cuts, 1):
        q = f"_uv_q{i}"
        from_rows.append(s.alias(row_part(cut, at_cut(i - 1), x, c_i, tw, wt, level), q))
        if cut.kind == "quantile":
            from_subs.append(s.alias(s.case(at_cut(i - 1), hi.copy()), q))
            continue
        if cut.kind == "below":
            room_one = s.sub(s.mul(s.lit(cut.p), wt.copy()), cs.copy())
            held = s.col("_uv_sp")
        else:
            room_one = s.sub(s.add(cs.copy(), wsub.copy()), s.mul(s.lit(1.0 - cut.p), wt.copy()))
            held = s.col("_uv_sn")
        single = s.case(exp.EQ(this=lo.copy(), expression=hi.copy()),
                        s.mul(lo.copy(), s.clamp(room_one, zero.copy(), wsub.copy())), zero.copy())
        from_subs.append(s.alias(s.case(at_cut(i - 1), s.add(held, single)), q))
    subs_q = exp.Select(expressions=from_subs).from_(table(sm)).where(any_cut.copy())
    rows_q = exp.Select(expressions=from_rows).from_(table(inn))
    both = exp.union(subs_q, rows_q, distinct=False)
    whole_ctes: list[exp.CTE] = []
    if whole_rows is not None:  # the cut bins of at most whole_rows rows: every row, sorted in its bin
        wr = f"{name}_wr"
        by_bin_x = group([b.copy()])
        in_bin: exp.Expression = (s.window(s.agg_sum(w.copy()), by_bin_x, [x.copy()], running=True) if weighted
                                  else s.cast_double(s.window(exp.RowNumber(), by_bin_x, [x.copy()])))
        whole = exp.Select(expressions=group([x.copy()]) + ([w.copy()] if weighted else []) + [
            s.col(c) for c in ["_uv_b", *passed]] + [j.copy() for j in js] + [s.alias(in_bin, "_uv_ci")]
                           ).from_(table(cr)).where(s.lt(s.col("_uv_sb"), s.lit(0)))
        whole_ctes = [cte(whole, wr)]
        c_row = s.add(s.col("_uv_cp"), s.col("_uv_ci"))  # the group's running weight at the row
        whole_q = exp.Select(expressions=group() + [
            s.alias(row_part(cut, exp.EQ(this=b.copy(), expression=js[i - 1].copy()), x, c_row, w, wt, level),
                    f"_uv_q{i}") for i, cut in enumerate(cuts, 1)]).from_(table(wr))
        both = exp.union(both, whole_q, distinct=False)
    aggs = [(s.agg_min if c.kind == "quantile" else s.agg_sum)(s.col(f"_uv_q{i}")) for i, c in enumerate(cuts, 1)]
    part = exp.Select(expressions=group() + [s.alias(a, f"_uv_q{i}") for i, a in enumerate(aggs, 1)]).from_(
        exp.Subquery(this=both, alias=exp.TableAlias(this=exp.to_identifier("_uv_u", quoted=True))))
    if nk:
        part.set("group", exp.Group(expressions=group()))
    return [cte(crow, cr), *whole_ctes, cte(sbins, sb), cte(smark, sm), cte(sneed, sn), cte(inside, inn),
            cte(part, f"{name}_part")]


def reached(cut, c: exp.Expression, wt: exp.Expression, level) -> exp.Expression:
    """The window plan's comparison: C/W ≥ level (quantile), C ≥ p·W (below), C ≥ (1−p)·W (above)."""
    if cut.kind == "quantile":
        return s.gte(s.div(c.copy(), wt.copy()), level(cut, s.col("_uv_nt")))
    target = cut.p if cut.kind == "below" else 1.0 - cut.p
    return s.gte(c.copy(), s.mul(s.lit(target), wt.copy()))


__all__ = ["SUB_BINS", "WHOLE_BIN_ROWS", "frame", "null_safe_keys", "reached", "row_part", "sub_bin_ctes",
           "sub_bin_key"]
