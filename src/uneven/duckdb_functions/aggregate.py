"""Aggregate forms: one DuckDB macro per catalog measure, usable in any GROUP BY.

``gini(x)`` / ``gini(x, w)`` are macro overloads built from the same catalog ``build`` the compiler
uses, written against contexts whose columns are list elements instead of window columns:

* moment pass (theil, mld, ge, atkinson, hhi of rows): plain streaming aggregates (``sum(CASE …)``),
  no list: memory per group is a few numbers.
* ordered pass (gini, shares, quantiles …): the group's valid rows are collected into one sorted list
  ``list({x, w} ORDER BY x)``; running weights come from prefix sums of that list (``_uv_scan``);
  each aggregate of the build becomes ``list_sum(list_transform(rows, λ e, i: …))``. The whole group
  is held in memory.
* centred pass (cv, hoover): the group mean from streaming sums, the deviations over a list of the
  group's values (in memory).
* entity pass (hhi with an entity, cr): the group's values (with their entity) in a list sorted by
  entity, summed per entity by running sums that restart at each entity (n·log n), the totals sorted
  (in memory).

Rows are skipped and groups give NULL exactly as in the compiled SQL (the same builds); a negative
weight, a text value or weight and an out-of-range parameter stop the query with an error naming
the function and the argument.
"""

from __future__ import annotations

from sqlglot import exp

from uneven.catalog.scaling import finite
from uneven.catalog.spec import Measure
from uneven.compiler.passes.moment import MomentContext
from uneven.compiler.passes.source import not_finite
from uneven.duckdb_functions import lists as L
from uneven.duckdb_functions.symbolic import NeedsConstant, explore_build
from uneven.sqltree import build as s

X, W = "_uv_x", "_uv_w"  # struct fields of a collected row
E, I, G = "_uv_e", "_uv_i", "_uv_g"  # lambda parameters: element, its 1-based position, bound group


class _Passthrough:
    """Stands in for the compiler's main aggregate: a registered sum is just the aggregate itself."""

    def add(self, expr, prefix=None):
        return expr


def _rows_to_list(expr: exp.Expression, lst: exp.Expression) -> exp.Expression:
    """Each SQL aggregate in ``expr`` → the same aggregate over the list's elements."""
    ops = {exp.Sum: "list_sum", exp.Min: "list_min", exp.Max: "list_max"}

    def fn(node):
        if isinstance(node, exp.Count) and isinstance(node.this, exp.Star):
            return L.call("len", lst.copy())
        for cls, name in ops.items():
            if type(node) is cls:
                return L.call(name, L.transform(lst.copy(), [E, I], node.this.copy()))
        return node

    return expr.transform(fn)


class OrderedListContext:
    """The ordered pass over the sorted list of a group's rows (see catalog/ordered.py)."""

    def __init__(self, weighted: bool):
        self.weighted = weighted
        self.rows = L.field(L.var(G), "_uv_l")

    x = property(lambda self: L.field(L.var(E), X))
    w = property(lambda self: L.field(L.var(E), W) if self.weighted else s.lit(1.0))

    @property
    def c(self):
        return L.element(L.var("_uv_cs"), L.var(I)) if self.weighted else s.cast_double(L.var(I))

    @property
    def min_row(self):
        return L.field(L.element(self.rows.copy(), exp.Literal.number(1)), X)

    @property
    def W_row(self):
        if self.weighted:
            return L.element(L.var("_uv_cs"), L.call("len", L.var("_uv_cs")))
        return s.cast_double(L.call("len", self.rows.copy()))

    W = property(lambda self: s.agg_sum(self.w) if self.weighted else s.cast_double(s.agg_count_star()))
    # NULL past the double range, as in the compiled pass: no measure from an infinite total
    T = property(lambda self: finite(s.agg_sum(s.mul(self.w, self.x))))
    n = property(lambda self: s.agg_count_star())

    def lorenz_grid(self, k):
        raise NeedsConstant("the Lorenz grid needs its number of points when the plan is built")

    # a relative poverty line compares every row with the group's median: over a list that is a
    # second pass per element (quadratic), so those measures get the table form only
    @property
    def median_row(self):
        raise NeedsConstant("the relative poverty line reads the group's median on every row")

    def below_weight_row(self, frac):
        raise NeedsConstant("the relative poverty line reads the group's median on every row")

    def poor_median_row(self, frac):
        raise NeedsConstant("the relative poverty line reads the group's median on every row")


