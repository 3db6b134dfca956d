"""Every clause of a scope that calls measures is carried with its meaning or refused by name.

One table per node kind sqlglot parses (``SELECT_ARGS``, ``TABLE_ARGS``, ``JOIN_ARGS``, the join
kinds, sides and methods): the compiler consults it (``check_clauses``), and
tests/test_clauses.py fails when sqlglot adds an argument that is not listed here. The states:

* ``carried``: the compiled SQL keeps the clause with its meaning (the final SELECT takes it, or
  every pass reads it as part of the scope's rows);
* ``source``: part of the rows a scope aggregates; copied as written into every pass, and, when it
  is random or volatile (``is_volatile_source``), evaluated once in a MATERIALIZED CTE that every
  pass reads (compiler/materialize.py);
* a message: refused with ``UnsupportedSqlError`` naming the construct.

Dialect-bound constructs (ASOF / POSITIONAL / SEMI / ANTI joins, sampling methods) are carried to
the engines that know them and refused for the others (``DIALECT_ONLY``).
"""

from __future__ import annotations

from sqlglot import exp

from uneven.compiler.context import CompileContext, span
from uneven.errors import UnsupportedSqlError
from uneven.sqltree import build as s
from uneven.sqltree.volatile import is_order_dependent, is_volatile_call

CARRIED = "carried"
SOURCE = "source"

SELECT_ARGS: dict[str, str] = {
    "with_": CARRIED,  # the scope's own CTEs come first in the compiled WITH
    "kind": "SELECT AS STRUCT / SELECT AS VALUE",
    "expressions": CARRIED,
    "hint": "an optimizer hint (/*+ … */)",
    "distinct": CARRIED,  # DISTINCT and DISTINCT ON over the output rows (keys replaced)
    "into": "SELECT … INTO (create the table from the query instead)",
    "from_": SOURCE,
    "operation_modifiers": "a SELECT modifier (HIGH_PRIORITY, SQL_NO_CACHE, …)",
    "exclude": "SELECT * EXCLUDE",
    "match": "MATCH_RECOGNIZE",
    "laterals": "LATERAL VIEW (use a join with UNNEST in a subquery first)",
    "joins": SOURCE,
    "connect": "CONNECT BY / START WITH",
    "pivots": "PIVOT / UNPIVOT after the FROM list (pivot the table in a subquery first)",
    "prewhere": "PREWHERE (use WHERE)",
    "where": SOURCE,
    "group": CARRIED,  # ROLLUP / CUBE / GROUPING SETS / WITH TOTALS refused in keys.py
    "having": CARRIED,
    "qualify": CARRIED,
    "windows": "a WINDOW clause (named windows; write the window in OVER (…))",
    "distribute": "DISTRIBUTE BY",
    "sort": "SORT BY",
    "cluster": "CLUSTER BY",
    "order": CARRIED,
    "limit": CARRIED,
    "offset": CARRIED,
    "locks": "FOR UPDATE / FOR SHARE",
    "sample": SOURCE,  # USING SAMPLE: random, so the sampled rows are materialized once
    "settings": "SETTINGS",
    "format": "FORMAT",
    "options": "OPTION (…) query hints",
    "for_": "FOR XML / FOR JSON",
}

FROM_ARGS: dict[str, str] = {"this": SOURCE}

GROUPINGS = "GROUP BY ROLLUP / CUBE / GROUPING SETS (use one query per grouping)"
GROUP_ARGS: dict[str, str] = {
    "expressions": CARRIED,  # expressions, positions, select aliases (keys.py)
    "all": CARRIED,  # GROUP BY ALL, expanded by keys.py
    "grouping_sets": GROUPINGS,
    "cube": GROUPINGS,
    "rollup": GROUPINGS,
    "totals": "GROUP BY … WITH TOTALS",
}

