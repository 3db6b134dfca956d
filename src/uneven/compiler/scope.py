"""Rewrite one SELECT scope that calls measures into CTEs plus a final SELECT.

    WITH <user CTEs>,
         _uv_agg_N  AS (keys, ordinary aggregates, moment sums  GROUP BY keys),
         _uv_ord_M… (ordered pass), _uv_cen_J… (centred pass), _uv_ent_K… (entity pass)
    SELECT <select list, calls replaced by result columns>
    FROM _uv_agg_N LEFT JOIN _uv_ord_M ON keys IS NOT DISTINCT FROM keys …
    WHERE <HAVING>  ORDER BY …  LIMIT …
"""

from __future__ import annotations

from sqlglot import exp

from uneven.catalog.spec import PassKind
from uneven.compiler.bounded import bounded_items, route_bounded
from uneven.compiler.calls import MeasureCall, call_key, is_aggregate, is_measure
from uneven.compiler.context import CompileContext, text
from uneven.compiler.keys import resolve_group_keys, same_key
from uneven.compiler.passes.moment import MainAggregate
from uneven.compiler.passes.registry import PASSES
from uneven.compiler.passes.source import Source, finite_or_null, join_on_keys, key_name, table
from uneven.compiler.plan import PlanScope, apply_rules, describe_pass, plan_passes
from uneven.errors import UnsupportedSqlError
from uneven.sqltree import build as s


def rewrite_scope(select: exp.Select, calls: list[MeasureCall], ctx: CompileContext) -> exp.Select:
    check_scope(select, ctx)
    if ctx.options.method == "bounded":
        route_bounded(select, calls, ctx)
    keys = resolve_group_keys(select, ctx)
    source = Source(select, keys)
    main = MainAggregate(ctx.name("agg"), keys)
    grouped_by = main.name  # the main aggregate's CTE, unless the stream's table is the grouped relation
    pass_ctes, pass_names, results = lower_passes(calls, source, main, ctx)
    direct = main.name != grouped_by  # (lower_passes renamed it: compiler/direct.py)

    replace = _replacer(results, main, keys)
    outputs = output_aliases(select)
    final = exp.Select(expressions=[s.named(replace(p.unalias()), outputs[i])
                                    for i, p in enumerate(select.expressions)])
    if ctx.options.method == "bounded":
        final.set("expressions", bounded_items(select, final.expressions, results, outputs))
    final.from_(table(main.name), copy=False)
    for name in pass_names:
        final.append("joins", join_on_keys(keys, name, left=main.name))
    having = select.args.get("having")
    if having is not None:
        final.set("where", exp.Where(this=replace(_expand_aliases(having.this, select, keys))))
    order = select.args.get("order")
    if order is not None:
        items = [o if _is_output_ref(o.this, outputs) else _expand_aliases(o, select, keys) for o in order.expressions]
        final.set("order", exp.Order(expressions=[replace(o) for o in items]))
    for arg in ("qualify", "distinct"):  # DISTINCT ON (…) reads keys and aliases like QUALIFY
        if select.args.get(arg) is not None:
            final.set(arg, replace(_expand_aliases(select.args[arg], select, keys)))
    for arg in ("limit", "offset"):
        if select.args.get(arg) is not None:
            final.set(arg, select.args[arg].copy())
    check_leftover_columns(final, {main.name, *pass_names}, set(outputs), ctx)

    with_ = select.args.get("with_") or select.args.get("with")
    ctes = [c.copy() for c in with_.expressions] if with_ else []
    if direct and main.columns:  # the planner's check (direct.plain_aggregate) let an aggregate through
        raise AssertionError("the direct form of a streamed scope read an aggregate of the main GROUP BY")
    ctes += ([] if direct else [main.lower(source)]) + pass_ctes
    if ctes:
        final.set("with_", exp.With(expressions=ctes, recursive=with_.args.get("recursive") if with_ else None))
    return final


def lower_passes(calls: list[MeasureCall], source: Source, main: MainAggregate, ctx: CompileContext):
    """Lower every planned pass: (its CTEs, the CTEs the final SELECT joins on the keys, call key →
    result). The CTEs to join are those the results read, other than the main aggregate."""
    ctes, results = [], {}
    scope = PlanScope(source.select, source.keys, ctx.options, ctx.engine)
    for plan in apply_rules(plan_passes(calls), scope):
        lowering = PASSES[plan.kind]
        name = ctx.name(lowering.PREFIX) if lowering.PREFIX else None
        new, res = lowering.lower(source, main, plan, name, ctx.options)
        job = plan.job
        if job is not None:
            ctx.stream_jobs += [job, *job.followers]  # (followers read its table: passes/stream_line.py)
            if plan.direct:  # the stream's table is the grouped relation: keys (and strict guards) read it
                main.name = job.table
        if plan.direct and plan.kind == PassKind.SUMMARY:  # its result CTE is the grouped relation
            main.name = new[-1].alias
        tables = [job.table, *(f.table for f in job.followers)] if job else []
        ctx.chosen.append(describe_pass(plan, tables + [c.alias for c in new] or [main.name]))
        ctes += new
        results.update(res)
    unique = {call.key: call for call in calls}  # a call written twice is one result, wrapped once
    for call in unique.values():
        if call.measure.returns == "double":
            results[call.key] = finite_or_null(results[call.key])
        if call.strict:
            results[call.key] = guard_strict(results[call.key], call, source.keys, main.name)
    names = []
    for expr in results.values():
        for col in expr.find_all(exp.Column):
            if col.table and col.table != main.name and col.table not in names:
                names.append(col.table)
    return ctes, names, results


