"""The backend test matrix: every engine the suite runs compiled SQL on.

Each engine loads a pandas DataFrame as a table and runs a query compiled for its dialect,
returning a DataFrame (list results as Python lists of dicts; SQLite's JSON text is left as text
for the tests to decode). DuckDB is always present; PostgreSQL (a throwaway server, see
pg_server.py), Spark (pyspark in local mode, tables read from Parquet) and SQLite (Python's
sqlite3) start once per test run and are skipped with a reason where absent; with
UNEVEN_REQUIRE_ENGINES=1, as in CI, an absent engine fails instead.
"""

from __future__ import annotations

import atexit
import math
import os
import shutil
import sqlite3
import tempfile
from pathlib import Path

import duckdb
import numpy as np
import pandas as pd
import pytest

import uneven


def quoted(name) -> str:
    """A double-quoted SQL identifier (embedded quotes doubled): any column or table name works."""
    return '"' + str(name).replace('"', '""') + '"'


class EngineError(Exception):
    """A query failed on the engine; ``str`` is the engine's message."""


class DuckDBEngine:
    name = "duckdb"
    label = "DuckDB"  # the engine's name in error messages
    dialect = "duckdb"

    def __init__(self):
        self.con = duckdb.connect()

    def load(self, df: pd.DataFrame, table: str = "t") -> None:
        self.con.register("_uv_test_df", df)
        self.con.execute(f"CREATE OR REPLACE TABLE {quoted(table)} AS SELECT * FROM _uv_test_df")
        self.con.unregister("_uv_test_df")

    def execute(self, compiled: str) -> pd.DataFrame:
        # rows as Python values (object columns), as the other engines give them: a DOUBLE NULL is
        # None and a NaN is nan (fetchdf would turn both into nan, hiding a NaN result)
        try:
            cur = self.con.execute(compiled)
            names = [d[0] for d in cur.description]
            return pd.DataFrame(cur.fetchall(), columns=names, dtype=object)
        except duckdb.Error as e:
            raise EngineError(str(e)) from None

    def run(self, sql: str, **options) -> pd.DataFrame:
        return self.execute(uneven.compile(sql, dialect=self.dialect, **options))

    def close(self):
        self.con.close()


# --- PostgreSQL ------------------------------------------------------------------------------

_PG_TYPES = {"f": "double precision", "i": "bigint", "u": "bigint", "b": "boolean"}


def _pg_type(dtype) -> str:
    return _PG_TYPES.get(getattr(dtype, "kind", "O"), "text")


def _plain(value):
    """A DataFrame cell as a plain Python value (NULL for NA / NaN in a nullable column)."""
    if value is None or value is pd.NA or (isinstance(value, float) and value != value):
        return None
    return value.item() if hasattr(value, "item") else value


class PostgresEngine(DuckDBEngine):
    name = "postgres"
    label = "PostgreSQL"
    dialect = "postgres"
    server = None

    def __init__(self):
        import psycopg  # noqa: F401 (absent: the engine is skipped)
        if PostgresEngine.server is None:
            from pg_server import PostgresServer
            PostgresEngine.server = PostgresServer()
            atexit.register(PostgresEngine.server.stop)
        self.psycopg = psycopg
        self.con = psycopg.connect(PostgresEngine.server.dsn, autocommit=True)

    def load(self, df: pd.DataFrame, table: str = "t") -> None:
        # identifiers composed by psycopg (any column name: quotes, spaces, reserved words)
        sql = self.psycopg.sql
        name = sql.Identifier(table)
        cols = sql.SQL(", ").join(sql.SQL("{} {}").format(sql.Identifier(str(c)), sql.SQL(_pg_type(df[c].dtype)))
                                  for c in df.columns)
        with self.con.cursor() as cur:
            cur.execute(sql.SQL("DROP TABLE IF EXISTS {}").format(name))
            cur.execute(sql.SQL("CREATE TABLE {} ({})").format(name, cols))
            with cur.copy(sql.SQL("COPY {} FROM STDIN").format(name)) as copy:
                for row in df.itertuples(index=False):
                    copy.write_row([_plain(v) for v in row])
            cur.execute(sql.SQL("ANALYZE {}").format(name))

    def execute(self, compiled: str) -> pd.DataFrame:
        try:
            with self.con.cursor() as cur:
                cur.execute(compiled)
                names = [d.name for d in cur.description]
                return pd.DataFrame(cur.fetchall(), columns=names, dtype=object)
        except self.psycopg.Error as e:
            raise EngineError(str(e)) from None

    def close(self):
        self.con.close()


