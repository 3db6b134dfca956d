"""Generic lowering rules for target dialects: small functions ``rule(tree, dialect) -> tree``.

Each rule works on any node of a kind (every ``LN``, every division, every ``error()`` call, every
null-safe join), never on a particular measure, so measures and passes added later are lowered
without dialect code of their own. A dialect module lists the rules it needs, in order
(``compiler/dialects/<name>.py``); ``generate.py`` applies them to the finished tree, which they
may change in place (the compile pipeline hands over a tree it no longer reads; other callers get a
copy).
"""

from __future__ import annotations

from collections.abc import Callable

from sqlglot import exp
from sqlglot.optimizer.annotate_types import annotate_types

from uneven.errors import UnsupportedDialectError
from uneven.sqltree import build as s
from uneven.sqltree.grouping import reads_source_column

Rule = Callable[[exp.Expression, str], exp.Expression]

ZERO = exp.Literal.number(0)


def _is_error_call(node: exp.Expression) -> bool:
    return isinstance(node, exp.Anonymous) and node.name.lower() == "error"


def replace_all(tree: exp.Expression, kind, fn) -> exp.Expression:
    """Apply ``fn`` to every node of ``kind``, children before parents (so a replaced node's
    insides are already lowered); ``fn`` returns the node itself or its replacement."""
    for node in reversed(list(tree.find_all(kind, bfs=False))):
        new = fn(node)
        if new is not node:
            if node is tree:
                tree = new
            else:
                node.replace(new)
    return tree


def _aggregated(e: exp.Expression) -> bool:
    return any(isinstance(n, exp.AggFunc) and not isinstance(n.parent, exp.Window) for n in e.walk())


# --- GROUP BY ALL ----------------------------------------------------------------------------

def expand_group_by_all(tree: exp.Expression, dialect: str) -> exp.Expression:
    """GROUP BY ALL → GROUP BY every select item that holds no aggregate and reads a column (as DuckDB
    reads it: constant items are left out)."""
    for group in list(tree.find_all(exp.Group)):
        if not group.args.get("all"):
            continue
        select = group.parent
        assert select is not None  # a GROUP BY stands in a SELECT
        keys = [p.unalias().copy() for p in select.expressions if not _aggregated(p) and reads_source_column(p)]
        group.set("all", None)
        group.set("expressions", keys)
        if not keys:
            select.set("group", None)
    return tree


# --- NULL ordering in windows ----------------------------------------------------------------

def window_nulls_last_as_key(tree: exp.Expression, dialect: str) -> exp.Expression:
    """``OVER (ORDER BY x NULLS LAST)`` → ``OVER (ORDER BY x IS NULL, x)``, for engines that put
    NULLs first in ascending order and cannot say NULLS LAST in a window (BigQuery). An ascending
    key built without a NULL placement (``exp.Ordered(this=x)``: the bounded pass) means NULLS LAST
    too, as in DuckDB, and sqlglot would write it so."""
    for window in list(tree.find_all(exp.Window)):
        order = window.args.get("order")
        if order is None:
            continue
        items = []
        for o in order.expressions:
            if isinstance(o, exp.Ordered) and not o.args.get("desc") and not o.args.get("nulls_first"):
                items.append(exp.Ordered(this=exp.Is(this=o.this.copy(), expression=exp.Null()), nulls_first=True))
                items.append(exp.Ordered(this=o.this.copy(), nulls_first=True))
            else:
                items.append(o)
        order.set("expressions", items)
    return tree


# --- raising an error inside SQL -------------------------------------------------------------

def raise_with(function: str) -> Rule:
    """``error(message)`` → ``function(message)``, for engines with a raising function of that
    shape (Spark ``raise_error``, Trino ``fail``, a registered ``uneven_raise`` on SQLite)."""

    def rule(tree: exp.Expression, dialect: str) -> exp.Expression:
        return replace_all(tree, exp.Anonymous, lambda n: exp.Anonymous(
            this=function, expressions=[a.copy() for a in n.expressions]) if _is_error_call(n) else n)

    rule.__name__ = f"raise_with_{function}"
    return rule


