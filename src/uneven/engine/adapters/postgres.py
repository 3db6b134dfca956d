"""PostgreSQL through psycopg 3: the caller's connection, or one opened from a URL (libpq reads
the usual PG* environment variables and a service file for what the URL leaves out)."""

from __future__ import annotations

from uneven.engine.adapters.base import NUMERIC, TEXT, Adapter, plain_cell

# PostgreSQL type names (psycopg's) → DuckDB's spelling for the compiler's type check
_TYPES = {"int2": "SMALLINT", "int4": "INTEGER", "int8": "BIGINT", "float4": "REAL", "float8": NUMERIC,
          "numeric": "DECIMAL", "bool": "BOOLEAN", "text": TEXT, "varchar": TEXT, "bpchar": TEXT,
          "date": "DATE", "timestamp": "TIMESTAMP", "timestamptz": "TIMESTAMP WITH TIME ZONE",
          "jsonb": "JSON", "json": "JSON", "unknown": TEXT}


class PostgresAdapter(Adapter):
    label = "PostgreSQL"
    dialect = "postgres"

    def __init__(self, con, owned: bool = False):
        super().__init__(con, owned)
        import psycopg
        self.psycopg = psycopg

    def errors(self):
        return (self.psycopg.Error,)

    def _type(self, oid) -> str | None:
        info = self.con.adapters.types.get(oid)
        if info is None:
            return None
        return _TYPES.get(info.name, info.name.upper())

    def fetch(self, sql: str):
        started = self.con.info.transaction_status == self.psycopg.pq.TransactionStatus.IDLE
        try:
            with self.con.cursor() as cur:
                cur.execute(sql)
                out: tuple[list[str], list[tuple], list[str | None]]
                if cur.description is None:
                    out = [], [], []
                else:
                    out = ([d.name for d in cur.description], cur.fetchall(),
                           [self._type(d.type_code) for d in cur.description])
        except self.psycopg.Error:
            if started and not self.con.autocommit:
                self.con.rollback()  # the transaction we began: leave the connection usable
            raise
        if started and not self.con.autocommit:
            self.con.commit()
        return out

    def register(self, name: str, frame) -> None:
        sql = self.psycopg.sql
        cols = sql.SQL(", ").join(sql.SQL("{} {}").format(sql.Identifier(str(c)), sql.SQL(_pg_type(frame[c].dtype)))
                                  for c in frame.columns)
        table = sql.Identifier(name)
        with self.con.cursor() as cur:
            cur.execute(sql.SQL("DROP TABLE IF EXISTS {}").format(table))
            cur.execute(sql.SQL("CREATE TEMPORARY TABLE {} ({})").format(table, cols))
            with cur.copy(sql.SQL("COPY {} FROM STDIN").format(table)) as copy:
                for row in frame.itertuples(index=False):
                    copy.write_row([plain_cell(v) for v in row])
        if not self.con.autocommit:
            self.con.commit()

    def has_table(self, name: str) -> bool:
        try:
            _, rows, _ = self.fetch(self.psycopg.sql.SQL("SELECT to_regclass({})").format(
                self.psycopg.sql.Literal(self.psycopg.sql.Identifier(name).as_string(self.con))).as_string(self.con))
        except self.psycopg.Error:
            return False
        return bool(rows and rows[0][0])

    def interrupt(self) -> None:
        self.con.cancel_safe()

    def plan(self, sql: str) -> str:
        _, rows, _ = self.fetch("EXPLAIN " + sql)
        return "\n".join(r[0] for r in rows)

    def plan_analyzed(self, sql: str) -> str:
        """EXPLAIN (ANALYZE, BUFFERS): the query runs once; times, rows and buffers per node."""
        _, rows, _ = self.fetch("EXPLAIN (ANALYZE, BUFFERS) " + sql)
        return "\n".join(r[0] for r in rows)


_PG_TYPES = {"f": "double precision", "i": "bigint", "u": "bigint", "b": "boolean"}


def _pg_type(dtype) -> str:
    return _PG_TYPES.get(getattr(dtype, "kind", "O"), "text")
