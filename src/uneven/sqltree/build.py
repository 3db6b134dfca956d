"""Tiny builders for the sqlglot expressions the lowering emits.

Everything the compiler writes goes through here, so no SQL text is ever assembled by hand:
identifiers are quoted by the generator and literals are typed nodes.
"""

from __future__ import annotations

from collections.abc import Iterable, Iterator, Sequence
from typing import cast, overload

from sqlglot import exp

DOUBLE = exp.DataType.build("double")


def lit(value: float | int | str) -> exp.Expression:
    if hasattr(value, "to_expression"):  # a parameter known only at run time (registered functions)
        return value.to_expression()
    if isinstance(value, str):
        return exp.Literal.string(value)
    if value < 0:
        return exp.Neg(this=lit(-value))
    if isinstance(value, float):
        text = repr(value)
        digits = text.split("e")[0].replace(".", "").lstrip("0")
        if len(digits) > 15 and "e" not in text:
            text = f"{value:.17e}"
        # typed DOUBLE: engines read 0.4 as DECIMAL, which is slow in row-level arithmetic and
        # whose conversion of long literals may round. Built as exp.cast builds it (the type also
        # as the node's type), without its copies of the new literal and of DOUBLE's tree.
        to = DOUBLE.copy()
        cast = exp.Cast(this=exp.Literal.number(text), to=to)
        cast.type = to
        return cast
    return exp.Literal.number(str(value))


def node(e: exp.Expr) -> exp.Expression:
    """``e`` typed as the node it is: sqlglot annotates what it parses, walks and builds as ``Expr``,
    the root of its classes, while every node it makes is an ``Expression``."""
    return cast(exp.Expression, e)


def nodes(tree: exp.Expression) -> Iterator[exp.Expression]:
    """Every node of ``tree``, parents before children, in the order of sqlglot's depth-first walk
    (``tree.dfs()``); a plain stack over the nodes' arguments, several times faster than sqlglot's
    walks (a generator per node), which matters for the passes over a whole compiled query."""
    stack = [tree]
    while stack:
        node = stack.pop()
        yield node
        children: list[exp.Expression] = []
        for value in node.args.values():
            if isinstance(value, exp.Expression):
                children.append(value)
            elif type(value) is list:
                children.extend(v for v in value if isinstance(v, exp.Expression))
        children.reverse()
        stack.extend(children)


def col(name: str, table: str | None = None) -> exp.Column:
    return exp.column(name, table=table, quoted=True)


def is_one(e: exp.Expression) -> bool:
    if isinstance(e, exp.Cast) and e.to.this == exp.DataType.Type.DOUBLE:
        e = e.this
    return isinstance(e, exp.Literal) and not e.is_string and float(e.this) == 1.0


def paren(e: exp.Expression) -> exp.Expression:
    if isinstance(e, (exp.Column, exp.Literal, exp.Func, exp.Paren, exp.Case)):
        return e
    return exp.Paren(this=e)


def add(a: exp.Expression, b: exp.Expression) -> exp.Add:
    return exp.Add(this=paren(a), expression=paren(b))


def sub(a: exp.Expression, b: exp.Expression) -> exp.Sub:
    return exp.Sub(this=paren(a), expression=paren(b))


def mul(a: exp.Expression, b: exp.Expression) -> exp.Expression:
    """Product that leaves out a literal factor of one (unweighted passes use w = 1)."""
    if is_one(a):
        return b
    if is_one(b):
        return a
    return exp.Mul(this=paren(a), expression=paren(b))


def div(a: exp.Expression, b: exp.Expression) -> exp.Div:
    return exp.Div(this=paren(a), expression=paren(b))


def func(name: str, *args: exp.Expression) -> exp.Expression:
    return exp.func(name, *args)  # type: ignore[return-value]  # annotated Func; it builds a concrete node


def agg_sum(e: exp.Expression) -> exp.Sum:
    return exp.Sum(this=e)


def agg_min(e: exp.Expression) -> exp.Min:
    return exp.Min(this=e)


def agg_max(e: exp.Expression) -> exp.Max:
    return exp.Max(this=e)


def agg_count_star() -> exp.Count:
    return exp.Count(this=exp.Star())


def ln(e: exp.Expression) -> exp.Ln:
    return exp.Ln(this=e)


