"""Refine pass: the cut-based measures of one (value, weight, FILTER) without sorting every row.

Measures that read the order of the rows only at cut points (Lorenz ordinates, shares, Palma,
S80/S20, quantiles, a short Lorenz curve) need, per group and cut, the rows wholly below the cut
(their weight and value totals) and the order *inside* the one stretch of rows the cut falls in.
Log-spaced bins give both (docs/refine.md has the argument):

rows      (a subquery, read twice: no CTE, which an engine may store)
          keys, x, w, b = the bin of x: 0 for zero, ±(2²⁰ + CAST(ln|x|·50 AS BIGINT)) by sign
bins CTE  keys, b: Σw, Σw·x, min x, max x                                    GROUP BY keys, b
cum CTE   … running weight C_b up to and with the bin, C_b⁻ before it, the value held below
          (S_b⁻) or above (S_b⁺) it, group totals W and T            (windows over the bins only)
mark CTE  … per cut c, j_c = the first bin of the group where the cut is reached
need CTE  the cut bins whose min < max (a bin of one value needs no order)
cr … in   sub-bins between each such bin's min and max, and a sort of the distinct values of the
          sub-bins holding a cut only (refine_sub.py); with standard errors instead the in CTE:
          every row of those bins (a join on keys and b) with its running weight inside the bin
part CTE  keys, per cut, the interpolated part inside its bin                GROUP BY keys
cut CTE   keys, W, T, largest x and, per cut, the cut bin's C_b⁻, S_b⁻ or S_b⁺, min, max, Σw
result    keys, one column per call: cut LEFT JOIN part

The bin arithmetic only has to be monotone in x within one engine (ln, a product by a positive
constant and a cast to an integer all keep order): bins then hold consecutive stretches of the
sorted rows, whatever rounding an engine's ln does at a bin edge.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

from sqlglot import exp

from uneven.catalog.spec import PassKind
from uneven.compiler.passes import refine_se as se
from uneven.compiler.passes import refine_sub as sub
from uneven.compiler.passes.source import (
    Source,
    binned_rows,
    cte,
    finite_or_null,
    key_name,
    table,
)
from uneven.sqltree import build as s

BINS_PER_LN = 50.0  # bins per unit of ln|x|: about 2 % relative width (bench/README.md, "Refine plan")
OFFSET = 1 << 20  # keeps every positive bin above zero and every negative one below (|ln x|·50 < 2²⁰)
MAX_CURVE_POINTS = 20  # lorenz_curve(x, k) is refined for k ≤ this; larger k touch most bins: window plan

ROWS_ALIAS = "_uv_r"


@dataclass(frozen=True)
class Cut:
    kind: str  # "below" (value held by the poorest p), "above" (by the richest p), "quantile"
    p: float
    side: int = 0  # quantile cuts of a density: at p + h (1) or p − h (−1), h from the row count


class RefineContext:
    """What the result builders read: masses and quantiles at cuts, W and T. Each cut asked for is
    recorded; the lowering then emits the columns of exactly those cuts."""

    def __init__(self, weighted: bool, name: str):
        self.weighted = weighted
        self.name = name
        self.cuts: list[Cut] = []

    def _index(self, cut: Cut) -> int:
        if cut not in self.cuts:
            self.cuts.append(cut)
        return self.cuts.index(cut) + 1

    def below_index(self, p: float) -> int:
        """The index of the below cut at p (its indicator 1(C ≤ p·W) in a score)."""
        return self._index(Cut("below", p))

    def quantile_index(self, p: float) -> int:
        return self._index(Cut("quantile", p))

    @property
    def m(self):
        """The group's smallest value (scores are written in d = x − m: catalog/linearize.py)."""
        return self._c("_uv_m")

    @property
    def n(self):
        """The group's row count as a DOUBLE."""
        return self._c("_uv_n")

    def _c(self, column: str) -> exp.Column:
        return s.col(column, f"{self.name}_cut")

    @property
    def W(self):
        return self._c("_uv_wt")

    @property
    def T(self):
        return finite_or_null(self._c("_uv_tt"))

    def _mass(self, kind: str, p: float) -> exp.Expression:
        i = self._index(Cut(kind, p))
        j, cp, held, lo, hi, wb = (self._c(f"_uv_{n}{i}") for n in ("j", "cp", "s", "lo", "hi", "wb"))
        zero = s.lit(0.0)
        nothing_reached: exp.Expression
        # below: Σ over the bin's rows of x·clamp(p·W − C_{i−1}, 0, w); one value → lo·clamp(p·W − C⁻, 0, Σw)
        if kind == "below":
            room = s.sub(s.mul(s.lit(p), self.W), cp)
            nothing_reached = self._c("_uv_tt")  # the cut lies past every bin (p = 1 and rounding): all of T
        else:  # Σ x·clamp(C_i − (1−p)·W, 0, w): one value → lo·clamp(C⁻ + Σw − (1−p)·W, 0, Σw)
            room = s.sub(s.add(cp, wb), s.mul(s.lit(1.0 - p), self.W))
            nothing_reached = zero.copy()
        single = s.add(held.copy(), s.mul(lo.copy(), s.clamp(room, zero.copy(), wb.copy())))
        refined = s.add(held.copy(), s.col(f"_uv_q{i}", f"{self.name}_part"))
        return exp.Case(ifs=[exp.If(this=exp.Is(this=j, expression=exp.Null()), true=nothing_reached),
                             exp.If(this=exp.EQ(this=lo, expression=hi), true=single)], default=refined)

    def below(self, p: float) -> exp.Expression:
        """Σ x_i·clamp(p·W − C_{i−1}, 0, w_i): the value held by the poorest fraction p of the weight."""
        return self._mass("below", p)

    def above(self, p: float) -> exp.Expression:
        """Σ x_i·clamp(C_i − (1−p)·W, 0, w_i): the value held by the richest fraction p of the weight."""
        return self._mass("above", p)

    def quantile(self, p: float, side: int = 0) -> exp.Expression:
        """Smallest x_i with C_i/W ≥ p; the largest x when rounding leaves no row reaching p."""
        return self.quantile_value(self._index(Cut("quantile", p, side)))

    def quantile_value(self, i: int) -> exp.Expression:
        j, lo, hi = (self._c(f"_uv_{n}{i}") for n in ("j", "lo", "hi"))
        inside = exp.Coalesce(this=s.col(f"_uv_q{i}", f"{self.name}_part"), expressions=[hi.copy()])
        return exp.Case(ifs=[exp.If(this=exp.Is(this=j, expression=exp.Null()), true=self._c("_uv_top")),
                             exp.If(this=exp.EQ(this=lo, expression=hi), true=lo.copy())], default=inside)


