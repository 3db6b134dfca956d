"""The Python builder: ``ineqsql.from_(source).filter(...).group_by(...).agg(name=measure, ...)``.

The builder writes a SELECT as a sqlglot tree (column names are quoted identifiers, never spliced
text) and hands it to the compiler, so its numbers are those of the SQL front-end.
"""

from __future__ import annotations

import glob
import os
from dataclasses import dataclass, field, replace

import duckdb
import pandas as pd
import sqlglot
from sqlglot import exp

from ineqsql import catalog
from ineqsql.builder.measures import MeasureCall, column
from ineqsql.compiler import compile_sql
from ineqsql.engine.runner import connect, translate_error
from ineqsql.errors import IneqsqlError, MeasureArgumentError, SqlParseError

SOURCE = "_iq_source"
_READERS = {".parquet": "read_parquet", ".csv": "read_csv_auto", ".tsv": "read_csv_auto", ".json": "read_json_auto",
            ".ndjson": "read_json_auto", ".jsonl": "read_json_auto"}


class BuilderError(IneqsqlError):
    """The builder was given something it cannot use."""


@dataclass(frozen=True)
class Query:
    source: exp.Expression  # the FROM item
    con: duckdb.DuckDBPyConnection | None
    frame: object = None  # a DataFrame / Arrow table / relation registered as SOURCE when run
    conditions: tuple[exp.Expression, ...] = ()
    keys: tuple[exp.Expression, ...] = ()
    outputs: tuple[tuple[str, exp.Expression], ...] = field(default=())

    def filter(self, *conditions) -> Query:
        """Keep rows meeting every condition: SQL text (parsed, as the user's own SQL) or sqlglot expressions."""
        parsed = []
        for c in conditions:
            if isinstance(c, str):
                try:
                    parsed.append(sqlglot.parse_one(c, read="duckdb", into=exp.Condition))
                except sqlglot.errors.SqlglotError as e:
                    raise SqlParseError(f"filter(): could not parse the condition {c!r}: "
                                        f"{str(e).splitlines()[0]}") from None
            elif isinstance(c, exp.Expression):
                parsed.append(c.copy())
            else:
                raise BuilderError(f"filter(): expected SQL text or a sqlglot expression, got {type(c).__name__}")
        return replace(self, conditions=self.conditions + tuple(parsed))

    def group_by(self, *keys) -> Query:
        """Group by columns (names are identifiers) or sqlglot expressions."""
        return replace(self, keys=self.keys + tuple(column(k) for k in keys))

    def agg(self, **measures) -> Query:
        """Output columns: name=measure object (``ineqsql.gini("x")``) or any aggregate as a sqlglot expression."""
        if not measures:
            raise BuilderError("agg(): give at least one output, e.g. agg(gini=ineqsql.gini('income'))")
        outs = []
        for name, m in measures.items():
            if isinstance(m, MeasureCall):
                outs.append((name, m.to_expression()))
            elif isinstance(m, exp.Expression):
                outs.append((name, m.copy()))
            else:
                raise BuilderError(f"agg(): {name}= must be a measure such as ineqsql.gini('x'), got {m!r}")
        return replace(self, outputs=self.outputs + tuple(outs))

    def tree(self) -> exp.Select:
        if not self.outputs:
            raise BuilderError("nothing to compute: call .agg(name=measure, ...) first")
        select = exp.Select(expressions=[exp.alias_(k.copy(), k.output_name or f"key{i + 1}", quoted=True)
                                         for i, k in enumerate(self.keys)]
                            + [exp.alias_(e.copy(), n, quoted=True) for n, e in self.outputs])
        select = select.from_(self.source.copy())
        for c in self.conditions:
            select = select.where(c.copy())
        if self.keys:
            select = select.group_by(*[k.copy() for k in self.keys])
            select = select.order_by(*[exp.Ordered(this=k.copy(), nulls_first=False) for k in self.keys])
        return select

    def sql(self, dialect: str = "duckdb", *, pretty: bool = True) -> str:
        """The compiled SQL (no measure calls left) for ``dialect``."""
        return compile_sql(self.tree().sql("duckdb"), dialect=dialect, pretty=pretty)

    def _check_types(self, types: dict[str, str]) -> None:
        """A measure's value or weight column that holds text: an error naming function and argument."""
        for _, e in self.outputs:
            for call in [e] if isinstance(e, exp.Anonymous) else []:
                spec = catalog.lookup(call.name)
                if spec is None:
                    continue
                args = call.expressions
                named = [("value", args[0])] + ([(spec.trailing, args[-1])] if len(args) > 1 + len(spec.params) else [])
                for what, arg in named:
                    kind = types.get(arg.name) if isinstance(arg, exp.Column) else None
                    if kind is not None and what != "entity" and kind.upper() in ("VARCHAR", "BLOB", "BOOLEAN"):
                        raise MeasureArgumentError(f"{spec.name}(): the {what} column {arg.name!r} holds {kind}; "
                                                   "it must be numeric", function=spec.name)

    def _run(self):
        compiled = compile_sql(self.tree().sql("duckdb"), dialect="duckdb", pretty=False)
        con = connect(self.con)
        try:
            if isinstance(self.frame, duckdb.DuckDBPyRelation):
                self._check_types(dict(zip(self.frame.columns, map(str, self.frame.types))))
                return self.frame.query(SOURCE, compiled)
            if self.frame is not None:
                con.register(SOURCE, self.frame)
            probe = con.sql(exp.select("*").from_(self.source.copy()).limit(0).sql("duckdb"))
            self._check_types(dict(zip(probe.columns, map(str, probe.types))))
            return con.sql(compiled)
        except duckdb.Error as e:
            raise translate_error(e) from None

    def df(self) -> pd.DataFrame:
        try:
            res = self._run()
            return res.df()
        except duckdb.Error as e:
            raise translate_error(e) from None
        finally:
            self._cleanup()

    def arrow(self):
        try:
            res = self._run()
            return res.to_arrow_table()
        except duckdb.Error as e:
            raise translate_error(e) from None
        finally:
            self._cleanup()

    def _cleanup(self):
        if self.frame is not None and not isinstance(self.frame, duckdb.DuckDBPyRelation) and self.con is not None:
            try:
                self.con.unregister(SOURCE)
            except duckdb.Error:
                pass


