"""Small sqlglot builders shared by the PostgreSQL functions (pg_functions.py: gini; pg_moments.py:
the moment measures): numbers, the state array's elements, and an expression that stops the query
with a message."""

from __future__ import annotations

from sqlglot import exp

STATE_TYPE = "double precision[]"


def n(v) -> exp.Expression:
    return exp.Literal.number(v)


def state(i: int) -> exp.Expression:
    """s[i] of the state array, i from 1 as PostgreSQL counts (sqlglot's index is 0-based and
    generated with the dialect's offset)."""
    return exp.Bracket(this=exp.column("s"), expressions=[n(i - 1)])


def fail(message: str) -> exp.Expression:
    """An expression that stops the query with ``message`` (PostgreSQL has no raising function in SQL:
    a cast that must fail carries the message, as the compiled SQL does on PostgreSQL). The text
    depends on x, so PostgreSQL does not fold the cast (and fail) when it plans the function: a
    constant in a CASE branch is evaluated even when the branch is never taken."""
    text = exp.Case(ifs=[exp.If(this=exp.Not(this=exp.Is(this=exp.column("x"), expression=exp.Null())),
                                true=exp.Literal.string(f"uneven: {message}"))])
    return exp.cast(text, exp.DataType.build(STATE_TYPE, dialect="postgres"))