# --- Spark -----------------------------------------------------------------------------------

def _to_python(value):
    """Spark Rows (structs) and lists of them as dicts and lists."""
    if hasattr(value, "asDict"):
        return {k: _to_python(v) for k, v in value.asDict().items()}
    if isinstance(value, list):
        return [_to_python(v) for v in value]
    return value


class SparkEngine(DuckDBEngine):
    name = "spark"
    label = "Spark"
    dialect = "spark"
    session = None
    folder: Path | None = None

    def __init__(self):
        if SparkEngine.session is None:
            from pyspark.sql import SparkSession
            SparkEngine.folder = Path(tempfile.mkdtemp(prefix="uneven-spark-"))
            SparkEngine.session = (
                SparkSession.builder.master("local[2]").appName("uneven-tests")
                .config("spark.sql.shuffle.partitions", "2").config("spark.default.parallelism", "2")
                .config("spark.ui.enabled", "false").config("spark.ui.showConsoleProgress", "false")
                .config("spark.driver.memory", "1g")
                .config("spark.sql.session.timeZone", "UTC").config("spark.local.dir", str(SparkEngine.folder))
                # managed tables (stored summaries) under the run's own folder, not ./spark-warehouse,
                # where a table left by an interrupted run would refuse the next CREATE
                .config("spark.sql.warehouse.dir", str(SparkEngine.folder / "warehouse"))
                .config("spark.driver.extraJavaOptions", "-XX:+UseSerialGC")
                # the tests run many large queries on a few rows: re-planning each query at run time
                # (adaptive execution: the bulk of it) and generating Java code for its stages cost more
                # than the rows (measured: the refine plan's SE test 152 s -> 68 s, the tied quantile SEs
                # 106 s -> 63 s, adaptive execution off alone 63 s); the SQL and its results are the same
                .config("spark.sql.codegen.wholeStage", "false").config("spark.sql.adaptive.enabled", "false")
                .getOrCreate())
            SparkEngine.session.sparkContext.setLogLevel("FATAL")  # the tests raise errors on purpose
            atexit.register(SparkEngine.shutdown)
        self.spark = SparkEngine.session

    @classmethod
    def shutdown(cls):
        if cls.session is not None:
            cls.session.stop()
            cls.session = None
        if cls.folder is not None:
            shutil.rmtree(cls.folder, ignore_errors=True)
            cls.folder = None

    def load(self, df: pd.DataFrame, table: str = "t") -> None:
        path = SparkEngine.folder / f"{table}.parquet"
        shutil.rmtree(path, ignore_errors=True)
        df.to_parquet(path, index=False)  # the engine reads the table from Parquet
        self.spark.read.parquet(str(path)).createOrReplaceTempView(table)

    def execute(self, compiled: str) -> pd.DataFrame:
        from pyspark.errors import PySparkException
        try:
            result = self.spark.sql(compiled)
            names = result.columns
            rows = [[_to_python(v) for v in row] for row in result.collect()]
        except (PySparkException, Exception) as e:  # py4j errors too
            raise EngineError(str(e)) from None
        return pd.DataFrame(rows, columns=names, dtype=object)

    def close(self):
        pass  # one session per test run (atexit)


# --- SQLite ----------------------------------------------------------------------------------

_SQLITE_TYPES = {"f": "REAL", "i": "INTEGER", "u": "INTEGER", "b": "INTEGER"}