def raise_by_failed_cast(tree: exp.Expression, dialect: str) -> exp.Expression:
    """For engines with no raising function (PostgreSQL, Snowflake): a failing cast carries the message.

        CASE WHEN c THEN error(m) …     →     CASE WHEN CAST(CASE WHEN c THEN m END AS INTEGER) IS NOT NULL
                                                   THEN NULL …
    When c holds, casting the text m to INTEGER fails and the engine reports m inside its error
    (PostgreSQL: ``invalid input syntax for type integer: "uneven: …"``); otherwise the inner
    CASE is NULL and the next branch is tried. The inner CASE keeps m from being a constant, so a
    planner that folds constants cannot raise it while planning. ``error()`` anywhere else
    cannot be expressed and is refused.
    """
    for case in list(tree.find_all(exp.Case)):
        for branch in case.args.get("ifs") or []:
            then = branch.args.get("true")
            if not _is_error_call(then):
                continue
            message = then.expressions[0].copy()
            failing = exp.cast(s.case(s.paren(branch.this.copy()), message), exp.DataType.build("int"))
            branch.set("this", s.not_null(failing))
            branch.set("true", exp.Null())
    leftover = next((n for n in tree.find_all(exp.Anonymous) if _is_error_call(n)), None)
    if leftover is not None:
        raise UnsupportedDialectError(f"error() outside a CASE branch cannot be expressed in {dialect} "
                                      f"(it has no function that raises): {leftover.sql('duckdb')}")
    return tree


# --- joins on keys that may be NULL ----------------------------------------------------------

def null_safe_join_by_text(tree: exp.Expression, dialect: str) -> exp.Expression:
    """``JOIN … ON a IS NOT DISTINCT FROM b`` → ``ON coalesce(CAST(a AS TEXT), '') =
    coalesce(CAST(b AS TEXT), '') AND (a IS NULL) = (b IS NULL)``: two equalities a hash join
    can use (PostgreSQL plans IS NOT DISTINCT FROM as a nested loop, quadratic in the groups).
    Both sides are the same key expression, so equal keys have equal text; the NULL flag keeps a
    NULL key apart from a key whose text is empty. (A DOUBLE key holding both 0 and −0 in one
    group may print either: then that group's pass results do not join.)"""
    def fn(node):
        if not isinstance(node.find_ancestor(exp.Join), exp.Join):
            return node
        a, b = node.this, node.expression
        text = lambda e: exp.Coalesce(this=exp.cast(e.copy(), exp.DataType.build("text")),  # noqa: E731
                                      expressions=[s.lit("")])
        flag = lambda e: exp.Paren(this=exp.Is(this=e.copy(), expression=exp.Null()))  # noqa: E731
        return exp.Paren(this=s.and_(exp.EQ(this=text(a), expression=text(b)),
                                     exp.EQ(this=flag(a), expression=flag(b))))

    return replace_all(tree, exp.NullSafeEQ, fn)


# --- compound queries ------------------------------------------------------------------------

def _with_of(node: exp.Expression):
    return node.args.get("with_") or node.args.get("with")