class EntityListContext:
    """The entity pass over a group's entity totals, largest first (``_uv_v``)."""

    v = property(lambda self: L.var(E))
    r = property(lambda self: L.var(I))


def _substitute(expr: exp.Expression, mapping: dict[str, exp.Expression]) -> exp.Expression:
    """Replace the row markers ``_uv_x`` / ``_uv_w`` by the given expressions."""
    return expr.transform(lambda n: mapping[n.name].copy() if isinstance(n, exp.Column) and not n.table
                          and n.name in mapping else n)


class MacroMomentContext(MomentContext):
    """The moment pass as streaming aggregates over the macro's arguments (no list)."""

    def __init__(self, x: exp.Expression, w: exp.Expression | None, cond: exp.Expression):
        # a duck-typed stand-in for MainAggregate: add() hands back the sum itself, not a column
        self.main = _Passthrough()  # type: ignore[assignment]
        self.args = {X: x} | ({W: w} if w is not None else {})
        self.weighted = w is not None
        self._valid = cond

    x = property(lambda self: L.var(X))
    w = property(lambda self: L.var(W) if self.weighted else s.lit(1.0))

    def _when_valid(self, term):
        return s.case(self._valid.copy(), _substitute(term, self.args))


class CentredListContext(MacroMomentContext):
    """Moment sums stream; ``sum`` of a centred term runs over the group's list with ``mu`` bound."""

    # r = x/μ inside each listed row: the log and power measures take the centred, cancellation-free
    # forms the compiled centred pass uses (catalog/moment.py), so both give the same value (the
    # one-pass forms overflow on x·ln x near 1e308 and lose digits at a small spread)
    row_mean = True

    @property
    def mu(self):
        return L.field(L.var(G), "_uv_mu")

    @property
    def mu_divisor(self):
        """μ where T > 0, else NULL (the divisor of r = x/μ)."""
        return L.field(L.var(G), "_uv_mup")

    @property
    def r(self):
        return s.div(self.x, self.mu_divisor)

    def sum(self, term):
        on_rows = _substitute(term, {X: L.field(L.var(E), X), W: L.field(L.var(E), W)})
        return L.call("list_sum", L.transform(L.field(L.var(G), "_uv_l"), [E, I], on_rows))


def _row_inputs(name: str, trailing_kind: str | None, weighted: bool):
    """(value, weight) as checked DOUBLE expressions over the macro arguments, and the row filter."""
    x = checked_numeric(L.var("x"), name, "value x")
    cond: exp.Expression = s.not_null(L.var("x"))
    w = None
    if weighted:
        wd = checked_numeric(L.var("w"), name, "weight w")
        w = s.case(s.lt(wd, s.lit(0.0)), s.raise_error(f"uneven: negative weight in the weight argument w of "
                                                       f"{name}()"), wd.copy())
        cond = s.and_(cond, s.gt(w.copy(), s.lit(0.0)))
    return x, w, cond


def checked_numeric(arg: exp.Expression, name: str, what: str) -> exp.Expression:
    """The argument as DOUBLE; text, NaN and ±infinity stop the query (as in the compiled passes,
    docs/input-policy.md: a sum over them is NaN or infinite, never a usable measure)."""
    text = exp.EQ(this=L.call("typeof", arg.copy()), expression=s.lit("VARCHAR"))
    kind = what.split()[0]  # "value" or "weight"
    label = what.split()[-1]
    wd = s.cast_double(arg.copy())
    return exp.Case(ifs=[
        exp.If(this=text, true=s.raise_error(f"uneven: {name}(): the {what} must be numeric, got text")),
        exp.If(this=not_finite(wd), true=s.raise_error(
            f"uneven: {name}(): NaN or infinite {kind} in the {kind} argument {label}")),
    ], default=wd.copy())


# Bytes per row a list form needs at its peak beyond DuckDB's memory_limit (the collected list and the
# lists its lambdas build), measured on one group of 1M-2M rows (bench/installed_memory.py; figures in
# bench/README.md, "Installed functions: memory"), rounded up. A group with more rows than
# memory_limit / bytes stops with an error pointing to the table form, so the lists stay within about
# the memory limit on top of what DuckDB itself counts.
# The entity forms (restarting prefix sums over the {entity, x} list) measured 58–228 on 1M rows with
# 10,000 to 1,000,000 entities.
LIST_BYTES_PER_ROW = {"ordered": 240, "centred": 120, "entity": 240}
LIST_BYTES_MEASURE = {"wolfson": 400}  # measured above the pass's figure


