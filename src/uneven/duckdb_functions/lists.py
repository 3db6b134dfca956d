"""Builders for DuckDB list expressions (lambdas, bindings, prefix sums) as sqlglot trees."""

from __future__ import annotations

from sqlglot import exp

from uneven.sqltree import build as s

SCAN = "_uv_scan"
SEGMENT_SCAN = "_uv_segment_scan"
BUDGET = "_uv_list_budget"
BUDGET_VARIABLE = "uneven_list_rows"  # SET VARIABLE uneven_list_rows = N: the rows a list form may hold (0: any)
UNITS = ["bytes", "KiB", "MiB", "GiB", "TiB", "PiB", "EiB"]  # how current_setting('memory_limit') prints
SCAN_STEPS = 62  # prefix sums by doubling: strides 2^0 … 2^61 cover any list DuckDB can hold


def ident(name: str) -> exp.Identifier:
    return exp.to_identifier(name)


def var(name: str) -> exp.Column:
    """An unquoted name: a macro argument or a lambda parameter."""
    return exp.column(name)


def call(name: str, *args: exp.Expression) -> exp.Anonymous:
    return exp.Anonymous(this=name, expressions=list(args))


def lam(params: list[str], body: exp.Expression) -> exp.Lambda:
    return exp.Lambda(this=body, expressions=[ident(p) for p in params])


def field(struct: exp.Expression, name: str) -> exp.Expression:
    return call("struct_extract", struct, s.lit(name))


def transform(lst: exp.Expression, params: list[str], body: exp.Expression) -> exp.Anonymous:
    return call("list_transform", lst, lam(params, body))


def element(lst: exp.Expression, index: exp.Expression) -> exp.Anonymous:
    """lst[index], 1-based, NULL outside the list (list_extract)."""
    return call("list_extract", lst, index)


def bind(value: exp.Expression, name: str, body: exp.Expression) -> exp.Expression:
    """``body`` with ``name`` bound to ``value``, computed once: list_transform([value], λ name: body)[1]."""
    return element(transform(exp.Array(expressions=[value]), [name], body), exp.Literal.number(1))


def struct(**fields: exp.Expression) -> exp.Struct:
    return exp.Struct(expressions=[exp.PropertyEQ(this=exp.to_identifier(k, quoted=True), expression=v)
                                   for k, v in fields.items()])


def collect(value: exp.Expression, order: exp.Expression | None, where: exp.Expression | None,
            desc: bool = False) -> exp.Expression:
    """list(value ORDER BY order) FILTER (WHERE where): the group's rows as one list (in memory)."""
    arg = value
    if order is not None:
        arg = exp.Order(this=value, expressions=[exp.Ordered(this=order, desc=desc, nulls_first=False)])
    agg = exp.ArrayAgg(this=arg)
    return exp.Filter(this=agg, expression=exp.Where(this=where)) if where is not None else agg


def _doubling(q: exp.Expression, added) -> exp.Expression:
    """Prefix sums of the list ``q`` (length ``n``, a macro argument) by doubling (Hillis–Steele):
    ⌈log2 n⌉ steps inside one ``list_reduce`` over the strides, whose accumulator is the list, so
    DuckDB keeps the current step's list only. ``added(v, i, stride, acc)`` is element ``i``'s new
    value in the step of stride ``stride``."""
    acc, d, v, i = var("_uv_acc"), var("_uv_d"), var("_uv_v"), var("_uv_i")
    stride = element(d, exp.Literal.number(1))
    step = lam(["_uv_acc", "_uv_d"], transform(acc.copy(), ["_uv_v", "_uv_i"], added(v, i, stride, acc)))
    power = exp.cast(exp.Pow(this=exp.Literal.number(2), expression=var("_uv_j")), exp.DataType.build("bigint"))
    exponents = call("list_filter", call("range", exp.Literal.number(0), exp.Literal.number(SCAN_STEPS)),
                     lam(["_uv_j"], s.lt(power, var("n"))))
    strides = transform(exponents, ["_uv_j"], exp.Array(expressions=[power.copy()]))
    return call("list_reduce", strides, step, q)


def scan_macros() -> list[exp.Create]:
    """Helper macro ``_uv_scan(q, n)``: inclusive prefix sums of the list of doubles ``q`` of length
    ``n``, by doubling (``_doubling``: each step adds the element ``d`` places back). Nested step
    calls kept every step's list until the whole expression was done: about 650 bytes per row;
    bench/README.md, "Installed functions: memory"."""
    def added(v, i, stride, acc):
        return s.case(s.gt(i, stride), s.add(v, element(acc, s.sub(i.copy(), stride.copy()))), v.copy())
    return [macro(SCAN, [(["q", "n"], _doubling(var("q"), added))])]


