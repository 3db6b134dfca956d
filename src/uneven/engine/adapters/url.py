"""Connections from a URL (the command line's ``--engine``):

- ``duckdb:///path/to/file.duckdb`` (an existing file; ``duckdb://`` or ``duckdb:///:memory:`` is
  in memory, the default),
- ``postgresql://user@host:port/dbname`` (also ``postgres://``): libpq's own URL, so what it leaves
  out comes from the PG* environment variables (PGHOST, PGUSER, PGPASSWORD …), ``~/.pgpass`` or a
  service file (``postgresql:///?service=name``); uneven never takes a password on the command line,
- ``sqlite:///relative/path.db`` or ``sqlite:////absolute/path.db`` (an existing file),
- ``spark:local[N]`` (``spark:local[*]``) for a Spark session in this process, or
  ``spark://host:port`` for a standalone cluster's master.
"""

from __future__ import annotations

from pathlib import Path

from uneven.engine.adapters.base import Adapter
from uneven.errors import EngineUnavailableError

SPELLINGS = ("duckdb:///FILE.duckdb", "postgresql://[USER@]HOST[:PORT]/DBNAME", "sqlite:///FILE.db",
             "spark:local[N]", "spark://HOST:PORT")


def _missing(engine: str, module: str, extra: str) -> EngineUnavailableError:
    return EngineUnavailableError(f"{engine} needs the Python package {module}, which is not installed: "
                                  f"pip install 'uneven[{extra}]'")


def _first_line(e: Exception) -> str:
    text = str(e).strip()
    return text.splitlines()[0] if text else type(e).__name__


def open_url(url: str) -> Adapter:
    from uneven.engine.adapters import adapt
    scheme = url.split(":", 1)[0].lower() if ":" in url else ""
    if scheme == "duckdb":
        return adapt(_duckdb(url), owned=True)
    if scheme in ("postgresql", "postgres"):
        try:
            import psycopg
        except ImportError:
            raise _missing("PostgreSQL", "psycopg", "postgres") from None
        try:
            con = psycopg.connect(url, autocommit=True)
        except psycopg.Error as e:
            raise EngineUnavailableError(f"cannot connect to PostgreSQL: {_first_line(e)}") from None
        return adapt(con, owned=True)
    if scheme == "sqlite":
        import sqlite3
        path = _path(url, "sqlite")
        if not Path(path).exists():
            raise EngineUnavailableError(f"no SQLite database file {path} (uneven opens existing files only)")
        try:
            # the command line runs queries in a worker thread (progress, Ctrl-C): one thread at a time
            lite = sqlite3.connect(f"file:{path}?mode=rw", uri=True, check_same_thread=False)
        except sqlite3.Error as e:
            raise EngineUnavailableError(f"cannot open the SQLite database {path}: {_first_line(e)}") from None
        return adapt(lite, owned=True)
    if scheme == "spark":
        session, started = _spark(url)
        return adapt(session, owned=started)
    raise EngineUnavailableError(f"unknown engine URL {url!r}; the spellings are: {', '.join(SPELLINGS)}")


def _path(url: str, scheme: str) -> str:
    rest = url[len(scheme) + 1:]
    if not rest.startswith("//"):
        raise EngineUnavailableError(f"write the {scheme} URL as {scheme}:///relative/path or "
                                     f"{scheme}:////absolute/path, got {url!r}")
    rest = rest[2:]
    if rest and not rest.startswith("/"):
        raise EngineUnavailableError(f"a {scheme} URL names a file, not a host: {scheme}:///{rest}, got {url!r}")
    return rest[1:]


def _duckdb(url: str):
    import duckdb
    path = _path(url, "duckdb") if url.lower() not in ("duckdb:", "duckdb://") else ""
    if path in ("", ":memory:"):
        return duckdb.connect()
    if not Path(path).exists():
        raise EngineUnavailableError(f"no DuckDB database file {path} (uneven opens existing files only)")
    try:
        return duckdb.connect(path)
    except duckdb.Error as e:
        raise EngineUnavailableError(f"cannot open the DuckDB database {path}: {_first_line(e)}") from None


def _spark(url: str):
    master = url[len("spark:"):] if url.lower().startswith("spark:local") else url
    if not (master.startswith("local") or url.startswith("spark://")):
        raise EngineUnavailableError(f"write a Spark URL as spark:local[N] or spark://HOST:PORT, got {url!r}")
    try:
        from pyspark.sql import SparkSession
    except ImportError:
        raise _missing("Spark", "pyspark", "spark") from None
    active = SparkSession.getActiveSession()
    if active is not None:  # a session this process already runs is used, and left running
        return active, False
    try:
        session = (SparkSession.builder.master(master).appName("uneven")
                   .config("spark.ui.showConsoleProgress", "false").getOrCreate())
    except Exception as e:  # noqa: BLE001  Java missing, master unreachable …
        raise EngineUnavailableError(f"cannot start a Spark session on {master}: {_first_line(e)}") from None
    session.sparkContext.setLogLevel("ERROR")
    return session, True