# --- result builders, one per cut-based measure (the contract: /work docs, catalog/ordered.py) ----

def _positive_total(ctx, value):
    return s.case(s.gt(ctx.T, s.lit(0.0)), value)


def _ratio(num, den):
    return s.case(s.neq(den, s.lit(0.0)), s.div(num, den))


def _lorenz(ctx, p):
    return _positive_total(ctx, s.div(ctx.below(p), ctx.T))


def _top(ctx, p):
    return _positive_total(ctx, s.div(ctx.above(p), ctx.T))


def _curve(ctx, k):
    total = s.col("_uv_tt", f"{ctx.name}_cut")
    points = [s.struct(p=s.lit(j / k), lorenz=s.cast_double(s.div(ctx.below(j / k), total.copy())))
              for j in range(k + 1)]
    return s.case(s.gt(ctx.T, s.lit(0.0)), s.array(*points))


BUILDS = {
    "lorenz": lambda c, p: _lorenz(c, p[0]),
    "bottom_share": lambda c, p: _lorenz(c, p[0]),
    "generalized_lorenz": lambda c, p: s.div(c.below(p[0]), c.W),
    "top_share": lambda c, p: _top(c, p[0]),
    "palma": lambda c, p: _ratio(_top(c, 0.1), _lorenz(c, 0.4)),
    "s80s20": lambda c, p: _ratio(_top(c, 0.2), _lorenz(c, 0.2)),
    "quantile_w": lambda c, p: c.quantile(p[0]),
    "percentile_ratio": lambda c, p: _ratio(c.quantile(p[0]), c.quantile(p[1])),
    "lorenz_curve": lambda c, p: _curve(c, int(p[0])),
}


