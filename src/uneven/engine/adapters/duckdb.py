"""DuckDB in the same protocol (``query()`` keeps its own direct path on DuckDB; the command line's
``--engine duckdb:///file`` and ``explain``'s engine plan use this one)."""

from __future__ import annotations

import duckdb

from uneven.engine.adapters.base import Adapter


class DuckDBAdapter(Adapter):
    label = "DuckDB"
    dialect = "duckdb"

    def errors(self):
        return (duckdb.Error,)

    def fetch(self, sql: str):
        cur = self.con.execute(sql)
        if cur.description is None:
            return [], [], []
        return [d[0] for d in cur.description], cur.fetchall(), [str(d[1]) for d in cur.description]

    def execute(self, sql: str):
        from uneven.engine.runner import execute_df
        return execute_df(self.con, sql)

    def register(self, name: str, frame) -> None:
        self.con.register(name, frame)

    def unregister(self, name: str) -> None:
        self.con.unregister(name)

    def has_table(self, name: str) -> bool:
        return bool(self.con.execute("SELECT 1 FROM information_schema.tables WHERE table_name = ?", [name]).fetchall())

    def plan(self, sql: str) -> str:
        rows = self.con.execute("EXPLAIN " + sql).fetchall()
        return "\n".join(str(r[-1]) for r in rows)
