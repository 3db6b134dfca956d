"""Evaluate a random or volatile source once: its rows go to a MATERIALIZED CTE that every pass reads.

A scope's passes (main aggregate, ordered pass, entity, centred …) each rebuild the scope's FROM,
joins and WHERE. For a sample (``USING SAMPLE`` / ``TABLESAMPLE``) or a source with ``random()``
each rebuild would draw anew, and ``count(*)`` and ``gini(x)`` of one row would come from different
rows. ``materialize_scope`` rewrites the scope in place, before its calls are read:

    WITH …, _uv_src_N AS MATERIALIZED (SELECT <every column the scope reads> …
                                        FROM <FROM, joins> WHERE <WHERE> [USING SAMPLE …])
    SELECT <the same items> FROM _uv_src_N GROUP BY <resolved keys> …

Output names are kept (an item without an alias gets the name it had). Targets that do not honour
MATERIALIZED (clauses.MATERIALIZING) are refused.
"""

from __future__ import annotations

from sqlglot import exp

from uneven.compiler import clauses
from uneven.compiler.context import CompileContext, text
from uneven.compiler.keys import resolve_group_keys
from uneven.compiler.scope import output_aliases
from uneven.errors import UnsupportedSqlError
from uneven.sqltree import build as s
from uneven.sqltree.build import cte, table
from uneven.sqltree.grouping import scope_columns
from uneven.sqltree.volatile import is_order_dependent, is_volatile_call

_SCOPE_PARTS = ("expressions", "group", "having", "qualify", "order", "distinct")


def materialize_scope(select: exp.Select, ctx: CompileContext) -> bool:
    """Rewrite a scope whose rows are random or volatile to read them once; True when it did."""
    reason = clauses.volatile_reason(select)
    if reason is None:
        return False
    if ctx.options.dialect not in clauses.MATERIALIZING:
        raise ctx.error(UnsupportedSqlError, f"the rows of this query must be read once for every measure "
                        f"({why_read_once(reason)}: {text(reason)}), which {ctx.options.dialect} cannot "
                        "promise (it may "
                        "evaluate a CTE again for each use); compile for "
                        f"{', '.join(clauses.MATERIALIZING)}, or store the rows in a table first", reason)
    name = ctx.name("src")
    ctx.read_once.append({"cte": name, "why": why_read_once(reason), "clause": text(reason)})
    aliases = output_aliases(select)  # the names the final SELECT gives its columns
    keys = resolve_group_keys(select, ctx)  # before the rewrite: source_columns reads the original FROM
    group = select.args.get("group")
    if group is not None:
        select.set("group", exp.Group(expressions=keys))
    for item, out in zip(list(select.expressions), aliases):
        if not isinstance(item, exp.Alias):  # the item itself moves under the alias: the measure
            named = exp.Alias(alias=exp.to_identifier(out, quoted=True))  # calls found stay in the tree
            item.replace(named)
            named.set("this", item)
    outputs = {a.lower() for a in aliases}
    visible = _source_names(select)
    _check_no_outer_reads(select, visible, ctx)

    # the CTE keeps each column under the name the scope reads it by: an unqualified x stays x (so
    # messages and output names read as written), a qualified t.x becomes the column "t.x"
    seen: set[tuple[str, bool]] = set()
    projections: list[exp.Expression] = []
    for arg, part in _scope_parts(select):
        for col in list(scope_columns(part)):
            if not col.table and arg in ("having", "qualify", "order") and col.name.lower() in outputs:
                continue  # a reference to an output column, resolved by the final SELECT
            kept = f"{col.table}.{col.name}" if col.table else col.name
            quoted = bool(col.table) or col.this.quoted
            k = (kept if quoted else kept.lower(), quoted)
            if k not in seen:
                seen.add(k)
                projections.append(s.node(exp.alias_(col.copy(), exp.to_identifier(kept, quoted=quoted))))
            if col.table:
                col.replace(exp.column(exp.to_identifier(kept, quoted=True)))
    if not projections:
        projections.append(s.alias(exp.Literal.number(1), "_uv_c0"))

    body = exp.Select(expressions=projections)
    for arg in ("from_", "joins", "laterals", "where", "sample"):
        value = select.args.get(arg)
        if value:
            body.set(arg, value)
            select.set(arg, None)
    _place_sample(body, ctx)
    select.set("from_", exp.From(this=table(name)))
    materialized = cte(body, name)
    materialized.set("materialized", True)
    with_ = select.args.get("with_")
    if with_ is None:
        select.set("with_", exp.With(expressions=[materialized]))
    else:
        with_.append("expressions", materialized)
    return True


def why_read_once(reason: exp.Expression) -> str:
    """What makes two reads of the rows differ, in words, for the node volatile_reason found."""
    if isinstance(reason, exp.TableSample):
        return "the rows are sampled"
    if is_volatile_call(reason):
        return "a volatile function gives new values on each read"
    if is_order_dependent(reason):
        return "a value depends on the order the engine reads rows in"
    if isinstance(reason, exp.Distinct):
        return "DISTINCT ON keeps a row of the engine's choosing"
    return "LIMIT / OFFSET in a source keeps rows of the engine's choosing"


def _scope_parts(select: exp.Select):
    """(clause, expression) for every expression of the scope's own clauses (select list, GROUP BY …)."""
    for arg in _SCOPE_PARTS:
        value = select.args.get(arg)
        for part in (value if isinstance(value, list) else [value] if value is not None else []):
            yield arg, part


def _source_names(select: exp.Select) -> set[str]:
    names = set()
    for part in clauses.sources(select):
        for node in part.find_all(exp.Table, exp.Subquery, exp.Values, exp.Lateral, exp.Unnest):
            if node.alias_or_name:
                names.add(node.alias_or_name.lower())
    return names


def _check_no_outer_reads(select: exp.Select, visible: set[str], ctx: CompileContext) -> None:
    """A subquery in the select list, HAVING … that reads a column of the scope's sources by its table
    name would lose it once the sources move to the CTE."""
    for _, part in _scope_parts(select):
        for sub in part.find_all(exp.Select):
            inner = {t.alias_or_name.lower() for t in sub.find_all(exp.Table)}
            for col in sub.find_all(exp.Column):
                if col.table and col.table.lower() in visible and col.table.lower() not in inner:
                    raise ctx.error(UnsupportedSqlError, "a subquery that reads a column of a sampled or "
                                    f"volatile source ({text(col)}) cannot be combined with measure "
                                    "calls; join its result instead", col)


def _place_sample(body: exp.Select, ctx: CompileContext) -> None:
    """DuckDB's USING SAMPLE samples the FROM clause's rows before WHERE. Elsewhere only a table can be
    sampled: over a single table without joins the two are the same sample; over joins, refused."""
    sample = body.args.get("sample")
    if sample is None or ctx.options.dialect == "duckdb":
        return
    source = body.args["from_"].this
    if body.args.get("joins") or not isinstance(source, exp.Table) or source.args.get("sample") is not None:
        raise ctx.error(UnsupportedSqlError, f"USING SAMPLE over joins or a subquery cannot be compiled for "
                        f"{ctx.options.dialect}; sample one table with TABLESAMPLE", sample)
    body.set("sample", None)
    source.set("sample", sample)