def segment_scan_macros() -> list[exp.Create]:
    """Helper macro ``_uv_segment_scan(q, keys, n)``: prefix sums of the doubles ``q`` that restart
    wherever ``keys`` changes, for a list where equal keys are adjacent (sorted by key). The same
    doubling as ``_uv_scan``, with one more test per step: after the step of stride ``d`` element
    ``i`` holds the sum of the elements in (i − 2d, i] with its key, because element ``i − d`` covers
    (i − 2d, i − d] with its own key, which is ``i``'s key exactly when it is added (equal keys are
    adjacent: an element before ``i`` with another key has no element of ``i``'s key before it).
    The last element of each run of a key then holds that key's total: n·log n work, where a slice
    per key copies the whole list each time (quadratic in the number of keys). ``keys`` is bound
    once by a lambda (a macro argument is substituted as text: read inside the step it would be
    rebuilt for every element)."""
    k = var("_uv_k")

    def added(v, i, stride, acc):
        back = s.sub(i.copy(), stride.copy())
        same = exp.NullSafeEQ(this=element(k.copy(), back.copy()), expression=element(k.copy(), i.copy()))
        return s.case(s.and_(s.gt(i, stride), same), s.add(v, element(acc, back.copy())), v.copy())
    return [macro(SEGMENT_SCAN, [(["q", "keys", "n"], bind(var("keys"), "_uv_k", _doubling(var("q"), added)))])]


def budget_macro() -> exp.Create:
    """``_uv_list_budget(b)``: the most rows a list form needing ``b`` bytes per row may hold in one
    group: the variable ``uneven_list_rows`` where set (a number ≤ 0: no budget, NULL), else DuckDB's
    ``memory_limit`` divided by ``b``; NULL (no budget) where the setting does not read as a size."""
    setting = call("current_setting", s.lit("memory_limit"))
    number = exp.TryCast(this=call("regexp_extract", setting, s.lit("^[0-9.]+")), to=exp.DataType.build("double"))
    unit = call("list_position", exp.Array(expressions=[s.lit(u) for u in UNITS]),
                call("regexp_extract", setting.copy(), s.lit("[A-Za-z]+$")))
    limit = s.mul(number, exp.Pow(this=s.lit(1024.0), expression=s.sub(unit, exp.Literal.number(1))))
    chosen = exp.TryCast(this=call("getvariable", s.lit(BUDGET_VARIABLE)), to=exp.DataType.build("double"))
    body = exp.Case(ifs=[exp.If(this=exp.Not(this=exp.Is(this=call("getvariable", s.lit(BUDGET_VARIABLE)),
                                                            expression=exp.Null())),
                                true=s.case(s.gt(chosen, s.lit(0.0)), chosen.copy()))],
                    default=s.div(limit, var("b")))
    return macro(BUDGET, [(["b"], body)])


def macro(name: str, overloads: list[tuple[list[str], exp.Expression]]) -> exp.Create:
    """CREATE OR REPLACE MACRO name(args) AS body[, (args) AS body …] (scalar or aggregate use)."""
    if len(overloads) == 1:
        args, body = overloads[0]
        return exp.Create(this=exp.UserDefinedFunction(this=exp.Table(this=ident(name)),
                                                        expressions=[ident(a) for a in args], wrapped=True),
                          kind="MACRO", replace=True, expression=body)
    over = exp.MacroOverloads(expressions=[exp.MacroOverload(this=body, expressions=[ident(a) for a in args],
                                                             is_table=False) for args, body in overloads])
    return exp.Create(this=exp.UserDefinedFunction(this=exp.Table(this=ident(name)), wrapped=False),
                      kind="MACRO", replace=True, expression=over)


def table_macro(name: str, args: list[str], body: exp.Select) -> exp.Create:
    """CREATE OR REPLACE MACRO name(args) AS TABLE <select>."""
    return exp.Create(this=exp.UserDefinedFunction(this=exp.Table(this=ident(name)),
                                                    expressions=[ident(a) for a in args], wrapped=True),
                      kind="MACRO", replace=True, expression=body,
                      properties=exp.Properties(expressions=[exp.ReturnsProperty(
                          this=exp.Schema(this=exp.Var(this="TABLE")), is_table=True)]))
