"""The value of a constant parameter expression (p, k, alpha, epsilon, level, replicates, seed …),
with the meaning the SQL text has in the dialect it was read in.

A parameter may be a constant expression: numeric literals, casts, arithmetic (+ − × ÷, integer
division, modulo, powers), unary minus, parentheses and a short list of deterministic scalar
functions (``ALLOWED_FUNCTIONS``). Anything else (a column, ``random()``, a subquery, an aggregate,
a query parameter) is refused with a :class:`ConstantError` naming the offending part, and
``NULL`` (or an expression that evaluates to NULL) is refused as "cannot be NULL".

How a value is found:

* a plain number (``0.4``, ``-(1e-3)``) is read in Python, exactly as its digits say;
* anything else is evaluated by DuckDB: the tree is transpiled from the read dialect to DuckDB by
  sqlglot after type annotation, which carries the read dialect's integer division (``1/2`` read
  as PostgreSQL or SQLite becomes an integer division, read as DuckDB or Spark a fractional one),
  then ``SELECT CAST((<expr>) AS DOUBLE)`` runs on one cached in-memory connection (a cursor per
  evaluation, so threads may share it). DuckDB's own rules then apply to casts: ``CAST(0.5 AS
  INTEGER)`` is 1 (a DECIMAL rounds half away from zero), ``CAST(0.25 AS DECIMAL(3,1))`` is 0.3.
  Read dialects whose integer casts truncate (Spark, Hive, Databricks, SQLite, T-SQL) get their cast
  operand truncated first, so ``CAST(0.5 AS INT)`` read as Spark is 0, as the engine computes it;
  SQLite's ``CAST(v AS DECIMAL(p, s))`` keeps every digit (NUMERIC affinity), so it becomes DOUBLE.
  Known gap: SQLite's dynamic typing makes ``CAST(2.0 AS NUMERIC) / 4`` an integer division (0);
  here it is 0.5.
  An engine error (cast overflow, division by zero in ``//``) becomes a ConstantError.

This module imports nothing from the compiler or the catalog: it is the bottom layer.
"""

from __future__ import annotations

import functools
import math
import threading

import duckdb
from sqlglot import exp
from sqlglot.errors import ErrorLevel, SqlglotError
from sqlglot.optimizer.annotate_types import annotate_types

from uneven.sqltree.volatile import CLOCK_CLASSES, CLOCK_NAMES, VOLATILE_NAMES, is_volatile_call

# deterministic scalar functions a constant parameter may call, by sqlglot node (SQL name shown in messages)
ALLOWED_FUNCTIONS: dict[type[exp.Expression], str] = {
    exp.Abs: "abs", exp.Round: "round", exp.Pow: "power", exp.Sqrt: "sqrt", exp.Ln: "ln", exp.Exp: "exp",
    exp.Least: "least", exp.Greatest: "greatest", exp.Floor: "floor", exp.Ceil: "ceil",
}
_OPERATORS = (exp.Paren, exp.Neg, exp.Add, exp.Sub, exp.Mul, exp.Div, exp.IntDiv, exp.Mod)
# read dialects whose CAST of a fraction to an integer type truncates toward zero (Spark, SQLite:
# checked against the engines in tests/test_constants.py; Hive, Databricks, T-SQL: from memory)
TRUNCATING_INTEGER_CASTS = frozenset({"spark", "spark2", "databricks", "hive", "sqlite", "tsql"})


class ConstantError(ValueError):
    """A parameter is not a usable constant. ``reason`` continues the parameter's name ("p must be a
    numeric constant, not the column x"); ``node`` is the offending part, for its line and column."""

    def __init__(self, reason: str, node: exp.Expression | None = None):
        super().__init__(reason)
        self.reason = reason
        self.node = node


def _shown(node: exp.Expression, read: str) -> str:
    try:
        return node.sql(read, normalize_functions="lower")
    except SqlglotError:
        return node.sql("duckdb", normalize_functions="lower")


def _function_name(node: exp.Expression) -> str:
    if isinstance(node, exp.Rand):
        return "random"
    return (node.name if isinstance(node, exp.Anonymous) else node.sql_name()).lower()  # type: ignore[attr-defined]  # calls only: a Func


def check_constant(node: exp.Expression, read: str = "duckdb") -> None:
    """Raise ConstantError unless ``node`` is built only from what a constant parameter may use."""
    if isinstance(node, exp.Cast):  # TryCast too; the target type is not an operand
        if not (isinstance(node.this, exp.Literal) and node.this.is_string):  # CAST('0.5' AS DOUBLE) is fine
            check_constant(node.this, read)
        return
    if isinstance(node, exp.Null):
        return  # evaluates to NULL: refused after evaluation as "cannot be NULL"
    if isinstance(node, exp.Literal):
        if node.is_string:
            raise ConstantError(f"must be a numeric constant, got the text {_shown(node, read)} "
                                "(write the number, or CAST it to a number)", node)
        return
    if isinstance(node, _OPERATORS) or type(node) in ALLOWED_FUNCTIONS:
        for child in node.iter_expressions():
            check_constant(child, read)
        return
    shown = _shown(node, read)
    if isinstance(node, exp.Column):
        raise ConstantError(f"must be a numeric constant, not the column {shown}", node)
    if isinstance(node, (exp.Placeholder, exp.Parameter)):
        raise ConstantError(f"must be a numeric constant written in the query, not the query parameter {shown}",
                            node)
    if isinstance(node, (exp.Subquery, exp.Select, exp.Exists, exp.SetOperation)):
        raise ConstantError("must be a numeric constant, not a subquery", node)
    if isinstance(node, exp.Window):
        raise ConstantError(f"must be a numeric constant, not a window function ({shown})", node)
    if isinstance(node, exp.AggFunc):
        raise ConstantError(f"must be a numeric constant, not an aggregate ({shown})", node)
    if is_volatile_call(node) or isinstance(node, CLOCK_CLASSES) or (
            isinstance(node, exp.Func) and _function_name(node) in VOLATILE_NAMES | CLOCK_NAMES):
        raise ConstantError(f"must be a numeric constant; {_function_name(node)}() gives a different value "
                            "on each call", node)
    if isinstance(node, exp.Func):
        allowed = ", ".join(sorted(set(ALLOWED_FUNCTIONS.values())))
        raise ConstantError(f"must be a numeric constant; the function {_function_name(node)}() is not allowed "
                            f"in a constant (allowed: numbers, casts, + - * / // %, unary minus and {allowed})",
                            node)
    raise ConstantError(f"must be a numeric constant, got {shown}", node)