def list_bytes_per_row(measure: Measure, kind: str) -> int:
    return LIST_BYTES_MEASURE.get(measure.name, LIST_BYTES_PER_ROW[kind])


def guard_rows(measure: Measure, kind: str, rows: exp.Expression, body: exp.Expression) -> exp.Expression:
    """CASE WHEN <the group's list holds more rows than the budget> THEN error('…') ELSE body END: the
    check runs before the lambdas build their lists (DuckDB evaluates a CASE branch only for the rows
    that take it)."""
    name, per_row = measure.name, list_bytes_per_row(measure, kind)
    budget = L.call(L.BUDGET, exp.Literal.number(per_row))
    trailing = f", '<{measure.trailing}>'" if measure.trailing else ""
    params = "".join(f", <{p.name}>" for p in measure.params)
    parts: list[exp.Expression] = [
        s.lit(f"uneven: {name}(): a group of "), exp.cast(L.call("len", rows), exp.DataType.build("varchar")),
        s.lit(f" rows is more than the aggregate form holds in memory (about {per_row} bytes per row in lists "
              "that DuckDB's memory_limit does not count; memory_limit = "),
        L.call("current_setting", s.lit("memory_limit")),
        s.lit(" allows "), exp.cast(exp.cast(exp.Floor(this=budget.copy()), exp.DataType.build("bigint")),
                                                    exp.DataType.build("varchar")),
        s.lit(f" rows). Use the table form, which spills to disk: SELECT * FROM {name}_by('<table>', '<value>'"
              f"{params}{trailing}, ['<key>', ...]); or SET VARIABLE {L.BUDGET_VARIABLE} = <rows> "
              "(0: no limit) to hold larger groups in memory"),
    ]
    message = parts[0]
    for part in parts[1:]:
        message = exp.DPipe(this=message, expression=part, safe=True)
    too_many = s.gt(L.call("len", rows.copy()), budget)
    return exp.Case(ifs=[exp.If(this=too_many, true=s.raise_error_expr(message))], default=body)


def build_aggregate(measure: Measure, has_trailing: bool, params: list[exp.Expression]) -> exp.Expression:
    """The macro body of one overload (raises NeedsConstant when a parameter shapes the plan)."""
    kind = measure.pass_for(has_trailing)
    name = measure.name
    weighted = has_trailing and measure.trailing == "weight"
    x, w, cond = _row_inputs(name, measure.trailing, weighted)
    if kind == "moment":
        mctx = MacroMomentContext(x, w, cond)
        return explore_build(lambda p: measure.build(mctx, p), params)
    if kind == "centred":
        cctx = CentredListContext(x, w, cond)
        body = explore_build(lambda p: measure.build(cctx, p), params)
        rows = L.collect(L.struct(**{X: x.copy(), W: (w or s.lit(1.0)).copy()}), None, cond.copy())
        means = {"_uv_mu": s.div(cctx.T, cctx.W),
                 "_uv_mup": s.case(s.gt(cctx.T, s.lit(0.0)), s.div(cctx.T, cctx.W))}
        return L.bind(L.struct(_uv_l=rows, **means), G, guard_rows(measure, kind, L.field(L.var(G), "_uv_l"), body))
    if kind == "ordered":
        octx = OrderedListContext(weighted)
        body = _rows_to_list(explore_build(lambda p: measure.build(octx, p), params), octx.rows)
        if weighted:
            sums = L.call(L.SCAN, L.transform(octx.rows.copy(), [E], L.field(L.var(E), W)),
                          L.call("len", octx.rows.copy()))
            body = L.bind(sums, "_uv_cs", body)
        fields = {X: x.copy()} | ({W: w.copy()} if weighted else {})
        rows = L.collect(L.struct(**fields), x.copy(), cond)
        return L.bind(L.struct(_uv_l=rows), G, guard_rows(measure, kind, octx.rows.copy(), body))
    if kind == "entity":
        ectx = EntityListContext()
        body = _rows_to_list(explore_build(lambda p: measure.build(ectx, p), params), L.var("_uv_v"))
        return L.bind(_entity_totals(measure, x, has_trailing), "_uv_v", body)
    raise NeedsConstant(f"no aggregate form for the {kind} pass")