def refinable(call) -> str | None:
    """None when the call depends on the order only at cut points, else why it needs the full order."""
    from uneven import catalog  # noqa: PLC0415 (the catalog imports the compiler's builders)

    name = call.measure.name
    if name not in BUILDS and se.split_name(name) is None:
        return f"{name} needs the full order"
    entry = catalog.lookup(name)
    if entry is None or call.measure.build is not entry.build or len(call.params) != len(entry.constants) \
            or not all(isinstance(v, (int, float)) for v in call.params):
        return f"{name} with parameters known only at run time"
    if name == "lorenz_curve" and int(call.params[0]) > MAX_CURVE_POINTS:
        return f"lorenz_curve with more than {MAX_CURVE_POINTS} segments cuts most bins"
    return None


# --- lowering ----------------------------------------------------------------------------------

def bin_key(x: exp.Expression) -> exp.Expression:
    """The bin of a DOUBLE x: 0 for zero, OFFSET + CAST(ln x·50 AS BIGINT) for x > 0, its negation
    on −x for x < 0. Non-decreasing in x (every step keeps order), so a bin is a run of sorted rows."""
    zero = s.lit(0.0)

    def index(v):
        return s.add(s.lit(OFFSET), exp.cast(s.mul(s.ln(v), s.lit(BINS_PER_LN)), "bigint"))

    return exp.Case(ifs=[exp.If(this=s.gt(x.copy(), zero), true=index(x.copy())),
                         exp.If(this=s.lt(x.copy(), zero.copy()),
                                true=exp.Neg(this=s.paren(index(exp.Neg(this=s.paren(x.copy()))))))],
                    default=s.lit(0))


def _rows(source: Source, plan) -> exp.Subquery:
    """(SELECT keys, x, w, b FROM (the pass's valid rows)) AS _uv_r — built anew for each use."""
    outer = binned_rows(source, plan.x, plan.trailing, plan.condition, bin_key(s.col("_uv_x")), "_uv_b")
    return exp.Subquery(this=outer, alias=exp.TableAlias(this=exp.to_identifier(ROWS_ALIAS, quoted=True)))


def _frame(fn, keys, start, start_side, end, end_side=None):
    return sub.frame(fn, keys, "_uv_b", start, start_side, end, end_side)


_null_safe_keys = sub.null_safe_keys


