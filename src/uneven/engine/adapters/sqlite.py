"""SQLite through Python's sqlite3: the functions compiled SQL needs are installed on first use
(``install_sqlite_functions``, idempotent); the message of ``uneven_raise`` is read back."""

from __future__ import annotations

import json
import sqlite3

import numpy as np
import pandas as pd
from sqlglot import exp

from uneven.engine.adapters.base import NUMERIC, TEXT, Adapter, drop_table, plain_cell, quoted_table
from uneven.engine.columns import probe_select
from uneven.engine.sqlite import install_sqlite_functions, raised_message
from uneven.sqltree import build as s

_TYPES = {"f": "REAL", "i": "INTEGER", "u": "INTEGER", "b": "INTEGER"}


class SQLiteError(Exception):
    """An error SQLite raised, with the message of ``uneven_raise`` where that was the cause."""


class SQLiteAdapter(Adapter):
    label = "SQLite"
    dialect = "sqlite"

    def __init__(self, con, owned: bool = False):
        super().__init__(con, owned)
        install_sqlite_functions(con)  # registering again replaces the same functions: idempotent

    def errors(self):
        return (SQLiteError,)

    def fetch(self, sql: str):
        raised_message(self.con)  # forget a message left by an earlier query
        try:
            cur = self.con.execute(sql)
            rows = cur.fetchall()
        except sqlite3.Error as e:
            raise SQLiteError(raised_message(self.con) or str(e)) from None
        names = [d[0] for d in cur.description] if cur.description else []
        return names, rows, [None] * len(names)

    def execute(self, sql: str):
        """As on every engine, plus: list results (``lorenz_curve``), which SQLite gives as JSON text,
        come back as arrays of dicts, as DuckDB gives them."""
        df = super().execute(sql)
        for name in df.columns[df.dtypes == object] if len(df.columns) == len(set(df.columns)) else []:  # noqa: E721 (elementwise)
            decoded = _json_lists(df[name])
            if decoded is not None:
                df[name] = decoded
        return df

    def describe(self, sql: str):
        try:
            names, _, types = self.fetch(sql)
        except SQLiteError:
            return None
        return list(zip(names, types))

    def argument_types(self, select: exp.Select, exprs: list[exp.Expression]) -> list[str] | None:
        """SQLite has no column types for expressions: one scan asks whether any row of an argument
        holds text or a blob (``typeof``), which CAST would read as 0 instead of refusing."""
        projections = [s.alias(exp.Max(this=exp.In(this=exp.Anonymous(this="typeof", expressions=[e.copy()]),
                                                   expressions=[exp.Literal.string("text"),
                                                                exp.Literal.string("blob")])),
                               f"_uv_p{i + 1}") for i, e in enumerate(exprs)]
        probe = probe_select(select, projections, limit=False)
        if probe is None:
            return None
        where = select.args.get("where")
        if where is not None:
            probe.set("where", where.copy())
        try:
            _, rows, _ = self.fetch(self.compile_probe(probe))
        except SQLiteError:
            return None
        # a comparison or a boolean connective is a truth value by its form (SQLite stores it as 0/1)
        return [_type_by_form(e) or (TEXT if flag else NUMERIC) for e, flag in zip(exprs, rows[0])]

    def register(self, name: str, frame) -> None:
        table = quoted_table(name)
        cols = [exp.ColumnDef(this=exp.to_identifier(str(c), quoted=True),
                              kind=exp.DataType.build(_TYPES.get(frame[c].dtype.kind, "TEXT"), dialect="sqlite"))
                for c in frame.columns]
        from uneven.compiler.emit import to_sql
        self.con.execute(to_sql(drop_table(table.copy()), "sqlite"))
        self.con.execute(to_sql(exp.Create(this=exp.Schema(this=table.copy(), expressions=cols), kind="TABLE",
                                           properties=exp.Properties(expressions=[exp.TemporaryProperty()])),
                                "sqlite"))
        marks = exp.Tuple(expressions=[exp.Placeholder() for _ in frame.columns])
        insert = exp.Insert(this=table.copy(), expression=exp.Values(expressions=[marks]))
        self.con.executemany(to_sql(insert, "sqlite"),
                             [[plain_cell(v) for v in row] for row in frame.itertuples(index=False)])

    def has_table(self, name: str) -> bool:
        rows = self.con.execute("SELECT 1 FROM sqlite_master WHERE name = ? UNION ALL "
                                "SELECT 1 FROM sqlite_temp_master WHERE name = ?", (name, name)).fetchall()
        return bool(rows)

    def plan(self, sql: str) -> str:
        _, rows, _ = self.fetch("EXPLAIN QUERY PLAN " + sql)
        return "\n".join(" " * (2 * _depth(rows, r)) + str(r[-1]) for r in rows)


def _json_lists(column: pd.Series) -> list | None:
    """The column's values as arrays of dicts when every non-NULL value is JSON text of a list of
    objects (the compiled SQL's list results); else None (the column is left alone)."""
    out: list[np.ndarray | None] = []
    for v in column:
        if v is None:
            out.append(None)
            continue
        if not (isinstance(v, str) and v.startswith("[{")):
            return None
        try:
            items = json.loads(v)
        except ValueError:
            return None
        if not all(isinstance(i, dict) for i in items):
            return None
        out.append(np.array([{k: float(x) if isinstance(x, int) else x for k, x in i.items()} for i in items],
                            dtype=object))
    return out if any(v is not None for v in out) else None


def _depth(rows, row) -> int:
    parents = {r[0]: r[1] for r in rows}
    depth, parent = 0, row[1]
    while parent in parents and depth < 50:
        depth, parent = depth + 1, parents[parent]
    return depth


def _type_by_form(e: exp.Expression) -> str | None:
    """An argument's type as its form states it, which SQLite's values do not keep: a comparison, IN,
    BETWEEN, LIKE, IS, NOT, AND/OR or TRUE/FALSE is BOOLEAN (stored as 0/1); a CAST names its type
    (``CAST('2024-01-02' AS DATE)`` is the number 2024 in SQLite). None: the probe's answer stands."""
    from uneven.compiler.types import is_numeric_type
    while isinstance(e, exp.Paren):
        e = e.this
    if isinstance(e, (exp.Predicate, exp.Connector, exp.Not, exp.Boolean)):
        return "BOOLEAN"
    if isinstance(e, exp.Cast):
        name = e.to.sql("duckdb").upper()
        return None if is_numeric_type(name) else name
    return None