def _is_path(text: str) -> bool:
    return os.path.splitext(text)[1].lower() in _READERS or any(ch in text for ch in "*?[/\\")


def from_(source, con: duckdb.DuckDBPyConnection | None = None) -> Query:
    """Start a query: a file path or glob (Parquet, CSV, JSON), a table name on ``con``, a DuckDB
    relation, a pandas DataFrame or an Arrow table."""
    if isinstance(source, duckdb.DuckDBPyRelation):
        return Query(exp.to_table(SOURCE), None, frame=source)
    if isinstance(source, os.PathLike):
        source = os.fspath(source)
    if isinstance(source, str):
        if _is_path(source):
            ext = os.path.splitext(source)[1].lower()
            reader = _READERS.get(ext)
            if reader is None:
                raise BuilderError(f"from_(): cannot tell the format of {source!r}; use .parquet, .csv or .json")
            if not glob.glob(source):
                raise BuilderError(f"from_(): no file matches {source!r}")
            return Query(exp.Table(this=exp.Anonymous(this=reader, expressions=[exp.Literal.string(source)])),
                         con or duckdb.connect())
        if con is None:
            raise BuilderError(f"from_(): {source!r} is not a file path; to read a table give its connection: "
                               "from_('table', con=con)")
        parts = [exp.to_identifier(p, quoted=True) for p in source.split(".")]
        table = exp.Table(this=parts[-1], db=parts[-2] if len(parts) > 1 else None,
                          catalog=parts[-3] if len(parts) > 2 else None)
        return Query(table, con)
    if type(source).__module__.split(".")[0] in ("pandas", "pyarrow", "polars"):
        return Query(exp.to_table(SOURCE), con or duckdb.connect(), frame=source)
    raise BuilderError(f"from_(): unsupported source {type(source).__name__}; give a file path or glob, a table "
                       "name with con=, a DuckDB relation, a pandas DataFrame or an Arrow table")