def hoist_ctes_from_set_operations(tree: exp.Expression, dialect: str) -> exp.Expression:
    """``(WITH a AS … SELECT …) UNION ALL (WITH b AS … SELECT …)`` → ``WITH a AS …, b AS …
    SELECT … UNION ALL SELECT …``: SQLite takes no parenthesised members in a compound query.
    The CTE names of compiled scopes are distinct (``_uv_…`` counters); a name written twice
    with different bodies is refused."""
    for setop in reversed(list(tree.find_all(exp.SetOperation, bfs=False))):
        hoisted: dict[str, exp.CTE] = {}
        for side in ("this", "expression"):
            member = setop.args.get(side)
            if not isinstance(member, exp.Subquery) or not isinstance(member.this, exp.Select):
                continue
            inner = member.this
            if any(inner.args.get(a) for a in ("order", "limit", "offset")) or member.args.get("alias"):
                continue  # a member with its own ORDER BY / LIMIT stays as written
            with_ = _with_of(inner)
            for cte in (with_.expressions if with_ else []):
                if cte.alias in hoisted and hoisted[cte.alias] != cte:
                    raise UnsupportedDialectError(f"two members of a UNION define CTE {cte.alias} differently; "
                                                  f"{dialect} needs them in one WITH clause: rename one")
                hoisted[cte.alias] = cte.copy()
            bare = inner.copy()
            bare.set("with_", None)
            bare.set("with", None)
            member.replace(bare)
        if hoisted:
            outer = _with_of(setop)
            ctes = list(outer.expressions) if outer else []
            ctes += [c for name, c in hoisted.items() if name not in {x.alias for x in ctes}]
            setop.set("with_", exp.With(expressions=ctes))
    return tree


# --- arithmetic that raises on some engines --------------------------------------------------

def _positive(e):
    return s.case(s.gt(e.copy(), ZERO.copy()), e.copy())


def _number(e) -> float | None:
    if isinstance(e, exp.Cast):
        e = e.this
    neg = isinstance(e, exp.Neg)
    if neg:
        e = e.this
    if isinstance(e, exp.Literal) and not e.is_string:
        return -float(e.this) if neg else float(e.this)
    return None


def guard_math_domain(tree: exp.Expression, dialect: str) -> exp.Expression:
    """Arguments outside a function's domain become NULL instead of raising (PostgreSQL raises on
    ln(0), ln(−1), sqrt(−1), 0 to a negative power and fractional powers of negatives):
    ``LN(e)`` → ``LN(CASE WHEN e > 0 THEN e END)``, likewise SQRT (e ≥ 0) and POWER (base > 0, or
    ≥ 0 for a positive exponent; any base for a whole non-negative exponent)."""
    def fn(node):
        if isinstance(node, (exp.Ln, exp.Log)) and not node.args.get("expression"):
            return node.__class__(this=_positive(node.this))
        if isinstance(node, exp.Sqrt):
            return exp.Sqrt(this=s.case(s.gte(node.this.copy(), ZERO.copy()), node.this.copy()))
        if isinstance(node, exp.Pow):
            k = _number(node.expression)
            if k is not None and k >= 0 and k == int(k):
                return node
            base = node.this
            ok = s.gte(base.copy(), ZERO.copy()) if k is not None and k > 0 else s.gt(base.copy(), ZERO.copy())
            return exp.Pow(this=s.case(ok, base.copy()), expression=node.expression.copy())
        return node

    return replace_all(tree, (exp.Ln, exp.Log, exp.Sqrt, exp.Pow), fn)


def _unparen(e):
    while isinstance(e, exp.Paren):
        e = e.this
    return e


def infinity_by_magnitude(tree: exp.Expression, dialect: str) -> exp.Expression:
    """The row check ``x·0 <> 0`` (NaN or ±inf, passes/source.py ``not_finite``) → ``ABS(x) >
    1.7976931348623157e308`` (above the largest double: ±inf only). SQLite turns NaN into NULL, so
    inf·0 is NULL there and the product test never fires; it has no NaN to find (a NaN stored or
    computed is NULL, skipped like one)."""
    def fn(node):
        product = _unparen(node.this)
        if (isinstance(product, exp.Mul) and _number(_unparen(product.expression)) == 0.0
                and _number(_unparen(node.expression)) == 0.0):
            return s.gt(exp.Abs(this=product.this.copy()), exp.Literal.number("1.7976931348623157e308"))
        return node

    return replace_all(tree, exp.NEQ, fn)


