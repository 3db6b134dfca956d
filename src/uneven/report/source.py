"""Where the rows of a plot or report come from: a Parquet/CSV file or glob, a table or view of the
connection (e.g. of a DuckDB database file), or a DataFrame/Arrow table the caller holds.

Every source becomes a sqlglot FROM expression (a quoted table name or ``read_parquet('…')``), and
every column a user names is checked against the source's columns before any measure query runs,
so a typo gets a clear message instead of an engine error.
"""

from __future__ import annotations

import glob
from dataclasses import dataclass, field
from typing import TYPE_CHECKING

import duckdb
from sqlglot import exp

from uneven.engine.runner import translate_error
from uneven.errors import UnevenError
from uneven.sqltree import build as s

if TYPE_CHECKING:  # annotations only: the adapters are imported where they are used
    from uneven.engine.adapters import Adapter

FRAME_NAME = "_uv_source"  # the name a caller's DataFrame is registered under
_READERS = {".parquet": "read_parquet", ".pq": "read_parquet", ".csv": "read_csv", ".tsv": "read_csv",
            ".csv.gz": "read_csv", ".tsv.gz": "read_csv", ".txt": "read_csv"}
_NUMERIC = ("TINYINT", "SMALLINT", "INTEGER", "BIGINT", "HUGEINT", "UTINYINT", "USMALLINT", "UINTEGER",
            "UBIGINT", "UHUGEINT", "FLOAT", "DOUBLE", "DECIMAL", "REAL")


class SourceError(UnevenError):
    """The source or a column named on it cannot be used."""


@dataclass
class Source:
    """A resolved source: its FROM expression, a label for titles and its columns (name → type)."""
    from_: exp.Expression
    label: str
    columns: dict[str, str] = field(default_factory=dict)

    def column(self, name: str, option: str, numeric: bool = False) -> exp.Column:
        """The quoted column ``name`` (matched case-insensitively, as DuckDB does), checked to exist."""
        match = {c.lower(): c for c in self.columns}.get(name.lower())
        if match is None:
            raise SourceError(f"{option} {name}: no such column in {self.label}; its columns are: "
                              + ", ".join(self.columns))
        kind = self.columns[match]
        if numeric and not kind.upper().startswith(_NUMERIC):
            raise SourceError(f"{option} {name}: the column is {kind}, a numeric column is needed")
        return exp.column(match, quoted=True)

    def name_of(self, name: str) -> str:
        return {c.lower(): c for c in self.columns}[name.lower()]


def _reader(path: str) -> str | None:
    lower = path.lower()
    for ext in sorted(_READERS, key=len, reverse=True):
        if lower.endswith(ext):
            return _READERS[ext]
    return None


def _looks_like_file(text: str) -> bool:
    return any(ch in text for ch in "/\\*?[") or "://" in text or _reader(text) is not None


def _table_expression(con: duckdb.DuckDBPyConnection, name: str) -> exp.Table:
    parts = name.split(".")
    if len(parts) > 3 or not all(parts):
        raise SourceError(f"{name!r} is not a table name (expected TABLE, SCHEMA.TABLE or DATABASE.SCHEMA.TABLE)")
    known = con.execute("SELECT table_catalog, table_schema, table_name FROM information_schema.tables").fetchall()
    lowered = [tuple(p.lower() for p in parts)]
    if not any(tuple(v.lower() for v in row[3 - len(parts):]) == lowered[0] for row in known):
        names = sorted({row[2] if row[1] == "main" else f"{row[1]}.{row[2]}" for row in known})
        listing = ", ".join(names[:20]) + (" …" if len(names) > 20 else "") if names else "none"
        raise SourceError(f"no table or view {name} in the database (its tables: {listing}); a file source "
                          "needs a .parquet or .csv name or a glob such as 'data/*.parquet'")
    table, db, catalog = (list(reversed(parts)) + [None, None])[:3]
    return exp.table_(table, db=db, catalog=catalog, quoted=True)


def resolve_source(con: duckdb.DuckDBPyConnection | Adapter, source) -> Source:
    """A ``Source`` for ``source``: a DataFrame/Arrow table, a file path or glob, or a table name."""
    from uneven.engine.adapters import Adapter as EngineAdapter
    if isinstance(con, EngineAdapter):
        return _resolve_on(con, source)
    if not isinstance(source, str):
        try:
            con.register(FRAME_NAME, source)
        except (duckdb.Error, TypeError, ValueError) as e:
            raise SourceError(f"cannot read the data given ({type(source).__name__}): "
                              f"{str(e).splitlines()[0] if str(e) else e}") from None
        src = Source(exp.table_(FRAME_NAME, quoted=True), f"the {type(source).__name__} given")
    elif not source.strip():
        raise SourceError("the source is empty: give a Parquet/CSV file or glob, or a table name")
    elif _looks_like_file(source):
        reader = _reader(source.rstrip("/"))
        if reader is None:
            raise SourceError(f"{source}: unknown file type (use .parquet or .csv files, e.g. 'data/*.parquet')")
        if "://" not in source and not glob.glob(source, recursive=True):
            raise SourceError(f"no file matches {source}")
        src = Source(s.node(exp.func(reader, exp.Literal.string(source))), source)
    else:
        src = Source(_table_expression(con, source), f"the table {source}")
    src.columns = describe(con, src)
    return src


def _resolve_on(adapter, source) -> Source:
    """``resolve_source`` on another engine (engine/adapters): a table of that engine, or a pandas
    frame loaded there as a temporary table; files are DuckDB's to read."""
    if not isinstance(source, str):
        adapter.register(FRAME_NAME, source)
        src = Source(exp.table_(FRAME_NAME, quoted=True), f"the {type(source).__name__} given")
    elif _looks_like_file(source):
        raise SourceError(f"{source}: files are read by DuckDB; on {adapter.label} name a table of that engine")
    else:
        parts = source.split(".")
        if len(parts) > 3 or not all(parts):
            raise SourceError(f"{source!r} is not a table name (expected TABLE, SCHEMA.TABLE or DATABASE.SCHEMA.TABLE)")
        table, db, catalog = (list(reversed(parts)) + [None, None])[:3]
        src = Source(exp.table_(table, db=db, catalog=catalog, quoted=True), f"the table {source}")
    found = adapter.describe(adapter.compile_probe(exp.select(exp.Star()).from_(src.from_.copy()).limit(0)))
    if found is None:
        raise SourceError(f"no table or view {source} on {adapter.label} (or it cannot be read)")
    # SQLite declares no types for a query's columns: numeric checks are left to the compiler's probe
    src.columns = {name: kind or "DOUBLE" for name, kind in found}
    return src


def describe(con: duckdb.DuckDBPyConnection, src: Source) -> dict[str, str]:
    probe = exp.select(exp.Star()).from_(src.from_.copy()).limit(0)
    try:
        rows = con.execute(exp.Describe(this=probe).sql("duckdb")).fetchall()
    except duckdb.Error as e:
        why = translate_error(e).message.removeprefix("DuckDB could not run the query: ")
        raise SourceError(f"cannot read {src.label}: {why}") from None
    return {r[0]: r[1] for r in rows}
