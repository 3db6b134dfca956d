"""Table forms: ``gini_by(source, value, weight, keys)`` runs the compiler's window plan in DuckDB.

    SELECT * FROM gini_by('households', 'income', 'weight', ['region', 'year'])

``source`` names a table or view (DuckDB ``query_table``; a query can be given as a view), ``value``
and ``weight`` are column names (``weight`` NULL: unweighted; for hhi/cr the trailing argument is
the entity column, NULL: each row its own entity) and ``keys`` a non-empty list of column names.
The body is the plan ``uneven.compile`` emits for ``SELECT keys, gini(value, weight) … GROUP BY
keys``: sorts and windows partitioned by the keys, which DuckDB spills to disk, so memory stays
bounded however large a group is. One row per group: the key columns, then the measure.
"""

from __future__ import annotations

import dataclasses

from sqlglot import exp

from uneven.catalog.spec import Measure
from uneven.compiler.calls import MeasureCall
from uneven.compiler.context import CompileContext
from uneven.compiler.scope import rewrite_scope
from uneven.duckdb_functions import lists as L
from uneven.duckdb_functions.aggregate import checked_numeric, param_checks
from uneven.duckdb_functions.symbolic import explore_build
from uneven.sqltree import build as s

KEY, X, T, RESULT = "_uv_key", "_uv_x", "_uv_t", "_uv_result"


def _named_column(name_arg: exp.Expression) -> exp.Expression:
    """COLUMNS(lambda c: c = <name>): the one column whose name is the macro argument."""
    return exp.Columns(this=L.lam(["c"], exp.EQ(this=L.var("c"), expression=name_arg)))


def _rows(measure: Measure, fn: str) -> exp.Select:
    """The rows to aggregate: the key columns as one struct, the checked value and weight/entity.

    The columns are picked by name in an inner SELECT (one COLUMNS per expression, as DuckDB
    requires), and checked in the outer one."""
    name = measure.trailing
    assert name is not None  # every measure of the catalog takes a weight or an entity column
    keys = exp.Columns(this=L.lam(["c"], L.call("list_contains", L.var("keys"), L.var("c"))), unpack=True)
    other = exp.Coalesce(this=L.var(name), expressions=[L.var("value")])
    picked = exp.Select(expressions=[s.alias(L.call("struct_pack", keys), KEY),
                                     s.alias(_named_column(L.var("value")), "_uv_v0"),
                                     s.alias(_named_column(other), "_uv_t0")]).from_(
        exp.Table(this=L.call("query_table", L.var("source"))))
    value = param_checks(measure, checked_numeric(s.col("_uv_v0"), fn, "value column"))
    is_null = exp.Is(this=L.var(name), expression=exp.Null())
    if name == "weight":
        wd = checked_numeric(s.col("_uv_t0"), fn, "weight column")
        checked = s.case(s.lt(wd, s.lit(0.0)), s.raise_error(
            f"uneven: negative weight in the weight argument of {fn}()"), wd.copy())
        trailing = s.case(is_null, s.lit(1.0), checked)
    else:
        varchar = exp.DataType.build("varchar")
        own = exp.cast(s.window(exp.RowNumber(), []), varchar)
        trailing = s.case(is_null, own, exp.cast(s.col("_uv_t0"), varchar))
    return exp.Select(expressions=[s.col(KEY), s.alias(value, X), s.alias(trailing, T)]).from_(
        exp.Subquery(this=picked, alias=exp.TableAlias(this=exp.to_identifier("_uv_picked"))))


def table_form(measure: Measure) -> tuple[str, exp.Create]:
    """(name, CREATE MACRO name(source, value, params…, weight|entity, keys) AS TABLE …)."""
    fn = f"{measure.name}_by"
    # exp.Var: a bare name (the macro argument) the compiler does not take for a column of the query
    params = [s.cast_double(exp.Var(this=p.name)) for p in measure.params]
    bound = measure.error_bound
    runtime = dataclasses.replace(
        measure, build=lambda ctx, _: explore_build(lambda p: measure.build(ctx, p), params),
        error_bound=None if bound is None else
        lambda ctx, _, value: explore_build(lambda p: bound(ctx, p, value), params))
    node = exp.Anonymous(this=measure.name, expressions=[s.col(X), s.col(T)])
    rows = exp.Subquery(this=_rows(measure, fn), alias=exp.TableAlias(this=exp.to_identifier("_uv_rows")))
    select = exp.Select(expressions=[s.col(KEY), s.alias(node, RESULT)]).from_(rows).group_by(s.col(KEY))
    call = MeasureCall(node=node, measure=runtime, x=s.col(X), params=(), trailing=s.col(T))
    plan = rewrite_scope(select, [call], CompileContext())
    body = exp.Select(expressions=[exp.Unnest(expressions=[s.col(KEY)]), s.alias(s.col(RESULT), measure.name)]
                      ).from_(exp.Subquery(this=plan, alias=exp.TableAlias(this=exp.to_identifier("_uv_plan"))))
    assert measure.trailing is not None  # as in _rows
    args = ["source", "value", *(p.name for p in measure.params), measure.trailing, "keys"]
    return fn, L.table_macro(fn, args, body)