# a table (or table function) among the scope's sources
TABLE_ARGS: dict[str, str] = {
    "this": SOURCE,
    "alias": SOURCE,
    "db": SOURCE,
    "catalog": SOURCE,
    "laterals": "a LATERAL VIEW on a table",
    "joins": SOURCE,
    "pivots": SOURCE,  # PIVOT / UNPIVOT on a table: a deterministic function of the table
    "hints": "a table hint (WITH (NOLOCK), FORCE INDEX, …)",
    "system_time": "a time-travel clause (FOR SYSTEM_TIME / AS OF)",
    "version": "a time-travel clause (FOR SYSTEM_TIME / AS OF)",
    "format": "a staged file format",
    "pattern": "a staged file pattern",
    "ordinality": SOURCE,
    "when": "a time-travel clause (AT / BEFORE)",
    "only": "FROM ONLY",
    "partition": "a PARTITION selection on a table",
    "changes": "CHANGES (change tracking)",
    "rows_from": "ROWS FROM (…)",
    "sample": SOURCE,  # TABLESAMPLE: random, so the sampled rows are materialized once
    "indexed": "INDEXED BY",
}

JOIN_ARGS: dict[str, str] = {
    "this": SOURCE,
    "on": SOURCE,
    "side": SOURCE,  # checked against JOIN_SIDES
    "kind": SOURCE,  # checked against JOIN_KINDS
    "using": SOURCE,
    "method": SOURCE,  # checked against JOIN_METHODS
    "global_": "GLOBAL JOIN",
    "hint": "a join hint",
    "match_condition": "ASOF JOIN … MATCH_CONDITION",
    "nearest": "a NEAREST join",
    "directed": "a DIRECTED join",
    "expressions": "a join with column list",
    "pivots": "PIVOT / UNPIVOT after a join (pivot in a subquery first)",
}

# values of Join.kind / side / method: carried everywhere, or only on the named target dialects
JoinState = str | tuple[str, ...]  # CARRIED, the dialects that carry it, or the words refusing it
JOIN_KINDS: dict[str, JoinState] = {"": CARRIED, "INNER": CARRIED, "OUTER": CARRIED, "CROSS": CARRIED,
              "SEMI": ("duckdb", "spark"), "ANTI": ("duckdb", "spark"),
              "STRAIGHT_JOIN": "STRAIGHT_JOIN", "ARRAY": "ARRAY JOIN", "ALL": "ALL JOIN", "ANY": "ANY JOIN",
              "ASOF": "ASOF JOIN written as a join kind", "PASTE": "PASTE JOIN"}
JOIN_SIDES: dict[str, JoinState] = {"": CARRIED, "LEFT": CARRIED, "RIGHT": CARRIED, "FULL": CARRIED}
JOIN_METHODS: dict[str, JoinState] = {"": CARRIED, "NATURAL": CARRIED, "ASOF": ("duckdb",), "POSITIONAL": ("duckdb",)}

# sampling of the rows (TABLESAMPLE / USING SAMPLE): the targets that take each method, by percent
# or by row count. DuckDB takes them all; PostgreSQL's built-in methods are SYSTEM and BERNOULLI,
# by percent only; SQLite has no sampling; the other targets are refused because they cannot
# evaluate a random source once (see MATERIALIZING).
SAMPLE_METHODS: dict[str, dict[str, tuple[str, ...]]] = {
    "duckdb": {"SYSTEM": ("percent", "rows"), "BERNOULLI": ("percent",), "RESERVOIR": ("percent", "rows")},
    "postgres": {"SYSTEM": ("percent",), "BERNOULLI": ("percent",)},
}

# targets that honour WITH … AS MATERIALIZED (…) (DuckDB; PostgreSQL ≥ 12; SQLite ≥ 3.35 — versions
# from memory; tests/test_clauses.py checks each executed engine reads the rows once): a random or
# volatile source is evaluated once there. Spark inlines every CTE (the keyword is not in its
# grammar); Trino, BigQuery and Snowflake do not promise one evaluation either.
MATERIALIZING = ("duckdb", "postgres", "sqlite")



def refuse(ctx: CompileContext, what: str, node: exp.Expression) -> UnsupportedSqlError:
    """The error naming the construct, at its position (or, when sqlglot kept none for it, at the
    nearest enclosing node that has one)."""
    while span(node)[0] is None and node.parent is not None:
        node = s.node(node.parent)
    return ctx.error(UnsupportedSqlError, f"{what} cannot be combined with measure calls", node)


def _present(value) -> bool:
    return value not in (None, False, [], "")