def lower_refine_pass(source: Source, main, plan, name: str,
                      sub_bins: bool = True) -> tuple[list[exp.CTE], dict[tuple, exp.Expression]]:
    """CTEs of one refine pass and, for each call key, the column that holds its result; ``sub_bins``
    False sorts each cut bin whole (as with standard errors)."""
    weighted = plan.trailing is not None
    ctx = RefineContext(weighted, name)
    out_cols: list[exp.Expression] = []
    results: dict[tuple, exp.Expression] = {}
    scored_calls: list[tuple] = []
    for call in plan.calls:
        if call.key in results:
            continue
        column = f"_uv_r{len(out_cols) + 1}"
        split = se.split_name(call.measure.name)
        if split is None:
            out_cols.append(s.alias(BUILDS[call.measure.name](ctx, call.params), column))
        else:  # a standard error or interval end: its score's coefficients go to the coef CTE
            score = se.SCORES[split[0]](ctx, BUILDS, call.params)
            scored_calls.append((len(out_cols) + 1, score, split[1], call.settings.get("level", 0.95)))
            out_cols.append(s.alias(exp.Null(), column))
        results[call.key] = s.col(column, name)
    with_se = bool(scored_calls)
    dynamic = any(c.side for c in ctx.cuts)
    if with_se:
        coef_cols, scored = se.coef_columns(scored_calls, ctx)

    keys = source.key_columns()
    nk = len(keys)
    x = s.col("_uv_x")
    w = s.col("_uv_w") if weighted else s.lit(1.0)
    zero = s.lit(0.0)
    group = lambda extra=(): [k.copy() for k in keys] + list(extra)  # noqa: E731

    sorted_whole = with_se or not sub_bins
    switch = not sorted_whole  # each cut bin sorted whole or cut into sub-bins by its row count _uv_nb

    # bins: one row per (group, bin)
    weight_sum = s.agg_sum(w.copy()) if weighted else s.cast_double(s.agg_count_star())
    moments = []
    if with_se:  # Σw², Σw²x, Σw²x² and the row count: a variance from the bins (refine_se.py)
        w2 = s.mul(w.copy(), w.copy()) if weighted else s.lit(1.0)
        moments = [s.alias(s.agg_count_star(), "_uv_nb"), s.alias(s.agg_sum(w2.copy()), "_uv_a0"),
                   s.alias(s.agg_sum(s.mul(w2.copy(), x.copy())), "_uv_a1"),
                   s.alias(s.agg_sum(s.mul(w2.copy(), s.mul(x.copy(), x.copy()))), "_uv_a2")]
    bins = exp.Select(expressions=group() + [s.col("_uv_b"), s.alias(weight_sum, "_uv_wb"),
                                             s.alias(s.agg_sum(s.mul(w.copy(), x.copy())), "_uv_tb"),
                                             s.alias(s.agg_min(x.copy()), "_uv_lo"),
                                             s.alias(s.agg_max(x.copy()), "_uv_hi")] + moments
                          + ([s.alias(s.agg_count_star(), "_uv_nb")] if switch else [])).from_(_rows(source, plan))
    bins.set("group", exp.Group(expressions=group([s.col("_uv_b")])))

    kinds = {c.kind for c in ctx.cuts}
    wb, tb = s.col("_uv_wb"), s.col("_uv_tb")
    cum_cols = group() + [s.col(c) for c in ("_uv_b", "_uv_wb", "_uv_lo", "_uv_hi")] + (
        [s.col("_uv_nb")] if switch else []) + [
        s.alias(_frame(s.agg_sum(wb.copy()), keys, "UNBOUNDED", "PRECEDING", "CURRENT ROW"), "_uv_cb"),
        s.alias(exp.Coalesce(this=_frame(s.agg_sum(wb.copy()), keys, "UNBOUNDED", "PRECEDING", "1", "PRECEDING"),
                             expressions=[zero.copy()]), "_uv_cp"),
        s.alias(s.window(s.agg_sum(wb.copy()), group()), "_uv_wt"),
        s.alias(s.window(s.agg_sum(tb.copy()), group()), "_uv_tt")]
    if "below" in kinds:
        cum_cols.append(s.alias(exp.Coalesce(this=_frame(s.agg_sum(tb.copy()), keys, "UNBOUNDED", "PRECEDING", "1",
                                                         "PRECEDING"), expressions=[zero.copy()]), "_uv_sp"))
    if "above" in kinds:
        cum_cols.append(s.alias(exp.Coalesce(this=_frame(s.agg_sum(tb.copy()), keys, "1", "FOLLOWING", "UNBOUNDED",
                                                         "FOLLOWING"), expressions=[zero.copy()]), "_uv_sn"))
    if with_se:
        cum_cols += [s.col(c) for c in ("_uv_tb", "_uv_a0", "_uv_a1", "_uv_a2")] + [
            s.alias(s.cast_double(s.window(s.agg_sum(s.col("_uv_nb")), group())), "_uv_nt"),
            s.alias(s.window(s.agg_min(s.col("_uv_lo")), group()), "_uv_gl"),
            s.alias(s.window(s.agg_max(s.col("_uv_hi")), group()), "_uv_gh")]
    cum = exp.Select(expressions=cum_cols).from_(table(f"{name}_bins"))

    # mark: the first bin where each cut is reached (the same comparisons as the window plan's)
    cb, wt, b = s.col("_uv_cb"), s.col("_uv_wt"), s.col("_uv_b")
    passed = [c.alias_or_name for c in cum_cols]
    mark_cols: list[exp.Expression] = [s.col(n) for n in passed]
    for i, cut in enumerate(ctx.cuts, 1):
        reached = sub.reached(cut, cb, wt, _level)
        mark_cols.append(s.alias(s.window(s.agg_min(s.case(reached, b.copy())), group()), f"_uv_j{i}"))
    mark = exp.Select(expressions=mark_cols).from_(table(f"{name}_cum"))

    js = [s.col(f"_uv_j{i}") for i in range(1, len(ctx.cuts) + 1)]
    is_cut = s.or_(*[exp.EQ(this=b.copy(), expression=j.copy()) for j in js])
    read = s.and_(s.lt(s.col("_uv_lo"), s.col("_uv_hi")), s.paren(is_cut) if len(js) > 1 else is_cut)
    if with_se:  # every bin of a tight group too (refine_se.py: its bin sums would lose digits)
        gl, gh = s.col("_uv_gl"), s.col("_uv_gh")
        tight = s.and_(s.lt(gl.copy(), gh.copy()), s.lt(s.sub(gh.copy(), gl.copy()), s.mul(
            s.lit(se.TIGHT), s.greatest(s.absval(gl.copy()), s.absval(gh.copy())))))
        read = s.or_(s.paren(read), s.paren(tight))
    carried = ("_uv_b", "_uv_cp", "_uv_wt") + (("_uv_nt",) if dynamic else ())
    # the sub-bins are cut between the bin's min and max; its row count picks the path
    bounds = () if sorted_whole else ("_uv_lo", "_uv_hi", "_uv_nb")
    need = exp.Select(expressions=group() + [s.col(n) for n in carried + bounds] + [j.copy() for j in js]
                      ).from_(table(f"{name}_mark")).where(read.copy())

    nd = f"{name}_need"
    if sorted_whole:  # the variance reads each row of the cut bins with its running weight: sorted whole
        inner_ctes = _sorted_cut_bins(source, plan, name, nk, ctx, carried, js)
    else:  # a second level of bins inside the cut bins, and a sort of the cut sub-bins only
        inner_ctes = sub.sub_bin_ctes(name, _rows(source, plan), ROWS_ALIAS, nk, ctx.cuts, weighted, carried, _level,
                                      whole_rows=sub.WHOLE_BIN_ROWS)

    # cut: per group, the totals and each cut bin's own columns
    cut_cols = group() + [s.alias(s.agg_max(s.col("_uv_wt")), "_uv_wt"), s.alias(s.agg_max(s.col("_uv_tt")), "_uv_tt"),
                          s.alias(s.agg_max(s.col("_uv_hi")), "_uv_top")]
    if with_se:
        cut_cols += [s.alias(s.agg_min(s.col("_uv_lo")), "_uv_m"), s.alias(s.agg_max(s.col("_uv_nt")), "_uv_n")]
    for i, cut in enumerate(ctx.cuts, 1):
        j = s.col(f"_uv_j{i}")
        at = lambda col: s.agg_max(s.case(exp.EQ(this=b.copy(), expression=j.copy()), s.col(col)))  # noqa: E731
        cut_cols.append(s.alias(s.agg_min(j.copy()), f"_uv_j{i}"))
        if cut.kind != "quantile":
            cut_cols += [s.alias(at("_uv_cp"), f"_uv_cp{i}"), s.alias(at("_uv_wb"), f"_uv_wb{i}"),
                         s.alias(at("_uv_sp" if cut.kind == "below" else "_uv_sn"), f"_uv_s{i}")]
        low = s.agg_min(s.case(exp.EQ(this=b.copy(), expression=j.copy()), s.col("_uv_lo")))
        cut_cols += [s.alias(low, f"_uv_lo{i}"), s.alias(at("_uv_hi"), f"_uv_hi{i}")]
    cuts = exp.Select(expressions=cut_cols).from_(table(f"{name}_mark"))
    if keys:
        cuts.set("group", exp.Group(expressions=group()))

    ct, pt = f"{name}_cut", f"{name}_part"
    final = exp.Select(expressions=[s.alias(s.col(key_name(i), ct), key_name(i)) for i in range(nk)] + out_cols
                       ).from_(table(ct))
    if keys:
        final.append("joins", exp.Join(this=table(pt), side="LEFT", on=s.and_(*_null_safe_keys(nk, ct, pt))))
    else:
        final.append("joins", exp.Join(this=table(pt), kind="CROSS"))
    ctes = [cte(bins, f"{name}_bins"), cte(cum, f"{name}_cum"), cte(mark, f"{name}_mark"), cte(need, nd),
            *inner_ctes, cte(cuts, ct)]
    if not with_se:
        return ctes + [cte(final, name)], results
    # with standard errors: estimates and coefficients per group (coef), Σu and Σu² (var), then the SEs
    coef = f"{name}_coef"
    by_index = {sc.index: sc for sc in scored}
    final.set("expressions", [c for j, c in enumerate(final.expressions, 1 - nk) if j not in by_index] + [
        s.col("_uv_m", ct), s.col("_uv_n", ct), s.col("_uv_top", ct)] + coef_cols)
    ctes.append(cte(final, coef))
    cut_p = {i: c.p for i, c in enumerate(ctx.cuts, 1)}
    var = se.variance_ctes(name, nk, scored, read, cut_p.__getitem__, weighted)
    ctes += var
    columns = [s.alias(s.col(key_name(i), coef), key_name(i)) for i in range(nk)] + [
        s.alias(se.result_column(by_index[j], name) if j in by_index else s.col(c.alias_or_name, coef), c.alias_or_name)
        for j, c in enumerate(out_cols, 1)]
    out = exp.Select(expressions=columns).from_(table(coef))
    vt = f"{name}_var"
    if not var:
        pass
    elif keys:
        out.append("joins", exp.Join(this=table(vt), side="LEFT", on=s.and_(*_null_safe_keys(nk, coef, vt))))
    else:
        out.append("joins", exp.Join(this=table(vt), kind="CROSS"))
    return ctes + [cte(out, name)], results