def null_on_division_by_zero(tree: exp.Expression, dialect: str) -> exp.Expression:
    """``a / b`` → ``a / NULLIF(b, 0)``: engines that raise on division by zero (PostgreSQL, Spark
    in ANSI mode) give NULL instead, the undefined result every engine agrees on."""
    def fn(node):
        if not isinstance(node.expression, exp.Nullif):
            node.set("expression", exp.Nullif(this=node.expression.copy(), expression=ZERO.copy()))
        return node

    return replace_all(tree, exp.Div, fn)


def round_through_numeric(tree: exp.Expression, dialect: str) -> exp.Expression:
    """``ROUND(e, n)`` → ``CAST(ROUND(CAST(e AS NUMERIC), n) AS DOUBLE)``: PostgreSQL rounds to n
    digits only a NUMERIC (there is no round(double precision, integer))."""
    def fn(node):
        if node.args.get("decimals") is None:
            return node
        inner = exp.Round(this=exp.cast(node.this.copy(), exp.DataType.build("decimal")),
                          decimals=node.args["decimals"].copy())
        return exp.cast(inner, s.DOUBLE)

    return replace_all(tree, exp.Round, fn)


# --- list and struct results -----------------------------------------------------------------

def structs_as_json(object_function: str, array_function: str, every_array: bool = False) -> Rule:
    """Struct literals → ``object_function('name', value, …)`` and arrays of them (every array when
    ``every_array``: the engine has none) → ``array_function(…)``: JSON where the engine has no
    named structs (PostgreSQL jsonb, SQLite JSON text)."""

    def fn(node):
        if isinstance(node, exp.Struct):
            args = []
            for field in node.expressions:
                if not isinstance(field, (exp.PropertyEQ, exp.Alias)):
                    raise UnsupportedDialectError("a struct field without a name cannot be written as JSON")
                name = field.alias if isinstance(field, exp.Alias) else field.this.name
                value = field.this if isinstance(field, exp.Alias) else field.expression
                args += [s.lit(name), value.copy()]
            return exp.Anonymous(this=object_function, expressions=args)
        if isinstance(node, exp.Array) and (every_array or any(
                isinstance(i, exp.Anonymous) and i.name == object_function for i in node.expressions)):
            return exp.Anonymous(this=array_function, expressions=[i.copy() for i in node.expressions])
        return node

    def rule(tree: exp.Expression, dialect: str) -> exp.Expression:
        return replace_all(tree, (exp.Struct, exp.Array), fn)

    rule.__name__ = f"structs_as_{object_function}"
    return rule


def structs_as_typed_rows(tree: exp.Expression, dialect: str) -> exp.Expression:
    """Struct literals → ``CAST(ROW(v, …) AS ROW(name type, …))`` (Trino names fields only through
    a cast); a field whose type cannot be inferred is refused rather than guessed."""
    def fn(node):
        values, fields = [], []
        for field in node.expressions:
            name = field.alias if isinstance(field, exp.Alias) else field.this.name
            value = (field.this if isinstance(field, exp.Alias) else field.expression).copy()
            kind = annotate_types(exp.select(value.copy())).expressions[0].type
            if kind is None or kind.this in (exp.DataType.Type.UNKNOWN, exp.DataType.Type.NULL):
                raise UnsupportedDialectError(f"the type of struct field {name} cannot be inferred for {dialect}; "
                                              "cast it")
            values.append(value)
            fields.append(exp.ColumnDef(this=exp.to_identifier(name), kind=kind.copy()))
        row_type = exp.DataType(this=exp.DataType.Type.STRUCT, expressions=fields, nested=True)
        return exp.cast(exp.Anonymous(this="ROW", expressions=values), row_type)

    return replace_all(tree, exp.Struct, fn)


# --- constructs an engine lacks --------------------------------------------------------------

