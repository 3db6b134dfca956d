"""One protocol over the engines ``query()`` runs on (base.py says what it offers).

``adapt(con)`` picks the adapter for a connection object: a DuckDB connection, a psycopg 3
connection (PostgreSQL), a ``SparkSession``, a ``sqlite3.Connection``, or a SQLAlchemy engine or
connection over PostgreSQL (psycopg 3 driver) or SQLite, whose driver connection is used.
``open_url(url)`` opens a connection from a URL (url.py lists the spellings).
"""

from __future__ import annotations

import sqlite3

from uneven.engine.adapters.base import Adapter
from uneven.errors import EngineUnavailableError

_KNOWN = ("a DuckDB connection, a psycopg 3 connection (PostgreSQL), a SparkSession, a sqlite3.Connection, "
          "or a SQLAlchemy engine or connection over PostgreSQL (psycopg) or SQLite")


def _module(obj) -> str:
    return type(obj).__module__.split(".")[0]


def is_duckdb(con) -> bool:
    return con is None or _module(con) in ("duckdb", "_duckdb")


def adapt(con, owned: bool = False) -> Adapter:
    """The adapter of a connection object (see the module docstring); anything else is refused by name."""
    if isinstance(con, Adapter):
        return con
    if is_duckdb(con):
        import duckdb

        from uneven.engine.adapters.duckdb import DuckDBAdapter
        return DuckDBAdapter(con if con is not None else duckdb.connect(), owned=owned or con is None)
    module = _module(con)
    if module == "psycopg":
        from uneven.engine.adapters.postgres import PostgresAdapter
        return PostgresAdapter(con, owned)
    if module == "pyspark" and type(con).__name__ == "SparkSession":
        from uneven.engine.adapters.spark import SparkAdapter
        return SparkAdapter(con, owned)
    if isinstance(con, sqlite3.Connection):
        from uneven.engine.adapters.sqlite import SQLiteAdapter
        return SQLiteAdapter(con, owned)
    if module == "sqlalchemy":
        return _from_sqlalchemy(con)
    if module == "psycopg2":
        raise EngineUnavailableError("a psycopg2 connection is not supported: connect with psycopg 3 "
                                     "(pip install 'psycopg[binary]'), e.g. psycopg.connect('dbname=…')")
    raise EngineUnavailableError(f"con= must be {_KNOWN}; got {type(con).__module__}.{type(con).__name__}")


def _from_sqlalchemy(con) -> Adapter:
    """A SQLAlchemy Engine or Connection: its DBAPI driver connection, returned to the pool by close()."""
    raw = con.raw_connection() if hasattr(con, "raw_connection") else con.connection
    driver = raw.driver_connection
    name = con.dialect.name
    if name not in ("postgresql", "sqlite") or _module(driver) not in ("psycopg", "sqlite3"):
        raise EngineUnavailableError(f"a SQLAlchemy connection to {name} through {_module(driver)} is not supported: "
                                     "use postgresql+psycopg://… (psycopg 3) or sqlite:///…")
    adapter = adapt(driver)
    if hasattr(con, "raw_connection"):  # we checked a connection out of the engine's pool: give it back
        adapter.close = raw.close  # type: ignore[method-assign]  # close() gives the pooled connection back
    return adapter


def open_url(url: str) -> Adapter:
    from uneven.engine.adapters.url import open_url as _open
    return _open(url)