def _entity_totals(measure: Measure, x: exp.Expression, with_entity: bool) -> exp.Expression:
    """The group's entity totals, largest first (each row its own entity without an entity), or an
    error where the group has more rows than the list budget (guard_rows)."""
    if not with_entity:
        values = L.collect(x.copy(), x.copy(), s.not_null(L.var("x")), desc=True)
        return L.bind(values, "_uv_r", guard_rows(measure, "entity", L.var("_uv_r"), L.var("_uv_r")))
    rows = L.collect(L.struct(_uv_k=L.var("entity"), _uv_x=x.copy()), L.var("entity"),
                     s.and_(s.not_null(L.var("x")), s.not_null(L.var("entity"))))
    lst = L.var("_uv_r")
    i = L.var(I)
    # the rows are sorted by entity: running sums restart at each entity (_uv_segment_scan, n·log n),
    # and the last row of each entity holds its total
    sums = L.call(L.SEGMENT_SCAN, L.transform(lst.copy(), [E], L.field(L.var(E), "_uv_x")),
                  L.transform(lst.copy(), [E], L.field(L.var(E), "_uv_k")), L.call("len", lst.copy()))
    following = L.field(L.element(lst.copy(), s.add(i.copy(), exp.Literal.number(1))), "_uv_k")
    last = exp.Or(this=exp.EQ(this=i, expression=L.call("len", lst.copy())),
                  expression=exp.NullSafeNEQ(this=L.field(L.element(lst.copy(), i.copy()), "_uv_k"),
                                             expression=following))
    ends = L.call("list_filter", L.call("range", exp.Literal.number(1), s.add(L.call("len", lst.copy()),
                                                                              exp.Literal.number(1))),
                  L.lam([I], last))
    totals = L.call("list_reverse_sort", L.transform(ends, ["_uv_b"], L.element(L.var("_uv_s"), L.var("_uv_b"))))
    return L.bind(rows, "_uv_r", guard_rows(measure, "entity", lst.copy(), L.bind(sums, "_uv_s", totals)))


def param_checks(measure: Measure, body: exp.Expression) -> exp.Expression:
    """CASE WHEN <a parameter varies, is NULL or out of range> THEN error('…') … ELSE body END (the CASE built directly:
    Case.when() copies the whole body at every branch)."""
    ifs = []
    for p in measure.params:
        v = L.var(p.name)
        bad: exp.Expression | None = None
        what: str | None = None
        if p.kind == "fraction":
            bad = exp.Or(this=s.lt(v, s.lit(0.0)), expression=s.gt(v.copy(), s.lit(1.0)))
            what = "a fraction between 0 and 1"
        elif p.kind == "nonnegative":
            bad, what = s.lt(v, s.lit(0.0)), "at least 0"
        elif p.kind == "count":
            bad = exp.Or(this=s.lt(v, s.lit(1.0)), expression=s.neq(v.copy(), exp.Floor(this=v.copy())))
            what = "a whole number of at least 1"
            if measure.max_count:
                bad = exp.Or(this=bad, expression=s.gt(v.copy(), s.lit(float(measure.max_count))))
                what += f" and at most {measure.max_count}"
        # a volatile parameter (random(), a subquery over one) differs between two evaluations;
        # a constant, or a column grouped by, equals itself (a column that is not grouped by is
        # refused by DuckDB's binder: the checks below read the parameter outside any aggregate)
        varies = exp.NullSafeNEQ(this=v.copy(), expression=v.copy())
        ifs.append(exp.If(this=varies, true=s.raise_error(
            f"uneven: {measure.name}(): {p.name} must be a numeric constant, the same for every row of a "
            "group; it gives a different value on each evaluation (random() or another volatile call)")))
        null = exp.Is(this=v.copy(), expression=exp.Null())
        ifs.append(exp.If(this=null, true=s.raise_error(f"uneven: {measure.name}(): {p.name} cannot be NULL")))
        if bad is not None:
            ifs.append(exp.If(this=bad, true=s.raise_error(f"uneven: {measure.name}(): {p.name} must be {what}")))
    return exp.Case(ifs=ifs, default=body) if ifs else body


def aggregate_overloads(measure: Measure) -> list[tuple[list[str], exp.Expression]]:
    """(arguments, body) per overload: without and with the trailing weight/entity."""
    names = [p.name for p in measure.params]
    out = []
    for has_trailing in (False, True) if measure.trailing else (False,):
        args = ["x", *names] + (["w" if measure.trailing == "weight" else "entity"] if has_trailing else [])
        body = build_aggregate(measure, has_trailing, [s.cast_double(L.var(n)) for n in names])
        out.append((args, param_checks(measure, body)))
    return out
