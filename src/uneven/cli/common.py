"""Pieces every uneven subcommand shares: reading SQL arguments, engine options, the connection."""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

from uneven.engine.output import FORMATS, format_text, write_result
from uneven.errors import UnevenError


def read_sql(text: str) -> str:
    if text == "-":
        return sys.stdin.read()
    if text.startswith("@"):
        path = Path(text[1:])
        try:
            return path.read_text()
        except OSError as e:
            raise UnevenError(f"cannot read the SQL file {path}: {e.strerror}") from None
    return text


def add_engine_options(p: argparse.ArgumentParser) -> None:
    p.add_argument("--memory-limit", metavar="SIZE", help="DuckDB memory limit, e.g. 1GB (larger data spills to disk)")
    p.add_argument("--threads", type=int, metavar="N", help="DuckDB worker threads")
    p.add_argument("--temp-directory", metavar="DIR", help="where DuckDB spills when over the memory limit")
    p.add_argument("--database", metavar="FILE", help="a DuckDB database file to query (default: in memory)")


ENGINE_HELP = ("where the query runs: duckdb:///FILE.duckdb (the default's long form: DuckDB, in memory "
               "unless a file), postgresql://[USER@]HOST[:PORT]/DBNAME (credentials from the URL, the PG* "
               "environment variables, ~/.pgpass or a service file: postgresql:///?service=NAME), "
               "sqlite:///RELATIVE.db or sqlite:////ABSOLUTE.db, spark:local[N] (a Spark session in this "
               "process) or spark://HOST:PORT (a Spark cluster's master); tables are the engine's own")


def add_engine_url_option(p: argparse.ArgumentParser) -> None:
    p.add_argument("--engine", metavar="URL", help=ENGINE_HELP)


def connection(args):
    """The connection a command runs on: ``--engine URL`` (a DuckDB connection for duckdb://, else the
    engine's adapter, engine/adapters), ``--database FILE`` (DuckDB), or None (DuckDB in memory)."""
    if getattr(args, "engine", None):
        if getattr(args, "database", None):
            raise UnevenError("give either --engine or --database (--database FILE is --engine duckdb:///FILE)")
        from uneven.engine.adapters import open_url
        adapter = open_url(args.engine)
        if adapter.dialect == "duckdb":
            return adapter.con
        given = {k: v for k, v in settings(args).items() if v is not None}
        if given:
            adapter.close()
            raise UnevenError(f"--{next(iter(given)).replace('_', '-')} is a DuckDB setting; it does not apply "
                              f"to {adapter.label}")
        return adapter
    if getattr(args, "database", None):
        import duckdb
        if not Path(args.database).exists():
            raise UnevenError(f"no database file {args.database} (uneven opens existing DuckDB files only)")
        try:
            return duckdb.connect(args.database)
        except duckdb.Error as e:
            raise UnevenError(f"cannot open the database {args.database}: {str(e).splitlines()[0]}") from None
    return None


def settings(args) -> dict:
    # a command without the DuckDB settings (e.g. brackets) has none to refuse on another engine
    return {k: getattr(args, k, None) for k in ("memory_limit", "threads", "temp_directory")}


def add_output_options(p: argparse.ArgumentParser) -> None:
    p.add_argument("--format", choices=FORMATS, default="table", help="output format (default: table)")
    p.add_argument("--output", "-o", metavar="FILE", help="write to FILE (atomically) instead of the terminal")
    p.add_argument("--force", action="store_true", help="replace FILE if it exists")


def emit_result(df, args) -> int:
    """Print a result table, or write it to --output (atomically, --force to replace)."""
    if args.output:
        write_result(df, args.output, args.format, overwrite=args.force)
        print(f"wrote {len(df)} rows to {args.output}", file=sys.stderr)
    else:
        sys.stdout.write(format_text(df, args.format))
    return 0
