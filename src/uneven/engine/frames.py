"""Let ``query("SELECT gini(x) FROM df")`` read a DataFrame named ``df`` in the caller's code, as
DuckDB's own Python API does for the frame that calls it (uneven calls DuckDB one frame deeper)."""

from __future__ import annotations

import inspect
import types

import sqlglot
from sqlglot import exp

_FRAME_TYPES = ("DataFrame", "Table", "RecordBatchReader", "DuckDBPyRelation", "Dataset")


def callers_frame() -> types.FrameType | None:
    """The frame of the code that called the function calling this one: where the data frames that
    function's SQL names are held (None where the interpreter keeps no frames)."""
    here = inspect.currentframe()
    function = here.f_back if here is not None else None
    return function.f_back if function is not None else None


def _table_names(sql: str) -> set[str]:
    try:
        tree = sqlglot.parse_one(sql, read="duckdb")
    except sqlglot.errors.SqlglotError:
        return set()
    ctes = {c.alias_or_name for c in tree.find_all(exp.CTE)}
    return {t.name for t in tree.find_all(exp.Table)
            if not t.args.get("db") and not t.args.get("catalog") and t.name and t.name not in ctes}


def _is_frame(obj) -> bool:
    return type(obj).__name__ in _FRAME_TYPES and type(obj).__module__.split(".")[0] in (
        "pandas", "pyarrow", "polars", "duckdb", "_duckdb")


def register_caller_frames(con, sql: str, frame: types.FrameType | None) -> list[str]:
    """Register data frames the SQL names and the caller holds (locals, then globals), unless the
    connection already has a table or view of that name. Returns the names registered."""
    if frame is None:
        return []
    held = {}
    for name in sorted(_table_names(sql)):
        obj = frame.f_locals.get(name, frame.f_globals.get(name))
        if obj is not None and _is_frame(obj):
            held[name] = obj
    if not held:  # (the common case: no catalog query)
        return []
    existing = {r[0] for r in con.execute(
        "SELECT table_name FROM information_schema.tables").fetchall()}
    done = []
    for name, obj in held.items():
        if name not in existing:
            con.register(name, obj)
            done.append(name)
    return done


def register_frames_on(adapter, sql: str, frame: types.FrameType | None) -> list[str]:
    """``register_caller_frames`` on another engine: pandas frames the SQL names and the caller holds
    become temporary tables there (a Spark DataFrame becomes a temporary view), unless the engine
    has a table of that name."""
    if frame is None:
        return []
    done = []
    for name in sorted(_table_names(sql)):
        obj = frame.f_locals.get(name, frame.f_globals.get(name))
        if obj is None or not (_is_frame(obj) or type(obj).__module__.startswith("pyspark.sql")):
            continue
        if type(obj).__name__ != "DataFrame" or adapter.has_table(name):
            continue
        adapter.register(name, obj)
        done.append(name)
    return done