def guard_strict(value: exp.Expression, call: MeasureCall, keys: list[exp.Expression], main: str) -> exp.Expression:
    """CASE WHEN value IS NULL THEN error('… undefined … for the group k1=…, k2=…') ELSE value END."""
    parts: list[exp.Expression] = [s.lit(f"uneven: {text(call.node)} is undefined (NULL) for ")]
    if not keys:
        parts.append(s.lit("the whole input"))
    for i, key in enumerate(keys):
        shown = exp.Coalesce(this=exp.cast(s.col(key_name(i), main), "varchar"), expressions=[s.lit("NULL")])
        parts += [s.lit(("the group " if i == 0 else ", ") + f"{text(key)}="), shown]
    message = exp.Concat(expressions=parts)
    return s.case(exp.Is(this=value.copy(), expression=exp.Null()), s.raise_error_expr(message), value.copy())


def check_scope(select: exp.Select, ctx: CompileContext) -> None:
    for p in select.expressions:
        if isinstance(p, exp.Star) or (isinstance(p, exp.Column) and isinstance(p.this, exp.Star)):
            raise ctx.error(UnsupportedSqlError, "SELECT * cannot be combined with measure calls; "
                            "list the group keys", p)


def _replacer(results, main: MainAggregate, keys):
    def fn(node: exp.Expression) -> exp.Expression:
        if isinstance(node, exp.Filter) and is_measure(node.this):
            return results[call_key(node.this)].copy()
        if is_measure(node):
            return results[call_key(node)].copy()
        if isinstance(node, exp.Filter) and is_aggregate(node.this):
            return main.add(node.copy(), "_uv_a")
        if is_aggregate(node):
            return main.add(node.copy(), "_uv_a")
        if isinstance(node, (exp.Select, exp.Subquery)):
            return node.copy()  # another scope: left as it is (a new node stops the descent)
        for i, key in enumerate(keys):
            if same_key(node, key):
                return s.col(key_name(i), main.name)
        return node

    return lambda e: e.transform(fn)


def output_aliases(select: exp.Select) -> list[str]:
    names = []
    for p in select.expressions:
        if isinstance(p, exp.Alias):
            names.append(p.alias)
        elif isinstance(p, exp.Column):
            names.append(p.name)
        else:
            names.append(p.sql("duckdb", normalize_functions="lower"))
    return names




def _is_output_ref(node: exp.Expression, outputs: list[str]) -> bool:
    if isinstance(node, exp.Literal) and not node.is_string:
        return True  # ORDER BY position
    return isinstance(node, exp.Column) and not node.table and node.name in outputs


def _expand_aliases(expr: exp.Expression, select: exp.Select, keys) -> exp.Expression:
    """Replace references to select aliases (not also group keys) by the aliased expressions."""
    aliases = {p.alias: p.unalias() for p in select.expressions if isinstance(p, exp.Alias)}

    def fn(node):
        if isinstance(node, (exp.Select, exp.Subquery)):
            return node.copy()  # another scope: its names are its own
        if isinstance(node, exp.Column) and not node.table and node.name in aliases \
                and not any(same_key(node, k) for k in keys):
            return aliases[node.name].copy()
        return node

    return expr.transform(fn)


def check_leftover_columns(final: exp.Select, tables: set[str], outputs: set[str], ctx: CompileContext) -> None:
    """Every column left must come from a pass; others were neither grouped nor aggregated."""
    for arg in ("expressions", "where", "order", "qualify", "distinct"):
        value = final.args.get(arg)
        for part in (value if isinstance(value, list) else [value] if value is not None else []):
            for node in part.walk(prune=lambda n: isinstance(n, (exp.Select, exp.Subquery))):
                if not isinstance(node, exp.Column) or node.table in tables:
                    continue
                if arg == "order" and not node.table and node.name in outputs:
                    continue
                raise ctx.error(UnsupportedSqlError, f"column {text(node)} must appear in GROUP BY or "
                                "be used inside an aggregate or measure", node)
