"""The Python builder: ``uneven.from_(source).filter(...).group_by(...).agg(name=measure, ...)``.

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

from uneven import catalog
from uneven.builder.measures import MeasureCall, column
from uneven.compiler import compile_sql
from uneven.compiler.bounded import check_method
from uneven.compiler.context import CompileOptions
from uneven.compiler.emit import to_sql
from uneven.compiler.pipeline import compile_with_context
from uneven.engine.adapters import adapt, is_duckdb
from uneven.engine.bounded import bounded_resolution, pick_resolution, run_bounded
from uneven.engine.runner import connect, translate_error
from uneven.engine.stream import execute_planned
from uneven.errors import MeasureArgumentError, SqlParseError, UnevenError
from uneven.explain import Explanation, explain_on, explain_query
from uneven.sqltree import build as s

SOURCE = "_uv_source"
_READERS = {".parquet": "read_parquet", ".csv": "read_csv_auto", ".tsv": "read_csv_auto", ".json": "read_json_auto",
            ".ndjson": "read_json_auto", ".jsonl": "read_json_auto"}


class BuilderError(UnevenError):
    """The builder was given something it cannot use."""


@dataclass(frozen=True)
class Query:
    source: exp.Expression  # the FROM item
    con: duckdb.DuckDBPyConnection | None
    frame: object = None  # a DataFrame / Arrow table / relation registered as SOURCE when run
    conditions: tuple[exp.Expression, ...] = ()
    keys: tuple[exp.Expression, ...] = ()
    outputs: tuple[tuple[str, exp.Expression], ...] = field(default=())
    how: tuple = ("exact", None, None)  # (method, tolerance, resolution), set by .method()

    def method(self, name: str = "bounded", *, tolerance: float | None = None,
               resolution: float | None = None) -> Query:
        """How the measures are computed: ``"exact"`` (default) or ``"bounded"`` (each measure output
        gets ``<name>_lo`` and ``<name>_hi``, a certified interval from one pass into log-spaced bins;
        ``tolerance`` or ``resolution`` picks the bins, as in ``uneven.query``; docs/bounded.md)."""
        return replace(self, how=_how(name, tolerance, resolution))

    def filter(self, *conditions) -> Query:
        """Keep rows meeting every condition: SQL text (parsed, as the user's own SQL) or sqlglot expressions."""
        parsed: list[exp.Expression] = []
        for c in conditions:
            if isinstance(c, str):
                try:
                    parsed.append(s.node(sqlglot.parse_one(c, read="duckdb", into=exp.Condition)))
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
        """Output columns: name=measure object (``uneven.gini("x")``) or any aggregate as a sqlglot expression."""
        if not measures:
            raise BuilderError("agg(): give at least one output, e.g. agg(gini=uneven.gini('income'))")
        outs: list[tuple[str, exp.Expression]] = []
        for name, m in measures.items():
            if isinstance(m, MeasureCall):
                outs.append((name, m.to_expression()))
            elif isinstance(m, exp.Expression):
                outs.append((name, m.copy()))
            else:
                raise BuilderError(f"agg(): {name}= must be a measure such as uneven.gini('x'), got {m!r}")
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

    def _how(self, method, tolerance, resolution) -> tuple:
        """The method options of one run: the arguments given to it, else those of .method()."""
        if method is None and tolerance is None and resolution is None:
            return self.how
        return _how(method if method is not None else self.how[0], tolerance, resolution)

    def sql(self, dialect: str = "duckdb", *, pretty: bool = True, method: str | None = None,
            tolerance: float | None = None, resolution: float | None = None) -> str:
        """The compiled SQL (no measure calls left) for ``dialect``; ``method``, ``tolerance`` and
        ``resolution`` as in ``.method()``."""
        name, tol, res = self._how(method, tolerance, resolution)
        return compile_sql(to_sql(self.tree()), CompileOptions(dialect=dialect, pretty=pretty, method=name,
                                                               resolution=pick_resolution(name, tol, res)))

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

    def _run(self, method: str = "exact", resolution: float | None = None):
        compiled = compile_sql(to_sql(self.tree()), CompileOptions(pretty=False, method=method, resolution=resolution))
        con = connect(self.con)
        try:
            if isinstance(self.frame, duckdb.DuckDBPyRelation):
                self._check_types(dict(zip(self.frame.columns, map(str, self.frame.types))))
                return self.frame.query(SOURCE, compiled)
            self._register(con)
            return con.sql(compiled)
        except duckdb.Error as e:
            raise translate_error(e) from None

    def _run_streamed(self, ordered: str) -> pd.DataFrame:
        """An exact run on DuckDB as ``uneven.query`` does it: compiled with the connection's probes, an
        ordered pass may stream (engine/stream.py; docs/plans.md); with ``ordered="auto"``, a stream that
        does not fit in the memory limit runs again on the plan compile() emits (engine.stream.execute_planned)."""
        con = connect(self.con)
        try:
            self._register(con)
            return execute_planned(con, to_sql(self.tree()), CompileOptions(pretty=False, ordered=ordered))
        except duckdb.Error as e:
            raise translate_error(e) from None

    def _register(self, con: duckdb.DuckDBPyConnection) -> None:
        """Register a frame source and check the types of the measures' columns."""
        if self.frame is not None:
            con.register(SOURCE, self.frame)
        probe = con.sql(to_sql(exp.select("*").from_(self.source.copy()).limit(0)))
        self._check_types(dict(zip(probe.columns, map(str, probe.types))))

    def explain(self, *, profile: bool = False, ordered: str = "auto") -> Explanation:
        """The passes ``.df()`` runs on DuckDB, as ``uneven.explain`` gives them (which plan each ordered
        pass takes, and why); with ``profile=True`` the query runs once under DuckDB's profiler."""
        if not is_duckdb(self.con):
            adapter = adapt(self.con)
            if self.frame is not None:
                adapter.register(SOURCE, self.frame)
            try:
                return explain_on(to_sql(self.tree()), adapter, CompileOptions(ordered=ordered), profile=profile)
            finally:
                if self.frame is not None:
                    adapter.unregister(SOURCE)
        if isinstance(self.frame, duckdb.DuckDBPyRelation):  # run through the relation itself: never streamed
            compiled, ctx = compile_with_context(to_sql(self.tree()), CompileOptions(ordered=ordered))
            return Explanation(passes=ctx.chosen, sql=compiled)
        con = connect(self.con)
        try:
            self._register(con)
            return explain_query(to_sql(self.tree()), con, CompileOptions(ordered=ordered), profile=profile)
        except duckdb.Error as e:
            raise translate_error(e) from None
        finally:
            self._cleanup()

    def _run_on(self, method: str = "exact", resolution: float | None = None) -> pd.DataFrame:
        """Run on an engine other than DuckDB (the builder's ``con``: engine/adapters)."""
        adapter = adapt(self.con)
        registered = self.frame is not None
        if registered:
            adapter.register(SOURCE, self.frame)
        try:
            found = adapter.describe(adapter.compile_probe(exp.select("*").from_(self.source.copy()).limit(0)))
            if found is not None:
                self._check_types({n: t for n, t in found if t is not None})
            compiled = compile_sql(to_sql(self.tree()), CompileOptions(dialect=adapter.dialect, pretty=False,
                                                                       method=method, resolution=resolution),
                                   adapter.schema())
            return adapter.execute(compiled)
        finally:
            if registered:
                adapter.unregister(SOURCE)

    def df(self, *, method: str | None = None, tolerance: float | None = None,
           resolution: float | None = None) -> pd.DataFrame:
        """Run on DuckDB, or on the engine of ``con`` given to ``from_`` (PostgreSQL, Spark, SQLite).
        On DuckDB an exact run is planned as ``uneven.query`` plans it, so an ordered pass may take the
        stream plan (docs/plans.md; ``.explain()`` says which), except over a DuckDB relation, which
        is read through the relation itself and keeps the window plan.
        ``method="bounded"`` (or an earlier ``.method("bounded")``): intervals, as ``uneven.query``
        gives them, with the resolution and widths in ``attrs["uneven"]`` and one run with finer bins
        when a share-scale interval is wider than ``tolerance``."""
        name, tol, res = self._how(method, tolerance, resolution)
        if not is_duckdb(self.con):
            if name == "exact":
                return self._run_on()
            return run_bounded(lambda r: self._run_on(name, r), bounded_resolution(tol, res), tol,
                               to_sql(self.tree()))
        try:
            if name == "exact" and not isinstance(self.frame, duckdb.DuckDBPyRelation):
                return self._run_streamed("auto")
            if name == "exact":
                return self._run().df()
            return run_bounded(lambda r: self._run(name, r).df(), bounded_resolution(tol, res), tol,
                               to_sql(self.tree()))
        except duckdb.Error as e:
            raise translate_error(e) from None
        finally:
            self._cleanup()

    def arrow(self, *, method: str | None = None, tolerance: float | None = None, resolution: float | None = None):
        """As ``df()``, as an Arrow table."""
        name, tol, res = self._how(method, tolerance, resolution)
        if (name == "bounded" and tol is not None) or not is_duckdb(self.con):  # widths read from a DataFrame
            import pyarrow as pa
            return pa.Table.from_pandas(self.df(method=name, tolerance=tol), preserve_index=False)
        try:
            return self._run(name, pick_resolution(name, tol, res)).to_arrow_table()
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


def _how(method, tolerance, resolution) -> tuple:
    name = check_method(method)
    pick_resolution(name, tolerance, resolution)  # checks the options now, not when the query runs
    return (name, tolerance, resolution)


def _is_path(text: str) -> bool:
    return os.path.splitext(text)[1].lower() in _READERS or any(ch in text for ch in "*?[/\\")


def from_(source, con=None) -> Query:
    """Start a query: a file path or glob (Parquet, CSV, JSON), a table name on ``con``, a DuckDB
    relation, a pandas DataFrame or an Arrow table, or a Spark DataFrame. ``con`` may be any
    connection ``uneven.query`` takes (PostgreSQL, Spark, SQLite …): the query runs there, and a
    pandas frame is loaded into it as a temporary table for the run."""
    if type(source).__module__.startswith("pyspark.sql") and type(source).__name__ == "DataFrame":
        return Query(exp.to_table(SOURCE), con if con is not None else source.sparkSession, frame=source)
    if con is not None and not is_duckdb(con):
        adapt(con)  # a connection uneven cannot use is refused now, by name
        if isinstance(source, (str, os.PathLike)) and _is_path(os.fspath(source)):
            raise BuilderError(f"from_(): files are read by DuckDB; on {adapt(con).label} name a table instead")
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
        return Query(exp.to_table(SOURCE), con if con is not None else duckdb.connect(), frame=source)
    raise BuilderError(f"from_(): unsupported source {type(source).__name__}; give a file path or glob, a table "
                       "name with con=, a DuckDB relation, a pandas DataFrame or an Arrow table")
