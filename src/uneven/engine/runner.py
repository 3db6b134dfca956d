"""The DuckDB runner: owns connection settings and turns engine errors into ``UnevenError``s."""

from __future__ import annotations

import re

import duckdb
import pandas as pd

from uneven.errors import ExecutionError, InputDataError, UndefinedResultError, UnevenError

_SETTINGS = ("memory_limit", "threads", "temp_directory")


def connect(con: duckdb.DuckDBPyConnection | None = None, *, memory_limit: str | None = None,
            threads: int | None = None, temp_directory: str | None = None,
            progress: bool = False) -> duckdb.DuckDBPyConnection:
    """A connection (the one given, or a new in-memory one) with the requested settings applied."""
    con = con if con is not None else duckdb.connect()
    values = {"memory_limit": memory_limit, "threads": threads, "temp_directory": temp_directory}
    for name in _SETTINGS:
        value = values[name]
        if value is None:
            continue
        try:
            # settings take a constant; a prepared parameter is not accepted by SET
            con.execute(f"SET {name} = {_setting_literal(name, value)}")
        except duckdb.Error as e:
            raise ExecutionError(f"cannot set {name} to {value!r}: {_first_line(e)}") from None
    con.execute(f"SET enable_progress_bar = {'true' if progress else 'false'}")
    return con


def _setting_literal(name: str, value) -> str:
    if name == "threads":
        if not isinstance(value, int) or isinstance(value, bool) or value < 1:
            raise ExecutionError(f"threads must be a whole number of at least 1, got {value!r}")
        return str(value)
    text = str(value)
    return "'" + text.replace("'", "''") + "'"


def _first_line(e: Exception) -> str:
    return str(e).strip().splitlines()[0] if str(e).strip() else type(e).__name__


def execute_df(con: duckdb.DuckDBPyConnection, sql: str) -> pd.DataFrame:
    """Run compiled SQL and fetch the whole result as a DataFrame."""
    try:
        return con.execute(sql).fetchdf()
    except duckdb.Error as e:
        raise translate_error(e) from None


# a check message inside an echo of the query: a SQL string literal, or Spark's plan of raise_error
_ECHOED = re.compile(r"(?:'|map\(errorMessage, )uneven: ")


def _unquoted(message: str) -> str:
    """A check message without the closing quote PostgreSQL's failing cast puts after it, or the
    SQLSTATE Spark appends."""
    message = re.sub(r"\s*SQLSTATE: \w+\s*$", "", message.rstrip())
    return message[:-1] if message.endswith(')"') else message


def translate_error(e: Exception, engine: str = "DuckDB") -> UnevenError:
    """An engine's error as an ``UnevenError``: the messages of the compiled SQL's own checks (error()
    calls, the same text on every engine) become InputDataError / UndefinedResultError; anything else
    is an ExecutionError naming ``engine`` (the runner is DuckDB; other engines' callers name theirs).
    A check message is read where the engine raised it, not where it echoes the query (Spark prints
    the analysed plan, string literals included, after an unrelated error such as a missing table)."""
    text = _ECHOED.sub("", str(e))
    m = re.search(r"uneven: (negative weight in .*?)(?:\n|$)", text)
    if m:
        return InputDataError(f"{_unquoted(m.group(1))} (weights must be ≥ 0; "
                              "rows with weight 0 change nothing and are skipped)")
    m = re.search(r"uneven: (NaN or infinite (?:value|weight) in .*?)(?:\n|$)", text)
    if m:
        return InputDataError(f"{_unquoted(m.group(1))} (values and weights must be finite numbers; NULLs are "
                              "skipped: filter the rows, e.g. WHERE isfinite(x), or turn them into NULL)")
    m = re.search(r"uneven: (.*? is undefined \(NULL\) for .*?)(?:\n|$)", text)
    if m:
        return UndefinedResultError(f"{_unquoted(m.group(1))} (strict mode: an empty group, a total ≤ 0 or "
                                    "values outside the measure's domain; see `uneven measures`)")
    if "value out of range: overflow" in text:  # PostgreSQL: double arithmetic past ±1.8e308 raises
        return ExecutionError(f"{engine} could not run the query: {_first_line(e)} (a sum or product of the "
                              "values exceeds the double range, about 1.8e308; this engine raises where others "
                              "give infinity, which uneven turns into NULL: rescale the values, e.g. x / 1e6)")
    if "Out of Memory" in text and engine == "DuckDB":
        return ExecutionError(f"DuckDB could not run the query: {_first_line(e)} (raise the memory limit, "
                              "e.g. --memory-limit 1GB; sorts and windows spill to the temp directory, but "
                              "one very large group needs room for its window)")
    return ExecutionError(f"{engine} could not run the query: {_first_line(e)}")