def literal_value(node: exp.Expression) -> float | None:
    """A plain number (parentheses and unary minus around one numeric literal), read in Python;
    None for anything else."""
    sign = 1.0
    while isinstance(node, (exp.Paren, exp.Neg)):
        if isinstance(node, exp.Neg):
            sign = -sign
        node = node.this
    if isinstance(node, exp.Literal) and not node.is_string:
        try:
            return sign * float(node.this)
        except ValueError:
            return None
    return None


def _truncate_integer_casts(tree: exp.Expression) -> exp.Expression:
    """CAST(v AS <integer type>) → CAST(TRUNC(v) AS <integer type>): the cast of an engine that truncates."""
    def fn(node):
        if isinstance(node, exp.Cast) and node.to.is_type(*exp.DataType.INTEGER_TYPES) \
                and not node.this.is_type(*exp.DataType.INTEGER_TYPES):
            operand = node.this
            if isinstance(operand, exp.Literal) and operand.is_string:
                operand = exp.cast(operand, exp.DataType.Type.DOUBLE)
            return node.__class__(**{**node.args, "this": exp.Trunc(this=operand)})
        return node
    return tree.transform(fn)


def _unscaled_decimal_casts(tree: exp.Expression) -> exp.Expression:
    """CAST(v AS DECIMAL(p, s)) → CAST(v AS DOUBLE): SQLite's NUMERIC affinity keeps every digit."""
    def fn(node):
        if isinstance(node, exp.Cast) and node.to.is_type(exp.DataType.Type.DECIMAL, exp.DataType.Type.BIGDECIMAL):
            return node.__class__(**{**node.args, "to": exp.DataType.build("double")})
        return node
    return tree.transform(fn)


# what a read dialect's casts mean where sqlglot's transpilation to DuckDB keeps DuckDB's meaning
_READ_RULES: dict[str, tuple] = {name: (_truncate_integer_casts,) for name in TRUNCATING_INTEGER_CASTS}
_READ_RULES["sqlite"] = (_truncate_integer_casts, _unscaled_decimal_casts)


def duckdb_query(node: exp.Expression, read: str = "duckdb") -> str:
    """``SELECT CAST((<expr>) AS DOUBLE)`` in DuckDB's dialect, meaning what ``node`` means in ``read``."""
    tree = annotate_types(node.copy(), dialect=read)
    for rule in _READ_RULES.get(str(read).lower(), ()):
        tree = annotate_types(rule(tree), dialect=read)
    query = exp.select(exp.cast(exp.Paren(this=tree), exp.DataType.Type.DOUBLE))
    return query.sql("duckdb", unsupported_level=ErrorLevel.RAISE)


_LOCK = threading.Lock()
_CONNECTION: list[duckdb.DuckDBPyConnection] = []


def _cursor() -> duckdb.DuckDBPyConnection:
    with _LOCK:
        if not _CONNECTION:
            _CONNECTION.append(duckdb.connect(":memory:"))
        return _CONNECTION[0].cursor()


@functools.lru_cache(maxsize=4096)
def _evaluate(query: str) -> tuple[float | None, str | None]:
    """(value, None) or (None, the engine's message) for one query; the result is deterministic."""
    cur = _cursor()
    try:
        row = cur.execute(query).fetchone()
    except duckdb.Error as e:
        return None, str(e).strip().splitlines()[0]
    finally:
        cur.close()
    return (None if row is None or row[0] is None else float(row[0])), None


def evaluate_constant(node: exp.Expression, read: str = "duckdb") -> float:
    """The value of a constant parameter, as the engine computes it (see the module doc).

    Raises ConstantError for what is not a constant, NULL, a value that is not finite, or an
    expression the engine cannot evaluate."""
    check_constant(node, read)
    value = literal_value(node)
    if value is None:
        if isinstance(node, exp.Null):
            raise ConstantError("cannot be NULL", node)
        try:
            query = duckdb_query(node, read)
        except Exception as e:  # noqa: BLE001 - sqlglot cannot type or transpile it: our error, not a traceback
            raise ConstantError(f"could not be evaluated ({_shown(node, read)}): {e}", node) from None
        value, problem = _evaluate(query)
        if problem is not None:
            raise ConstantError(f"could not be evaluated ({_shown(node, read)}): {problem}", node)
        if value is None:
            raise ConstantError(f"cannot be NULL ({_shown(node, read)} is NULL)", node)
    if not math.isfinite(value):
        raise ConstantError(f"must be a finite number, got {_shown(node, read)} = {value!r}", node)
    return value


__all__ = ["ALLOWED_FUNCTIONS", "ConstantError", "check_constant", "duckdb_query", "evaluate_constant",
           "literal_value"]