def refuse(constructs: dict[type, str]) -> Rule:
    """A check: any node of a listed kind stops the compile with an error naming it and the dialect."""

    def rule(tree: exp.Expression, dialect: str) -> exp.Expression:
        for node in tree.walk():
            for kind, what in constructs.items():
                if isinstance(node, kind):
                    raise UnsupportedDialectError(f"{what} cannot be expressed in {dialect}: "
                                                  f"{node.sql('duckdb')[:80]}")
        return tree

    rule.__name__ = "refuse_" + "_".join(k.__name__.lower() for k in constructs)
    return rule


# the bootstrap's uniform draws: uneven_uniform(parts…) → the engine's 64-bit hash scaled to [0, 1)
UNIFORM = "uneven_uniform"
_TWO_63, _TWO_64 = 9223372036854775808.0, 18446744073709551616.0


def _uniform_calls(tree: exp.Expression, fn) -> exp.Expression:
    def visit(node):
        if isinstance(node, exp.Anonymous) and str(node.this).lower() == UNIFORM:
            return fn([a.copy() for a in node.expressions])
        return node
    # most queries draw nothing: one search for a draw is cheaper than a transform of every node
    if not any(isinstance(n, exp.Anonymous) and str(n.this).lower() == UNIFORM for n in s.nodes(tree)):
        return tree
    return tree.transform(visit, copy=False)  # the rules own the tree (generate.py)


def uniform_from_hash(function: str, signed: bool, as_text: bool = False) -> Rule:
    """``uneven_uniform(a, b, …)`` → hash/2^64 (unsigned hash, DuckDB ``hash``) or (hash + 2^63)/2^64
    (signed 64-bit hash: Spark ``xxhash64``, SQLite's registered ``uneven_hash``). ``as_text``: the
    hash takes one text and a seed (PostgreSQL ``hashtextextended(text, 0)``): the parts are joined
    with '|' as text. Draws therefore differ between engines (each is reproducible on its own)."""

    def build(parts):
        if as_text:
            texts = [exp.Cast(this=p, to=exp.DataType.build("text")) for p in parts]
            joined = exp.Anonymous(this="concat_ws", expressions=[exp.Literal.string("|")] + texts)
            h = exp.Anonymous(this=function, expressions=[joined, exp.Literal.number(0)])
        else:
            h = exp.Anonymous(this=function, expressions=parts)
        value = s.cast_double(h)
        if signed:
            value = s.add(value, s.lit(_TWO_63))
        return s.div(s.paren(value), s.lit(_TWO_64))

    def rule(tree: exp.Expression, dialect: str) -> exp.Expression:
        return _uniform_calls(tree, build)
    return rule


def uniform_refused(tree: exp.Expression, dialect: str) -> exp.Expression:
    def fail(parts):
        raise UnsupportedDialectError(
            f"the bootstrap forms (<measure>_boot_se/_lo/_hi) are not offered for {dialect}: no hash "
            f"function is mapped for its replicate draws; use the linearized forms (<measure>_se)")
    return _uniform_calls(tree, fail)


def values_columns_by_position(tree: exp.Expression, dialect: str) -> exp.Expression:
    """``(VALUES …) AS t(a, b)`` → ``(SELECT column1 AS a, column2 AS b FROM (VALUES …)) AS t``: for
    engines that name VALUES columns column1, column2 … and take no column list in a table alias
    (SQLite)."""
    def fn(node):
        alias = node.args.get("alias") if isinstance(node, exp.Values) else None
        if alias is None or not alias.columns:
            return node
        bare = exp.Values(expressions=[e.copy() for e in node.expressions])
        cols = [exp.alias_(exp.column(f"column{i}"), c.copy()) for i, c in enumerate(alias.columns, start=1)]
        select = exp.Select(expressions=cols).from_(exp.Subquery(this=bare), copy=False)
        return exp.Subquery(this=select, alias=exp.TableAlias(this=alias.this.copy()))
    return tree.transform(fn, copy=False)
