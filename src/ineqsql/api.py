"""The Python entry points: ``compile``, ``query`` and the catalog listing."""

from __future__ import annotations

import inspect

import duckdb
import pandas as pd

from ineqsql.catalog import MEASURES
from ineqsql.compiler import compile_sql
from ineqsql.engine.columns import duckdb_expression_types, duckdb_source_columns
from ineqsql.engine.frames import register_caller_frames
from ineqsql.engine.runner import connect, execute_df


def compile(sql: str, dialect: str = "duckdb", *, read: str = "duckdb", pretty: bool = True,  # noqa: A001
            strict: bool = False) -> str:
    """Compile SQL with measure calls into plain SQL for ``dialect`` (no measure calls left).

    ``strict=True``: a measure that is undefined for a group (NULL) stops the query with an error
    naming the group, as ``strict := true`` does for one call.
    """
    return compile_sql(sql, dialect=dialect, read=read, pretty=pretty, strict=strict)


def query(sql: str, con: duckdb.DuckDBPyConnection | None = None, *, memory_limit: str | None = None,
          threads: int | None = None, temp_directory: str | None = None,
          progress: bool = False, strict: bool = False) -> pd.DataFrame:
    """Compile ``sql`` and run it on DuckDB (``con``, or a new in-memory connection).

    Tables the query names may also be pandas DataFrames or Arrow tables held by the calling code
    under that name, as with ``duckdb.sql``.
    """
    connection = connect(con, memory_limit=memory_limit, threads=threads, temp_directory=temp_directory,
                         progress=progress)
    registered = register_caller_frames(connection, sql, inspect.currentframe().f_back)
    try:
        compiled = compile_sql(sql, dialect="duckdb", pretty=False, strict=strict,
                               source_columns=duckdb_source_columns(connection),
                               expression_types=duckdb_expression_types(connection))
        return execute_df(connection, compiled)
    finally:
        for name in registered:
            connection.unregister(name)
        if con is None:
            connection.close()


def measures() -> list[dict]:
    """One row per catalog measure: name, signature, pass, formula, domain."""
    return [{"name": m.name, "signature": m.signature, "pass": "/".join(m.passes) if isinstance(m.passes, tuple)
             else m.passes, "formula": m.formula, "domain": m.domain} for m in MEASURES.values()]
