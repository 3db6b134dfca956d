"""The compile pipeline: parse → find calls → rewrite every scope (innermost first) → generate."""

from __future__ import annotations

from dataclasses import replace

from sqlglot import exp

from uneven.bounds import bins
from uneven.compiler.bounded import check_method
from uneven.compiler.calls import check_position, find_calls, read_call
from uneven.compiler.clauses import check_clauses, volatile_outside_sources
from uneven.compiler.context import CompileContext, CompileOptions, EngineSchema, span, text
from uneven.compiler.generate import check_dialect, check_read_dialect, generate
from uneven.compiler.materialize import materialize_scope
from uneven.compiler.parse import parse_one_statement
from uneven.compiler.passes.stream_checks import unchecked
from uneven.compiler.plan import ORDERED_PLANS, TIE_GROUPING
from uneven.compiler.scalars import expand_scalars
from uneven.compiler.scope import rewrite_scope
from uneven.compiler.types import check_argument_types
from uneven.errors import MeasureUsageError, UnsupportedSqlError


def _depth(node: exp.Expr) -> int:
    d = 0
    while node.parent is not None:
        node, d = node.parent, d + 1
    return d


def _check_not_correlated(select: exp.Select, calls, ctx: CompileContext) -> None:
    """A scope inside an expression (scalar or IN subquery) must not use columns of outer scopes."""
    parent = select.parent
    if not isinstance(parent, exp.Subquery) or isinstance(parent.parent, (exp.From, exp.Join)):
        return  # a source (FROM, JOIN, CTE body) is evaluated on its own
    visible = {t.alias_or_name for t in select.find_all(exp.Table)}
    for col in select.find_all(exp.Column):
        if col.table and col.table not in visible:
            raise ctx.error(MeasureUsageError, f"{calls[0].measure.name}() is in a correlated subquery "
                            f"(it uses {text(col)} of an outer query); join instead", calls[0].node,
                            calls[0].measure.name)


def prepare_scope(select: exp.Select, nodes: list, ctx: CompileContext) -> None:
    """Refuse the clauses the compiler cannot carry (clauses.py), and read a random or volatile source
    once (materialize.py), before the calls' arguments are read."""
    check_clauses(select, ctx)
    volatile = volatile_outside_sources(select)
    if volatile is not None:
        for node in nodes:  # a call's own argument error comes first (ge(x, 1 + random()): not a constant)
            read_call(node, ctx)
        raise ctx.error(UnsupportedSqlError, f"{text(volatile)} inside an aggregate, a measure call or a group "
                        "key would be evaluated anew by each pass of the compiled query; compute it in a "
                        f"subquery in FROM (SELECT …, {text(volatile)} AS r FROM …): the compiler then "
                        "evaluates it once", volatile)
    materialize_scope(select, ctx)


def compile_tree(tree: exp.Expression, ctx: CompileContext) -> exp.Expression:
    """Rewrite every SELECT scope that calls measures; a tree without calls comes back unchanged."""
    scopes: dict[int, tuple[exp.Select, list]] = {}
    tree = expand_scalars(tree, ctx)  # equivalised(…) → arithmetic, in every clause (scalars.py)
    nodes = find_calls(tree)
    selects = [check_position(node, ctx) for node in nodes]  # where calls stand, before their arguments
    for select in {id(sel): sel for sel in selects}.values():
        prepare_scope(select, [n for n, sel in zip(nodes, selects) if sel is select], ctx)
    for node, select in zip(nodes, selects):
        scopes.setdefault(id(select), (select, []))[1].append(read_call(node, ctx))
    # innermost scopes first; among equals, in the order they are written
    order = sorted(scopes.values(), key=lambda sc: (-_depth(sc[0]), span(sc[1][0].node)[0] or 0))
    for select, calls in order:
        _check_not_correlated(select, calls, ctx)
    for select, calls in order:
        check_argument_types(select, calls, ctx)
        new = rewrite_scope(select, calls, ctx)
        if select is tree:
            tree = new
        elif isinstance(select.parent, exp.SetOperation):
            select.replace(exp.Subquery(this=new))
        else:
            select.replace(new)
    return tree


DEFAULT_OPTIONS = CompileOptions()  # frozen: one shared default is safe


def compile_sql(sql: str, options: CompileOptions = DEFAULT_OPTIONS, engine: EngineSchema | None = None) -> str:
    """Compile SQL text with measure calls into plain SQL for ``options.dialect`` (the options:
    context.CompileOptions). ``engine`` (context.EngineSchema) may tell the columns a SELECT's FROM
    provides (keys.py), the types of measure arguments (types.py) and how often an ordered pass's
    values tie (plan.py); without it the compiler decides from the SQL alone."""
    return compile_with_context(sql, options, engine)[0]


def compile_with_context(sql: str, options: CompileOptions = DEFAULT_OPTIONS,
                         engine: EngineSchema | None = None) -> tuple[str, CompileContext]:
    """``compile_sql`` and its context: the passes chosen (``chosen``, plan.describe_pass, innermost
    scope first) and the sources read once (``read_once``), for explain."""
    options = check_options(options)
    ctx = CompileContext(sql=sql, options=options, engine=engine)
    tree = compile_tree(parse_one_statement(sql, options.read), ctx)
    for job in ctx.stream_jobs:  # the streamed passes' queries, run by engine/stream.py before the query
        job.rows_sql = generate(job.rows, "duckdb", pretty=False)
        job.totals_sql = generate(job.totals, "duckdb", pretty=False) if job.totals is not None else ""
        job.fast_rows_sql = generate(unchecked(job.rows), "duckdb", pretty=False)  # (checks in numpy)
        job.fast_totals_sql = generate(unchecked(job.totals), "duckdb", pretty=False) if job.totals is not None else ""
    return generate(tree, options.dialect, pretty=options.pretty, copy=False), ctx  # the tree is this compile's own


def check_options(options: CompileOptions) -> CompileOptions:
    """The options checked, the default resolution filled in: a clear error for a bad value."""
    check_dialect(options.dialect)
    check_tie_grouping(options.tie_grouping)
    check_ordered(options.ordered)
    check_read_dialect(options.read)
    method = check_method(options.method)
    resolution = bins.check_resolution(bins.DEFAULT_RESOLUTION if options.resolution is None else options.resolution)
    return replace(options, method=method, resolution=resolution)


def check_tie_grouping(value) -> None:
    if value not in TIE_GROUPING:
        raise MeasureUsageError(f"tie_grouping must be one of {', '.join(TIE_GROUPING)}, got {value!r}")


def check_ordered(value) -> None:
    if value not in ORDERED_PLANS:
        raise MeasureUsageError(f"ordered must be one of {', '.join(ORDERED_PLANS)}, got {value!r}")
