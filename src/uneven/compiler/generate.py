"""Generate SQL text for a target dialect: the dialect's lowering rules (compiler/dialects/), the
parentheses the text needs to keep the tree's grouping (compiler/emit.py), then sqlglot's generator,
which refuses what it knows it cannot write."""

from __future__ import annotations

from sqlglot import exp
from sqlglot.dialects.dialect import Dialect as SqlglotDialect
from sqlglot.errors import ErrorLevel, UnsupportedError

from uneven.compiler import emit
from uneven.compiler.dialects import EXECUTED_DIALECTS, SUPPORTED_DIALECTS, get_dialect
from uneven.errors import UnsupportedDialectError

__all__ = ["SUPPORTED_DIALECTS", "EXECUTED_DIALECTS", "check_dialect", "check_read_dialect", "generate",
           "lower_tree"]


def check_dialect(dialect: str) -> str:
    return get_dialect(dialect).name


def check_read_dialect(read: str) -> str:
    """The dialect input SQL is written in: any dialect sqlglot reads (duckdb by default)."""
    try:
        SqlglotDialect.get_or_raise(read)
    except (ValueError, TypeError):
        raise UnsupportedDialectError(f"cannot read SQL written in {read!r}: not a known SQL dialect "
                                      f"(e.g. {', '.join(SUPPORTED_DIALECTS)})") from None
    return read


def lower_tree(tree: exp.Expression, dialect: str = "duckdb", copy: bool = True) -> exp.Expression:
    """The tree ``generate`` prints: a copy (the tree itself when ``copy=False``) through the
    dialect's rules, then the parentheses its text needs (emit.parenthesize)."""
    return emit.parenthesize(get_dialect(dialect).lower(tree.copy() if copy else tree), copy=False)


def generate(tree: exp.Expression, dialect: str = "duckdb", pretty: bool = True, copy: bool = True) -> str:
    """SQL text of ``tree`` for ``dialect``. ``copy=False`` lowers the tree in place, for a caller
    that owns it and reads it no more (the compile pipeline: a deep copy of the whole compiled query
    per generation was a fifth of a compile)."""
    target = get_dialect(dialect)
    lowered = lower_tree(tree, dialect, copy=copy)
    checking = emit.checking()
    try:
        # sqlglot's generator copies the tree before its own dialect transforms unless told not to;
        # the lowered tree is ours (and read again only by the emission check)
        text = lowered.sql(dialect=target.name, pretty=pretty, unsupported_level=ErrorLevel.RAISE, copy=checking)
    except UnsupportedError as e:
        raise UnsupportedDialectError(f"the query cannot be written in {target.name}: {e}") from None
    if checking:
        emit.check_emission(lowered, text, target.name)
    return text
