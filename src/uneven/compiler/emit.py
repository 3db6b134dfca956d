"""Faithful emission: the text of a tree means what the tree means, in every dialect we write.

sqlglot prints a tree as it was built and adds no parentheses for precedence, so
``And(Or(a, b), c)`` prints as ``a OR b AND c``, which every engine reads as ``a OR (b AND c)``.
``parenthesize`` is the one rule applied to every tree we built right before it becomes text
(``to_sql``, and ``generate.generate`` for compiled queries): it wraps an operand in ``exp.Paren``
where its operator binds looser than its parent's, or equally on the right of a binary operator
(``a - (b - c)``, ``a AND (b AND c)``: the tree is kept exactly, not re-associated).

The precedence levels are those every target dialect agrees on (duckdb, postgres, spark, sqlite,
trino, bigquery, snowflake), lowest first:

    OR  <  AND  <  NOT  <  predicates  <  ||  <  + -  <  * / %  <  unary - ~

Predicates (``= <> < <= > >=``, IS [NOT] DISTINCT FROM, IS, IN, BETWEEN, LIKE, ILIKE, GLOB …) are
one level on purpose: engines order them differently among themselves (PostgreSQL binds ``=`` tighter
than ``IS``, SQLite ``<`` tighter than ``=``), so a predicate operand of a predicate is always wrapped.
``||`` sits with ``+``/``-`` in Spark but below them in PostgreSQL, so ``||`` and arithmetic always
wrap each other. Any other operator (bitwise ops, ``//``, XOR, COLLATE …) has no agreed level: it is
wrapped as an operand of an operator, and its own operator operands are wrapped. Parentheses already
in the tree (the user's, ``sqltree.build.paren``) are kept. Nodes that print as a function call, a CASE, a
CAST or a subquery delimit themselves and are never wrapped.

``emission_error`` is the check: the emitted text, parsed back with the same dialect, must give the
same tree as a fully parenthesized rendering of the same tree (every operator operand wrapped, which
is right whatever the precedence table says) parsed back the same way, once ``exp.Paren`` nodes are
removed from both. Both texts go through the same generator, so a dialect's rewrites (``IS`` for
null-safe equality in SQLite) appear on both sides and only grouping can differ; the one rewrite that
depends on what the generator sees of an operand (a cast to a floating type around a division or on
its left operand, which SQLite and PostgreSQL add unless the operand is visibly a double, and a
parenthesis hides that) is removed from both sides too.
``generate`` runs it on every compile when ``UNEVEN_CHECK_EMISSION=1`` (off by default in the tests,
which check goldens, fuzzed shapes and the macros explicitly).
"""

from __future__ import annotations

import os
import sys

import sqlglot
from sqlglot import exp

from uneven.sqltree import build as s

__all__ = ["parenthesize", "to_sql", "emission_error", "checking", "check_emission"]

OR, AND, NOT, PREDICATE, CONCAT, ADDITIVE, MULTIPLICATIVE, UNARY = range(1, 9)

LEVEL: dict[type, int] = {
    exp.Or: OR, exp.And: AND, exp.Not: NOT,
    exp.EQ: PREDICATE, exp.NEQ: PREDICATE, exp.GT: PREDICATE, exp.GTE: PREDICATE, exp.LT: PREDICATE,
    exp.LTE: PREDICATE, exp.NullSafeEQ: PREDICATE, exp.NullSafeNEQ: PREDICATE, exp.Is: PREDICATE,
    exp.In: PREDICATE, exp.Between: PREDICATE, exp.Like: PREDICATE, exp.ILike: PREDICATE,
    exp.SimilarTo: PREDICATE, exp.Glob: PREDICATE, exp.Escape: PREDICATE,
    exp.DPipe: CONCAT,
    exp.Add: ADDITIVE, exp.Sub: ADDITIVE,
    exp.Mul: MULTIPLICATIVE, exp.Div: MULTIPLICATIVE, exp.Mod: MULTIPLICATIVE,
    exp.Neg: UNARY, exp.BitwiseNot: UNARY,
}

# operators without an agreed level: always grouped both ways
OTHER = (exp.Xor, exp.IntDiv, exp.BitwiseAnd, exp.BitwiseOr, exp.BitwiseXor, exp.BitwiseLeftShift,
         exp.BitwiseRightShift, exp.Collate, exp.Overlaps, exp.Distance, exp.Operator)

OPERATORS = tuple(LEVEL) + OTHER
PREFIX = (exp.Not, exp.Neg, exp.BitwiseNot)
# the argument keys that hold operands (the rest are lists in parentheses, flags, subqueries)
OPERANDS: dict[type[exp.Expr], tuple[str, ...]] = {exp.Between: ("this", "low", "high"), exp.In: ("this",)}


def _level(node: exp.Expression) -> int | None:
    return LEVEL.get(type(node))


def needs_paren(parent: exp.Expression, key: str, child: exp.Expression) -> bool:
    """Whether ``child``, the ``key`` operand of the operator ``parent``, must be wrapped so that the
    text groups it as the tree does."""
    if not isinstance(child, OPERATORS):
        return False
    if isinstance(parent, exp.Escape) and key == "this":
        return False  # x LIKE p ESCAPE e
    pl, cl = _level(parent), _level(child)
    if pl is None or cl is None:
        return True
    if isinstance(parent, PREFIX):
        return cl < pl
    if pl == PREDICATE:
        return cl <= PREDICATE
    if pl == CONCAT or cl == CONCAT:
        return not (cl == UNARY or (isinstance(child, exp.DPipe) and isinstance(parent, exp.DPipe)
                                    and key == "this"))
    if cl != pl:
        return cl < pl
    return key != "this"  # left-associative: only the left operand may share the level