def check_clauses(select: exp.Select, ctx: CompileContext) -> None:
    """Raise UnsupportedSqlError for the first clause of the scope, its sources or their joins that is
    refused (for the target dialect)."""
    for key, value in select.args.items():
        if not _present(value):
            continue
        state = SELECT_ARGS.get(key, f"the clause {key!r}")
        if state not in (CARRIED, SOURCE):
            raise refuse(ctx, state, value[0] if isinstance(value, list) else value
                         if isinstance(value, exp.Expression) else select)
    group = select.args.get("group")
    if group is not None:
        _check_args(group, GROUP_ARGS, ctx)
        for e in group.expressions:
            if isinstance(e, (exp.Rollup, exp.Cube, exp.GroupingSets)):
                raise refuse(ctx, GROUPINGS, e)
    sample = select.args.get("sample")
    if sample is not None:
        check_sample(sample, ctx)
    for part in sources(select):
        for node in part.walk():
            if isinstance(node, exp.Table):
                _check_args(node, TABLE_ARGS, ctx)
                if node.args.get("sample") is not None:
                    check_sample(node.args["sample"], ctx)
            elif isinstance(node, exp.Join):
                _check_args(node, JOIN_ARGS, ctx)
                check_join(node, ctx)
            elif isinstance(node, exp.TableSample):
                check_sample(node, ctx)


def sources(select: exp.Select) -> list[exp.Expression]:
    """The parts of a SELECT that give its rows: FROM, joins, laterals."""
    out = []
    if select.args.get("from_") is not None:
        out.append(select.args["from_"])
    out += select.args.get("joins") or []
    out += select.args.get("laterals") or []
    return out


def _check_args(node: exp.Expression, table: dict[str, str], ctx: CompileContext) -> None:
    for key, value in node.args.items():
        if not _present(value):
            continue
        state = table.get(key, f"the {type(node).__name__} argument {key!r}")
        if state not in (CARRIED, SOURCE):
            raise refuse(ctx, state, node)


def join_word(node: exp.Join) -> str:
    return " ".join(p for p in (node.method, node.side, node.kind) if p) + " JOIN"


def check_join(node: exp.Join, ctx: CompileContext) -> None:
    for value, table in ((node.kind, JOIN_KINDS), (node.side, JOIN_SIDES), (node.method, JOIN_METHODS)):
        state = table.get((value or "").upper(), f"a {value} join")
        if state == CARRIED:
            continue
        if isinstance(state, tuple):
            if ctx.options.dialect in state:
                continue
            raise ctx.error(UnsupportedSqlError, f"{join_word(node)} cannot be compiled for {ctx.options.dialect} "
                            f"(only for {', '.join(state)})", node)
        raise refuse(ctx, state, node)


def sample_size_kind(sample: exp.TableSample) -> str:
    if sample.args.get("percent") is not None:
        return "percent"
    if sample.args.get("rows") is not None or sample.args.get("size") is not None:
        return "rows"
    return "other"


def check_sample(sample: exp.TableSample, ctx: CompileContext) -> None:
    """A sample is carried with its method, size and seed where the target has that method."""
    if any(_present(sample.args.get(k)) for k in ("bucket_numerator", "bucket_denominator", "bucket_field")):
        raise refuse(ctx, "TABLESAMPLE (BUCKET …)", sample)
    method = (sample.args["method"].name if sample.args.get("method") is not None else "SYSTEM").upper()
    kind = sample_size_kind(sample)
    methods = SAMPLE_METHODS.get(ctx.options.dialect)
    if methods is None:
        raise ctx.error(UnsupportedSqlError, f"a sampled source (TABLESAMPLE / USING SAMPLE) cannot be compiled "
                        f"for {ctx.options.dialect}: it must be evaluated once for every measure, which the compiler "
                        f"can promise on {', '.join(m for m in SAMPLE_METHODS)} only", sample)
    if kind not in methods.get(method, ()):
        raise ctx.error(UnsupportedSqlError, f"sampling {method} by {kind} cannot be compiled for "
                        f"{ctx.options.dialect} "
                        f"(it takes: {', '.join(f'{m} by ' + ' or '.join(k) for m, k in methods.items())})",
                        sample)


