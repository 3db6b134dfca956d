"""The base of the table functions: the arguments every table shares and the session it runs in.

A table function (``decompose``, ``gini_sources``, ``compare``, ``influence``, ``lorenz_dominance``)
takes a relation (a table name, a quoted file path such as ``'survey/*.parquet'``, a table function
or a parenthesised query with an alias) and column expressions, builds its query as a sqlglot tree
from the catalog's measures and returns a pandas DataFrame, one block of rows per group of ``by``.

``parse_expression`` and ``parse_relation`` read the arguments; ``Spec`` holds the parsed relation,
group keys and weight and builds the SELECT; ``session`` opens the connection (with the caller's data
frames registered) and yields ``run(select) -> DataFrame``, which compiles the SELECT for the engine
of ``con`` (DuckDB, or PostgreSQL, Spark and SQLite through engine/adapters) and runs it there;
``group_labels`` names the ``by`` columns.
"""

from __future__ import annotations

import contextlib
from collections.abc import Callable, Sequence

import pandas as pd
import sqlglot
from sqlglot import exp

from uneven.compiler import compile_sql
from uneven.compiler.context import CompileOptions
from uneven.compiler.emit import to_sql
from uneven.engine.adapters import Adapter
from uneven.engine.columns import DuckDBSchema
from uneven.engine.runner import execute_df
from uneven.engine.session import session as engine_session
from uneven.errors import MeasureArgumentError, SqlParseError
from uneven.sqltree import build as s


def parse_expression(text: str, what: str, function: str) -> exp.Expression:
    if not isinstance(text, str) or not text.strip():
        raise MeasureArgumentError(f"{function}: {what} must be a column name or SQL expression, got {text!r}")
    try:
        return sqlglot.parse_one(text, read="duckdb")  # type: ignore[return-value]  # parse_one is annotated Expr
    except sqlglot.errors.ParseError as e:
        raise SqlParseError(f"{function}: cannot read the {what} {text!r}: {str(e).splitlines()[0]}") from None


def parse_relation(text: str, function: str) -> exp.From:
    try:
        return exp.select("*").from_(text, dialect="duckdb").args["from_"]
    except (sqlglot.errors.ParseError, TypeError, ValueError):
        if isinstance(text, str) and text.strip() and not any(c.isspace() for c in text):
            # a bare file path (/data/survey.parquet): a quoted name, which DuckDB reads as the file
            return exp.From(this=exp.Table(this=exp.to_identifier(text, quoted=True)))
        raise SqlParseError(f"{function}: cannot read the relation {text!r} (a table name, a quoted file "
                            "path, a table function or a parenthesised query with an alias)") from None


class Spec:
    """The parsed arguments every table shares: relation, group keys, weight."""

    def __init__(self, function: str, relation: str, by, weight: str | None):
        self.function = function
        self.source = parse_relation(relation, function)
        keys = [by] if isinstance(by, str) else list(by or ())
        self.by = [parse_expression(b, "group key", function) for b in keys]
        self.weight = parse_expression(weight, "weight", function) if weight is not None else None

    def names(self) -> list[str]:
        return [f"_uv_by{i + 1}" for i in range(len(self.by))]

    def select(self, items: Sequence[exp.Expression], present: Sequence[exp.Expression],
               extra_keys: Sequence[exp.Expression] = ()) -> exp.Select:
        """SELECT by…, items FROM relation WHERE every expression in ``present`` (and the weight) is
        not NULL GROUP BY by…, extra_keys."""
        keys = [s.alias(b.copy(), n) for b, n in zip(self.by, self.names())]
        sel = exp.Select(expressions=keys + list(items))
        sel.set("from_", self.source.copy())
        checked = list(present) + ([self.weight] if self.weight is not None else [])
        cond = s.and_(*[s.not_null(p.copy()) for p in checked])
        if cond is not None:
            sel.set("where", exp.Where(this=cond))
        group = [b.copy() for b in self.by] + [k.copy() for k in extra_keys]
        if group:
            sel.set("group", exp.Group(expressions=group))
        return sel

    def measure(self, name: str, *args: exp.Expression) -> exp.Expression:
        tail = [self.weight.copy()] if self.weight is not None else []
        return exp.Anonymous(this=name, expressions=[a.copy() for a in args] + tail)

    def wsum(self, value: exp.Expression | None = None) -> exp.Expression:
        w = s.cast_double(self.weight.copy()) if self.weight is not None else s.lit(1.0)
        return s.agg_sum(w if value is None else s.mul(w, s.cast_double(value.copy())))

    def rename(self, df: pd.DataFrame, by_names) -> pd.DataFrame:
        labels = by_names or [b.sql("duckdb") for b in self.by]
        return df.rename(columns=dict(zip(self.names(), labels)))


@contextlib.contextmanager
def session(spec: Spec, con, frame):
    """A connection for one table's queries (``con`` or a new in-memory one) that also sees the data
    frames the caller holds under the relation's name; yields ``run(select) -> DataFrame``."""
    probe = exp.Select(expressions=[exp.Star()])
    probe.set("from_", spec.source.copy())
    with engine_session(con, to_sql(probe), frame) as connection:
        if isinstance(connection, Adapter):
            adapter = connection

            def run_there(sel: exp.Select) -> pd.DataFrame:  # PostgreSQL, Spark, SQLite: compiled for its dialect
                options = CompileOptions(pretty=False, dialect=adapter.dialect)
                return adapter.execute(compile_sql(to_sql(sel), options, adapter.schema()))

            yield Runner(run_there, adapter.dialect, adapter.label)
            return

        def run(sel: exp.Select) -> pd.DataFrame:
            compiled = compile_sql(to_sql(sel), CompileOptions(pretty=False),
                                   DuckDBSchema(connection, types=False, ties=False))
            return execute_df(connection, compiled)

        yield Runner(run, "duckdb", "DuckDB")


class Runner:
    """``run(select) -> DataFrame`` on the session's engine; ``dialect`` and ``label`` name the engine."""

    def __init__(self, fn: Callable[[exp.Select], pd.DataFrame], dialect: str, label: str):
        self.fn, self.dialect, self.label = fn, dialect, label

    def __call__(self, sel: exp.Select) -> pd.DataFrame:
        return self.fn(sel)


def group_labels(by) -> list[str]:
    return [by] if isinstance(by, str) else list(by or ())
