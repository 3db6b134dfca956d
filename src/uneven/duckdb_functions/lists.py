"""Builders for DuckDB list expressions (lambdas, bindings, prefix sums) as sqlglot trees."""

from __future__ import annotations

from sqlglot import exp

from uneven.sqltree import build as s

SCAN_STEP = "_uv_scan_step"
SCAN = "_uv_scan"
SCAN_STEPS = 40  # prefix sums by doubling: 2^40 rows per group is more than any group can hold


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


def scan_macros() -> list[exp.Create]:
    """Helper macros: inclusive prefix sums of a list of doubles by doubling (Hillis–Steele), each
    step skipped once the stride passes the list's length; O(n log n) work, no copies per element."""
    q, d, z, v, i = var("q"), var("d"), var("_uv_z"), var("_uv_v"), var("_uv_i")
    added = s.case(s.gt(i, d), s.add(v, element(z, s.sub(i, d))), v)
    step_body = s.case(s.gt(call("len", z), d), transform(z, ["_uv_v", "_uv_i"], added), z)
    step = bind(q, "_uv_z", step_body)
    body: exp.Expression = var("q")
    for k in range(SCAN_STEPS):
        body = call(SCAN_STEP, body, exp.Literal.number(2 ** k))
    return [macro(SCAN_STEP, [(["q", "d"], step)]), macro(SCAN, [(["q"], body)])]


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