def _sorted_cut_bins(source: Source, plan, name: str, nk: int, ctx: RefineContext, carried: tuple[str, ...],
                     js: Sequence[exp.Expression]) -> list[exp.CTE]:
    """The in CTE (every row of the bins to read, with its running weight inside its bin: one sort of
    them) and the part CTE (each cut's part inside its bin, from those rows)."""
    weighted = ctx.weighted
    nd = f"{name}_need"
    x = s.col("_uv_x")
    w = s.col("_uv_w") if weighted else s.lit(1.0)
    b, wt = s.col("_uv_b"), s.col("_uv_wt")
    group = lambda: [s.col(key_name(i)) for i in range(nk)]  # noqa: E731
    on = s.and_(*_null_safe_keys(nk, ROWS_ALIAS, nd),
                exp.EQ(this=s.col("_uv_b", ROWS_ALIAS), expression=s.col("_uv_b", nd)))
    rx, rw = s.col("_uv_x", ROWS_ALIAS), (s.col("_uv_w", ROWS_ALIAS) if weighted else s.lit(1.0))
    part_by = [s.col(key_name(i), ROWS_ALIAS) for i in range(nk)] + [s.col("_uv_b", ROWS_ALIAS)]
    running = (s.window(s.agg_sum(rw.copy()), part_by, [rx.copy()], running=True) if weighted
               else s.cast_double(s.window(exp.RowNumber(), part_by, [rx.copy()])))
    in_cols = [s.alias(s.col(key_name(i), ROWS_ALIAS), key_name(i)) for i in range(nk)] + [
        s.alias(rx.copy(), "_uv_x")] + ([s.alias(rw.copy(), "_uv_w")] if weighted else []) + [
        s.alias(s.col(n, nd), n) for n in carried] + [
        s.alias(s.col(f"_uv_j{i}", nd), f"_uv_j{i}") for i in range(1, len(js) + 1)] + [s.alias(running, "_uv_ci")]
    inside = exp.Select(expressions=in_cols).from_(_rows(source, plan))
    inside.append("joins", exp.Join(this=table(nd), on=on))

    # part: each cut's share of its bin, summed over the bin's rows in order
    ci, cp = s.col("_uv_ci"), s.col("_uv_cp")
    c_i = s.add(cp.copy(), ci.copy())  # C_i: the running weight of the whole group at row i
    part_cols: list[exp.Expression] = list(group())
    for i, cut in enumerate(ctx.cuts, 1):
        mine = exp.EQ(this=b.copy(), expression=s.col(f"_uv_j{i}"))
        agg = (s.agg_min if cut.kind == "quantile" else s.agg_sum)(sub.row_part(cut, mine, x, c_i, w, wt, _level))
        part_cols.append(s.alias(agg, f"_uv_q{i}"))
    part = exp.Select(expressions=part_cols).from_(table(f"{name}_in"))
    if nk:
        part.set("group", exp.Group(expressions=group()))

    return [cte(inside, f"{name}_in"), cte(part, f"{name}_part")]


def _level(cut: Cut, n: exp.Expression) -> exp.Expression:
    """The level a quantile cut compares C/W with: p, or p ± h for a density's cuts."""
    return s.lit(cut.p) if not cut.side else se.level(cut.p, cut.side, n)


# the registry's entry (passes/registry.py)
KIND = PassKind.REFINE
PREFIX = "ref"


def lower(source: Source, main, plan, name: str | None, settings) -> tuple[list[exp.CTE], dict]:
    assert name is not None  # a pass with a PREFIX is given its CTE name
    # Spark inlines every CTE where it is read; with the sub-bins' CTEs its driver ran out of memory
    # planning a query of many cuts (docs/refine.md, "Crowded bins"): there the cut bins are sorted whole
    return lower_refine_pass(source, main, plan, name, sub_bins=getattr(settings, "dialect", "duckdb") != "spark")


__all__ = ["KIND", "PREFIX", "lower", "lower_refine_pass", "refinable", "RefineContext", "bin_key", "BUILDS"]