def power(a: exp.Expression, b: exp.Expression) -> exp.Pow:
    return exp.Pow(this=a, expression=b)


def square(a: exp.Expression) -> exp.Mul:
    """a * a: the same correctly rounded value as POWER(a, 2.0), and about 3x cheaper per row in
    DuckDB (pow is a library call); ``a`` is evaluated twice, so pass a column or a cheap term."""
    return exp.Mul(this=paren(a), expression=paren(a.copy()))


def sqrt(e: exp.Expression) -> exp.Sqrt:
    return exp.Sqrt(this=e)


def absval(e: exp.Expression) -> exp.Abs:
    return exp.Abs(this=e)


def greatest(*args: exp.Expression) -> exp.Greatest:
    return exp.Greatest(this=args[0], expressions=list(args[1:]), ignore_nulls=True)


def least(*args: exp.Expression) -> exp.Least:
    return exp.Least(this=args[0], expressions=list(args[1:]), ignore_nulls=True)


def clamp(e: exp.Expression, lo: exp.Expression, hi: exp.Expression) -> exp.Greatest:
    """max(lo, min(hi, e))."""
    return greatest(lo, least(hi, e))


def cast_double(e: exp.Expression) -> exp.Expression:
    if isinstance(e, exp.Literal) and not e.is_string:
        return lit(float(e.this))
    if isinstance(e, exp.Cast) and e.to.this == exp.DataType.Type.DOUBLE:
        return e
    return exp.cast(e, DOUBLE)


def case(cond: exp.Expression, then: exp.Expression, otherwise: exp.Expression | None = None) -> exp.Case:
    # built directly, taking ownership of its arguments like the other builders here
    # (Case().when() deep-copies them: a third of a moment query's compile time)
    return exp.Case(ifs=[exp.If(this=cond, true=then)], default=otherwise)


def _connect(kind: type[exp.And] | type[exp.Or], conds: Iterable[exp.Expression | None]) -> exp.Expression | None:
    """conds joined left-deep by AND or OR, the None ones left out (None when none is left).
    A condition that is itself a chain of the same connector is spliced in (AND and OR are
    associative in SQL's three-valued logic too), so ``and_(p, and_(q, r))`` is the chain p, q, r
    and prints without parentheses; any other operand keeps its grouping (compiler/emit.py)."""
    # flatten is annotated Expr; the operands of a chain are nodes (Expression)
    parts: list[exp.Expression] = [part for c in conds if c is not None  # type: ignore[misc]
                                   for part in (c.flatten(unnest=False) if type(c) is kind else (c,))]
    if not parts:
        return None
    out = parts[0]
    for c in parts[1:]:
        out = kind(this=out, expression=c)
    return out


@overload
def and_(first: exp.Expression, /, *conds: exp.Expression | None) -> exp.Expression: ...
@overload
def and_(first: exp.Expression | None, second: exp.Expression, /, *conds: exp.Expression | None) -> exp.Expression: ...
@overload
def and_(*conds: exp.Expression | None) -> exp.Expression | None: ...
def and_(*conds: exp.Expression | None) -> exp.Expression | None:
    """The conditions joined by AND (see _connect): a condition whenever the first one is given."""
    return _connect(exp.And, conds)


@overload
def or_(first: exp.Expression, /, *conds: exp.Expression | None) -> exp.Expression: ...
@overload
def or_(first: exp.Expression | None, second: exp.Expression, /, *conds: exp.Expression | None) -> exp.Expression: ...
@overload
def or_(*conds: exp.Expression | None) -> exp.Expression | None: ...
def or_(*conds: exp.Expression | None) -> exp.Expression | None:
    return _connect(exp.Or, conds)


def gt(a: exp.Expression, b: exp.Expression) -> exp.GT:
    return exp.GT(this=a, expression=b)


def gte(a: exp.Expression, b: exp.Expression) -> exp.GTE:
    return exp.GTE(this=a, expression=b)


def lt(a: exp.Expression, b: exp.Expression) -> exp.LT:
    return exp.LT(this=a, expression=b)


def lte(a: exp.Expression, b: exp.Expression) -> exp.LTE:
    return exp.LTE(this=a, expression=b)


def neq(a: exp.Expression, b: exp.Expression) -> exp.NEQ:
    return exp.NEQ(this=a, expression=b)