def _operand_keys(node: exp.Expression) -> tuple[str, ...]:
    keys = OPERANDS.get(type(node))
    if keys is not None:
        return keys
    return ("this",) if isinstance(node, exp.Unary) else ("this", "expression")


def _wrap(tree: exp.Expression, rule) -> exp.Expression:
    # every decision reads an operator and its own operand only, so any parents-first order will do
    for node in [n for n in s.nodes(tree) if isinstance(n, OPERATORS)]:
        for key in _operand_keys(node):
            child = node.args.get(key)
            if isinstance(child, exp.Expression) and rule(node, key, child):
                node.set(key, exp.Paren(this=child))
    return tree


def parenthesize(tree: exp.Expression, copy: bool = True) -> exp.Expression:
    """The tree with the parentheses its text needs (a copy unless ``copy=False``)."""
    return _wrap(tree.copy() if copy else tree, needs_paren)


def parenthesize_all(tree: exp.Expression, copy: bool = True) -> exp.Expression:
    """Every operator operand of an operator wrapped: grouping-safe whatever the precedence rules."""
    return _wrap(tree.copy() if copy else tree, lambda p, k, c: isinstance(c, OPERATORS))


def to_sql(tree: exp.Expression, dialect: str = "duckdb", copy: bool = True, **options) -> str:
    """``tree.sql(dialect, **options)`` after ``parenthesize``: the one way our trees become text.
    ``copy=False`` parenthesizes the tree in place (for large trees built only to be printed, such as
    the installed macros: the rule is idempotent, so a tree printed twice is unchanged)."""
    check = checking()
    # the printed tree is this call's own copy, or (copy=False) a tree built only to be printed: the
    # generator need not copy it again before its own dialect transforms (a quarter of install()'s
    # time); the emission check reads the tree afterwards, so under it the generator still copies
    text = parenthesize(tree, copy=copy).sql(dialect=dialect, copy=check and not copy, **options)
    if check:
        check_emission(tree, text, dialect, **options)
    return text


# --- the check ------------------------------------------------------------------------------------

def checking() -> bool:
    return os.environ.get("UNEVEN_CHECK_EMISSION") == "1"


_FLOATS = {exp.DataType.Type.DOUBLE, exp.DataType.Type.FLOAT}


def _typed_division(node: exp.Expression) -> bool:
    """A cast to a floating type that wraps a division or is its left operand: generators add these
    (SQLite, PostgreSQL: division of doubles) depending on what they can see of the operand's type,
    which a parenthesis hides."""
    if not (isinstance(node, exp.Cast) and node.to.this in _FLOATS):
        return False
    return isinstance(node.this, exp.Div) or (isinstance(node.parent, exp.Div) and node.arg_key == "this")


def _normalised(tree: exp.Expression) -> exp.Expression:
    """exp.Paren removed (their grouping is the tree's shape), and the generators' typed division."""
    for p in list(tree.find_all(exp.Paren)):
        if isinstance(p.this, exp.Expression) and not isinstance(p.this, exp.Query):
            p.replace(p.this)
    for c in [n for n in tree.find_all(exp.Cast) if _typed_division(n)]:
        c.replace(c.this)
    return tree


def _parse(text: str, dialect: str) -> list[exp.Expression]:
    return [_normalised(s.node(t)) for t in sqlglot.parse(text, read=dialect) if t is not None]


def _first_difference(a: exp.Expression, b: exp.Expression) -> tuple[exp.Expression, exp.Expression]:
    """The innermost pair of nodes that differ while their children line up."""
    while type(a) is type(b):
        pairs = [(x, y) for k in set(a.args) | set(b.args)
                 for x, y in zip(*(v if isinstance(v, list) else [v] for v in (a.args.get(k), b.args.get(k))))
                 if isinstance(x, exp.Expression) and x != y]
        if len(pairs) != 1:
            break
        a, b = pairs[0]
    return a, b


def emission_error(tree: exp.Expression, text: str, dialect: str, **options) -> str | None:
    """None when ``text`` (the emitted SQL of ``tree``) parses back, with ``dialect``, to the tree a
    fully parenthesized rendering of ``tree`` parses back to (exp.Paren removed from both); else a
    message naming the first node whose grouping the text lost."""
    options = {k: v for k, v in options.items() if k not in ("pretty",)}
    reference = parenthesize_all(tree).sql(dialect=dialect, **options)
    try:
        got, want = _parse(text, dialect), _parse(reference, dialect)
    except sqlglot.errors.ParseError as e:
        return f"the {dialect} SQL we emitted does not parse back: {str(e).splitlines()[0]}"
    if len(got) != len(want):
        return f"the {dialect} SQL parses back to {len(got)} statements, expected {len(want)}"
    for g, w in zip(got, want):
        if g != w:
            a, b = _first_difference(g, w)
            return (f"the {dialect} SQL does not mean what its tree means: the text reads "
                    f"{a.sql(dialect)[:200]!r} where the tree has {parenthesize_all(b).sql(dialect)[:200]!r}")
    return None


_CHECKED: set[tuple[str, str]] = set()  # (dialect, text) already found faithful in this process


def check_emission(tree: exp.Expression, text: str, dialect: str, **options) -> None:
    """Raise AssertionError when ``emission_error`` finds a lost grouping (the check mode)."""
    if (dialect, text) in _CHECKED:
        return
    limit = sys.getrecursionlimit()
    sys.setrecursionlimit(max(limit, 20_000))  # the parser recurses per nesting level (deeply nested installed macros)
    try:
        err = emission_error(tree, text, dialect, **options)
    finally:
        sys.setrecursionlimit(limit)
    if err is not None:
        raise AssertionError(f"unfaithful emission: {err}")
    _CHECKED.add((dialect, text))