def volatile_reason(select: exp.Select) -> exp.Expression | None:
    """The first node that makes the scope's rows differ between two evaluations, or None: a sample,
    a volatile function in the sources or WHERE, LIMIT / OFFSET / DISTINCT ON / a sample inside a
    source subquery (which rows they keep is up to the engine), a construct that depends on the
    order rows are read in (sqltree.volatile.is_order_dependent: row_number() OVER (), any_value,
    first/last or list/string aggregates without ORDER BY), or any of these in the body of a CTE the
    sources read."""
    if select.args.get("sample") is not None:
        return select.args["sample"]
    parts = sources(select)
    if select.args.get("where") is not None:
        parts.append(select.args["where"])
    return _volatile_in(parts, _visible_ctes(select), set())


def _volatile_in(parts, ctes: dict[str, exp.Expression], seen: set[str]) -> exp.Expression | None:
    for part in parts:
        for node in part.walk():
            if isinstance(node, exp.TableSample) or is_volatile_call(node) or is_order_dependent(node):
                return node
            if isinstance(node, (exp.Select, exp.Subquery, exp.SetOperation, exp.Values)) and node is not part:
                for arg in ("limit", "offset", "sample"):
                    if node.args.get(arg) is not None:
                        return node.args[arg]
                distinct = node.args.get("distinct")
                if isinstance(distinct, exp.Distinct) and distinct.args.get("on") is not None:
                    return distinct
            if isinstance(node, exp.Table) and not node.db and node.name.lower() in ctes \
                    and node.name.lower() not in seen:
                name = node.name.lower()
                found = _volatile_in([ctes[name]], ctes, seen | {name})
                if found is not None:
                    return found
    return None


def _visible_ctes(select: exp.Select) -> dict[str, exp.Expression]:
    """CTE name → body for every WITH on the way from the scope up to the statement."""
    out: dict[str, exp.Expression] = {}
    node: exp.Expr | None = select
    while node is not None:
        with_ = node.args.get("with_") if isinstance(node, exp.Expression) else None
        for cte in (with_.expressions if with_ is not None else []):
            out.setdefault(cte.alias_or_name.lower(), cte.this)
        node = node.parent
    return out


def volatile_outside_sources(select: exp.Select) -> exp.Expression | None:
    """A volatile function inside a measure call (its arguments or its FILTER) or in a GROUP BY key:
    the measure's pass, or each pass for a key, would evaluate it anew, so a measure and count(*)
    would not see the same values. (One inside an ordinary aggregate is evaluated by the main
    aggregate alone, and one outside any aggregate or in ORDER BY by the final SELECT: carried.)"""
    from uneven.compiler.calls import is_measure

    for arg in ("expressions", "group", "having", "qualify", "order", "distinct"):
        value = _group_keys(select) if arg == "group" else select.args.get(arg)
        for part in (value if isinstance(value, list) else [value] if value is not None else []):
            for node in part.walk():
                if not is_volatile_call(node):
                    continue
                if arg == "group":
                    return s.node(node)
                anc = node.parent
                while anc is not None and anc is not select:
                    if is_measure(anc) or (isinstance(anc, exp.Filter) and is_measure(anc.this)):
                        return s.node(node)
                    anc = anc.parent
    return None


def _group_keys(select: exp.Select) -> list[exp.Expression]:
    """The GROUP BY items with a position or a select alias read as the select item it names, and
    GROUP BY ALL as the select items outside any aggregate or measure call (an alias that is also a
    column of the sources counts as the alias here: a volatile key is refused rather than missed)."""
    from uneven.compiler.calls import is_measure

    group = select.args.get("group")
    if group is None:
        return []
    items = [i.this if isinstance(i, exp.Alias) else i for i in select.expressions]
    if group.args.get("all"):
        return [i for i in items if not any(isinstance(n, exp.AggFunc) or is_measure(n) for n in i.walk())]
    aliases = {i.alias.lower(): i.this for i in select.expressions if isinstance(i, exp.Alias)}
    keys = []
    for key in group.expressions:
        if isinstance(key, exp.Literal) and not key.is_string and key.this.isdigit() \
                and 1 <= int(key.this) <= len(items):
            keys.append(items[int(key.this) - 1])
        elif isinstance(key, exp.Column) and not key.table and key.name.lower() in aliases:
            keys.append(aliases[key.name.lower()])
        else:
            keys.append(key)
    return keys