def not_null(e: exp.Expression) -> exp.Not:
    return exp.Not(this=exp.Is(this=e, expression=exp.Null()))


def alias(e: exp.Expression, name: str) -> exp.Alias:
    """e AS "name", on a copy of e (the caller may use e again)."""
    return exp.alias_(e, name, quoted=True)  # type: ignore[return-value]  # alias_ is annotated Expr; it builds an Alias


def named(e: exp.Expression, name: str) -> exp.Alias:
    """e AS "name", taking ownership of e like the other builders here: for a tree built for this
    place alone (``alias`` deep-copies its argument, most of the copying of a compile). A tree in
    which some node stands in two places (a builder reused a subtree without copying it) is
    copied, which gives each place its own node, as ``alias`` always did."""
    return exp.alias_(e, name, quoted=True, copy=not placed_once(e))  # type: ignore[return-value]  # as in alias


def placed_once(tree: exp.Expression) -> bool:
    """Whether every node below ``tree`` names as its parent the node it stands under, in the slot
    it stands in (sqlglot re-parents a node placed into a second parent, so a node placed twice
    fails this at its first place)."""
    stack: list[exp.Expression] = [tree]
    while stack:
        node = stack.pop()
        for key, value in node.args.items():
            if isinstance(value, exp.Expression):
                if value.parent is not node or value.arg_key != key:
                    return False
                stack.append(value)
            elif type(value) is list:
                for i, v in enumerate(value):
                    if isinstance(v, exp.Expression):
                        if v.parent is not node or v.arg_key != key or v.index != i:
                            return False
                        stack.append(v)
    return True


def raise_error(message: str) -> exp.Expression:
    """An expression that aborts the query with ``message`` (DuckDB ``error``)."""
    return raise_error_expr(lit(message))


def raise_error_expr(message: exp.Expression) -> exp.Anonymous:
    return exp.Anonymous(this="error", expressions=[message])


def struct(**fields: exp.Expression) -> exp.Struct:
    return exp.Struct(expressions=[
        exp.PropertyEQ(this=exp.to_identifier(k), expression=v) for k, v in fields.items()
    ])


def array(*items: exp.Expression) -> exp.Array:
    return exp.Array(expressions=list(items))


def window(fn: exp.Expression, partition: Sequence[exp.Expression], order: Sequence[exp.Expression] | None = None,
           running: bool = False, whole: bool = False) -> exp.Window:
    """fn OVER (PARTITION BY ... [ORDER BY ... ROWS BETWEEN UNBOUNDED PRECEDING AND CURRENT ROW]);
    ``whole``: ROWS BETWEEN UNBOUNDED PRECEDING AND UNBOUNDED FOLLOWING (a partition total that
    keeps the ORDER BY, so it shares the sort of the running columns)."""
    args = {"this": fn, "partition_by": partition or None, "over": "OVER"}
    if order:
        args["order"] = exp.Order(expressions=[o if isinstance(o, exp.Ordered)
                                               else exp.Ordered(this=o, nulls_first=False) for o in order])
    if running:
        args["spec"] = exp.WindowSpec(kind="ROWS", start="UNBOUNDED", start_side="PRECEDING",
                                      end="CURRENT ROW")
    elif whole:
        args["spec"] = exp.WindowSpec(kind="ROWS", start="UNBOUNDED", start_side="PRECEDING",
                                      end="UNBOUNDED", end_side="FOLLOWING")
    return exp.Window(**args)


# CTEs and table references (names quoted by the generator)


def cte(select: exp.Select, name: str) -> exp.CTE:
    return exp.CTE(this=select, alias=exp.TableAlias(this=exp.to_identifier(name, quoted=True)))


def table(name: str) -> exp.Table:
    return exp.Table(this=exp.to_identifier(name, quoted=True))


def grouped(keys: Sequence[exp.Expression], columns: Sequence[exp.Expression], below: str) -> exp.Select:
    """SELECT keys, columns FROM below GROUP BY keys (no GROUP BY without keys: one row)."""
    out = exp.Select(expressions=[k.copy() for k in keys] + list(columns)).from_(table(below), copy=False)
    if keys:
        out.set("group", exp.Group(expressions=[k.copy() for k in keys]))
    return out