class SQLiteEngine(DuckDBEngine):
    name = "sqlite"
    label = "SQLite"
    dialect = "sqlite"

    def __init__(self):
        from uneven.engine.sqlite import raised_message
        self.raised_message = raised_message
        self.con = sqlite3.connect(":memory:")
        uneven.install_sqlite_functions(self.con)

    def load(self, df: pd.DataFrame, table: str = "t") -> None:
        cols = ", ".join(f'{quoted(c)} {_SQLITE_TYPES.get(df[c].dtype.kind, "TEXT")}' for c in df.columns)
        self.con.execute(f"DROP TABLE IF EXISTS {quoted(table)}")
        self.con.execute(f"CREATE TABLE {quoted(table)} ({cols})")
        marks = ", ".join("?" for _ in df.columns)
        self.con.executemany(f"INSERT INTO {quoted(table)} VALUES ({marks})",
                             [[_plain(v) for v in row] for row in df.itertuples(index=False)])

    def execute(self, compiled: str) -> pd.DataFrame:
        self.raised_message(self.con)  # forget a message left by an earlier query
        try:
            cur = self.con.execute(compiled)
            names = [d[0] for d in cur.description]
            return pd.DataFrame(cur.fetchall(), columns=names, dtype=object)
        except sqlite3.Error as e:
            raise EngineError(self.raised_message(self.con) or str(e)) from None


# --- the same engines driven through uneven.query(sql, con=…) ------------------------------------

def _python_value(v):
    """A cell of a query() result as the matrix's engines give it: NULL (NaN/NA in a typed column, as
    DuckDB's DataFrames carry it) as None, list results as lists of dicts, numpy scalars as Python's."""
    if isinstance(v, np.ndarray):
        return [_python_value(i) for i in v]
    if isinstance(v, dict):
        return {k: _python_value(i) for k, i in v.items()}
    if v is None or v is pd.NA or (isinstance(v, float) and math.isnan(v)):
        return None
    return v.item() if isinstance(v, np.generic) else v


class ThroughQuery:
    """An engine of the matrix whose ``run`` goes through ``uneven.query(sql, con=<its connection>)``:
    the dialect comes from the connection, the compiler asks the engine for columns and types, and
    errors arrive as UnevenErrors. Results are turned back into Python values (NULL as None), so the
    matrix's checks apply unchanged; NULL and NaN are one value in a typed DataFrame (as on DuckDB),
    so the compiled-SQL matrix remains the check that no NaN is ever returned."""

    def __init__(self, inner):
        self.inner = inner
        self.name, self.label, self.dialect = inner.name, inner.label, inner.dialect

    @property
    def con(self):
        return self.inner.spark if isinstance(self.inner, SparkEngine) else self.inner.con

    def load(self, df: pd.DataFrame, table: str = "t") -> None:
        self.inner.load(df, table)

    def execute(self, compiled: str) -> pd.DataFrame:
        return self.inner.execute(compiled)

    def run(self, sql: str, **options) -> pd.DataFrame:
        df = uneven.query(sql, self.con, **options)
        rows = [[_python_value(v) for v in row] for row in df.itertuples(index=False)]
        return pd.DataFrame(rows, columns=list(df.columns), dtype=object)

    def close(self):
        self.inner.close()


ENGINES = {"duckdb": DuckDBEngine, "postgres": PostgresEngine, "spark": SparkEngine, "sqlite": SQLiteEngine}
_FAILED: dict[str, str] = {}


def require_engines() -> bool:
    return os.environ.get("UNEVEN_REQUIRE_ENGINES") == "1"


def engine_or_skip(name: str):
    if name not in _FAILED:
        try:
            return ENGINES[name]()
        except Exception as e:  # an engine absent on this machine  # noqa: BLE001
            _FAILED[name] = f"{type(e).__name__}: {str(e).strip()[:300]}"
    if require_engines():
        pytest.fail(f"engine {name} is required (UNEVEN_REQUIRE_ENGINES=1) but could not start: {_FAILED[name]}")
    pytest.skip(f"engine {name} is not available here: {_FAILED[name]}")


def shutdown_engines() -> None:
    """Stop the servers and sessions started for the run (also registered with atexit)."""
    SparkEngine.shutdown()
    if PostgresEngine.server is not None:
        PostgresEngine.server.stop()
        PostgresEngine.server = None
